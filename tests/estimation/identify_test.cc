#include "aftershock/identify.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <limits>
#include <nlohmann/json.hpp>

#include "aftershock/estimator.h"
#include "aftershock/market_sim.h"
#include "aftershock/online_filter.h"
#include "aftershock/pipeline_refitter.h"
#include "aftershock/series_file.h"
#include "aftershock/simulate.h"
#include "estimation/identify_internal.h"
#include "estimation/simulated_law.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

std::vector<double> Sim(const char* mean, std::vector<int> mo, const char* var, VarianceLags vo,
                        const char* law, std::vector<std::pair<std::string, double>> named, int n,
                        uint64_t seed) {
  return testing::SimulateLaw({mean, std::move(mo), var, vo, law, std::move(named)}, n, seed);
}

// The identify_bench series' ARMA(1,0)/GJR-GARCH(1,1)/student parameters:
// strongly persistent clustering.
std::vector<std::pair<std::string, double>> BenchParams() {
  return {{"mu", 0.01},      {"ar_1", 0.1},    {"omega", 0.03}, {"alpha_1", 0.04},
          {"gamma_1", 0.08}, {"beta_1", 0.88}, {"nu", 7.0}};
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
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "gaussian");
  FitOptions fo;
  fo.keep_series = true;
  auto fit = FitModel(*spec, series->values, fo);
  REQUIRE(fit.ok());
  const auto diag = StandardizedResidualDiagnostics(fit->residuals, fit->sigma2, 0, {});
  INFO("normal GARCH(1,1): ARCH-LM(5) on z p " << Find(diag, "ARCH-LM(5) on z").p_value);
  CHECK_FALSE(Find(diag, "ARCH-LM(5) on z").rejected);
  // The warm refits' subset: the same three gate tests, bit for bit, nothing else.
  const auto gate = GateResidualDiagnostics(fit->residuals, fit->sigma2, 0, {});
  REQUIRE(gate.size() == 3);
  REQUIRE(diag.size() == 5);
  for (size_t i = 0; i < gate.size(); ++i) {
    INFO(diag[i].name);
    CHECK(gate[i].name == diag[i].name);
    CHECK(gate[i].statistic == diag[i].statistic);
    CHECK(gate[i].df == diag[i].df);
    CHECK(gate[i].p_value == diag[i].p_value);
    CHECK(gate[i].rejected == diag[i].rejected);
    CHECK(gate[i].meaning == diag[i].meaning);
  }
  CHECK(gate[0].name == "Ljung-Box(10) on z");
  CHECK(gate[1].name == "Ljung-Box(10) on z^2");
  CHECK(gate[2].name == "ARCH-LM(5) on z");
}

TEST_CASE("an ARMA(1,0)/GJR-GARCH(1,1)/student series is identified with an AR term and asymmetry",
          "[identify]") {
  const auto r = testing::SimulateLaw(testing::ArAsymmetricStudentLaw(), 4000, 31);
  auto rep = IdentifyModel(r);
  REQUIRE(rep.ok());
  const ModelSpec& s = rep->final_fit.params.spec;
  INFO("chosen " << s.Label() << "; " << rep->mean_decision << "; " << rep->variance_decision);
  CHECK(rep->arch_effect);
  CHECK(s.ar_order >= 1);
  CHECK(s.variance == VarianceKind::kGjr);
  CHECK(s.innovations == Innovations::kStudentT);
}

