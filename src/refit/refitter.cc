#include "aftershock/refitter.h"

#include <cmath>
#include <memory>

#include "absl/strings/str_cat.h"

namespace aftershock {

EstimatorRefitterOptions EstimatorRefitter::DefaultOptions() {
  EstimatorRefitterOptions o;
  ModelSpec garch;  // constant mean, GARCH(1,1), normal
  ModelSpec gjr = garch;
  gjr.variance = VarianceKind::kGjr;
  gjr.asym_order = 1;
  for (const ModelSpec& base : {garch, gjr}) {
    for (Innovations law : {Innovations::kNormal, Innovations::kStudentT}) {
      ModelSpec s = base;
      s.innovations = law;
      o.candidates.push_back(s);
    }
  }
  return o;
}

absl::StatusOr<std::unique_ptr<EstimatorRefitter>> EstimatorRefitter::Create(
    const EstimatorRefitterOptions& options) {
  if (auto s = options.initial_spec.Validate(); !s.ok()) {
    return absl::InvalidArgumentError(absl::StrCat("initial_spec: ", s.message()));
  }
  for (const ModelSpec& c : options.candidates) {
    if (auto s = c.Validate(); !s.ok()) {
      return absl::InvalidArgumentError(absl::StrCat("candidate ", c.Label(), ": ", s.message()));
    }
  }
  return std::unique_ptr<EstimatorRefitter>(new EstimatorRefitter(options));
}

absl::StatusOr<RefitCandidate> EstimatorRefitter::Fit(const RefitRequest& req) {
  const ModelSpec current_spec = req.current ? req.current->spec : options_.initial_spec;
  auto fit_one = [&](const ModelSpec& spec) -> absl::StatusOr<FitResult> {
    FitOptions fo = options_.fit;
    fo.start.reset();
    if (req.current && req.current->spec == spec) fo.start = *req.current;
    return FitModel(spec, req.returns, fo);
  };
  if (!req.reidentify || options_.candidates.empty()) {
    auto fit = fit_one(current_spec);
    if (!fit.ok()) return fit.status();
    RefitCandidate c;
    c.fit = std::move(*fit);
    c.note = absl::StrCat("re-estimated ", current_spec.Label(), " (", c.fit.start_used, " start)");
    return c;
  }
  std::optional<FitResult> best;
  absl::Status last_error = absl::OkStatus();
  for (ModelSpec spec : options_.candidates) {
    // Keep the mean equation of the model in force.
    spec.mean = current_spec.mean;
    spec.ar_order = current_spec.ar_order;
    spec.ma_order = current_spec.ma_order;
    auto fit = fit_one(spec);
    if (!fit.ok()) {
      last_error = fit.status();
      continue;
    }
    const bool better =
        !best || (fit->converged && !best->converged) ||
        (fit->converged == best->converged && std::isfinite(fit->bic) && !(fit->bic >= best->bic));
    if (better) best = std::move(*fit);
  }
  if (!best) return last_error;
  RefitCandidate c;
  c.fit = std::move(*best);
  c.note = absl::StrCat("reidentified: ", c.fit.params.spec.Label(), " by BIC among ",
                        options_.candidates.size(), " candidates");
  return c;
}

}  // namespace aftershock
