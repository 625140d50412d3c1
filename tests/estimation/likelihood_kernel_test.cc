#include "estimation/likelihood_kernel.h"

#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <limits>
#include <string>
#include <vector>

#include "aftershock/likelihood.h"
#include "estimation/test_series.h"

namespace aftershock::internal {
namespace {

// Unit-scale data as the estimator sees them.
std::vector<double> Scaled(std::vector<double> r) {
  double m = 0, s = 0;
  for (double v : r) m += v;
  m /= r.size();
  for (double v : r) s += (v - m) * (v - m);
  s = std::sqrt(s / r.size());
  for (double& v : r) v /= s;
  return r;
}

struct Case {
  const char* mean;
  const char* variance;
  VarianceLags orders;
  const char* law;
  std::vector<double> theta;  // a point inside the constraints, not the optimum
};

std::vector<Case> OrderOneCases() {
  return {
      {"zero", "garch", {1, 1}, "gaussian", {0.06, 0.09, 0.85}},
      {"constant", "garch", {1, 1}, "gaussian", {0.02, 0.06, 0.09, 0.85}},
      {"zero", "garch", {1, 1}, "student", {0.06, 0.09, 0.85, 7.0}},
      {"constant", "garch", {1, 1}, "student", {0.03, 0.06, 0.09, 0.85, 7.0}},
      {"zero", "gjr", {1, 1, 1}, "gaussian", {0.06, 0.05, 0.07, 0.84}},
      {"constant", "gjr", {1, 1, 1}, "gaussian", {-0.01, 0.06, 0.05, 0.07, 0.84}},
      {"zero", "gjr", {1, 1, 1}, "student", {0.06, 0.05, 0.07, 0.84, 6.5}},
      {"constant", "gjr", {1, 1, 1}, "student", {0.04, 0.06, 0.05, 0.07, 0.84, 6.5}},
  };
}

// Zero-mean models of general order: the variance part of a two-step fit.
std::vector<Case> GeneralOrderCases() {
  return {
      {"zero", "arch", {1}, "gaussian", {0.5, 0.3}},
      {"zero", "arch", {3}, "student", {0.4, 0.2, 0.1, 0.1, 6.0}},
      {"zero", "arch", {5}, "gaussian", {0.3, 0.15, 0.1, 0.1, 0.05, 0.05}},
      {"zero", "garch", {1, 2}, "gaussian", {0.06, 0.09, 0.5, 0.35}},
      {"zero", "garch", {1, 2}, "student", {0.06, 0.09, 0.5, 0.35, 7.5}},
      {"zero", "garch", {2, 1}, "gaussian", {0.06, 0.05, 0.04, 0.85}},
      {"zero", "garch", {2, 3}, "student", {0.05, 0.05, 0.03, 0.4, 0.25, 0.2, 8.0}},
      {"zero", "gjr", {2, 2, 1}, "gaussian", {0.05, 0.04, 0.02, 0.06, 0.5, 0.33}},
      {"zero", "gjr", {1, 2, 2}, "student", {0.05, 0.04, 0.05, 0.02, 0.5, 0.35, 6.5}},
  };
}

std::vector<Case> HessianCases() {
  std::vector<Case> all = OrderOneCases();
  for (Case& c : GeneralOrderCases()) all.push_back(std::move(c));
  return all;
}

TEST_CASE("the analytic Hessian matches central differences of the gradient",
          "[likelihood_kernel]") {
  const std::vector<double> r = Scaled(testing::TestGarchSeries(1500, 17, 6.0));
  for (Presample pre : {Presample::kMeanSquare, Presample::kRobustStart}) {
    for (const Case& c : HessianCases()) {
      auto spec = MakeModelSpec(c.mean, {}, c.variance, c.orders, c.law);
      REQUIRE(spec.ok());
      LikelihoodKernel kernel(*spec, r, pre);
      REQUIRE(kernel.has_hessian());
      const int k = kernel.num_params();
      REQUIRE(static_cast<int>(c.theta.size()) == k);
      std::vector<double> g(k), h(static_cast<size_t>(k) * k), gp(k), gm(k), g_plain(k);
      const double ll = kernel.EvaluateHessian(c.theta.data(), g.data(), h.data(), nullptr);
      const double ll_plain = kernel.Evaluate(c.theta.data(), g_plain.data(), nullptr);
      INFO(spec->Label() << " presample " << static_cast<int>(pre));
      REQUIRE(std::isfinite(ll));
      // The Hessian pass computes the same value and gradient as the gradient pass.
      CHECK(ll == Approx(ll_plain).epsilon(1e-13));
      for (int i = 0; i < k; ++i) CHECK(g[i] == Approx(g_plain[i]).epsilon(1e-10).margin(1e-9));
      for (int a = 0; a < k; ++a) {
        std::vector<double> th = c.theta;
        const double step = 1e-6 * std::max(std::fabs(th[a]), 0.05);
        th[a] = c.theta[a] + step;
        kernel.Evaluate(th.data(), gp.data(), nullptr);
        th[a] = c.theta[a] - step;
        kernel.Evaluate(th.data(), gm.data(), nullptr);
        for (int b = 0; b < k; ++b) {
          const double fd = (gp[b] - gm[b]) / (2 * step);
          const double an = h[static_cast<size_t>(b) * k + a];
          INFO("d2/d" << spec->ParamNames()[a] << " d" << spec->ParamNames()[b] << " analytic "
                      << an << " differences " << fd);
          CHECK(an == Approx(fd).epsilon(2e-5).margin(1e-3));
          CHECK(an == h[static_cast<size_t>(a) * k + b]);  // symmetric
        }
      }
      // The gradient agrees with central differences of the value.
      for (int a = 0; a < k; ++a) {
        std::vector<double> th = c.theta;
        const double step = 1e-6 * std::max(std::fabs(th[a]), 0.05);
        th[a] = c.theta[a] + step;
        const double lp = kernel.Evaluate(th.data(), nullptr, nullptr);
        th[a] = c.theta[a] - step;
        const double lm = kernel.Evaluate(th.data(), nullptr, nullptr);
        INFO("d/d" << spec->ParamNames()[a]);
        CHECK(g[a] == Approx((lp - lm) / (2 * step)).epsilon(1e-5).margin(1e-3));
      }
    }
  }
}

TEST_CASE("the Hessian pass returns the per-observation scores of the gradient pass",
          "[likelihood_kernel]") {
  const std::vector<double> r = Scaled(testing::TestGarchSeries(800, 4, 5.0));
  for (const Case& c : HessianCases()) {
    auto spec = MakeModelSpec(c.mean, {}, c.variance, c.orders, c.law);
    REQUIRE(spec.ok());
    LikelihoodKernel kernel(*spec, r, Presample::kMeanSquare);
    const int k = kernel.num_params();
    const size_t cells = static_cast<size_t>(kernel.nobs()) * k;
    std::vector<double> g(k), h(static_cast<size_t>(k) * k), s1(cells), s2(cells);
    kernel.EvaluateHessian(c.theta.data(), g.data(), h.data(), s1.data());
    kernel.Evaluate(c.theta.data(), g.data(), s2.data());
    INFO(spec->Label());
    for (int a = 0; a < k; ++a) {
      double sum = 0;
      for (int t = 0; t < kernel.nobs(); ++t) sum += s1[static_cast<size_t>(t) * k + a];
      CHECK(sum == Approx(g[a]).epsilon(1e-9).margin(1e-8));
    }
    for (size_t i = 0; i < cells; ++i) {
      if (s1[i] != Approx(s2[i]).epsilon(1e-12).margin(1e-14)) {
        FAIL("score " << i << ": " << s1[i] << " vs " << s2[i]);
      }
    }
  }
}

TEST_CASE("the Hessian pass sums the outer products of the per-observation scores",
          "[likelihood_kernel]") {
  // opg of EvaluateHessianOpg against sum_t s_t s_t' formed from the scores
  // matrix of EvaluateHessian (the forward recursions: the estimator's former
  // route to the robust standard errors), for every kernel with a Hessian and
  // both presamples.
  // An even and an odd number of bars (the pass sums two bars a step).
  for (int bars : {1300, 1301}) {
    for (Presample pre : {Presample::kMeanSquare, Presample::kRobustStart}) {
      const std::vector<double> r = Scaled(testing::TestGarchSeries(bars, 9, 5.0));
      for (const Case& c : HessianCases()) {
        auto spec = MakeModelSpec(c.mean, {}, c.variance, c.orders, c.law);
        REQUIRE(spec.ok());
        LikelihoodKernel kernel(*spec, r, pre);
        const int k = kernel.num_params();
        const int n = kernel.nobs();
        const size_t kk = static_cast<size_t>(k) * k;
        std::vector<double> g(k), h(kk), scores(static_cast<size_t>(n) * k);
        std::vector<double> go(k), ho(kk), opg(kk, -1.0), gs(k), hs(kk);
        INFO(spec->Label() << " presample " << static_cast<int>(pre) << ", " << bars << " bars");
        // The scores of the forward pass; value, gradient and Hessian of the
        // pass without scores, which the one with opg must repeat to the bit.
        kernel.EvaluateHessian(c.theta.data(), gs.data(), hs.data(), scores.data());
        const double ll = kernel.EvaluateHessian(c.theta.data(), g.data(), h.data(), nullptr);
        const double llo =
            kernel.EvaluateHessianOpg(c.theta.data(), go.data(), ho.data(), opg.data());
        CHECK(llo == ll);
        for (int a = 0; a < k; ++a) CHECK(go[a] == g[a]);
        for (size_t i = 0; i < h.size(); ++i) CHECK(ho[i] == h[i]);
        for (int a = 0; a < k; ++a) {
          for (int b = 0; b < k; ++b) {
            double ref = 0;
            for (int t = 0; t < n; ++t) {
              const double* row = &scores[static_cast<size_t>(t) * k];
              ref += row[a] * row[b];
            }
            INFO("cell " << spec->ParamNames()[a] << ", " << spec->ParamNames()[b]);
            const double got = opg[static_cast<size_t>(a) * k + b];
            CHECK(got == Approx(ref).epsilon(1e-12).margin(1e-300));
          }
        }
      }
    }
  }
  // An infeasible point is -inf as for the other passes.
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "student");
  LikelihoodKernel kernel(*spec, Scaled(testing::TestGarchSeries(500, 9, 5.0)),
                          Presample::kMeanSquare);
  std::vector<double> bad = {0.0, -1.0, -0.5, 0.9, 7.0}, g(5), h(25), opg(25);
  CHECK(kernel.EvaluateHessianOpg(bad.data(), g.data(), h.data(), opg.data()) ==
        -std::numeric_limits<double>::infinity());
}

// Without per-term scores the passes sum the derivatives by reverse
// accumulation (a backward sweep); with scores they run the forward
// derivative recursions. Both give the same value, gradient and Hessian up to
// the order of the sums.
TEST_CASE("the reverse-accumulation passes agree with the forward recursions",
          "[likelihood_kernel]") {
  const std::vector<double> r = Scaled(testing::TestGarchSeries(1201, 23, 5.0));
  for (Presample pre : {Presample::kMeanSquare, Presample::kRobustStart}) {
    for (const Case& c : OrderOneCases()) {
      auto spec = MakeModelSpec(c.mean, {}, c.variance, c.orders, c.law);
      REQUIRE(spec.ok());
      LikelihoodKernel kernel(*spec, r, pre);
      const int k = kernel.num_params();
      const size_t cells = static_cast<size_t>(kernel.nobs()) * k;
      std::vector<double> g(k), h(static_cast<size_t>(k) * k), gf(k), hf(h.size()), scores(cells);
      INFO(spec->Label() << " presample " << static_cast<int>(pre));
      const double ll = kernel.EvaluateHessian(c.theta.data(), g.data(), h.data(), nullptr);
      const double llf = kernel.EvaluateHessian(c.theta.data(), gf.data(), hf.data(), scores.data());
      CHECK(ll == Approx(llf).epsilon(1e-14));
      for (int a = 0; a < k; ++a) {
        INFO("d/d" << spec->ParamNames()[a]);
        CHECK(g[a] == Approx(gf[a]).epsilon(1e-11).margin(1e-9));
      }
      for (size_t i = 0; i < h.size(); ++i) {
        INFO("Hessian cell " << i);
        CHECK(h[i] == Approx(hf[i]).epsilon(1e-11).margin(1e-8));
      }
      // The gradient pass: same value to the bit as the Hessian pass, and the
      // same gradient (both sum it in the backward sweep).
      std::vector<double> g1(k), g1f(k);
      CHECK(kernel.Evaluate(c.theta.data(), g1.data(), nullptr) == ll);
      CHECK(kernel.Evaluate(c.theta.data(), nullptr, nullptr) == ll);
      for (int a = 0; a < k; ++a) CHECK(g1[a] == g[a]);
      const double ll1f = kernel.Evaluate(c.theta.data(), g1f.data(), scores.data());
      CHECK(ll1f == Approx(ll).epsilon(1e-14));
      for (int a = 0; a < k; ++a) CHECK(g1f[a] == Approx(g1[a]).epsilon(1e-11).margin(1e-9));
    }
  }
}

TEST_CASE("a batch of points gives each point's value pass to the bit", "[likelihood_kernel]") {
  const std::vector<double> r = Scaled(testing::TestGarchSeries(999, 31, 6.0));
  for (const Case& c : OrderOneCases()) {
    auto spec = MakeModelSpec(c.mean, {}, c.variance, c.orders, c.law);
    REQUIRE(spec.ok());
    INFO(spec->Label());
    LikelihoodKernel kernel(*spec, r, Presample::kRobustStart);
    const int v0 = spec->VarianceOffset();
    // Seven points (a full group and a short one) sharing the mean; the
    // fourth has a negative omega and alpha, so its variance turns negative.
    std::vector<std::vector<double>> points;
    for (int j = 0; j < 7; ++j) {
      std::vector<double> th = c.theta;
      th[v0] *= 1.0 + 0.2 * j;
      th[v0 + 1] *= 1.0 - 0.1 * j;
      if (j == 3) th[v0] = th[v0 + 1] = -0.5;
      points.push_back(th);
    }
    std::vector<const double*> ptr;
    for (const auto& th : points) ptr.push_back(th.data());
    std::vector<double> out(points.size());
    kernel.EvaluateBatch(ptr.data(), static_cast<int>(ptr.size()), out.data());
    for (size_t j = 0; j < points.size(); ++j) {
      INFO("point " << j);
      const double single = kernel.Evaluate(points[j].data(), nullptr, nullptr);
      CHECK(out[j] == single);
      if (j == 3) {
        CHECK(std::isinf(out[j]));
        CHECK(out[j] < 0);
      } else {
        CHECK(std::isfinite(out[j]));
      }
    }
  }
}

TEST_CASE("a batch on the general orders gives each point's value pass", "[likelihood_kernel]") {
  // Zero-mean general orders have a Hessian but no batched pass: the points
  // must not go through the order-one batch (whose parameter layout differs).
  const std::vector<double> r = Scaled(testing::TestGarchSeries(700, 5, 6.0));
  struct General {
    const char* variance;
    VarianceLags orders;
    std::vector<double> theta;
  };
  const std::vector<General> cases = {
      {"arch", {1}, {0.6, 0.3}},
      {"garch", {2, 1}, {0.06, 0.05, 0.04, 0.85}},
      {"gjr", {2, 2, 1}, {0.05, 0.04, 0.02, 0.06, 0.5, 0.33}},
  };
  for (const General& c : cases) {
    auto spec = MakeModelSpec("zero", {}, c.variance, c.orders, "gaussian");
    REQUIRE(spec.ok());
    INFO(spec->Label());
    LikelihoodKernel kernel(*spec, r, Presample::kMeanSquare);
    REQUIRE_FALSE(kernel.is_order_one());
    std::vector<std::vector<double>> points;
    for (int j = 0; j < 6; ++j) {
      std::vector<double> th = c.theta;
      th[0] *= 1.0 + 0.25 * j;
      points.push_back(th);
    }
    std::vector<const double*> ptr;
    for (const auto& th : points) ptr.push_back(th.data());
    std::vector<double> out(points.size());
    kernel.EvaluateBatch(ptr.data(), static_cast<int>(ptr.size()), out.data());
    for (size_t j = 0; j < points.size(); ++j) {
      INFO("point " << j);
      CHECK(std::isfinite(out[j]));
      CHECK(out[j] == kernel.Evaluate(points[j].data(), nullptr, nullptr));
    }
  }
}

TEST_CASE("the Hessian pass reports an infeasible point like the value pass",
          "[likelihood_kernel]") {
  const std::vector<double> r = Scaled(testing::TestGarchSeries(300, 2));
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "gaussian");
  REQUIRE(spec.ok());
  LikelihoodKernel kernel(*spec, r, Presample::kMeanSquare);
  const std::vector<double> bad = {0.0, -5.0, 0.1, 0.8};  // negative variance
  std::vector<double> g(4, 1.0), h(16, 1.0);
  const double ll = kernel.EvaluateHessian(bad.data(), g.data(), h.data(), nullptr);
  CHECK(std::isinf(ll));
  CHECK(ll < 0);
  for (double v : g) CHECK(v == 0.0);
  for (double v : h) CHECK(v == 0.0);
  // Variances so large that a product of them overflows: infeasible too.
  const std::vector<double> huge = {0.0, 1e200, 0.1, 0.8};
  std::fill(g.begin(), g.end(), 1.0);
  CHECK(kernel.Evaluate(huge.data(), nullptr, nullptr) ==
        -std::numeric_limits<double>::infinity());
  CHECK(kernel.Evaluate(huge.data(), g.data(), nullptr) ==
        -std::numeric_limits<double>::infinity());
  for (double v : g) CHECK(v == 0.0);
}

