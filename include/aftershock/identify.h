// Automatic model identification (PRODUCT.md C3): the procedure a quant runs by
// hand before trusting a volatility model, in one call with one report.
//
//   1. mean order: ARMA(p,q), p <= max_ar, q <= max_ma, by the criterion on the
//      exact Gaussian ARMA likelihood (ARMA(0,0) = constant mean);
//   2. ARCH-effect tests on the mean residuals: Engle's ARCH-LM (the decision)
//      and Ljung-Box on the squared residuals (McLeod-Li), with the PACF of the
//      squared residuals as evidence;
//   3. variance family and order by the criterion over ARCH(1..max_arch_order),
//      GARCH(1,1), GARCH(1,2), GARCH(2,1), GJR-GARCH(1,1), each with Gaussian and Student
//      innovations, the mean held at the step-1 estimates (two-step MLE);
//   4. without an ARCH effect: a constant-variance model, and the report says so;
//      unless weak_evidence_aic: then GARCH(1,1) is fitted beside it and the
//      choice among them is made by AIC (see IdentifyOptions);
//   5. diagnostics on the standardized residuals and their squares (Ljung-Box
//      with the degrees-of-freedom correction, ARCH-LM, Engle-Ng sign bias,
//      Jarque-Bera);
//   6. joint MLE of mean and variance started from the two-step estimates; the
//      diagnostics are repeated on the final model.
//
// Thread-safety: IdentifyModel is reentrant (the refit workers call it
// concurrently on different windows).
#ifndef AFTERSHOCK_IDENTIFY_H_
#define AFTERSHOCK_IDENTIFY_H_

#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/arma.h"
#include "aftershock/estimator.h"
#include "aftershock/model_spec.h"

namespace aftershock {

struct IdentifyOptions {
  // Information criterion for every choice. Default BIC (favours small models).
  InfoCriterion criterion = InfoCriterion::kBic;
  // Largest ARMA orders tried in step 1. Default 2, 2 (9 candidates).
  int max_ar = 2;
  int max_ma = 2;
  // Largest ARCH(m) order tried in step 3. Default 5. Each order adds two fits.
  int max_arch_order = 5;
  // Lags of the Ljung-Box tests (and of the squared-residual PACF). Default 10.
  int lags = 10;
  // Lags of the ARCH-LM tests. Default 5.
  int arch_lm_lags = 5;
  // Significance level of every test decision. Default 0.05.
  double level = 0.05;
  // Try Student-t innovations besides normal ones. Default true.
  bool try_student_t = true;
  // Presample rule of the variance recursion. Default mean-square.
  Presample presample = Presample::kMeanSquare;
  // Variance candidates whose fitted persistence is at or above this are not
  // eligible in step 3 (the refit gate would refuse them); they stay in the
  // report with the reason. 1 = no restriction. Default 1.
  double max_persistence = 1.0;
  // When the ARCH-LM test does not reject, also fit GARCH(1,1) (each law)
  // beside constant variance and choose among them by AIC rather than the
  // criterion above. Why: on short windows (a few hundred bars) the LM test
  // and BIC's log(n) penalty both lack power against persistent, fat-tailed
  // clustering, while AIC targets forecast accuracy (expected Kullback-Leibler
  // loss; Burnham & Anderson, Model Selection and Multimodel Inference, 2002)
  // and GARCH(1,1) nests constant variance (alpha = 0), so a wrong pick costs
  // little. Measured on the 12 simulated instruments of DefaultUniverse with
  // 600-bar windows (tests/estimation/identify_test.cc): conditional variance
  // chosen far more often and a lower out-of-sample QLIKE. Default true;
  // false restores "no ARCH effect -> constant variance".
  bool weak_evidence_aic = true;
};

struct TestOutcome {
  std::string name;       // e.g. "ARCH-LM(5) on residuals"
  double statistic = 0;
  double df = 0;          // degrees of freedom of the reference law
  double p_value = 0;
  bool rejected = false;  // p_value < level
  std::string meaning;    // what a rejection means, in plain words
};

struct VarianceCandidateResult {
  ModelSpec spec;
  bool ok = false;         // the fit ran and converged
  bool eligible = false;   // ok and persistence below options.max_persistence
  std::string error;       // why not ok or not eligible
  double loglik = 0, aic = 0, bic = 0;
  int num_params = 0;      // estimated variance/law parameters (mean fixed)
  double criterion = 0;    // the chosen criterion's value
};

struct IdentificationReport {
  int nobs = 0;
  IdentifyOptions options;
  // Step 1.
  std::vector<ArmaCandidate> mean_candidates;
  int ar_order = 0, ma_order = 0;
  std::string mean_decision;
  // Step 2.
  std::vector<TestOutcome> arch_tests;
  std::vector<double> squared_residual_pacf;  // lags 1..options.lags
  bool arch_effect = false;
  std::string arch_decision;
  // Steps 3-4.
  std::vector<VarianceCandidateResult> variance_candidates;
  std::string variance_decision;
  FitResult two_step;  // mean fixed at step 1
  // Step 5 (two-step model) and final diagnostics (joint model).
  std::vector<TestOutcome> diagnostics_two_step;
  std::vector<TestOutcome> diagnostics;
  bool diagnostics_pass = false;  // no final diagnostic of the residual dependence rejected
  // Step 6.
  FitResult final_fit;
  std::string joint_decision;
  std::vector<std::string> warnings;
};

// Runs the six steps on `returns`. Errors (InvalidArgument) for too few
// observations (< 100), non-finite values or a constant series; a window that
// is merely awkward (an outlier, a failed fit) yields a report with warnings.
absl::StatusOr<IdentificationReport> IdentifyModel(absl::Span<const double> returns,
                                                   const IdentifyOptions& options = {});

// Diagnostics of step 5 for any fitted model: standardized residuals z and
// their squares. `mean_dof` = p + q of the mean equation.
std::vector<TestOutcome> StandardizedResidualDiagnostics(absl::Span<const double> residuals,
                                                         absl::Span<const double> sigma2,
                                                         int mean_dof,
                                                         const IdentifyOptions& options);

// The three of those diagnostics the refit quality gate reads, in the same
// order with the same names and values: Ljung-Box on z, Ljung-Box on z^2 and
// ARCH-LM on z (no sign-bias and Jarque-Bera tests). For warm refits, whose
// candidates carry only the gate's p-values.
std::vector<TestOutcome> GateResidualDiagnostics(absl::Span<const double> residuals,
                                                 absl::Span<const double> sigma2, int mean_dof,
                                                 const IdentifyOptions& options);

// Smallest sample IdentifyModel accepts.
inline constexpr int kMinIdentifyObservations = 100;

}  // namespace aftershock

#endif  // AFTERSHOCK_IDENTIFY_H_
