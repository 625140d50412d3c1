#include "aftershock/likelihood.h"

#include <cmath>

#include "absl/strings/str_cat.h"
#include "estimation/likelihood_kernel.h"

namespace aftershock {

absl::StatusOr<LikelihoodResult> EvaluateLikelihood(const ModelParams& params,
                                                    absl::Span<const double> returns,
                                                    const LikelihoodOptions& options) {
  const ModelSpec& spec = params.spec;
  if (auto s = spec.Validate(); !s.ok()) return s;
  if (static_cast<int>(params.values.size()) != spec.NumParams()) {
    return absl::InvalidArgumentError(absl::StrCat("model ", spec.Label(), " needs ",
                                                   spec.NumParams(), " parameters, got ",
                                                   params.values.size()));
  }
  if (static_cast<int>(returns.size()) <= spec.ConditioningObs()) {
    return absl::InvalidArgumentError(absl::StrCat("too few observations: ", returns.size(),
                                                   " for model ", spec.Label()));
  }
  for (size_t i = 0; i < returns.size(); ++i) {
    if (!std::isfinite(returns[i])) {
      return absl::InvalidArgumentError(
          absl::StrCat("observation ", i + 1, " is not a finite number"));
    }
  }
  internal::LikelihoodKernel kernel(spec, std::vector<double>(returns.begin(), returns.end()),
                                    options.presample);
  LikelihoodResult out;
  out.nobs = kernel.nobs();
  const bool grad = options.gradient || options.scores;
  if (grad) out.gradient.assign(spec.NumParams(), 0.0);
  if (options.scores) out.scores.assign(static_cast<size_t>(out.nobs) * spec.NumParams(), 0.0);
  out.loglik = kernel.Evaluate(params.values.data(), grad ? out.gradient.data() : nullptr,
                               options.scores ? out.scores.data() : nullptr);
  if (!options.gradient && !options.scores) out.gradient.clear();
  out.presample_variance = kernel.presample_variance();
  if (options.series) {
    out.residuals = kernel.residuals();
    out.sigma2 = kernel.sigma2();
  }
  return out;
}

}  // namespace aftershock
