// PipelineRefitter: the Refitter the engine uses. The identification pipeline
// (identify.h) chooses and fits the model on a symbol's first refit, when the
// coordinator asks for re-identification (every reidentify_every refits and
// after a failed gate); otherwise the current model is re-estimated from its
// own parameters (warm start). Every candidate carries the residual
// diagnostics the quality gate checks.
//
// Thread-safety: stateless after construction; Fit is safe to call from every
// refit worker at once.
#ifndef AFTERSHOCK_PIPELINE_REFITTER_H_
#define AFTERSHOCK_PIPELINE_REFITTER_H_

#include <memory>

#include "absl/status/statusor.h"
#include "aftershock/identify.h"
#include "aftershock/refitter.h"

namespace aftershock {

struct PipelineRefitterOptions {
  // Options of the identification runs (criterion, grids, lags, level,
  // presample). Default IdentifyOptions{} but smaller grids suited to frequent
  // refits: ARMA up to (1,1), ARCH up to 3.
  IdentifyOptions identify;
  // Estimator settings of warm refits; `start` is overwritten.
  FitOptions fit;

  PipelineRefitterOptions() {
    identify.max_ar = 1;
    identify.max_ma = 1;
    identify.max_arch_order = 3;
  }
};

class PipelineRefitter : public Refitter {
 public:
  static std::unique_ptr<PipelineRefitter> Create(const PipelineRefitterOptions& options = {});
  absl::StatusOr<RefitCandidate> Fit(const RefitRequest& request) override;

 private:
  explicit PipelineRefitter(const PipelineRefitterOptions& options) : options_(options) {}
  const PipelineRefitterOptions options_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_PIPELINE_REFITTER_H_
