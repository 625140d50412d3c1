#include "aftershock/identify.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>

#include "aftershock/series_file.h"
#include "aftershock/simulate.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

std::vector<double> Sim(const char* mean, std::vector<int> mo, const char* var,
                        std::vector<int> vo, const char* law,
                        std::vector<std::pair<std::string, double>> named, int n, uint64_t seed) {
  auto spec = MakeModelSpec(mean, mo, var, vo, law);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, named);
  REQUIRE(p.ok());
  SimulationOptions o;
  o.n = n;
  o.seed = seed;
  auto s = Simulate(*p, o);
  REQUIRE(s.ok());
  return s->returns;
}

const TestOutcome& Find(const std::vector<TestOutcome>& tests, const std::string& prefix) {
  for (const auto& t : tests) {
    if (t.name.rfind(prefix, 0) == 0) return t;
  }
  FAIL("no test named " << prefix);
  return tests.front();
}

// Data: Bollerslev & Ghysels (1996) DEM/GBP daily returns (../shared/data).
TEST_CASE("DEM/GBP: ARCH effects are detected and GARCH(1,1) leaves none", "[identify]") {
  const auto path = testing::ReferenceDataPath("dem2gbp.csv");
  if (!path) {
    WARN(testing::SkipMessage("dem2gbp.csv"));
    return;
  }
  auto series = ReadSeriesFile(*path);
  REQUIRE(series.ok());
  auto rep = IdentifyModel(series->values);
  REQUIRE(rep.ok());
  const auto& lm = Find(rep->arch_tests, "ARCH-LM(5) on residuals");
  INFO("ARCH-LM(5) on the mean residuals: LM " << lm.statistic << " p " << lm.p_value);
  CHECK(rep->arch_effect);
  CHECK(lm.p_value < 0.001);  // observed: LM = 182.4, p = 1.6e-37
  // The pipeline picks a GARCH(1,1) (observed: GARCH(1,1)-t by BIC).
  CHECK(rep->final_fit.params.spec.variance == VarianceKind::kGarch);
  CHECK(rep->final_fit.params.spec.arch_order == 1);
  CHECK(rep->final_fit.params.spec.garch_order == 1);
  // No ARCH effect remains at 5 % in the standardized residuals of the fitted
  // GARCH(1,1) (observed for the t model: ARCH-LM(5) p = 0.19, Ljung-Box(10)
  // on z^2 p = 0.29; the sign-bias test rejects at 5 %, p = 0.03, which the
  // report lists as a warning).
  CHECK_FALSE(Find(rep->diagnostics, "ARCH-LM(5) on z").rejected);
  CHECK_FALSE(Find(rep->diagnostics, "Ljung-Box(10) on z^2").rejected);
  // The same for the Gaussian benchmark model of the fit tests.
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "normal");
  FitOptions fo;
  fo.keep_series = true;
  auto fit = FitModel(*spec, series->values, fo);
  REQUIRE(fit.ok());
  const auto diag = StandardizedResidualDiagnostics(fit->residuals, fit->sigma2, 0, {});
  INFO("normal GARCH(1,1): ARCH-LM(5) on z p " << Find(diag, "ARCH-LM(5) on z").p_value);
  CHECK_FALSE(Find(diag, "ARCH-LM(5) on z").rejected);
}

TEST_CASE("an AR(1)-GJR(1,1,1)-t series is identified with an AR term and asymmetry",
          "[identify]") {
  const auto r = Sim("arma", {1, 0}, "gjr", {1, 1, 1}, "t",
                     {{"mu", 0.02}, {"ar1", 0.3}, {"omega", 0.03}, {"alpha1", 0.02},
                      {"gamma1", 0.16}, {"beta1", 0.88}, {"nu", 6.0}},
                     4000, 31);
  auto rep = IdentifyModel(r);
  REQUIRE(rep.ok());
  const ModelSpec& s = rep->final_fit.params.spec;
  INFO("chosen " << s.Label() << "; " << rep->mean_decision << "; " << rep->variance_decision);
  CHECK(rep->arch_effect);
  CHECK(s.ar_order >= 1);
  CHECK(s.variance == VarianceKind::kGjr);
  CHECK(s.innovations == Innovations::kStudentT);
}

TEST_CASE("white noise with constant variance yields no ARCH effect", "[identify]") {
  const auto r = Sim("constant", {}, "constant", {}, "normal", {{"mu", 0.0}, {"omega", 1.0}},
                     2000, 41);
  auto rep = IdentifyModel(r);
  REQUIRE(rep.ok());
  INFO(rep->arch_decision);
  CHECK_FALSE(rep->arch_effect);
  CHECK(rep->arch_decision.find("no ARCH effect found") == 0);
  CHECK(rep->final_fit.params.spec.variance == VarianceKind::kConstant);
  CHECK(rep->final_fit.converged);
}