TEST_CASE("the order-one models and zero-mean models of any order have an analytic Hessian",
          "[likelihood_kernel]") {
  const std::vector<double> r = Scaled(testing::TestGarchSeries(300, 3));
  auto arma = MakeModelSpec("arma", {1, 0}, "garch", {1, 1}, "gaussian");
  auto g21 = MakeModelSpec("constant", {}, "garch", {2, 1}, "gaussian");
  auto ewma = MakeModelSpec("zero", {}, "ewma", {}, "gaussian");
  auto zero21 = MakeModelSpec("zero", {}, "garch", {2, 1}, "gaussian");
  auto zero11 = MakeModelSpec("zero", {}, "garch", {1, 1}, "gaussian");
  REQUIRE(arma.ok());
  REQUIRE(g21.ok());
  REQUIRE(ewma.ok());
  REQUIRE(zero21.ok());
  REQUIRE(zero11.ok());
  CHECK_FALSE(LikelihoodKernel(*arma, r, Presample::kMeanSquare).has_hessian());
  CHECK_FALSE(LikelihoodKernel(*g21, r, Presample::kMeanSquare).has_hessian());
  CHECK_FALSE(LikelihoodKernel(*ewma, r, Presample::kMeanSquare).has_hessian());
  const LikelihoodKernel general(*zero21, r, Presample::kMeanSquare);
  CHECK(general.has_hessian());
  CHECK_FALSE(general.is_order_one());
  CHECK(LikelihoodKernel(*zero11, r, Presample::kMeanSquare).is_order_one());
}

