// Evidence for recursive tracking (recursive_tracker.h, tracking_study.h):
// on simulated GARCH(1,1)-t / GJR(1,1,1)-t series with stable, linearly
// drifting and abruptly changing parameters, the mean QLIKE of refit-only,
// drive (tracked parameters between refits) and the true model; the paired
// t-test of drive vs refit-only across series; (alpha_1, beta_1) tracking
// RMSE; the instability alarm rate and detection delay.
//
//   build/bench/tracking_bench            # 20 series per case, 6,000 bars each
//   build/bench/tracking_bench --quick    # 6 series per case
//   build/bench/tracking_bench --seeds N --threshold Q --forgetting L --max-step S
//
// Every series is simulated with a fixed seed (case index * 1000 + series),
// so the table is reproducible.
#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <vector>

#include "aftershock/tracking_study.h"

namespace aftershock {
namespace {

ModelParams Garch(double omega, double alpha, double beta) {
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "student");
  // Values in the layout of model_spec.h: mu, omega, alpha_1, beta_1, nu.
  return ModelParams{*spec, {0.0, omega, alpha, beta, 6.0}};
}

ModelParams Gjr(double omega, double alpha, double gamma, double beta) {
  auto spec = MakeModelSpec("constant", {}, "gjr", {1, 1, 1}, "student");
  // mu, omega, alpha_1, gamma_1, beta_1, nu.
  return ModelParams{*spec, {0.0, omega, alpha, gamma, beta, 6.0}};
}

struct Case {
  const char* name;
  DriftCase c;
};

int Main(int argc, char** argv) {
  int seeds = 20;
  StudyOptions so;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (a == "--quick") {
      seeds = 6;
    } else if (a == "--seeds" && i + 1 < argc) {
      seeds = std::atoi(argv[++i]);
    } else if (a == "--threshold" && i + 1 < argc) {
      so.alert_threshold = std::atof(argv[++i]);
    } else if (a == "--forgetting" && i + 1 < argc) {
      so.tracker.forgetting = std::atof(argv[++i]);
    } else if (a == "--max-step" && i + 1 < argc) {
      so.tracker.max_step = std::atof(argv[++i]);
    } else if (a == "--refit-every" && i + 1 < argc) {
      so.refit_every = std::atoi(argv[++i]);
    } else {
      std::fprintf(stderr, "unknown argument %s\n", a.c_str());
      return 2;
    }
  }
  const int64_t n = 6000;
  std::vector<Case> cases;
  auto add = [&](const char* name, ModelParams from, ModelParams to, DriftShape shape) {
    DriftCase c;
    c.from = std::move(from);
    c.to = std::move(to);
    c.shape = shape;
    c.n = n;
    c.change_bar = n / 2;
    cases.push_back({name, c});
  };
  // Unconditional variance 1 throughout unless the level drifts.
  add("GARCH stable", Garch(0.03, 0.07, 0.90), Garch(0.03, 0.07, 0.90), DriftShape::kStable);
  add("GARCH drift a.03>.15 b.95>.80", Garch(0.02, 0.03, 0.95), Garch(0.05, 0.15, 0.80),
      DriftShape::kLinear);
  add("GARCH drift level x4", Garch(0.03, 0.07, 0.90), Garch(0.12, 0.07, 0.90),
      DriftShape::kLinear);
  add("GARCH step a.05>.15 b.93>.80", Garch(0.02, 0.05, 0.93), Garch(0.05, 0.15, 0.80),
      DriftShape::kStep);
  add("GJR stable", Gjr(0.03, 0.03, 0.08, 0.90), Gjr(0.03, 0.03, 0.08, 0.90), DriftShape::kStable);
  add("GJR drift g.02>.20 b.93>.82", Gjr(0.03, 0.03, 0.02, 0.93), Gjr(0.05, 0.03, 0.20, 0.82),
      DriftShape::kLinear);

  std::printf(
      "tracking study: %d series x %lld bars per case; refit every %d bars on %d, "
      "forgetting %.4g, max_step %.4g, alarm Q >= %.3g\n",
      seeds, static_cast<long long>(n), so.refit_every, so.window, so.tracker.forgetting,
      so.tracker.max_step, so.alert_threshold);
  std::printf(
      "| case | QLIKE refit-only | QLIKE drive | QLIKE true | drive - refit | t | p (paired, "
      "2-sided) | drive better | RMSE(a,b) refit | RMSE(a,b) drive | resets | alarms per "
      "1000 bars | delay (bars, median) |\n");
  std::printf("|---|---|---|---|---|---|---|---|---|---|---|---|---|\n");
  for (size_t ci = 0; ci < cases.size(); ++ci) {
    const Case& cs = cases[ci];
    std::vector<double> qr, qd;
    double qt = 0, rr = 0, rd = 0;
    uint64_t resets = 0;
    int64_t alarms = 0, bars_watched = 0, better = 0;
    std::vector<int64_t> delays;
    for (int s = 0; s < seeds; ++s) {
      DriftCase c = cs.c;
      c.seed = static_cast<uint64_t>(ci * 1000 + s + 1);
      auto path = SimulateDrift(c);
      if (!path.ok()) {
        std::fprintf(stderr, "%s\n", path.status().ToString().c_str());
        return 1;
      }
      auto res = RunTrackingStudy(*path, c.from.spec, so);
      if (!res.ok()) {
        std::fprintf(stderr, "%s\n", res.status().ToString().c_str());
        return 1;
      }
      qr.push_back(res->qlike_refit);
      qd.push_back(res->qlike_drive);
      if (res->qlike_drive < res->qlike_refit) ++better;
      qt += res->qlike_true;
      rr += res->param_rmse_refit;
      rd += res->param_rmse_drive;
      resets += res->tracker_resets;
      if (c.shape == DriftShape::kStep) {
        int64_t first = -1;
        for (int64_t a : res->alarms) {
          if (a >= c.change_bar) {
            first = a;
            break;
          }
          ++alarms;  // before the change: false alarms
        }
        bars_watched += c.change_bar - so.score_from;
        if (first >= 0) delays.push_back(first - c.change_bar);
      } else {
        alarms += static_cast<int64_t>(res->alarms.size());
        bars_watched += c.n - so.score_from;
      }
    }
    const PairedTest pt = PairedTTest(qd, qr);
    double mr = 0, md = 0;
    for (double v : qr) mr += v;
    for (double v : qd) md += v;
    std::string delay = "-";
    if (cs.c.shape == DriftShape::kStep) {
      std::sort(delays.begin(), delays.end());
      delay = delays.empty() ? "none" : std::to_string(delays[delays.size() / 2]);
      delay += " (" + std::to_string(delays.size()) + "/" + std::to_string(seeds) + " detected)";
    }
    std::printf(
        "| %s | %.5f | %.5f | %.5f | %+.5f | %.2f | %.3g | %lld/%d | %.4f | %.4f | %llu | "
        "%.3f | %s |\n",
        cs.name, mr / seeds, md / seeds, qt / seeds, pt.mean_diff, pt.t, pt.p_value,
        static_cast<long long>(better), seeds, rr / seeds, rd / seeds,
        static_cast<unsigned long long>(resets),
        1000.0 * static_cast<double>(alarms) / static_cast<double>(bars_watched), delay.c_str());
    std::fflush(stdout);
  }
  return 0;
}

}  // namespace
}  // namespace aftershock

int main(int argc, char** argv) { return aftershock::Main(argc, argv); }
