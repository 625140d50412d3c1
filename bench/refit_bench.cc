// Background re-estimation benchmarks (PRODUCT.md C5, P2, P4):
//   BM_WarmRefit        one warm-started GARCH(1,1) refit of a 2,000-bar window
//                       through EstimatorRefitter (refits per second per worker);
//   BM_RefitJobs        the whole job path (refit, holdout scores, gate, tail
//                       re-run) through the pool, 1 and 2 workers;
//   BM_IngestLatency    per-bar RefitCoordinator::OnBar latency (window push,
//                       apply check, scheduler), quiet vs during a refit storm
//                       (every symbol due at once, all workers busy), same run.
#include <benchmark/benchmark.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <thread>
#include <vector>

#include "aftershock/refit.h"
#include "aftershock/simulate.h"

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
  // One bar for every symbol; latencies (ns) appended when `lat` is given.
  void Bar(std::vector<double>* lat) {
    const int64_t t = bar * 60'000'000'000;
    const size_t n = returns.size();
    for (size_t k = 0; k < n; ++k) {
      const double r = returns[k][bar % returns[k].size()];
      const auto t0 = std::chrono::steady_clock::now();
      coord->OnBar(static_cast<uint32_t>(k), t, r, &states[k]);
      const auto t1 = std::chrono::steady_clock::now();
      if (lat) lat->push_back(std::chrono::duration<double, std::nano>(t1 - t0).count());
    }
    // The gap after the bar's batch, as the engine's clock tick: live jobs
    // deferred by OnBar copy their windows and go to the workers here.
    coord->SubmitDeferred(256);
    ++bar;
  }
  void Drain() {
    while (coord->stats().in_flight > 0) {
      while (coord->stats().queued + coord->stats().running > 0) {
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
  std::vector<double> quiet, storm;
  quiet.reserve(2'000'000);
  storm.reserve(2'000'000);
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
      u.Bar(&storm);
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
  std::printf(
      "ingest OnBar latency, %d workers, %d symbols (timer included): quiet p50 %.0f p99 %.0f "
      "p99.9 %.0f ns; storm p50 %.0f p99 %.0f p99.9 %.0f ns over %zu calls (%.0f bars, %.2f s, "
      "all workers busy in %.0f bars, %llu jobs applied); p99 ratio storm/quiet %.2f\n",
      workers, kSymbols, q50, q99, q999, s50, s99, s999, storm.size(), storm_bars, storm_seconds,
      busy_bars, static_cast<unsigned long long>(storm_applied), s99 / q99);
}
BENCHMARK(BM_IngestLatency)->Arg(1)->Arg(2)->Iterations(1)->Unit(benchmark::kMillisecond);

}  // namespace
}  // namespace aftershock

BENCHMARK_MAIN();
