#include "aftershock/evaluation.h"

#include <boost/math/distributions/binomial.hpp>
#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>

#include "aftershock/online_filter.h"
#include "aftershock/simulate.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RelDiff;
using testing::RunPython;

ModelParams Params(const char* law, std::vector<std::pair<std::string, double>> named) {
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, law);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, named);
  REQUIRE(p.ok());
  return *p;
}

// Relative agreement to 1e-10; values below 1e-12 in size (an LR that is zero
// up to rounding) are compared absolutely against 1e-12.
bool Close(double a, double b) {
  if (std::fabs(b) < 1e-12) return std::fabs(a - b) < 1e-12;
  return RelDiff(a, b) < 1e-10;
}

std::vector<uint8_t> Seq(int n, std::vector<int> ones) {
  std::vector<uint8_t> s(n, 0);
  for (int i : ones) s[i] = 1;
  return s;
}

// A small deterministic pseudo-random 0/1 sequence with rate ~q (LCG, fixed).
std::vector<uint8_t> Pseudo(int n, double q, uint64_t seed) {
  std::vector<uint8_t> s(n);
  uint64_t x = seed;
  for (int i = 0; i < n; ++i) {
    x = x * 6364136223846793005ULL + 1442695040888963407ULL;
    s[i] = (static_cast<double>(x >> 11) / 9007199254740992.0) < q ? 1 : 0;
  }
  return s;
}

TEST_CASE("Kupiec and Christoffersen match a live scipy computation", "[evaluation]") {
  struct Case {
    const char* name;
    std::vector<uint8_t> hits;
    double p;
  };
  std::vector<Case> cases = {
      {"no exceptions", Seq(250, {}), 0.01},
      {"all exceptions", std::vector<uint8_t>(40, 1), 0.05},
      {"clustered", Seq(500, {100, 101, 102, 103, 104, 300, 301}), 0.01},
      {"spread out", Seq(500, {10, 90, 170, 250, 330, 410, 490}), 0.01},
      {"one exception at the end (empty row 1)", Seq(300, {299}), 0.01},
      {"alternating (n00 = n11 = 0)",
       [] {
         std::vector<uint8_t> s(60);
         for (int i = 0; i < 60; ++i) s[i] = i % 2;
         return s;
       }(),
       0.025},
      {"pseudo-random 2.5 %", Pseudo(2000, 0.03, 7), 0.025},
      {"pseudo-random 1 %", Pseudo(5000, 0.012, 11), 0.01},
  };
  nlohmann::json req;
  for (const auto& c : cases) req["exceptions"].push_back({{"hits", c.hits}, {"p", c.p}});
  // Reference: tests/python/scipy_backtest.py, LRs with scipy.special.xlogy/xlog1py,
  // p-values with scipy.stats.chi2.sf (dof 1, 1, 2).
  auto res = RunPython("scipy_backtest.py", {}, req.dump());
  INFO(res.err);
  REQUIRE(res.exit_code == 0);
  const auto ref = nlohmann::json::parse(res.out)["exceptions"];
  REQUIRE(ref.size() == cases.size());
  for (size_t i = 0; i < cases.size(); ++i) {
    INFO(cases[i].name);
    auto t = TestExceptions(cases[i].hits, cases[i].p);
    REQUIRE(t.ok());
    const auto& r = ref[i];
    CHECK(t->n00 == r["n00"].get<int64_t>());
    CHECK(t->n01 == r["n01"].get<int64_t>());
    CHECK(t->n10 == r["n10"].get<int64_t>());
    CHECK(t->n11 == r["n11"].get<int64_t>());
    INFO("lr_pof " << t->lr_pof << " vs " << r["lr_pof"].get<double>());
    CHECK(Close(t->lr_pof, r["lr_pof"].get<double>()));
    CHECK(Close(t->p_pof, r["p_pof"].get<double>()));  // scipy.stats.chi2.sf(lr, 1)
    INFO("lr_ind " << t->lr_ind << " vs " << r["lr_ind"].get<double>());
    CHECK(Close(t->lr_ind, r["lr_ind"].get<double>()));
    CHECK(Close(t->p_ind, r["p_ind"].get<double>()));  // scipy.stats.chi2.sf(lr, 1)
    CHECK(Close(t->lr_cc, r["lr_cc"].get<double>()));
    CHECK(Close(t->p_cc, r["p_cc"].get<double>()));  // scipy.stats.chi2.sf(lr, 2)
  }
}

