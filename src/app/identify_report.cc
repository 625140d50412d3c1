#include "app/identify_report.h"

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "app/fit_report.h"

namespace aftershock::app {
namespace {

nlohmann::json TestsJson(const std::vector<TestOutcome>& tests) {
  nlohmann::json a = nlohmann::json::array();
  for (const auto& t : tests) {
    a.push_back({{"test", t.name},
                 {"statistic", JsonNumber(t.statistic)},
                 {"df", t.df},
                 {"p_value", JsonNumber(t.p_value)},
                 {"rejected", t.rejected},
                 {"meaning", t.meaning}});
  }
  return a;
}

void AppendTests(std::string* out, const std::vector<TestOutcome>& tests) {
  absl::StrAppend(out, absl::StrFormat("    %-34s %12s %6s %10s  %s\n", "test", "statistic", "df",
                                       "p-value", "verdict"));
  for (const auto& t : tests) {
    absl::StrAppend(out, absl::StrFormat("    %-34s %12.4f %6.0f %10.4g  %s\n", t.name,
                                         t.statistic, t.df, t.p_value,
                                         t.rejected ? "REJECTED" : "not rejected"));
  }
}

// The residual diagnostics grouped by the question each answers, in the order
// a desk asks them.
void AppendDiagnostics(std::string* out, const std::vector<TestOutcome>& tests) {
  struct Group {
    const char* question;
    bool (*member)(const std::string& name);
  };
  static const Group kGroups[] = {
      {"Dynamics left in the mean?",
       [](const std::string& n) {
         return n.rfind("Ljung-Box", 0) == 0 && n.find("^2") == std::string::npos;
       }},
      {"Volatility clustering left?",
       [](const std::string& n) {
         return n.find("^2") != std::string::npos || n.rfind("ARCH-LM", 0) == 0;
       }},
      {"Asymmetry left?",
       [](const std::string& n) { return n.find("sign bias") != std::string::npos; }},
      {"Tails as the law assumes? (informative: fat tails are expected)",
       [](const std::string& n) { return n.rfind("Jarque-Bera", 0) == 0; }},
  };
  std::vector<bool> shown(tests.size(), false);
  for (const Group& g : kGroups) {
    std::vector<TestOutcome> members;
    for (size_t i = 0; i < tests.size(); ++i) {
      if (!shown[i] && g.member(tests[i].name)) {
        members.push_back(tests[i]);
        shown[i] = true;
      }
    }
    if (members.empty()) continue;
    absl::StrAppend(out, "  ", g.question, "\n");
    AppendTests(out, members);
  }
  std::vector<TestOutcome> rest;
  for (size_t i = 0; i < tests.size(); ++i) {
    if (!shown[i]) rest.push_back(tests[i]);
  }
  if (!rest.empty()) {
    absl::StrAppend(out, "  Other checks\n");
    AppendTests(out, rest);
  }
}

}  // namespace

std::string DiagnosticsText(const std::vector<TestOutcome>& tests) {
  std::string out;
  AppendDiagnostics(&out, tests);
  return out;
}

nlohmann::json IdentificationJson(const IdentificationReport& rep) {
  const bool aic = rep.options.criterion == InfoCriterion::kAic;
  nlohmann::json j;
  j["likelihood_terms"] = rep.nobs;
  j["criterion"] = aic ? "aic" : "bic";
  j["level"] = rep.options.level;
  nlohmann::json mean = nlohmann::json::array();
  for (const auto& c : rep.mean_candidates) {
    mean.push_back({{"p", c.p},
                    {"q", c.q},
                    {"ok", c.status.ok()},
                    {"log_likelihood", c.status.ok() ? JsonNumber(c.loglik) : nlohmann::json()},
                    {"aic", c.status.ok() ? JsonNumber(c.aic) : nlohmann::json()},
                    {"bic", c.status.ok() ? JsonNumber(c.bic) : nlohmann::json()},
                    {"error", c.status.ok() ? "" : std::string(c.status.message())}});
  }
  j["steps"]["mean_order"] = {{"candidates", mean},
                              {"chosen", {rep.ar_order, rep.ma_order}},
                              {"decision", rep.mean_decision}};
  j["steps"]["arch_effect"] = {{"tests", TestsJson(rep.arch_tests)},
                               {"squared_residual_pacf", rep.squared_residual_pacf},
                               {"present", rep.arch_effect},
                               {"decision", rep.arch_decision}};
  nlohmann::json var = nlohmann::json::array();
  for (const auto& c : rep.variance_candidates) {
    var.push_back({{"model", ModelSpecJson(c.spec)},
                   {"ok", c.ok},
                   {"eligible", c.eligible},
                   {"log_likelihood", c.ok ? JsonNumber(c.loglik) : nlohmann::json()},
                   {"aic", c.ok ? JsonNumber(c.aic) : nlohmann::json()},
                   {"bic", c.ok ? JsonNumber(c.bic) : nlohmann::json()},
                   {"num_params", c.num_params},
                   {"error", c.error}});
  }
  j["steps"]["variance"] = {{"candidates", var}, {"decision", rep.variance_decision}};
  j["steps"]["two_step"] = FitResultJson(rep.two_step);
  j["steps"]["diagnostics_two_step"] = TestsJson(rep.diagnostics_two_step);
  j["steps"]["joint"] = {{"decision", rep.joint_decision}};
  j["diagnostics"] = TestsJson(rep.diagnostics);
  j["diagnostics_pass"] = rep.diagnostics_pass;
  j["final"] = FitResultJson(rep.final_fit);
  // The final fit's fields also at the top level, as for an explicit model.
  for (auto it = j["final"].begin(); it != j["final"].end(); ++it) j[it.key()] = it.value();
  j["warnings"] = rep.warnings;
  return j;
}

std::string IdentificationText(const IdentificationReport& rep, const std::string& title,
                               double periods_per_year) {
  const bool aic = rep.options.criterion == InfoCriterion::kAic;
  std::string out;
  absl::StrAppend(&out, "Chosen: ", rep.final_fit.params.spec.Label(), "\n  ",
                  FitVerdict(rep.final_fit.params, periods_per_year), "\n\n");
  absl::StrAppend(&out, "Automatic identification", title.empty() ? "" : " of ", title, " (",
                  rep.nobs, " observations, criterion ", aic ? "AIC" : "BIC", ", level ",
                  rep.options.level, ")\n\n");
  absl::StrAppend(&out, "1. Mean order\n");
  absl::StrAppend(&out,
                  absl::StrFormat("    %-10s %14s %12s %12s\n", "ARMA", "log-lik", "AIC", "BIC"));
  for (const auto& c : rep.mean_candidates) {
    if (!c.status.ok()) {
      absl::StrAppend(&out, absl::StrFormat("    (%d,%d)      %s\n", c.p, c.q,
                                            std::string(c.status.message())));
      continue;
    }
    absl::StrAppend(&out, absl::StrFormat("    (%d,%d)%s %14.4f %12.4f %12.4f\n", c.p, c.q,
                                          (c.p == rep.ar_order && c.q == rep.ma_order) ? " *   "
                                                                                       : "     ",
                                          c.loglik, c.aic, c.bic));
  }
  absl::StrAppend(&out, "    -> ", rep.mean_decision, "\n\n2. ARCH effects in the mean residuals\n");
  AppendTests(&out, rep.arch_tests);
  absl::StrAppend(&out, "    PACF of squared residuals:");
  for (size_t i = 0; i < rep.squared_residual_pacf.size(); ++i) {
    absl::StrAppend(&out, absl::StrFormat(" %+.3f", rep.squared_residual_pacf[i]));
  }
  absl::StrAppend(&out, "\n    -> ", rep.arch_decision, "\n\n3. Variance model (mean fixed)\n");
  absl::StrAppend(&out,
                  absl::StrFormat("    %-34s %14s %12s %12s\n", "model", "log-lik", "AIC", "BIC"));
  for (const auto& c : rep.variance_candidates) {
    if (!c.ok) {
      absl::StrAppend(&out, absl::StrFormat("    %-34s %s\n", c.spec.Label(), c.error));
      continue;
    }
    const bool chosen = c.spec == rep.two_step.params.spec;
    absl::StrAppend(&out, absl::StrFormat("    %-32s%s %14.4f %12.4f %12.4f%s\n", c.spec.Label(),
                                          chosen ? " *" : "  ", c.loglik, c.aic, c.bic,
                                          c.eligible ? "" : "  (" + c.error + ")"));
  }
  absl::StrAppend(&out, "    -> ", rep.variance_decision, "\n\n4. Diagnostics of the two-step model\n");
  AppendDiagnostics(&out, rep.diagnostics_two_step);
  absl::StrAppend(&out, "\n5. Joint estimation\n    -> ", rep.joint_decision, "\n\n");
  absl::StrAppend(&out, "6. Diagnostics of the final model\n");
  AppendDiagnostics(&out, rep.diagnostics);
  absl::StrAppend(&out, "    -> ", rep.diagnostics_pass
                                      ? "no dependence left in z or z^2 at this level"
                                      : "some diagnostics failed (see warnings)",
                  "\n\n");
  FitResult final_fit = rep.final_fit;
  final_fit.warnings = rep.warnings;
  absl::StrAppend(&out, FitResultText(final_fit, title, periods_per_year));
  return out;
}

}  // namespace aftershock::app
