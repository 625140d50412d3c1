// The fixed simulated series the estimation benchmarks share, so that
// fit_bench, identify_bench and estimation_count_bench (callgrind counts)
// measure the same work. Header-only; benchmark programs only.
#ifndef AFTERSHOCK_BENCH_BENCH_SERIES_H_
#define AFTERSHOCK_BENCH_BENCH_SERIES_H_

#include <vector>

#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"
#include "aftershock/simulate.h"

namespace aftershock {
namespace bench {

// The model fitted by fit_bench: const/GARCH(1,1)/gaussian.
inline ModelSpec FitBenchSpec() {
  return *MakeModelSpec("constant", {}, "garch", {1, 1}, "gaussian");
}

// n bars of FitBenchSpec with mu 0.02, omega 0.03, alpha_1 0.08, beta_1 0.9, seed 2026.
inline std::vector<double> FitBenchSeries(int n) {
  auto p = ModelParams::FromNamed(
      FitBenchSpec(), {{"mu", 0.02}, {"omega", 0.03}, {"alpha_1", 0.08}, {"beta_1", 0.9}});
  SimulationOptions so;
  so.n = n;
  so.seed = 2026;
  return Simulate(*p, so)->returns;
}

// The identification benchmark's 2,000 bars: ARMA(1,0)/GJR-GARCH(1,1)/student,
// seed 99.
inline std::vector<double> IdentifyBenchSeries() {
  auto spec = MakeModelSpec("arma", {1, 0}, "gjr", {1, 1, 1}, "student");
  auto p = ModelParams::FromNamed(*spec, {{"mu", 0.01},
                                          {"ar_1", 0.1},
                                          {"omega", 0.03},
                                          {"alpha_1", 0.04},
                                          {"gamma_1", 0.08},
                                          {"beta_1", 0.88},
                                          {"nu", 7.0}});
  SimulationOptions so;
  so.n = 2000;
  so.seed = 99;
  return Simulate(*p, so)->returns;
}

}  // namespace bench
}  // namespace aftershock

#endif  // AFTERSHOCK_BENCH_BENCH_SERIES_H_
