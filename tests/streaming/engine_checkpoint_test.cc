// Engine checkpoints (engine_checkpoint.h): a restored core + services
// continue bit for bit as the saved ones, pending refit jobs included; bad
// input is refused with a status naming the field, never a partial restore;
// the configuration check names the section that changed.
#include "aftershock/engine_checkpoint.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/clock.h"
#include "streaming/engine_test_util.h"

namespace aftershock {
namespace {

using testing::CollectingSink;
using testing::ParseConfigOrDie;

constexpr int64_t kDay0 = 1772409600000000000;  // 2026-03-02 00:00Z

constexpr const char* kToml = R"(
[bars]
interval = "1m"
session = { start = "08:00", end = "09:30" }
[warmup]
start_bars = 8
[refit]
every_bars = 30
window = 200
min_bars = 50
reidentify_every = 0
holdout_bars = 20
apply_lag_bars = 12
[seasonality]
enabled = true
min_sessions = 2
[alerts]
shock_z = 2.5
)";

// Price ticks of two symbols, two ticks a minute each, 08:00-09:30Z on three
// days.
std::vector<Tick> Ticks() {
  std::mt19937_64 rng(7);
  std::normal_distribution<double> norm(0.0, 1.0);
  std::vector<Tick> out;
  double price[2] = {80, 30};
  for (int day = 0; day < 3; ++day) {
    for (int m = 0; m < 90; ++m) {
      for (int sec : {10, 40}) {
        for (int s = 0; s < 2; ++s) {
          Tick t;
          t.symbol.assign(s == 0 ? "GANNET.A" : "PUFFIN.B");
          t.t_ns = kDay0 + day * kNanosPerDay + (8 * 60 + m) * 60 * kNanosPerSecond +
                   sec * kNanosPerSecond;
          t.kind = Tick::kPrice;
          price[s] *= std::exp(0.0008 * (1.0 + (m < 10 || m > 80)) * norm(rng));
          t.value = price[s];
          out.push_back(t);
        }
      }
    }
  }
  return out;
}

// A core with services in replay mode, fed like `aftershock replay` (a clock
// sweep every 100 ms of event time).
struct Engine {
  CollectingSink sink;
  ManualClock clock;
  std::unique_ptr<IngestCore> core;
  std::unique_ptr<EngineServices> services;
  int64_t next_sweep = -1;

