#include "aftershock/refitter.h"

#include <catch2/catch.hpp>
#include <cmath>

#include "aftershock/simulate.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

ModelParams Gjr() {
  auto spec = MakeModelSpec("constant", {}, "gjr", {1, 1, 1}, "student");
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, {{"mu", 0.02},
                                          {"omega", 0.03},
                                          {"alpha_1", 0.03},
                                          {"gamma_1", 0.12},
                                          {"beta_1", 0.88},
                                          {"nu", 6}});
  REQUIRE(p.ok());
  return *p;
}

std::vector<double> Sim(const ModelParams& p, int n, uint64_t seed) {
  return testing::SimulatedReturns(p, n, seed);
}

TEST_CASE("without a model the refitter fits the initial spec cold", "[refitter]") {
  const auto r = Sim(Gjr(), 1500, 3);
  auto rf = EstimatorRefitter::Create();
  REQUIRE(rf.ok());
  RefitRequest req;
  req.returns = r;
  auto c = (*rf)->Fit(req);
  REQUIRE(c.ok());
  auto direct = FitModel(ModelSpec{}, r);  // the same estimator call, made here
  REQUIRE(direct.ok());
  CHECK(c->fit.params.spec == ModelSpec{});
  CHECK(c->fit.params.values == direct->params.values);
  CHECK(c->fit.loglik == direct->loglik);
  CHECK(c->note == "re-estimated " + ModelSpec{}.Label() + " (" + direct->start_used + " start)");
}

TEST_CASE("a refit warm-starts from the current parameters", "[refitter]") {
  const auto r = Sim(Gjr(), 1500, 4);
  auto rf = EstimatorRefitter::Create();
  REQUIRE(rf.ok());
  auto first = FitModel(ModelSpec{}, absl::MakeConstSpan(r).first(1200));
  REQUIRE(first.ok());
  RefitRequest req;
  req.returns = r;
  req.current = &first->params;
  auto c = (*rf)->Fit(req);
  REQUIRE(c.ok());
  CHECK(c->fit.start_used == "warm");
  FitOptions fo;
  fo.start = first->params;
  auto direct = FitModel(ModelSpec{}, r, fo);
  REQUIRE(direct.ok());
  CHECK(c->fit.params.values == direct->params.values);
  CHECK(c->fit.converged);
}

TEST_CASE("a refit after a nearly Gaussian window finds the next window's heavy tails",
          "[refitter]") {
  // The path every instrument takes each refit: a Student-t model whose
  // window was nearly Gaussian has nu on its bound (500); when the tails
  // fatten, the warm refit from it must leave the bound (it used to stay,
  // the likelihood being flat in nu there) and agree with a cold fit.
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "student");
  REQUIRE(spec.ok());
  auto params = [&](double nu) {
    auto p = ModelParams::FromNamed(
        *spec, {{"mu", 0.02}, {"omega", 0.05}, {"alpha_1", 0.08}, {"beta_1", 0.88}, {"nu", nu}});
    REQUIRE(p.ok());
    return *p;
  };
  auto rf = EstimatorRefitter::Create();
  REQUIRE(rf.ok());
  int checked = 0;
  for (uint64_t seed = 1; seed <= 12 && checked < 3; ++seed) {
    const std::vector<double> calm = Sim(params(kMaxNu), 2000, seed);
    auto first = FitModel(*spec, calm);
    REQUIRE(first.ok());
    INFO("seed " << seed << ": nu on the calm window " << first->params.values.back());
    if (first->params.values.back() < 0.9 * kMaxNu) continue;  // this window's maximum is inside
    const std::vector<double> heavy = Sim(params(5.0), 2000, 100 + seed);
    RefitRequest req;
    req.returns = heavy;
    req.current = &first->params;
    auto c = (*rf)->Fit(req);
    REQUIRE(c.ok());
    auto cold = FitModel(*spec, heavy);
    REQUIRE(cold.ok());
    INFO("warm refit " << c->fit.optimizer_message << ", nu " << c->fit.params.values.back()
                       << "; cold fit nu " << cold->params.values.back());
    CHECK(c->fit.start_used == "warm");
    CHECK(c->fit.converged);
    CHECK(c->fit.params.values.back() < 10.0);
    CHECK(c->fit.loglik >= cold->loglik - 1e-7 * std::fabs(cold->loglik));
    ++checked;
  }
  REQUIRE(checked == 3);  // three calm windows of the twelve end on the bound
}

TEST_CASE("re-identification picks the candidate of smallest BIC", "[refitter]") {
  const ModelParams truth = Gjr();
  const auto r = Sim(truth, 2000, 5);
  auto rf = EstimatorRefitter::Create();
  REQUIRE(rf.ok());
  RefitRequest req;
  req.returns = r;
  req.reidentify = true;
  auto c = (*rf)->Fit(req);
  REQUIRE(c.ok());
  // Fit the four candidates here and take the argmin of BIC independently.
  double best = 1e300;
  std::string best_label;
  for (const ModelSpec& s : EstimatorRefitter::DefaultOptions().candidates) {
    auto f = FitModel(s, r);
    REQUIRE(f.ok());
    if (f->converged && f->bic < best) {
      best = f->bic;
      best_label = s.Label();
    }
  }
  CHECK(c->fit.params.spec.Label() == best_label);
  CHECK(c->fit.bic == best);
  // With 2,000 bars of a strongly asymmetric fat-tailed series the true family wins.
  CHECK(best_label == truth.spec.Label());
  CHECK(c->note == "reidentified: " + best_label + " by BIC among 4 candidates");
}

TEST_CASE("refitter errors are reported", "[refitter]") {
  auto rf = EstimatorRefitter::Create();
  REQUIRE(rf.ok());
  std::vector<double> flat(100, 0.5);
  RefitRequest req;
  req.returns = flat;
  auto c = (*rf)->Fit(req);
  REQUIRE_FALSE(c.ok());
  CHECK(!std::string(c.status().message()).empty());
  EstimatorRefitterOptions bad = EstimatorRefitter::DefaultOptions();
  bad.initial_spec.arch_order = 0;
  bad.initial_spec.garch_order = 0;
  bad.initial_spec.variance = VarianceKind::kArch;
  auto e = EstimatorRefitter::Create(bad);
  REQUIRE_FALSE(e.ok());
  CHECK(std::string(e.status().message()).rfind("initial_spec: ", 0) == 0);
}

}  // namespace
}  // namespace aftershock
