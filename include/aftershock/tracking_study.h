// TrackingStudy: the offline evidence for recursive tracking (recursive_tracker.h).
// Simulates GARCH(1,1)/GJR(1,1,1) series whose parameters are stable, drift
// linearly or change abruptly, then runs on each series, bar by bar and with
// only past data:
//   * refit-only: the rolling-window refit the engine does (FitModel on the
//     last `window` returns every `refit_every` bars, warm-started, the new
//     model's state re-run over the window, fits at or above max_persistence
//     refused; the engine's other gate tests are not applied), parameters
//     frozen in between;
//   * drive: the same refits as anchors, with the tracker's parameters used
//     for every prediction between refits;
//   * the true model (the simulated sigma2).
// It scores each with QLIKE against the squared return, L = log h + r^2 / h
// (Patton (2011): a loss robust to the noise of the r^2 proxy), measures
// parameter tracking error, and records the instability statistic's alarms.
//
// Thread-safety: pure functions.
#ifndef AFTERSHOCK_TRACKING_STUDY_H_
#define AFTERSHOCK_TRACKING_STUDY_H_

#include <cstdint>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/model_params.h"
#include "aftershock/recursive_tracker.h"

namespace aftershock {

enum class DriftShape {
  kStable,  // `from` throughout
  kLinear,  // linear from `from` at bar 0 to `to` at bar n - 1 (every coefficient)
  kStep,    // `from` before change_bar, `to` from change_bar on
};

// One simulated series.
struct DriftCase {
  ModelParams from;  // REQUIRED: GARCH(1,1) or GJR(1,1,1), zero or constant mean
  ModelParams to;    // same spec as `from`; ignored for kStable
  DriftShape shape = DriftShape::kStable;
  int64_t n = 6000;           // bars returned (after 500 discarded burn-in bars at `from`)
  int64_t change_bar = 3000;  // kStep: first bar of `to`
  uint64_t seed = 1;          // mt19937_64 seed
};

// A simulated path: returns and the true variance and coefficients per bar.
struct DriftPath {
  std::vector<double> returns;
  std::vector<double> sigma2;               // true sigma2_t (known at t-1)
  std::vector<std::vector<double>> params;  // true parameter vector of bar t's variance update
};

// InvalidArgument for an unsupported spec, mismatched specs or n < 1.
absl::StatusOr<DriftPath> SimulateDrift(const DriftCase& c);

struct StudyOptions {
  int refit_every = 100;  // bars between refits (the engine's [refit] every_bars)
  int window = 2000;      // refit window, bars ([refit] window)
  int min_bars = 200;     // bars before the first fit ([refit] min_bars)
  // First bar scored: all methods have a fitted model by then, fitted on at
  // least this many bars (fits on a few hundred bars can be degenerate).
  int score_from = 1000;
  // The engine's persistence gate ([refit] max_persistence): a fit at or above
  // it is refused and the model in force stays.
  double max_persistence = 0.9995;
  TrackerOptions tracker;
  double alert_threshold =
      20;  // [tracking] alert_threshold  // the instability statistic's alarm level
};

struct StudyResult {
  // Mean QLIKE over the scored bars.
  double qlike_refit = 0, qlike_drive = 0, qlike_true = 0;
  // Root mean square error of the tracked vs the true (alpha_1, beta_1) over
  // the scored bars (refit-only: the model in force; drive: the tracker).
  double param_rmse_refit = 0, param_rmse_drive = 0;
  int64_t scored = 0;
  int fits = 0, failed_fits = 0;
  uint64_t tracker_resets = 0;
  // Bars at which the instability statistic crossed alert_threshold from
  // below (an episode ends when it falls under half the threshold).
  std::vector<int64_t> alarms;
};

// Runs the three predictors over `path` (spec of the fitted model = path's).
// InvalidArgument for bad options.
absl::StatusOr<StudyResult> RunTrackingStudy(const DriftPath& path, const ModelSpec& fit_spec,
                                             const StudyOptions& options);

// Paired comparison of per-series mean losses a_i vs b_i: mean difference
// (a - b), its t statistic and the two-sided p-value (Student t, n - 1 df).
struct PairedTest {
  double mean_diff = 0, t = 0, p_value = 1;
  int n = 0;
};
PairedTest PairedTTest(absl::Span<const double> a, absl::Span<const double> b);

}  // namespace aftershock

#endif  // AFTERSHOCK_TRACKING_STUDY_H_
