// The quality gate a refit candidate must pass before it is swapped in
// (PRODUCT.md C5). A pure function of the candidate, its holdout score and the
// options, so each rule is testable on its own.
//
// Rules, all evaluated (every failing rule adds one reason, in this order):
//   1. converged:    the optimizer converged;
//   2. finite:       every parameter is finite (when not, rules 3-4 and 6 are
//                    skipped: they would only restate it);
//   3. constraints:  ModelParams::CheckConstraints() is OK;
//   4. persistence:  Persistence() < max_persistence;
//   5. diagnostics:  each diagnostics p-value the candidate carries is >=
//                    diagnostics_level (skipped when the level is 0);
//   6. holdout:      when a current model is scored, the candidate's mean
//                    log-likelihood per holdout bar is not below the current
//                    model's by more than holdout_margin nats.
//
// Thread-safety: pure function.
#ifndef AFTERSHOCK_QUALITY_GATE_H_
#define AFTERSHOCK_QUALITY_GATE_H_

#include <optional>
#include <string>
#include <vector>

#include "aftershock/model_params.h"
#include "aftershock/refit_options.h"
#include "aftershock/refitter.h"

namespace aftershock {

// Log-likelihood of the candidate and of the current model on the most recent
// holdout bars of the window (see ScoreHoldout in refit.h).
struct HoldoutScore {
  int bars = 0;                 // holdout bars scored
  double candidate_loglik = 0;  // total over the holdout bars
  double current_loglik = 0;    // total over the same bars
};

struct GateInput {
  const ModelParams* params = nullptr;  // the candidate's estimates; REQUIRES non-null
  bool converged = false;
  RefitDiagnostics diagnostics;
  std::optional<HoldoutScore> holdout;  // absent: no current model or holdout disabled
};

struct GateOutcome {
  bool passed = false;
  std::vector<std::string> reasons;  // empty when passed
};

GateOutcome EvaluateQualityGate(const GateInput& input, const RefitOptions& options);

}  // namespace aftershock

#endif  // AFTERSHOCK_QUALITY_GATE_H_
