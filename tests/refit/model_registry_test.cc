#include "aftershock/model_registry.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <limits>
#include <nlohmann/json.hpp>
#include <random>
#include <string>

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

// The record as the JSON library builds it (how EncodeRefitRecordJson wrote
// it before it wrote the text directly): the reference the direct writer must
// agree with, value for value.
nlohmann::json LibraryRecord(const RefitRecord& r) {
  auto num = [](double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(); };
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
    p["value"] = i < r.values.size() ? num(r.values[i]) : nlohmann::json();
    p["se_hessian"] = i < r.std_errors.size() ? num(r.std_errors[i]) : nlohmann::json();
    p["se_robust"] = i < r.robust_std_errors.size() ? num(r.robust_std_errors[i]) : nlohmann::json();
    params.push_back(std::move(p));
  }
  j["estimates"] = std::move(params);
  j["log_likelihood"] = num(r.loglik);
  j["bic"] = num(r.bic);
  j["likelihood_terms"] = r.nobs;
  j["converged"] = r.converged;
  j["gate"] = {{"passed", r.outcome == RefitOutcome::kSwapped}, {"reasons", r.reasons}};
  j["note"] = r.note;
  j["fit_seconds"] = num(r.fit_seconds);
  j["consecutive_failures"] = r.consecutive_failures;
  j["fallback"] = r.fallback;
  return j;
}

// Keys of a JSON object text in the order written (top level and nested).
std::vector<std::string> KeysInOrder(const std::string& text) {
  std::vector<std::string> keys;
  const nlohmann::json::parser_callback_t cb = [&](int, nlohmann::json::parse_event_t e,
                                                   nlohmann::json& parsed) {
    if (e == nlohmann::json::parse_event_t::key) keys.push_back(parsed.get<std::string>());
    return true;
  };
  const nlohmann::json parsed = nlohmann::json::parse(text, cb);
  (void)parsed;
  return keys;
}

TEST_CASE("the direct record writer agrees with the JSON library", "[registry]") {
  std::mt19937_64 rng(20261203);
  std::uniform_real_distribution<double> u(-1, 1);
  std::uniform_int_distribution<int> pick(0, 9);
  // Doubles of every shape the library and std::to_chars write differently or
  // alike: whole numbers, tiny and huge magnitudes, negative zero, non-finite.
  auto value = [&]() -> double {
    switch (pick(rng)) {
      case 0:
        return std::round(u(rng) * 1e6);
      case 1:
        return u(rng) * 1e-7;
      case 2:
        return u(rng) * 1e22;
      case 3:
        return -0.0;
      case 4:
        return std::numeric_limits<double>::quiet_NaN();
      case 5:
        return -std::numeric_limits<double>::infinity();
      case 6:
        return 1e-4;
      default:
        return u(rng);
    }
  };
  const std::vector<std::string> texts = {
      "", "plain", "quote \" and backslash \\", "tab\there", "line\nbreak", "\x01\x1f",
      "caf\xc3\xa9", "del\x7f", "slash /"};
  for (int trial = 0; trial < 500; ++trial) {
    RefitRecord r;
    r.symbol = "SYM" + std::to_string(trial);
    r.outcome = static_cast<RefitOutcome>(trial % 4);
    r.version = static_cast<uint32_t>(trial * 7919u);
    r.scheduled_bar = trial * 1000003LL - 5;
    r.applied_bar = -trial;
    r.t_ns = static_cast<int64_t>(rng() >> 1);
    r.spec = texts[static_cast<size_t>(trial) % texts.size()];
    const int k = pick(rng) % 6;
    for (int i = 0; i < k; ++i) {
      r.names.push_back("p" + std::to_string(i));
      if (pick(rng) > 0) r.values.push_back(value());
      if (pick(rng) > 2) r.std_errors.push_back(value());
      if (pick(rng) > 4) r.robust_std_errors.push_back(value());
    }
    r.loglik = value();
    r.bic = value();
    r.nobs = trial;
    r.converged = trial % 3 == 0;
    for (int i = 0; i < pick(rng) % 3; ++i) {
      r.reasons.push_back(texts[static_cast<size_t>(pick(rng)) % texts.size()]);
    }
    r.note = texts[static_cast<size_t>(trial / 3) % texts.size()];
    r.fit_seconds = value();
    r.consecutive_failures = trial % 5;
    r.fallback = trial % 2 == 1;
    const std::string s = EncodeRefitRecordJson(r);
    const nlohmann::json lib = LibraryRecord(r);
    INFO(s);
    CHECK(nlohmann::json::parse(s) == lib);
    // The same keys in the same order (the library writes objects sorted).
    CHECK(KeysInOrder(s) == KeysInOrder(lib.dump()));
    std::string reused = "old contents";
    EncodeRefitRecordJson(r, &reused);
    CHECK(reused == s);
  }
}

TEST_CASE("the record writer's numbers and escapes, byte for byte", "[registry]") {
  RefitRecord r;
  r.symbol = "WREN";
  r.outcome = RefitOutcome::kRejected;
  r.version = 2;
  r.scheduled_bar = 100;
  r.applied_bar = 101;
  r.t_ns = 6000000000;
  r.spec = "const/GARCH(1,1)/t";
  r.names = {"omega", "nu"};
  r.values = {1e-4, 8};
  r.std_errors = {2.5e-6};
  r.loglik = -0.0;
  r.bic = std::numeric_limits<double>::infinity();
  r.nobs = 1999;
  r.reasons = {"a \"quoted\" reason", "tab\t"};
  r.note = "warm";
  r.fit_seconds = 0.125;
  // std::to_chars' shortest forms ("1e-04", "8", "-0"); \t as the library
  // escapes it.
  CHECK(EncodeRefitRecordJson(r) ==
        R"({"applied_bar":101,"bic":null,"consecutive_failures":0,"converged":false,)"
        R"("estimates":[{"name":"omega","se_hessian":2.5e-06,"se_robust":null,"value":1e-04},)"
        R"({"name":"nu","se_hessian":null,"se_robust":null,"value":8}],"fallback":false,)"
        R"("fit_seconds":0.125,"gate":{"passed":false,"reasons":["a \"quoted\" reason","tab\t"]},)"
        R"("likelihood_terms":1999,"log_likelihood":-0,"note":"warm","outcome":"rejected",)"
        R"("scheduled_bar":100,"spec":"const/GARCH(1,1)/t","symbol":"WREN","t_ns":6000000000,)"
        R"("version":2})");
  r.note = "bad \xff byte";
  CHECK(EncodeRefitRecordJson(r) == R"({"error":"record could not be encoded"})");
}

}  // namespace
}  // namespace aftershock
