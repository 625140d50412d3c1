// The engine's clock tick when it closes no bar (PRODUCT.md P4, issue 13):
// every clock period (100 ms by default) the ingest thread looks for bars to
// close over every symbol (IngestCore::OnClock) and runs the stale-feed rule
// over every symbol (EngineServices' OnClock). Ticks that arrive meanwhile
// wait, so at a large universe this is a latency floor the scale benchmark's
// ingest p99 sees.
//   BM_ClockTick/symbols:N/services:S/ticks:K
//       N symbols with an open bar each; K of them (a rotating set) get a tick
//       between two clock ticks, then one clock tick inside the minute (no bar
//       closes). S = 0: the core alone; 1: with EngineServices attached (alert
//       rules, stale-feed check; refits off), the check skipping symbols that
//       cannot alert yet (the default); 2: the same checking every symbol
//       (ServiceOptions::stale_check_every_symbol). Reported: CPU per clock
//       tick (the K ticks excluded) and per symbol.
#include <benchmark/benchmark.h>

#include <cmath>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/update_sink.h"

namespace aftershock {
namespace {

class ManualClock : public Clock {
 public:
  int64_t NowNs() override { return now; }
  int64_t now = 0;
};

class DiscardSink : public UpdateSink {
 public:
  bool Send(absl::string_view, absl::string_view) override { return true; }
};

// Clock ticks per run: 5 minutes of the engine's 100 ms clock.
constexpr int kIterations = 3000;

void BM_ClockTick(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const int services_mode = static_cast<int>(state.range(1));
  const int ticks_between = static_cast<int>(state.range(2));
  constexpr int64_t kMin = 60'000'000'000;
  constexpr int64_t kHour = 60 * kMin;
  constexpr int64_t kTick = 100'000'000;  // the engine's default clock period
  const std::string toml = absl::StrCat(R"(
[model]
mean = "constant"
variance = "garch"
shock_lags = 1
variance_lags = 1
innovations = "gaussian"
[model.params]
mu = 0.0
omega = 2e-6
alpha_1 = 0.08
beta_1 = 0.9
[bars]
interval = "1h"
grace = "200ms"
[alerts]
stale_seconds = 3600
[limits]
max_symbols = )",
                                        n, "\n[refit]\nevery_bars = 0\n");
  auto config = ParseEngineConfig(toml, "clock_bench");
  if (!config.ok()) {
    state.SkipWithError(std::string(config.status().message()).c_str());
    return;
  }
  ManualClock clock;
  DiscardSink sink;
  auto core = *IngestCore::Create(*config, &sink, &clock);
  std::unique_ptr<EngineServices> services;
  if (services_mode != 0) {
    ServiceOptions so;
    so.stale_check_every_symbol = services_mode == 2;
    services = *EngineServices::Attach(core.get(), *config, so);
  }
  // Two hours of one tick per symbol (the first bar closes at the second),
  // so every symbol has a tick count, a learned rate and an open bar.
  Tick t;
  t.kind = Tick::kPrice;
  std::vector<Symbol> names(static_cast<size_t>(n));
  for (int k = 0; k < n; ++k) names[k].assign(absl::StrCat("CLK", k));
  for (int m = 0; m < 2; ++m) {
    clock.now = 1000 * kHour + m * kHour + kMin / 4;
    for (int k = 0; k < n; ++k) {
      t.symbol = names[k];
      t.t_ns = clock.now;
      t.value = 100.0 + 0.01 * ((k + m) % 7);
      core->OnTick(t);
    }
    core->OnClock(clock.now);
  }
  // Clock ticks inside the second hour, after its ticks: nothing closes, no
  // symbol is silent for an hour (kIterations clock ticks are 5 minutes).
  int64_t now = 1000 * kHour + kHour + kMin / 2;
  int next_symbol = 0;
  for (auto _ : state) {
    if (ticks_between > 0) {
      state.PauseTiming();
      for (int k = 0; k < ticks_between; ++k) {
        t.symbol = names[next_symbol];
        clock.now = t.t_ns = now - kTick / 2;
        t.value = 100.0 + 0.01 * (k % 5);
        core->OnTick(t);
        next_symbol = next_symbol + 1 == n ? 0 : next_symbol + 1;
      }
      state.ResumeTiming();
    }
    clock.now = now;
    core->OnClock(now);
    now += kTick;
  }
  state.counters["ns_per_symbol"] =
      benchmark::Counter(static_cast<double>(state.iterations()) * n,
                         benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}
BENCHMARK(BM_ClockTick)
    ->ArgsProduct({{10000, 100000}, {0, 1, 2}, {0, 2000}})
    ->ArgNames({"symbols", "services", "ticks"})
    ->Iterations(kIterations)
    ->Unit(benchmark::kMicrosecond);

}  // namespace
}  // namespace aftershock

BENCHMARK_MAIN();
