// Intraday seasonality end to end (PRODUCT.md C9, issue §2/§3): simulated
// U-shaped sessions of one-minute price ticks through IngestCore with
// EngineServices attached, as `replay` runs them.
#include <boost/math/distributions/chi_squared.hpp>
#include <boost/random/mersenne_twister.hpp>
#include <boost/random/normal_distribution.hpp>
#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/update_codec.h"
#include "streaming/engine_test_util.h"

namespace aftershock {
namespace {

using testing::CollectingSink;
using testing::ParseConfigOrDie;

constexpr int64_t kDay0 = 1772409600000000000;  // 2026-03-02T00:00:00Z
constexpr int64_t kMin = 60000000000;
constexpr int kBars = 510;  // 09:00-17:30, one-minute bars
constexpr int kSessions = 20;
constexpr int kSymbols = 6;
constexpr int kHalfHours = kBars / 30;  // 17
// The deseasonalized returns: GARCH(1,1)-normal, per-minute variance 2.5e-7.
constexpr double kOmega = 5e-9, kAlpha = 0.05, kBeta = 0.93;

// The fixed true model (no refits) unless `refit` gives a [refit] section.
std::string ConfigToml(const std::string& seasonality, const std::string& refit = "") {
  const char* fixed = R"(
[model]
mean = "zero"
variance = "garch"
shock_lags = 1
variance_lags = 1
innovations = "gaussian"
[model.params]
omega = 5e-9
alpha_1 = 0.05
beta_1 = 0.93
[refit]
window = 10200
)";
  return absl::StrCat(R"(
[bars]
interval = "1m"
session = { start = "09:00", end = "17:30" }
[outputs]
periods_per_year = 128520
)",
                      refit.empty() ? fixed : refit, "[seasonality]\n", seasonality);
}

// s(k)^2 proportional to 1 + 3 (2k/K - 1)^2 (open and close 4 times midday),
// normalized to mean 1 over the bars 1..K-1 that carry returns.
std::vector<double> TrueFactors() {
  std::vector<double> s2(kBars);
  double mean = 0;
  for (int k = 0; k < kBars; ++k) {
    const double u = 2.0 * k / kBars - 1.0;
    s2[k] = 1 + 3 * u * u;
    if (k > 0) mean += s2[k];
  }
  for (double& v : s2) v /= mean / (kBars - 1);
  return s2;
}

struct Run {
  std::vector<std::vector<BarUpdate>> updates;  // per symbol
  std::vector<std::vector<double>> profiles;    // final factors per symbol (empty: none)
  std::vector<double> overnight;                // final overnight multiplier per symbol
};

// One price tick per minute (at :30) per symbol; the price follows
// exp(sum of s(k) x). With `overnight` > 0 the first bar of a session moves by
// an opening return of variance overnight * h (the night).
Run Replay(const std::string& seasonality, double overnight = 0, const std::string& refit = "",
           int workers = 1) {
  const EngineConfig config = ParseConfigOrDie(ConfigToml(seasonality, refit));
  CollectingSink sink;
  ManualClock clock{kDay0};
  auto core = IngestCore::Create(config, &sink, &clock);
  REQUIRE(core.ok());
  ServiceOptions so;
  so.mode = RefitMode::kReplay;
  so.workers = workers;
  auto services = EngineServices::Attach(core->get(), config, so);
  REQUIRE(services.ok());
  const std::vector<double> s2 = TrueFactors();
  boost::random::mt19937_64 rng(20260302);
  boost::random::normal_distribution<double> z;
  std::vector<double> h(kSymbols, kOmega / (1 - kAlpha - kBeta)), price(kSymbols, 100.0);
  for (int d = 0; d < kSessions; ++d) {
    const int64_t open = kDay0 + d * 1440 * kMin + 540 * kMin;
    for (int k = 0; k < kBars; ++k) {
      for (int s = 0; s < kSymbols; ++s) {
        const double x = std::sqrt(h[s]) * z(rng);
        h[s] = kOmega + kAlpha * x * x + kBeta * h[s];
        const double mult = k == 0 ? (overnight > 0 ? overnight : s2[0]) : s2[k];
        price[s] *= std::exp(std::sqrt(mult) * x);
        Tick t;
        t.symbol.assign(absl::StrCat("ELM", s));
        t.t_ns = open + k * kMin + kMin / 2;
        t.kind = Tick::kPrice;
        t.value = price[s];
        (*core)->OnTick(t);
      }
    }
  }
  (*core)->CloseAllOpenBars();
  Run run;
  run.updates.resize(kSymbols);
  for (const auto& m : sink.messages) {
    if (m.topic.rfind("u.", 0) != 0) continue;
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(m.body, &u).ok());
    run.updates[std::stoi(m.topic.substr(5))].push_back(u);
  }
  for (int s = 0; s < kSymbols; ++s) {
    const int idx = (*core)->FindSymbol(absl::StrCat("ELM", s));
    const SeasonalProfile* p = (*core)->seasonal_profile(idx);
    run.profiles.push_back(p ? p->factors() : std::vector<double>{});
    run.overnight.push_back(p ? p->overnight_factor() : 0.0);
  }
  return run;
}

