// P2: cold and warm-started Gaussian GARCH(1,1) fits of 2,000 simulated bars
// (constant mean, mean-square presample), and in the same run a vectorized
// SciPy L-BFGS-B fit of the same likelihood on the same data
// (bench/python/scipy_garch_fit.py via /usr/bin/python3), with the ratio.
//
// "warm" refits a window shifted by 20 bars from the previous estimate, as the
// refit worker does. Fits are timed with and without standard errors; SciPy
// computes none, so the ratio uses the fit without them.
#include <benchmark/benchmark.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "aftershock/estimator.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"
#include "aftershock/simulate.h"
#include "bench_series.h"

namespace aftershock {
namespace {

constexpr int kBars = 2000;

const ModelSpec& Spec() {
  static const ModelSpec spec = bench::FitBenchSpec();
  return spec;
}

const std::vector<double>& Data() {
  static const std::vector<double> data = bench::FitBenchSeries(kBars + 20);
  return data;
}

std::vector<double> Window(int shift) {
  return std::vector<double>(Data().begin() + shift, Data().begin() + shift + kBars);
}

void BM_ColdFit(benchmark::State& st, bool std_errors) {
  const auto w = Window(0);
  FitOptions o;
  o.std_errors = std_errors;
  int evals = 0;
  for (auto _ : st) {
    auto f = FitModel(Spec(), w, o);
    evals = f->iterations;
    benchmark::DoNotOptimize(f);
  }
  st.counters["evaluations"] = evals;
}

void BM_WarmFit(benchmark::State& st, bool std_errors) {
  const auto w0 = Window(0), w1 = Window(20);
  FitOptions o;
  o.std_errors = std_errors;
  o.start = FitModel(Spec(), w0)->params;
  int evals = 0;
  for (auto _ : st) {
    auto f = FitModel(Spec(), w1, o);
    evals = f->iterations;
    benchmark::DoNotOptimize(f);
  }
  st.counters["evaluations"] = evals;
}

// The refit worker's usual case in the scale benchmark: a Student-t GARCH(1,1)
// with a constant mean, warm-started a window of 20 bars earlier, standard
// errors on (the worker's default). The data are that model's own (nu = 8).
// 175 us and 5 evaluations on the development VM; perf put 35 % of it in the
// level-2 (Hessian) passes, half of those in their per-term Hessian loop.
void BM_WarmFitStudent(benchmark::State& st) {
  static const std::vector<double> data = [] {
    auto spec = MakeModelSpec("constant", {}, "garch", {1, 1, -1}, "student");
    auto p = ModelParams::FromNamed(
        *spec, {{"mu", 0.0}, {"omega", 4e-8}, {"alpha_1", 0.07}, {"beta_1", 0.88}, {"nu", 8.0}});
    SimulationOptions so;
    so.n = kBars + 20;
    so.seed = 2026;
    return Simulate(*p, so)->returns;
  }();
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1, -1}, "student");
  const std::vector<double> w0(data.begin(), data.begin() + kBars),
      w1(data.begin() + 20, data.begin() + 20 + kBars);
  FitOptions o;
  o.std_errors = true;
  o.start = FitModel(*spec, w0)->params;
  int evals = 0;
  for (auto _ : st) {
    auto f = FitModel(*spec, w1, o);
    evals = f->iterations;
    benchmark::DoNotOptimize(f);
  }
  st.counters["evaluations"] = evals;
}

BENCHMARK_CAPTURE(BM_ColdFit, no_std_errors, false)->Unit(benchmark::kMicrosecond);
BENCHMARK_CAPTURE(BM_ColdFit, with_std_errors, true)->Unit(benchmark::kMicrosecond);
BENCHMARK_CAPTURE(BM_WarmFit, no_std_errors, false)->Unit(benchmark::kMicrosecond);
BENCHMARK_CAPTURE(BM_WarmFit, with_std_errors, true)->Unit(benchmark::kMicrosecond);
BENCHMARK(BM_WarmFitStudent)->Unit(benchmark::kMicrosecond);

double MedianSeconds(const std::vector<double>& w, const FitOptions& o, int reps) {
  std::vector<double> t;
  for (int i = 0; i < reps; ++i) {
    const auto t0 = std::chrono::steady_clock::now();
    auto f = FitModel(Spec(), w, o);
    benchmark::DoNotOptimize(f);
    t.push_back(std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
  }
  std::nth_element(t.begin(), t.begin() + reps / 2, t.end());
  return t[reps / 2];
}

int CompareWithScipy() {
  const auto w = Window(0);
  FitOptions o;
  o.std_errors = false;
  const double ours = MedianSeconds(w, o, 201);
  auto fit = FitModel(Spec(), w, o);
  const std::string path = "/tmp/aftershock_fit_bench_series.txt";
  FILE* f = std::fopen(path.c_str(), "w");
  if (!f) return 1;
  for (double x : w) std::fprintf(f, "%.17g\n", x);
  std::fclose(f);
  const std::string cmd = std::string(AFTERSHOCK_PYTHON) + " " + AFTERSHOCK_SOURCE_DIR +
                          "/bench/python/scipy_garch_fit.py --repeat 51 < " + path;
  FILE* p = popen(cmd.c_str(), "r");
  if (!p) return 1;
  std::string out;
  char buf[4096];
  while (size_t n = std::fread(buf, 1, sizeof buf, p)) out.append(buf, n);
  if (pclose(p) != 0) {
    std::fprintf(stderr, "SciPy reference failed to run (%s)\n", cmd.c_str());
    return 1;
  }
  const auto j = nlohmann::json::parse(out);
  const double scipy_s = j.at("median_seconds").get<double>();
  std::printf("\nP2 comparison on the same %d bars (median wall time):\n", kBars);
  std::printf("  aftershock cold fit (no std errors): %8.3f ms  loglik %.6f\n", ours * 1e3,
              fit->loglik);
  std::printf("  SciPy %s L-BFGS-B fit:              %8.3f ms  loglik %.6f\n",
              j.at("scipy").get<std::string>().c_str(), scipy_s * 1e3,
              j.at("loglik").get<double>());
  std::printf("  ratio SciPy / aftershock:            %8.1fx  (target >= 10x)\n",
              scipy_s / ours);
  return 0;
}

}  // namespace
}  // namespace aftershock

int main(int argc, char** argv) {
  benchmark::Initialize(&argc, argv);
  if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 1;
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return aftershock::CompareWithScipy();
}
