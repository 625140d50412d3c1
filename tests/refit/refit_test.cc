// End-to-end tests of background re-estimation and hot swap. A small driver
// plays the ingest thread: per bar, FilterStep with the model in force, then
// RefitCoordinator::OnBar (window push, apply, schedule).
#include "aftershock/refit.h"

#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstring>
#include <limits>
#include <mutex>
#include <string>
#include <thread>

#include "aftershock/model_registry.h"
#include "aftershock/simulate.h"
#include "aftershock/state_codec.h"
#include "support/alloc_counter.h"

namespace aftershock {
namespace {

ModelParams Garch(double mu, double omega, double alpha, double beta) {
  ModelSpec spec;  // constant mean, GARCH(1,1), normal
  auto p = ModelParams::FromNamed(
      spec, {{"mu", mu}, {"omega", omega}, {"alpha_1", alpha}, {"beta_1", beta}});
  REQUIRE(p.ok());
  return *p;
}

std::vector<double> Sim(const ModelParams& p, int n, uint64_t seed,
                        std::vector<VarianceRegimeChange> regimes = {}) {
  SimulationOptions o;
  o.n = n;
  o.seed = seed;
  o.regime_changes = std::move(regimes);
  auto s = Simulate(p, o);
  REQUIRE(s.ok());
  return s->returns;
}

std::unique_ptr<Refitter> DefaultRefitter() {
  auto r = EstimatorRefitter::Create();
  REQUIRE(r.ok());
  return std::move(*r);
}

// Plays the ingest thread over a panel of symbols.
// Waits until the workers hold no job; `deferred` jobs wait for their copy
// (they count in stats().queued without being the pool's). One snapshot per
// test: running and queued read from two stats() calls can both miss a job
// that a worker picks up between them (queued drops after the first read,
// running was read before it rose), and a test then saw a result missing.
void WaitWorkers(const RefitCoordinator& c, int deferred = 0) {
  for (RefitStats s = c.stats(); s.running + s.queued > deferred; s = c.stats()) {
    std::this_thread::yield();
  }
}

struct Driver {
  std::unique_ptr<RefitCoordinator> coord;
  std::vector<uint32_t> ids;
  std::vector<FilterState> states;
  std::vector<std::vector<BarUpdate>> updates;  // per symbol, per bar
  std::vector<RefitRecord> records;
  std::string bytes;                  // var, z, ver of every update, in bar order
  bool defer_until_next_bar = false;  // no SubmitDeferred: jobs wait for their next OnBar
  // OnBar gets a state with only its next variance (EngineServices' way).
  bool partial_state = false;

  static FilterState Poisoned() {
    FilterState s;
    const double nan = std::numeric_limits<double>::quiet_NaN();
    for (double& x : s.r_hist) x = nan;
    for (double& x : s.eps_hist) x = nan;
    s.var.eps2.fill(nan);
    s.var.neg_eps2.fill(nan);
    s.var.sigma2.fill(nan);
    s.var.next_variance = nan;
    s.sd_next = nan;
    s.mu_next = nan;
    s.bars = -12345;
    return s;
  }

