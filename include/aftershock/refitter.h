// Refitter: how a refit candidate is produced from a symbol's window
// (PRODUCT.md C5), as an injected interface so the identification pipeline
// (C3) can replace the default behind it. EstimatorRefitter is the default:
// a warm-started re-estimation of the current spec, or, when re-identification
// is requested, a small fixed candidate set chosen by BIC.
//
// Thread-safety: Fit is called concurrently from the worker threads of the
// refit pool, for different symbols; implementations must be thread-safe.
#ifndef AFTERSHOCK_REFITTER_H_
#define AFTERSHOCK_REFITTER_H_

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/estimator.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"

namespace aftershock {

struct RefitRequest {
  uint32_t symbol_id = 0;                // dense id of the coordinator
  absl::Span<const double> returns;      // the window copy, oldest first; valid during Fit
  const ModelParams* current = nullptr;  // the symbol's latest estimated model (also while
                                         // the EWMA fallback is in force); null before the first
  bool reidentify = false;               // choose the spec again, not just re-estimate
  uint64_t seed = 0;                     // for randomized refitters; stable per symbol and fit
  int64_t fit_index = 0;                 // 0 for the symbol's first refit, then 1, 2, ...
  int64_t bar = 0;                       // returns seen by the symbol when it was scheduled
};

// Residual diagnostics a candidate may carry (each optional: the gate skips
// the absent ones).
struct RefitDiagnostics {
  std::optional<double> ljung_box_sq_p;  // Ljung–Box on squared standardized residuals
  std::optional<double> ljung_box_p;     // Ljung–Box on standardized residuals
  std::optional<double> arch_lm_p;       // Engle's ARCH-LM on standardized residuals
};

struct RefitCandidate {
  FitResult fit;  // fit.params.spec is the candidate's spec
  RefitDiagnostics diagnostics;
  std::string note;  // e.g. "reidentified: const/GJR-GARCH(1,1)/student by BIC"
};

class Refitter {
 public:
  virtual ~Refitter() = default;
  // A candidate for request.returns. An error status counts as a failed refit
  // (the message is reported); a candidate still has to pass the quality gate.
  virtual absl::StatusOr<RefitCandidate> Fit(const RefitRequest& request) = 0;
};

struct EstimatorRefitterOptions {
  // Spec fitted when the symbol has no estimated model. Default constant-mean
  // Gaussian GARCH(1,1).
  ModelSpec initial_spec;
  // Variance families x laws tried when re-identifying (the mean of the current
  // model, or of initial_spec, is kept). Default GARCH(1,1) and GJR-GARCH(1,1), each
  // with normal and Student-t innovations.
  std::vector<ModelSpec> candidates;
  // Estimator settings; `start` is overwritten with the warm start. Default
  // FitOptions{} with robust standard errors on.
  FitOptions fit;
};

// Default refitter over FitModel. Stateless apart from its options.
class EstimatorRefitter : public Refitter {
 public:
  // InvalidArgument when a spec does not validate.
  static absl::StatusOr<std::unique_ptr<EstimatorRefitter>> Create(
      const EstimatorRefitterOptions& options = DefaultOptions());
  static EstimatorRefitterOptions DefaultOptions();

  // Without reidentify: FitModel on the current spec (initial_spec if none),
  // warm-started from the current parameters. With reidentify: every candidate
  // spec is fitted (warm where the spec matches) and the converged fit of
  // smallest BIC wins; when none converges, the smallest BIC is returned as is.
  absl::StatusOr<RefitCandidate> Fit(const RefitRequest& request) override;

 private:
  explicit EstimatorRefitter(const EstimatorRefitterOptions& options) : options_(options) {}
  const EstimatorRefitterOptions options_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_REFITTER_H_
