#include "aftershock/seasonal_profile.h"

#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstring>
#include <memory>
#include <random>
#include <vector>

#include "aftershock/forecast.h"
#include "aftershock/online_filter.h"
#include "aftershock/state_codec.h"
#include "models/cpu_features.h"

namespace aftershock {
namespace {

// True U-shaped factor: s(k)^2 proportional to 1 + a (2k/K - 1)^2, normalized to
// mean 1 over the buckets 1..K-1 (the buckets that carry returns when the
// first bar of a session has none).
std::vector<double> TrueProfile(int K, double a) {
  std::vector<double> s2(K);
  double mean = 0;
  for (int k = 0; k < K; ++k) {
    const double u = 2.0 * k / K - 1.0;
    s2[k] = 1 + a * u * u;
    if (k > 0) mean += s2[k];
  }
  mean /= K - 1;
  for (double& v : s2) v /= mean;
  return s2;
}

// Sessions of GARCH(1,1)-normal deseasonalized returns times s(k), buckets
// 1..K-1 (bucket 0 has no return), plus an optional opening return with
// variance multiplier `overnight` (tagged as such). Fixed seed.
struct Sample {
  std::vector<double> r;
  std::vector<int32_t> tags;
};
Sample Simulate(int sessions, int K, const std::vector<double>& s2, double overnight, uint64_t seed,
                double level_jump = 1.0) {
  boost::random::mt19937_64 rng(seed);
  boost::random::normal_distribution<double> z;
  const double omega = 5e-9, alpha = 0.05, beta = 0.93;
  double h = omega / (1 - alpha - beta);
  Sample out;
  for (int d = 0; d < sessions; ++d) {
    const double level = d >= sessions / 2 ? level_jump : 1.0;  // a variance jump midway
    for (int k = 0; k < K; ++k) {
      const double x = std::sqrt(h) * z(rng);
      h = omega + alpha * x * x + beta * h;
      if (k == 0) {
        if (overnight > 0) {
          out.r.push_back(std::sqrt(level * overnight) * x);
          out.tags.push_back(SeasonalTag(0, true, true));
        }
        continue;
      }
      out.r.push_back(std::sqrt(level * s2[k]) * x);
      out.tags.push_back(SeasonalTag(k, k == 1, false));
    }
  }
  return out;
}

double MaxRelError(const std::vector<double>& est, const std::vector<double>& truth, int from) {
  double worst = 0;
  for (size_t k = from; k < truth.size(); ++k) {
    worst = std::max(worst, std::fabs(est[k] / truth[k] - 1));
  }
  return worst;
}

double RmsRelError(const std::vector<double>& est, const std::vector<double>& truth, int from) {
  double s = 0;
  for (size_t k = from; k < truth.size(); ++k) s += std::pow(est[k] / truth[k] - 1, 2);
  return std::sqrt(s / (truth.size() - from));
}

TEST_CASE("1/s(k) from the factors, one at a time or as a table, to the bit", "[seasonal]") {
  // The profile keeps only s(k)^2; every caller of SeasonalInput (the ingest
  // core per bar, the refit worker with a table over its window) must see the
  // same 1/s(k), the correctly rounded 1 / sqrt(s(k)^2).
  std::mt19937_64 rng(11);
  std::uniform_real_distribution<double> u(0.01, 9.0);
  std::vector<double> f(37);
  for (double& v : f) v = u(rng);
  auto p = SeasonalProfile::Create(f, 2.5, 4);
  REQUIRE(p.ok());
  std::vector<double> inv;
  p->InvScales(&inv);
  REQUIRE(inv.size() == f.size());
  for (int k = 0; k < 37; ++k) {
    const double want = 1.0 / std::sqrt(f[static_cast<size_t>(k)]);
    CHECK(std::memcmp(&inv[static_cast<size_t>(k)], &want, sizeof want) == 0);
    const double one = p->inv_scale(k);
    CHECK(std::memcmp(&one, &want, sizeof want) == 0);
  }
  // SeasonalInput with and without the table, for every kind of tag.
  for (int32_t tag : {SeasonalTag(0, true, false), SeasonalTag(36, false, false),
                      SeasonalTag(37, false, false), SeasonalTag(0, true, true)}) {
    double a = 0, b = 0;
    const bool ta = SeasonalInput(&*p, -0.0031, tag, &a);
    const bool tb = SeasonalInput(&*p, -0.0031, tag, &b, inv.data());
    CHECK(ta == tb);
    CHECK(std::memcmp(&a, &b, sizeof a) == 0);
  }
}

TEST_CASE("profile look-ahead wraps to the next session", "[seasonal]") {
  auto p = SeasonalProfile::Create({2.0, 1.0, 0.5, 0.5}, 0.0, 3);
  REQUIRE(p.ok());
  CHECK(p->factor(2) == 0.5);
  CHECK(p->inv_scale(0) == Approx(1 / std::sqrt(2.0)));
  // After bar 2: bar 3, then bar 0 of the next session (s(0)^2 without an
  // overnight multiplier), 1, 2, 3, 0, and on, any number of bars ahead.
  const SeasonalAhead a = p->ahead(2);
  const double expect[] = {0.5, 2.0, 1.0, 0.5, 0.5, 2.0, 1.0, 0.5, 0.5, 2.0};
  for (int j = 0; j < 10; ++j) CHECK(a.at(j) == expect[j]);
  auto q = SeasonalProfile::Create({2.0, 1.0, 0.5, 0.5}, 7.0, 3);
  REQUIRE(q.ok());
  CHECK(q->ahead(3).at(0) == 7.0);  // the opening return's multiplier
  CHECK(q->ahead(3).at(4) == 7.0);  // and the next night's
  CHECK(q->ahead(0).at(3) == 7.0);
  CHECK(q->factor(0) == 2.0);  // the bar's own factor is not the night's
  CHECK(q->factors() == std::vector<double>{2.0, 1.0, 0.5, 0.5});
  CHECK(!SeasonalProfile::Create({1.0}, 0, 1).ok());
  CHECK(!SeasonalProfile::Create({1.0, -1.0}, 0, 1).ok());
}

TEST_CASE("options are validated", "[seasonal]") {
  SeasonalOptions o;
  CHECK(!ValidateSeasonalOptions(o).ok());  // buckets required
  o.buckets = 390;
  CHECK(ValidateSeasonalOptions(o).ok());
  o.method = SeasonalMethod::kFourier;
  o.smoothing = 2.5;
  CHECK(!ValidateSeasonalOptions(o).ok());  // order must be whole
  o.smoothing = 200;
  CHECK(!ValidateSeasonalOptions(o).ok());  // > K/4
  o.smoothing = 6;
  CHECK(ValidateSeasonalOptions(o).ok());
  o.min_sessions = 0;
  CHECK(!ValidateSeasonalOptions(o).ok());
}

// Tolerance, measured (seeds 1-3, 510 bars, 20 sessions, local-linear): with
// i.i.d. deseasonalized returns the RMS relative error of s^2 is 4.6-4.8 %
// (the kernel, bandwidth K/40 = 12.75 bars, pools ~640 absolute returns a
// bucket: 0.76 / sqrt(640) = 3 % on s, 6 % on s^2 to first order); GARCH
// clustering at persistence 0.98 makes neighbouring bars of a session share
// their level, inflating it to 7.3-8.2 %, with no systematic bias (mean
// relative error at the edges and at midday within +-6 %, sign varying with
// the seed), and 4.1-4.9 % at 80 sessions (the error is noise: it falls like
// 1/sqrt(sessions)). Bounds: RMS 12 %, worst bucket 30 % at 20 sessions; RMS
// 6.5 % at 80. A flat profile would be off by about 50 % RMS here.
TEST_CASE("a U-shaped profile is recovered", "[seasonal]") {
  const int K = 510;
  const std::vector<double> truth = TrueProfile(K, 3.0);
  const Sample s = Simulate(20, K, truth, 0.0, 42);
  for (SeasonalMethod m : {SeasonalMethod::kLocalLinear, SeasonalMethod::kFourier}) {
    SeasonalOptions o;
    o.buckets = K;
    o.method = m;
    auto est = EstimateSeasonalProfile(s.r, s.tags, o, nullptr);
    REQUIRE(est.ok());
    REQUIRE(est->profile != nullptr);
    CHECK(est->sessions == 20);
    CHECK(est->counts[0] == 0);
    CHECK(est->counts[1] == 20);
    const std::vector<double>& f = est->profile->factors();
    INFO(SeasonalMethodName(m) << " rms " << RmsRelError(f, truth, 1) << " max "
                               << MaxRelError(f, truth, 1));
    CHECK(RmsRelError(f, truth, 1) < 0.12);
    CHECK(MaxRelError(f, truth, 1) < 0.30);
    // Normalized: mean s^2 over the buckets with returns is 1.
    double mean = 0;
    for (int k = 1; k < K; ++k) mean += f[k];
    CHECK(mean / (K - 1) == Approx(1.0).epsilon(1e-9));
  }
}

TEST_CASE("the profile error falls with the sessions", "[seasonal]") {
  const int K = 510;
  const std::vector<double> truth = TrueProfile(K, 3.0);
  const Sample s = Simulate(80, K, truth, 0.0, 42);
  SeasonalOptions o;
  o.buckets = K;
  auto est = EstimateSeasonalProfile(s.r, s.tags, o, nullptr);
  REQUIRE(est.ok());
  REQUIRE(est->profile != nullptr);
  std::vector<double> flat(K, 1.0);
  CHECK(RmsRelError(flat, truth, 1) > 0.4);
  CHECK(RmsRelError(est->profile->factors(), truth, 1) < 0.065);
}

TEST_CASE("the session-level normalization absorbs a variance jump", "[seasonal]") {
  // The level quadruples for the second half of the sessions; each session's
  // level is divided out, so the shape is estimated as without the jump.
  const int K = 390;
  const std::vector<double> truth = TrueProfile(K, 2.0);
  const Sample s = Simulate(20, K, truth, 0.0, 7, /*level_jump=*/4.0);
  SeasonalOptions o;
  o.buckets = K;
  auto est = EstimateSeasonalProfile(s.r, s.tags, o, nullptr);
  REQUIRE(est.ok());
  REQUIRE(est->profile != nullptr);
  // The same bound as without the jump.
  CHECK(RmsRelError(est->profile->factors(), truth, 1) < 0.12);
}

TEST_CASE("a dirty tick moves its bucket by a bounded amount", "[seasonal]") {
  const int K = 390;
  const std::vector<double> truth = TrueProfile(K, 2.0);
  Sample s = Simulate(20, K, truth, 0.0, 9);
  SeasonalOptions o;
  o.buckets = K;
  auto clean = EstimateSeasonalProfile(s.r, s.tags, o, nullptr);
  // A 200-sigma return at midday.
  const size_t i = 10 * (K - 1) + 195;
  REQUIRE(SeasonalTagBucket(s.tags[i]) == 196);
  s.r[i] = 200 * std::sqrt(2.5e-7);
  auto dirty = EstimateSeasonalProfile(s.r, s.tags, o, nullptr);
  REQUIRE(clean.ok());
  REQUIRE(dirty.ok());
  const double before = clean->profile->factor(196), after = dirty->profile->factor(196);
  INFO(before << " -> " << after);
  // Unwinsorized, 200 sigma in a mean of ~640 absolute returns (E|z| = 0.8)
  // would raise s by 200 / 0.8 / 640 = 39 %; winsorized at 5 fitted means it
  // adds at most 5 / 640 of the mean: under 2 % on s^2 (plus renormalization).
  CHECK(std::fabs(after / before - 1) < 0.03);
}

TEST_CASE("opening returns get their own multiplier", "[seasonal]") {
  const int K = 390;
  const std::vector<double> truth = TrueProfile(K, 2.0);
  const Sample s = Simulate(30, K, truth, 9.0, 11);
  SeasonalOptions o;
  o.buckets = K;
  auto est = EstimateSeasonalProfile(s.r, s.tags, o, nullptr);
  REQUIRE(est.ok());
  REQUIRE(est->profile != nullptr);
  CHECK(est->overnight_count == 30);
  CHECK(est->sessions == 30);
  // 30 opening returns: the mean |r| has a relative standard error of
  // 0.76 / sqrt(30) = 14 %, 28 % on the multiplier; a 2.5-sigma band.
  CHECK(est->profile->overnight_factor() == Approx(9.0).epsilon(0.6));
  CHECK(est->profile->has_overnight());
  // The intraday buckets are not disturbed by the night.
  CHECK(RmsRelError(est->profile->factors(), truth, 1) < 0.10);
  double x = 0;
  REQUIRE(SeasonalInput(est->profile.get(), 3.0, SeasonalTag(0, true, true), &x));
  CHECK(x == Approx(3.0 / std::sqrt(est->profile->overnight_factor())));
  CHECK(!SeasonalInput(nullptr, 3.0, SeasonalTag(0, true, true), &x));
}

TEST_CASE("a short history is shrunk toward the prior", "[seasonal]") {
  const int K = 100;
  const std::vector<double> truth = TrueProfile(K, 3.0);
  std::vector<double> flat(K, 1.0);
  auto prior = SeasonalProfile::Create(flat, 0, 0);
  REQUIRE(prior.ok());
  SeasonalOptions o;
  o.buckets = K;
  o.min_sessions = 3;
  o.prior_sessions = 5;
  const Sample two = Simulate(2, K, truth, 0.0, 3);
  auto e2 = EstimateSeasonalProfile(two.r, two.tags, o, &*prior);
  REQUIRE(e2.ok());
  REQUIRE(e2->profile != nullptr);  // below min_sessions: the prior alone
  CHECK(e2->profile->factor(50) == 1.0);
  auto none = EstimateSeasonalProfile(two.r, two.tags, o, nullptr);
  REQUIRE(none.ok());
  CHECK(none->profile == nullptr);  // no prior, too short: no profile
  const Sample five = Simulate(5, K, truth, 0.0, 3);
  auto e5 = EstimateSeasonalProfile(five.r, five.tags, o, &*prior);
  REQUIRE(e5.ok());
  REQUIRE(e5->profile != nullptr);
  // Weight 5 / (5 + 5) on the own estimate: the open's factor lies about
  // half-way between the prior's 1 and the own estimate.
  const double own = e5->own[1] / [&] {
    double m = 0;
    for (int k = 1; k < K; ++k) m += e5->own[k];
    return m / (K - 1);
  }();
  const double shrunk = e5->profile->factor(1);
  CHECK(shrunk > 1.0);
  CHECK(shrunk < own);
  SeasonalPool pool(o);
  CHECK(pool.Snapshot() == nullptr);
  pool.Add(*e2);  // too short: ignored
  CHECK(pool.Snapshot() == nullptr);
  pool.Add(*e5);
  SeasonalProfilePtr snap = pool.Snapshot();
  REQUIRE(snap != nullptr);
  CHECK(snap->factor(1) == Approx(e5->own[1]).epsilon(0.02));
}

// var_h with seasonality is sum_j s(k+j)^2 E h_{T+j}; checked against the
// exact forecast recursion of forecast.h times the factors, for a closed-form
// model (GARCH(1,1)) and a higher-order one (GARCH(2,1)).
TEST_CASE("SeasonalizeUpdate weights the h-step forecasts by the factors ahead", "[seasonal]") {
  const std::vector<double> f = {2.0, 1.2, 0.6, 0.5, 0.7, 1.4};
  auto prof = SeasonalProfile::Create(f, 4.0, 5);
  REQUIRE(prof.ok());
  OutputOptions out;
  out.horizons = {1, 5, 20};
  for (int order : {1, 2}) {
    ModelSpec spec;
    spec.mean = MeanKind::kZero;
    spec.variance = VarianceKind::kGarch;
    spec.arch_order = order;
    spec.garch_order = 1;
    spec.innovations = Innovations::kNormal;
    ModelParams p{spec, order == 1 ? std::vector<double>{1e-6, 0.08, 0.9}
                                   : std::vector<double>{1e-6, 0.05, 0.03, 0.9}};
    auto m = FilterModel::Create(p, out, 1);
    REQUIRE(m.ok());
    FilterState st;
    InitFilterState(*m, 0, &st);
    for (double x : {0.001, -0.003, 0.002}) AdvanceState(*m, &st, x);
    const int k = 4;
    const double r = 0.004;
    const double x = r * prof->inv_scale(k);
    BarUpdate u;
    FilterStep(*m, &st, x, &u);
    const double z = u.z;
    SeasonalizeUpdate(*m, st, r, prof->factor(k), prof->ahead(k), &u);
    CHECK(u.r == r);
    CHECK(u.z == z);
    CHECK(u.eps / std::sqrt(u.var) == Approx(z).epsilon(1e-12));
    const std::vector<double> path = ForecastVariances(p, st.var, 20);
    // Bars after k = 4: 5, then the next session's bar 0 (overnight 4.0), 1, 2, ...
    const SeasonalAhead a = prof->ahead(k);
    CHECK(a.at(0) == 1.4);
    CHECK(a.at(1) == 4.0);
    CHECK(u.var_next == Approx(1.4 * st.var.next_variance).epsilon(1e-12));
    for (int i = 0; i < 3; ++i) {
      double want = 0;
      for (int j = 0; j < u.horizons[i]; ++j) want += a.at(j) * path[j];
      CHECK(u.var_h[i] == Approx(want).epsilon(1e-10));
    }
    const double sd_next = std::sqrt(u.var_next);
    CHECK(u.var_risk[0] == Approx(2.3263478740408408 * sd_next).epsilon(1e-9));
  }
}

}  // namespace
}  // namespace aftershock