int BarOf(const BarUpdate& u) {
  // Bar end minus the 09:00 open, in minutes, minus one: the bar's index.
  const int64_t tod = (u.t_ns - kDay0) % (1440 * kMin);
  return static_cast<int>((tod - 540 * kMin) / kMin) - 1;
}

struct Calibration {
  double z2[kHalfHours] = {};
  int n[kHalfHours] = {};
  int exceptions[kHalfHours] = {};
  int eligible[kHalfHours] = {};
  int seasonal_updates = 0;
  double chi2 = 0;
};

// Mean z^2 per half hour and 99 % VaR exceptions per half hour (r below minus
// the VaR published on the previous bar of the same session), over the
// updates from the third session on (with seasonality: those carrying the
// flag), pooled over the symbols.
Calibration Measure(const Run& run, bool seasonal_only) {
  Calibration c;
  for (const auto& us : run.updates) {
    for (size_t i = 1; i < us.size(); ++i) {
      const BarUpdate& u = us[i];
      if ((u.t_ns - kDay0) / (1440 * kMin) < 3) continue;
      if (seasonal_only && !(u.flags & kFlagSeasonal)) continue;
      if (u.flags & kFlagSeasonal) ++c.seasonal_updates;
      const int hh = BarOf(u) / 30;
      REQUIRE(hh >= 0);
      REQUIRE(hh < kHalfHours);
      c.z2[hh] += u.z * u.z;
      ++c.n[hh];
      if (u.flags & kFlagGap) continue;  // the previous VaR was for another session
      ++c.eligible[hh];
      if (u.r < -us[i - 1].var_risk[0]) ++c.exceptions[hh];
    }
  }
  int total = 0, bars = 0;
  for (int i = 0; i < kHalfHours; ++i) {
    c.z2[i] /= std::max(1, c.n[i]);
    total += c.exceptions[i];
    bars += c.eligible[i];
  }
  // Pearson chi-square of the exception counts against counts proportional to
  // the bars observed in each half hour (uniform over the session).
  for (int i = 0; i < kHalfHours; ++i) {
    const double e = static_cast<double>(total) * c.eligible[i] / bars;
    c.chi2 += (c.exceptions[i] - e) * (c.exceptions[i] - e) / e;
  }
  return c;
}

// Critical value of the chi-square test at 1 % with 16 degrees of freedom
// (17 half hours): Boost.Math; scipy.stats.chi2.ppf(0.99, 16) = 31.99993 (run
// live with Debian's python3-scipy when this test was written).
double Chi2Critical() {
  return boost::math::quantile(boost::math::chi_squared(kHalfHours - 1), 0.99);
}

TEST_CASE("chi-square critical value agrees with scipy", "[seasonality]") {
  CHECK(Chi2Critical() == Approx(31.999926908815176).epsilon(1e-9));
}