  explicit Engine(const EngineConfig& config, int workers = 1) {
    auto c = IngestCore::Create(config, &sink, &clock);
    REQUIRE(c.ok());
    core = *std::move(c);
    ServiceOptions so;
    so.mode = RefitMode::kReplay;
    so.workers = workers;
    auto s = EngineServices::Attach(core.get(), config, so);
    REQUIRE(s.ok());
    services = *std::move(s);
  }
  void Feed(const Tick& t) {
    if (next_sweep < 0) next_sweep = t.t_ns + 100000000;
    if (t.t_ns >= next_sweep) {
      clock.Set(t.t_ns);
      core->OnClock(t.t_ns);
      next_sweep = t.t_ns + 100000000;
    }
    core->OnTick(t);
  }
};

std::string Bytes(const Engine& e) {
  absl::StatusOr<std::string> b = SerializeEngineSnapshot(
      CaptureEngineState(*e.core, e.services.get(), 1), e.core->config());
  REQUIRE(b.ok());
  return *b;
}

TEST_CASE("a restored engine continues bit for bit, refit jobs in flight included",
          "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  const std::vector<Tick> ticks = Ticks();
  int with_jobs = 0;
  for (size_t split : {size_t{301}, size_t{500}, size_t{733}, size_t{1001}}) {
    INFO("split " << split);
    Engine a(config);
    for (size_t i = 0; i < split; ++i) a.Feed(ticks[i]);
    if (a.services->refit_stats().in_flight > 0) ++with_jobs;
    absl::StatusOr<Checkpoint> cp = ParseCheckpoint(Bytes(a));
    REQUIRE(cp.ok());
    CHECK(cp->header().symbol_count == 2);
    Engine b(config, /*workers=*/2);
    const absl::Status restored = RestoreEngineState(*cp, config, b.core.get(), b.services.get());
    INFO(restored.ToString());
    REQUIRE(restored.ok());
    b.next_sweep = a.next_sweep;
    CHECK(b.services->refit_stats().in_flight == a.services->refit_stats().in_flight);
    // A second save of the restored engine is the same file.
    CHECK(Bytes(b) == Bytes(a));
    const size_t before = a.sink.messages.size();
    for (size_t i = split; i < ticks.size(); ++i) {
      a.Feed(ticks[i]);
      b.Feed(ticks[i]);
    }
    a.core->CloseAllOpenBars();
    b.core->CloseAllOpenBars();
    REQUIRE(a.sink.messages.size() - before == b.sink.messages.size());
    int models = 0;
    for (size_t k = 0; k < b.sink.messages.size(); ++k) {
      const auto& x = a.sink.messages[before + k];
      const auto& y = b.sink.messages[k];
      REQUIRE(x.topic == y.topic);
      REQUIRE(x.body == y.body);
      models += y.topic[0] == 'm';
    }
    CHECK(models > 0);
    CHECK(a.core->counters().updates_out == b.core->counters().updates_out);
    CHECK(a.services->refit_stats().swapped == b.services->refit_stats().swapped);
  }
  CHECK(with_jobs >= 1);
}

TEST_CASE("every truncation of the state is refused and leaves no symbol behind",
          "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  const std::vector<Tick> ticks = Ticks();
  Engine a(config);
  for (size_t i = 0; i < 700; ++i) a.Feed(ticks[i]);
  const EngineSnapshot snap = CaptureEngineState(*a.core, a.services.get(), 1);
  for (size_t n = 0; n < snap.core.size(); n += 13) {
    Engine b(config);
    const absl::Status s = b.core->RestoreState(absl::string_view(snap.core).substr(0, n));
    REQUIRE(!s.ok());
    REQUIRE(b.core->num_symbols() == 0);
  }
  Engine b(config);
  const absl::Status restored = b.core->RestoreState(snap.core);
  INFO(restored.ToString());
  REQUIRE(restored.ok());
  CHECK(!b.core->RestoreState(snap.core).ok());  // not into a core with symbols
  for (size_t n = 0; n < snap.services.size(); n += 29) {
    Engine c(config);
    REQUIRE(c.core->RestoreState(snap.core).ok());
    REQUIRE(!c.services->RestoreState(absl::string_view(snap.services).substr(0, n)).ok());
  }
}

TEST_CASE("flipped bits in the state: refused or restored, never a crash", "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  const std::vector<Tick> ticks = Ticks();
  Engine a(config);
  for (size_t i = 0; i < 733; ++i) a.Feed(ticks[i]);
  const EngineSnapshot snap = CaptureEngineState(*a.core, a.services.get(), 1);
  std::mt19937_64 rng(99);
  int refused = 0, restored = 0;
  for (int trial = 0; trial < 300; ++trial) {
    const bool core_part = trial % 2 == 0;
    std::string core = snap.core, services = snap.services;
    std::string& target = core_part ? core : services;
    const size_t pos = rng() % target.size();
    target[pos] = static_cast<char>(target[pos] ^ (1 << (rng() % 8)));
    Engine b(config);
    absl::Status s = b.core->RestoreState(core);
    if (s.ok()) s = b.services->RestoreState(services);
    if (!s.ok()) {
      ++refused;
      continue;
    }
    // Whatever passed validation must run (the checksums catch real damage).
    ++restored;
    for (size_t i = 733; i < 800; ++i) b.Feed(ticks[i]);
    b.core->CloseAllOpenBars();
  }
  CHECK(refused > 0);
  CHECK(restored > 0);
}

TEST_CASE("restored values are validated, the error names the symbol and field",
          "[streaming][checkpoint]") {
  SECTION("parameters breaking the constraints") {
    ModelParams p;
    p.spec = ModelSpec{};  // constant mean, GARCH(1,1), normal
    p.values = {0.0, 1e-6, 0.5, 0.6};  // persistence 1.1
    StateWriter w;
    SaveModelParams(p, &w);
    StateReader r(w.data());
    RestoreModelParams(&r, "symbol KESTREL.C model");
    REQUIRE(!r.ok());
    CHECK(r.status().code() == absl::StatusCode::kDataLoss);
    CHECK(std::string(r.status().message()).find("symbol KESTREL.C model parameters") !=
          std::string::npos);
  }
  SECTION("a non-finite filter state") {
    FilterState st;
    st.var.next_variance = std::nan("");
    StateWriter w;
    SaveFilterState(st, &w);
    StateReader r(w.data());
    RestoreFilterState(&r, "symbol KESTREL.C");
    REQUIRE(!r.ok());
    CHECK(std::string(r.status().message()).find("symbol KESTREL.C filter state") !=
          std::string::npos);
  }
  SECTION("a profile of another session length") {
    auto prof = SeasonalProfile::Create(std::vector<double>(90, 1.0), 0, 3);
    REQUIRE(prof.ok());
    StateWriter w;
    SaveSeasonalProfile(&*prof, &w);
    SeasonalOptions o;
    o.buckets = 120;
    StateReader r(w.data());
    CHECK(RestoreSeasonalProfile(&r, o, "symbol KESTREL.C profile") == nullptr);
    REQUIRE(!r.ok());
    CHECK(std::string(r.status().message()).find("the checkpoint has 90, the session has 120") !=
          std::string::npos);
  }
}

TEST_CASE("the configuration check: what changes the state refuses, thresholds do not",
          "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  Engine a(config);
  const std::vector<Tick> ticks = Ticks();
  for (size_t i = 0; i < 400; ++i) a.Feed(ticks[i]);
  absl::StatusOr<Checkpoint> cp = ParseCheckpoint(Bytes(a));
  REQUIRE(cp.ok());
  CHECK(cp->header().config_fingerprint == ConfigFingerprint(config));

  EngineConfig thresholds = config;
  thresholds.alerts.shock_z = 5;
  thresholds.refit.holdout_margin = 0.5;
  thresholds.refit.workers = 3;
  CHECK(ConfigFingerprint(thresholds) == ConfigFingerprint(config));
  Engine b(thresholds);
  const absl::Status restored = RestoreEngineState(*cp, thresholds, b.core.get(), b.services.get());
  INFO(restored.ToString());
  CHECK(restored.ok());

  EngineConfig horizons = config;
  horizons.outputs.horizons = {1, 10};
  const absl::Status s = CheckCheckpointConfig(*cp, horizons);
  INFO(s.ToString());
  CHECK(s.code() == absl::StatusCode::kFailedPrecondition);
  CHECK(std::string(s.message()).find("[outputs] (was 'horizons = 1,5,20', now 'horizons = 1,10')") !=
        std::string::npos);

  EngineConfig window = config;
  window.refit.window = 300;
  const absl::Status w = CheckCheckpointConfig(*cp, window);
  CHECK(std::string(w.message()).find("[refit] (was 'window = 200', now 'window = 300')") !=
        std::string::npos);
  Engine c(window);
  CHECK(!RestoreEngineState(*cp, window, c.core.get(), c.services.get()).ok());
  CHECK(c.core->num_symbols() == 0);
}

}  // namespace
}  // namespace aftershock