TEST_CASE("exception tests: edge cases in closed form", "[evaluation]") {
  // x = 0: LR_pof = -2 n log(1 - p); no transitions into 1, LR_ind = 0.
  auto t0 = TestExceptions(Seq(250, {}), 0.01);
  REQUIRE(t0.ok());
  CHECK(t0->exceptions == 0);
  CHECK(RelDiff(t0->lr_pof, -2.0 * 250 * std::log(0.99)) < 1e-13);
  CHECK(t0->lr_ind == 0.0);
  CHECK(t0->p_ind == 1.0);
  // x = n: LR_pof = -2 n log p.
  auto t1 = TestExceptions(std::vector<uint8_t>(40, 1), 0.05);
  REQUIRE(t1.ok());
  CHECK(RelDiff(t1->lr_pof, -2.0 * 40 * std::log(0.05)) < 1e-13);
  CHECK(t1->n11 == 39);
  CHECK(t1->lr_ind == 0.0);
  // x / n == p exactly: LR_pof = 0, p = 1.
  auto t2 = TestExceptions(Seq(100, {50}), 0.01);
  REQUIRE(t2.ok());
  CHECK(t2->lr_pof < 1e-12);
  CHECK(t2->p_pof > 0.999999);
}

TEST_CASE("exception tests reject bad input with a clear message", "[evaluation]") {
  auto e = TestExceptions({}, 0.01);
  REQUIRE_FALSE(e.ok());
  CHECK(std::string(e.status().message()).find("empty") != std::string::npos);
  std::vector<uint8_t> bad = {0, 2, 0};
  auto b = TestExceptions(bad, 0.01);
  REQUIRE_FALSE(b.ok());
  CHECK(std::string(b.status().message()) == "exception backtest: entry 1 is 2, expected 0 or 1");
  auto p = TestExceptions(Seq(10, {}), 1.5);
  REQUIRE_FALSE(p.ok());
  CHECK(std::string(p.status().message()).find("not in (0, 1)") != std::string::npos);
}

TEST_CASE("traffic light zones at the Basel boundaries", "[evaluation]") {
  // Basel Committee (1996), 250 observations at 99 %: green 0-4, yellow 5-9, red 10+.
  EvaluationOptions o;
  auto zone = [&](int x) {
    std::vector<int> ones;
    for (int i = 0; i < x; ++i) ones.push_back(10 + 20 * i);
    auto tl = EvaluateTrafficLight(Seq(250, ones), o);
    REQUIRE(tl.ok());
    CHECK(tl->window_exceptions == x);
    CHECK(tl->n_windows == 1);
    return tl->zone;
  };
  CHECK(zone(0) == TrafficLightZone::kGreen);
  CHECK(zone(4) == TrafficLightZone::kGreen);
  CHECK(zone(5) == TrafficLightZone::kYellow);
  CHECK(zone(9) == TrafficLightZone::kYellow);
  CHECK(zone(10) == TrafficLightZone::kRed);
  CHECK(std::string(ZoneName(TrafficLightZone::kRed)) == "red");

  // Rolling shares: 300 bars, 5 exceptions at bars 0..4. The windows ending at
  // bars 249..254 contain 5,4,3,2,1,0 of them: 1 yellow window of 51.
  auto tl = EvaluateTrafficLight(Seq(300, {0, 1, 2, 3, 4}), o);
  REQUIRE(tl.ok());
  CHECK(tl->n_windows == 51);
  CHECK(tl->share_yellow == Approx(1.0 / 51).epsilon(1e-12));
  CHECK(tl->share_green == Approx(50.0 / 51).epsilon(1e-12));
  CHECK(tl->zone == TrafficLightZone::kGreen);
  CHECK(tl->window_exceptions == 0);

  // Fewer bars than the window: no zone.
  auto shortrun = EvaluateTrafficLight(Seq(100, {1, 2, 3, 4, 5, 6}), o);
  REQUIRE(shortrun.ok());
  CHECK(shortrun->zone == TrafficLightZone::kNotApplicable);
  CHECK(shortrun->n_windows == 0);
  CHECK(shortrun->window == 100);
}

TEST_CASE("QLIKE, MSE and Mincer-Zarnowitz on a hand-computed example", "[evaluation]") {
  // y = {1, 0, 4}, h = {1, 2, 2}, computed by hand:
  //   QLIKE (log h + y/h): ((0 + 1) + (log 2 + 0) + (log 2 + 2)) / 3 = (3 + 2 log 2) / 3
  //   normalized form over y > 0: (0 + (2 - log 2 - 1)) / 2 = (1 - log 2) / 2
  //   MSE: (0 + 4 + 4) / 3 = 8/3
  //   MZ: hbar = ybar = 5/3, Shh = Shy = 2/3 -> b = 1, a = 0; residuals 0, -2, 2,
  //   s^2 = 8, se(b) = sqrt(8 / (2/3)) = sqrt(12), se(a) = sqrt(8 (1/3 + 25/6)) = 6,
  //   Syy = 26/3, R^2 = 1 - 8 / (26/3) = 1/13.
  const std::vector<double> y = {1, 0, 4}, h = {1, 2, 2};
  auto f = EvaluateVarianceForecasts(y, h, "r2");
  REQUIRE(f.ok());
  CHECK(f->qlike == Approx((3 + 2 * std::log(2.0)) / 3).epsilon(1e-14));
  CHECK(f->qlike_normalized == Approx((1 - std::log(2.0)) / 2).epsilon(1e-14));
  CHECK(f->n_normalized == 2);
  CHECK(f->mse == Approx(8.0 / 3).epsilon(1e-14));
  CHECK(f->mz.slope == Approx(1.0).epsilon(1e-14));
  CHECK(std::fabs(f->mz.intercept) < 1e-14);
  CHECK(f->mz.slope_se == Approx(std::sqrt(12.0)).epsilon(1e-13));
  CHECK(f->mz.intercept_se == Approx(6.0).epsilon(1e-13));
  CHECK(f->mz.r_squared == Approx(1.0 / 13).epsilon(1e-13));

  auto bad = EvaluateVarianceForecasts({1, 2, 3}, {1, 0, 1}, "r2");
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) ==
        "forecast evaluation (r2): forecast at bar 1 is 0, expected finite and > 0");
  auto len = EvaluateVarianceForecasts({1, 2, 3}, {1, 1}, "rv");
  REQUIRE_FALSE(len.ok());
  CHECK(std::string(len.status().message()) ==
        "forecast evaluation (rv): 3 targets but 2 forecasts");
}

