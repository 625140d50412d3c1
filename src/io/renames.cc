#include "aftershock/renames.h"

#include <cctype>

#include "absl/strings/ascii.h"
#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

constexpr RetiredName kRetired[] = {
    {RenameKind::kOption, "", "--variance-order", "--shock-lags, --asym-lags, --variance-lags"},
    {RenameKind::kConfigKey, "[model]", "variance_order", "shock_lags, asym_lags, variance_lags"},
    {RenameKind::kValue, "variance", "constant", "flat"},
    {RenameKind::kValue, "simulate --model", "constant", "flat"},
    {RenameKind::kValue, "innovations", "normal", "gaussian"},
    {RenameKind::kValue, "innovations", "t", "student"},
    {RenameKind::kValue, "presample", "backcast", "robust-start (a different rule)"},
    {RenameKind::kParameter, "", "ar1, ar2, ...", "ar_1, ar_2, ..."},
    {RenameKind::kParameter, "", "ma1, ma2, ...", "ma_1, ma_2, ..."},
    {RenameKind::kParameter, "", "alpha1, alpha2, ...", "alpha_1, alpha_2, ..."},
    {RenameKind::kParameter, "", "gamma1, gamma2, ...", "gamma_1, gamma_2, ..."},
    {RenameKind::kParameter, "", "beta1, beta2, ...", "beta_1, beta_2, ..."},
    {RenameKind::kLabel, "", "constant-mean-GARCH(1,1)-t", "const/GARCH(1,1)/student"},
    {RenameKind::kLabel, "", "zero-mean-constant-variance-normal", "zero/flat/gaussian"},
    {RenameKind::kLabel, "", "ARMA(1,1)-GJR(1,1,1)-t", "ARMA(1,1)/GJR-GARCH(1,1)/student"},
    {RenameKind::kJsonKey, "fit", "params", "estimates"},
    {RenameKind::kJsonKey, "fit", "std_errors", "se_hessian"},
    {RenameKind::kJsonKey, "fit", "robust_std_errors", "se_robust"},
    {RenameKind::kJsonKey, "fit", "loglik", "log_likelihood"},
    {RenameKind::kJsonKey, "fit", "nobs", "likelihood_terms"},
    {RenameKind::kJsonKey, "fit", "model.variance_order",
     "model.shock_lags, model.asym_lags, model.variance_lags"},
    {RenameKind::kJsonKey, "fit --mean auto", "steps.*.candidates[].loglik",
     "steps.*.candidates[].log_likelihood"},
    {RenameKind::kJsonKey, "fit --mean auto", "steps.variance.candidates[].params",
     "steps.variance.candidates[].num_params"},
    {RenameKind::kJsonKey, "model record", "params", "estimates"},
    {RenameKind::kJsonKey, "model record", "params[].se", "estimates[].se_hessian"},
    {RenameKind::kJsonKey, "model record", "params[].robust_se", "estimates[].se_robust"},
    {RenameKind::kJsonKey, "model record", "loglik", "log_likelihood"},
    {RenameKind::kJsonKey, "model record", "nobs", "likelihood_terms"},
    {RenameKind::kJsonKey, "models --format json", "params", "estimates"},
    {RenameKind::kJsonKey, "models --format json", "params[].se", "estimates[].se_hessian"},
    {RenameKind::kJsonKey, "models --format json", "loglik", "log_likelihood"},
    {RenameKind::kJsonKey, "update", "var_risk", "value_at_risk"},
};

// "alpha12" -> "alpha_12" for the parameter families; "" otherwise.
std::string NewParameterName(absl::string_view name) {
  for (absl::string_view family : {"alpha", "gamma", "beta", "ar", "ma"}) {
    if (!absl::StartsWith(name, family) || name.size() == family.size()) continue;
    absl::string_view digits = name.substr(family.size());
    bool all_digits = true;
    for (char c : digits) all_digits = all_digits && absl::ascii_isdigit(c);
    if (all_digits) return absl::StrCat(family, "_", digits);
  }
  return "";
}

}  // namespace

absl::Span<const RetiredName> RetiredNames() { return kRetired; }

std::string RenameHint(RenameKind kind, absl::string_view where, absl::string_view old_name) {
  if (kind == RenameKind::kParameter) {
    const std::string now = NewParameterName(old_name);
    if (now.empty()) return "";
    return absl::StrCat("'", old_name, "' was renamed: use ", now, " (CHANGELOG.md)");
  }
  for (const RetiredName& r : kRetired) {
    if (r.kind != kind || r.old_name != old_name) continue;
    if (kind != RenameKind::kOption && r.where != where) continue;
    return absl::StrCat("'", old_name, "' was renamed: use ", r.new_name, " (CHANGELOG.md)");
  }
  return "";
}

}  // namespace aftershock
