#include "aftershock/innovations.h"

#include <boost/math/quadrature/exp_sinh.hpp>
#include <boost/math/quadrature/tanh_sinh.hpp>
#include <catch2/catch.hpp>
#include <cmath>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RelDiff;
using testing::RunPython;

constexpr double kInf = std::numeric_limits<double>::infinity();

std::vector<InnovationLaw> Laws() {
  std::vector<InnovationLaw> laws = {InnovationLaw::Normal()};
  for (double nu : {2.5, 4.0, 5.0, 8.0, 30.0, 200.0}) laws.push_back(*InnovationLaw::StudentT(nu));
  return laws;
}

std::string NuWord(const InnovationLaw& law) {
  if (law.kind() == Innovations::kNormal) return "inf";
  std::ostringstream os;
  os.precision(17);
  os << law.nu();
  return os.str();
}

// Integral of g over the real line (tanh-sinh after splitting at 0, both halves
// mapped to [0, inf) for exp-sinh).
template <class F>
double IntegrateLine(F g) {
  boost::math::quadrature::exp_sinh<double> integrator;
  const double right = integrator.integrate([&](double x) { return g(x); }, 0.0, kInf);
  const double left = integrator.integrate([&](double x) { return g(-x); }, 0.0, kInf);
  return left + right;
}

TEST_CASE("standardized laws integrate to 1 with zero mean and unit variance", "[innovations]") {
  // Check against the definition, by numerical quadrature (Boost.Math exp_sinh).
  for (const auto& law : Laws()) {
    INFO("nu = " << law.nu());
    const double mass = IntegrateLine([&](double z) { return law.Density(z); });
    const double mean = IntegrateLine([&](double z) { return z * law.Density(z); });
    CHECK(std::abs(mass - 1.0) < 1e-10);
    CHECK(std::abs(mean) < 1e-10);
    if (law.nu() > 3.0) {
      // For 2 < nu <= 3 the variance integrand decays like |z|^(-nu+1): still
      // finite, but too slow for a 1e-8 quadrature; nu = 2.5 is checked below.
      const double var = IntegrateLine([&](double z) { return z * z * law.Density(z); });
      CHECK(std::abs(var - 1.0) < 1e-8);
    }
  }
  // nu = 2.5: variance 1 by a substitution z = sinh(u) that tames the heavy tail.
  const auto law = *InnovationLaw::StudentT(2.5);
  boost::math::quadrature::tanh_sinh<double> ts;
  const double var = 2.0 * ts.integrate(
                               [&](double u) {
                                 const double z = std::sinh(u);
                                 return z * z * law.Density(z) * std::cosh(u);
                               },
                               0.0, 60.0);
  CHECK(std::abs(var - 1.0) < 1e-6);
}

TEST_CASE("free functions agree with the law object", "[innovations]") {
  const auto law = *InnovationLaw::StudentT(6.5);
  for (double z : {-4.0, -1.0, 0.0, 0.3, 2.0}) {
    CHECK(law.LogDensity(z) == Approx(LogDensityT(z, 6.5)).epsilon(1e-14));
    CHECK(law.DLogDensityDnu(z) == Approx(DLogDensityTDnu(z, 6.5)).epsilon(1e-13).margin(1e-15));
    CHECK(law.DLogDensityDz2(z) == Approx(DLogDensityTDz2(z, 6.5)).epsilon(1e-14));
  }
  CHECK(InnovationLaw::Normal().LogDensity(1.5) == Approx(LogDensityNormal(1.5)));
  const InnovationLaw defaulted;
  CHECK(defaulted.kind() == Innovations::kNormal);
  CHECK(defaulted.Quantile(0.05) == InnovationLaw::Normal().Quantile(0.05));
  CHECK(RiskQuantiles().size() == 0);
  CHECK(std::isnan(LogDensityT(0.0, 2.0)));
}

TEST_CASE("analytic derivatives match central finite differences", "[innovations]") {
  // d/dnu and d/dz of log f against a central difference with step 1e-5
  // (truncation error O(h^2) ~ 1e-10, rounding ~ 1e-11).
  const double h = 1e-5;
  for (double nu : {2.3, 4.0, 7.5, 25.0, 150.0}) {
    for (double z : {-6.0, -1.7, 0.0, 0.4, 3.0}) {
      INFO("nu = " << nu << ", z = " << z);
      const double fd_nu = (LogDensityT(z, nu + h) - LogDensityT(z, nu - h)) / (2 * h);
      CHECK(std::abs(DLogDensityTDnu(z, nu) - fd_nu) < 1e-8);
      const auto law = *InnovationLaw::StudentT(nu);
      const double fd_z = (LogDensityT(z + h, nu) - LogDensityT(z - h, nu)) / (2 * h);
      CHECK(std::abs(law.DLogDensityDz(z) - fd_z) < 1e-8);
    }
  }
  const auto normal = InnovationLaw::Normal();
  CHECK(normal.DLogDensityDz(1.3) == Approx(-1.3));
  CHECK(normal.DLogDensityDnu(1.3) == 0.0);
}

