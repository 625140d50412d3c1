#include "aftershock/quality_gate.h"

#include <catch2/catch.hpp>
#include <limits>

namespace aftershock {
namespace {

ModelParams Good() {
  ModelSpec spec;  // constant mean, GARCH(1,1), normal
  auto p = ModelParams::FromNamed(
      spec, {{"mu", 0.01}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}});
  REQUIRE(p.ok());
  return *p;
}

GateInput Input(const ModelParams* p) {
  GateInput in;
  in.params = p;
  in.converged = true;
  return in;
}

using Reasons = std::vector<std::string>;

TEST_CASE("a sound candidate passes", "[gate]") {
  const ModelParams p = Good();
  GateInput in = Input(&p);
  in.diagnostics.ljung_box_sq_p = 0.4;
  in.holdout = HoldoutScore{100, -140.0, -138.0};  // 0.02 nats/bar worse: within 0.05
  const GateOutcome g = EvaluateQualityGate(in, RefitOptions{});
  CHECK(g.passed);
  CHECK(g.reasons.empty());
}

TEST_CASE("gate rule: converged", "[gate]") {
  const ModelParams p = Good();
  GateInput in = Input(&p);
  in.converged = false;
  const GateOutcome g = EvaluateQualityGate(in, RefitOptions{});
  CHECK_FALSE(g.passed);
  CHECK(g.reasons == Reasons{"fit did not converge"});
}

TEST_CASE("gate rule: finite values (later value rules skipped)", "[gate]") {
  ModelParams p = Good();
  p.values[1] = std::numeric_limits<double>::quiet_NaN();
  p.values[3] = std::numeric_limits<double>::infinity();
  GateInput in = Input(&p);
  in.holdout = HoldoutScore{100, -100.0, -100.0};
  const GateOutcome g = EvaluateQualityGate(in, RefitOptions{});
  CHECK_FALSE(g.passed);
  CHECK(g.reasons == Reasons{"parameter omega is not finite", "parameter beta_1 is not finite"});
  p.values.pop_back();
  const GateOutcome h = EvaluateQualityGate(in, RefitOptions{});
  CHECK(h.reasons == Reasons{"parameter count 3 does not match the spec (4)"});
}

TEST_CASE("gate rule: constraints", "[gate]") {
  ModelParams p = Good();
  p.values[2] = -0.02;
  const GateOutcome g = EvaluateQualityGate(Input(&p), RefitOptions{});
  CHECK_FALSE(g.passed);
  REQUIRE(g.reasons.size() == 1);
  CHECK(g.reasons[0] == "constraints: " + std::string(p.CheckConstraints().message()));
}

TEST_CASE("gate rule: persistence below max_persistence", "[gate]") {
  ModelParams p = Good();
  p.values[2] = 0.0996;  // persistence 0.9996: allowed by the constraints, not by the gate
  RefitOptions o;
  GateOutcome g = EvaluateQualityGate(Input(&p), o);
  CHECK(g.reasons == Reasons{"persistence 0.9996 >= max_persistence 0.9995"});
  o.max_persistence = 0.9999;
  g = EvaluateQualityGate(Input(&p), o);
  CHECK(g.passed);
}

TEST_CASE("gate rule: diagnostics at diagnostics_level", "[gate]") {
  const ModelParams p = Good();
  GateInput in = Input(&p);
  in.diagnostics.ljung_box_sq_p = 0.004;
  in.diagnostics.ljung_box_p = 0.2;
  in.diagnostics.arch_lm_p = 0.0099;
  RefitOptions o;  // level 0.01
  GateOutcome g = EvaluateQualityGate(in, o);
  CHECK(g.reasons == Reasons{"diagnostics: Ljung-Box on z^2 p-value 0.004 < 0.01",
                             "diagnostics: ARCH-LM p-value 0.0099 < 0.01"});
  in.diagnostics.arch_lm_p = 0.01;        // at the level: passes
  in.diagnostics.ljung_box_sq_p.reset();  // absent: skipped
  g = EvaluateQualityGate(in, o);
  CHECK(g.passed);
  in.diagnostics.ljung_box_sq_p = 0.004;
  o.diagnostics_level = 0;  // rule disabled
  CHECK(EvaluateQualityGate(in, o).passed);
}

TEST_CASE("gate rule: holdout margin in nats per bar", "[gate]") {
  const ModelParams p = Good();
  GateInput in = Input(&p);
  RefitOptions o;                                  // margin 0.05
  in.holdout = HoldoutScore{100, -106.0, -100.0};  // 0.06 nats/bar worse
  GateOutcome g = EvaluateQualityGate(in, o);
  CHECK(g.reasons ==
        Reasons{"holdout: 0.0600 nats/bar below the current model over 100 bars (margin 0.05)"});
  in.holdout = HoldoutScore{100, -104.9, -100.0};  // 0.049: passes
  CHECK(EvaluateQualityGate(in, o).passed);
  in.holdout = HoldoutScore{100, -std::numeric_limits<double>::infinity(), -100.0};
  g = EvaluateQualityGate(in, o);
  CHECK(g.reasons == Reasons{"holdout: candidate log-likelihood is not finite"});
  in.holdout.reset();  // no current model scored: rule skipped
  CHECK(EvaluateQualityGate(in, o).passed);
}

TEST_CASE("every failing rule is reported, in rule order", "[gate]") {
  ModelParams p = Good();
  p.values[3] = 0.93;  // persistence 1.01
  GateInput in = Input(&p);
  in.converged = false;
  in.diagnostics.ljung_box_sq_p = 0.0;
  in.holdout = HoldoutScore{50, -80.0, -50.0};
  const GateOutcome g = EvaluateQualityGate(in, RefitOptions{});
  REQUIRE(g.reasons.size() == 5);
  CHECK(g.reasons[0] == "fit did not converge");
  CHECK(g.reasons[1].rfind("constraints: ", 0) == 0);
  CHECK(g.reasons[2] == "persistence 1.01 >= max_persistence 0.9995");
  CHECK(g.reasons[3] == "diagnostics: Ljung-Box on z^2 p-value 0 < 0.01");
  CHECK(g.reasons[4] ==
        "holdout: 0.6000 nats/bar below the current model over 50 bars (margin 0.05)");
}

}  // namespace
}  // namespace aftershock
