#include "aftershock/likelihood.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>

#include "estimation/test_series.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

struct Case {
  const char* mean;
  std::vector<int> mean_order;
  const char* variance;
  VarianceLags variance_order;
};

// Every mean x variance family, small and higher orders.
const std::vector<Case> kCases = {
    {"constant", {}, "garch", {1, 1}},  {"zero", {}, "garch", {2, 1}},
    {"arma", {1, 1}, "garch", {1, 1}},  {"arma", {2, 1}, "gjr", {1, 1, 1}},
    {"constant", {}, "gjr", {2, 2, 1}}, {"zero", {}, "arch", {3}},
    {"arma", {0, 2}, "arch", {1}},      {"constant", {}, "ewma", {}},
    {"arma", {1, 0}, "flat", {}},
};

// Plausible parameter values for a spec (inside the constraints).
ModelParams ParamsFor(const ModelSpec& spec) {
  ModelParams p{spec, std::vector<double>(spec.NumParams(), 0.0)};
  const auto names = spec.ParamNames();
  for (size_t i = 0; i < names.size(); ++i) {
    const std::string& n = names[i];
    double v = 0;
    if (n == "mu") v = 0.02;
    else if (n.rfind("ar", 0) == 0) v = 0.15 / (n.back() - '0');
    else if (n.rfind("ma", 0) == 0) v = -0.1 / (n.back() - '0');
    else if (n == "omega") v = spec.variance == VarianceKind::kConstant ? 1.3 : 0.06;
    else if (n.rfind("alpha", 0) == 0) v = 0.07 / (n.back() - '0');
    else if (n.rfind("gamma", 0) == 0) v = 0.05;
    else if (n.rfind("beta", 0) == 0) v = 0.8 / spec.garch_order;
    else if (n == "lambda") v = 0.94;
    else if (n == "nu") v = 7.0;
    p.values[i] = v;
  }
  return p;
}

double LogLik(const ModelParams& p, const std::vector<double>& r, Presample pre) {
  LikelihoodOptions o;
  o.presample = pre;
  o.gradient = false;
  auto res = EvaluateLikelihood(p, r, o);
  REQUIRE(res.ok());
  return res->loglik;
}

TEST_CASE("analytic gradient matches central finite differences for every model", "[likelihood]") {
  const std::vector<double> r = testing::TestGarchSeries(600, 11);
  for (const auto& c : kCases) {
    for (const char* law : {"gaussian", "student"}) {
      for (Presample pre : {Presample::kMeanSquare, Presample::kRobustStart}) {
        auto spec = MakeModelSpec(c.mean, c.mean_order, c.variance, c.variance_order, law);
        REQUIRE(spec.ok());
        const ModelParams p = ParamsFor(*spec);
        REQUIRE(p.CheckConstraints().ok());
        LikelihoodOptions o;
        o.presample = pre;
        o.scores = true;
        auto res = EvaluateLikelihood(p, r, o);
        REQUIRE(res.ok());
        INFO(spec->Label() << " presample " << PresampleName(pre));
        const auto names = spec->ParamNames();
        for (int i = 0; i < spec->NumParams(); ++i) {
          ModelParams hi = p, lo = p;
          const double h = 1e-6 * std::max(1.0, std::fabs(p.values[i]));
          hi.values[i] += h;
          lo.values[i] -= h;
          const double fd = (LogLik(hi, r, pre) - LogLik(lo, r, pre)) / (2 * h);
          INFO("parameter " << names[i] << " analytic " << res->gradient[i] << " fd " << fd);
          CHECK(std::fabs(res->gradient[i] - fd) <= 1e-5 * std::max(1.0, std::fabs(fd)));
          // The per-observation scores add up to the gradient.
          double sum = 0;
          for (int t = 0; t < res->nobs; ++t) sum += res->scores[t * spec->NumParams() + i];
          CHECK(sum == Approx(res->gradient[i]).epsilon(1e-10).margin(1e-10));
        }
      }
    }
  }
}

nlohmann::json SpecJson(const ModelSpec& s) {
  return {{"mean", std::string(MeanKindName(s.mean))},
          {"p", s.ar_order},
          {"q", s.ma_order},
          {"variance", std::string(VarianceKindName(s.variance))},
          {"na", s.arch_order},
          {"no", s.asym_order},
          {"nb", s.garch_order},
          {"innovations", std::string(InnovationsName(s.innovations))}};
}

