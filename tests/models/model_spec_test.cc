#include "aftershock/model_spec.h"

#include <catch2/catch.hpp>

#include "aftershock/model_params.h"

namespace aftershock {
namespace {

TEST_CASE("parameter names follow the documented layout", "[model_spec]") {
  auto spec = MakeModelSpec("arma", {1, 2}, "gjr", {1, 2, 1}, "student");
  REQUIRE(spec.ok());
  const std::vector<std::string> expected = {"mu",      "ar_1",    "ma_1",   "ma_2",   "omega",
                                             "alpha_1", "gamma_1", "beta_1", "beta_2", "nu"};
  CHECK(spec->ParamNames() == expected);
  CHECK(spec->NumParams() == 10);
  CHECK(spec->VarianceOffset() == 4);
  CHECK(spec->DistOffset() == 9);
  CHECK(spec->Label() == "ARMA(1,2)/GJR-GARCH(1,2)/student");
}

TEST_CASE("lags are named counts with per-kind defaults", "[model_spec]") {
  // Omitted lags: 1 each, asym lags as many as the shock lags.
  auto gjr = MakeModelSpec("constant", {}, "gjr", {2, -1, -1}, "gaussian");
  REQUIRE(gjr.ok());
  CHECK(gjr->arch_order == 2);
  CHECK(gjr->garch_order == 1);
  CHECK(gjr->asym_order == 2);
  CHECK(gjr->Label() == "const/GJR-GARCH(2,1)/gaussian");
  VarianceLags lags;
  lags.asym = 1;
  lags.shock = 2;
  auto gjr21 = MakeModelSpec("constant", {}, "gjr", lags, "student");
  REQUIRE(gjr21.ok());
  CHECK(gjr21->asym_order == 1);
  CHECK(gjr21->Label() == "const/GJR-GARCH(2,1;1)/student");
  auto arch = MakeModelSpec("zero", {}, "arch", {3}, "gaussian");
  REQUIRE(arch.ok());
  CHECK(arch->Label() == "zero/ARCH(3)/gaussian");
  CHECK(arch->ParamNames() == std::vector<std::string>{"omega", "alpha_1", "alpha_2", "alpha_3"});
  auto flat = MakeModelSpec("zero", {}, "flat", {}, "gaussian");
  REQUIRE(flat.ok());
  CHECK(flat->Label() == "zero/flat/gaussian");
  CHECK(flat->ParamNames() == std::vector<std::string>{"omega"});
  CHECK(MakeModelSpec("constant", {}, "ewma", {}, "student")->Label() == "const/EWMA/student");
  // A lag the kind has no terms for is refused by name.
  VarianceLags asym_only;
  asym_only.asym = 1;
  auto garch_asym = MakeModelSpec("constant", {}, "garch", asym_only, "gaussian");
  REQUIRE_FALSE(garch_asym.ok());
  CHECK(std::string(garch_asym.status().message()) ==
        "variance 'garch' has no asym_lags (asym_lags is for gjr)");
  auto arch_beta = MakeModelSpec("constant", {}, "arch", {1, 1}, "gaussian");
  REQUIRE_FALSE(arch_beta.ok());
  CHECK(std::string(arch_beta.status().message()).find("has no variance_lags") !=
        std::string::npos);
  auto flat_lags = MakeModelSpec("constant", {}, "flat", {1}, "gaussian");
  REQUIRE_FALSE(flat_lags.ok());
  CHECK(std::string(flat_lags.status().message()).find("has no shock_lags") != std::string::npos);
}

TEST_CASE("retired option values are refused with their replacement", "[model_spec]") {
  const auto message = [](const absl::Status& s) { return std::string(s.message()); };
  CHECK(message(ParseVarianceKind("constant").status()) ==
        "unknown variance 'constant' (expected flat, arch, garch, gjr or ewma); 'constant' was "
        "renamed: use flat (CHANGELOG.md)");
  CHECK(message(ParseInnovations("t").status()).find("'t' was renamed: use student") !=
        std::string::npos);
  CHECK(message(ParseInnovations("normal").status()).find("use gaussian") != std::string::npos);
  CHECK(message(ParsePresample("backcast").status()).find("use robust-start") != std::string::npos);
  // "constant" stays a mean.
  CHECK(ParseMeanKind("constant").ok());
  CHECK(message(ParseInnovations("cauchy").status()) ==
        "unknown innovations 'cauchy' (expected gaussian or student)");
  // Every name round-trips.
  for (auto v : {VarianceKind::kConstant, VarianceKind::kArch, VarianceKind::kGarch,
                 VarianceKind::kGjr, VarianceKind::kEwma}) {
    CHECK(*ParseVarianceKind(VarianceKindName(v)) == v);
  }
  for (auto i : {Innovations::kNormal, Innovations::kStudentT}) {
    CHECK(*ParseInnovations(InnovationsName(i)) == i);
  }
  for (auto p : {Presample::kMeanSquare, Presample::kRobustStart}) {
    CHECK(*ParsePresample(PresampleName(p)) == p);
  }
}

TEST_CASE("EWMA and zero mean", "[model_spec]") {
  auto spec = MakeModelSpec("zero", {}, "ewma", {}, "gaussian");
  REQUIRE(spec.ok());
  CHECK(spec->ParamNames() == std::vector<std::string>{"lambda"});
}

TEST_CASE("unknown or inconsistent specs are clear errors", "[model_spec]") {
  auto bad_mean = MakeModelSpec("arima", {}, "garch", {}, "gaussian");
  REQUIRE_FALSE(bad_mean.ok());
  CHECK(std::string(bad_mean.status().message()) ==
        "unknown mean 'arima' (expected zero, constant or arma)");
  auto bad_var = MakeModelSpec("constant", {}, "figarch", {}, "gaussian");
  REQUIRE_FALSE(bad_var.ok());
  CHECK(std::string(bad_var.status().message()).find("unknown variance 'figarch'") == 0);
  auto bad_order = MakeModelSpec("constant", {}, "garch", {0}, "gaussian");
  REQUIRE_FALSE(bad_order.ok());
  CHECK(std::string(bad_order.status().message()) == "GARCH shock_lags must be in 1..5, got 0");
  VarianceLags too_many_beta;
  too_many_beta.variance = 6;
  CHECK(std::string(
            MakeModelSpec("constant", {}, "gjr", too_many_beta, "gaussian").status().message()) ==
        "GARCH variance_lags must be in 0..5, got 6");
  auto bad_mean_order = MakeModelSpec("arma", {1}, "garch", {}, "gaussian");
  REQUIRE_FALSE(bad_mean_order.ok());
  CHECK(std::string(bad_mean_order.status().message()).find("must be two numbers P,Q") !=
        std::string::npos);
  auto too_big = MakeModelSpec("arma", {6, 0}, "garch", {}, "gaussian");
  REQUIRE_FALSE(too_big.ok());
  CHECK(std::string(too_big.status().message()).find("ARMA orders must be in 0..5") == 0);
}

TEST_CASE("constraints are checked with named messages", "[model_params]") {
  auto spec = MakeModelSpec("constant", {}, "garch", {}, "student");
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(
      *spec, {{"mu", 0.0}, {"omega", 0.1}, {"alpha_1", 0.1}, {"beta_1", 0.85}, {"nu", 6.0}});
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