TEST_CASE("Mincer-Zarnowitz matches statsmodels OLS (classic and HC0)", "[evaluation]") {
  const auto p =
      Params("gaussian", {{"mu", 0.0}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}});
  SimulationOptions so;
  so.n = 400;
  so.seed = 3;
  auto s = Simulate(p, so);
  REQUIRE(s.ok());
  std::vector<double> y(s->returns.size());
  for (size_t i = 0; i < y.size(); ++i) y[i] = s->returns[i] * s->returns[i];
  auto mz = MincerZarnowitzRegression(y, s->sigma2);
  REQUIRE(mz.ok());
  nlohmann::json req;
  req["ols"].push_back({{"y", y}, {"x", s->sigma2}});
  // Reference: statsmodels.api.OLS(y, add_constant(h)).fit() and .fit(cov_type="HC0").
  auto res = RunPython("scipy_backtest.py", {}, req.dump());
  INFO(res.err);
  REQUIRE(res.exit_code == 0);
  const auto r = nlohmann::json::parse(res.out)["ols"][0];
  CHECK(RelDiff(mz->intercept, r["params"][0].get<double>()) < 1e-9);
  CHECK(RelDiff(mz->slope, r["params"][1].get<double>()) < 1e-9);
  CHECK(RelDiff(mz->intercept_se, r["bse"][0].get<double>()) < 1e-9);
  CHECK(RelDiff(mz->slope_se, r["bse"][1].get<double>()) < 1e-9);
  CHECK(RelDiff(mz->intercept_se_robust, r["bse_hc0"][0].get<double>()) < 1e-9);
  CHECK(RelDiff(mz->slope_se_robust, r["bse_hc0"][1].get<double>()) < 1e-9);
  CHECK(RelDiff(mz->r_squared, r["rsquared"].get<double>()) < 1e-9);
}

SymbolHistory Replay(const ModelParams& p, int64_t n, uint64_t seed) {
  SimulationOptions so;
  so.n = n;
  so.seed = seed;
  auto s = Simulate(p, so);
  REQUIRE(s.ok());
  OutputOptions oo;
  oo.risk_levels = {0.99, 0.975};
  auto fm = FilterModel::Create(p, oo, 1);
  REQUIRE(fm.ok());
  // The true sigma2 of the first bar starts the filter, so the filtered
  // variances are the true ones (up to rounding) from bar 0 on.
  const auto ups = FilterSeries(*fm, s->sigma2[0], s->returns);
  SymbolHistory h;
  h.symbol = "SIM";
  auto law = InnovationLaw::FromParams(p);
  REQUIRE(law.ok());
  h.law = *law;
  for (size_t i = 0; i < ups.size(); ++i) {
    BarUpdate u = ups[i];
    u.t_ns = static_cast<int64_t>(i + 1) * 60'000'000'000LL;
    REQUIRE(AppendBarUpdate(u, std::nan(""), &h).ok());
  }
  return h;
}