TEST_CASE("an ARCH candidate skipped by its criterion bound could not have won", "[identify]") {
  // The identify_bench series: strongly persistent clustering, where GARCH-type
  // candidates beat small ARCH models by far.
  const auto r = Sim("arma", {1, 0}, "gjr", {1, 1, 1}, "student", BenchParams(), 2000, 99);
  auto rep = IdentifyModel(r);
  REQUIRE(rep.ok());
  REQUIRE(rep->arch_effect);
  double best = std::numeric_limits<double>::infinity();
  for (const auto& c : rep->variance_candidates) {
    if (c.eligible) best = std::min(best, c.criterion);
  }
  const int nm = rep->two_step.params.spec.NumMeanParams();
  int skipped = 0;
  for (const auto& c : rep->variance_candidates) {
    if (c.error.rfind("not fitted: nested in", 0) != 0) continue;
    ++skipped;
    CHECK_FALSE(c.ok);
    CHECK_FALSE(c.eligible);
    // Fit it anyway, as the pipeline would have: mean held at the step-1
    // estimate (the two-step fit's mean block), a typical variance start.
    ModelParams start{c.spec, std::vector<double>(c.spec.NumParams(), 0.0)};
    for (int i = 0; i < nm; ++i) start.values[i] = rep->two_step.params.values[i];
    const int v0 = c.spec.VarianceOffset();
    start.values[v0] = 0.5;
    for (int i = 0; i < c.spec.arch_order; ++i) start.values[v0 + 1 + i] = 0.3 / c.spec.arch_order;
    if (c.spec.innovations == Innovations::kStudentT) start.values.back() = 8.0;
    FitOptions fo;
    fo.start = start;
    fo.fix_mean = true;
    fo.std_errors = false;
    auto fit = FitModel(c.spec, r, fo);
    REQUIRE(fit.ok());
    REQUIRE(fit->converged);
    INFO(c.spec.Label() << ": " << c.error << "; fitted BIC " << fit->bic << ", best " << best);
    CHECK(fit->bic > best);
  }
  CHECK(skipped > 0);  // the premise: the bound did cut candidates here
}

TEST_CASE("pruning never changes the choice: pruned and exhaustive searches agree", "[identify]") {
  // Series of different true orders and laws, short and long windows: the
  // search with the nested-ARCH bound and the one that fits every candidate
  // (internal::IdentifySearch, a test hook) must choose the same model, and
  // every candidate the bound skipped must lose when fitted.
  const std::vector<testing::SimulatedLaw> cases = {
      {"constant",
       {},
       "arch",
       {1},
       "student",
       {{"mu", 0.0}, {"omega", 0.5}, {"alpha_1", 0.5}, {"nu", 5.0}}},
      {"arma",
       {1, 0},
       "arch",
       {2},
       "gaussian",
       {{"mu", 0.0}, {"ar_1", 0.3}, {"omega", 0.4}, {"alpha_1", 0.3}, {"alpha_2", 0.25}}},
      {"constant",
       {},
       "arch",
       {3},
       "gaussian",
       {{"mu", 0.0}, {"omega", 0.2}, {"alpha_1", 0.3}, {"alpha_2", 0.2}, {"alpha_3", 0.2}}},
      {"arma",
       {0, 1},
       "garch",
       {1, 1},
       "student",
       {{"mu", 0.0},
        {"ma_1", 0.3},
        {"omega", 0.02},
        {"alpha_1", 0.1},
        {"beta_1", 0.85},
        {"nu", 6.0}}},
      {"arma", {1, 0}, "gjr", {1, 1, 1}, "student", BenchParams()},
  };
  internal::IdentifySearch exhaustive;
  exhaustive.prune_nested_arch = false;
  int skipped = 0, compared = 0;
  for (size_t k = 0; k < cases.size(); ++k) {
    for (int n : {600, 2000}) {
      const auto r = testing::SimulateLaw(cases[k], n, 700 + 10 * k + n);
      auto pruned = IdentifyModel(r);
      auto full = internal::IdentifyModelWithSearch(r, {}, exhaustive);
      REQUIRE(pruned.ok());
      REQUIRE(full.ok());
      INFO("case " << k << ", n " << n << ": pruned " << pruned->variance_decision
                   << "; exhaustive " << full->variance_decision);
      ++compared;
      CHECK(pruned->final_fit.params.spec == full->final_fit.params.spec);
      CHECK(pruned->variance_decision == full->variance_decision);
      REQUIRE(pruned->variance_candidates.size() == full->variance_candidates.size());
      double best = std::numeric_limits<double>::infinity();
      for (const auto& v : pruned->variance_candidates) {
        if (v.eligible) best = std::min(best, v.criterion);
      }
      for (size_t i = 0; i < pruned->variance_candidates.size(); ++i) {
        const auto& p = pruned->variance_candidates[i];
        const auto& f = full->variance_candidates[i];
        CHECK(p.spec == f.spec);
        if (p.error.rfind("not fitted: nested in", 0) != 0) continue;
        ++skipped;
        INFO(p.spec.Label() << ": " << p.error << "; fitted " << f.criterion);
        CHECK(f.criterion > best);
      }
    }
  }
  CHECK(compared == 10);
  CHECK(skipped > 0);  // the premise: the bound cut candidates on this panel
}

