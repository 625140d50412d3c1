// Background re-estimation benchmarks (PRODUCT.md C5, P2, P4):
//   BM_WarmRefit        one warm-started GARCH(1,1) refit of a 2,000-bar window
//                       through EstimatorRefitter (refits per second per worker);
//   BM_RefitJobs        the whole job path (refit, holdout scores, gate, tail
//                       re-run) through the pool, 1 and 2 workers;
//   BM_IngestLatency    per-bar RefitCoordinator::OnBar latency (window push,
//                       apply check, scheduler), quiet vs during a refit storm
//                       (every symbol due at once, all workers busy), same run;
//                       and the calls that applied a job;
//   BM_SeasonalEstimate a symbol's intraday profile estimated from a 2,000-bar
//                       window of one-minute bars over sessions of 510 (the
//                       worker's first step of every seasonal refit), with a
//                       pooled prior as the coordinator hands it;
//   BM_EngineApply      the ingest thread's cost of applying a refit on the
//                       engine's path (IngestCore + EngineServices: coordinator,
//                       model record, swap into the core, gate alerts): a clock
//                       tick closing every symbol's bar where each applies a
//                       finished job, against the next one where none does.
#include <benchmark/benchmark.h>
#include <time.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <random>
#include <thread>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/model_store.h"
#include "aftershock/refit.h"
#include "aftershock/seasonal_profile.h"
#include "aftershock/simulate.h"
#include "aftershock/update_sink.h"

