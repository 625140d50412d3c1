#include "aftershock/model_registry.h"

#include <cmath>
#include <nlohmann/json.hpp>

namespace aftershock {
namespace {

nlohmann::json Num(double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(); }

}  // namespace

const char* RefitOutcomeName(RefitOutcome o) {
  switch (o) {
    case RefitOutcome::kSwapped:
      return "swapped";
    case RefitOutcome::kRejected:
      return "rejected";
    case RefitOutcome::kFallback:
      return "fallback";
    case RefitOutcome::kPooled:
      return "pooled";
  }
  return "rejected";
}

std::string EncodeRefitRecordJson(const RefitRecord& r) {
  try {
    nlohmann::json j;
    j["symbol"] = r.symbol;
    j["outcome"] = RefitOutcomeName(r.outcome);
    j["version"] = r.version;
    j["scheduled_bar"] = r.scheduled_bar;
    j["applied_bar"] = r.applied_bar;
    j["t_ns"] = r.t_ns;
    j["spec"] = r.spec;
    nlohmann::json params = nlohmann::json::array();
    for (size_t i = 0; i < r.names.size(); ++i) {
      nlohmann::json p;
      p["name"] = r.names[i];
      p["value"] = i < r.values.size() ? Num(r.values[i]) : nlohmann::json();
      p["se_hessian"] = i < r.std_errors.size() ? Num(r.std_errors[i]) : nlohmann::json();
      p["se_robust"] =
          i < r.robust_std_errors.size() ? Num(r.robust_std_errors[i]) : nlohmann::json();
      params.push_back(std::move(p));
    }
    j["estimates"] = std::move(params);
    j["log_likelihood"] = Num(r.loglik);
    j["bic"] = Num(r.bic);
    j["likelihood_terms"] = r.nobs;
    j["converged"] = r.converged;
    j["gate"] = {{"passed", r.outcome == RefitOutcome::kSwapped}, {"reasons", r.reasons}};
    j["note"] = r.note;
    j["fit_seconds"] = Num(r.fit_seconds);
    j["consecutive_failures"] = r.consecutive_failures;
    j["fallback"] = r.fallback;
    return j.dump();
  } catch (const std::exception&) {
    // Only invalid UTF-8 in a string can throw here; report it in-band.
    return std::string("{\"error\":\"record could not be encoded\"}");
  }
}

}  // namespace aftershock