TEST_CASE("white noise with constant variance yields no ARCH effect", "[identify]") {
  const auto r =
      Sim("constant", {}, "flat", {}, "gaussian", {{"mu", 0.0}, {"omega", 1.0}}, 2000, 41);
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
  const auto r =
      Sim("constant", {}, "arch", {3}, "gaussian",
          {{"mu", 0.0}, {"omega", 0.2}, {"alpha_1", 0.3}, {"alpha_2", 0.2}, {"alpha_3", 0.2}}, 4000,
          51);
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
    auto r = Sim("constant", {}, "garch", {1, 1}, "gaussian",
                 {{"mu", 0.0}, {"omega", 0.05}, {"alpha_1", 0.1}, {"beta_1", 0.85}}, 500, 3);
    r[200] = std::nan("");
    auto rep = IdentifyModel(r);
    REQUIRE_FALSE(rep.ok());
    CHECK(std::string(rep.status().message()) == "observation 201 is not a finite number (nan)");
  }
  SECTION("one huge outlier") {
    auto r = Sim("constant", {}, "garch", {1, 1}, "gaussian",
                 {{"mu", 0.0}, {"omega", 0.05}, {"alpha_1", 0.1}, {"beta_1", 0.85}}, 1500, 4);
    r[700] = 1e4;
    auto rep = IdentifyModel(r);
    REQUIRE(rep.ok());
    CHECK(std::isfinite(rep->final_fit.loglik));
    for (double v : rep->final_fit.params.values) CHECK(std::isfinite(v));
    // The outlier shows up in the normality diagnostic.
    CHECK(Find(rep->diagnostics, "Jarque-Bera on z").rejected);
  }
}

// Mean QLIKE of the one-step variance forecasts of `params` on returns
// [from, end) of `all`, the filter run from the start of `all` (so the state is
// warmed over the fitting window). Per bar QLIKE = z^2 - ln z^2 - 1 with
// z^2 = eps^2 / h: Patton's QLIKE loss with the squared innovation as the
// variance proxy (A. Patton, Volatility forecast comparison using imperfect
// volatility proxies, J. Econometrics 160, 2011), robust to the proxy's noise.
double MeanQlike(const ModelParams& params, const std::vector<double>& all, size_t from) {
  auto m = FilterModel::Create(params, OutputOptions{}, 1);
  REQUIRE(m.ok());
  const auto u = FilterSeries(*m, 0.0, all);
  double s = 0;
  for (size_t i = from; i < all.size(); ++i) s += u[i].z * u[i].z - std::log(u[i].z * u[i].z) - 1;
  return s / static_cast<double>(all.size() - from);
}