namespace aftershock {
namespace {

ModelParams Truth() {
  ModelSpec spec;
  auto p = ModelParams::FromNamed(
      spec, {{"mu", 0.01}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}});
  return *p;
}

std::vector<double> Sim(int n, uint64_t seed) {
  SimulationOptions o;
  o.n = n;
  o.seed = seed;
  return Simulate(Truth(), o)->returns;
}

// Arg: 1 = with standard errors (the refitter's default), 0 = estimates only.
void BM_WarmRefit(benchmark::State& state) {
  const auto r = Sim(2000, 1);
  EstimatorRefitterOptions ro = EstimatorRefitter::DefaultOptions();
  ro.fit.std_errors = state.range(0) != 0;
  auto rf = *EstimatorRefitter::Create(ro);
  // Warm start: the fit of the window 100 bars earlier.
  const auto earlier = Sim(2100, 1);
  auto prev = FitModel(ModelSpec{}, absl::MakeConstSpan(earlier).first(2000));
  RefitRequest req;
  req.returns = r;
  req.current = &prev->params;
  int failed = 0;
  for (auto _ : state) {
    auto c = rf->Fit(req);
    failed += !c.ok() || !c->fit.converged;
    benchmark::DoNotOptimize(c);
  }
  state.counters["refits_per_s"] =
      benchmark::Counter(static_cast<double>(state.iterations()), benchmark::Counter::kIsRate);
  state.counters["failed"] = failed;
}
BENCHMARK(BM_WarmRefit)->Arg(1)->Arg(0)->Unit(benchmark::kMicrosecond);

struct Universe {
  std::unique_ptr<RefitCoordinator> coord;
  std::vector<std::vector<double>> returns;
  std::vector<FilterState> states;
  int64_t bar = 0;
  Universe(int symbols, int bars, const RefitOptions& o) {
    coord = *RefitCoordinator::Create(o, OutputOptions{}, *EstimatorRefitter::Create());
    for (int k = 0; k < symbols; ++k) {
      (void)coord->AddSymbol("SYM" + std::to_string(k));
      returns.push_back(Sim(bars, 1000 + k));
      states.emplace_back();
      InitFilterState(coord->model(k), 1.0, &states.back());
    }
  }
  // One bar for every symbol; latencies (ns) appended when `lat` is given, and
  // those of the calls that applied a job also to `applied` when given.
  void Bar(std::vector<double>* lat, std::vector<double>* applied = nullptr) {
    const int64_t t = bar * 60'000'000'000;
    const size_t n = returns.size();
    for (size_t k = 0; k < n; ++k) {
      const double r = returns[k][bar % returns[k].size()];
      const auto t0 = std::chrono::steady_clock::now();
      const RefitBarResult res = coord->OnBar(static_cast<uint32_t>(k), t, r, &states[k]);
      const auto t1 = std::chrono::steady_clock::now();
      const double ns = std::chrono::duration<double, std::nano>(t1 - t0).count();
      if (lat) lat->push_back(ns);
      if (applied && res.applied) applied->push_back(ns);
    }
    // The gap after the bar's batch, as the engine's clock tick: live jobs
    // deferred by OnBar copy their windows and go to the workers here.
    coord->SubmitDeferred(256);
    ++bar;
  }
  void Drain() {
    while (coord->stats().in_flight > 0) {
      for (RefitStats w = coord->stats(); w.queued + w.running > 0; w = coord->stats()) {
        coord->SubmitDeferred(256);  // queued counts the deferred jobs too
        std::this_thread::sleep_for(std::chrono::milliseconds(1));
      }
      Bar(nullptr);
    }
  }
};

double Quantile(std::vector<double> v, double q) {
  if (v.empty()) return 0;
  const size_t k = std::min(v.size() - 1, static_cast<size_t>(q * v.size()));
  std::nth_element(v.begin(), v.begin() + k, v.end());
  return v[k];
}

void BM_RefitJobs(benchmark::State& state) {
  const int workers = static_cast<int>(state.range(0));
  const int kSymbols = 64;
  RefitOptions o;
  o.window = 2000;
  o.min_bars = 2000;
  o.every_bars = 1;  // due at every bar once warm: the pool never idles
  o.jitter_fraction = 0;
  o.workers = workers;
  o.queue_capacity = kSymbols;
  o.mode = RefitMode::kLive;
  Universe u(kSymbols, 2500, o);
  for (int b = 0; b < 1999; ++b) u.Bar(nullptr);
  uint64_t done0 = 0;
  double seconds = 0;
  for (auto _ : state) {
    const uint64_t before = u.coord->stats().swapped + u.coord->stats().rejected;
    const auto t0 = std::chrono::steady_clock::now();
    // Keep feeding bars (re-submitting as slots free up) for a fixed wall time.
    while (std::chrono::steady_clock::now() - t0 < std::chrono::milliseconds(500)) {
      u.Bar(nullptr);
      std::this_thread::sleep_for(std::chrono::microseconds(200));
    }
    seconds += std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    done0 += u.coord->stats().swapped + u.coord->stats().rejected - before;
  }
  state.counters["refits_per_s_per_worker"] = static_cast<double>(done0) / seconds / workers;
  state.counters["swapped"] = static_cast<double>(u.coord->stats().swapped);
  state.counters["rejected"] = static_cast<double>(u.coord->stats().rejected);
}
BENCHMARK(BM_RefitJobs)->Arg(1)->Arg(2)->Iterations(1)->Unit(benchmark::kMillisecond);

void BM_IngestLatency(benchmark::State& state) {
  const int workers = static_cast<int>(state.range(0));
  const int kSymbols = 1000;
  RefitOptions o;
  o.window = 2000;
  o.min_bars = 300;
  o.every_bars = 2300;  // all due at bar 300 and again at bar 2600: two storms
  o.jitter_fraction = 0;
  o.workers = workers;
  o.queue_capacity = kSymbols;
  o.mode = RefitMode::kLive;
  Universe u(kSymbols, 4000, o);
  std::vector<double> quiet, storm, applied;
  quiet.reserve(2'000'000);
  storm.reserve(2'000'000);
  applied.reserve(kSymbols);
  double storm_bars = 0, storm_seconds = 0, busy_bars = 0;
  uint64_t storm_applied = 0;
  for (auto _ : state) {
    for (int b = 0; b < 300; ++b) u.Bar(nullptr);  // first storm: warm models in
    u.Drain();
    while (u.bar < 2599) u.Bar(u.bar >= 1000 ? &quiet : nullptr);  // quiet, full windows
    // Storm: bar 2600 submits every symbol; measure until the pool has drained.
    const uint64_t applied0 = u.coord->stats().swapped + u.coord->stats().rejected;
    const auto t0 = std::chrono::steady_clock::now();
    do {
      u.Bar(&storm, &applied);
      ++storm_bars;
      busy_bars += u.coord->stats().running == workers;
    } while (u.coord->stats().in_flight > 0 && u.bar < 4000);
    storm_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    storm_applied = u.coord->stats().swapped + u.coord->stats().rejected - applied0;
  }
  const double q50 = Quantile(quiet, 0.5), q99 = Quantile(quiet, 0.99);
  const double s50 = Quantile(storm, 0.5), s99 = Quantile(storm, 0.99);
  state.counters["quiet_p50_ns"] = q50;
  state.counters["quiet_p99_ns"] = q99;
  state.counters["storm_p50_ns"] = s50;
  state.counters["storm_p99_ns"] = s99;
  state.counters["p99_ratio"] = s99 / q99;
  state.counters["storm_calls"] = static_cast<double>(storm.size());
  state.counters["storm_max_ns"] = *std::max_element(storm.begin(), storm.end());
  const double q999 = Quantile(quiet, 0.999), s999 = Quantile(storm, 0.999);
  state.counters["apply_p50_ns"] = Quantile(applied, 0.5);
  std::printf(
      "ingest OnBar latency, %d workers, %d symbols (timer included): quiet p50 %.0f p99 %.0f "
      "p99.9 %.0f ns; storm p50 %.0f p99 %.0f p99.9 %.0f ns over %zu calls (%.0f bars, %.2f s, "
      "all workers busy in %.0f bars, %llu jobs applied); p99 ratio storm/quiet %.2f; calls "
      "that applied a job: p50 %.0f p99 %.0f ns (%zu)\n",
      workers, kSymbols, q50, q99, q999, s50, s99, s999, storm.size(), storm_bars, storm_seconds,
      busy_bars, static_cast<unsigned long long>(storm_applied), s99 / q99,
      Quantile(applied, 0.5), Quantile(applied, 0.99), applied.size());
}
BENCHMARK(BM_IngestLatency)->Arg(1)->Arg(2)->Iterations(1)->Unit(benchmark::kMillisecond);

// ---- BM_EngineApply ----

class ManualClock : public Clock {
 public:
  int64_t NowNs() override { return now; }
  int64_t now = 0;
};

class DiscardSink : public UpdateSink {
 public:
  bool Send(absl::string_view, absl::string_view) override { return true; }
};

int64_t ThreadCpuNs() {
  timespec ts;
  clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
  return int64_t{ts.tv_sec} * 1'000'000'000 + ts.tv_nsec;
}

// Tagged returns of `sessions` sessions of `buckets` one-minute bars (the
// last `bars` of them), variance U-shaped over the session (the first and
// last bars about three times midday's), each session's level drawn anew.
void SeasonalSample(int buckets, int bars, uint64_t seed, std::vector<double>* r,
                    std::vector<int32_t>* tags) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> z(0, 1);
  std::lognormal_distribution<double> level(0, 0.3);
  r->clear();
  tags->clear();
  const int sessions = (bars + buckets - 1) / buckets + 1;
  for (int d = 0; d < sessions; ++d) {
    const double l = level(rng);
    for (int k = 0; k < buckets; ++k) {
      const double x = (k + 0.5) / buckets - 0.5;
      r->push_back(l * std::sqrt(1 + 8 * x * x) * z(rng));
      tags->push_back(SeasonalTag(k, k == 0, false));
    }
  }
  r->erase(r->begin(), r->end() - bars);
  tags->erase(tags->begin(), tags->end() - bars);
}