namespace aftershock {
namespace {

// An estimate as a job's would be, with a random own profile.
SeasonalEstimate RandomEstimate(int buckets, std::mt19937_64* rng) {
  std::uniform_real_distribution<double> u(0.5, 2.0);
  SeasonalEstimate e;
  e.sessions = 3 + static_cast<int>((*rng)() % 5);
  e.own.resize(static_cast<size_t>(buckets));
  for (double& v : e.own) v = u(*rng);
  e.own_overnight = ((*rng)() & 1) ? u(*rng) : 0.0;
  return e;
}

bool SameProfile(const SeasonalProfile* a, const SeasonalProfile* b) {
  if (a == nullptr || b == nullptr) return a == b;
  if (a->buckets() != b->buckets()) return false;
  for (int k = 0; k < a->buckets(); ++k) {
    const double x = a->factor(k), y = b->factor(k);
    if (std::memcmp(&x, &y, sizeof x) != 0) return false;
  }
  const double x = a->overnight_factor(), y = b->overnight_factor();
  return std::memcmp(&x, &y, sizeof x) == 0;
}

TEST_CASE(
    "the pool shares a snapshot for refresh_adds estimates; a restored pool hands out the same",
    "[seasonal]") {
  SeasonalOptions o;
  o.buckets = 17;
  std::mt19937_64 rng(11);
  SeasonalPool pool(o);
  CHECK(pool.Snapshot(4) == nullptr);  // nothing added yet
  pool.Add(RandomEstimate(o.buckets, &rng));
  const SeasonalProfilePtr first = pool.Snapshot(4);
  REQUIRE(first != nullptr);  // the first one is built at once
  // Three more estimates: still shared; the fourth since the build rebuilds.
  for (int i = 0; i < 3; ++i) {
    pool.Add(RandomEstimate(o.buckets, &rng));
    CHECK(pool.Snapshot(4) == first);
  }
  pool.Add(RandomEstimate(o.buckets, &rng));
  const SeasonalProfilePtr second = pool.Snapshot(4);
  REQUIRE(second != nullptr);
  CHECK(second != first);
  CHECK(pool.Snapshot(4) == second);  // nothing added since
  // With refresh_adds 1 every Add makes the next snapshot a new one, as a
  // snapshot built from the pool's current sums.
  SeasonalPool each(o);
  for (int i = 0; i < 3; ++i) {
    each.Add(RandomEstimate(o.buckets, &rng));
    const SeasonalProfilePtr a = each.Snapshot(1);
    each.Add(RandomEstimate(o.buckets, &rng));
    CHECK(each.Snapshot(1) != a);
  }

  // Saved at every point of a run, restored, and continued alongside the
  // original: every later snapshot is the same to the bit (replay in parts).
  for (int cut = 0; cut < 12; ++cut) {
    INFO("saved after step " << cut);
    std::mt19937_64 a_rng(29), b_rng(0);
    SeasonalPool a(o);
    std::unique_ptr<SeasonalPool> b;
    for (int step = 0; step < 24; ++step) {
      if (step == cut) {
        StateWriter w;
        a.SaveState(&w);
        b = std::make_unique<SeasonalPool>(o);
        StateReader r(w.data());
        b->RestoreState(&r);
        REQUIRE(r.Finish("pool").ok());
        b_rng = a_rng;
      }
      const SeasonalEstimate e = RandomEstimate(o.buckets, &a_rng);
      a.Add(e);
      const SeasonalProfilePtr pa = a.Snapshot(5);
      if (b != nullptr) {
        b->Add(RandomEstimate(o.buckets, &b_rng));
        CHECK(SameProfile(b->Snapshot(5).get(), pa.get()));
      }
    }
  }
}

TEST_CASE("the pool adds an estimate and its contribution alike, in single precision",
          "[seasonal]") {
  SeasonalOptions o;
  o.buckets = 23;
  std::mt19937_64 rng(5);
  // A pool that averaged the double-precision factors would differ from
  // by_hand in the last bits of every snapshot.
  SeasonalPool from_estimates(o), from_contributions(o), by_hand(o);
  // By hand: estimates whose own factors were rounded to float beforehand.
  for (int i = 0; i < 9; ++i) {
    const SeasonalEstimate e = RandomEstimate(o.buckets, &rng);
    from_estimates.Add(e);
    const SeasonalContribution c = PoolContribution(e);
    REQUIRE(c.own.size() == e.own.size());
    CHECK(c.sessions == e.sessions);
    CHECK(c.own_overnight == e.own_overnight);
    from_contributions.Add(c);
    SeasonalEstimate rounded = e;
    for (double& v : rounded.own) v = static_cast<double>(static_cast<float>(v));
    by_hand.Add(rounded);
    const SeasonalProfilePtr a = from_estimates.Snapshot();
    CHECK(SameProfile(a.get(), from_contributions.Snapshot().get()));
    CHECK(SameProfile(a.get(), by_hand.Snapshot().get()));
  }
}

TEST_CASE("an estimate is the same to the bit on the four-lane and two-lane paths", "[seasonal]") {
  // The passes divide whole arrays four lanes per AVX instruction where the
  // CPU has it (two with SSE2), and so does the smoother; IEEE division,
  // multiplication and addition round alike at any width.
  const int K = 97;
  const std::vector<double> truth = TrueProfile(K, 3.0);
  const Sample sample = Simulate(9, K, truth, 0.4, 17);
  SeasonalOptions o;
  o.buckets = K;
  auto prior = SeasonalProfile::Create(std::vector<double>(K, 1.0), 1.5, 0);
  REQUIRE(prior.ok());
  auto run = [&](bool disable_avx) {
    internal::AvxDisabledForTesting().store(disable_avx);
    auto e = EstimateSeasonalProfile(sample.r, sample.tags, o, &*prior);
    internal::AvxDisabledForTesting().store(false);
    return e;
  };
  const auto wide = run(false);
  const auto narrow = run(true);
  REQUIRE(wide.ok());
  REQUIRE(narrow.ok());
  REQUIRE(wide->own.size() == static_cast<size_t>(K));
  CHECK(std::memcmp(wide->own.data(), narrow->own.data(), K * sizeof(double)) == 0);
  CHECK(wide->own_overnight == narrow->own_overnight);
  CHECK(wide->counts == narrow->counts);
  CHECK(SameProfile(wide->profile.get(), narrow->profile.get()));
}

}  // namespace
}  // namespace aftershock
