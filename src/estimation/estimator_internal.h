// Entry points of the estimator for callers inside the library that share work
// across several fits of one window (identification).
//
// Thread-safety: pure functions.
#ifndef AFTERSHOCK_ESTIMATION_ESTIMATOR_INTERNAL_H_
#define AFTERSHOCK_ESTIMATION_ESTIMATOR_INTERNAL_H_

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/estimator.h"

namespace aftershock::internal {

// FitModel(spec, returns, options) with options.fix_mean, given the residuals
// of the fixed mean (EvaluateLikelihood(*options.start, returns).residuals):
// the residuals depend on the mean block only, so variance models that share
// it share them. REQUIRES: options.fix_mean, options.start of `spec`, a
// non-zero mean and at least one estimated variance or law parameter.
absl::StatusOr<FitResult> FitOnFixedMeanResiduals(const ModelSpec& spec,
                                                  absl::Span<const double> residuals,
                                                  const FitOptions& options);

}  // namespace aftershock::internal

#endif  // AFTERSHOCK_ESTIMATION_ESTIMATOR_INTERNAL_H_
