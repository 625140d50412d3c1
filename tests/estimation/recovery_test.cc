// Parameter recovery: data simulated from stated parameters (fixed seeds,
// T = 20,000) must give estimates within 4 standard errors of the truth.
#include <catch2/catch.hpp>
#include <cmath>

#include "aftershock/estimator.h"
#include "aftershock/simulate.h"

namespace aftershock {
namespace {

void CheckRecovery(const char* mean, std::vector<int> mo, const char* var, VarianceLags vo,
                   const char* law, const std::vector<std::pair<std::string, double>>& truth,
                   uint64_t seed) {
  auto spec = MakeModelSpec(mean, mo, var, vo, law);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, truth);
  REQUIRE(p.ok());
  SimulationOptions so;
  so.n = 20000;
  so.seed = seed;
  auto sim = Simulate(*p, so);
  REQUIRE(sim.ok());
  auto fit = FitModel(*spec, sim->returns);
  REQUIRE(fit.ok());
  INFO(spec->Label() << ": " << fit->optimizer_message);
  REQUIRE(fit->converged);
  for (size_t i = 0; i < truth.size(); ++i) {
    const double est = fit->params.values[i], se = fit->std_errors[i];
    INFO(fit->names[i] << " truth " << p->values[i] << " estimate " << est << " se " << se
                       << " robust " << fit->robust_std_errors[i]);
    REQUIRE(std::isfinite(se));
    CHECK(std::fabs(est - p->values[i]) <= 4 * se);
  }
}

TEST_CASE("gaussian GARCH(1,1) parameters are recovered", "[estimator][recovery]") {
  CheckRecovery("constant", {}, "garch", {1, 1}, "gaussian",
                {{"mu", 0.03}, {"omega", 0.02}, {"alpha_1", 0.07}, {"beta_1", 0.91}}, 101);
}

TEST_CASE("student GJR-GARCH(1,1) parameters are recovered", "[estimator][recovery]") {
  CheckRecovery("constant", {}, "gjr", {1, 1, 1}, "student",
                {{"mu", 0.02},
                 {"omega", 0.03},
                 {"alpha_1", 0.03},
                 {"gamma_1", 0.09},
                 {"beta_1", 0.9},
                 {"nu", 6.0}},
                202);
}

TEST_CASE("ARMA(1,1)-GARCH(1,1) parameters are recovered", "[estimator][recovery]") {
  CheckRecovery("arma", {1, 1}, "garch", {1, 1}, "gaussian",
                {{"mu", 0.01},
                 {"ar_1", 0.5},
                 {"ma_1", -0.3},
                 {"omega", 0.05},
                 {"alpha_1", 0.1},
                 {"beta_1", 0.85}},
                303);
}

}  // namespace
}  // namespace aftershock