void BM_SeasonalEstimate(benchmark::State& state) {
  SeasonalOptions o;
  o.buckets = 510;
  std::vector<double> r;
  std::vector<int32_t> tags;
  SeasonalSample(o.buckets, 4000, 7, &r, &tags);
  // The prior: another symbol's estimate, as the pool would hold it.
  auto first = EstimateSeasonalProfile(absl::MakeConstSpan(r).first(2000),
                                       absl::MakeConstSpan(tags).first(2000), o, nullptr);
  const SeasonalProfilePtr prior = first.ok() ? first->profile : nullptr;
  if (prior == nullptr) {
    state.SkipWithError("no prior profile");
    return;
  }
  const auto window = absl::MakeConstSpan(r).last(2000);
  const auto window_tags = absl::MakeConstSpan(tags).last(2000);
  for (auto _ : state) {
    auto est = EstimateSeasonalProfile(window, window_tags, o, prior.get());
    if (!est.ok() || est->profile == nullptr) {
      state.SkipWithError("estimate failed");
      return;
    }
    benchmark::DoNotOptimize(est);
  }
}
BENCHMARK(BM_SeasonalEstimate)->Unit(benchmark::kMicrosecond);

// Args: symbols, and the updates' encoding (0 JSON, 1 binary: what
// scale_bench publishes). Every symbol starts on a stored GARCH(1,1) model (the law of
// its simulated returns), so each job is a warm re-estimation, and falls due
// every 3 bars; between the due bar and the next one the jobs are handed to the
// workers (clock ticks, SubmitDeferred) and the bench waits for all of them,
// so the next bar close applies one finished job per symbol. Reported: the
// ingest thread's CPU time (and wall time) of that clock tick minus the next
// one's (same bars closed, nothing applied), per applied job.
void BM_EngineApply(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const bool binary = state.range(1) != 0;
  constexpr int kWindow = 2000;
  constexpr int64_t kMin = 60'000'000'000;
  constexpr int64_t kGrace = 300'000'000;  // clock tick after a minute's end
  const std::string toml = absl::StrCat(R"(
[model]
mean = "constant"
variance = "garch"
shock_lags = 1
variance_lags = 1
innovations = "gaussian"
[model.params]
mu = 0.01
omega = 0.05
alpha_1 = 0.08
beta_1 = 0.9
[bars]
interval = "1m"
grace = "200ms"
[publish]
encoding = ")",
                                        binary ? "binary" : "json", R"("
[limits]
max_symbols = )",
                                        n, R"(
[refit]
every_bars = 3
every_seconds = 0
window = )",
                                        kWindow, "\nmin_bars = ", kWindow, R"(