TEST_CASE("log-likelihood term and its sigma2 derivative", "[innovations]") {
  // The normal term is the textbook -1/2 (log 2 pi + log sigma2 + eps^2 / sigma2).
  const auto normal = InnovationLaw::Normal();
  CHECK(normal.LogLikelihood(0.7, 2.0) ==
        Approx(-0.5 * (std::log(2 * 3.14159265358979323846) + std::log(2.0) + 0.49 / 2.0)));
  // d/dsigma2 against a central difference (step 1e-6 on sigma2 near 1).
  for (const auto& law : Laws()) {
    for (double eps : {-3.0, -0.2, 0.0, 1.1}) {
      for (double s2 : {0.3, 1.0, 4.0}) {
        const double h = 1e-6 * s2;
        const double fd =
            (law.LogLikelihood(eps, s2 + h) - law.LogLikelihood(eps, s2 - h)) / (2 * h);
        INFO("nu = " << law.nu() << ", eps = " << eps << ", sigma2 = " << s2);
        CHECK(std::abs(law.DLogLikelihoodDSigma2(eps, s2) - fd) < 1e-7 / s2);
      }
    }
  }
}

TEST_CASE("E[d log f / d nu] is zero under the law (score identity)", "[innovations]") {
  // The expected score of a correctly specified likelihood is zero; this checks the
  // d/dnu formula as a whole against quadrature, independent of finite differences.
  for (double nu : {3.0, 6.0, 40.0}) {
    const auto law = *InnovationLaw::StudentT(nu);
    const double score =
        IntegrateLine([&](double z) { return law.DLogDensityDnu(z) * law.Density(z); });
    INFO("nu = " << nu);
    CHECK(std::abs(score) < 1e-9);
  }
}

TEST_CASE("log density, cdf and quantile match scipy.stats (live)", "[innovations][scipy]") {
  struct Request {
    std::string what;
    const InnovationLaw* law;
    double x;
    double ours;
  };
  const auto laws = Laws();
  std::vector<Request> reqs;
  for (const auto& law : laws) {
    for (double z : {-7.0, -2.33, -1.0, -0.1, 0.0, 0.5, 1.96, 4.0}) {
      reqs.push_back({"logpdf", &law, z, law.LogDensity(z)});
      reqs.push_back({"cdf", &law, z, law.Cdf(z)});
    }
    for (double p : {1e-6, 0.001, 0.01, 0.025, 0.05, 0.3, 0.5, 0.8, 0.99}) {
      reqs.push_back({"ppf", &law, p, law.Quantile(p)});
      reqs.push_back({"rawppf", &law, p, law.Quantile(p)});
    }
  }
  std::ostringstream in;
  in.precision(17);
  for (const auto& r : reqs) in << r.what << ' ' << NuWord(*r.law) << ' ' << r.x << '\n';
  const auto res = RunPython("scipy_innovations.py", {}, in.str());
  REQUIRE(res.exit_code == 0);
  std::istringstream out(res.out);
  double worst = 0.0;
  for (const auto& r : reqs) {
    double ref = 0.0;
    REQUIRE(out >> ref);
    INFO(r.what << " nu=" << NuWord(*r.law) << " x=" << r.x << " ours=" << r.ours
                << " scipy=" << ref);
    if (r.what != "logpdf" && r.what != "cdf" && r.x == 0.5) {
      // The median is 0; a relative check is meaningless there.
      CHECK(std::abs(r.ours) < 1e-15);
      CHECK(std::abs(ref) < 1e-15);
      continue;
    }
    const double rel = RelDiff(r.ours, ref);
    if (r.what == "rawppf") {
      // scipy 1.10's unrefined t.ppf is good to ~2e-9 only (see the script's
      // docstring); the 1e-10 check is against the Newton-refined "ppf".
      CHECK(rel < 1e-8);
      continue;
    }
    worst = std::max(worst, rel);
    CHECK(rel < 1e-10);
  }
  WARN("largest relative difference to scipy: " << worst);
}