TEST_CASE("true-model replay: coverage, zones and MZ are as a correct model predicts",
          "[evaluation]") {
  const int64_t n = 100000;
  const std::vector<std::pair<const char*, ModelParams>> models = {
      {"gaussian garch(1,1)",
       Params("gaussian", {{"mu", 0.01}, {"omega", 0.05}, {"alpha_1", 0.05}, {"beta_1", 0.9}})},
      {"t garch(1,1), nu = 6",
       Params("student",
              {{"mu", 0.0}, {"omega", 0.02}, {"alpha_1", 0.06}, {"beta_1", 0.92}, {"nu", 6.0}})},
  };
  // Under the true model P(r_t < -VaR_t | past) = p for every bar, so the
  // exception indicators are iid Bernoulli(p) (Christoffersen 1998): the count
  // is Binomial(n, p) and the count in a 250-bar window Binomial(250, 0.01).
  const double p = 0.01;
  boost::math::binomial_distribution<double> total(static_cast<double>(n), p);
  const double lo = boost::math::quantile(total, 0.0005);
  const double hi = boost::math::quantile(boost::math::complement(total, 0.0005));
  boost::math::binomial_distribution<double> window(250.0, p);
  const double p_green = boost::math::cdf(window, 4.0);  // P(X <= 4)
  // Cross-check of that probability: scipy.stats.binom.cdf(4, 250, 0.01).
  {
    nlohmann::json req;
    req["binom"].push_back({{"n", 250}, {"p", p}, {"k", 4}});
    auto res = RunPython("scipy_backtest.py", {}, req.dump());
    REQUIRE(res.exit_code == 0);
    CHECK(RelDiff(p_green, nlohmann::json::parse(res.out)["binom"][0].get<double>()) < 1e-12);
  }
  // The rolling share is the average, over the 250 offsets, of the share among
  // m = n / 250 disjoint windows; disjoint windows are independent, so each of
  // those has standard deviation sqrt(P (1 - P) / m), and an average of
  // variables with a common standard deviation has at most that one. Five of
  // them is the margin (a one-sided 5-sigma bound is conservative for any
  // distribution by Cantelli's inequality: failure chance <= 1/26).
  const double m = static_cast<double>(n / 250);
  const double margin = 5.0 * std::sqrt(p_green * (1 - p_green) / m);

  for (const auto& [name, params] : models) {
    INFO(name);
    const SymbolHistory h = Replay(params, n, 20261202);
    auto ev = EvaluateSymbol(h, EvaluationOptions{});
    REQUIRE(ev.ok());
    REQUIRE(ev->levels.size() == 2);
    const LevelBacktest& b99 = ev->levels[0];
    CHECK(b99.level == 0.99);
    CHECK(b99.tests.n == n - 1);  // bar 0 has no lagged VaR
    const double x = static_cast<double>(b99.tests.exceptions);
    WARN(name << ": 99 % exceptions " << b99.tests.exceptions << " of " << b99.tests.n << " (rate "
              << b99.tests.rate << "), 99.9 % interval [" << lo << ", " << hi << "]; green share "
              << b99.traffic_light.share_green << " (P(X<=4) = " << p_green << ", margin " << margin
              << "), yellow " << b99.traffic_light.share_yellow << ", red "
              << b99.traffic_light.share_red << "; Kupiec p " << b99.tests.p_pof
              << ", Christoffersen p " << b99.tests.p_ind << "; ES ratio " << b99.es_ratio << " ("
              << b99.es_n << "); MZ a = " << ev->vs_r2.mz.intercept << " ("
              << ev->vs_r2.mz.intercept_se_robust << "), b = " << ev->vs_r2.mz.slope << " ("
              << ev->vs_r2.mz.slope_se_robust << ")");
    CHECK(x >= lo);
    CHECK(x <= hi);
    CHECK(b99.traffic_light.n_windows == n - 1 - 250 + 1);
    CHECK(b99.traffic_light.share_green >= p_green - margin);
    CHECK(b99.traffic_light.share_green + b99.traffic_light.share_yellow +
              b99.traffic_light.share_red ==
          Approx(1.0).epsilon(1e-12));
    // 97.5 % level: the same binomial argument.
    boost::math::binomial_distribution<double> total975(static_cast<double>(n - 1), 0.025);
    const double x975 = static_cast<double>(ev->levels[1].tests.exceptions);
    CHECK(x975 >= boost::math::quantile(total975, 0.0005));
    CHECK(x975 <= boost::math::quantile(boost::math::complement(total975, 0.0005)));
    CHECK(ev->levels[1].traffic_light.zone == TrafficLightZone::kNotApplicable);
    // ES ratio: loss / ES averages 1 over the exceptions of a correct model.
    // With ~1000 exceptions the ratio's sampling error is a few per cent.
    CHECK(std::fabs(b99.es_ratio - 1.0) < 0.1);
  }
  // MZ: the Gaussian model has a finite eighth moment (E[(beta + alpha z^2)^4] =
  // 0.846 < 1), so the HC0 errors are reliable; slope 1 and intercept 0 within
  // four robust standard errors.
  const SymbolHistory g = Replay(models[0].second, n, 99);
  auto ev = EvaluateSymbol(g, EvaluationOptions{});
  REQUIRE(ev.ok());
  const auto& mz = ev->vs_r2.mz;
  CHECK(std::fabs(mz.slope - 1.0) < 4.0 * mz.slope_se_robust);
  CHECK(std::fabs(mz.intercept) < 4.0 * mz.intercept_se_robust);
  CHECK(mz.slope_se_robust < 0.1);  // the check has power: the slope is pinned to +-0.4
}

