// ARMA(p,q) with a constant mean: exact Gaussian likelihood, Hannan-Rissanen
// starting values, maximum-likelihood estimation and order choice by an
// information criterion (PRODUCT.md C1 mean equation, C3 step 1).
//
// Model (the sign convention of the MA part is "+"):
//   y_t - mu = sum_{i=1}^p ar_i (y_{t-i} - mu) + e_t + sum_{j=1}^q ma_j e_{t-j},
//   e_t ~ N(0, sigma2) independent.
// The likelihood is the exact one: a Kalman filter on the state-space form,
// started from the stationary distribution of the state, so no observation is
// dropped or conditioned on. It requires a stationary AR part and an
// invertible MA part; the estimator keeps both by optimizing over
// partial-autocorrelation coordinates (Monahan's map), with sigma2
// concentrated out. The information criteria count p + q + 2 parameters
// (mu and sigma2 included).
//
// Thread-safety: free functions without shared state; safe to call concurrently.
#ifndef AFTERSHOCK_ARMA_H_
#define AFTERSHOCK_ARMA_H_

#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/types/span.h"

namespace aftershock {

struct ArmaParams {
  double mu = 0.0;         // unconditional mean of y
  std::vector<double> ar;  // ar_1..ar_p
  std::vector<double> ma;  // ma_1..ma_q
  double sigma2 = 1.0;     // innovation variance, > 0

  int p() const { return static_cast<int>(ar.size()); }
  int q() const { return static_cast<int>(ma.size()); }
};

// Output of the exact filter at fixed parameters.
struct ArmaFilterOutput {
  double loglik = 0.0;  // exact Gaussian log-likelihood
  // One-step prediction errors y_t - E[y_t | y_0..y_{t-1}]; n entries.
  std::vector<double> residuals;
  // Prediction-error variances divided by sigma2 (>= 1, tending to 1); n entries.
  // residuals[t] / sqrt(sigma2 * variance_ratio[t]) are the standardized errors.
  std::vector<double> variance_ratio;
};

// Runs the exact Kalman filter. Errors (InvalidArgument): p or q above 5, too
// few or non-finite observations, sigma2 <= 0, AR part not stationary or MA
// part not invertible.
absl::StatusOr<ArmaFilterOutput> ArmaFilter(absl::Span<const double> y, const ArmaParams& params);

// The exact log-likelihood only (same checks as ArmaFilter).
absl::StatusOr<double> ArmaExactLogLikelihood(absl::Span<const double> y, const ArmaParams& params);

struct ArmaFitOptions {
  // Order of the long autoregression of the Hannan-Rissanen first stage;
  // 0 = automatic: max(20, 2 max(p,q)) but at most n / 4. Cost O(n m^2).
  int long_ar_order = 0;
  // Optimizer budget (likelihood evaluations); default 3000. Each costs O(n).
  int max_evaluations = 3000;
  // Relative tolerance on the optimizer coordinates; default 1e-8.
  double xtol_rel = 1e-8;
  // Relative tolerance on the objective (log-likelihood per observation),
  // for the derivative-free search and the Levenberg-Marquardt iterations
  // (converged after two accepted steps running within it); default 1e-12.
  double ftol_rel = 1e-12;
  // Levenberg-Marquardt iterations on the exact likelihood written as a sum of
  // squares, tried before the derivative-free search (which then starts from
  // their best point if they do not converge); each costs p + q + 2 or more
  // filter passes. 0 = derivative-free search only. Default 30.
  int gauss_newton_iterations = 30;
};

struct ArmaFit {
  int nobs = 0;
  ArmaParams params;              // maximum-likelihood estimates
  ArmaParams start;               // Hannan-Rissanen starting values
  double loglik = 0.0;            // exact log-likelihood at params
  double aic = 0.0;               // -2 loglik + 2 (p + q + 2)
  double bic = 0.0;               // -2 loglik + log(n) (p + q + 2)
  std::vector<double> residuals;  // one-step prediction errors at params; n entries
  bool converged = false;         // stopped on a tolerance or round-off limit, not the budget
  int evaluations = 0;            // likelihood evaluations used
  std::string optimizer_message;  // how the optimizer stopped
};

// Hannan-Rissanen (1982) estimates: a long autoregression by least squares
// gives residual estimates, then y is regressed on a constant, its p lags and
// q lagged residuals. Non-stationary or non-invertible estimates are shrunk
// towards zero (coefficient j multiplied by 0.9^j repeatedly) until valid.
// mu is the sample mean; sigma2 the mean squared second-stage residual.
// REQUIRES: 0 <= p, q <= 5, n >= 20 + 4 (p + q), finite non-constant y.
absl::StatusOr<ArmaParams> HannanRissanen(absl::Span<const double> y, int p, int q,
                                          const ArmaFitOptions& options = ArmaFitOptions());

// Gaussian maximum likelihood of ARMA(p,q) with a constant, started from
// HannanRissanen. ARMA(0,0) is solved in closed form. Same requirements as
// HannanRissanen. A fit that exhausts the budget is returned with
// converged == false (not an error).
absl::StatusOr<ArmaFit> FitArma(absl::Span<const double> y, int p, int q,
                                const ArmaFitOptions& options = ArmaFitOptions());

// Standard errors from the inverse of the numerical Hessian (central
// differences) of the exact log-likelihood, in the order
// mu, ar_1..ar_p, ma_1..ma_q, sigma2. FailedPrecondition when the Hessian is
// not negative definite (not a maximum).
absl::StatusOr<std::vector<double>> ArmaStandardErrors(absl::Span<const double> y,
                                                       const ArmaParams& params);

enum class InfoCriterion { kAic, kBic };

struct ArmaCandidate {
  int p = 0;
  int q = 0;
  absl::Status status;  // OK when the fit succeeded; the criteria are then valid
  double loglik = 0.0;
  double aic = 0.0;
  double bic = 0.0;
  bool converged = false;
  int evaluations = 0;  // likelihood evaluations of this candidate's fit
};

struct ArmaSelection {
  InfoCriterion criterion = InfoCriterion::kAic;
  ArmaFit best;                           // the chosen model's full fit
  std::vector<ArmaCandidate> candidates;  // every (p, q), p-major order
};

// Fits every ARMA(p,q) with p <= max_p, q <= max_q and keeps the converged fit
// with the smallest criterion (a fit that did not converge is still eligible
// when no candidate converged). The long autoregression is shared, and each
// candidate also starts from its fitted neighbours (p-1,q) and (p,q-1), padded
// with zeros, when they have a higher likelihood than the Hannan-Rissanen
// values; so a larger model's log-likelihood is never below a nested
// neighbour's (up to the tolerance). Candidates too large for the series carry
// their error in ArmaCandidate::status. REQUIRES: 0 <= max_p, max_q <= 5. Errors when
// no candidate could be fitted at all.
absl::StatusOr<ArmaSelection> SelectArmaOrder(absl::Span<const double> y, int max_p, int max_q,
                                              InfoCriterion criterion = InfoCriterion::kAic,
                                              const ArmaFitOptions& options = ArmaFitOptions());

}  // namespace aftershock

#endif  // AFTERSHOCK_ARMA_H_
