#include "aftershock/regime_detector.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "aftershock/online_filter.h"
#include "aftershock/simulate.h"

namespace aftershock {
namespace {

ModelParams Garch(double omega, double alpha, double beta) {
  auto spec = MakeModelSpec("zero", {}, "garch", {1, 1}, "gaussian");
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, {{"omega", omega}, {"alpha_1", alpha}, {"beta_1", beta}});
  REQUIRE(p.ok());
  return *p;
}

RegimeDetector Detector(double enter, double exit, double fast, double slow) {
  RegimeOptions o;
  o.enter = enter;
  o.exit = exit;
  o.fast_halflife = fast;
  o.slow_halflife = slow;
  auto d = RegimeDetector::Create(o);
  REQUIRE(d.ok());
  return *d;
}

// The squared residual that moves the ratio of `s` to `target` in one update,
// with the cap off (clip_z = 0): solves
//   (lf F + (1-lf) x) / (ls S + (1-ls) x) = target  for x.
double ResidualSquaredFor(const RegimeOptions& o, const RegimeState& s, double target) {
  const double lf = std::exp2(-1.0 / o.fast_halflife);
  const double ls = std::exp2(-1.0 / o.slow_halflife);
  return (target * ls * s.slow - lf * s.fast) / ((1 - lf) - target * (1 - ls));
}

TEST_CASE("the detector follows its stated recursion", "[regime]") {
  RegimeOptions o;  // defaults: half-lives 10 and 250, clip 4
  auto d = RegimeDetector::Create(o);
  REQUIRE(d.ok());
  RegimeState s;
  const double lf = std::pow(0.5, 1.0 / 10), ls = std::pow(0.5, 1.0 / 250);
  double f = 2.0, sl = 2.0;  // seeded with the first bar's model variance
  const double eps[] = {1.0, -3.0, 0.5, 20.0, 0.0, -1.5};
  for (double e : eps) {
    const double x = std::min(e * e, 16.0 * sl);
    f = lf * f + (1 - lf) * x;
    sl = ls * sl + (1 - ls) * x;
    CHECK(d->Update(e, 2.0, &s) == RegimeEvent::kNone);  // inside the warm-up
    CHECK(s.fast == Approx(f).epsilon(1e-14));
    CHECK(s.slow == Approx(sl).epsilon(1e-14));
    CHECK(s.ratio == Approx(f / sl).epsilon(1e-14));
  }
  CHECK(s.bars == 6);
  // The 20.0 residual was capped at 4 long-run standard deviations.
  CHECK(s.fast < 16.0 * 2.0);
  // Non-finite residuals and an unusable first variance are ignored.
  RegimeState t;
  CHECK(d->Update(1.0, 0.0, &t) == RegimeEvent::kNone);
  CHECK(t.bars == 0);
  CHECK(d->Update(std::nan(""), 1.0, &s) == RegimeEvent::kNone);
  CHECK(s.bars == 6);
}

TEST_CASE("bad detector options are clear errors", "[regime]") {
  RegimeOptions o;
  o.exit = 2.5;
  auto a = RegimeDetector::Create(o);
  REQUIRE_FALSE(a.ok());
  CHECK(std::string(a.status().message()) ==
        "regime thresholds need 1 <= regime_exit < regime_enter, got regime_exit = 2.5 and "
        "regime_enter = 2");
  o = RegimeOptions{};
  o.slow_halflife = 5;
  auto b = RegimeDetector::Create(o);
  REQUIRE_FALSE(b.ok());
  CHECK(std::string(b.status().message()) ==
        "regime_slow_halflife (5) must be larger than regime_fast_halflife (10)");
  o = RegimeOptions{};
  o.clip_z = 0.5;
  auto c = RegimeDetector::Create(o);
  REQUIRE_FALSE(c.ok());
  CHECK(std::string(c.status().message()) ==
        "regime_clip_z must be 0 (off) or larger than 1, got 0.5");
}

// Drives the ratio to each target in turn (one bar per target) and returns the
// events seen.
std::vector<RegimeEvent> Drive(const RegimeDetector& d, RegimeState* s,
                               const std::vector<double>& targets) {
  std::vector<RegimeEvent> events;
  if (s->bars == 0) d.Update(1.0, 1.0, s);  // seeds both averages at 1 (R = 1)
  for (double target : targets) {
    const double x = ResidualSquaredFor(d.options(), *s, target);
    REQUIRE(x >= 0);
    const RegimeEvent ev = d.Update(std::sqrt(x), 1.0, s);
    REQUIRE(s->ratio == Approx(target).epsilon(1e-9));
    if (ev != RegimeEvent::kNone) events.push_back(ev);
  }
  return events;
}

TEST_CASE("hysteresis: a ratio bouncing around the enter threshold enters once", "[regime]") {
  // The statistic is built directly: every bar's residual is chosen so that R
  // lands exactly on the target, alternating enter - 0.05 and enter + 0.05.
  for (bool high : {true, false}) {
    RegimeOptions o;
    o.clip_z = 0;  // the construction needs uncapped residuals
    o.warmup_bars = 20;
    auto with = RegimeDetector::Create(o);
    REQUIRE(with.ok());
    RegimeOptions flappy = o;
    flappy.exit = o.enter - 0.001;  // (almost) no hysteresis
    auto without = RegimeDetector::Create(flappy);
    REQUIRE(without.ok());

    std::vector<double> targets(50, 1.0);
    // `outside` is 0.05 short of the enter threshold, `inside` 0.05 past it (in
    // the ratio for high, in its reciprocal for low).
    const double outside = high ? o.enter - 0.05 : 1.0 / (o.enter - 0.05);
    const double inside = high ? o.enter + 0.05 : 1.0 / (o.enter + 0.05);
    // Ramp to just outside, bounce 200 times, then settle back at 1.
    for (int i = 1; i <= 30; ++i) targets.push_back(1.0 + (outside - 1.0) * i / 30.0);
    for (int i = 0; i < 200; ++i) targets.push_back(i % 2 == 0 ? inside : outside);
    for (int i = 1; i <= 20; ++i) targets.push_back(outside + (1.0 - outside) * i / 20.0);

    RegimeState s1, s2;
    const auto e1 = Drive(*with, &s1, targets);
    const auto e2 = Drive(*without, &s2, targets);
    const RegimeEvent enter = high ? RegimeEvent::kEnterHigh : RegimeEvent::kEnterLow;
    const RegimeEvent clear = high ? RegimeEvent::kClearHigh : RegimeEvent::kClearLow;
    INFO((high ? "high" : "low"));
    REQUIRE(e1.size() == 2);
    CHECK(e1[0] == enter);
    CHECK(e1[1] == clear);
    CHECK_FALSE(s1.in_regime());
    // Without the gap between enter and exit the same path flaps on every bounce.
    const auto entries = std::count(e2.begin(), e2.end(), enter);
    const auto clears = std::count(e2.begin(), e2.end(), clear);
    std::printf(
        "hysteresis (%s): with exit %.2f: %zu entries; with exit %.3f: %ld entries, "
        "%ld clears\n",
        high ? "high" : "low", o.exit, static_cast<size_t>(std::count(e1.begin(), e1.end(), enter)),
        flappy.exit, static_cast<long>(entries), static_cast<long>(clears));
    CHECK(entries == 100);
    CHECK(clears == 100);
  }
}

struct Setting {
  const char* name;
  double enter, exit, fast, slow;
};

// Settings measured: the shipped default, a sensitive one, the shipped intraday
// example (config/example-intraday.toml) and a conservative one.
const Setting kSettings[] = {
    {"default 2 / 1.3, 10 / 250", 2.0, 1.3, 10, 250},
    {"sensitive 1.5 / 1.15, 10 / 250", 1.5, 1.15, 10, 250},
    {"intraday 2.5 / 1.5, 15 / 510", 2.5, 1.5, 15, 510},
    {"conservative 3 / 1.5, 20 / 500", 3.0, 1.5, 20, 500},
};
constexpr int kNumSettings = 4;

// Pre-jump truth of the delay study and the quiet series: zero-mean Gaussian
// GARCH(1,1), omega 0.1, alpha 0.1, beta 0.8 (persistence 0.9, unconditional
// variance 1). The jump multiplies omega (simulate.h), so the unconditional
// variance changes by the factor and the conditional variance moves there at
// the rate of the persistence.
constexpr double kOmega = 0.1, kAlpha = 0.1, kBeta = 0.8;
constexpr int64_t kJumpBar = 1000;  // 4 slow half-lives of quiet first
constexpr int64_t kHorizon = 1000;  // bars after the jump searched for a detection
constexpr int kRuns = 200;

struct DelayResult {
  double median = 0;    // bars; +inf when half the runs or more missed
  int detected = 0;     // runs with a detection within kHorizon
  int preexisting = 0;  // runs already in the matching regime at the jump (delay 0)
};

double Median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  const size_t n = v.size();
  return n % 2 == 1 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

// Filters each simulated path with the pre-jump model and runs every setting's
// detector on the same residuals.
void MeasureDelays(double multiplier, DelayResult out[kNumSettings]) {
  const ModelParams truth = Garch(kOmega, kAlpha, kBeta);
  auto fm = FilterModel::Create(truth, OutputOptions{}, 1);
  REQUIRE(fm.ok());
  RegimeDetector det[kNumSettings];
  for (int k = 0; k < kNumSettings; ++k) {
    det[k] = Detector(kSettings[k].enter, kSettings[k].exit, kSettings[k].fast, kSettings[k].slow);
  }
  const RegimeEvent want = multiplier > 1 ? RegimeEvent::kEnterHigh : RegimeEvent::kEnterLow;
  const RegimeDirection dir = multiplier > 1 ? RegimeDirection::kHigh : RegimeDirection::kLow;
  std::vector<double> delays[kNumSettings];
  for (int run = 0; run < kRuns; ++run) {
    SimulationOptions so;
    so.n = kJumpBar + kHorizon;
    so.seed = 1000 + static_cast<uint64_t>(run);
    so.regime_changes = {{kJumpBar, multiplier}};
    auto sim = Simulate(truth, so);
    REQUIRE(sim.ok());
    FilterState fs;
    InitFilterState(*fm, 0, &fs);
    RegimeState rs[kNumSettings];
    double delay[kNumSettings];
    std::fill(delay, delay + kNumSettings, HUGE_VAL);
    for (int64_t t = 0; t < so.n; ++t) {
      BarUpdate u;
      FilterStep(*fm, &fs, sim->returns[t], &u);
      for (int k = 0; k < kNumSettings; ++k) {
        if (t == kJumpBar && rs[k].direction == dir && std::isinf(delay[k])) {
          delay[k] = 0;
          ++out[k].preexisting;
        }
        const RegimeEvent ev = det[k].Update(u.eps, u.var, &rs[k]);
        if (t >= kJumpBar && ev == want && std::isinf(delay[k])) {
          delay[k] = static_cast<double>(t - kJumpBar);
        }
      }
    }
    for (int k = 0; k < kNumSettings; ++k) {
      delays[k].push_back(delay[k]);
      if (std::isfinite(delay[k])) ++out[k].detected;
    }
  }
  for (int k = 0; k < kNumSettings; ++k) out[k].median = Median(delays[k]);
}

struct FalseAlarms {
  double high_per_10k = 0, low_per_10k = 0;
};

// Regime entries per 10,000 bars on one long series without a change.
void MeasureFalseAlarms(const ModelParams& truth, int64_t n, uint64_t seed,
                        FalseAlarms out[kNumSettings]) {
  auto fm = FilterModel::Create(truth, OutputOptions{}, 1);
  REQUIRE(fm.ok());
  SimulationOptions so;
  so.n = n;
  so.seed = seed;
  auto sim = Simulate(truth, so);
  REQUIRE(sim.ok());
  for (int k = 0; k < kNumSettings; ++k) {
    const RegimeDetector det =
        Detector(kSettings[k].enter, kSettings[k].exit, kSettings[k].fast, kSettings[k].slow);
    FilterState fs;
    InitFilterState(*fm, 0, &fs);
    RegimeState rs;
    int64_t high = 0, low = 0;
    for (int64_t t = 0; t < n; ++t) {
      BarUpdate u;
      FilterStep(*fm, &fs, sim->returns[t], &u);
      const RegimeEvent ev = det.Update(u.eps, u.var, &rs);
      high += ev == RegimeEvent::kEnterHigh;
      low += ev == RegimeEvent::kEnterLow;
    }
    out[k].high_per_10k = 1e4 * static_cast<double>(high) / static_cast<double>(n);
    out[k].low_per_10k = 1e4 * static_cast<double>(low) / static_cast<double>(n);
  }
}

std::string FormatDelay(const DelayResult& r) {
  char buf[64];
  if (std::isinf(r.median)) {
    std::snprintf(buf, sizeof(buf), "not reached (%d/%d)", r.detected, kRuns);
  } else {
    std::snprintf(buf, sizeof(buf), "%.0f (%d/%d)", r.median, r.detected, kRuns);
  }
  return buf;
}

TEST_CASE("detection delay and false alarms on simulated GARCH data", "[regime][measured]") {
  const double jumps[] = {2.0, 4.0, 0.25};
  DelayResult delay[3][kNumSettings];
  for (int j = 0; j < 3; ++j) MeasureDelays(jumps[j], delay[j]);
  FalseAlarms quiet[kNumSettings];
  MeasureFalseAlarms(Garch(kOmega, kAlpha, kBeta), 1000000, 77, quiet);
  // The same on a more persistent GARCH (alpha 0.08, beta 0.9: persistence
  // 0.98), whose own volatility clusters are longer and larger.
  FalseAlarms quiet98[kNumSettings];
  MeasureFalseAlarms(Garch(0.02, 0.08, 0.90), 1000000, 78, quiet98);

  // Quiet series without clustering: iid normal returns (constant variance 1).
  auto spec = MakeModelSpec("zero", {}, "flat", {}, "gaussian");
  REQUIRE(spec.ok());
  auto iid = ModelParams::FromNamed(*spec, {{"omega", 1.0}});
  REQUIRE(iid.ok());
  FalseAlarms quiet_iid[kNumSettings];
  MeasureFalseAlarms(*iid, 1000000, 79, quiet_iid);

  std::string table =
      "| thresholds: enter / exit, half-lives fast / slow (bars) | variance x2 | x4 | x0.25 |\n"
      "|---|---|---|---|\n";
  for (int k = 0; k < kNumSettings; ++k) {
    char row[512];
    std::snprintf(row, sizeof(row), "| %s | %s | %s | %s |\n", kSettings[k].name,
                  FormatDelay(delay[0][k]).c_str(), FormatDelay(delay[1][k]).c_str(),
                  FormatDelay(delay[2][k]).c_str());
    table += row;
  }
  table +=
      "\n| thresholds | GARCH p 0.90: up | down | GARCH p 0.98: up | down | iid normal: up | down "
      "|\n|---|---|---|---|---|---|---|\n";
  for (int k = 0; k < kNumSettings; ++k) {
    char row[512];
    std::snprintf(row, sizeof(row), "| %s | %.2f | %.2f | %.2f | %.2f | %.2f | %.2f |\n",
                  kSettings[k].name, quiet[k].high_per_10k, quiet[k].low_per_10k,
                  quiet98[k].high_per_10k, quiet98[k].low_per_10k, quiet_iid[k].high_per_10k,
                  quiet_iid[k].low_per_10k);
    table += row;
  }
  std::printf(
      "Median detection delay in bars after the jump (runs detected within %lld bars / "
      "%d), then regime entries per 10,000 bars of 1,000,000-bar series without a "
      "jump:\n%s",
      static_cast<long long>(kHorizon), kRuns, table.c_str());
  for (int k = 0; k < kNumSettings; ++k) {
    std::printf("  %s: runs already in the matching regime at the jump: x2 %d, x4 %d, x0.25 %d\n",
                kSettings[k].name, delay[0][k].preexisting, delay[1][k].preexisting,
                delay[2][k].preexisting);
  }
  std::fflush(stdout);

  // Bounds (this project's design targets for the shipped default and the
  // intraday example, with margin over the measured values; not external
  // reference values). Default: a x4 jump is flagged within 25 bars, a x2 jump
  // within 60 and a x0.25 drop within 35 (medians); at most 35 false up-entries
  // and 60 false down-entries per 10,000 quiet bars of the persistence-0.9 GARCH.
  CHECK(delay[1][0].median <= 25);
  CHECK(delay[0][0].median <= 60);
  CHECK(delay[2][0].median <= 35);
  CHECK(delay[1][0].detected == kRuns);
  CHECK(quiet[0].high_per_10k <= 35);
  CHECK(quiet[0].low_per_10k <= 60);
  // Intraday example: x4 within 40 bars, at most 8 false entries per 10,000 bars.
  CHECK(delay[1][2].median <= 40);
  CHECK(quiet[2].high_per_10k <= 8);
  CHECK(quiet[2].low_per_10k <= 8);
  // The trade-off runs the expected way: the sensitive setting detects sooner
  // and alarms more often than the default, the conservative one the reverse.
  for (int j = 0; j < 3; ++j) {
    CHECK(delay[j][1].median < delay[j][0].median);
    CHECK(delay[j][3].median > delay[j][0].median);
  }
  CHECK(quiet[1].high_per_10k > quiet[0].high_per_10k);
  CHECK(quiet[3].high_per_10k < quiet[0].high_per_10k);
  // Without volatility clustering the default's false up-entries are rare: the
  // clip keeps single outliers from entering a regime.
  CHECK(quiet_iid[0].high_per_10k <= 6);
}

}  // namespace
}  // namespace aftershock
