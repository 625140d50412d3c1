#include "aftershock/online_filter.h"

#include <catch2/catch.hpp>
#include <cmath>

#include "aftershock/forecast.h"
#include "aftershock/likelihood.h"
#include "aftershock/simulate.h"
#include "support/test_support.h"
#include "support/alloc_counter.h"

namespace aftershock {
namespace {

ModelParams Params(const char* mean, std::vector<int> mo, const char* var, VarianceLags vo,
                   const char* law, std::vector<std::pair<std::string, double>> named) {
  auto spec = MakeModelSpec(mean, mo, var, vo, law);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, named);
  REQUIRE(p.ok());
  return *p;
}

std::vector<double> Sim(const ModelParams& p, int n, uint64_t seed) {
  return testing::SimulatedReturns(p, n, seed);
}

TEST_CASE("filtered variances equal the likelihood recursion exactly", "[filter]") {
  const std::vector<ModelParams> models = {
      Params("constant", {}, "garch", {1, 1}, "gaussian",
             {{"mu", 0.01}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.9}}),
      Params("constant", {}, "gjr", {1, 1, 1}, "student",
             {{"mu", 0.0},
              {"omega", 0.04},
              {"alpha_1", 0.03},
              {"gamma_1", 0.1},
              {"beta_1", 0.88},
              {"nu", 6}}),
      Params("zero", {}, "garch", {2, 2}, "gaussian",
             {{"omega", 0.05},
              {"alpha_1", 0.05},
              {"alpha_2", 0.03},
              {"beta_1", 0.5},
              {"beta_2", 0.3}}),
  };
  for (const auto& p : models) {
    const auto r = Sim(p, 3000, 17);
    LikelihoodOptions lo;
    lo.series = true;
    lo.gradient = false;
    auto ll = EvaluateLikelihood(p, r, lo);
    REQUIRE(ll.ok());
    auto fm = FilterModel::Create(p, OutputOptions{}, 1);
    REQUIRE(fm.ok());
    // Started from the likelihood's presample value, the stream reproduces the
    // estimator's conditional variances bit for bit.
    const auto ups = FilterSeries(*fm, ll->presample_variance, r);
    INFO(p.spec.Label());
    for (size_t k = 0; k < r.size(); ++k) {
      REQUIRE(ups[k].var == ll->sigma2[k]);
      REQUIRE(ups[k].eps == ll->residuals[k]);
      if (k + 1 < r.size()) REQUIRE(ups[k].var_next == ll->sigma2[k + 1]);
    }
  }
}

TEST_CASE("ARMA mean forecasts follow the likelihood recursion", "[filter]") {
  const ModelParams p = Params("arma", {1, 1}, "garch", {1, 1}, "gaussian",
                               {{"mu", 0.02},
                                {"ar_1", 0.3},
                                {"ma_1", -0.1},
                                {"omega", 0.05},
                                {"alpha_1", 0.1},
                                {"beta_1", 0.85}});
  const auto r = Sim(p, 2000, 5);
  LikelihoodOptions lo;
  lo.series = true;
  lo.gradient = false;
  auto ll = EvaluateLikelihood(p, r, lo);
  REQUIRE(ll.ok());
  auto fm = FilterModel::Create(p, OutputOptions{}, 1);
  REQUIRE(fm.ok());
  // The likelihood conditions on r_0 with eps_{-1} = 0; set the state alike.
  FilterState st;
  InitFilterState(*fm, ll->presample_variance, &st);
  st.r_hist[0] = r[0];
  st.eps_hist[0] = 0.0;
  st.mu_next = 0.02 + 0.3 * r[0];
  for (size_t k = 1; k < r.size(); ++k) {
    BarUpdate u;
    FilterStep(*fm, &st, r[k], &u);
    REQUIRE(u.eps == Approx(ll->residuals[k - 1]).epsilon(1e-14));
    REQUIRE(u.var == Approx(ll->sigma2[k - 1]).epsilon(1e-14));
  }
}