TEST_CASE(
    "the general-order gradient pass agrees with the value pass and reports infeasible "
    "points",
    "[likelihood_kernel]") {
  const std::vector<double> r = Scaled(testing::TestGarchSeries(600, 12, 6.0));
  for (const Case& c : GeneralOrderCases()) {
    auto spec = MakeModelSpec(c.mean, {}, c.variance, c.orders, c.law);
    REQUIRE(spec.ok());
    INFO(spec->Label());
    LikelihoodKernel kernel(*spec, r, Presample::kRobustStart);
    const int k = kernel.num_params();
    std::vector<double> g(k, 1.0), h(static_cast<size_t>(k) * k, 1.0);
    const double ll_value = kernel.Evaluate(c.theta.data(), nullptr, nullptr);
    const std::vector<double> sig_value = kernel.sigma2();
    const double ll_grad = kernel.Evaluate(c.theta.data(), g.data(), nullptr);
    CHECK(ll_grad == Approx(ll_value).epsilon(1e-14));
    CHECK(kernel.sigma2() == sig_value);
    std::vector<double> bad = c.theta;
    bad[0] = -50.0;  // omega far below zero: a negative variance
    const double ll_bad = kernel.EvaluateHessian(bad.data(), g.data(), h.data(), nullptr);
    CHECK(std::isinf(ll_bad));
    CHECK(ll_bad < 0);
    for (double v : g) CHECK(v == 0.0);
    for (double v : h) CHECK(v == 0.0);
  }
}

}  // namespace
}  // namespace aftershock::internal
