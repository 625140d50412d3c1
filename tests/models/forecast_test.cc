#include "aftershock/forecast.h"

#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <boost/random/student_t_distribution.hpp>
#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"

namespace aftershock {
namespace {

ModelParams Make(const std::string& variance, const VarianceLags& order,
                 const std::vector<std::pair<std::string, double>>& named,
                 const std::string& innovations = "gaussian") {
  auto spec = MakeModelSpec("zero", {}, variance, order, innovations);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, named);
  REQUIRE(p.ok());
  REQUIRE(p->CheckConstraints().ok());
  return *p;
}

ModelParams Garch11() {
  return Make("garch", {1, 1}, {{"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}});
}
ModelParams Garch21() {
  return Make("garch", {2, 1},
              {{"omega", 0.04}, {"alpha_1", 0.05}, {"alpha_2", 0.07}, {"beta_1", 0.83}});
}
ModelParams Gjr111() {
  return Make("gjr", {1, 1, 1},
              {{"omega", 0.03}, {"alpha_1", 0.03}, {"gamma_1", 0.1}, {"beta_1", 0.88}, {"nu", 8.0}},
              "student");
}
ModelParams Arch3() {
  return Make("arch", {3}, {{"omega", 0.2}, {"alpha_1", 0.3}, {"alpha_2", 0.2}, {"alpha_3", 0.15}});
}

// An end-of-sample state away from the steady state, with a recent negative
// shock, so the forecasts have a visible decay and the asymmetric term matters.
const std::vector<double> kHistEps = {0.4, -1.1, 0.7, 0.2, -0.5, 1.3, -2.9};
const std::vector<double> kHistSigma2 = {1.1, 1.0, 1.2, 1.05, 0.9, 1.4, 1.8};

VarianceState StateFor(const ModelParams& p) {
  auto st = StateFromHistory(p, kHistEps, kHistSigma2);
  REQUIRE(st.ok());
  return *st;
}

TEST_CASE("state from history applies the recursion once", "[forecast]") {
  const auto p = Gjr111();
  const auto st = StateFor(p);
  // eps_T = -2.9 (negative), sigma2_T = 1.8.
  CHECK(st.eps2[0] == Approx(8.41));
  CHECK(st.neg_eps2[0] == Approx(8.41));
  CHECK(st.sigma2[0] == 1.8);
  CHECK(st.next_variance == Approx(0.03 + 0.03 * 8.41 + 0.1 * 8.41 + 0.88 * 1.8));
  const auto a3 = Arch3();
  const auto s3 = StateFor(a3);
  CHECK(s3.eps2[2] == Approx(0.5 * 0.5));
  CHECK(s3.next_variance == Approx(0.2 + 0.3 * 8.41 + 0.2 * 1.69 + 0.15 * 0.25));
  auto short_hist =
      StateFromHistory(a3, std::vector<double>{1.0, 2.0}, std::vector<double>{1.0, 1.0});
  REQUIRE_FALSE(short_hist.ok());
  CHECK(std::string(short_hist.status().message()) ==
        "model zero/ARCH(3)/gaussian needs 3 observations of history, got 2");
  auto mismatch = StateFromHistory(a3, std::vector<double>{1, 2, 3}, std::vector<double>{1, 1});
  REQUIRE_FALSE(mismatch.ok());
  CHECK(std::string(mismatch.status().message()) ==
        "residuals (3) and variances (2) differ in length");
}

// The (1,1)-type models with a closed-form forecast table.
std::vector<ModelParams> ClosedFormModels() {
  return {Garch11(), Gjr111(), Make("arch", {1}, {{"omega", 0.3}, {"alpha_1", 0.6}})};
}

TEST_CASE("closed forms equal brute-force iteration for (1,1)-type models", "[forecast]") {
  const std::vector<ModelParams> models = ClosedFormModels();
  for (const ModelParams& model : models) {
    const ModelParams* p = &model;
    INFO(p->spec.Label());
    REQUIRE(HasClosedFormForecast(p->spec));
    const auto st = StateFor(*p);
    const double phi = p->Persistence();
    const double sbar2 = p->UnconditionalVariance();
    // Brute force: iterate E sigma2_{t+1} = omega + phi E sigma2_t from s2.
    double v = st.next_variance, sum = 0.0;
    const auto rec = ForecastVariances(*p, st, 60);
    for (int h = 1; h <= 60; ++h) {
      if (h > 1) v = p->omega() + phi * v;
      sum += v;
      CHECK(ClosedFormVariance(phi, sbar2, st.next_variance, h) == Approx(v).epsilon(1e-13));
      CHECK(ClosedFormSummedVariance(phi, sbar2, st.next_variance, h) ==
            Approx(sum).epsilon(1e-13));
      CHECK(rec[h - 1] == Approx(v).epsilon(1e-13));
    }
    CHECK(SummedVarianceForecast(*p, st, 60) == Approx(sum).epsilon(1e-13));
    // Far out the forecast reverts to the unconditional variance.
    CHECK(ForecastVariances(*p, st, 2000).back() == Approx(sbar2).epsilon(1e-10));

    const std::vector<int> horizons = {1, 5, 10, 22, 60};
    auto table = HorizonTable::Create(*p, horizons);
    REQUIRE(table.ok());
    REQUIRE(table->closed());
    for (int i = 0; i < table->size(); ++i) {
      const int h = horizons[i];
      CHECK(table->horizon(i) == h);
      CHECK(table->PointVariance(i, st.next_variance) == Approx(rec[h - 1]).epsilon(1e-13));
      CHECK(table->SummedVariance(i, st.next_variance) ==
            Approx(SummedVarianceForecast(*p, st, h)).epsilon(1e-13));
    }
  }
}

TEST_CASE("the one-bar summed variance is the one-step forecast to the bit", "[forecast]") {
  // Its coefficients are exactly 0 and 1, from Create and from Retune, so the
  // published var_h for 1 bar equals var_next bit for bit (the JSON writer
  // then copies var_next's text instead of formatting the number again).
  for (const ModelParams& p : ClosedFormModels()) {
    INFO(p.spec.Label());
    auto table = HorizonTable::Create(p, std::vector<int>{1, 5});
    REQUIRE(table.ok());
    REQUIRE(table->closed());
    CHECK(table->sum_a(0) == 0.0);
    CHECK(table->sum_b(0) == 1.0);
    for (double s2 : {1e-6, 2.345678901234567e-4, 0.3, 7.0}) {
      CHECK(table->SummedVariance(0, s2) == s2);
    }
    for (double phi : {0.5, 0.9, 0.97, 0.99, 0.999, 0.123456789}) {
      table->Retune(phi, 1e-4);
      CHECK(table->sum_a(0) == 0.0);
      CHECK(table->sum_b(0) == 1.0);
    }
  }
  // GARCH(1,1) models whose persistence makes the closed-form geometric sum
  // expm1(log(phi)) / (1 - phi) round a unit away from 1 (about 6 % of
  // persistences): the table still holds exactly 0 and 1.
  int rounded_away = 0;
  for (int k = 0; k < 1400; ++k) {
    const double beta = 0.80 + 1e-4 * k;
    const auto p = Make("garch", {1, 1}, {{"omega", 0.05}, {"alpha_1", 0.05}, {"beta_1", beta}});
    const double phi = p.Persistence();
    if (-std::expm1(std::log(phi)) / (1.0 - phi) == 1.0) continue;
    ++rounded_away;
    auto table = HorizonTable::Create(p, std::vector<int>{1, 5});
    REQUIRE(table.ok());
    CHECK(table->sum_a(0) == 0.0);
    CHECK(table->sum_b(0) == 1.0);
    CHECK(table->SummedVariance(0, 2.345678901234567e-4) == 2.345678901234567e-4);
  }
  CHECK(rounded_away > 10);
}

TEST_CASE("EWMA is flat and constant variance is omega", "[forecast]") {
  const auto ewma = Make("ewma", {}, {{"lambda", 0.94}});
  VarianceState st;
  st.eps2[0] = 4.0;
  st.sigma2[0] = 1.0;
  st.next_variance = NextVariance(ewma, st);
  CHECK(st.next_variance == Approx(0.94 + 0.06 * 4.0));
  for (double v : ForecastVariances(ewma, st, 30)) CHECK(v == st.next_variance);
  auto table = HorizonTable::Create(ewma, std::vector<int>{1, 10});
  REQUIRE(table.ok());
  CHECK(table->SummedVariance(1, st.next_variance) == Approx(10 * st.next_variance));
  CHECK(table->PointVariance(1, st.next_variance) == st.next_variance);

  const auto cst = Make("flat", {}, {{"omega", 2.5}});
  VarianceState cs;
  cs.next_variance = NextVariance(cst, cs);
  CHECK(cs.next_variance == 2.5);
  for (double v : ForecastVariances(cst, cs, 5)) CHECK(v == 2.5);
  auto ct = HorizonTable::Create(cst, std::vector<int>{3});
  REQUIRE(ct.ok());
  CHECK(ct->SummedVariance(0, 2.5) == Approx(7.5));
}

TEST_CASE("higher orders have no closed table and use the recursion", "[forecast]") {
  for (const auto& p : {Garch21(), Arch3()}) {
    CHECK_FALSE(HasClosedFormForecast(p.spec));
    auto table = HorizonTable::Create(p, std::vector<int>{1, 5});
    REQUIRE(table.ok());
    CHECK_FALSE(table->closed());
    // The recursion still reverts to the unconditional variance.
    CHECK(ForecastVariances(p, StateFor(p), 3000).back() ==
          Approx(p.UnconditionalVariance()).epsilon(1e-9));
  }
  auto bad = HorizonTable::Create(Garch11(), std::vector<int>{1, 0});
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "forecast horizon must be >= 1 bar, got 0");
  auto none = HorizonTable::Create(Garch11(), std::vector<int>{});
  REQUIRE_FALSE(none.ok());
  CHECK(std::string(none.status().message()) ==
        "between 1 and 8 forecast horizons are supported, got 0");
}

// Monte Carlo: simulate many futures from the same end-of-sample state with the
// model's own recursion written out here, and compare the sample mean of eps^2 at
// each horizon with the forecast. Mean of eps^2_{T+h} = E sigma2_{T+h}; the Monte
// Carlo standard error is the sample standard deviation / sqrt(paths).
void CheckAgainstMonteCarlo(const ModelParams& p, uint64_t seed) {
  constexpr int kPaths = 200000;
  constexpr int kH = 10;
  const auto st = StateFor(p);
  const auto fc = ForecastVariances(p, st, kH);
  const ModelSpec& s = p.spec;
  boost::random::mt19937_64 rng(seed);
  boost::random::normal_distribution<double> normal(0.0, 1.0);
  const bool is_t = s.innovations == Innovations::kStudentT;
  boost::random::student_t_distribution<double> student(is_t ? p.nu() : 5.0);
  const double t_scale = is_t ? std::sqrt((p.nu() - 2.0) / p.nu()) : 1.0;

  std::vector<double> sum(kH, 0.0), sum2(kH, 0.0);
  // Observed history, most recent first: index i holds bar T-i.
  const std::vector<double> eps(kHistEps.rbegin(), kHistEps.rend());
  const std::vector<double> sig(kHistSigma2.rbegin(), kHistSigma2.rend());
  std::vector<double> future_eps, future_sig;  // bar T+k at index k-1
  future_eps.reserve(kH);
  future_sig.reserve(kH);
  for (int path = 0; path < kPaths; ++path) {
    future_eps.clear();
    future_sig.clear();
    for (int h = 1; h <= kH; ++h) {
      // Value of bar T+h-L for lag L (L >= 1): future if h-L >= 1 else history.
      auto e_lag = [&](int L) { return h - L >= 1 ? future_eps[h - L - 1] : eps[L - h]; };
      auto s_lag = [&](int L) { return h - L >= 1 ? future_sig[h - L - 1] : sig[L - h]; };
      double v = p.omega();
      for (int i = 1; i <= s.arch_order; ++i) v += p.alpha(i - 1) * e_lag(i) * e_lag(i);
      for (int k = 1; k <= s.asym_order; ++k) {
        const double e = e_lag(k);
        v += p.gamma(k - 1) * (e < 0 ? e * e : 0.0);
      }
      for (int j = 1; j <= s.garch_order; ++j) v += p.beta(j - 1) * s_lag(j);
      const double z = is_t ? t_scale * student(rng) : normal(rng);
      const double e = std::sqrt(v) * z;
      future_sig.push_back(v);
      future_eps.push_back(e);
      sum[h - 1] += e * e;
      sum2[h - 1] += e * e * e * e;
    }
  }
  double worst_se_units = 0.0;
  for (int h = 1; h <= kH; ++h) {
    const double mean = sum[h - 1] / kPaths;
    const double var = sum2[h - 1] / kPaths - mean * mean;
    const double se = std::sqrt(var / kPaths);
    INFO(p.spec.Label() << " h=" << h << " forecast=" << fc[h - 1] << " MC mean=" << mean
                        << " se=" << se);
    CHECK(std::abs(mean - fc[h - 1]) < 4.0 * se);
    worst_se_units = std::max(worst_se_units, std::abs(mean - fc[h - 1]) / se);
  }
  WARN(p.spec.Label() << ": largest |MC mean - forecast| over h=1..10 is " << worst_se_units
                      << " standard errors; h=10 forecast " << fc[kH - 1]);
}

TEST_CASE("recursion matches a Monte Carlo mean of future squared returns", "[forecast][mc]") {
  CheckAgainstMonteCarlo(Garch11(), 11);
  CheckAgainstMonteCarlo(Garch21(), 21);
  CheckAgainstMonteCarlo(Gjr111(), 111);  // Student-t(8) innovations
  CheckAgainstMonteCarlo(Arch3(), 3);
}

TEST_CASE("annualization and half-life", "[forecast]") {
  // 1 % daily volatility over 252 trading days is 15.87 % a year (sqrt(252) = 15.8745).
  CHECK(AnnualizedVolatility(1e-4, 252.0) == Approx(0.158745).epsilon(1e-5));
  CHECK(AnnualizedVariance(1e-4, 252.0) == Approx(0.0252));
  // Half-life: phi^h = 1/2.
  const double hl = ShockHalfLife(0.98);
  CHECK(std::pow(0.98, hl) == Approx(0.5).epsilon(1e-12));
  CHECK(hl == Approx(34.31).epsilon(1e-3));
  CHECK(ShockHalfLife(1.0) == std::numeric_limits<double>::infinity());
  CHECK(ShockHalfLife(0.0) == 0.0);
}

}  // namespace
}  // namespace aftershock
