// A model law to simulate test windows from, spelled as MakeModelSpec and
// ModelParams::FromNamed take it, and its simulation by the project's own
// simulator (identify_test, identify_panel_test).
#ifndef AFTERSHOCK_TESTS_ESTIMATION_SIMULATED_LAW_H_
#define AFTERSHOCK_TESTS_ESTIMATION_SIMULATED_LAW_H_

#include <catch2/catch.hpp>
#include <cstdint>
#include <string>
#include <utility>
#include <vector>

#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"
#include "aftershock/simulate.h"

namespace aftershock::testing {

struct SimulatedLaw {
  const char* mean;                                   // "constant" | "arma" | ...
  std::vector<int> mo;                                // mean orders
  const char* var;                                    // "garch" | "arch" | "gjr" | "flat" | ...
  VarianceLags vo;                                    // variance orders
  const char* law;                                    // "gaussian" | "student"
  std::vector<std::pair<std::string, double>> named;  // parameter values by name
};

// An AR(1) mean with asymmetric (GJR-GARCH(1,1)) Student-t(6) variance:
// the law whose AR term and asymmetry the identification must find.
inline SimulatedLaw ArAsymmetricStudentLaw() {
  return {"arma",
          {1, 0},
          "gjr",
          {1, 1, 1},
          "student",
          {{"mu", 0.02},
           {"ar_1", 0.3},
           {"omega", 0.03},
           {"alpha_1", 0.02},
           {"gamma_1", 0.16},
           {"beta_1", 0.88},
           {"nu", 6.0}}};
}

// n returns of `law`, simulated with `seed`. REQUIRES (Catch) a valid law.
inline std::vector<double> SimulateLaw(const SimulatedLaw& law, int n, uint64_t seed) {
  auto spec = MakeModelSpec(law.mean, law.mo, law.var, law.vo, law.law);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, law.named);
  REQUIRE(p.ok());
  SimulationOptions o;
  o.n = n;
  o.seed = seed;
  auto s = Simulate(*p, o);
  REQUIRE(s.ok());
  return s->returns;
}

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_ESTIMATION_SIMULATED_LAW_H_
