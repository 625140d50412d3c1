// The whole identification pipeline (IdentifyModel with default options: ARMA
// grid 0..2 x 0..2, ARCH(1..5) + 4 GARCH-family candidates x 2 laws, two-step,
// diagnostics, joint MLE) on 2,000 simulated bars. Target: <= 25 ms on one core.
#include <benchmark/benchmark.h>

#include "aftershock/identify.h"
#include "aftershock/simulate.h"
#include "bench_series.h"

namespace aftershock {
namespace {

std::vector<double> Data() { return bench::IdentifyBenchSeries(); }

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
