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

// Random records: doubles of every shape the library and std::to_chars write
// differently or alike (whole numbers, tiny and huge magnitudes, negative
// zero, non-finite), strings with escapes and UTF-8.
class RecordMaker {
 public:
  explicit RecordMaker(uint64_t seed) : rng_(seed) {}

  RefitRecord Make(int trial) {
    RefitRecord r;
    r.symbol = "SYM" + std::to_string(trial);
    r.outcome = static_cast<RefitOutcome>(trial % 4);
    r.version = static_cast<uint32_t>(trial * 7919u);
    r.scheduled_bar = trial * 1000003LL - 5;
    r.applied_bar = -trial;
    r.t_ns = static_cast<int64_t>(rng_() >> 1);
    r.spec = Text(trial);
    const int k = pick_(rng_) % 6;
    for (int i = 0; i < k; ++i) {
      r.names.push_back("p" + std::to_string(i));
      if (pick_(rng_) > 0) r.values.push_back(Value());
      if (pick_(rng_) > 2) r.std_errors.push_back(Value());
      if (pick_(rng_) > 4) r.robust_std_errors.push_back(Value());
    }
    r.loglik = Value();
    r.bic = Value();
    r.nobs = trial;
    r.converged = trial % 3 == 0;
    for (int i = 0; i < pick_(rng_) % 3; ++i) r.reasons.push_back(Text(pick_(rng_)));
    r.note = Text(trial / 3);
    r.fit_seconds = Value();
    r.consecutive_failures = trial % 5;
    r.fallback = trial % 2 == 1;
    return r;
  }

  double Value() {
    switch (pick_(rng_)) {
      case 0:
        return std::round(u_(rng_) * 1e6);
      case 1:
        return u_(rng_) * 1e-7;
      case 2:
        return u_(rng_) * 1e22;
      case 3:
        return -0.0;
      case 4:
        return std::numeric_limits<double>::quiet_NaN();
      case 5:
        return -std::numeric_limits<double>::infinity();
      case 6:
        return 1e-4;
      default:
        return u_(rng_);
    }
  }
  std::mt19937_64& rng() { return rng_; }

 private:
  const std::string& Text(int i) { return texts_[static_cast<size_t>(i) % texts_.size()]; }

  std::mt19937_64 rng_;
  std::uniform_real_distribution<double> u_{-1, 1};
  std::uniform_int_distribution<int> pick_{0, 9};
  const std::vector<std::string> texts_ = {"",
                                           "plain",
                                           "quote \" and backslash \\",
                                           "tab\there",
                                           "line\nbreak",
                                           "\x01\x1f",
                                           "caf\xc3\xa9",
                                           "del\x7f",
                                           "slash /"};
};

TEST_CASE("the direct record writer agrees with the JSON library", "[registry]") {
  RecordMaker maker(20261203);
  for (int trial = 0; trial < 500; ++trial) {
    const RefitRecord r = maker.Make(trial);
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

TEST_CASE("a record's numbers formatted where it is made and finished where it is applied",
          "[registry]") {
  RecordMaker maker(20261204);
  // Finish must take the doubles Prepare formatted and everything else from
  // the record it is given; `given` differs from the prepared record in every
  // field (the number of estimates aside), so reading a wrong one, or keeping
  // a number of an earlier record (`json` is reused), shows.
  RefitRecordJson json;
  std::string out = "old contents";
  int errors = 0;
  for (int trial = 0; trial < 500; ++trial) {
    const RefitRecord made = maker.Make(trial);
    RefitRecord given = maker.Make(trial + 1000);
    given.names.resize(made.names.size());
    for (size_t i = 0; i < given.names.size(); ++i) given.names[i] = "q" + std::to_string(i * 7);
    given.outcome = static_cast<RefitOutcome>(maker.rng()() % 4);
    given.version = static_cast<uint32_t>(maker.rng()());
    given.applied_bar = static_cast<int64_t>(maker.rng()() >> 2) - (int64_t{1} << 60);
    given.consecutive_failures = static_cast<int>(maker.rng()() % 7);
    given.fallback = !made.fallback;
    given.converged = !made.converged;
    given.fit_seconds = maker.Value();
    // Invalid UTF-8 in the given strings now and then: the error object.
    if (trial % 40 == 7) given.spec += "\xff";
    if (trial % 40 == 17 && !given.names.empty()) given.names.back() += "\xc3";
    if (trial % 40 == 27) given.reasons.push_back("bad \xfe");
    if (trial % 40 == 37) given.note += "\xe2\x82";
    RefitRecord expected = given;
    expected.bic = made.bic;
    expected.loglik = made.loglik;
    expected.values = made.values;
    expected.std_errors = made.std_errors;
    expected.robust_std_errors = made.robust_std_errors;
    const std::string want = EncodeRefitRecordJson(expected);
    errors += want.rfind("{\"error\"", 0) == 0 ? 1 : 0;

    json.Prepare(made);
    CHECK(json.prepared());
    json.Finish(given, &out);
    INFO(want);
    CHECK(out == want);
    // Moved or swapped (how the engine hands it from the job to the stream).
    RefitRecordJson moved = std::move(json);
    RefitRecordJson other;
    using std::swap;
    swap(moved, other);
    other.Finish(given, &out);
    CHECK(out == want);
    // A record with another number of estimates is written whole.
    RefitRecord longer = given;
    longer.names.push_back("extra");
    other.Finish(longer, &out);
    CHECK(out == EncodeRefitRecordJson(longer));
    json = std::move(other);
  }
  CHECK(errors > 10);
  // Never prepared: the whole record from the one given.
  RefitRecordJson fresh;
  CHECK_FALSE(fresh.prepared());
  const RefitRecord r = maker.Make(7);
  fresh.Finish(r, &out);
  CHECK(out == EncodeRefitRecordJson(r));
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
