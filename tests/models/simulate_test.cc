#include "aftershock/simulate.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"

namespace aftershock {
namespace {

ModelParams Make(const std::string& mean, const std::vector<int>& mean_order,
                 const std::string& variance, const VarianceLags& order,
                 const std::string& innovations,
                 const std::vector<std::pair<std::string, double>>& named) {
  auto spec = MakeModelSpec(mean, mean_order, variance, order, innovations);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, named);
  REQUIRE(p.ok());
  return *p;
}

ModelParams Garch11() {
  return Make("constant", {}, "garch", {1, 1}, "gaussian",
              {{"mu", 0.02}, {"omega", 0.05}, {"alpha_1", 0.05}, {"beta_1", 0.9}});
}

double Mean(const std::vector<double>& x, size_t lo, size_t hi) {
  double s = 0.0;
  for (size_t i = lo; i < hi; ++i) s += x[i];
  return s / static_cast<double>(hi - lo);
}

// Sample variance of x[lo, hi) and its standard error by non-overlapping batch
// means of the squared deviations (Law & Kelton's batch-means method): squared
// GARCH residuals are autocorrelated, so the iid formula would understate the
// error. Batches of 2,000 bars are far longer than the correlation time of the
// models used here (half-lives below 15 bars).
struct VarEstimate {
  double var;
  double se;
};
VarEstimate SampleVariance(const std::vector<double>& x, size_t lo, size_t hi) {
  const double m = Mean(x, lo, hi);
  constexpr size_t kBatch = 2000;
  const size_t batches = (hi - lo) / kBatch;
  double total = 0.0, total2 = 0.0;
  for (size_t b = 0; b < batches; ++b) {
    double s = 0.0;
    for (size_t i = lo + b * kBatch; i < lo + (b + 1) * kBatch; ++i) s += (x[i] - m) * (x[i] - m);
    const double bm = s / kBatch;
    total += bm;
    total2 += bm * bm;
  }
  const double mean_b = total / batches;
  const double var_b = (total2 / batches - mean_b * mean_b) * batches / (batches - 1.0);
  return {mean_b, std::sqrt(var_b / batches)};
}

TEST_CASE("the same seed gives the same series, another seed another one", "[simulate]") {
  const auto p = Make("arma", {1, 1}, "gjr", {1, 1, 1}, "student",
                      {{"mu", 0.01},
                       {"ar_1", 0.3},
                       {"ma_1", -0.1},
                       {"omega", 0.02},
                       {"alpha_1", 0.03},
                       {"gamma_1", 0.08},
                       {"beta_1", 0.9},
                       {"nu", 6.0}});
  SimulationOptions o;
  o.n = 5000;
  o.seed = 42;
  auto a = Simulate(p, o);
  auto b = Simulate(p, o);
  REQUIRE(a.ok());
  REQUIRE(b.ok());
  CHECK(a->returns == b->returns);
  CHECK(a->sigma2 == b->sigma2);
  CHECK(a->z == b->z);
  o.seed = 43;
  auto c = Simulate(p, o);
  REQUIRE(c.ok());
  size_t same = 0;
  for (size_t i = 0; i < c->returns.size(); ++i) same += c->returns[i] == a->returns[i];
  CHECK(same == 0);
  // A longer burn-in shifts the stream: output bar 0 is then the old bar 100.
  SimulationOptions shifted = o;
  shifted.seed = 42;
  shifted.burn_in = 400;
  auto d = Simulate(p, shifted);
  REQUIRE(d.ok());
  CHECK(d->z[100] == a->z[0]);
}

TEST_CASE("series follow the stated mean and variance recursions", "[simulate]") {
  const auto p = Make("arma", {1, 1}, "garch", {1, 1}, "gaussian",
                      {{"mu", 0.05},
                       {"ar_1", 0.4},
                       {"ma_1", 0.2},
                       {"omega", 0.1},
                       {"alpha_1", 0.1},
                       {"beta_1", 0.8}});
  SimulationOptions o;
  o.n = 300;
  auto s = Simulate(p, o);
  REQUIRE(s.ok());
  for (size_t t = 1; t < 300; ++t) {
    CHECK(s->sigma2[t] ==
          Approx(0.1 + 0.1 * s->eps[t - 1] * s->eps[t - 1] + 0.8 * s->sigma2[t - 1]));
    CHECK(s->returns[t] - s->eps[t] ==
          Approx(0.05 + 0.4 * s->returns[t - 1] + 0.2 * s->eps[t - 1]).margin(1e-12));
    CHECK(s->z[t] == Approx(s->eps[t] / std::sqrt(s->sigma2[t])));
  }
}

TEST_CASE("long-run sample variance matches the unconditional variance", "[simulate]") {
  // Each check: |sample - theory| < 4 batch-means standard errors (n = 200,000).
  SECTION("gaussian GARCH(1,1)") {
    const auto p = Garch11();
    SimulationOptions o;
    o.n = 200000;
    o.seed = 7;
    auto s = Simulate(p, o);
    REQUIRE(s.ok());
    const auto v = SampleVariance(s->eps, 0, s->eps.size());
    INFO("sample " << v.var << " se " << v.se << " theory " << p.UnconditionalVariance());
    CHECK(std::abs(v.var - p.UnconditionalVariance()) < 4 * v.se);
    CHECK(v.se < 0.02 * p.UnconditionalVariance());  // the check has power
    CHECK(Mean(s->returns, 0, s->returns.size()) == Approx(0.02).margin(0.01));
  }
  SECTION("ARMA(1,1)/GJR-GARCH(1,1)/student returns") {
    const auto p = Make("arma", {1, 1}, "gjr", {1, 1, 1}, "student",
                        {{"mu", 0.1},
                         {"ar_1", 0.5},
                         {"ma_1", 0.3},
                         {"omega", 0.04},
                         {"alpha_1", 0.04},
                         {"gamma_1", 0.08},
                         {"beta_1", 0.88},
                         {"nu", 8.0}});
    SimulationOptions o;
    o.n = 200000;
    o.seed = 8;
    auto s = Simulate(p, o);
    REQUIRE(s.ok());
    const double sbar2 = p.UnconditionalVariance();  // 0.04 / (1 - 0.96) = 1
    // ARMA(1,1) with white-noise variance sbar2 (e.g. Box, Jenkins & Reinsel,
    // Time Series Analysis, eq. for the ARMA(1,1) variance; from memory):
    //   Var(r) = sbar2 (1 + 2 phi theta + theta^2) / (1 - phi^2), mean mu / (1 - phi).
    const double var_r = sbar2 * (1 + 2 * 0.5 * 0.3 + 0.09) / (1 - 0.25);
    const auto ve = SampleVariance(s->eps, 0, s->eps.size());
    const auto vr = SampleVariance(s->returns, 0, s->returns.size());
    INFO("eps: " << ve.var << " +- " << ve.se << ", returns: " << vr.var << " +- " << vr.se);
    CHECK(std::abs(ve.var - sbar2) < 4 * ve.se);
    CHECK(std::abs(vr.var - var_r) < 4 * vr.se);
    CHECK(Mean(s->returns, 0, s->returns.size()) == Approx(0.2).margin(0.02));
  }
}

TEST_CASE("standardized shocks have mean 0, variance 1, t has fat tails", "[simulate]") {
  for (const std::string law : {"gaussian", "student"}) {
    const auto p = law == "student"
                       ? Make("zero", {}, "garch", {1, 1}, "student",
                              {{"omega", 0.05}, {"alpha_1", 0.05}, {"beta_1", 0.9}, {"nu", 10.0}})
                       : Make("zero", {}, "garch", {1, 1}, "gaussian",
                              {{"omega", 0.05}, {"alpha_1", 0.05}, {"beta_1", 0.9}});
    SimulationOptions o;
    o.n = 200000;
    o.seed = 99;
    auto s = Simulate(p, o);
    REQUIRE(s.ok());
    const auto& z = s->z;
    const double n = static_cast<double>(z.size());
    double m1 = 0, m2 = 0, m4 = 0;
    for (double x : z) m1 += x;
    m1 /= n;
    for (double x : z) {
      m2 += (x - m1) * (x - m1);
      m4 += std::pow(x - m1, 4);
    }
    m2 /= n;
    m4 /= n;
    const double kurt = m4 / (m2 * m2);
    // iid shocks with unit variance: se(mean) = 1/sqrt(n); se(var) = sqrt((kurt-1)/n).
    INFO(law << ": mean " << m1 << " var " << m2 << " kurtosis " << kurt);
    CHECK(std::abs(m1) < 4.0 / std::sqrt(n));
    CHECK(std::abs(m2 - 1.0) < 4.0 * std::sqrt((kurt - 1.0) / n));
    if (law == "student") {
      // Population kurtosis 3 + 6/(nu-4) = 4 for nu = 10; the normal's sample
      // kurtosis has se sqrt(24/n) = 0.011, so > 3.5 separates the two clearly.
      CHECK(kurt > 3.5);
    } else {
      CHECK(std::abs(kurt - 3.0) < 4.0 * std::sqrt(24.0 / n));
    }
  }
}

TEST_CASE("a regime change scales the variance by its multiplier", "[simulate]") {
  SECTION("GARCH(1,1): unconditional variance x4 from bar 100,000") {
    const auto p = Garch11();  // persistence 0.95: half-life 13.5 bars
    SimulationOptions o;
    o.n = 200000;
    o.seed = 5;
    o.regime_changes = {{100000, 4.0}};
    auto s = Simulate(p, o);
    REQUIRE(s.ok());
    const auto before = SampleVariance(s->eps, 0, 100000);
    // Skip 1,000 bars (74 half-lives) of transition after the change.
    const auto after = SampleVariance(s->eps, 101000, 200000);
    const double ratio = after.var / before.var;
    // Delta method: relative se of a ratio of independent estimates.
    const double rel_se = std::hypot(before.se / before.var, after.se / after.var);
    INFO("before " << before.var << " after " << after.var << " ratio " << ratio << " +- "
                   << ratio * rel_se);
    CHECK(std::abs(ratio - 4.0) < 4.0 * ratio * rel_se);
    CHECK(std::abs(after.var - 4.0 * p.UnconditionalVariance()) < 4 * after.se);
  }
  SECTION("EWMA jumps by the multiplier at the change bar") {
    const auto p = Make("zero", {}, "ewma", {}, "gaussian", {{"lambda", 0.94}});
    SimulationOptions o;
    o.n = 2000;
    o.initial_variance = 1.5;
    o.regime_changes = {{1000, 2.0}, {1500, 0.5}};
    auto s = Simulate(p, o);
    REQUIRE(s.ok());
    auto rec = [&](size_t t) {
      return 0.94 * s->sigma2[t - 1] + 0.06 * s->eps[t - 1] * s->eps[t - 1];
    };
    CHECK(s->sigma2[999] == Approx(rec(999)));
    CHECK(s->sigma2[1000] == Approx(2.0 * rec(1000)));
    CHECK(s->sigma2[1001] == Approx(rec(1001)));
    CHECK(s->sigma2[1500] == Approx(0.25 * rec(1500)));  // from x2 to x0.5
  }
  SECTION("constant variance steps exactly") {
    const auto p = Make("zero", {}, "flat", {}, "gaussian", {{"omega", 0.3}});
    SimulationOptions o;
    o.n = 100;
    o.regime_changes = {{50, 3.0}};
    auto s = Simulate(p, o);
    REQUIRE(s.ok());
    CHECK(s->sigma2[49] == 0.3);
    CHECK(s->sigma2[50] == Approx(0.9));
    CHECK(s->sigma2[99] == Approx(0.9));
  }
}

TEST_CASE("a step-shaped change scales the process itself from its bar on", "[simulate]") {
  // simulate.h: under a step the variance recursion runs on the unscaled
  // shocks, so with the same draws eps_t = sqrt(s) times the unchanged path's,
  // sigma2_t = s times it, z_t the same; the bars before are untouched.
  for (const char* law : {"gaussian", "student"}) {
    const auto p =
        std::string(law) == "student"
            ? Make("constant", {}, "garch", {1, 1}, "student",
                   {{"mu", 0.01}, {"omega", 0.05}, {"alpha_1", 0.05}, {"beta_1", 0.9}, {"nu", 6.0}})
            : Make("zero", {}, "garch", {1, 1}, "gaussian",
                   {{"omega", 0.05}, {"alpha_1", 0.1}, {"beta_1", 0.85}});
    SimulationOptions o;
    o.n = 400;
    o.seed = 17;
    auto base = Simulate(p, o);
    REQUIRE(base.ok());
    o.regime_changes = {{100, 3.0, VarianceChangeShape::kStep},
                        {250, 0.5, VarianceChangeShape::kStep}};
    auto step = Simulate(p, o);
    REQUIRE(step.ok());
    for (int t = 0; t < 400; ++t) {
      INFO(law << " bar " << t);
      const double s = t < 100 ? 1.0 : (t < 250 ? 3.0 : 0.5);
      CHECK(step->z[t] == base->z[t]);
      CHECK(step->sigma2[t] == Approx(s * base->sigma2[t]).epsilon(1e-13));
      CHECK(step->eps[t] == Approx(std::sqrt(s) * base->eps[t]).epsilon(1e-13));
    }
  }
  // The omega shape, by contrast, only ramps: one bar after the change the
  // GARCH variance has moved by (m - 1) omega, far from m times.
  const auto g = Make("zero", {}, "garch", {1, 1}, "gaussian",
                      {{"omega", 0.05}, {"alpha_1", 0.1}, {"beta_1", 0.85}});
  SimulationOptions o;
  o.n = 200;
  o.seed = 18;
  auto base = Simulate(g, o);
  o.regime_changes = {{100, 3.0}};
  auto omega = Simulate(g, o);
  REQUIRE(base.ok());
  REQUIRE(omega.ok());
  CHECK(omega->sigma2[100] == Approx(base->sigma2[100] + 2 * 0.05).epsilon(1e-12));
}

TEST_CASE("every variance kind and ARMA order simulates", "[simulate]") {
  const auto arch = Make("arma", {2, 0}, "arch", {3}, "gaussian",
                         {{"mu", 0.0},
                          {"ar_1", 0.2},
                          {"ar_2", -0.1},
                          {"omega", 0.2},
                          {"alpha_1", 0.3},
                          {"alpha_2", 0.2},
                          {"alpha_3", 0.1}});
  const auto g21 = Make("zero", {}, "garch", {2, 2}, "student",
                        {{"omega", 0.02},
                         {"alpha_1", 0.03},
                         {"alpha_2", 0.04},
                         {"beta_1", 0.5},
                         {"beta_2", 0.4},
                         {"nu", 5.0}});
  for (const auto& p : {arch, g21}) {
    SimulationOptions o;
    o.n = 200000;
    o.seed = 3;
    auto s = Simulate(p, o);
    REQUIRE(s.ok());
    const auto v = SampleVariance(s->eps, 0, s->eps.size());
    INFO(p.spec.Label() << ": " << v.var << " +- " << v.se << " vs " << p.UnconditionalVariance());
    CHECK(std::abs(v.var - p.UnconditionalVariance()) < 4 * v.se);
  }
}

TEST_CASE("bad parameters and options are clear errors", "[simulate]") {
  auto p = Garch11();
  p.values[3] = 0.96;  // beta_1: persistence 1.01
  SimulationOptions o;
  auto bad = Simulate(p, o);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) ==
        "persistence must be < 1, got 1.01 (variance is not stationary)");
  p.values[3] = 0.9;
  p.values[1] = -0.1;  // omega
  bad = Simulate(p, o);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "omega must be > 0, got -0.1");

  const auto ewma = Make("zero", {}, "ewma", {}, "gaussian", {{"lambda", 0.94}});
  bad = Simulate(ewma, o);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) ==
        "EWMA has no unconditional variance: set the initial variance explicitly");

  o.regime_changes = {{2000, 2.0}};
  bad = Simulate(Garch11(), o);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "regime change bar must be in [0, 1000), got 2000");
  o.regime_changes = {{10, 2.0}, {10, 3.0}};
  bad = Simulate(Garch11(), o);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "regime change bars must be strictly increasing");
  o.regime_changes = {{10, 0.0}};
  bad = Simulate(Garch11(), o);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "regime multiplier must be finite and > 0, got 0");
  o.regime_changes.clear();
  o.n = 0;
  bad = Simulate(Garch11(), o);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "n must be >= 1, got 0");
}

}  // namespace
}  // namespace aftershock