TEST_CASE("a pure ARCH(3) series is identified as ARCH(3) or a GARCH that fits as well",
          "[identify]") {
  const auto r = Sim("constant", {}, "arch", {3}, "normal",
                     {{"mu", 0.0}, {"omega", 0.2}, {"alpha1", 0.3}, {"alpha2", 0.2},
                      {"alpha3", 0.2}},
                     4000, 51);
  auto rep = IdentifyModel(r);
  REQUIRE(rep.ok());
  const ModelSpec& s = rep->final_fit.params.spec;
  INFO("chosen " << s.Label() << ": " << rep->variance_decision);
  const bool is_arch3 = s.variance == VarianceKind::kArch && s.arch_order == 3;
  const bool is_garch = s.variance == VarianceKind::kGarch || s.variance == VarianceKind::kGjr;
  CHECK((is_arch3 || is_garch));
  // The chosen model's criterion is no worse than ARCH(3) with the same law.
  double arch3 = 0, chosen = 0;
  for (const auto& c : rep->variance_candidates) {
    if (!c.ok) continue;
    if (c.spec.variance == VarianceKind::kArch && c.spec.arch_order == 3 &&
        c.spec.innovations == s.innovations) {
      arch3 = c.criterion;
    }
    if (c.spec == s) chosen = c.criterion;
  }
  REQUIRE(arch3 != 0);
  CHECK(chosen <= arch3);
}

TEST_CASE("degenerate windows give clear errors or flagged reports", "[identify]") {
  SECTION("constant") {
    auto rep = IdentifyModel(std::vector<double>(300, 0.1));
    REQUIRE_FALSE(rep.ok());
    CHECK(std::string(rep.status().message()) ==
          "the series is constant (all 300 values equal 0.1): its variance cannot be modelled");
  }
  SECTION("too short") {
    auto rep = IdentifyModel(std::vector<double>{0.1, -0.2, 0.3});
    REQUIRE_FALSE(rep.ok());
    CHECK(std::string(rep.status().message()) ==
          "too few observations: 3 given, at least 100 needed");
  }
  SECTION("NaN") {
    auto r = Sim("constant", {}, "garch", {1, 1}, "normal",
                 {{"mu", 0.0}, {"omega", 0.05}, {"alpha1", 0.1}, {"beta1", 0.85}}, 500, 3);
    r[200] = std::nan("");
    auto rep = IdentifyModel(r);
    REQUIRE_FALSE(rep.ok());
    CHECK(std::string(rep.status().message()) == "observation 201 is not a finite number (nan)");
  }
  SECTION("one huge outlier") {
    auto r = Sim("constant", {}, "garch", {1, 1}, "normal",
                 {{"mu", 0.0}, {"omega", 0.05}, {"alpha1", 0.1}, {"beta1", 0.85}}, 1500, 4);
    r[700] = 1e4;
    auto rep = IdentifyModel(r);
    REQUIRE(rep.ok());
    CHECK(std::isfinite(rep->final_fit.loglik));
    for (double v : rep->final_fit.params.values) CHECK(std::isfinite(v));
    // The outlier shows up in the normality diagnostic.
    CHECK(Find(rep->diagnostics, "Jarque-Bera on z").rejected);
  }
}

TEST_CASE("the CLI runs the pipeline and reports every step in JSON", "[identify][cli]") {
  const auto r = Sim("constant", {}, "garch", {1, 1}, "t",
                     {{"mu", 0.0}, {"omega", 0.05}, {"alpha1", 0.1}, {"beta1", 0.85},
                      {"nu", 6}},
                     1500, 61);
  std::string text = "ret\n";
  for (double x : r) text += std::to_string(x) + "\n";
  const std::string dir = testing::ScratchDir("identify_cli");
  const std::string path = testing::WriteFile(dir + "/r.csv", text);
  auto out = testing::RunCli({"fit", "--input", path, "--mean", "auto", "--variance", "auto",
                              "--criterion", "aic", "--max-mean-order", "1,1",
                              "--max-arch-order", "2", "--lags", "8", "--format", "json"});
  INFO(out.err);
  REQUIRE(out.exit_code == 0);
  const auto j = nlohmann::json::parse(out.out);
  CHECK(j.at("criterion") == "aic");
  CHECK(j.at("steps").at("mean_order").at("candidates").size() == 4);
  CHECK(j.at("steps").at("arch_effect").at("squared_residual_pacf").size() == 8);
  CHECK(j.at("steps").at("variance").at("candidates").size() == 12);  // (2 + 4) x 2 laws
  for (const char* key : {"model", "params", "std_errors", "robust_std_errors", "loglik", "aic",
                          "bic", "nobs", "converged", "diagnostics", "warnings"}) {
    CHECK(j.contains(key));
  }
  auto bad = testing::RunCli({"fit", "--input", path, "--mean", "auto"});
  CHECK(bad.exit_code == 2);
  CHECK(bad.err ==
        "aftershock fit: automatic identification needs both --mean auto and --variance auto\n");
}

}  // namespace
}  // namespace aftershock