TEST_CASE("U-shaped sessions: profile recovered, z and VaR calibrated by time of day",
          "[seasonality]") {
  const Run run = Replay("enabled = \"auto\"\n");
  const std::vector<double> truth = TrueFactors();
  // Profile: estimated at the last session start from the 19 complete
  // sessions in the window (10200 bars), shrunk toward the pool of the six
  // symbols' estimates. The same bounds as the estimator's own test at 20
  // sessions (tests/models/seasonal_profile_test.cc: RMS 12 %, worst bucket
  // 30 %; GARCH clustering at persistence 0.98 dominates the error).
  for (int s = 0; s < kSymbols; ++s) {
    REQUIRE(run.profiles[s].size() == static_cast<size_t>(kBars));
    double rms = 0, worst = 0;
    for (int k = 1; k < kBars; ++k) {
      const double e = run.profiles[s][k] / truth[k] - 1;
      rms += e * e;
      worst = std::max(worst, std::fabs(e));
    }
    rms = std::sqrt(rms / (kBars - 1));
    INFO("symbol " << s << " rms " << rms << " worst " << worst);
    CHECK(rms < 0.12);
    CHECK(worst < 0.30);
  }
  const Calibration c = Measure(run, /*seasonal_only=*/true);
  // From the fourth session on every update is seasonal (min_sessions = 3).
  CHECK(c.seasonal_updates > 15 * kSymbols * (kBars - 2));
  for (int i = 0; i < kHalfHours; ++i) {
    INFO("half hour " << i << " mean z^2 " << c.z2[i] << " n " << c.n[i] << " exceptions "
                      << c.exceptions[i] << " of " << c.eligible[i]);
    // ~3000 z^2 per half hour: standard error sqrt(2 / 3000) = 0.026, so the
    // band [0.85, 1.15] is about 6 standard errors wide each side (measured:
    // 0.96 to 1.06; exceptions 1.02 % of bars, chi-square 17.1).
    CHECK(c.z2[i] > 0.85);
    CHECK(c.z2[i] < 1.15);
  }
  INFO("chi-square " << c.chi2 << " critical " << Chi2Critical());
  CHECK(c.chi2 < Chi2Critical());
}

TEST_CASE("without seasonality the same sessions are miscalibrated", "[seasonality]") {
  const Run run = Replay("enabled = false\n");
  CHECK(run.profiles[0].empty());
  const Calibration c = Measure(run, /*seasonal_only=*/false);
  CHECK(c.seasonal_updates == 0);
  INFO("first half hour " << c.z2[0] << ", midday " << c.z2[kHalfHours / 2] << ", last "
                          << c.z2[kHalfHours - 1] << ", chi-square " << c.chi2);
  // The open and close are loud, midday quiet: a GARCH on raw returns lags the
  // time-of-day swings (measured: mean z^2 from 0.88 at midday to 1.19 in the
  // last half hour, chi-square 103, with the robust warm-up start and group
  // models; 0.76 to 1.25 and 141 before them). The seasonal test's criterion
  // (every half hour in [0.85, 1.15], chi-square below its 1 % point) fails.
  double lo = 1e9, hi = 0;
  for (double v : c.z2) {
    lo = std::min(lo, v);
    hi = std::max(hi, v);
  }
  CHECK((lo < 0.85 || hi > 1.15));
  CHECK(hi > 1.15);
  CHECK(c.chi2 > Chi2Critical());
}

TEST_CASE("scaled opening returns: the night gets its own multiplier", "[seasonality]") {
  // The opening return has 12 times a midday-normalized bar's variance.
  const Run run = Replay("opening_return = \"scaled\"\n", /*overnight=*/12.0);
  for (int s = 0; s < kSymbols; ++s) {
    INFO("symbol " << s << " multiplier " << run.overnight[s]);
    // 10 sessions of own opening returns, shrunk toward the pool of 6: the mean
    // |r| over ~60 returns has a relative standard error near 0.76 / sqrt(60)
    // = 10 %, 20 % on the multiplier; 2.5 standard errors.
    CHECK(run.overnight[s] == Approx(12.0).epsilon(0.5));
  }
  // Measured: multipliers 9.8 to 14.5; 96 opening updates, mean z^2 0.88.
  // Opening returns are published (flag gap, seasonal) once the multiplier
  // exists, with z calibrated like the rest: mean z^2 over them near 1.
  double z2 = 0;
  int n = 0, skipped_sessions = 0;
  for (const auto& us : run.updates) {
    for (const BarUpdate& u : us) {
      if (!(u.flags & kFlagGap)) continue;
      if (BarOf(u) != 0) {
        ++skipped_sessions;  // the opening return was skipped: first bar published is k = 1
        continue;
      }
      if (!(u.flags & kFlagSeasonal)) continue;
      z2 += u.z * u.z;
      ++n;
    }
  }
  INFO("opening updates " << n << " mean z^2 " << z2 / std::max(1, n) << " skipped "
                          << skipped_sessions);
  CHECK(n >= 15 * kSymbols);
  // Until the fourth session there is no multiplier: the opening return is
  // skipped (3 sessions a symbol, the first has no previous close).
  CHECK(skipped_sessions <= 4 * kSymbols);
  // ~100 opening z^2: standard error sqrt(2 / 100) = 0.14.
  CHECK(z2 / n > 0.6);
  CHECK(z2 / n < 1.5);
}

