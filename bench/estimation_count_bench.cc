// Fixed estimation workloads for instruction counts under callgrind, which do
// not depend on the load of a shared machine (DEVELOPERS.md, "Benchmarks"):
//
//   valgrind --tool=callgrind --callgrind-out-file=cg.out build/bench/estimation_count_bench warm 0
//   callgrind_annotate --inclusive=yes cg.out | grep RunWorkload
//
// The workload function's inclusive count divided by the repetitions printed
// is the count of one call. Workloads (same data as fit_bench and identify_bench):
//   cold S     FitModel of 2,000 bars, const/GARCH(1,1)/gaussian, no start
//   warm S     the same model refitted on the window shifted by 20 bars, started
//              from the first window's estimate
//   identify   IdentifyModel with default options on the identify_bench series
// S = 1 with standard errors, 0 without. Also runs outside callgrind (prints the
// result so that the work cannot be optimized away).
#include <cstdio>
#include <cstring>
#include <string>
#include <vector>

#include "aftershock/estimator.h"
#include "aftershock/identify.h"
#include "aftershock/simulate.h"
#include "bench_series.h"

namespace aftershock {
namespace {

ModelSpec FitSpec() { return bench::FitBenchSpec(); }

std::vector<double> FitData() { return bench::FitBenchSeries(2020); }  // as fit_bench

std::vector<double> IdentifyData() { return bench::IdentifyBenchSeries(); }  // as identify_bench

// The measured region: callgrind attributes its inclusive count to this name.
__attribute__((noinline)) double RunWorkload(const std::string& what,
                                             const std::vector<double>& data,
                                             const FitOptions& options, int reps) {
  double sum = 0;
  for (int i = 0; i < reps; ++i) {
    if (what == "identify") {
      sum += IdentifyModel(data)->final_fit.loglik;
    } else {
      sum += FitModel(FitSpec(), data, options)->loglik;
    }
  }
  return sum;
}

int Main(int argc, char** argv) {
  const std::string what = argc > 1 ? argv[1] : "";
  const bool se = argc > 2 && std::strcmp(argv[2], "1") == 0;
  if (what == "identify") {
    const int reps = 3;
    const double s = RunWorkload(what, IdentifyData(), {}, reps);
    std::printf("identify: %d repetitions, mean final log-likelihood %.9f\n", reps, s / reps);
    return 0;
  }
  if (what != "cold" && what != "warm") {
    std::fprintf(stderr, "usage: estimation_count_bench cold|warm 0|1 | identify\n");
    return 2;
  }
  const std::vector<double> d = FitData();
  const std::vector<double> w0(d.begin(), d.begin() + 2000), w1(d.begin() + 20, d.begin() + 2020);
  FitOptions o;
  o.std_errors = se;
  const int reps = 10;
  if (what == "warm") o.start = FitModel(FitSpec(), w0)->params;
  const std::vector<double>& w = what == "warm" ? w1 : w0;
  const double s = RunWorkload(what, w, o, reps);
  auto f = FitModel(FitSpec(), w, o);
  std::printf("%s (std errors %d): %d repetitions, log-likelihood %.9f, %d evaluations (%s)\n",
              what.c_str(), se, reps, s / reps, f->iterations, f->optimizer_message.c_str());
  return 0;
}

}  // namespace
}  // namespace aftershock

int main(int argc, char** argv) { return aftershock::Main(argc, argv); }
