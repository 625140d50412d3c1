// Checkpointer (checkpointer.h): periodic snapshots written in the background,
// restorable, counted in the metrics; a failed write is counted and named.
#include "aftershock/checkpointer.h"

#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <random>
#include <string>
#include <thread>

#include "absl/strings/str_cat.h"
#include "aftershock/checkpoint_file.h"
#include "streaming/engine_test_util.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::CollectingSink;
using testing::ParseConfigOrDie;

constexpr int64_t kDay0 = 1772409600000000000;  // 2026-03-02 00:00Z

constexpr const char* kToml = R"(
[bars]
interval = "1m"
session = { start = "08:00", end = "09:30" }
[refit]
every_bars = 25
window = 150
min_bars = 50
apply_lag_bars = 3
holdout_bars = 20
[seasonality]
enabled = true
min_sessions = 2
)";

struct Live {
  CollectingSink sink;
  ManualClock clock;  // wall clock of the checkpointer and the engine
  std::unique_ptr<IngestCore> core;
  std::unique_ptr<EngineServices> services;
  explicit Live(const EngineConfig& config) {
    auto c = IngestCore::Create(config, &sink, &clock);
    REQUIRE(c.ok());
    core = *std::move(c);
    ServiceOptions so;
    so.mode = RefitMode::kReplay;
    auto s = EngineServices::Attach(core.get(), config, so);
    REQUIRE(s.ok());
    services = *std::move(s);
  }
};

// Feeds two symbols' price ticks for `minutes` minutes of day 0 from 08:00,
// ticking the clock every 10 s of event time.
void Feed(Live* e, int minutes) {
  std::mt19937_64 rng(11);
  std::normal_distribution<double> norm(0.0, 1.0);
  double price[2] = {40, 90};
  for (int m = 0; m < minutes; ++m) {
    for (int sec = 0; sec < 60; sec += 10) {
      const int64_t t = kDay0 + (8 * 60 + m) * 60 * kNanosPerSecond + sec * kNanosPerSecond;
      e->clock.Set(t);
      e->core->OnClock(t);
      for (int s = 0; s < 2; ++s) {
        Tick tick;
        tick.symbol.assign(s == 0 ? "WREN.A" : "STOAT.B");
        tick.t_ns = t;
        tick.kind = Tick::kPrice;
        price[s] *= std::exp(0.001 * norm(rng));
        tick.value = price[s];
        e->core->OnTick(tick);
      }
    }
  }
}

TEST_CASE("periodic checkpoints are written in the background and restore", "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  const std::string dir = testing::ScratchDir("checkpointer_periodic");
  Live e(config);
  CheckpointerOptions o;
  o.path = dir + "/state.ckpt";
  o.every_seconds = 60;
  auto cp = Checkpointer::Create(o, config, e.core.get(), e.services.get(), &e.clock);
  REQUIRE(cp.ok());
  e.core->AddObserver(cp->get());
  Feed(&e, 80);  // 80 minutes of clock ticks: a snapshot due every minute
  REQUIRE((*cp)->WriteNow().ok());
  const CheckpointStats s = (*cp)->stats();
  // Every due snapshot was written or skipped (a write was in flight), plus the final one.
  CHECK(s.writes >= 2);
  CHECK(s.writes + s.skipped >= 79);
  CHECK(s.failures == 0);
  CHECK(s.last_bytes > 1000);
  std::string metrics;
  (*cp)->AppendPrometheus(&metrics);
  CHECK(metrics.find("aftershock_checkpoint_writes_total " + std::to_string(s.writes) + "\n") !=
        std::string::npos);
  CHECK(metrics.find("aftershock_checkpoint_last_size_bytes " + std::to_string(s.last_bytes)) !=
        std::string::npos);
  CHECK(metrics.find("aftershock_checkpoint_age_seconds 0\n") != std::string::npos);
  // The periodic snapshots were captured on the ingest thread and timed.
  CHECK(s.last_capture_seconds > 0);
  CHECK(metrics.find("# TYPE aftershock_checkpoint_last_capture_seconds gauge\n") !=
        std::string::npos);
  // /health members: no restore recorded yet, then the one recorded.
  std::string health;
  (*cp)->AppendHealthJson(&health);
  CHECK(health == absl::StrCat(",\"restored\":null,\"checkpoint\":{\"file\":\"", o.path,
                               "\",\"writes\":", s.writes, ",\"failures\":0,\"age_seconds\":0}"));
  (*cp)->SetRestored({2, 1.5, "old \"state\".ckpt"});
  health.clear();
  (*cp)->AppendHealthJson(&health);
  CHECK(health.rfind(",\"restored\":{\"symbols\":2,\"age_seconds\":1.5,\"file\":"
                     "\"old \\\"state\\\".ckpt\"},\"checkpoint\":{",
                     0) == 0);
  // The final file holds the engine as it is now.
  auto file = ReadCheckpointFile(o.path);
  REQUIRE(file.ok());
  CHECK(file->header().symbol_count == 2);
  Live restored(config);
  const absl::Status st = RestoreEngineState(*file, config, restored.core.get(),
                                             restored.services.get());
  INFO(st.ToString());
  REQUIRE(st.ok());
  CHECK(restored.core->counters().updates_out == e.core->counters().updates_out);
  for (int i = 0; i < 2; ++i) {
    CHECK(restored.core->filter_state(i).var.next_variance ==
          e.core->filter_state(i).var.next_variance);
    CHECK(restored.core->model(i).version() == e.core->model(i).version());
  }
}

