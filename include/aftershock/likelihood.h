// Conditional log-likelihood of a GARCH-family model and its analytic gradient
// (total and per observation), PRODUCT.md C1/C2.
//
// Recursions (t indexes the sample after the first ConditioningObs() returns):
//   mean:     m_t = mu + sum_i ar_i r_{t-i} + sum_j ma_j eps_{t-j}, eps_t = r_t - m_t,
//             presample eps = 0 (the ARMA part conditions on the first p returns);
//             `mu` is the intercept, so the unconditional mean is mu / (1 - sum ar).
//   variance: sigma2_t = omega + sum_i alpha_i eps2_{t-i} + sum_i gamma_i 1{eps<0}eps2_{t-i}
//                        + sum_j beta_j sigma2_{t-j};
//             EWMA: sigma2_t = lambda sigma2_{t-1} + (1-lambda) eps2_{t-1}.
//   presample: sigma2 and eps2 before the sample equal s2 (1{eps<0}eps2 equals s2/2),
//             s2 chosen by the Presample rule (model_spec.h); s2 depends on the mean
//             parameters and the gradient accounts for it.
//   loglik:   sum_t [ log f(eps_t / sigma_t) - log(sigma2_t) / 2 ], f the standardized
//             normal or Student-t density.
//
// Thread-safety: free functions; no shared state.
#ifndef AFTERSHOCK_LIKELIHOOD_H_
#define AFTERSHOCK_LIKELIHOOD_H_

#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"

namespace aftershock {

struct LikelihoodOptions {
  // Presample rule for the variance recursion. Default: mean of squared residuals.
  Presample presample = Presample::kMeanSquare;
  // Compute the gradient (cost: about K times the plain evaluation, K = #params).
  bool gradient = true;
  // Keep the per-observation scores (nobs x K, row-major). Cost: nobs*K doubles.
  bool scores = false;
  // Keep the residual and conditional-variance series. Cost: 2*nobs doubles.
  bool series = false;
};

struct LikelihoodResult {
  double loglik = 0;            // total log-likelihood (-inf if a variance is not positive)
  int nobs = 0;                 // number of likelihood terms
  std::vector<double> gradient;  // d loglik / d params, params order (if requested)
  std::vector<double> scores;    // per-observation gradient rows (if requested)
  std::vector<double> residuals; // eps_t (if series requested)
  std::vector<double> sigma2;    // sigma2_t (if series requested)
  double presample_variance = 0; // the s2 that was used
};

// Evaluates the log-likelihood of `returns` under `params`.
// REQUIRES: params.values.size() == params.spec.NumParams().
// Errors: InvalidArgument if the spec is invalid, the sample is shorter than the
// conditioning observations plus one, or a return is not finite.
absl::StatusOr<LikelihoodResult> EvaluateLikelihood(const ModelParams& params,
                                                    absl::Span<const double> returns,
                                                    const LikelihoodOptions& options = {});

}  // namespace aftershock

#endif  // AFTERSHOCK_LIKELIHOOD_H_