// Reference: tests/python/scipy_garch_loglik.py, an independent numpy/scipy.stats
// implementation (scipy.stats.norm.logpdf / scipy.stats.t.logpdf), run live.
TEST_CASE("log-likelihood equals an independent SciPy implementation", "[likelihood][scipy]") {
  const std::vector<double> r = testing::TestGarchSeries(1500, 5);
  const std::vector<std::pair<Case, const char*>> checks = {
      {{"constant", {}, "garch", {1, 1}}, "gaussian"},
      {{"constant", {}, "garch", {1, 1}}, "student"},
      {{"constant", {}, "gjr", {1, 1, 1}}, "gaussian"},
      {{"arma", {1, 1}, "gjr", {1, 1, 1}}, "student"},
      {{"constant", {}, "gjr", {2, 1, 1}}, "gaussian"},  // asym lags 1 < shock lags 2
      {{"arma", {2, 1}, "garch", {2, 2}}, "student"},
      {{"zero", {}, "arch", {3}}, "gaussian"},
      {{"constant", {}, "ewma", {}}, "student"},
      {{"arma", {1, 0}, "flat", {}}, "student"},
  };
  for (const auto& [c, law] : checks) {
    for (Presample pre : {Presample::kMeanSquare, Presample::kRobustStart}) {
      auto spec = MakeModelSpec(c.mean, c.mean_order, c.variance, c.variance_order, law);
      REQUIRE(spec.ok());
      const ModelParams p = ParamsFor(*spec);
      nlohmann::json req = {{"returns", r},
                            {"spec", SpecJson(*spec)},
                            {"params", p.values},
                            {"presample", std::string(PresampleName(pre))}};
      auto out = testing::RunPython("scipy_garch_loglik.py", {}, req.dump());
      INFO(out.err);
      REQUIRE(out.exit_code == 0);
      const double ref = nlohmann::json::parse(out.out).at("loglik").get<double>();
      const double ours = LogLik(p, r, pre);
      INFO(spec->Label() << " " << PresampleName(pre) << " ours " << ours << " scipy " << ref);
      CHECK(testing::RelDiff(ours, ref) <= 1e-10);
    }
  }
}

TEST_CASE("robust-start: a robust scale of the first bars, not moved by one outlier",
          "[likelihood]") {
  // Zero-mean flat model: the residuals are the returns, so the presample value
  // can be checked by hand.
  auto spec = MakeModelSpec("zero", {}, "flat", {}, "gaussian");
  REQUIRE(spec.ok());
  const ModelParams p{*spec, {1.0}};
  // 60 returns: the first 50 alternate +-1 and +-3 (|e| = 1 on even j, 3 on
  // odd j); bars 50.. are 100 and lie outside the span.
  std::vector<double> r(60, 100.0);
  for (int j = 0; j < 50; ++j) r[j] = (j % 2 == 0 ? 1.0 : -3.0);
  LikelihoodOptions o;
  o.presample = Presample::kRobustStart;
  o.gradient = false;
  auto res = EvaluateLikelihood(p, r, o);
  REQUIRE(res.ok());
  // Weights 2^(-j/10): the even bars carry more than half of the weight
  // (sum over even j of 2^(-j/10) / total = 1 / (1 + 2^(-1/10)) = 0.517), so
  // the weighted median of |e| is 1 and s2 = 1.4826^2.
  CHECK(res->presample_variance == Approx(kRobustStartConsistency * kRobustStartConsistency));
  // One huge first return moves the median only to the next value of |e| (3).
  r[0] = 1e3;
  auto outlier = EvaluateLikelihood(p, r, o);
  REQUIRE(outlier.ok());
  CHECK(outlier->presample_variance ==
        Approx(9.0 * kRobustStartConsistency * kRobustStartConsistency));
  o.presample = Presample::kMeanSquare;
  auto ms = EvaluateLikelihood(p, r, o);
  REQUIRE(ms.ok());
  CHECK(ms->presample_variance > 1e4);  // the mean square follows the outlier and bars 50..
  // All-zero residuals fall back to the mean square.
  std::vector<double> zeros(60, 0.0);
  zeros[55] = 2.0;
  o.presample = Presample::kRobustStart;
  auto z = EvaluateLikelihood(p, zeros, o);
  REQUIRE(z.ok());
  CHECK(z->presample_variance == Approx(4.0 / 60));
}

TEST_CASE("bad inputs to the likelihood are clear errors", "[likelihood]") {
  auto spec = MakeModelSpec("arma", {2, 0}, "garch", {1, 1}, "gaussian");
  REQUIRE(spec.ok());
  ModelParams p = ParamsFor(*spec);
  auto short_res = EvaluateLikelihood(p, std::vector<double>{0.1, 0.2});
  REQUIRE_FALSE(short_res.ok());
  CHECK(std::string(short_res.status().message()) ==
        "too few observations: 2 for model ARMA(2,0)/GARCH(1,1)/gaussian");
  std::vector<double> r = testing::TestGarchSeries(50, 1);
  r[9] = std::nan("");
  auto nan_res = EvaluateLikelihood(p, r);
  REQUIRE_FALSE(nan_res.ok());
  CHECK(std::string(nan_res.status().message()) == "observation 10 is not a finite number");
  p.values.pop_back();
  auto size_res = EvaluateLikelihood(p, testing::TestGarchSeries(50, 1));
  REQUIRE_FALSE(size_res.ok());
  CHECK(std::string(size_res.status().message()).find("needs 6 parameters, got 5") !=
        std::string::npos);
}

}  // namespace
}  // namespace aftershock