workers = 2
reidentify_every = 0
jitter_fraction = 0
queue_capacity = )",
                                        n, "\n");
  auto config = ParseEngineConfig(toml, "refit_bench");
  if (!config.ok()) {
    state.SkipWithError(std::string(config.status().message()).c_str());
    return;
  }
  ManualClock clock;
  DiscardSink sink;
  auto core = *IngestCore::Create(*config, &sink, &clock);
  ServiceOptions so;
  so.mode = RefitMode::kLive;
  std::vector<std::vector<double>> returns;
  std::vector<double> logp(static_cast<size_t>(n), std::log(100.0));
  std::vector<std::string> names;
  for (int k = 0; k < n; ++k) {
    names.push_back("APL" + std::to_string(k));
    StoredModel m;
    m.symbol = names.back();
    m.version = 1;
    m.params = Truth();
    so.initial_models.push_back(std::move(m));
    // Returns in percent, as Truth() is scaled (omega 0.05); prices move by
    // r / 100 in logs.
    returns.push_back(Sim(kWindow + 3000, 5000 + k));
  }
  auto services = *EngineServices::Attach(core.get(), *config, so);
  int64_t minute = 0;
  Tick t;
  t.kind = Tick::kPrice;
  // One tick per symbol inside the minute, then the clock tick that closes
  // every bar; returns that tick's thread CPU and wall time (ns).
  auto close_minute = [&](int64_t* cpu_ns, int64_t* wall_ns) {
    const int64_t start = minute * kMin;
    clock.now = start + kMin / 2;
    for (int k = 0; k < n; ++k) {
      const auto& r = returns[static_cast<size_t>(k)];
      logp[static_cast<size_t>(k)] += r[static_cast<size_t>(minute) % r.size()] / 100;
      t.symbol.assign(names[static_cast<size_t>(k)]);
      t.t_ns = clock.now;
      t.value = std::exp(logp[static_cast<size_t>(k)]);
      core->OnTick(t);
    }
    clock.now = start + kMin + kGrace;
    const int64_t c0 = ThreadCpuNs();
    const auto w0 = std::chrono::steady_clock::now();
    core->OnClock(clock.now);
    *wall_ns = std::chrono::duration_cast<std::chrono::nanoseconds>(
                   std::chrono::steady_clock::now() - w0)
                   .count();
    *cpu_ns = ThreadCpuNs() - c0;
    ++minute;
  };
  int64_t cpu = 0, wall = 0;
  // Fill the windows (the first tick of a symbol opens its bar: one more).
  while (services->refit_stats().due == 0) close_minute(&cpu, &wall);
  double apply_cpu = 0, quiet_cpu = 0, apply_wall = 0, quiet_wall = 0;
  uint64_t applied = 0, swapped = 0, closes = 0;
  for (auto _ : state) {
    // The due bar just closed: hand every job to the workers, wait for them.
    // One snapshot per check: two stats reads can both miss a job a worker
    // picks up between them.
    for (RefitStats w = services->refit_stats(); w.queued + w.running > 0;
         w = services->refit_stats()) {
      core->OnClock(clock.now);  // SubmitDeferred
      std::this_thread::sleep_for(std::chrono::milliseconds(1));
    }
    const RefitStats s0 = services->refit_stats();
    close_minute(&cpu, &wall);  // every symbol applies its job
    const RefitStats s1 = services->refit_stats();
    apply_cpu += static_cast<double>(cpu);
    apply_wall += static_cast<double>(wall);
    close_minute(&cpu, &wall);  // nothing to apply
    quiet_cpu += static_cast<double>(cpu);
    quiet_wall += static_cast<double>(wall);
    applied += (s1.swapped + s1.rejected) - (s0.swapped + s0.rejected);
    swapped += s1.swapped - s0.swapped;
    ++closes;
    const uint64_t due0 = services->refit_stats().due;
    close_minute(&cpu, &wall);  // due again
    if (services->refit_stats().due == due0) {
      state.SkipWithError("the third bar was not due");
      return;
    }
  }
  const double per_apply_cpu = (apply_cpu - quiet_cpu) / static_cast<double>(applied);
  const double per_apply_wall = (apply_wall - quiet_wall) / static_cast<double>(applied);
  state.counters["apply_cpu_us"] = per_apply_cpu / 1e3;
  state.counters["apply_wall_us"] = per_apply_wall / 1e3;
  state.counters["quiet_bar_cpu_us"] = quiet_cpu / static_cast<double>(closes * n) / 1e3;
  state.counters["applied"] = static_cast<double>(applied);
  state.counters["swapped"] = static_cast<double>(swapped);
  std::printf(
      "engine apply, %d symbols, %s updates, %llu closes: ingest CPU per applied job %.2f us "
      "(wall %.2f us); a bar close without one %.2f us CPU per symbol; %llu applied, %llu "
      "swapped\n",
      n, binary ? "binary" : "JSON", static_cast<unsigned long long>(closes), per_apply_cpu / 1e3,
      per_apply_wall / 1e3, quiet_cpu / static_cast<double>(closes * n) / 1e3,
      static_cast<unsigned long long>(applied), static_cast<unsigned long long>(swapped));
}
// 30 closes that apply a job per symbol: 30,000 applications a run.
BENCHMARK(BM_EngineApply)
    ->Args({1000, 0})
    ->Args({1000, 1})
    ->Iterations(30)
    ->Unit(benchmark::kMillisecond);
// AFTERSHOCK_APPLY_SYMBOLS=N adds BM_EngineApply/N/1: a universe-wide close at
// scale_bench's sizes (binary updates), where what an application touches is out of cache (the
// workers' fits run between the closes). About 1 minute at N = 20,000.
const bool kApplyAtScale = [] {
  const char* e = std::getenv("AFTERSHOCK_APPLY_SYMBOLS");
  const int n = e != nullptr ? std::atoi(e) : 0;
  if (n > 0) {
    benchmark::RegisterBenchmark("BM_EngineApply", BM_EngineApply)
        ->Args({n, 1})
        ->Iterations(3)
        ->Unit(benchmark::kMillisecond);
  }
  return true;
}();

}  // namespace
}  // namespace aftershock

BENCHMARK_MAIN();
