#include "aftershock/quality_gate.h"

#include <cmath>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"

namespace aftershock {
namespace {

void CheckP(const char* what, const std::optional<double>& p, double level,
            std::vector<std::string>* reasons) {
  if (!p.has_value()) return;
  if (!(*p >= level)) {  // NaN fails too
    reasons->push_back(absl::StrFormat("diagnostics: %s p-value %.4g < %.4g", what, *p, level));
  }
}

}  // namespace

GateOutcome EvaluateQualityGate(const GateInput& in, const RefitOptions& o) {
  GateOutcome out;
  std::vector<std::string>& why = out.reasons;
  const ModelParams& p = *in.params;
  if (!in.converged) why.push_back("fit did not converge");
  bool finite = p.values.size() == static_cast<size_t>(p.spec.NumParams());
  if (!finite) {
    why.push_back(absl::StrCat("parameter count ", p.values.size(), " does not match the spec (",
                               p.spec.NumParams(), ")"));
  } else {
    const std::vector<std::string> names = p.spec.ParamNames();
    for (size_t i = 0; i < p.values.size(); ++i) {
      if (!std::isfinite(p.values[i])) {
        why.push_back(absl::StrCat("parameter ", names[i], " is not finite"));
        finite = false;
      }
    }
  }
  if (finite) {
    if (auto s = p.CheckConstraints(); !s.ok()) {
      why.push_back(absl::StrCat("constraints: ", s.message()));
    }
    const double phi = p.Persistence();
    if (!(phi < o.max_persistence)) {
      why.push_back(
          absl::StrFormat("persistence %.6g >= max_persistence %.6g", phi, o.max_persistence));
    }
  }
  if (o.diagnostics_level > 0) {
    CheckP("Ljung-Box on z^2", in.diagnostics.ljung_box_sq_p, o.diagnostics_level, &why);
    CheckP("Ljung-Box on z", in.diagnostics.ljung_box_p, o.diagnostics_level, &why);
    CheckP("ARCH-LM", in.diagnostics.arch_lm_p, o.diagnostics_level, &why);
  }
  if (finite && in.holdout.has_value() && in.holdout->bars > 0) {
    const HoldoutScore& h = *in.holdout;
    const double cand = h.candidate_loglik / h.bars;
    const double cur = h.current_loglik / h.bars;
    if (!std::isfinite(cand)) {
      why.push_back("holdout: candidate log-likelihood is not finite");
    } else if (std::isfinite(cur) && cand < cur - o.holdout_margin) {
      why.push_back(absl::StrFormat(
          "holdout: %.4f nats/bar below the current model over %d bars (margin %.4g)", cur - cand,
          h.bars, o.holdout_margin));
    }
  }
  out.passed = why.empty();
  return out;
}

}  // namespace aftershock