  Driver(const RefitOptions& o, std::unique_ptr<Refitter> refitter) {
    auto c = RefitCoordinator::Create(o, OutputOptions{}, std::move(refitter));
    REQUIRE(c.ok());
    coord = std::move(*c);
  }
  uint32_t Add(const std::string& name, double v0, uint32_t group = 0) {
    auto id = coord->AddSymbol(name, group);
    REQUIRE(id.ok());
    ids.push_back(*id);
    states.emplace_back();
    InitFilterState(coord->model(*id), v0, &states.back());
    updates.emplace_back();
    return static_cast<uint32_t>(ids.size() - 1);
  }
  RefitBarResult Bar(uint32_t k, int64_t t_ns, double r) {
    const uint32_t id = ids[k];
    BarUpdate u;
    FilterStep(coord->model(id), &states[k], r, &u);
    u.flags |= coord->flags(id);
    u.t_ns = t_ns;
    bytes.append(reinterpret_cast<const char*>(&u.var), sizeof(u.var));
    bytes.append(reinterpret_cast<const char*>(&u.z), sizeof(u.z));
    bytes.append(reinterpret_cast<const char*>(&u.ver), sizeof(u.ver));
    bytes.append(reinterpret_cast<const char*>(&u.flags), sizeof(u.flags));
    updates[k].push_back(u);
    RefitBarResult res;
    if (partial_state) {
      // As EngineServices calls it: only the next variance is given (the rest
      // poisoned), and the state is written back only when OnBar says so.
      FilterState given = Poisoned();
      given.var.next_variance = states[k].var.next_variance;
      res = coord->OnBar(id, t_ns, r, &given);
      if (res.state_replaced) states[k] = given;
    } else {
      const FilterState before = states[k];
      res = coord->OnBar(id, t_ns, r, &states[k]);
      // A state not reported replaced is the state given, bit for bit.
      if (!res.state_replaced) CHECK(std::memcmp(&before, &states[k], sizeof(before)) == 0);
    }
    if (res.applied || res.pooled) {
      records.push_back(coord->last_record());
      // The JSON the worker prepared (the ingest thread, for a group model)
      // and the stream finishes is the record's own.
      std::string json;
      coord->last_record_json().Finish(coord->last_record(), &json);
      CHECK(json == EncodeRefitRecordJson(coord->last_record()));
      CHECK(coord->last_record_json().prepared());
    }
    // The gap after the bar, as EngineServices gives it after each message:
    // live mode copies the windows of the jobs due at this bar now.
    if (defer_until_next_bar) return res;
    coord->SubmitDeferred(1 << 20);
    return res;
  }
};

constexpr int64_t kBarNs = 60'000'000'000;  // one-minute bars

// The panel of the determinism test: 4 invented instruments.
struct Panel {
  std::vector<std::string> names = {"KESTREL", "ORBWEAVER", "TAMARIND", "VELLUM"};
  std::vector<std::vector<double>> returns;
  Panel(int n) {
    const ModelParams ps[] = {Garch(0.01, 0.05, 0.08, 0.90), Garch(0.0, 0.02, 0.05, 0.93),
                              Garch(-0.02, 0.10, 0.12, 0.80), Garch(0.03, 0.04, 0.10, 0.85)};
    for (int k = 0; k < 4; ++k) returns.push_back(Sim(ps[k], n, 100 + k));
  }
};

std::string RunPanel(const Panel& panel, int workers, RefitMode mode, RefitStats* stats = nullptr,
                     std::vector<RefitRecord>* records = nullptr) {
  RefitOptions o;
  o.window = 800;
  o.min_bars = 300;
  o.every_bars = 150;
  o.workers = workers;
  o.reidentify_every = 3;
  o.mode = mode;
  Driver d(o, DefaultRefitter());
  for (const auto& n : panel.names) d.Add(n, 1.0);
  const int n = static_cast<int>(panel.returns[0].size());
  for (int t = 0; t < n; ++t) {
    for (uint32_t k = 0; k < panel.names.size(); ++k) d.Bar(k, t * kBarNs, panel.returns[k][t]);
  }
  if (stats) *stats = d.coord->stats();
  if (records) *records = d.records;
  return d.bytes;
}

TEST_CASE("replay output is byte-identical across runs and worker counts", "[refit]") {
  const Panel panel(1200);
  RefitStats st1;
  std::vector<RefitRecord> rec1;
  const std::string ref = RunPanel(panel, 1, RefitMode::kReplay, &st1, &rec1);
  // The runs swap real versions in (otherwise the comparison would be vacuous).
  CHECK(st1.swapped >= 8);
  CHECK(st1.dropped == 0);
  bool reidentified = false;
  for (const auto& r : rec1) reidentified |= r.note.rfind("reidentified", 0) == 0;
  CHECK(reidentified);
  for (int workers : {1, 2}) {
    for (int run = 0; run < 3; ++run) {
      if (workers == 1 && run == 0) continue;  // that is `ref`
      INFO("workers " << workers << " run " << run);
      CHECK(RunPanel(panel, workers, RefitMode::kReplay) == ref);
    }
  }
}

TEST_CASE("a fit scheduled at bar n is in force from bar n + lag + 1 in replay", "[refit]") {
  const auto r = Sim(Garch(0.0, 0.05, 0.08, 0.9), 700, 7);
  RefitOptions o;
  o.window = 600;
  o.min_bars = 300;
  o.every_bars = 100;
  o.apply_lag_bars = 3;
  o.jitter_fraction = 0;
  o.mode = RefitMode::kReplay;
  Driver d(o, DefaultRefitter());
  d.Add("KESTREL", 1.0);
  for (int t = 0; t < 700; ++t) d.Bar(0, t * kBarNs, r[t]);
  REQUIRE(d.records.size() >= 4);
  for (const auto& rec : d.records) {
    CHECK(rec.applied_bar == rec.scheduled_bar + 3);
    CHECK(rec.outcome == RefitOutcome::kSwapped);
  }
  // Bars 1..303 (1-based) run on the warm-up EWMA; bar 304 on version 1.
  CHECK(d.records[0].scheduled_bar == 300);
  CHECK(d.updates[0][302].ver == 0);
  CHECK((d.updates[0][302].flags & kFlagWarmup) != 0);
  CHECK(d.updates[0][303].ver == 1);
  CHECK(d.updates[0][303].flags == 0);
  CHECK(d.updates[0][403].ver == 2);
}

TEST_CASE("after a swap the variance state is the new model's tail re-run", "[refit]") {
  const auto r = Sim(Garch(0.0, 0.05, 0.08, 0.9), 400, 8);
  RefitOptions o;
  o.window = 1000;
  o.min_bars = 300;
  o.every_bars = 1000;
  o.apply_lag_bars = 2;
  o.jitter_fraction = 0;
  o.mode = RefitMode::kReplay;
  Driver d(o, DefaultRefitter());
  d.Add("KESTREL", 1.0);
  for (int t = 0; t < 302; ++t) d.Bar(0, t * kBarNs, r[t]);
  REQUIRE(d.records.size() == 1);
  REQUIRE(d.records[0].outcome == RefitOutcome::kSwapped);
  // Independent re-run: state from the unconditional variance over the last
  // min(window, 500) = 302 returns seen.
  const FilterModel& m = d.coord->model(d.ids[0]);
  FilterState expect;
  InitFilterState(m, 0, &expect);
  for (int t = 0; t < 302; ++t) AdvanceState(m, &expect, r[t]);
  CHECK(d.states[0].var.next_variance == expect.var.next_variance);
  CHECK(d.states[0].mu_next == expect.mu_next);
  BarUpdate u;
  FilterStep(m, &d.states[0], r[302], &u);
  CHECK(u.ver == 1);
}

TEST_CASE("the holdout score is the filtered log-likelihood of the last bars", "[refit]") {
  const ModelParams p = Garch(0.01, 0.05, 0.08, 0.9);
  const auto r = Sim(p, 900, 12);
  auto fm = FilterModel::Create(p, OutputOptions{}, 1);
  REQUIRE(fm.ok());
  // Warm-up: the kSwapTailBars returns before the holdout, from the
  // unconditional variance; then the Gaussian log-likelihood of each holdout bar,
  // log phi(z) - log(var) / 2, from the filter's own outputs.
  const int h = 100;
  const auto tail = absl::MakeConstSpan(r).subspan(900 - h - kSwapTailBars);
  const auto ups = FilterSeries(*fm, 0, tail);
  double expect = 0;
  for (size_t i = ups.size() - h; i < ups.size(); ++i) {
    expect += -0.5 * std::log(2 * 3.14159265358979323846) - 0.5 * ups[i].z * ups[i].z -
              0.5 * std::log(ups[i].var);
  }
  CHECK(ScoreHoldout(*fm, r, h) == Approx(expect).epsilon(1e-12));
  // A model with the variance level off by 4x scores clearly worse.
  auto off = FilterModel::Create(Garch(0.01, 0.2, 0.08, 0.9), OutputOptions{}, 1);
  REQUIRE(off.ok());
  CHECK(ScoreHoldout(*off, r, h) < ScoreHoldout(*fm, r, h) - 0.05 * h);
}

TEST_CASE("a doubled volatility regime is followed by new versions and lower QLIKE", "[refit]") {
  // Volatility doubles (variance x4) at bar 1500 of 3000.
  const ModelParams truth = Garch(0.0, 0.05, 0.05, 0.90);
  const int kChange = 1500, kN = 3000;
  const auto r = Sim(truth, kN, 21, {{kChange, 4.0}});
  RefitOptions o;
  o.window = 1000;
  o.min_bars = 300;
  o.every_bars = 100;
  o.mode = RefitMode::kReplay;
  Driver d(o, DefaultRefitter());
  d.Add("TAMARIND", 1.0);
  for (int t = 0; t < kN; ++t) d.Bar(0, t * kBarNs, r[t]);
  // The phase of this symbol in [0, 100) plus the lag bounds the first fit
  // scheduled after the change.
  bool new_version_after_change = false;
  ModelVersionPtr first;
  for (const auto& rec : d.records) {
    if (rec.scheduled_bar > kChange && rec.scheduled_bar <= kChange + o.every_bars &&
        rec.outcome == RefitOutcome::kSwapped && rec.applied_bar == rec.scheduled_bar + 1) {
      new_version_after_change = true;
    }
  }
  CHECK(new_version_after_change);
  // The frozen initial model: version 1, run from its swap point on.
  REQUIRE(!d.records.empty());
  const RefitRecord& r1 = d.records[0];
  REQUIRE(r1.version == 1);
  auto p1 = ModelParams::FromNamed(ModelSpec{}, {{"mu", r1.values[0]},
                                                 {"omega", r1.values[1]},
                                                 {"alpha_1", r1.values[2]},
                                                 {"beta_1", r1.values[3]}});
  REQUIRE(p1.ok());
  auto fm1 = FilterModel::Create(*p1, OutputOptions{}, 1);
  REQUIRE(fm1.ok());
  FilterState fs;
  const int start = static_cast<int>(r1.applied_bar);  // bars seen when it went in force
  InitFilterState(*fm1, 0, &fs);
  for (int t = std::max(0, start - kSwapTailBars); t < start; ++t) AdvanceState(*fm1, &fs, r[t]);
  // QLIKE (Patton 2011): mean of r^2/var - log(r^2/var) - 1; the log form
  // log var + r^2/var ranks identically and avoids log(0).
  double q_engine = 0, q_frozen = 0;
  int n = 0;
  for (int t = start; t < kN; ++t) {
    BarUpdate u;
    FilterStep(*fm1, &fs, r[t], &u);
    if (t >= kChange) {
      const double r2 = r[t] * r[t];
      q_engine += std::log(d.updates[0][t].var) + r2 / d.updates[0][t].var;
      q_frozen += std::log(u.var) + r2 / u.var;
      ++n;
    }
  }
  q_engine /= n;
  q_frozen /= n;
  INFO("QLIKE engine " << q_engine << " frozen " << q_frozen);
  CHECK(q_engine < q_frozen);
  // The last version's unconditional variance moved towards the new level (4x).
  const double u1 = p1->UnconditionalVariance();
  const double ulast = d.coord->model(d.ids[0]).params().UnconditionalVariance();
  INFO("unconditional variance v1 " << u1 << " last " << ulast);
  CHECK(ulast > 2.5 * u1);
}

// A refitter driven by a script of outcomes per fit_index; "good" delegates to
// the estimator.
class ScriptedRefitter : public Refitter {
 public:
  explicit ScriptedRefitter(std::vector<std::string> script) : script_(std::move(script)) {
    inner_ = DefaultRefitter();
  }
  absl::StatusOr<RefitCandidate> Fit(const RefitRequest& req) override {
    const std::string& what =
        req.fit_index < static_cast<int64_t>(script_.size()) ? script_[req.fit_index] : "good";
    if (what == "error") return absl::InternalError("injected failure");
    auto c = inner_->Fit(req);
    if (!c.ok()) return c;
    if (what == "nan") c->fit.params.values[2] = std::numeric_limits<double>::quiet_NaN();
    if (what == "negative") c->fit.params.values[2] = -0.01;
    if (what == "persistent") {  // alpha + beta = 0.9997: inside the constraints
      c->fit.params.values[2] = 0.0997;
      c->fit.params.values[3] = 0.9;
    }
    if (what == "diag") c->diagnostics.ljung_box_sq_p = 0.001;
    if (what == "unconverged") c->fit.converged = false;
    return c;
  }