TEST_CASE("the VaR backtest uses the forecast published one bar earlier", "[evaluation]") {
  SymbolHistory h;
  h.symbol = "LAG";
  h.risk_levels = {0.99};
  // Bar 1's loss (2.0) exceeds the VaR published at bar 0 (1.5) but not the
  // one published at bar 1 itself (3.0): exactly one exception, at bar 1.
  h.t_ns = {1, 2, 3, 4};
  h.r = {0.1, -2.0, 0.2, -0.1};
  h.mu = {0, 0, 0, 0};
  h.var = {1, 1, 1, 1};
  h.z = h.r;
  h.var_next = {1, 1, 1, 1};
  h.var_risk_next = {{1.5, 3.0, 3.0, 3.0}};
  h.es_next = {{2.5, 4.0, 4.0, 4.0}};
  h.ver = {1, 1, 1, 1};
  h.flags = {0, 0, 0, 0};
  auto ev = EvaluateSymbol(h, EvaluationOptions{});
  REQUIRE(ev.ok());
  CHECK(ev->levels[0].tests.n == 3);
  CHECK(ev->levels[0].tests.exceptions == 1);
  CHECK(ev->levels[0].es_n == 1);
  CHECK(ev->levels[0].es_ratio == Approx(2.0 / 2.5).epsilon(1e-14));
  // Constant forecasts: the losses are defined, the regression is not.
  CHECK(ev->vs_r2.mz.n == 0);
  CHECK(std::isnan(ev->vs_r2.mz.slope));
  CHECK(ev->vs_r2.mse > 0);
}

TEST_CASE("forecasts are also judged against realized variance when present", "[evaluation]") {
  const auto p =
      Params("gaussian", {{"mu", 0.0}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}});
  SymbolHistory h = Replay(p, 2000, 5);
  // A realized variance equal to the forecast on every other bar, absent on
  // the rest: the rv losses use the 1000 present bars and are exactly those of
  // a perfect forecast (normalized QLIKE 0, MSE 0, MZ a = 0, b = 1, R^2 = 1).
  h.rv.assign(h.t_ns.size(), std::nan(""));
  for (size_t i = 0; i < h.rv.size(); i += 2) h.rv[i] = h.var[i];
  auto ev = EvaluateSymbol(h, EvaluationOptions{});
  REQUIRE(ev.ok());
  REQUIRE(ev->vs_rv.has_value());
  const ForecastLoss& f = *ev->vs_rv;
  CHECK(f.target == "rv");
  CHECK(f.n == 1000);
  CHECK(std::fabs(f.qlike_normalized) < 1e-12);
  CHECK(f.mse < 1e-24);
  CHECK(f.mz.slope == Approx(1.0).epsilon(1e-9));
  CHECK(std::fabs(f.mz.intercept) < 1e-9);
  CHECK(f.mz.r_squared == Approx(1.0).epsilon(1e-9));
  CHECK(ev->vs_r2.n == 2000);
  CHECK(ev->vs_r2.qlike_normalized > 0.1);  // r^2 is a noisy proxy
}

TEST_CASE("symbol evaluation: exclusions, alerts, swaps and errors", "[evaluation]") {
  SymbolHistory h;
  h.symbol = "ALPHA";
  const int n = 10;
  for (int i = 0; i < n; ++i) {
    BarUpdate u;
    u.t_ns = 1000 + i;
    u.r = 0.1 * (i % 3 - 1);
    u.var = 1.0;
    u.z = u.r;
    u.var_next = 1.0;
    u.n_levels = 1;
    u.levels[0] = 0.99;
    u.var_risk[0] = 2.3;
    u.es[0] = 2.6;
    u.flags = i < 3 ? uint32_t{kFlagWarmup} : (i == 7 ? uint32_t{kFlagFallback} : 0u);
    REQUIRE(AppendBarUpdate(u, i == 5 ? 0.01 : std::nan(""), &h).ok());
  }
  CHECK(h.rv.size() == n);
  CHECK(std::isnan(h.rv[0]));
  h.alerts = {{1004, "shock", "warning", 4.2, "z = 4.2"},
              {1005, "shock", "warning", 4.4, "z = 4.4"},
              {1006, "model", "critical", 0, "refit failed"}};
  h.swaps = {{1003, 1, "m", {"omega"}, {0.1}, {}, -10, true, ""},
             {1006, 0, "m", {"omega"}, {0.2}, {}, -12, false, "diagnostics failed"}};
  auto ev = EvaluateSymbol(h, EvaluationOptions{});
  REQUIRE(ev.ok());
  CHECK(ev->bars == n);
  CHECK(ev->evaluated == n - 3);
  CHECK(ev->warmup_bars == 3);
  CHECK(ev->fallback_bars == 1);
  CHECK_FALSE(ev->vs_rv.has_value());  // one rv bar only
  REQUIRE(ev->alerts.size() == 2);
  CHECK(ev->alerts[0].kind == "model");
  CHECK(ev->alerts[1].kind == "shock");
  CHECK(ev->alerts[1].count == 2);
  CHECK(ev->swaps.accepted == 1);
  CHECK(ev->swaps.rejected == 1);
  CHECK(ev->swaps.reject_reasons[0].first == "diagnostics failed");
  CHECK(ev->warnings.size() == 2);  // the fallback bar and the rejected refit

  EvaluationOptions keep;
  keep.exclude_warmup = false;
  CHECK(EvaluateSymbol(h, keep)->evaluated == n);

  SymbolHistory broken = h;
  broken.z.pop_back();
  auto e1 = EvaluateSymbol(broken, EvaluationOptions{});
  REQUIRE_FALSE(e1.ok());
  CHECK(std::string(e1.status().message()) ==
        "evaluation of 'ALPHA': field 'z' has 9 entries, t_ns has 10");
  SymbolHistory back = h;
  back.t_ns[4] = 0;
  auto e2 = EvaluateSymbol(back, EvaluationOptions{});
  REQUIRE_FALSE(e2.ok());
  CHECK(std::string(e2.status().message()) ==
        "evaluation of 'ALPHA': timestamps decrease at bar 4");
  auto e3 = EvaluateSymbol(SymbolHistory{}, EvaluationOptions{});
  REQUIRE_FALSE(e3.ok());
  CHECK(std::string(e3.status().message()).find("no bars") != std::string::npos);

  BarUpdate other;
  other.n_levels = 2;
  auto e4 = AppendBarUpdate(other, 0, &h);
  REQUIRE_FALSE(e4.ok());
  CHECK(std::string(e4.message()).find("risk levels differ") != std::string::npos);
}

}  // namespace
}  // namespace aftershock

