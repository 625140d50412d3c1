#include "aftershock/recursive_tracker.h"

#include <algorithm>
#include <boost/math/distributions/binomial.hpp>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "aftershock/online_filter.h"
#include "aftershock/simulate.h"
#include "aftershock/tracking_study.h"
#include "support/alloc_counter.h"

namespace aftershock {
namespace {

// Parameter vectors in the layout of model_spec.h (names are not used, so the
// tests do not depend on the spelling of parameter names).
ModelParams Garch(double omega, double alpha, double beta, double nu = 6.0) {
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, nu > 0 ? "student" : "gaussian");
  REQUIRE(spec.ok());
  ModelParams p{*spec, {0.0, omega, alpha, beta}};
  if (nu > 0) p.values.push_back(nu);
  REQUIRE(p.CheckConstraints().ok());
  return p;
}

ModelParams Gjr(double omega, double alpha, double gamma, double beta) {
  auto spec = MakeModelSpec("zero", {}, "gjr", {1, 1, 1}, "student");
  REQUIRE(spec.ok());
  ModelParams p{*spec, {omega, alpha, gamma, beta, 7.0}};
  REQUIRE(p.CheckConstraints().ok());
  return p;
}

std::vector<double> Sim(const ModelParams& p, int64_t n, uint64_t seed) {
  SimulationOptions so;
  so.n = n;
  so.seed = seed;
  auto s = Simulate(p, so);
  REQUIRE(s.ok());
  return s->returns;
}

void CheckFeasible(const RecursiveTracker& t, const ModelParams& anchor, double max_persistence) {
  ModelParams p = anchor;
  t.TrackedValues(p.spec, p.values.data());
  INFO("tracked " << p.values[p.spec.VarianceOffset()] << " persistence " << t.persistence());
  REQUIRE(p.CheckConstraints().ok());
  REQUIRE(t.persistence() <= max_persistence * (1 + 1e-15));
  REQUIRE(t.next_variance() > 0);
}

TEST_CASE("supports order-one GARCH and GJR with a zero or constant mean", "[tracker]") {
  CHECK(RecursiveTracker::Supports(Garch(0.05, 0.05, 0.9).spec));
  CHECK(RecursiveTracker::Supports(Gjr(0.05, 0.03, 0.05, 0.9).spec));
  CHECK_FALSE(RecursiveTracker::Supports(*MakeModelSpec("constant", {}, "garch", {2, 1}, "student")));
  CHECK_FALSE(RecursiveTracker::Supports(*MakeModelSpec("arma", {1, 1}, "garch", {1, 1}, "student")));
  CHECK_FALSE(RecursiveTracker::Supports(*MakeModelSpec("zero", {}, "ewma", {}, "gaussian")));
  RecursiveTracker t;
  auto ewma = MakeModelSpec("zero", {}, "ewma", {}, "gaussian");
  t.Anchor(ModelParams{*ewma, {0.94}}, 1.0, TrackerOptions{});
  CHECK_FALSE(t.active());
  t.Step(0.5, TrackerOptions{});  // inactive: no effect
  CHECK(t.bars_since_anchor() == 0);
}

TEST_CASE("tracking moves from a wrong anchor toward the true parameters", "[tracker]") {
  // True: omega 0.03, alpha 0.07, beta 0.90 (unconditional variance 1). Anchor:
  // alpha 0.15, beta 0.80 at the same level. The tracked (alpha, beta) must get
  // much closer to the truth, and every step must stay feasible.
  const ModelParams truth = Garch(0.03, 0.07, 0.90);
  const ModelParams anchor = Garch(0.05, 0.15, 0.80);
  const auto r = Sim(truth, 20000, 11);
  TrackerOptions o;
  RecursiveTracker t;
  t.Anchor(anchor, anchor.UnconditionalVariance(), o);
  REQUIRE(t.active());
  const double err0 = std::hypot(t.alpha() - 0.07, t.beta() - 0.90);
  double err_tail = 0;
  int tail = 0;
  for (size_t i = 0; i < r.size(); ++i) {
    t.Step(r[i], o);
    CheckFeasible(t, anchor, o.max_persistence);
    if (i >= r.size() - 5000) {
      err_tail += std::hypot(t.alpha() - 0.07, t.beta() - 0.90);
      ++tail;
    }
  }
  err_tail /= tail;
  INFO("initial error " << err0 << ", mean error over the last 5000 bars " << err_tail);
  CHECK(err_tail < err0 / 3);
  CHECK(t.resets() == 0);
  CHECK(t.level_ratio() == Approx(1.0).margin(0.35));
}

TEST_CASE("GJR tracking stays feasible and follows gamma", "[tracker]") {
  const ModelParams truth = Gjr(0.03, 0.02, 0.12, 0.90);
  const ModelParams anchor = Gjr(0.03, 0.05, 0.02, 0.92);
  const auto r = Sim(truth, 20000, 12);
  TrackerOptions o;
  RecursiveTracker t;
  t.Anchor(anchor, anchor.UnconditionalVariance(), o);
  REQUIRE(t.num_params() == 4);
  double g_tail = 0;
  int tail = 0;
  for (size_t i = 0; i < r.size(); ++i) {
    t.Step(r[i], o);
    CheckFeasible(t, anchor, o.max_persistence);
    if (i >= r.size() - 5000) {
      g_tail += t.gamma();
      ++tail;
    }
  }
  g_tail /= tail;
  INFO("mean tracked gamma over the last 5000 bars " << g_tail);
  CHECK(std::fabs(g_tail - 0.12) < std::fabs(0.02 - 0.12) / 2);
}

TEST_CASE("constraints hold on hostile input", "[tracker]") {
  // Alternating bursts of huge and tiny returns, exact zeros and one absurd
  // value: every tracked parameter set must pass CheckConstraints.
  const ModelParams anchor = Garch(0.02, 0.05, 0.93);
  TrackerOptions o;
  o.burn_in_bars = 5;
  o.max_step = 0.05;
  RecursiveTracker t;
  t.Anchor(anchor, 1.0, o);
  const auto base = Sim(anchor, 6000, 3);
  for (size_t i = 0; i < base.size(); ++i) {
    double x = base[i];
    if ((i / 200) % 3 == 1) x *= 8;
    if ((i / 200) % 3 == 2) x *= 0.01;
    if (i % 97 == 0) x = 0;
    if (i == 4321) x = 1e150;
    t.Step(x, o);
    CheckFeasible(t, anchor, o.max_persistence);
  }
  CHECK(t.stepping());
}

TEST_CASE("the divergence guard resets to the model in force", "[tracker]") {
  // The variance level jumps 100x: with a short memory the tracked level
  // leaves [1/4, 4] x the anchor's, so the tracker returns to the anchor.
  const ModelParams anchor = Garch(0.03, 0.07, 0.90);
  TrackerOptions o;
  o.burn_in_bars = 20;
  o.forgetting = 0.99;
  RecursiveTracker t;
  t.Anchor(anchor, 1.0, o);
  auto r = Sim(anchor, 3000, 5);
  for (size_t i = 1500; i < r.size(); ++i) r[i] *= 10;
  bool saw_reset_to_anchor = false;
  for (double x : r) {
    const uint64_t before = t.resets();
    t.Step(x, o);
    if (t.resets() > before) {
      saw_reset_to_anchor = t.alpha() == anchor.alpha(0) && t.beta() == anchor.beta(0) &&
                            t.omega() == Approx(anchor.omega()).epsilon(1e-14);
      CHECK(saw_reset_to_anchor);
      CHECK_FALSE(t.stepping());  // burn-in again
    }
    CHECK(t.level_ratio() <= o.max_level_ratio);
  }
  CHECK(t.resets() > 0);
}

TEST_CASE("the instability statistic is about chi-square(K) while the model fits", "[tracker]") {
  // With the true parameters in force the statistic's mean is close to K (3
  // for GARCH(1,1)); this checks the scores and the expected information
  // (nu / (2 (nu + 3)) per bar for log sigma2 under Student-t) together.
  const ModelParams truth = Garch(0.03, 0.07, 0.90);
  TrackerOptions o;
  double sum = 0;
  int64_t count = 0;
  for (uint64_t seed = 21; seed < 25; ++seed) {
    const auto r = Sim(truth, 20000, seed);
    RecursiveTracker t;
    t.Anchor(truth, truth.UnconditionalVariance(), o);
    for (size_t i = 0; i < r.size(); ++i) {
      t.Step(r[i], o);
      if (i >= 1000) {
        sum += t.instability();
        ++count;
      }
    }
  }
  const double mean = sum / static_cast<double>(count);
  INFO("mean Q " << mean);
  CHECK(mean > 2.4);
  CHECK(mean < 3.6);
}

// Alarm episodes of Q over a series: crossing `threshold` from below, re-armed
// under half of it.
std::vector<int64_t> Alarms(const ModelParams& anchor, const std::vector<double>& r,
                            double threshold) {
  TrackerOptions o;
  RecursiveTracker t;
  t.Anchor(anchor, anchor.UnconditionalVariance(), o);
  std::vector<int64_t> out;
  bool armed = true;
  for (size_t i = 0; i < r.size(); ++i) {
    t.Step(r[i], o);
    if (armed && t.instability() >= threshold) {
      out.push_back(static_cast<int64_t>(i));
      armed = false;
    } else if (!armed && t.instability() < 0.5 * threshold) {
      armed = true;
    }
  }
  return out;
}

TEST_CASE("instability alarms: false-alarm rate and detection delay", "[tracker]") {
  constexpr double kThreshold = 20;  // the [tracking] default
  // False alarms: 40 stable series of 10,000 bars with the true model in force.
  // Target: at most 1 alarm per 5,000 bars; the exact (Clopper-Pearson) 99.9 %
  // upper bound of the episode rate must be below it.
  const ModelParams truth = Garch(0.03, 0.07, 0.90);
  int64_t alarms = 0, bars = 0;
  for (uint64_t seed = 100; seed < 140; ++seed) {
    alarms += static_cast<int64_t>(Alarms(truth, Sim(truth, 10000, seed), kThreshold).size());
    bars += 10000;
  }
  const double upper = boost::math::binomial_distribution<double>::find_upper_bound_on_p(
      static_cast<double>(bars), static_cast<double>(alarms), 0.0005);
  std::printf(
      "instability alarms on stable series: %lld in %lld bars (99.9 %% upper bound %.3g "
      "per bar)\n",
      static_cast<long long>(alarms), static_cast<long long>(bars), upper);
  CHECK(upper < 1.0 / 5000);
  // Detection: alpha 0.07 -> 0.20, beta 0.90 -> 0.75 at bar 3000 (the level
  // stays 1), the old model in force. At least 8 of 10 series detected within
  // 1500 bars, median delay under 500 bars.
  const ModelParams after = Garch(0.05, 0.20, 0.75);
  std::vector<int64_t> delays;
  for (uint64_t seed = 200; seed < 210; ++seed) {
    auto r = Sim(truth, 3000, seed);
    const auto r2 = Sim(after, 1500, seed + 1000);
    r.insert(r.end(), r2.begin(), r2.end());
    for (int64_t a : Alarms(truth, r, kThreshold)) {
      if (a >= 3000) {
        delays.push_back(a - 3000);
        break;
      }
    }
  }
  std::sort(delays.begin(), delays.end());
  REQUIRE(delays.size() >= 8);
  std::printf("instability alarm delay after an abrupt change: median %lld bars (%zu/10)\n",
              static_cast<long long>(delays[delays.size() / 2]), delays.size());
  CHECK(delays[delays.size() / 2] < 500);
}

TEST_CASE("a tracker step allocates nothing", "[tracker]") {
  const ModelParams anchor = Gjr(0.03, 0.03, 0.08, 0.9);
  const auto r = Sim(anchor, 2000, 9);
  TrackerOptions o;
  RecursiveTracker t;
  t.Anchor(anchor, 1.0, o);
  const uint64_t before = testing::AllocationCount();
  for (double x : r) t.Step(x, o);
  t.Anchor(anchor, 1.0, o);  // re-anchoring does not allocate either
  for (double x : r) t.Step(x, o);
  CHECK(testing::AllocationCount() == before);
  CHECK(t.stepping());
}

TEST_CASE("save and restore continue bit-identically", "[tracker]") {
  const ModelParams anchor = Garch(0.03, 0.07, 0.90);
  const auto r = Sim(Garch(0.05, 0.12, 0.83), 3000, 7);
  TrackerOptions o;
  RecursiveTracker a;
  a.Anchor(anchor, 1.0, o);
  for (size_t i = 0; i < 1500; ++i) a.Step(r[i], o);
  StateWriter w;
  a.Save(&w);
  StateReader rd(w.data());
  RecursiveTracker b = RecursiveTracker::Restore(&rd, "test");
  REQUIRE(rd.Finish("tracker").ok());
  for (size_t i = 1500; i < r.size(); ++i) {
    a.Step(r[i], o);
    b.Step(r[i], o);
  }
  StateWriter wa, wb;
  a.Save(&wa);
  b.Save(&wb);
  CHECK(wa.data() == wb.data());
  CHECK(a.next_variance() == b.next_variance());

  // A truncated payload is refused.
  StateReader rt(absl::string_view(w.data()).substr(0, w.data().size() - 3));
  (void)RecursiveTracker::Restore(&rt, "test");
  CHECK_FALSE(rt.Finish("tracker").ok());
}

TEST_CASE("options are validated", "[tracker]") {
  CHECK(ValidateTrackerOptions(TrackerOptions{}).ok());
  TrackerOptions o;
  o.forgetting = 1.0;
  CHECK_FALSE(ValidateTrackerOptions(o).ok());
  o = TrackerOptions{};
  o.max_level_ratio = 1.0;
  CHECK_FALSE(ValidateTrackerOptions(o).ok());
  o = TrackerOptions{};
  o.max_persistence = 1.0;
  CHECK_FALSE(ValidateTrackerOptions(o).ok());
  o = TrackerOptions{};
  o.burn_in_bars = 0;
  CHECK_FALSE(ValidateTrackerOptions(o).ok());
}

}  // namespace
}  // namespace aftershock
