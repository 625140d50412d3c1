#include "aftershock/pipeline_refitter.h"

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

RefitDiagnostics FromTests(const std::vector<TestOutcome>& tests) {
  RefitDiagnostics d;
  for (const auto& t : tests) {
    if (t.name.rfind("Ljung-Box", 0) == 0 && t.name.find("z^2") != std::string::npos) {
      d.ljung_box_sq_p = t.p_value;
    } else if (t.name.rfind("Ljung-Box", 0) == 0) {
      d.ljung_box_p = t.p_value;
    } else if (t.name.rfind("ARCH-LM", 0) == 0) {
      d.arch_lm_p = t.p_value;
    }
  }
  return d;
}

}  // namespace

std::unique_ptr<PipelineRefitter> PipelineRefitter::Create(const PipelineRefitterOptions& options) {
  return std::unique_ptr<PipelineRefitter>(new PipelineRefitter(options));
}

absl::StatusOr<RefitCandidate> PipelineRefitter::Fit(const RefitRequest& request) {
  RefitCandidate out;
  if (request.reidentify || request.current == nullptr) {
    auto rep = IdentifyModel(request.returns, options_.identify);
    if (!rep.ok()) return rep.status();
    out.fit = rep->final_fit;
    out.diagnostics = FromTests(rep->diagnostics);
    out.note = absl::StrCat("identified ", rep->final_fit.params.spec.Label(), ": ",
                            rep->variance_decision);
    return out;
  }
  FitOptions fo = options_.fit;
  fo.presample = options_.identify.presample;
  fo.start = *request.current;
  fo.keep_series = true;
  auto fit = FitModel(request.current->spec, request.returns, fo);
  if (!fit.ok()) return fit.status();
  const ModelSpec& spec = fit->params.spec;
  out.diagnostics = FromTests(GateResidualDiagnostics(
      fit->residuals, fit->sigma2, spec.ar_order + spec.ma_order, options_.identify));
  fit->residuals.clear();
  fit->sigma2.clear();
  out.fit = *std::move(fit);
  out.note = absl::StrCat("re-estimated ", spec.Label(), " from version parameters");
  return out;
}

}  // namespace aftershock
