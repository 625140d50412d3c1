// Constrained (quasi-)maximum-likelihood estimation of a GARCH-family model,
// with Hessian-based and Bollerslev–Wooldridge robust standard errors
// (PRODUCT.md C2).
//
// How it works: the returns are divided by their sample standard deviation c
// so every problem is on a unit scale; NLopt's SLSQP maximizes the log-likelihood
// with the analytic gradient under bounds (omega > 0; alpha, gamma, beta >= 0;
// |ar|, |ma| < 1; 2 < nu <= 500) and the inequality constraint
// persistence <= kOptimizerMaxPersistence; the estimates are mapped back
// (mu * c, omega * c^2). A warm start is tried first when given; if that fit
// fails, a grid of cold starts follows ("fallback start"), then a derivative-free
// polish (COBYLA) from the best point found.
//
// Thread-safety: FitModel is reentrant; concurrent calls share nothing.
#ifndef AFTERSHOCK_ESTIMATOR_H_
#define AFTERSHOCK_ESTIMATOR_H_

#include <optional>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"

namespace aftershock {

// Upper bound on persistence used inside the optimizer (the constraint check
// accepts up to kMaxPersistence).
inline constexpr double kOptimizerMaxPersistence = 0.9999;

struct FitOptions {
  // Presample rule of the variance recursion. Default: mean of squared residuals.
  Presample presample = Presample::kMeanSquare;
  // Optional starting point (a previous fit of the same spec). Tried first; the
  // cold-start grid is the fallback. Ignored if its spec differs.
  std::optional<ModelParams> start;
  // Hold the mean parameters at start's values (two-step estimation). REQUIRES: start.
  bool fix_mean = false;
  // Decay of the EWMA variance (fixed, never estimated). Default 0.94.
  double ewma_lambda = 0.94;
  // Objective evaluations allowed per optimizer run. Default 2000.
  int max_evaluations = 2000;
  // Relative tolerance on the objective (mean negative log-likelihood). Default 1e-11.
  double ftol_rel = 1e-11;
  // Relative tolerance on the parameters. Default 1e-9.
  double xtol_rel = 1e-9;
  // Newton iterations allowed from the first start (the warm start, else the
  // best point of the cold grid) where the likelihood has an analytic Hessian
  // (zero or constant mean, GARCH(1,1) or GJR-GARCH(1,1), steps kept inside
  // the bounds; zero mean with ARCH/GARCH/GJR variance of any order, a bound
  // held once reached, converged at a Karush-Kuhn-Tucker point), and
  // from a warm start elsewhere (not EWMA) with a Hessian by differences of the
  // gradient; when they do not converge SLSQP runs from the same start.
  // 0 = SLSQP only. Default 12.
  int newton_iterations = 12;
  // Newton's convergence test: largest gradient component of the mean
  // log-likelihood per observation, on the unit-variance scale of the fit.
  // At 1e-6 the log-likelihood is within ~1e-10 nats of the maximum on 2,000
  // bars (the remaining gain is quadratic in the gradient). Default 1e-6.
  double newton_gradient_tol = 1e-6;
  // Compute both kinds of standard errors (cost: one extra pass with the
  // analytic Hessian where there is one, else 2K extra gradient evaluations for
  // the Hessian by central differences of the analytic gradient).
  bool std_errors = true;
  // Keep the residual and conditional-variance series in the result (2n doubles).
  bool keep_series = false;
};

struct FitResult {
  ModelParams params;                  // estimates (fixed entries as given)
  std::vector<std::string> names;      // parameter names, params order
  std::vector<bool> fixed;             // true where the parameter was not estimated
  std::vector<double> std_errors;      // from the inverse Hessian; NaN if fixed/unavailable
  std::vector<double> robust_std_errors;  // Bollerslev–Wooldridge sandwich; NaN likewise
  double loglik = 0;
  double aic = 0;                      // -2 loglik + 2 k
  double bic = 0;                      // -2 loglik + k log(nobs)
  int nobs = 0;                        // likelihood terms
  int num_estimated = 0;               // k
  bool converged = false;              // optimizer reported success and the point is feasible
  int iterations = 0;                  // objective evaluations, all runs included
  double seconds = 0;                  // wall time of the fit
  std::string start_used;              // "warm", "grid" or "fallback"
  std::string optimizer_message;       // the optimizer's final word
  Presample presample = Presample::kMeanSquare;
  std::vector<std::string> warnings;   // e.g. persistence near 1, nu at its bound
  std::vector<double> residuals;       // if keep_series
  std::vector<double> sigma2;          // if keep_series
};

// Smallest sample accepted: max(kMinFitObservations, 10 * estimated params).
inline constexpr int kMinFitObservations = 30;

// Checks a return series before fitting: enough observations, all finite, not
// constant. Messages name the offending observation (1-based).
absl::Status ValidateReturns(absl::Span<const double> returns, int min_obs);

// Fits `spec` to `returns`. Errors (InvalidArgument) for an invalid spec, too few
// observations, non-finite values or a constant series; a fit that does not
// converge is returned with converged == false (not an error).
absl::StatusOr<FitResult> FitModel(const ModelSpec& spec, absl::Span<const double> returns,
                                   const FitOptions& options = {});

}  // namespace aftershock

#endif  // AFTERSHOCK_ESTIMATOR_H_