// With refits each job re-estimates the profile from its window, fits the
// model (identification on the first fit) on the deseasonalized returns and
// swaps the two together; replay applies them at fixed bars, so the outputs do
// not depend on the number of workers.
TEST_CASE("refits fit deseasonalized returns and swap the profile with the model",
          "[seasonality]") {
  const std::string refit = R"(
[refit]
every_bars = 2550
window = 5100
)";
  const Run run = Replay("", 0, refit, /*workers=*/1);
  int with_profile = 0;
  for (int s = 0; s < kSymbols; ++s) with_profile += run.profiles[s].empty() ? 0 : 1;
  CHECK(with_profile == kSymbols);
  // Updates under an estimated model that came with a profile (version >= 2:
  // the first fit, at bar 250, has no complete session yet).
  Calibration c;
  int n = 0;
  for (const auto& us : run.updates) {
    for (const BarUpdate& u : us) {
      if (u.ver < 2 || !(u.flags & kFlagSeasonal)) continue;
      const int hh = BarOf(u) / 30;
      c.z2[hh] += u.z * u.z;
      ++c.n[hh];
      ++n;
    }
  }
  CHECK(n > 10 * kSymbols * kBars);
  for (int i = 0; i < kHalfHours; ++i) {
    const double m = c.z2[i] / std::max(1, c.n[i]);
    INFO("half hour " << i << " mean z^2 " << m << " n " << c.n[i]);
    CHECK(m > 0.85);
    CHECK(m < 1.15);
  }
  const Run again = Replay("", 0, refit, /*workers=*/2);
  REQUIRE(again.updates.size() == run.updates.size());
  for (int s = 0; s < kSymbols; ++s) {
    REQUIRE(again.updates[s].size() == run.updates[s].size());
    bool same = true;
    for (size_t i = 0; i < run.updates[s].size(); ++i) {
      same = same && again.updates[s][i].z == run.updates[s][i].z &&
             again.updates[s][i].var_h[2] == run.updates[s][i].var_h[2] &&
             again.updates[s][i].ver == run.updates[s][i].ver;
    }
    CHECK(same);
    CHECK(again.profiles[s] == run.profiles[s]);
  }
}

TEST_CASE("seasonality configuration", "[seasonality]") {
  // auto: on with a session and time bars, off otherwise.
  CHECK(ParseConfigOrDie(ConfigToml("")).SeasonalityActive());
  CHECK(!ParseConfigOrDie("[bars]\ninterval = \"1m\"\n").SeasonalityActive());
  CHECK(ParseConfigOrDie("[bars]\ninterval = \"1m\"\n[seasonality]\nenabled = true\n")
            .SeasonalityActive());
  auto bad = ParseEngineConfig("[seasonality]\nenabled = true\n", "t.toml");
  REQUIRE(!bad.ok());
  CHECK(std::string(bad.status().message()).find("time bars") != std::string::npos);
  auto scaled = ParseEngineConfig("[seasonality]\nopening_return = \"scaled\"\n", "t.toml");
  CHECK(!scaled.ok());
  CHECK(!ParseEngineConfig("[seasonality]\nenabled = \"yes\"\n", "t.toml").ok());
  CHECK(!ParseEngineConfig(ConfigToml("method = \"fourier\"\nsmoothing = 1.5\n"), "t.toml").ok());
  CHECK(!ParseEngineConfig(ConfigToml("min_sessions = 0\n"), "t.toml").ok());
  const EngineConfig c = ParseConfigOrDie(
      ConfigToml("method = \"fourier\"\nsmoothing = 6\nmin_sessions = 4\nprior_sessions = 2\n"
                 "opening_return = \"scaled\"\n"));
  CHECK(SeasonalityConfig::BarsPerSession(c.bars) == 510);
  const EngineConfig round = ParseConfigOrDie(FormatEngineConfig(c));
  CHECK(round.seasonality.method == SeasonalMethod::kFourier);
  CHECK(round.seasonality.smoothing == 6);
  CHECK(round.seasonality.min_sessions == 4);
  CHECK(round.seasonality.prior_sessions == 2);
  CHECK(round.seasonality.opening_return == OpeningReturn::kScaled);
  CHECK(round.ToBarOptions().overnight_return);
}

}  // namespace
}  // namespace aftershock