namespace aftershock {
namespace {

TEST_CASE("scaled zone thresholds follow the published rule and match scipy", "[evaluation]") {
  const EvaluationOptions o;
  // Basel Committee (1996), Table 1: 250 draws at 99 % give yellow from 5, red from 10.
  CHECK(ZoneThresholds(250, 0.01, o) == std::make_pair<int64_t, int64_t>(5, 10));
  // Intraday windows: the same cumulative probabilities (95 %, 99.99 %) over
  // the bars of 250 trading days. Reference: scipy.stats.binom.ppf(q, n, p),
  // run live by tests/python/scipy_backtest.py.
  const std::vector<std::pair<int64_t, double>> cases = {
      {250, 0.01}, {500, 0.01}, {97500, 0.01}, {19500, 0.01}, {6000, 0.025}, {1, 0.01}};
  nlohmann::json req;
  for (const auto& [n, p] : cases) {
    req["zone_thresholds"].push_back({{"n", n}, {"p", p}, {"q", 0.95}});
    req["zone_thresholds"].push_back({{"n", n}, {"p", p}, {"q", 0.9999}});
  }
  auto res = RunPython("scipy_backtest.py", {}, req.dump());
  INFO(res.err);
  REQUIRE(res.exit_code == 0);
  const auto ref = nlohmann::json::parse(res.out)["zone_thresholds"];
  REQUIRE(ref.size() == 2 * cases.size());
  for (size_t i = 0; i < cases.size(); ++i) {
    INFO("n = " << cases[i].first << ", p = " << cases[i].second);
    const auto [y, r] = ZoneThresholds(cases[i].first, cases[i].second, o);
    CHECK(y == ref[2 * i].get<int64_t>());
    CHECK(r == ref[2 * i + 1].get<int64_t>());
  }
}

// `days` trading days of `per_day` one-minute bars from 14:30 UTC, with
// bar-of-session indices when `sessions`; z and returns from a fixed LCG, VaR
// limit 2.326 (the 99 % normal quantile) at unit variance.
SymbolHistory IntradayHistory(int days, int per_day, bool sessions, uint64_t seed) {
  SymbolHistory h;
  h.symbol = "WREN.X";
  h.risk_levels = {0.99};
  h.var_risk_next.assign(1, {});
  h.es_next.assign(1, {});
  const int64_t day_ns = 86400LL * 1000000000LL, min_ns = 60LL * 1000000000LL;
  const int64_t t0 = 1'780'000'000LL * 1'000'000'000LL / day_ns * day_ns + 870 * min_ns;
  uint64_t s = seed;
  auto uniform = [&]() {
    s = s * 6364136223846793005ULL + 1442695040888963407ULL;
    return (static_cast<double>(s >> 11) + 0.5) / 9007199254740992.0;
  };
  for (int d = 0; d < days; ++d) {
    for (int k = 0; k < per_day; ++k) {
      // Box-Muller from two uniforms.
      const double z =
          std::sqrt(-2 * std::log(uniform())) * std::cos(6.283185307179586 * uniform());
      h.t_ns.push_back(t0 + d * day_ns + (k + 1) * min_ns);
      h.r.push_back(z);
      h.mu.push_back(0);
      h.var.push_back(1);
      h.z.push_back(z);
      h.var_next.push_back(1);
      h.var_risk_next[0].push_back(2.326347874040841);
      h.es_next[0].push_back(2.665214220345808);
      h.ver.push_back(1);
      h.flags.push_back(h.t_ns.size() == 1 ? kFlagFirstBar : (k == 0 ? kFlagGap : 0u));
      if (sessions) h.session_bar.push_back(k);
    }
  }
  return h;
}

TEST_CASE("intraday bars: the zone counts the last 250 trading days", "[evaluation]") {
  const EvaluationOptions o;
  // 260 days of 40 bars: the window is the last 250 days, 10,000 bars.
  const SymbolHistory h = IntradayHistory(260, 40, true, 5);
  const auto days = TradingDays(h);
  CHECK(days.front() == 0);
  CHECK(days.back() == 259);
  CHECK(days[39] == 0);
  CHECK(days[40] == 1);
  auto ev = EvaluateSymbol(h, o);
  REQUIRE(ev.ok());
  const TrafficLight& tl = ev->levels[0].traffic_light;
  CHECK(tl.basis == ZoneBasis::kTradingDays);
  CHECK(std::string(ZoneBasisName(tl.basis)) == "trading_days");
  CHECK(tl.window_days == 250);
  CHECK(tl.window == 250 * 40);
  // Independent count: exceptions among the bars of the last 250 days.
  int64_t exc = 0;
  for (size_t i = 10 * 40; i < h.t_ns.size(); ++i) exc += -h.r[i] > h.var_risk_next[0][i - 1];
  CHECK(tl.window_exceptions == exc);
  const auto [y, r] = ZoneThresholds(10000, 0.01, o);
  CHECK(tl.yellow_from == y);
  CHECK(tl.red_from == r);
  CHECK(y > 100);  // far above the 5 of a 250-bar window
  const TrafficLightZone want = exc >= r   ? TrafficLightZone::kRed
                                : exc >= y ? TrafficLightZone::kYellow
                                           : TrafficLightZone::kGreen;
  CHECK(tl.zone == want);
  CHECK(tl.n_windows == 11);  // windows ending at days 249 .. 259
  CHECK(tl.share_green + tl.share_yellow + tl.share_red == Approx(1.0).epsilon(1e-12));
  // The same days without session indices: UTC dates split them identically.
  SymbolHistory plain = h;
  plain.session_bar.clear();
  CHECK(TradingDays(plain) == days);
  auto ev2 = EvaluateSymbol(plain, o);
  REQUIRE(ev2.ok());
  CHECK(ev2->levels[0].traffic_light.window == tl.window);
  CHECK(ev2->levels[0].traffic_light.window_exceptions == tl.window_exceptions);

  // Every bar of the last five days an exception: 200 more, the zone is red
  // and the warning names the trading days.
  SymbolHistory bad = h;
  int64_t added = 0;
  for (size_t i = bad.r.size() - 200; i < bad.r.size(); ++i) {
    added += -h.r[i] > h.var_risk_next[0][i - 1] ? 0 : 1;
    bad.r[i] = -3.0;
  }
  auto ev3 = EvaluateSymbol(bad, o);
  REQUIRE(ev3.ok());
  const TrafficLight& t3 = ev3->levels[0].traffic_light;
  INFO("exceptions " << t3.window_exceptions << ", red from " << t3.red_from);
  CHECK(t3.window_exceptions == exc + added);
  CHECK(t3.zone == TrafficLightZone::kRed);
  bool said = false;
  for (const auto& w : ev3->warnings) {
    said = said ||
           w.find("red zone at 99 % (" + std::to_string(t3.window_exceptions) +
                  " exceptions in the last 250 trading days, 10000 bars)") != std::string::npos;
  }
  CHECK(said);
}

TEST_CASE("intraday bars over fewer than 250 days: the zone is labelled as bars", "[evaluation]") {
  const EvaluationOptions o;
  // Four hours of minute bars: one day. The zone is the last 250 bars, read as bars.
  auto ev = EvaluateSymbol(IntradayHistory(1, 240, true, 9), o);
  REQUIRE(ev.ok());
  const TrafficLight& tl = ev->levels[0].traffic_light;
  CHECK(tl.basis == ZoneBasis::kBars);
  CHECK(tl.window_days == 0);
  CHECK(tl.window == 239);  // 239 tested bars (bar 0 has no return), fewer than 250
  CHECK(tl.zone == TrafficLightZone::kNotApplicable);
  auto ev2 = EvaluateSymbol(IntradayHistory(3, 240, true, 9), o);
  REQUIRE(ev2.ok());
  CHECK(ev2->levels[0].traffic_light.basis == ZoneBasis::kBars);
  CHECK(ev2->levels[0].traffic_light.window == 250);
  CHECK(ev2->levels[0].traffic_light.yellow_from == 5);
  CHECK(ev2->levels[0].traffic_light.red_from == 10);
  // The warning says bars, never days.
  SymbolHistory bad = IntradayHistory(3, 240, true, 9);
  for (size_t i = bad.r.size() - 12; i < bad.r.size(); ++i) bad.r[i] = -3.0;
  auto ev3 = EvaluateSymbol(bad, o);
  REQUIRE(ev3.ok());
  bool said = false;
  for (const auto& w : ev3->warnings) {
    said = said || w.find("red zone at 99 % (") != std::string::npos;
    CHECK(w.find("day") == std::string::npos);
  }
  CHECK(said);
  // Daily bars: one bar a day, 300 days.
  auto ev4 = EvaluateSymbol(IntradayHistory(300, 1, false, 3), o);
  REQUIRE(ev4.ok());
  CHECK(ev4->levels[0].traffic_light.basis == ZoneBasis::kDailyBars);
  CHECK(ev4->levels[0].traffic_light.window == 250);
}

TEST_CASE("PIT histogram and uniformity tests match scipy", "[evaluation]") {
  // Shocks from a t(5) law standardized, tested under three laws: the right
  // one, a t with the wrong nu and the Gaussian (which misses the tails).
  const auto t5 = Params(
      "student", {{"mu", 0.0}, {"omega", 0.05}, {"alpha_1", 0.05}, {"beta_1", 0.9}, {"nu", 5.0}});
  const SymbolHistory h = Replay(t5, 4000, 77);
  std::vector<double> z(h.z.begin() + 1, h.z.end());
  struct Case {
    const char* name;
    InnovationLaw law;
    int bins;
  };
  auto t_law = [](double nu) {
    auto l = InnovationLaw::StudentT(nu);
    REQUIRE(l.ok());
    return *l;
  };
  const std::vector<Case> cases = {{"right law", t_law(5.0), 20},
                                   {"t with nu 12", t_law(12.0), 10},
                                   {"gaussian", InnovationLaw(), 20}};
  nlohmann::json req;
  for (const auto& c : cases) {
    nlohmann::json one = {{"z", z}, {"bins", c.bins}};
    if (c.law.kind() == Innovations::kStudentT) {
      one["law"] = "student";
      one["nu"] = c.law.nu();
    } else {
      one["law"] = "gaussian";
    }
    req["pit"].push_back(one);
  }
  // Reference: tests/python/scipy_backtest.py: scipy.stats.t.cdf / norm.cdf,
  // numpy.histogram, scipy.stats.chisquare, scipy.stats.kstest(method="asymp").
  auto res = RunPython("scipy_backtest.py", {}, req.dump());
  INFO(res.err);
  REQUIRE(res.exit_code == 0);
  const auto ref = nlohmann::json::parse(res.out)["pit"];
  REQUIRE(ref.size() == cases.size());
  std::vector<PitTest> got;
  for (size_t i = 0; i < cases.size(); ++i) {
    INFO(cases[i].name);
    auto t = TestPit(z, cases[i].law, cases[i].bins);
    REQUIRE(t.ok());
    CHECK(t->n == static_cast<int64_t>(z.size()));
    CHECK(t->counts == ref[i]["counts"].get<std::vector<int64_t>>());
    CHECK(t->chi2_dof == cases[i].bins - 1);
    CHECK(RelDiff(t->chi2, ref[i]["chi2"].get<double>()) < 1e-10);
    CHECK(RelDiff(t->chi2_p, ref[i]["chi2_p"].get<double>()) < 1e-8);
    CHECK(RelDiff(t->ks_d, ref[i]["ks_d"].get<double>()) < 1e-8);
    const double kp = ref[i]["ks_p"].get<double>();
    INFO("KS p " << t->ks_p << " vs scipy " << kp);
    CHECK((kp < 1e-300 ? t->ks_p < 1e-200 : RelDiff(t->ks_p, kp) < 1e-6));
    got.push_back(*t);
  }
  // The right law passes, the Gaussian is rejected (the tests have power).
  CHECK(got[0].chi2_p > 1e-3);
  CHECK(got[0].ks_p > 1e-3);
  CHECK(got[2].chi2_p < 1e-6);
  // Bad input.
  CHECK_FALSE(TestPit(z, InnovationLaw(), 1).ok());
  CHECK_FALSE(TestPit({}, InnovationLaw(), 10).ok());
}

TEST_CASE("Kolmogorov tail in closed form at its limits", "[evaluation]") {
  CHECK(KolmogorovSurvival(0.0) == 1.0);
  CHECK(KolmogorovSurvival(0.1) == 1.0);
  // One term dominates far out: 2 exp(-2 x^2).
  CHECK(RelDiff(KolmogorovSurvival(3.0), 2 * std::exp(-18.0)) < 1e-12);
  // Monotone decreasing in between.
  double prev = 1.0;
  for (double x = 0.2; x < 3.0; x += 0.05) {
    const double v = KolmogorovSurvival(x);
    CHECK(v <= prev);
    prev = v;
  }
}

}  // namespace
}  // namespace aftershock