 private:
  std::vector<std::string> script_;
  std::unique_ptr<Refitter> inner_;
};

// The faulty-fit script's run (swaps, rejections, the fallback engaging),
// driven to its end. partial_state: OnBar gets only the next variance.
std::unique_ptr<Driver> RunFaultyScript(bool partial_state) {
  const auto r = Sim(Garch(0.0, 0.05, 0.08, 0.9), 1100, 31);
  RefitOptions o;
  o.window = 600;
  o.min_bars = 300;
  o.every_bars = 100;
  o.jitter_fraction = 0;
  o.max_failures = 3;
  o.mode = RefitMode::kReplay;
  auto d = std::make_unique<Driver>(
      o, std::make_unique<ScriptedRefitter>(std::vector<std::string>{
             "good", "error", "nan", "negative", "good", "persistent", "diag", "unconverged"}));
  d->partial_state = partial_state;
  d->Add("ORBWEAVER", 1.0);
  for (int t = 0; t < 1100; ++t) d->Bar(0, t * kBarNs, r[t]);
  return d;
}

TEST_CASE("faulty fits are never swapped in; repeated failures engage the fallback", "[refit]") {
  const std::unique_ptr<Driver> driver = RunFaultyScript(false);
  Driver& d = *driver;
  REQUIRE(d.records.size() == 8);
  const auto& rec = d.records;
  CHECK(rec[0].outcome == RefitOutcome::kSwapped);
  CHECK(rec[0].version == 1);
  const std::vector<double> v1 = rec[0].values;

  CHECK(rec[1].outcome == RefitOutcome::kRejected);
  CHECK(rec[1].reasons == std::vector<std::string>{"refit error: injected failure"});
  CHECK(rec[1].version == 1);
  CHECK(rec[1].consecutive_failures == 1);
  CHECK(rec[2].outcome == RefitOutcome::kRejected);
  CHECK(rec[2].reasons == std::vector<std::string>{"parameter alpha_1 is not finite"});
  CHECK(rec[2].version == 1);
  // The third failure in a row engages the fallback (version 0, flag fallback).
  CHECK(rec[3].outcome == RefitOutcome::kFallback);
  REQUIRE(rec[3].reasons.size() == 1);
  CHECK(rec[3].reasons[0].rfind("constraints: ", 0) == 0);
  CHECK(rec[3].version == 0);
  CHECK(rec[3].fallback);
  // While the fallback is in force the stream is flagged and runs the EWMA.
  const int64_t fb_from = rec[3].applied_bar, fb_to = rec[4].applied_bar;
  for (int64_t t = fb_from; t < fb_to; ++t) {
    CHECK(d.updates[0][t].ver == 0);
    CHECK((d.updates[0][t].flags & kFlagFallback) != 0);
  }
  // Until then version 1 stayed in force with its own parameters.
  for (int64_t t = rec[0].applied_bar; t < fb_from; ++t) CHECK(d.updates[0][t].ver == 1);
  // A good fit leaves the fallback.
  CHECK(rec[4].outcome == RefitOutcome::kSwapped);
  CHECK(rec[4].version == 2);
  CHECK_FALSE(rec[4].fallback);
  CHECK(rec[4].consecutive_failures == 0);
  CHECK(d.updates[0][fb_to].ver == 2);
  CHECK(d.updates[0][fb_to].flags == 0);
  // Persistence above max_persistence, failing diagnostics, no convergence.
  CHECK(rec[5].reasons == std::vector<std::string>{"persistence 0.9997 >= max_persistence 0.9995"});
  CHECK(rec[6].reasons ==
        std::vector<std::string>{"diagnostics: Ljung-Box on z^2 p-value 0.001 < 0.01"});
  CHECK(rec[7].reasons == std::vector<std::string>{"fit did not converge"});
  CHECK(rec[7].outcome == RefitOutcome::kFallback);
  CHECK(d.coord->flags(d.ids[0]) == kFlagFallback);
  const RefitStats s = d.coord->stats();
  CHECK(s.swapped == 2);
  CHECK(s.rejected == 6);
  CHECK(s.refit_errors == 1);
  CHECK(s.fallbacks == 2);
  CHECK(v1.size() == 4);
}

// Blocks every Fit until Release(); counts calls.
class GatedRefitter : public Refitter {
 public:
  absl::StatusOr<RefitCandidate> Fit(const RefitRequest& req) override {
    {
      std::unique_lock<std::mutex> l(mu_);
      ++entered_;
      cv_.notify_all();
      cv_.wait(l, [this] { return open_; });
    }
    return inner_->Fit(req);
  }
  void Release() {
    std::lock_guard<std::mutex> l(mu_);
    open_ = true;
    cv_.notify_all();
  }
  void WaitEntered(int n) {
    std::unique_lock<std::mutex> l(mu_);
    cv_.wait(l, [&] { return entered_ >= n; });
  }