TEST_CASE("outputs: z, horizons, VaR, ES and scale", "[filter]") {
  const ModelParams p = Params("constant", {}, "gjr", {1, 1, 1}, "student",
                               {{"mu", 0.01},
                                {"omega", 0.02},
                                {"alpha_1", 0.04},
                                {"gamma_1", 0.08},
                                {"beta_1", 0.9},
                                {"nu", 5}});
  OutputOptions oo;
  oo.horizons = {1, 5, 20};
  oo.risk_levels = {0.99, 0.975};
  oo.periods_per_year = 252;
  oo.target_vol_ann = 10.0;  // per cent returns
  oo.scale_cap = 3.0;
  auto fm = FilterModel::Create(p, oo, 7);
  REQUIRE(fm.ok());
  const auto r = Sim(p, 500, 3);
  FilterState st;
  InitFilterState(*fm, 0, &st);
  CHECK(st.var.next_variance == Approx(p.UnconditionalVariance()));
  auto law = InnovationLaw::StudentT(5);
  REQUIRE(law.ok());
  for (double x : r) {
    const VarianceState before = st.var;
    BarUpdate u;
    FilterStep(*fm, &st, x, &u);
    CHECK(u.ver == 7);
    CHECK(u.z == Approx(u.eps / std::sqrt(u.var)).epsilon(1e-15));
    CHECK(u.vol_ann == Approx(std::sqrt(u.var_next * 252)).epsilon(1e-14));
    REQUIRE(u.n_horizons == 3);
    CHECK(u.var_h[0] == Approx(u.var_next).epsilon(1e-13));
    CHECK(u.var_h[1] == Approx(SummedVarianceForecast(p, st.var, 5)).epsilon(1e-12));
    CHECK(u.var_h[2] == Approx(SummedVarianceForecast(p, st.var, 20)).epsilon(1e-12));
    REQUIRE(u.n_levels == 2);
    const double sd = std::sqrt(u.var_next);
    CHECK(u.var_risk[0] == Approx(-(0.01 + sd * law->Quantile(0.01))).epsilon(1e-12));
    CHECK(u.es[1] == Approx(sd * law->ExpectedShortfall(0.025) - 0.01).epsilon(1e-12));
    CHECK(u.es[0] > u.var_risk[0]);
    CHECK(u.scale == Approx(std::min(3.0, 10.0 / u.vol_ann)).epsilon(1e-14));
    (void)before;
  }
}

TEST_CASE("higher-order models use the exact recursion for horizons", "[filter]") {
  const ModelParams p =
      Params("zero", {}, "garch", {2, 1}, "gaussian",
             {{"omega", 0.05}, {"alpha_1", 0.05}, {"alpha_2", 0.05}, {"beta_1", 0.8}});
  OutputOptions oo;
  oo.horizons = {1, 3, 10};
  auto fm = FilterModel::Create(p, oo, 1);
  REQUIRE(fm.ok());
  FilterState st;
  InitFilterState(*fm, 0, &st);
  for (double x : Sim(p, 200, 9)) {
    BarUpdate u;
    FilterStep(*fm, &st, x, &u);
    CHECK(u.var_h[0] == Approx(u.var_next).epsilon(1e-14));
    CHECK(u.var_h[1] == Approx(SummedVarianceForecast(p, st.var, 3)).epsilon(1e-13));
    CHECK(u.var_h[2] == Approx(SummedVarianceForecast(p, st.var, 10)).epsilon(1e-13));
  }
}

TEST_CASE("the filter step allocates nothing", "[filter]") {
  const ModelParams p = Params("arma", {1, 1}, "garch", {2, 1}, "student",
                               {{"mu", 0.0},
                                {"ar_1", 0.1},
                                {"ma_1", 0.1},
                                {"omega", 0.05},
                                {"alpha_1", 0.05},
                                {"alpha_2", 0.05},
                                {"beta_1", 0.8},
                                {"nu", 7}});
  auto fm = FilterModel::Create(p, OutputOptions{}, 1);
  REQUIRE(fm.ok());
  const auto r = Sim(p, 1000, 1);
  FilterState st;
  InitFilterState(*fm, 0, &st);
  BarUpdate u;
  const uint64_t before = testing::AllocationCount();
  for (double x : r) FilterStep(*fm, &st, x, &u);
  CHECK(testing::AllocationCount() == before);
}

TEST_CASE("bad output options are clear errors", "[filter]") {
  const ModelParams p = Params("zero", {}, "ewma", {}, "gaussian", {{"lambda", 0.94}});
  OutputOptions oo;
  oo.horizons = {5, 1};
  auto a = FilterModel::Create(p, oo, 0);
  REQUIRE_FALSE(a.ok());
  CHECK(std::string(a.status().message()) == "horizons must be strictly increasing");
  oo.horizons = {1, 1000};
  auto b = FilterModel::Create(p, oo, 0);
  REQUIRE_FALSE(b.ok());
  CHECK(std::string(b.status().message()) == "horizons must be in 1..512 bars, got 1000");
  oo.horizons = {1};
  oo.scale_cap = 0;
  auto c = FilterModel::Create(p, oo, 0);
  REQUIRE_FALSE(c.ok());
  CHECK(std::string(c.status().message()) == "scale_cap must be a positive number");
  auto e = FilterModel::Ewma(0.94, OutputOptions{}, 0);
  REQUIRE(e.ok());
  CHECK(e->is_ewma());
}

}  // namespace
}  // namespace aftershock