TEST_CASE("expected shortfall: closed form vs quadrature and scipy (live)",
          "[innovations][scipy]") {
  const auto laws = Laws();
  const std::vector<double> tails = {0.001, 0.01, 0.025, 0.05, 0.1};
  std::ostringstream in;
  in.precision(17);
  for (const auto& law : laws) {
    for (double a : tails) {
      // Against numerical integration of -1/a * int_{-inf}^{q_a} z f(z) dz.
      const double q = law.Quantile(a);
      boost::math::quadrature::exp_sinh<double> integrator;
      const double tail_mean =
          integrator.integrate([&](double u) { return (q - u) * law.Density(q - u); }, 0.0, kInf) /
          a;
      INFO("nu = " << law.nu() << ", a = " << a);
      CHECK(RelDiff(law.ExpectedShortfall(a), -tail_mean) < 1e-9);
      CHECK(law.ExpectedShortfall(a) > -q);  // ES lies beyond VaR
      in << "es " << NuWord(law) << ' ' << a << '\n';
    }
  }
  const auto res = RunPython("scipy_innovations.py", {}, in.str());
  REQUIRE(res.exit_code == 0);
  std::istringstream out(res.out);
  for (const auto& law : laws) {
    for (double a : tails) {
      double ref = 0.0;
      REQUIRE(out >> ref);
      INFO("scipy.stats expect: nu = " << law.nu() << ", a = " << a);
      CHECK(RelDiff(law.ExpectedShortfall(a), ref) < 1e-9);
    }
  }
  // Normal 97.5 % ES = 2.3378 (from memory; the Basel FRTB comparison of 97.5 % ES
  // with 99 % VaR = 2.3263 for the normal).
  CHECK(InnovationLaw::Normal().ExpectedShortfall(0.025) == Approx(2.3378).epsilon(1e-4));
  CHECK(InnovationLaw::Normal().Quantile(0.01) == Approx(-2.3263).epsilon(1e-4));
}

TEST_CASE("RiskQuantiles gives positive VaR and ES loss numbers", "[innovations]") {
  const auto law = *InnovationLaw::StudentT(5.0);
  const std::vector<double> levels = {0.99, 0.975};
  auto rq = RiskQuantiles::Create(law, levels);
  REQUIRE(rq.ok());
  REQUIRE(rq->size() == 2);
  const double mu = 0.01, sigma = 1.5;
  for (int i = 0; i < 2; ++i) {
    const double a = 1.0 - levels[i];
    CHECK(rq->level(i) == levels[i]);
    CHECK(rq->quantile(i) == law.Quantile(a));
    CHECK(rq->es_multiplier(i) == law.ExpectedShortfall(a));
    CHECK(rq->VaR(i, mu, sigma) == Approx(-(mu + sigma * law.Quantile(a))));
    CHECK(rq->VaR(i, mu, sigma) > 0.0);
    CHECK(rq->ES(i, mu, sigma) > rq->VaR(i, mu, sigma));
    // The loss exceeds VaR with probability a (definition of the quantile).
    CHECK(law.Cdf((-rq->VaR(i, mu, sigma) - mu) / sigma) == Approx(a).epsilon(1e-12));
  }
  auto bad = RiskQuantiles::Create(law, std::vector<double>{0.99, 1.0});
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "risk level must be in (0.5, 1), e.g. 0.99; got 1");
  auto too_many = RiskQuantiles::Create(law, std::vector<double>(kMaxRiskLevels + 1, 0.99));
  REQUIRE_FALSE(too_many.ok());
  CHECK(std::string(too_many.status().message()) == "at most 4 risk levels are supported, got 5");
}

TEST_CASE("invalid nu is a clear error", "[innovations]") {
  auto bad = InnovationLaw::StudentT(2.0);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) == "standardized t needs nu in (2, 500], got 2");
  CHECK_FALSE(InnovationLaw::StudentT(std::nan("")).ok());
  auto spec = MakeModelSpec("zero", {}, "garch", {}, "student");
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec,
                                  {{"omega", 0.1}, {"alpha_1", 0.1}, {"beta_1", 0.8}, {"nu", 7.0}});
  REQUIRE(p.ok());
  auto law = InnovationLaw::FromParams(*p);
  REQUIRE(law.ok());
  CHECK(law->nu() == 7.0);
  CHECK(law->ExcessKurtosis() == Approx(2.0));
  CHECK(std::isnan(law->Quantile(0.0)));
}

}  // namespace
}  // namespace aftershock