 private:
  std::mutex mu_;
  std::condition_variable cv_;
  bool open_ = false;
  int entered_ = 0;
  std::unique_ptr<Refitter> inner_ = DefaultRefitter();
};

TEST_CASE("full queue drops and counts; a pending job coalesces later due points", "[refit]") {
  const ModelParams p = Garch(0.0, 0.05, 0.08, 0.9);
  RefitOptions o;
  o.window = 400;
  o.min_bars = 300;
  o.every_bars = 20;
  o.jitter_fraction = 0;  // all due together
  o.queue_capacity = 2;
  o.workers = 1;
  o.mode = RefitMode::kLive;
  o.group_models = false;  // only jobs make records here
  auto gated = std::make_unique<GatedRefitter>();
  GatedRefitter* gate = gated.get();
  Driver d(o, std::move(gated));
  std::vector<std::vector<double>> r;
  for (int k = 0; k < 5; ++k) {
    d.Add("SYM" + std::to_string(k), 1.0);
    r.push_back(Sim(p, 400, 40 + k));
  }
  for (int t = 0; t < 300; ++t) {
    for (uint32_t k = 0; k < 5; ++k) d.Bar(k, t * kBarNs, r[k][t]);
  }
  RefitStats s = d.coord->stats();
  CHECK(s.due == 5);
  CHECK(s.submitted == 2);
  CHECK(s.dropped == 3);
  CHECK(s.in_flight == 2);
  gate->WaitEntered(1);  // one job running (blocked), one queued
  s = d.coord->stats();
  CHECK(s.running == 1);
  CHECK(s.queued == 1);
  // 20 bars later every symbol is due again: the two pending ones coalesce,
  // the three others still find no slot.
  for (int t = 300; t < 320; ++t) {
    for (uint32_t k = 0; k < 5; ++k) d.Bar(k, t * kBarNs, r[k][t]);
  }
  s = d.coord->stats();
  CHECK(s.due == 10);
  CHECK(s.coalesced == 2);
  CHECK(s.dropped == 6);
  CHECK(d.records.empty());  // live mode never waits: nothing applied yet
  gate->Release();
  // Completion reaches the stream at the symbols' next bars.
  WaitWorkers(*d.coord);
  for (uint32_t k = 0; k < 5; ++k) d.Bar(k, 320 * kBarNs, r[k][320]);
  CHECK(d.records.size() == 2);
  CHECK(d.coord->stats().in_flight == 0);
  // The dropped symbols are retried at their next due point (bar 340).
  for (int t = 321; t < 340; ++t) {
    for (uint32_t k = 0; k < 5; ++k) d.Bar(k, t * kBarNs, r[k][t]);
  }
  s = d.coord->stats();
  CHECK(s.submitted == 4);
}

TEST_CASE("records carry the job's queue wait and the worker's time", "[refit]") {
  const ModelParams p = Garch(0.0, 0.05, 0.08, 0.9);
  RefitOptions o;
  o.window = 400;
  o.min_bars = 300;
  o.every_bars = 1000;
  o.jitter_fraction = 0;  // both due at bar 300
  o.workers = 1;
  o.mode = RefitMode::kLive;
  o.group_models = false;
  auto gated = std::make_unique<GatedRefitter>();
  GatedRefitter* gate = gated.get();
  Driver d(o, std::move(gated));
  std::vector<std::vector<double>> r;
  for (int k = 0; k < 2; ++k) {
    d.Add("SYM" + std::to_string(k), 1.0);
    r.push_back(Sim(p, 302, 60 + k));
  }
  for (int t = 0; t < 300; ++t) {
    for (uint32_t k = 0; k < 2; ++k) d.Bar(k, t * kBarNs, r[k][t]);
  }
  // The first job is held inside the refitter, the second waits in the queue.
  gate->WaitEntered(1);
  constexpr double kHeld = 0.05;
  std::this_thread::sleep_for(std::chrono::duration<double>(kHeld));
  gate->Release();
  WaitWorkers(*d.coord);
  for (uint32_t k = 0; k < 2; ++k) d.Bar(k, 300 * kBarNs, r[k][300]);
  REQUIRE(d.records.size() == 2);
  const RefitRecord& held = d.records[0].symbol == "SYM0" ? d.records[0] : d.records[1];
  const RefitRecord& queued = d.records[0].symbol == "SYM0" ? d.records[1] : d.records[0];
  // The held job spent kHeld in the refitter call; the worker's time includes it.
  CHECK(held.fit_seconds >= kHeld);
  CHECK(held.job_seconds >= held.fit_seconds);
  CHECK(held.queue_seconds >= 0);
  // The queued job waited for the held one before a worker took it.
  CHECK(queued.queue_seconds >= kHeld);
  CHECK(queued.job_seconds >= queued.fit_seconds);
  CHECK(queued.fit_seconds > 0);
}

// Records what each job hands the refitter.
class InputRefitter : public Refitter {
 public:
  struct Seen {
    uint32_t symbol_id;
    size_t n;
    double last;
    int64_t bar;
  };
  absl::StatusOr<RefitCandidate> Fit(const RefitRequest& req) override {
    {
      std::lock_guard<std::mutex> l(mu_);
      seen_.push_back({req.symbol_id, req.returns.size(), req.returns.back(), req.bar});
    }
    return inner_->Fit(req);
  }
  std::vector<Seen> seen() {
    std::lock_guard<std::mutex> l(mu_);
    return seen_;
  }

