// P1: one filter step (ARMA(1,1)/GARCH(1,1)/student, all outputs: z, next-bar
// variance, 3 horizon variances, VaR and ES at 2 levels, annualized vol, scale)
// per bar per symbol, over 10,000 symbols visited round-robin.
//
// Two layouts: every symbol has its own compiled model (what the engine holds:
// one version per symbol) and all symbols share one model (the cache-friendly
// lower bound).
#include <benchmark/benchmark.h>

#include <memory>
#include <vector>

#include "aftershock/online_filter.h"
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
};

std::unique_ptr<Universe> MakeUniverse(bool per_symbol_models) {
  auto u = std::make_unique<Universe>();
  OutputOptions oo;
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

}  // namespace
}  // namespace aftershock

BENCHMARK_MAIN();
