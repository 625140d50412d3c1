// P1: one filter step (ARMA(1,1)/GARCH(1,1)/student, all outputs: z, next-bar
// variance, 3 horizon variances, VaR and ES at 2 levels, annualized vol, scale)
// per bar per symbol, over 10,000 symbols visited round-robin.
//
// Two layouts: every symbol has its own compiled model (what the engine holds:
// one version per symbol) and all symbols share one model (the cache-friendly
// lower bound). BM_FilterBank runs the same universe through FilterBank, the
// engine's structure-of-arrays layout, scalar and batch, in the same run.
#include <benchmark/benchmark.h>

#include <algorithm>
#include <memory>
#include <vector>

#include "aftershock/filter_bank.h"
#include "aftershock/online_filter.h"
#include "aftershock/recursive_tracker.h"
#include "aftershock/simulate.h"

namespace aftershock {
namespace {

constexpr int kSymbols = 10000;
constexpr int kBarsPerSymbol = 64;

ModelParams BenchParams(double jitter) {
  auto spec = MakeModelSpec("arma", {1, 1}, "garch", {1, 1}, "student");
  auto p = ModelParams::FromNamed(*spec, {{"mu", 0.0002},
                                          {"ar_1", 0.05 + jitter},
                                          {"ma_1", -0.02},
                                          {"omega", 2e-6},
                                          {"alpha_1", 0.08},
                                          {"beta_1", 0.9 - jitter},
                                          {"nu", 6.0}});
  return *p;
}

struct Universe {
  std::vector<FilterModel> models;
  std::vector<FilterState> states;
  std::vector<double> returns;  // kSymbols x kBarsPerSymbol, symbol-major
  OutputOptions outputs;
};

std::unique_ptr<Universe> MakeUniverse(bool per_symbol_models) {
  auto u = std::make_unique<Universe>();
  OutputOptions& oo = u->outputs;
  oo.horizons = {1, 5, 20};
  oo.risk_levels = {0.99, 0.975};
  const int n_models = per_symbol_models ? kSymbols : 1;
  for (int i = 0; i < n_models; ++i) {
    u->models.push_back(*FilterModel::Create(BenchParams(1e-6 * (i % 100)), oo, 1));
  }
  u->states.resize(kSymbols);
  for (int s = 0; s < kSymbols; ++s) {
    InitFilterState(u->models[per_symbol_models ? s : 0], 0, &u->states[s]);
  }
  SimulationOptions so;
  so.n = kBarsPerSymbol * 16;
  so.seed = 42;
  auto sim = Simulate(BenchParams(0), so);
  u->returns.resize(static_cast<size_t>(kSymbols) * kBarsPerSymbol);
  for (size_t i = 0; i < u->returns.size(); ++i) {
    u->returns[i] = sim->returns[(i * 7) % sim->returns.size()];
  }
  return u;
}

void BM_FilterStep(benchmark::State& st, bool per_symbol_models) {
  auto u = MakeUniverse(per_symbol_models);
  BarUpdate out;
  int bar = 0, sym = 0;
  for (auto _ : st) {
    const FilterModel& m = u->models[per_symbol_models ? sym : 0];
    FilterStep(m, &u->states[sym], u->returns[static_cast<size_t>(sym) * kBarsPerSymbol + bar],
               &out);
    benchmark::DoNotOptimize(out);
    if (++sym == kSymbols) {
      sym = 0;
      bar = (bar + 1) % kBarsPerSymbol;
    }
  }
  st.SetItemsProcessed(st.iterations());
  st.counters["ns_per_step"] =
      benchmark::Counter(static_cast<double>(st.iterations()),
                         benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}

BENCHMARK_CAPTURE(BM_FilterStep, per_symbol_models_10k, true);
BENCHMARK_CAPTURE(BM_FilterStep, shared_model_10k, false);

// The same universe in a FilterBank (filter_bank.h, the engine's layout:
// structure-of-arrays state, packed coefficient rows). `batch`: every symbol's
// bar closes together and StepBatch runs over them in chunks of kBatchChunk
// lanes into one reused output buffer, as IngestCore::OnClock does; `scalar`:
// FilterBank::Step one symbol at a time (the engine's path for a bar closed by
// a tick). The return of each step is read from the same symbol-major array as
// BM_FilterStep reads it.
constexpr int kBatchChunk = 64;

void BM_FilterBank(benchmark::State& st, bool per_symbol_models, bool batch) {
  auto u = MakeUniverse(per_symbol_models);
  FilterBank bank(u->outputs);
  bank.Reserve(kSymbols);
  for (int s = 0; s < kSymbols; ++s) {
    bank.Add(&u->models[per_symbol_models ? s : 0], u->states[s]);
  }
  if (!bank.fast(0)) st.SkipWithError("the benchmark model is not on the batch kernel");
  std::vector<BarUpdate> out(kBatchChunk);
  int lanes[kBatchChunk];
  double r[kBatchChunk];
  int bar = 0;
  for (auto _ : st) {
    // One iteration: one bar of every symbol.
    for (int base = 0; base < kSymbols; base += kBatchChunk) {
      const int n = std::min(kBatchChunk, kSymbols - base);
      for (int k = 0; k < n; ++k) {
        lanes[k] = base + k;
        r[k] = u->returns[static_cast<size_t>(base + k) * kBarsPerSymbol + bar];
      }
      if (batch) {
        bank.StepBatch(absl::MakeConstSpan(lanes, n), absl::MakeConstSpan(r, n), out.data());
      } else {
        for (int k = 0; k < n; ++k) bank.Step(lanes[k], bank.model(lanes[k]), r[k], &out[k]);
      }
      benchmark::DoNotOptimize(out.data());
      benchmark::ClobberMemory();
    }
    bar = (bar + 1) % kBarsPerSymbol;
  }
  const double steps = static_cast<double>(st.iterations()) * kSymbols;
  st.SetItemsProcessed(static_cast<int64_t>(steps));
  st.counters["ns_per_step"] =
      benchmark::Counter(steps, benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}

BENCHMARK_CAPTURE(BM_FilterBank, batch_per_symbol_models_10k, true, true);
BENCHMARK_CAPTURE(BM_FilterBank, scalar_per_symbol_models_10k, true, false);
BENCHMARK_CAPTURE(BM_FilterBank, batch_shared_model_10k, false, true);

// Recursive tracking ([tracking], recursive_tracker.h) over the same 10,000
// symbols visited round-robin, each with its own tracker (about 0.6 KB) and,
// in drive mode, its own model retuned each bar. `track` is the tracker's step
// alone (its added cost per bar in track mode); `drive` is the whole drive-mode
// bar: tracker step, RetuneVariance and the filter step with all outputs.
// Constant mean, GARCH(1,1)-t or GJR(1,1,1)-t (nu = 6).
ModelParams TrackedParams(bool gjr, double jitter) {
  // Values in the layout of model_spec.h: mu, omega, alpha_1, [gamma_1,] beta_1, nu.
  if (gjr) {
    return ModelParams{*MakeModelSpec("constant", {}, "gjr", {1, 1, 1}, "student"),
                       {0.0002, 2e-6, 0.03, 0.08, 0.9 - jitter, 6.0}};
  }
  return ModelParams{*MakeModelSpec("constant", {}, "garch", {1, 1}, "student"),
                     {0.0002, 2e-6, 0.08, 0.9 - jitter, 6.0}};
}

struct TrackedUniverse {
  std::vector<FilterModel> models;
  std::vector<FilterState> states;
  std::vector<RecursiveTracker> trackers;
  std::vector<double> returns;  // kSymbols x kBarsPerSymbol, symbol-major
  TrackerOptions options;
};

std::unique_ptr<TrackedUniverse> MakeTrackedUniverse(bool gjr) {
  auto u = std::make_unique<TrackedUniverse>();
  OutputOptions oo;
  oo.horizons = {1, 5, 20};
  oo.risk_levels = {0.99, 0.975};
  u->options.burn_in_bars = 8;  // the timed loop is past the burn-in: full steps
  for (int i = 0; i < kSymbols; ++i) {
    u->models.push_back(*FilterModel::Create(TrackedParams(gjr, 1e-6 * (i % 100)), oo, 1));
  }
  u->states.resize(kSymbols);
  u->trackers.resize(kSymbols);
  SimulationOptions so;
  so.n = kBarsPerSymbol * 16;
  so.seed = 43;
  auto sim = Simulate(TrackedParams(gjr, 0), so);
  u->returns.resize(static_cast<size_t>(kSymbols) * kBarsPerSymbol);
  for (size_t i = 0; i < u->returns.size(); ++i) {
    u->returns[i] = sim->returns[(i * 7) % sim->returns.size()];
  }
  for (int s = 0; s < kSymbols; ++s) {
    InitFilterState(u->models[s], 0, &u->states[s]);
    u->trackers[s].Anchor(u->models[s].params(), u->states[s].var.next_variance, u->options);
    // Past the burn-in before timing.
    for (int b = 0; b < 16; ++b) {
      u->trackers[s].Step(u->returns[static_cast<size_t>(s) * kBarsPerSymbol + b], u->options);
    }
  }
  return u;
}

void BM_Tracking(benchmark::State& st, bool gjr, bool drive) {
  auto u = MakeTrackedUniverse(gjr);
  BarUpdate out;
  int bar = 16, sym = 0;
  for (auto _ : st) {
    const double r = u->returns[static_cast<size_t>(sym) * kBarsPerSymbol + bar];
    RecursiveTracker& t = u->trackers[sym];
    t.Step(r, u->options);
    if (drive) {
      FilterModel& m = u->models[sym];
      m.RetuneVariance(t.omega(), t.alpha(), t.gamma(), t.beta());
      FilterStep(m, &u->states[sym], r, &out);
      t.SetNextVariance(u->states[sym].var.next_variance);
      benchmark::DoNotOptimize(out);
    } else {
      benchmark::DoNotOptimize(t);
    }
    if (++sym == kSymbols) {
      sym = 0;
      bar = bar + 1 == kBarsPerSymbol ? 16 : bar + 1;
    }
  }
  st.SetItemsProcessed(st.iterations());
  st.counters["ns_per_step"] =
      benchmark::Counter(static_cast<double>(st.iterations()),
                         benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}

BENCHMARK_CAPTURE(BM_Tracking, track_garch11_t_10k, false, false);
BENCHMARK_CAPTURE(BM_Tracking, track_gjr111_t_10k, true, false);
BENCHMARK_CAPTURE(BM_Tracking, drive_garch11_t_10k, false, true);
BENCHMARK_CAPTURE(BM_Tracking, drive_gjr111_t_10k, true, true);

}  // namespace
}  // namespace aftershock

BENCHMARK_MAIN();
