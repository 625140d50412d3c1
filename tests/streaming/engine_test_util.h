// Shared helpers of the engine tests: configurations, test sinks, series.
#ifndef AFTERSHOCK_TESTS_STREAMING_ENGINE_TEST_UTIL_H_
#define AFTERSHOCK_TESTS_STREAMING_ENGINE_TEST_UTIL_H_

#include <catch2/catch.hpp>
#include <cmath>
#include <random>
#include <string>
#include <vector>

#include "aftershock/engine_config.h"
#include "aftershock/online_filter.h"
#include "aftershock/update_sink.h"

namespace aftershock::testing {

// A GARCH(1,1)-normal model for fractional returns, fixed parameters (refits off, so
// it stays fixed).
inline constexpr const char* kFixedModelToml = R"(
[model]
mean = "constant"
variance = "garch"
shock_lags = 1
variance_lags = 1
innovations = "gaussian"
[model.params]
mu = 0.0002
omega = 2e-6
alpha_1 = 0.08
beta_1 = 0.9
[refit]
every_bars = 0
)";

inline EngineConfig ParseConfigOrDie(const std::string& toml) {
  auto c = ParseEngineConfig(toml, "test.toml");
  INFO(c.status().ToString());
  REQUIRE(c.ok());
  return *c;
}

inline OutputOptions OutputsOf(const EngineConfig& c) {
  OutputOptions o;
  o.horizons = c.outputs.horizons;
  o.risk_levels = c.outputs.risk_levels;
  o.periods_per_year = c.outputs.periods_per_year;
  o.target_vol_ann = c.outputs.target_vol_ann;
  o.scale_cap = c.outputs.scale_cap;
  return o;
}

// Deterministic fat-ish tailed return series (seeded).
inline std::vector<double> TestReturns(int n, uint64_t seed, double sd = 0.01) {
  std::mt19937_64 rng(seed);
  std::student_t_distribution<double> t(5.0);
  std::vector<double> r(n);
  for (double& x : r) x = sd * t(rng) * std::sqrt(3.0 / 5.0);
  return r;
}

// Keeps every message (allocates; not for allocation tests).
class CollectingSink : public UpdateSink {
 public:
  struct Message {
    std::string topic, body;
  };
  bool Send(absl::string_view topic, absl::string_view body) override {
    if (refuse) return false;
    messages.push_back({std::string(topic), std::string(body)});
    return true;
  }
  std::vector<Message> messages;
  bool refuse = false;
};

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_STREAMING_ENGINE_TEST_UTIL_H_
