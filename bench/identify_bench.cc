// The whole identification pipeline (IdentifyModel with default options: ARMA
// grid 0..2 x 0..2, ARCH(1..5) + 4 GARCH-family candidates x 2 laws, two-step,
// diagnostics, joint MLE) on 2,000 simulated bars. Target: <= 25 ms on one core.
#include <benchmark/benchmark.h>

#include "aftershock/identify.h"
#include "aftershock/simulate.h"

namespace aftershock {
namespace {

std::vector<double> Data() {
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

void BM_IdentifyPipeline(benchmark::State& st) {
  const auto r = Data();
  for (auto _ : st) {
    auto rep = IdentifyModel(r);
    benchmark::DoNotOptimize(rep);
  }
}
BENCHMARK(BM_IdentifyPipeline)->Unit(benchmark::kMillisecond);

}  // namespace
}  // namespace aftershock

BENCHMARK_MAIN();