// The short-window measurement: the demo universe (12 instruments simulated
// with GARCH-t / GJR-t, persistence 0.93-0.985, on one-minute bars), a 600-bar
// identification window (the demo's [refit] window) with the engine's
// identification settings, scored on the 600 bars that follow. Three master
// seeds; the target is per seed.
TEST_CASE("short windows: the weak-evidence rule picks clustering, QLIKE improves", "[identify]") {
  constexpr int kWindow = 600, kFollow = 600;
  const double ppy = PeriodsPerYearForInterval(60LL * 1000 * 1000 * 1000);
  IdentifyOptions after = PipelineRefitterOptions().identify;
  after.max_persistence = 0.9995;  // the engine's [refit] max_persistence default
  IdentifyOptions before = after;
  before.weak_evidence_aic = false;
  int total_before = 0, total_after = 0, windows = 0;
  double q_before = 0, q_after = 0;
  for (uint64_t master : {1, 2, 3}) {
    int cv_before = 0, cv_after = 0;
    for (const InstrumentProfile& prof : DefaultUniverse()) {
      auto params = InstrumentModel(prof, prof.family, ppy);
      REQUIRE(params.ok());
      SimulationOptions so;
      so.n = kWindow + kFollow;
      so.seed = InstrumentSeed(master, prof.symbol);
      auto sim = Simulate(*params, so);
      REQUIRE(sim.ok());
      const std::vector<double> window(sim->returns.begin(), sim->returns.begin() + kWindow);
      auto rb = IdentifyModel(window, before);
      auto ra = IdentifyModel(window, after);
      REQUIRE(rb.ok());
      REQUIRE(ra.ok());
      const ModelParams& pb = rb->final_fit.params;
      const ModelParams& pa = ra->final_fit.params;
      cv_before += pb.spec.variance != VarianceKind::kConstant;
      cv_after += pa.spec.variance != VarianceKind::kConstant;
      q_before += MeanQlike(pb, sim->returns, kWindow);
      q_after += MeanQlike(pa, sim->returns, kWindow);
      ++windows;
    }
    INFO("master seed " << master << ": conditional variance " << cv_before << " -> " << cv_after
                        << " of 12");
    CHECK(cv_after >= 10);
    total_before += cv_before;
    total_after += cv_after;
  }
  q_before /= windows;
  q_after /= windows;
  INFO("conditional variance " << total_before << " -> " << total_after << " of " << windows
                               << "; mean QLIKE on the following bars " << q_before << " -> "
                               << q_after);
  WARN("conditional variance " << total_before << " -> " << total_after << " of " << windows
                               << "; mean QLIKE " << q_before << " -> " << q_after);
  CHECK(total_after > total_before);
  CHECK(q_after <= q_before);
}

TEST_CASE("the CLI runs the pipeline and reports every step in JSON", "[identify][cli]") {
  const auto r =
      Sim("constant", {}, "garch", {1, 1}, "student",
          {{"mu", 0.0}, {"omega", 0.05}, {"alpha_1", 0.1}, {"beta_1", 0.85}, {"nu", 6}}, 1500, 61);
  std::string text = "ret\n";
  for (double x : r) text += std::to_string(x) + "\n";
  const std::string dir = testing::ScratchDir("identify_cli");
  const std::string path = testing::WriteFile(dir + "/r.csv", text);
  auto out = testing::RunCli({"fit", "--input", path, "--mean", "auto", "--variance", "auto",
                              "--criterion", "aic", "--max-mean-order", "1,1", "--max-arch-order",
                              "2", "--lags", "8", "--format", "json"});
  INFO(out.err);
  REQUIRE(out.exit_code == 0);
  const auto j = nlohmann::json::parse(out.out);
  CHECK(j.at("criterion") == "aic");
  CHECK(j.at("steps").at("mean_order").at("candidates").size() == 4);
  CHECK(j.at("steps").at("arch_effect").at("squared_residual_pacf").size() == 8);
  CHECK(j.at("steps").at("variance").at("candidates").size() == 12);  // (2 + 4) x 2 laws
  for (const char* key : {"model", "estimates", "se_hessian", "se_robust", "log_likelihood", "aic",
                          "bic", "likelihood_terms", "converged", "diagnostics", "warnings"}) {
    CHECK(j.contains(key));
  }
  for (const auto& c : j.at("steps").at("variance").at("candidates")) {
    CHECK(c.contains("log_likelihood"));
    CHECK(c.contains("num_params"));
  }
  auto bad = testing::RunCli({"fit", "--input", path, "--mean", "auto"});
  CHECK(bad.exit_code == 2);
  CHECK(bad.err ==
        "aftershock fit: automatic identification needs both --mean auto and --variance auto\n");
}

}  // namespace
}  // namespace aftershock