 private:
  std::mutex mu_;
  std::vector<Seen> seen_;
  std::unique_ptr<Refitter> inner_ = DefaultRefitter();
};

TEST_CASE("live jobs wait for the gap or the next bar, with their due point's window", "[refit]") {
  const ModelParams p = Garch(0.0, 0.05, 0.08, 0.9);
  RefitOptions o;
  o.window = 400;
  o.min_bars = 300;
  o.every_bars = 1000;
  o.jitter_fraction = 0;  // all three due at their 300th return
  o.workers = 1;
  o.mode = RefitMode::kLive;
  o.group_models = false;
  auto inputs = std::make_unique<InputRefitter>();
  InputRefitter* seen = inputs.get();
  Driver d(o, std::move(inputs));
  d.defer_until_next_bar = true;  // SubmitDeferred only where called below
  std::vector<std::vector<double>> r;
  for (int k = 0; k < 3; ++k) {
    d.Add("SYM" + std::to_string(k), 1.0);
    r.push_back(Sim(p, 302, 80 + k));
  }
  for (int t = 0; t < 300; ++t) {
    for (uint32_t k = 0; k < 3; ++k) d.Bar(k, t * kBarNs, r[k][t]);
  }
  RefitStats s = d.coord->stats();
  CHECK(s.submitted == 3);
  CHECK(s.in_flight == 3);
  CHECK(s.queued == 3);  // slots taken, windows not copied, nothing handed to the workers
  CHECK(s.running == 0);
  // A gap hands over the oldest first: SYM0's job.
  CHECK(d.coord->SubmitDeferred(1) == 1);
  // SYM2's next bar hands its job over before the return enters the window.
  d.Bar(2, 300 * kBarNs, r[2][300]);
  CHECK(d.coord->stats().queued + d.coord->stats().running >= 1);
  // The last one waits for the next gap.
  CHECK(d.coord->SubmitDeferred(10) == 1);
  CHECK(d.coord->SubmitDeferred(10) == 0);
  WaitWorkers(*d.coord);
  const auto v = seen->seen();
  REQUIRE(v.size() == 3);
  CHECK(v[0].symbol_id == d.ids[0]);
  CHECK(v[1].symbol_id == d.ids[2]);
  CHECK(v[2].symbol_id == d.ids[1]);
  for (const auto& x : v) {
    // Every job saw the 300 returns up to its due bar, never the 301st.
    const uint32_t k = x.symbol_id == d.ids[0] ? 0 : x.symbol_id == d.ids[1] ? 1 : 2;
    CHECK(x.n == 300);
    CHECK(x.last == r[k][299]);
    CHECK(x.bar == 300);
  }
  // Completed jobs reach the stream at the symbols' next bars as before.
  for (uint32_t k = 0; k < 2; ++k) d.Bar(k, 300 * kBarNs, r[k][300]);
  d.Bar(2, 301 * kBarNs, r[2][301]);
  REQUIRE(d.records.size() == 3);
  for (const auto& rec : d.records) CHECK(rec.scheduled_bar == 300);
}

// Symbols all due at their 300th return (270: more than the 256 job buffers
// one worker gets).
struct BufferPanel {
  int symbols;
  std::vector<std::vector<double>> r;
  BufferPanel(int n, int bars) : symbols(n) {
    const ModelParams p = Garch(0.0, 0.05, 0.08, 0.9);
    for (int k = 0; k < n; ++k) r.push_back(Sim(p, bars, 500 + k));
  }
  RefitOptions Options() const {
    RefitOptions o;
    o.window = 400;
    o.min_bars = 300;
    o.every_bars = 1000;
    o.jitter_fraction = 0;
    o.workers = 1;
    o.queue_capacity = symbols;
    o.mode = RefitMode::kLive;
    o.group_models = false;
    return o;
  }
  void AddAll(Driver* d) const {
    for (int k = 0; k < symbols; ++k) d->Add("SYM" + std::to_string(k), 1.0);
  }
  // Bars [from, to) of every symbol.
  void Bars(Driver* d, int from, int to) const {
    for (int t = from; t < to; ++t) {
      for (int k = 0; k < symbols; ++k) d->Bar(static_cast<uint32_t>(k), t * kBarNs, r[k][t]);
    }
  }
};

TEST_CASE("live copies run a few buffers ahead of the workers; a finished job needs none",
          "[refit]") {
  const BufferPanel panel(270, 302);
  auto inputs = std::make_unique<InputRefitter>();
  InputRefitter* seen = inputs.get();
  Driver d(panel.Options(), std::move(inputs));
  d.defer_until_next_bar = true;  // SubmitDeferred only where called below
  const int n = panel.symbols;
  panel.AddAll(&d);
  panel.Bars(&d, 0, 300);
  RefitCoordinator& c = *d.coord;
  CHECK(c.stats().job_buffers == 256);  // min(queue_capacity, 256 per worker)
  CHECK(c.stats().queued == n);         // all due, none copied
  // A gap copies only into free buffers: 256 of the 270.
  CHECK(c.SubmitDeferred(1 << 20) == 256);
  WaitWorkers(c, n - 256);
  // The next gap takes the finished jobs' buffers back (their windows have
  // not moved) and copies the rest.
  CHECK(c.SubmitDeferred(1 << 20) == n - 256);
  WaitWorkers(c, 0);
  CHECK(c.SubmitDeferred(1 << 20) == 0);
  CHECK(c.stats().job_buffers == 256);  // none allocated on the way
  // Every job saw its due point's 300 returns.
  const auto v = seen->seen();
  REQUIRE(v.size() == static_cast<size_t>(n));
  int wrong = 0;
  for (const auto& x : v) {
    const uint32_t k = x.symbol_id;  // ids are 0..n-1 in order
    wrong += x.n != 300 || x.last != panel.r[k][299] || x.bar != 300;
  }
  CHECK(wrong == 0);
  // Applied at the next bar, finished jobs with no buffer included.
  panel.Bars(&d, 300, 301);
  CHECK(d.records.size() == static_cast<size_t>(n));
  CHECK(c.stats().in_flight == 0);
  CHECK(c.stats().job_buffers == 256);
}

TEST_CASE("a symbol's next bar copies its waiting job even with no buffer free", "[refit]") {
  const BufferPanel panel(270, 302);
  Driver d(panel.Options(), DefaultRefitter());
  d.defer_until_next_bar = true;
  panel.AddAll(&d);
  panel.Bars(&d, 0, 300);
  RefitCoordinator& c = *d.coord;
  CHECK(c.SubmitDeferred(1 << 20) == 256);  // every buffer in use, 14 jobs wait
  // The last symbol's job waits; its next bar copies the window first, into
  // a new buffer.
  const uint32_t last = static_cast<uint32_t>(panel.symbols - 1);
  d.Bar(last, 300 * kBarNs, panel.r[last][300]);
  CHECK(c.stats().job_buffers == 257);
  WaitWorkers(c, 13);
  CHECK(c.SubmitDeferred(1 << 20) == 13);
  WaitWorkers(c, 0);
  // Every job reaches the stream with its due point's window.
  panel.Bars(&d, 300, 302);
  CHECK(d.records.size() == static_cast<size_t>(panel.symbols));
  for (const auto& rec : d.records) CHECK(rec.scheduled_bar == 300);
  // Back to the 256: the one made beyond them is freed when it comes back.
  CHECK(c.stats().job_buffers == 256);
}

TEST_CASE("jobs whose buffers were taken back checkpoint and restore as before", "[refit]") {
  // A takes finished jobs' buffers back at every gap; B has no gap after the
  // copies, so its jobs keep them. Their checkpoints must be the same bytes
  // (the capture reads a taken-back job's inputs from the window), and C,
  // restored from A's, must continue as B does. With apply_lag_bars = 2 the
  // bar after the due point does not apply the jobs:
  //   "finished, then a bar": A's windows still hold the inputs when the
  //     buffers are taken back; the next bar must copy them back first;
  //   "a bar, then finished": the windows moved before the jobs finished;
  //     their buffers must not be taken back.
  const bool bar_first = GENERATE(false, true);
  INFO((bar_first ? "a bar, then finished" : "finished, then a bar"));
  const BufferPanel panel(200, 340);
  RefitOptions o = panel.Options();
  o.apply_lag_bars = 2;
  auto run_to_checkpoint = [&](Driver* d, bool gaps) {
    d->defer_until_next_bar = true;
    panel.AddAll(d);
    panel.Bars(d, 0, 300);
    REQUIRE(d->coord->SubmitDeferred(1 << 20) == panel.symbols);
    if (bar_first) panel.Bars(d, 300, 301);
    WaitWorkers(*d->coord, 0);
    if (gaps) d->coord->SubmitDeferred(0);  // takes buffers back, copies nothing
    if (!bar_first) panel.Bars(d, 300, 301);
    if (gaps) d->coord->SubmitDeferred(0);
    StateWriter w;
    d->coord->SaveState(&w);
    return w.data();
  };
  Driver a(o, DefaultRefitter());
  Driver b(o, DefaultRefitter());
  const std::string saved_a = run_to_checkpoint(&a, true);
  const std::string saved_b = run_to_checkpoint(&b, false);
  CHECK(a.records.empty());  // nothing applied yet: every job is in the checkpoints
  // The pending jobs' windows are in it.
  CHECK(saved_a.size() > static_cast<size_t>(panel.symbols) * 300 * sizeof(double));
  CHECK(saved_a == saved_b);

  Driver c(o, DefaultRefitter());
  panel.AddAll(&c);
  REQUIRE(c.coord->RestoreState(saved_a).ok());
  WaitWorkers(*c.coord, 0);  // the restored jobs run again; done before their bar
  c.states = b.states;       // the filter states are the core's, not the coordinator's
  b.bytes.clear();
  for (Driver* d : {&b, &c}) {
    d->defer_until_next_bar = false;
    panel.Bars(d, 301, 340);
  }
  CHECK(b.records.size() == static_cast<size_t>(panel.symbols));
  CHECK(c.records.size() == b.records.size());
  CHECK(c.bytes == b.bytes);
}

// Records the order in which jobs reach the refitter; holds them while `hold`.
class OrderRefitter : public Refitter {
 public:
  absl::StatusOr<RefitCandidate> Fit(const RefitRequest& req) override {
    {
      std::unique_lock<std::mutex> l(mu_);
      order_.push_back(req.symbol_id);
      cv_.notify_all();
      cv_.wait(l, [this] { return !hold_; });
    }
    return inner_->Fit(req);
  }
  void Hold(bool h) {
    std::lock_guard<std::mutex> l(mu_);
    hold_ = h;
    cv_.notify_all();
  }
  void WaitCalls(size_t n) {
    std::unique_lock<std::mutex> l(mu_);
    cv_.wait(l, [&] { return order_.size() >= n; });
  }
  std::vector<uint32_t> order() {
    std::lock_guard<std::mutex> l(mu_);
    return order_;
  }