namespace aftershock {
namespace {

// A live engine's checkpoints (EngineCapture, refilled in place at each
// checkpoint: only what changed is copied) against the whole capture
// (CaptureEngineState) at the same points: the files must be the same bytes.
// `gaps` are the ticks between checkpoints, cycled; a gap of more bars than
// the window makes the window mirrors copy everything again.
// With `slice` > 0 each live checkpoint is captured in slices of that many
// symbols, all in the same gap (no input between them).
void CheckLiveCaptureMatchesWhole(const EngineConfig& config, const std::vector<size_t>& gaps,
                                  bool expect_jobs, int slice = 0) {
  const std::vector<Tick> ticks = Ticks();
  Engine e(config);
  EngineCapture live(e.core.get(), e.services.get());
  live.Capture(1);  // as Checkpointer::Create: before any symbol
  std::string file;
  int compared = 0, with_jobs = 0;
  size_t next = 0;
  for (size_t i = 0, g = 0; i < ticks.size(); ++i) {
    e.Feed(ticks[i]);
    if (i != next) continue;
    next += gaps[g++ % gaps.size()];
    INFO("after tick " << i);
    if (slice > 0) {
      live.BeginSlices(ticks[i].t_ns);
      CHECK(live.slicing());
      // An incomplete capture is not serialized.
      CHECK(live.Serialize(config, &file).code() == absl::StatusCode::kFailedPrecondition);
      int slices = 1;
      while (!live.CaptureSlice(slice)) ++slices;
      CHECK(slices == (e.core->num_symbols() + slice - 1) / slice);
      CHECK_FALSE(live.slicing());
    } else {
      live.Capture(ticks[i].t_ns);
    }
    REQUIRE(live.Serialize(config, &file).ok());
    const absl::StatusOr<std::string> whole = SerializeEngineSnapshot(
        CaptureEngineState(*e.core, e.services.get(), ticks[i].t_ns), config);
    REQUIRE(whole.ok());
    REQUIRE(file.size() == whole->size());
    REQUIRE(file == *whole);
    ++compared;
    if (e.services->refit_stats().in_flight > 0) ++with_jobs;
  }
  CHECK(compared >= 10);
  if (expect_jobs) CHECK(with_jobs >= 1);
  // And the live file restores into an engine that saves the same bytes.
  absl::StatusOr<Checkpoint> cp = ParseCheckpoint(file);
  REQUIRE(cp.ok());
  Engine b(config);
  REQUIRE(RestoreEngineState(*cp, config, b.core.get(), b.services.get()).ok());
  const absl::StatusOr<std::string> again = SerializeEngineSnapshot(
      CaptureEngineState(*b.core, b.services.get(), cp->header().created_ns), config);
  REQUIRE(again.ok());
  CHECK(*again == file);
}

TEST_CASE("a live capture refilled at each checkpoint writes the whole capture's bytes",
          "[streaming][checkpoint]") {
  SECTION("refits and seasonality on, jobs in flight, bars open at the checkpoints") {
    CheckLiveCaptureMatchesWhole(ParseConfigOrDie(kToml), {1, 7, 40, 3, 101, 17}, true);
  }
  SECTION("a window shorter than the gaps: the mirrors wrap and copy afresh") {
    EngineConfig c = ParseConfigOrDie(std::string(kToml) + R"(
)");
    c.refit.window = 60;
    c.refit.min_bars = 40;
    c.refit.every_bars = 15;
    // 300 ticks between two checkpoints are about 150 bars a symbol.
    CheckLiveCaptureMatchesWhole(c, {5, 300, 2, 61, 119, 9}, true);
  }
  SECTION("seasonality without refits: the services' own tagged windows") {
    EngineConfig c = ParseConfigOrDie(kToml);
    c.refit.every_bars = 0;
    c.refit.every_seconds = 0;
    c.refit.window = 50;
    REQUIRE(c.SeasonalityActive());
    CheckLiveCaptureMatchesWhole(c, {3, 77, 1, 130}, false);
  }
}

TEST_CASE("a capture in slices without input between them is the one-pause capture's bytes",
          "[streaming][checkpoint]") {
  SECTION("one symbol a slice, refits and seasonality on, jobs in flight") {
    CheckLiveCaptureMatchesWhole(ParseConfigOrDie(kToml), {1, 7, 40, 3, 101, 17}, true, 1);
  }
  SECTION("a slice larger than the symbols: one slice") {
    CheckLiveCaptureMatchesWhole(ParseConfigOrDie(kToml), {5, 300, 2, 61}, true, 500);
  }
  SECTION("seasonality without refits") {
    EngineConfig c = ParseConfigOrDie(kToml);
    c.refit.every_bars = 0;
    c.refit.every_seconds = 0;
    c.refit.window = 50;
    CheckLiveCaptureMatchesWhole(c, {3, 77, 1, 130}, false, 1);
  }
}

// Tick bars of six symbols, refits on, nothing shared between the symbols
// (no seasonal pool, no group models): a symbol's updates depend on its own
// ticks only, so each symbol of a capture in slices can be checked against
// the uninterrupted run from its own slice on.
constexpr const char* kSlicedToml = R"(
[bars]
interval = "0s"
[warmup]
start_bars = 4
[refit]
every_bars = 20
window = 60
min_bars = 30
reidentify_every = 0
holdout_bars = 10
apply_lag_bars = 5
group_models = false
[alerts]
shock_z = 2.5
)";

std::vector<Tick> SixSymbolTicks(int rounds) {
  std::mt19937_64 rng(23);
  std::normal_distribution<double> norm(0.0, 1.0);
  std::vector<Tick> out;
  for (int k = 0; k < rounds; ++k) {
    for (int s = 0; s < 6; ++s) {
      Tick t;
      t.symbol.assign(absl::StrCat("HERON.", s));
      t.t_ns = kDay0 + (static_cast<int64_t>(k) * 6 + s) * kNanosPerSecond;
      t.kind = Tick::kReturn;
      t.value = 0.01 * (1.0 + 0.2 * s) * norm(rng) * (k % 50 < 10 ? 2.5 : 1.0);
      out.push_back(t);
    }
  }
  return out;
}

TEST_CASE("a capture in slices holds each symbol exactly as of its own slice",
          "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kSlicedToml);
  const std::vector<Tick> ticks = SixSymbolTicks(400);
  // Slices of two symbols after ticks 899, 1000 and 1130 (each gap also
  // updates the symbols captured before it and those not captured yet).
  const size_t at[3] = {900, 1001, 1131};
  Engine a(config);
  std::vector<size_t> emitted_by;  // per message of a: the tick that emitted it
  auto feed = [&](size_t i) {
    a.Feed(ticks[i]);
    emitted_by.resize(a.sink.messages.size(), i);
  };
  EngineCapture sliced(a.core.get(), a.services.get());
  sliced.Capture(1);  // as Checkpointer::Create
  std::string one_pause_first;  // the engine captured whole at the first slice
  size_t i = 0;
  for (; i < at[0]; ++i) feed(i);
  sliced.BeginSlices(ticks[i - 1].t_ns);
  REQUIRE_FALSE(sliced.CaptureSlice(2));
  one_pause_first = Bytes(a);
  for (; i < at[1]; ++i) feed(i);
  REQUIRE_FALSE(sliced.CaptureSlice(2));
  for (; i < at[2]; ++i) feed(i);
  REQUIRE(sliced.CaptureSlice(2));
  std::string file;
  REQUIRE(sliced.Serialize(config, &file).ok());
  // Not one cut: the first slice's symbols moved on since, so the file is
  // neither the engine at the first slice nor at the last.
  CHECK(file != one_pause_first);
  CHECK(file != Bytes(a));
  // Symbol HERON.s was captured after tick at[s / 2] - 1.
  auto captured_at = [&](const Tick& t) { return at[(t.symbol.view().back() - '0') / 2]; };
  // The restored engine, fed each symbol's ticks after its slice, publishes
  // for each symbol exactly what the uninterrupted engine did after it.
  absl::StatusOr<Checkpoint> cp = ParseCheckpoint(file);
  REQUIRE(cp.ok());
  Engine b(config, /*workers=*/2);
  const absl::Status restored = RestoreEngineState(*cp, config, b.core.get(), b.services.get());
  INFO(restored.ToString());
  REQUIRE(restored.ok());
  for (; i < ticks.size(); ++i) feed(i);
  for (size_t k = at[0]; k < ticks.size(); ++k) {
    if (k >= captured_at(ticks[k])) b.Feed(ticks[k]);
  }
  int models = 0;
  for (int s = 0; s < 6; ++s) {
    const std::string name = absl::StrCat("HERON.", s);
    std::vector<const testing::CollectingSink::Message*> want, got;
    for (size_t m = 0; m < a.sink.messages.size(); ++m) {
      const auto& msg = a.sink.messages[m];
      if (msg.topic.substr(2) == name && emitted_by[m] >= at[s / 2]) want.push_back(&msg);
    }
    for (const auto& msg : b.sink.messages) {
      if (msg.topic.substr(2) == name) got.push_back(&msg);
    }
    INFO(name);
    REQUIRE(want.size() == got.size());
    CHECK(want.size() > 100);
    for (size_t k = 0; k < want.size(); ++k) {
      REQUIRE(want[k]->topic == got[k]->topic);
      REQUIRE(want[k]->body == got[k]->body);
      models += got[k]->topic[0] == 'm';
    }
  }
  CHECK(models >= 6);  // refits applied after the restore, for every symbol
}

// Dirty tracking (state_capture.h, FilterBank::cold_stamp): a capture kept
// from one checkpoint to the next copies again only what changed (the
// filters' higher lags when the bank rewrote them, the returns pushed since,
// pending jobs when new) and reuses its copies of the rest. Its file must be
// byte for byte the file of a capture made from scratch at the same point,
// whichever symbols moved in between: all, some, none; with models whose
// orders are all 1 (higher lags never rewritten by a step) and of order 2
// (rewritten by every step); in one pause and in slices.
TEST_CASE("a checkpoint reusing unchanged symbols' copies equals one written from scratch",
          "[streaming][checkpoint]") {
  for (const char* model : {"", "[model]\nshock_lags = 2\n"}) {
    for (int slice : {0, 2}) {
      INFO(model << "slice " << slice);
      EngineConfig config = ParseConfigOrDie(absl::StrCat(kSlicedToml, model));
      // Windows long enough for fits (at least 100 observations after the
      // holdout), so that models are swapped in along the way.
      config.refit.window = 150;
      config.refit.min_bars = 120;
      REQUIRE(config.model.spec.arch_order == (*model == 0 ? 1 : 2));
      const std::vector<Tick> all = SixSymbolTicks(600);
      Engine e(config);
      EngineCapture kept(e.core.get(), e.services.get());
      kept.Capture(1);  // as Checkpointer::Create: before any symbol
      std::string file, scratch_file;
      int checkpoints = 0, quiet = 0;
      for (size_t i = 0; i < all.size(); ++i) {
        // Phases of 100 rounds: every symbol ticks; only HERON.0 and .1; none
        // but HERON.5; every symbol again...
        const int phase = static_cast<int>(i / 6 / 100) % 3;
        const int s = all[i].symbol.view().back() - '0';
        if (phase == 1 && s > 1) continue;
        if (phase == 2 && s != 5) continue;
        e.Feed(all[i]);
        if (i % 6 != 5 || (i / 6) % 7 != 0) continue;
        // A checkpoint, and at every other one a second with no input since.
        for (int again = 0; again < 1 + (checkpoints % 2); ++again) {
          const int64_t at = all[i].t_ns + again;
          if (slice > 0) {
            kept.BeginSlices(at);
            while (!kept.CaptureSlice(slice)) {
            }
          } else {
            kept.Capture(at);
          }
          const uint64_t kept_copied = kept.copied_bytes();
          REQUIRE(kept.Serialize(config, &file).ok());
          EngineCapture scratch(e.core.get(), e.services.get());
          scratch.Capture(at);
          REQUIRE(scratch.Serialize(config, &scratch_file).ok());
          INFO("after tick " << i << (again ? ", no input since the last checkpoint" : ""));
          REQUIRE(file.size() == scratch_file.size());
          REQUIRE(file == scratch_file);
          // Nothing moved since the last checkpoint: the kept capture copied
          // the hot values only (bar state, lag 0, counters), under half of
          // what the fresh one copied.
          if (again == 1) {
            CHECK(kept_copied * 2 < scratch.copied_bytes());
            ++quiet;
          }
          ++checkpoints;
        }
      }
      CHECK(checkpoints >= 30);
      CHECK(quiet >= 10);
      const RefitStats rs = e.services->refit_stats();
      INFO("refits due " << rs.due << ", swapped " << rs.swapped << ", errors " << rs.refit_errors);
      CHECK(rs.swapped >= 6);  // models changed along the way
    }
  }
}

}  // namespace
}  // namespace aftershock
