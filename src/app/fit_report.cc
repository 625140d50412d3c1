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
  // Counts of alpha, gamma and beta terms (0 where the kind has none).
  m["shock_lags"] = spec.arch_order;
  m["asym_lags"] = spec.asym_order;
  m["variance_lags"] = spec.garch_order;
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
  j["estimates"] = params;
  j["se_hessian"] = se;
  j["se_robust"] = rse;
  nlohmann::json fixed = nlohmann::json::array();
  for (size_t i = 0; i < fit.names.size(); ++i) {
    if (fit.fixed[i]) fixed.push_back(fit.names[i]);
  }
  j["fixed"] = fixed;
  j["log_likelihood"] = JsonNumber(fit.loglik);
  j["aic"] = JsonNumber(fit.aic);
  j["bic"] = JsonNumber(fit.bic);
  j["likelihood_terms"] = fit.nobs;
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

namespace {

// Two-sided p-value of estimate / se against the standard normal.
double TwoSidedP(double z) { return std::erfc(std::fabs(z) / std::sqrt(2.0)); }

std::string Num(double x) { return std::isfinite(x) ? absl::StrFormat("%.4g", x) : "n/a"; }

}  // namespace

std::string FitVerdict(const ModelParams& params, double periods_per_year) {
  const ModelSpec& spec = params.spec;
  const double ppy = periods_per_year > 0 ? periods_per_year : 252;
  const auto long_run = [&](double var) {
    const double sd = std::sqrt(var);
    return absl::StrFormat("long-run volatility %s per bar, %s a year (%s bars)", Num(sd),
                           Num(sd * std::sqrt(ppy)), absl::StrFormat("%g", ppy));
  };
  if (spec.variance == VarianceKind::kConstant) {
    return absl::StrCat("no memory (flat variance): every bar has the same variance; ",
                        long_run(params.UnconditionalVariance()));
  }
  const double m = params.Persistence();
  if (spec.variance == VarianceKind::kEwma) {
    return absl::StrFormat(
        "memory %.3g (EWMA, fixed): a variance shock halves in %.1f bars; no long-run level", m,
        std::log(0.5) / std::log(m));
  }
  if (!(m >= 0) || m >= 1) {
    return absl::StrFormat("memory %s: variance shocks never fade; no long-run level", Num(m));
  }
  if (m == 0) {
    return absl::StrCat("memory 0: shocks do not carry over; ",
                        long_run(params.UnconditionalVariance()));
  }
  return absl::StrFormat("memory %.3g: a variance shock halves in %.1f bars; %s", m,
                         std::log(0.5) / std::log(m), long_run(params.UnconditionalVariance()));
}

std::string FitResultText(const FitResult& fit, const std::string& title, double periods_per_year,
                          const std::string& details) {
  std::string out;
  absl::StrAppend(&out, fit.params.spec.Label(), title.empty() ? "" : " on ", title, "\n");
  absl::StrAppend(&out, "  ", FitVerdict(fit.params, periods_per_year), "\n\n");
  absl::StrAppend(&out, absl::StrFormat("Likelihood terms %d   presample %s   start %s\n", fit.nobs,
                                        std::string(PresampleName(fit.presample)), fit.start_used));
  absl::StrAppend(&out, absl::StrFormat("Converged        %s (%s, %d evaluations, %.2f ms)\n\n",
                                        fit.converged ? "yes" : "NO", fit.optimizer_message,
                                        fit.iterations, fit.seconds * 1e3));
  absl::StrAppend(&out,
                  absl::StrFormat("  %-10s %12s %11s %11s   %-25s %8s\n", "parameter", "estimate",
                                  "se_hessian", "se_robust", "95 % interval (robust)", "p-value"));
  for (size_t i = 0; i < fit.names.size(); ++i) {
    const double v = fit.params.values[i];
    if (fit.fixed[i]) {
      absl::StrAppend(&out, absl::StrFormat("  %-10s %12.6g %11s\n", fit.names[i], v, "(fixed)"));
      continue;
    }
    const double se = fit.std_errors[i], rse = fit.robust_std_errors[i];
    const bool ok = std::isfinite(rse) && rse > 0;
    const std::string interval = ok ? absl::StrFormat("[%.4g, %.4g]", v - 1.959963984540054 * rse,
                                                      v + 1.959963984540054 * rse)
                                    : "n/a";
    // nu = 0 is no hypothesis anyone holds (the Gaussian is nu -> infinity).
    const bool testable = fit.names[i] != "nu";
    absl::StrAppend(
        &out, absl::StrFormat("  %-10s %12.6g %11s %11s   %-25s %8s\n", fit.names[i], v, Num(se),
                              Num(rse), interval, ok && testable ? Num(TwoSidedP(v / rse)) : "-"));
  }
  absl::StrAppend(&out,
                  "  (p-value: estimate = 0, robust s.e., normal approximation; for the variance\n"
                  "  coefficients 0 is the edge of the allowed range, so it is conservative)\n\n");
  absl::StrAppend(&out, absl::StrFormat("  log-likelihood %.4f   AIC %.4f   BIC %.4f\n", fit.loglik,
                                        fit.aic, fit.bic));
  if (fit.params.spec.variance != VarianceKind::kConstant &&
      fit.params.spec.variance != VarianceKind::kEwma) {
    absl::StrAppend(&out, absl::StrFormat("  unconditional variance %.6g per bar\n",
                                          fit.params.UnconditionalVariance()));
  }
  if (!fit.warnings.empty()) {
    absl::StrAppend(&out, "\nWarnings:\n");
    for (const auto& w : fit.warnings) absl::StrAppend(&out, "  - ", w, "\n");
  }
  absl::StrAppend(&out, details, "\n", kEstimateCaution, "\n");
  return out;
}

}  // namespace aftershock::app