TEST_CASE("periodic checkpoints in slices: one symbol a gap, restorable; shutdown captures at once",
          "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  const std::string dir = testing::ScratchDir("checkpointer_slices");
  Live e(config);
  CheckpointerOptions o;
  o.path = dir + "/state.ckpt";
  o.every_seconds = 60;
  o.slice_symbols = 1;
  o.slice_spacing_seconds = 15;  // a slice every other clock tick (they are 10 s apart)
  CheckpointerOptions bad = o;
  bad.slice_symbols = -1;
  CHECK(Checkpointer::Create(bad, config, e.core.get(), e.services.get(), &e.clock)
            .status()
            .code() == absl::StatusCode::kInvalidArgument);
  auto cp = Checkpointer::Create(o, config, e.core.get(), e.services.get(), &e.clock);
  REQUIRE(cp.ok());
  e.core->AddObserver(cp->get());
  Feed(&e, 80);
  // Starts a snapshot at a clock tick 61 s on: due, unless a write is still
  // in flight (then skipped: wait and try again).
  auto start_snapshot = [&] {
    for (int k = 0; k < 500; ++k) {
      const uint64_t before = (*cp)->stats().skipped;
      const int64_t t = e.clock.NowNs() + 61 * kNanosPerSecond;
      e.clock.Set(t);
      e.core->OnClock(t);
      if ((*cp)->stats().skipped == before) return true;
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    return false;
  };
  auto tick = [&](int seconds) {
    const int64_t t = e.clock.NowNs() + seconds * kNanosPerSecond;
    e.clock.Set(t);
    e.core->OnClock(t);
  };
  REQUIRE(start_snapshot());  // the first slice: symbol 0
  const uint64_t writes = (*cp)->stats().writes;  // no write in flight: the token is ours
  tick(10);  // 10 s < the spacing: no slice
  tick(10);  // the second slice: symbol 1; complete, handed to the writer
  for (int k = 0; k < 500 && (*cp)->stats().writes == writes; ++k) {
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  CheckpointStats s = (*cp)->stats();
  REQUIRE(s.writes == writes + 1);
  // Two symbols, one a slice: two pauses.
  CHECK(s.last_capture_slices == 2);
  CHECK(s.last_capture_seconds > 0);
  CHECK(s.last_capture_total_seconds >= s.last_capture_seconds);
  CHECK(s.slice_fallbacks == 0);
  std::string metrics;
  (*cp)->AppendPrometheus(&metrics);
  CHECK(metrics.find("aftershock_checkpoint_last_capture_slices 2\n") != std::string::npos);
  {
    // The file in slices restores.
    auto file = ReadCheckpointFile(o.path);
    REQUIRE(file.ok());
    CHECK(file->header().symbol_count == 2);
    Live restored(config);
    const absl::Status st =
        RestoreEngineState(*file, config, restored.core.get(), restored.services.get());
    INFO(st.ToString());
    CHECK(st.ok());
  }
  // Shut down in the middle of a snapshot: WriteNow captures at once.
  REQUIRE(start_snapshot());
  REQUIRE((*cp)->WriteNow().ok());
  s = (*cp)->stats();
  CHECK(s.last_capture_slices == 1);
  auto file = ReadCheckpointFile(o.path);
  REQUIRE(file.ok());
  Live restored(config);
  REQUIRE(RestoreEngineState(*file, config, restored.core.get(), restored.services.get()).ok());
  for (int i = 0; i < 2; ++i) {
    CHECK(restored.core->filter_state(i).var.next_variance ==
          e.core->filter_state(i).var.next_variance);
    CHECK(restored.core->symbol_ticks(i) == e.core->symbol_ticks(i));
  }
}

TEST_CASE("a failed checkpoint write is counted and named; the engine goes on",
          "[streaming][checkpoint]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  Live e(config);
  CheckpointerOptions o;
  o.path = testing::ScratchDir("checkpointer_fail") + "/no/such/dir/state.ckpt";
  o.every_seconds = 0;  // only WriteNow
  auto cp = Checkpointer::Create(o, config, e.core.get(), e.services.get(), &e.clock);
  REQUIRE(cp.ok());
  Feed(&e, 5);
  const absl::Status st = (*cp)->WriteNow();
  CHECK(!st.ok());
  CHECK((*cp)->stats().failures == 1);
  CHECK((*cp)->stats().writes == 0);
  CHECK((*cp)->last_error().find("no/such/dir") != std::string::npos);
  CheckpointerOptions bad = o;
  bad.path = "";
  CHECK(!Checkpointer::Create(bad, config, e.core.get(), nullptr, &e.clock).ok());
}

}  // namespace
}  // namespace aftershock