 private:
  std::mutex mu_;
  std::condition_variable cv_;
  bool hold_ = false;
  std::vector<uint32_t> order_;
  std::unique_ptr<Refitter> inner_ = DefaultRefitter();
};

TEST_CASE("symbols without a model are served before routine refits", "[refit]") {
  const ModelParams p = Garch(0.0, 0.05, 0.08, 0.9);
  RefitOptions o;
  o.window = 500;
  o.min_bars = 300;
  o.every_bars = 50;
  o.jitter_fraction = 0;
  o.workers = 1;
  o.mode = RefitMode::kLive;
  auto rf = std::make_unique<OrderRefitter>();
  OrderRefitter* ord = rf.get();
  Driver d(o, std::move(rf));
  const auto ra = Sim(p, 400, 71), rx = Sim(p, 400, 72), rb = Sim(p, 400, 73);
  d.Add("ALDER", 1.0);  // id 0: first fit at global bar 299, routine refit at 349
  auto step = [&](int t) {
    d.Bar(0, t * kBarNs, ra[t]);
    if (t >= 47) d.Bar(1, t * kBarNs, rx[t - 47]);  // own bar 300 at global 346
    if (t >= 51) d.Bar(2, t * kBarNs, rb[t - 51]);  // own bar 300 at global 350
  };
  for (int t = 0; t < 300; ++t) {
    if (t == 47) d.Add("XYLEM", 1.0);    // id 1
    if (t == 51) d.Add("BRACKEN", 1.0);  // id 2
    step(t);
  }
  ord->WaitCalls(1);
  WaitWorkers(*d.coord);
  ord->Hold(true);
  for (int t = 300; t < 346; ++t) step(t);
  REQUIRE(d.coord->current(d.ids[0])->version == 1);  // ALDER has a model now
  step(346);                                          // XYLEM's first fit occupies the worker
  ord->WaitCalls(2);
  // Bar 349: ALDER's routine refit joins the normal lane; bar 350: BRACKEN's
  // first fit (no model) joins the priority lane, behind it in time.
  for (int t = 347; t <= 350; ++t) step(t);
  CHECK(d.coord->stats().queued == 2);
  ord->Hold(false);
  ord->WaitCalls(4);
  CHECK(ord->order() == std::vector<uint32_t>{0, 1, 2, 0});
}

TEST_CASE("no fit before min_bars; late symbols start their own schedule", "[refit]") {
  const ModelParams p = Garch(0.0, 0.05, 0.08, 0.9);
  const auto a = Sim(p, 900, 51), b = Sim(p, 900, 52);
  RefitOptions o;
  o.window = 500;
  o.min_bars = 300;
  o.every_bars = 100;
  o.jitter_fraction = 0;
  o.mode = RefitMode::kReplay;
  o.group_models = false;  // own fits only (group models: the tests above)
  Driver d(o, DefaultRefitter());
  d.Add("VELLUM", 1.0);
  for (int t = 0; t < 299; ++t) d.Bar(0, t * kBarNs, a[t]);
  CHECK(d.coord->stats().due == 0);
  CHECK(d.coord->stats().submitted == 0);
  d.Bar(0, 299 * kBarNs, a[299]);
  CHECK(d.coord->stats().submitted == 1);
  // A symbol appearing at bar 400 has its first fit 300 of its own bars later.
  for (int t = 300; t < 400; ++t) d.Bar(0, t * kBarNs, a[t]);
  d.Add("LATECOMER", 1.0);
  for (int t = 400; t < 900; ++t) {
    d.Bar(0, t * kBarNs, a[t]);
    d.Bar(1, t * kBarNs, b[t - 400]);
  }
  int late_fits = 0;
  for (const auto& rec : d.records) {
    if (rec.symbol == "LATECOMER") {
      CHECK(rec.scheduled_bar >= 300);
      ++late_fits;
    }
  }
  // Scheduled at own bars 300, 400 and 500; the last is still in flight at the
  // end (it would apply at own bar 501), as is VELLUM's of its bar 900.
  CHECK(late_fits == 2);
  CHECK(d.coord->stats().in_flight == 2);
  CHECK(d.coord->current(d.ids[1])->version == 2);
  CHECK(d.records.back().symbol == "LATECOMER");
  CHECK(d.coord->Find("LATECOMER") == 1);
  CHECK(d.coord->Find("NOBODY") == -1);
}

TEST_CASE("a group model keeps the donor's dynamics at the symbol's own level", "[refit]") {
  ModelSpec spec;
  spec.mean = MeanKind::kArma;
  spec.ar_order = 1;
  spec.variance = VarianceKind::kGjr;
  spec.asym_order = 1;
  spec.innovations = Innovations::kStudentT;
  auto donor = ModelParams::FromNamed(spec, {{"mu", 0.01},
                                             {"ar_1", 0.1},
                                             {"omega", 0.02},
                                             {"alpha_1", 0.05},
                                             {"gamma_1", 0.06},
                                             {"beta_1", 0.9},
                                             {"nu", 6.5}});
  REQUIRE(donor.ok());
  auto p = PooledParams(*donor, 4.0);
  REQUIRE(p.ok());
  CHECK(p->spec.mean == MeanKind::kZero);
  CHECK(p->spec.variance == VarianceKind::kGjr);
  CHECK(p->spec.innovations == Innovations::kStudentT);
  REQUIRE(p->values.size() == 5);
  CHECK(p->values[1] == 0.05);
  CHECK(p->values[2] == 0.06);
  CHECK(p->values[3] == 0.9);
  CHECK(p->values[4] == 6.5);
  CHECK(p->Persistence() == donor->Persistence());
  CHECK(std::fabs(p->UnconditionalVariance() - 4.0) < 1e-12);
  CHECK_FALSE(PooledParams(*donor, 0.0).ok());
  auto ewma = FilterModel::Ewma(0.94, OutputOptions{}, 0);
  REQUIRE(ewma.ok());
  CHECK_FALSE(PooledParams(ewma->params(), 1.0).ok());
}

// One group of an active name and an idle one (a tick every 10th bar, three
// times the volatility), and an idle name alone in its own group.
std::string RunGroups(int workers, std::vector<RefitRecord>* records,
                      std::vector<std::vector<BarUpdate>>* updates, bool group_models = true,
                      bool partial_state = false) {
  const auto active = Sim(Garch(0.0, 0.05, 0.08, 0.9), 1300, 71);
  const auto idle = Sim(Garch(0.0, 0.45, 0.08, 0.9), 600, 72);
  const auto alone = Sim(Garch(0.0, 0.05, 0.08, 0.9), 200, 73);
  RefitOptions o;
  o.window = 500;
  o.min_bars = 300;
  o.every_bars = 100;
  o.jitter_fraction = 0;
  o.workers = workers;
  o.mode = RefitMode::kReplay;
  o.group_models = group_models;
  Driver d(o, DefaultRefitter());
  d.partial_state = partial_state;
  d.Add("ALDER", 0.5, 1);
  d.Add("BRACKEN", 4.5, 1);
  d.Add("CALLUNA", 0.5, 2);
  int bi = 0, ci = 0;
  for (int t = 0; t < 1300; ++t) {
    d.Bar(0, t * kBarNs, active[t]);
    // BRACKEN: idle for the first 900 bars, then every bar.
    if (t % 10 == 0 || t >= 900) d.Bar(1, t * kBarNs, idle[bi++]);
    if (t % 10 == 5) d.Bar(2, t * kBarNs, alone[ci++]);
  }
  if (records) *records = d.records;
  if (updates) *updates = d.updates;
  return d.bytes;
}

TEST_CASE("an idle name runs on its group's model until its own fit passes", "[refit]") {
  std::vector<RefitRecord> records;
  std::vector<std::vector<BarUpdate>> u;
  const std::string ref = RunGroups(1, &records, &u);
  // ALDER's first fit is scheduled at its bar 300 and applied at 301.
  int first_pooled = -1, own = -1;
  for (size_t i = 0; i < records.size(); ++i) {
    const RefitRecord& r = records[i];
    if (r.symbol == "BRACKEN" && r.outcome == RefitOutcome::kPooled && first_pooled < 0) {
      first_pooled = static_cast<int>(i);
    }
    if (r.symbol == "BRACKEN" && r.outcome == RefitOutcome::kSwapped && own < 0) {
      own = static_cast<int>(i);
    }
    CHECK(r.symbol != "CALLUNA");  // its group has no passed model
  }
  REQUIRE(first_pooled >= 0);
  REQUIRE(own > first_pooled);
  const RefitRecord& pooled = records[first_pooled];
  INFO(pooled.note);
  CHECK(pooled.version == 1);
  CHECK(pooled.note.find("ALDER version 1") != std::string::npos);
  CHECK(pooled.names.front() == "omega");  // zero mean
  // BRACKEN's bars: 31 idle ones until ALDER's bar 301; the adoption happens
  // at its bar 31 (ALDER's bar 310), so its 32nd update is the first pooled one.
  const auto& b = u[1];
  CHECK(pooled.applied_bar == 31);
  CHECK((b[30].flags & kFlagWarmup) != 0);
  CHECK(b[31].flags == kFlagPooled);
  CHECK(b[31].ver == 1);
  // At its own level: z^2 averages near 1 over the pooled bars although the
  // donor's variance is a ninth of BRACKEN's (without re-levelling: ~9).
  double z2 = 0;
  int n = 0;
  for (size_t i = 31; i < b.size() && (b[i].flags & kFlagPooled); ++i, ++n) z2 += b[i].z * b[i].z;
  REQUIRE(n >= 100);
  CHECK(z2 / n > 0.6);
  CHECK(z2 / n < 1.6);
  // Its own fit then replaces the group model for good.
  CHECK(records[own].version >= 2);
  for (size_t i = own + 1; i < records.size(); ++i) {
    CHECK_FALSE((records[i].symbol == "BRACKEN" && records[i].outcome == RefitOutcome::kPooled));
  }
  CHECK(b.back().flags == 0);
  // The lone idle name never leaves the warm-up EWMA.
  for (const auto& x : u[2]) CHECK(x.ver == 0);
  // Deterministic in replay, whatever the worker count.
  CHECK(RunGroups(1, nullptr, nullptr) == ref);
  CHECK(RunGroups(2, nullptr, nullptr) == ref);
  // Off: BRACKEN stays on the EWMA until its own fit.
  std::vector<std::vector<BarUpdate>> off;
  RunGroups(1, nullptr, &off, false);
  CHECK(off[1][31].ver == 0);
  CHECK((off[1][31].flags & kFlagWarmup) != 0);
}

// The faulty-fit script's published bytes and records.
std::string RunFaulty(bool partial_state, std::vector<RefitRecord>* records) {
  const std::unique_ptr<Driver> d = RunFaultyScript(partial_state);
  *records = d->records;
  return d->bytes;
}

TEST_CASE("OnBar reads only the next variance of the state it is given", "[refit]") {
  // EngineServices hands OnBar a state with only its next variance and writes
  // it back only when state_replaced: the same updates and records as with
  // the whole state, through swaps, rejections, the fallback and group models.
  std::vector<RefitRecord> full_records, partial_records;
  const std::string full = RunFaulty(false, &full_records);
  CHECK(RunFaulty(true, &partial_records) == full);
  REQUIRE(full_records.size() == 8);
  bool fallback = false, rejected = false;
  for (const RefitRecord& r : full_records) {
    fallback |= r.outcome == RefitOutcome::kFallback;
    rejected |= r.outcome == RefitOutcome::kRejected;
  }
  CHECK(fallback);
  CHECK(rejected);
  REQUIRE(partial_records.size() == full_records.size());
  for (size_t i = 0; i < full_records.size(); ++i) {
    // fit_seconds is the one wall time in a record.
    partial_records[i].fit_seconds = full_records[i].fit_seconds = 0;
    CHECK(EncodeRefitRecordJson(partial_records[i]) == EncodeRefitRecordJson(full_records[i]));
  }
  std::vector<RefitRecord> groups_full, groups_partial;
  const std::string g = RunGroups(1, &groups_full, nullptr);
  CHECK(RunGroups(1, &groups_partial, nullptr, true, /*partial_state=*/true) == g);
  bool pooled = false;
  for (const RefitRecord& r : groups_full) pooled |= r.outcome == RefitOutcome::kPooled;
  CHECK(pooled);
  CHECK(groups_partial.size() == groups_full.size());
}

TEST_CASE("the ingest side allocates nothing per bar, storm included", "[refit]") {
  if (!testing::AllocationCountingEnabled()) WARN("allocation counting is off in this build");
  const ModelParams p = Garch(0.0, 0.05, 0.08, 0.9);
  RefitOptions o;
  o.window = 400;
  o.min_bars = 300;
  o.every_bars = 1000;
  o.jitter_fraction = 0;
  o.queue_capacity = 8;
  o.workers = 2;
  o.mode = RefitMode::kLive;
  auto gated = std::make_unique<GatedRefitter>();
  GatedRefitter* gate = gated.get();
  Driver d(o, std::move(gated));
  std::vector<std::vector<double>> r;
  for (int k = 0; k < 8; ++k) {
    d.Add("S" + std::to_string(k), 1.0);
    r.push_back(Sim(p, 400, 60 + k));
  }
  d.updates.assign(8, {});
  for (auto& u : d.updates) u.reserve(400);
  d.bytes.reserve(1 << 20);
  d.records.reserve(16);
  for (int t = 0; t < 299; ++t) {
    for (uint32_t k = 0; k < 8; ++k) d.Bar(k, t * kBarNs, r[k][t]);
  }
  // Bar 300: all eight submit (window copies into preallocated slots). What
  // is counted is this thread's allocations: a worker taking a job may
  // allocate meanwhile (its retire bin, grown on first use; the refitter is
  // held only after that), which once made a count of all threads fail.
  uint64_t before = testing::ThreadAllocationCount();
  for (uint32_t k = 0; k < 8; ++k) d.coord->OnBar(d.ids[k], 299 * kBarNs, r[k][299], &d.states[k]);
  CHECK(d.coord->stats().queued == 8);  // live mode: the copies wait for the gap
  CHECK(d.coord->SubmitDeferred(100) == 8);
  if (testing::AllocationCountingEnabled()) CHECK(testing::ThreadAllocationCount() == before);
  CHECK(d.coord->stats().submitted == 8);
  gate->WaitEntered(2);
  gate->Release();
  WaitWorkers(*d.coord);
  // Applying the completed jobs (pointer swaps, state copies) and finishing
  // each record's prepared JSON into a grown buffer allocate nothing, and
  // free nothing either: the records and versions they replace were made on
  // a worker, and go back to the workers to be freed (RetireQueue).
  std::string json;
  json.reserve(1 << 16);
  before = testing::ThreadAllocationCount();
  uint64_t released = testing::ThreadReleaseCount();
  int applied = 0;
  for (uint32_t k = 0; k < 8; ++k) {
    applied += d.coord->OnBar(d.ids[k], 300 * kBarNs, r[k][300], &d.states[k]).applied;
    d.coord->last_record_json().Finish(d.coord->last_record(), &json);
  }
  if (testing::AllocationCountingEnabled()) {
    CHECK(testing::ThreadAllocationCount() == before);
    CHECK(testing::ThreadReleaseCount() == released);
  }
  CHECK(applied == 8);
  // The seven records replaced after the first application and their
  // numbers wait for a worker's next job (the first batch went over at the
  // first application and no job has run since).
  CHECK(d.coord->retired_pending() >= 14);
}

TEST_CASE("memory per symbol stays within 40 KiB at a 2,000-bar window", "[refit]") {
  RefitOptions o;  // window 2000
  auto c = RefitCoordinator::Create(o, OutputOptions{}, DefaultRefitter());
  REQUIRE(c.ok());
  REQUIRE((*c)->AddSymbol("KESTREL").ok());
  CHECK((*c)->window(0).MemoryBytes() == 2000 * sizeof(double));
  const size_t bytes = (*c)->MemoryBytesPerSymbol();
  INFO("bytes per symbol " << bytes);
  CHECK(bytes <= 40 * 1024);
  CHECK(bytes >= 16000);
}

TEST_CASE("coordinator errors are clear", "[refit]") {
  RefitOptions o;
  o.holdout_bars = 300;
  auto a = RefitCoordinator::Create(o, OutputOptions{}, DefaultRefitter());
  REQUIRE_FALSE(a.ok());
  CHECK(std::string(a.status().message()) ==
        "[refit] holdout_bars must be >= 0 and below min_bars");
  auto b = RefitCoordinator::Create(RefitOptions{}, OutputOptions{}, nullptr);
  REQUIRE_FALSE(b.ok());
  CHECK(std::string(b.status().message()) == "a refitter is required");
  auto c = RefitCoordinator::Create(RefitOptions{}, OutputOptions{}, DefaultRefitter());
  REQUIRE(c.ok());
  REQUIRE((*c)->AddSymbol("KESTREL").ok());
  auto dup = (*c)->AddSymbol("KESTREL");
  REQUIRE_FALSE(dup.ok());
  CHECK(std::string(dup.status().message()) == "symbol KESTREL is already registered");
  auto empty = (*c)->AddSymbol("");
  REQUIRE_FALSE(empty.ok());
  CHECK(std::string(empty.status().message()) == "symbol must have 1..32 bytes, got 0");
}

}  // namespace
}  // namespace aftershock
