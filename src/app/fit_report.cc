#include "app/fit_report.h"

#include <cmath>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"

namespace aftershock::app {

const char kEstimateCaution[] =
    "These figures are statistical estimates, not advice. Models fail in crises and parameters\n"
    "are estimated with error; any use for trading or risk limits must follow your firm's\n"
    "model-risk policy and applicable regulation.";

nlohmann::json JsonNumber(double v) {
  if (!std::isfinite(v)) return nullptr;
  return v;
}

nlohmann::json ModelSpecJson(const ModelSpec& spec) {
  nlohmann::json m;
  m["mean"] = std::string(MeanKindName(spec.mean));
  m["mean_order"] = spec.mean == MeanKind::kArma
                        ? nlohmann::json::array({spec.ar_order, spec.ma_order})
                        : nlohmann::json::array();
  m["variance"] = std::string(VarianceKindName(spec.variance));
  switch (spec.variance) {
    case VarianceKind::kArch:
      m["variance_order"] = {spec.arch_order};
      break;
    case VarianceKind::kGarch:
      m["variance_order"] = {spec.arch_order, spec.garch_order};
      break;
    case VarianceKind::kGjr:
      m["variance_order"] = {spec.arch_order, spec.asym_order, spec.garch_order};
      break;
    default:
      m["variance_order"] = nlohmann::json::array();
  }
  m["innovations"] = std::string(InnovationsName(spec.innovations));
  m["label"] = spec.Label();
  return m;
}

nlohmann::json FitResultJson(const FitResult& fit) {
  nlohmann::json j;
  j["model"] = ModelSpecJson(fit.params.spec);
  nlohmann::json params = nlohmann::json::object(), se = nlohmann::json::object(),
                 rse = nlohmann::json::object();
  for (size_t i = 0; i < fit.names.size(); ++i) {
    params[fit.names[i]] = JsonNumber(fit.params.values[i]);
    se[fit.names[i]] = JsonNumber(fit.std_errors[i]);
    rse[fit.names[i]] = JsonNumber(fit.robust_std_errors[i]);
  }
  j["params"] = params;
  j["std_errors"] = se;
  j["robust_std_errors"] = rse;
  nlohmann::json fixed = nlohmann::json::array();
  for (size_t i = 0; i < fit.names.size(); ++i) {
    if (fit.fixed[i]) fixed.push_back(fit.names[i]);
  }
  j["fixed"] = fixed;
  j["loglik"] = JsonNumber(fit.loglik);
  j["aic"] = JsonNumber(fit.aic);
  j["bic"] = JsonNumber(fit.bic);
  j["nobs"] = fit.nobs;
  j["converged"] = fit.converged;
  j["iterations"] = fit.iterations;
  j["seconds"] = fit.seconds;
  j["presample"] = std::string(PresampleName(fit.presample));
  j["start"] = fit.start_used;
  j["optimizer"] = fit.optimizer_message;
  const double pers = fit.params.Persistence();
  j["persistence"] = JsonNumber(pers);
  j["unconditional_variance"] = JsonNumber(fit.params.UnconditionalVariance());
  j["half_life_bars"] =
      (pers > 0 && pers < 1) ? JsonNumber(std::log(0.5) / std::log(pers)) : nlohmann::json();
  j["warnings"] = fit.warnings;
  return j;
}

std::string FitResultText(const FitResult& fit, const std::string& title) {
  std::string out;
  absl::StrAppend(&out, "Model estimate: ", fit.params.spec.Label(), "\n");
  if (!title.empty()) absl::StrAppend(&out, "Data:           ", title, "\n");
  absl::StrAppend(&out, absl::StrFormat(
      "Observations:   %d   presample: %s   start: %s\n", fit.nobs,
      std::string(PresampleName(fit.presample)), fit.start_used));
  absl::StrAppend(&out, absl::StrFormat("Converged:      %s (%s, %d evaluations, %.2f ms)\n\n",
                                        fit.converged ? "yes" : "NO", fit.optimizer_message,
                                        fit.iterations, fit.seconds * 1e3));
  absl::StrAppend(&out, absl::StrFormat("  %-10s %14s %12s %12s %9s\n", "parameter", "estimate",
                                        "std.err", "robust s.e.", "t(robust)"));
  for (size_t i = 0; i < fit.names.size(); ++i) {
    const double v = fit.params.values[i];
    if (fit.fixed[i]) {
      absl::StrAppend(&out, absl::StrFormat("  %-10s %14.6g %12s %12s %9s\n", fit.names[i], v,
                                            "(fixed)", "", ""));
      continue;
    }
    const double se = fit.std_errors[i], rse = fit.robust_std_errors[i];
    auto fmt = [](double x) { return std::isfinite(x) ? absl::StrFormat("%.6g", x) : "n/a"; };
    absl::StrAppend(&out, absl::StrFormat("  %-10s %14.6g %12s %12s %9s\n", fit.names[i], v,
                                          fmt(se), fmt(rse),
                                          std::isfinite(rse) && rse > 0
                                              ? absl::StrFormat("%.2f", v / rse)
                                              : "n/a"));
  }
  absl::StrAppend(&out, "\n");
  absl::StrAppend(&out, absl::StrFormat("  log-likelihood %.4f   AIC %.4f   BIC %.4f\n",
                                        fit.loglik, fit.aic, fit.bic));
  const double pers = fit.params.Persistence();
  if (fit.params.spec.variance != VarianceKind::kConstant &&
      fit.params.spec.variance != VarianceKind::kEwma) {
    absl::StrAppend(&out, absl::StrFormat(
        "  persistence %.5f   unconditional variance %.6g   half-life %.1f bars\n", pers,
        fit.params.UnconditionalVariance(), std::log(0.5) / std::log(pers)));
  }
  if (!fit.warnings.empty()) {
    absl::StrAppend(&out, "\nWarnings:\n");
    for (const auto& w : fit.warnings) absl::StrAppend(&out, "  - ", w, "\n");
  }
  absl::StrAppend(&out, "\n", kEstimateCaution, "\n");
  return out;
}

}  // namespace aftershock::app
