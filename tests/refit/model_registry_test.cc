#include "aftershock/model_registry.h"

#include <catch2/catch.hpp>
#include <limits>
#include <nlohmann/json.hpp>

namespace aftershock {
namespace {

TEST_CASE("a refit record encodes as one JSON object", "[registry]") {
  RefitRecord r;
  r.symbol = "KESTREL";
  r.outcome = RefitOutcome::kSwapped;
  r.version = 3;
  r.scheduled_bar = 900;
  r.applied_bar = 901;
  r.t_ns = 123456789;
  r.spec = "GARCH(1,1)";
  r.names = {"mu", "omega"};
  r.values = {0.01, 0.05};
  r.std_errors = {0.002, std::numeric_limits<double>::quiet_NaN()};
  r.robust_std_errors = {0.003, 0.01};
  r.loglik = -1234.5;
  r.converged = true;
  r.note = "re-estimated";
  r.fit_seconds = 0.00025;
  const std::string s = EncodeRefitRecordJson(r);
  auto j = nlohmann::json::parse(s);
  CHECK(j["symbol"] == "KESTREL");
  CHECK(j["outcome"] == "swapped");
  CHECK(j["version"] == 3);
  CHECK(j["applied_bar"] == 901);
  CHECK(j["estimates"].size() == 2);
  CHECK(j["estimates"][1]["name"] == "omega");
  CHECK(j["estimates"][1]["value"] == 0.05);
  CHECK(j["estimates"][1]["se_hessian"].is_null());  // NaN is never written as a number
  CHECK(j["estimates"][0]["se_hessian"] == 0.002);
  CHECK(j["estimates"][0]["se_robust"] == 0.003);
  CHECK(j["log_likelihood"] == -1234.5);
  CHECK_FALSE(j.contains("params"));
  CHECK_FALSE(j.contains("loglik"));
  CHECK(j["gate"]["passed"] == true);
  CHECK(j["gate"]["reasons"].empty());
  CHECK(j["fallback"] == false);
  CHECK(s.find("NaN") == std::string::npos);

  r.outcome = RefitOutcome::kFallback;
  r.reasons = {"fit did not converge"};
  r.fallback = true;
  r.loglik = -std::numeric_limits<double>::infinity();
  j = nlohmann::json::parse(EncodeRefitRecordJson(r));
  CHECK(j["outcome"] == "fallback");
  CHECK(j["gate"]["passed"] == false);
  CHECK(j["gate"]["reasons"][0] == "fit did not converge");
  CHECK(j["log_likelihood"].is_null());
  CHECK(j["fallback"] == true);
  CHECK(std::string(RefitOutcomeName(RefitOutcome::kRejected)) == "rejected");
}

}  // namespace
}  // namespace aftershock
