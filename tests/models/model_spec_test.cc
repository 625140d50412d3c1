#include "aftershock/model_spec.h"

#include <catch2/catch.hpp>

#include "aftershock/model_params.h"

namespace aftershock {
namespace {

TEST_CASE("parameter names follow the documented layout", "[model_spec]") {
  auto spec = MakeModelSpec("arma", {1, 2}, "gjr", {1, 1, 2}, "t");
  REQUIRE(spec.ok());
  const std::vector<std::string> expected = {"mu",     "ar1",    "ma1",   "ma2",   "omega",
                                             "alpha1", "gamma1", "beta1", "beta2", "nu"};
  CHECK(spec->ParamNames() == expected);
  CHECK(spec->NumParams() == 10);
  CHECK(spec->VarianceOffset() == 4);
  CHECK(spec->DistOffset() == 9);
  CHECK(spec->Label() == "ARMA(1,2)-GJR(1,1,2)-t");
}

TEST_CASE("EWMA and zero mean", "[model_spec]") {
  auto spec = MakeModelSpec("zero", {}, "ewma", {}, "normal");
  REQUIRE(spec.ok());
  CHECK(spec->ParamNames() == std::vector<std::string>{"lambda"});
}

TEST_CASE("unknown or inconsistent specs are clear errors", "[model_spec]") {
  auto bad_mean = MakeModelSpec("arima", {}, "garch", {}, "normal");
  REQUIRE_FALSE(bad_mean.ok());
  CHECK(std::string(bad_mean.status().message()) ==
        "unknown mean 'arima' (expected zero, constant or arma)");
  auto bad_var = MakeModelSpec("constant", {}, "figarch", {}, "normal");
  REQUIRE_FALSE(bad_var.ok());
  CHECK(std::string(bad_var.status().message()).find("unknown variance 'figarch'") == 0);
  auto bad_order = MakeModelSpec("constant", {}, "garch", {1}, "normal");
  REQUIRE_FALSE(bad_order.ok());
  CHECK(std::string(bad_order.status().message()).find("must be two numbers P,Q") !=
        std::string::npos);
  auto too_big = MakeModelSpec("arma", {6, 0}, "garch", {}, "normal");
  REQUIRE_FALSE(too_big.ok());
  CHECK(std::string(too_big.status().message()).find("ARMA orders must be in 0..5") == 0);
}

TEST_CASE("constraints are checked with named messages", "[model_params]") {
  auto spec = MakeModelSpec("constant", {}, "garch", {}, "t");
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(
      *spec, {{"mu", 0.0}, {"omega", 0.1}, {"alpha1", 0.1}, {"beta1", 0.85}, {"nu", 6.0}});
  REQUIRE(p.ok());
  CHECK(p->CheckConstraints().ok());
  CHECK(p->Persistence() == Approx(0.95));
  CHECK(p->UnconditionalVariance() == Approx(2.0));
  p->values[3] = 0.95;
  CHECK(std::string(p->CheckConstraints().message()).find("persistence must be < 1") == 0);
  p->values[3] = 0.85;
  p->values[4] = 2.0;
  CHECK(std::string(p->CheckConstraints().message()).find("nu must be in (2,") == 0);
  auto missing = ModelParams::FromNamed(*spec, {{"mu", 0.0}});
  REQUIRE_FALSE(missing.ok());
  CHECK(std::string(missing.status().message()).find("needs parameter 'omega'") !=
        std::string::npos);
}

}  // namespace
}  // namespace aftershock
