// The alert rules on the path users run: price ticks aggregated to one-minute
// time bars over trading sessions with overnight gaps, driven through
// IngestCore + EngineServices with an event-time clock the way `replay` drives
// them (a clock sweep before each tick, at most every 100 ms).
#include "aftershock/engine_services.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <map>
#include <nlohmann/json.hpp>
#include <random>
#include <string>
#include <vector>

#include "aftershock/clock.h"
#include "aftershock/ingest_core.h"
#include "streaming/engine_test_util.h"

namespace aftershock {
namespace {

using testing::CollectingSink;
using testing::ParseConfigOrDie;

constexpr int64_t kSec = kNanosPerSecond;
constexpr int64_t kMin = kNanosPerMinute;
// 2026-03-02T00:00:00Z, a Monday (20514 days after the epoch; Python:
// date(2026, 3, 2) - date(1970, 1, 1) = 20514 days, date(2026, 3, 2).weekday() = 0).
constexpr int64_t kMonday = 20514 * kNanosPerDay;
// Session 08:00-16:30 local time, UTC+1: 07:00Z-15:30Z.
constexpr int64_t kOpenUtc = 7 * 60 * kMin;
constexpr int64_t kSessionLength = (8 * 60 + 30) * kMin;

// Open of trading day d (0 = Monday; 5 and 6 are the weekend).
int64_t Open(int day) { return kMonday + day * kNanosPerDay + kOpenUtc; }

// One-minute bars of price ticks over the session, fixed GARCH model (no
// warm-up, so alerts are never withheld), refits off.
std::string Config(const std::string& alerts = "") {
  return std::string(testing::kFixedModelToml) + R"(
[bars]
interval = "1m"
grace = "200ms"
session = { start = "08:00", end = "16:30", timezone_offset_minutes = 60 }
[alerts]
)" + alerts;
}

Tick Price(const std::string& sym, int64_t t, double p) {
  Tick k;
  k.symbol.assign(sym);
  k.t_ns = t;
  k.kind = Tick::kPrice;
  k.value = p;
  return k;
}

// Appends a price path of `sym` for trading days [first, last]: one tick at
// each time from `times(day)`, each moving the log price by N(0, sd_of(t)).
template <typename Times, typename Sd>
void AddPath(std::vector<Tick>* ticks, const std::string& sym, int first, int last, uint64_t seed,
             Times times, Sd sd_of) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> n01(0, 1);
  double logp = std::log(100.0);
  for (int d = first; d <= last; ++d) {
    for (int64_t t : times(d)) {
      logp += sd_of(t) * n01(rng);
      ticks->push_back(Price(sym, t, std::exp(logp)));
    }
  }
}

// Every `step` from the open + offset to the session end (exclusive).
std::vector<int64_t> Every(int day, int64_t step, int64_t offset) {
  std::vector<int64_t> v;
  for (int64_t t = Open(day) + offset; t < Open(day) + kSessionLength; t += step) v.push_back(t);
  return v;
}

struct Recorder : ServiceListener, BarObserver {
  void OnAlert(int index, const Alert& alert) override { alerts.push_back(alert); }
  void OnBar(IngestCore*, int, const ClosedBar& bar, BarUpdate* u) override {
    ++bars;
    clock_closed += bar.closed_by_clock;
    stale += (u->flags & kFlagStale) != 0;
  }
  std::vector<Alert> Of(const std::string& sym, AlertRule rule) const {
    std::vector<Alert> out;
    for (const Alert& a : alerts) {
      if (a.symbol.view() == sym && a.rule == rule) out.push_back(a);
    }
    return out;
  }
  // Feed alerts of every symbol but `except`.
  int64_t FeedAlerts(const std::string& except = "") const {
    return std::count_if(alerts.begin(), alerts.end(), [&](const Alert& a) {
      return a.kind == AlertKind::kFeed && a.symbol.view() != except;
    });
  }
  std::vector<Alert> alerts;
  int64_t bars = 0, clock_closed = 0, stale = 0;  // published bars
};

// A core with the services attached, fed like `aftershock replay` feeds it.
struct Run {
  explicit Run(const std::string& toml, bool stale_check_every_symbol = false)
      : config(ParseConfigOrDie(toml)) {
    auto c = IngestCore::Create(config, &sink, &clock);
    REQUIRE(c.ok());
    core = *std::move(c);
    ServiceOptions so;
    so.mode = RefitMode::kReplay;
    so.listener = &rec;
    so.stale_check_every_symbol = stale_check_every_symbol;
    auto s = EngineServices::Attach(core.get(), config, so);
    INFO(s.status().ToString());
    REQUIRE(s.ok());
    services = *std::move(s);
    core->AddObserver(&rec);
  }
  // The event-time clock of `replay`: a sweep before a tick once 100 ms
  // (grace / 2) passed since the last one, then the tick.
  void Feed(std::vector<Tick> ticks) {
    std::stable_sort(ticks.begin(), ticks.end(),
                     [](const Tick& a, const Tick& b) { return a.t_ns < b.t_ns; });
    for (const Tick& t : ticks) {
      if (t.t_ns >= next_sweep) {
        Clock(t.t_ns);
        next_sweep = t.t_ns + 100 * 1000 * 1000;
      }
      core->OnTick(t);
    }
  }
  void Clock(int64_t now) {
    clock.Set(now);
    core->OnClock(now);
  }
  EngineConfig config;
  CollectingSink sink;
  ManualClock clock{0};
  std::unique_ptr<IngestCore> core;
  std::unique_ptr<EngineServices> services;
  Recorder rec;
  int64_t next_sweep = 0;
};

// A busy name that keeps the event-time clock moving (a tick every 2 s).
void AddClockName(std::vector<Tick>* ticks, int first, int last) {
  AddPath(
      ticks, "CLOCK.P", first, last, 1, [](int d) { return Every(d, 2 * kSec, 0); },
      [](int64_t) { return 0.01 / std::sqrt(30.0); });
}

TEST_CASE("the services report the coordinator's bytes per symbol, 0 without refits",
          "[services]") {
  Run off(Config());
  CHECK(off.services->refit_bytes_per_symbol() == 0);
  const auto with_window = [](int window) {
    return "[bars]\ninterval = \"1m\"\n[refit]\nevery_bars = 100\nmin_bars = 200\nwindow = " +
           std::to_string(window) + "\n";
  };
  Run small(with_window(500)), large(with_window(2000));
  const size_t s = small.services->refit_bytes_per_symbol();
  const size_t l = large.services->refit_bytes_per_symbol();
  // The window's 8 bytes a bar is the difference; P5 bounds the whole.
  CHECK(l - s == 1500 * sizeof(double));
  CHECK(l > 2000 * sizeof(double));
  CHECK(l <= 40 * 1024);
}

TEST_CASE("a large return on a clock-closed one-minute bar raises a shock alert",
          "[services][alerts]") {
  Run run(Config());
  std::vector<Tick> ticks;
  // A tick every 10 s, 1 % per bar, for three sessions; at 11:00:15 local on
  // day 1 one tick jumps 8 %.
  const int64_t jump_at = Open(1) + 3 * 60 * kMin + 15 * kSec;
  AddPath(
      &ticks, "ALDER.P", 0, 2, 11, [](int d) { return Every(d, 10 * kSec, 5 * kSec); },
      [](int64_t) { return 0.01 / std::sqrt(6.0); });
  for (Tick& t : ticks) {
    if (t.t_ns >= jump_at) t.value *= std::exp(0.08);
  }
  run.Feed(ticks);
  run.core->CloseAllOpenBars();
  // Almost every bar is closed by the clock (the symbol's next tick comes
  // 5 s into the next minute, after the 200 ms grace).
  CHECK(run.rec.bars > 3 * 500);
  CHECK(run.rec.clock_closed >= run.rec.bars - 3);
  CHECK(run.rec.stale == 0);  // a tick in every minute: no silent interval
  const auto shocks = run.rec.Of("ALDER.P", AlertRule::kShock);
  REQUIRE(shocks.size() == 1);
  CHECK(shocks[0].t_ns == Open(1) + 3 * 60 * kMin + kMin);  // the 11:00 bar's end
  CHECK(shocks[0].severity == Severity::kCritical);
  CHECK(shocks[0].value > 6);
}

// Feeds 1 % per bar for two sessions, then sqrt(3) % from the third session on,
// and returns the name's high-regime alerts and the change time.
std::vector<Alert> RegimeAlertsOfTripledVariance(const std::string& toml, int64_t* change) {
  Run run(toml);
  std::vector<Tick> ticks;
  *change = Open(2);
  const int64_t c = *change;
  AddPath(
      &ticks, "BIRCH.P", 0, 4, 21, [](int d) { return Every(d, 10 * kSec, 3 * kSec); },
      [c](int64_t t) { return (t < c ? 0.01 : 0.01 * std::sqrt(3.0)) / std::sqrt(6.0); });
  run.Feed(ticks);
  return run.rec.Of("BIRCH.P", AlertRule::kRegimeHigh);
}

TEST_CASE("a regime alert fires when a name's variance triples (time bars, sessions)",
          "[services][alerts]") {
  SECTION("a constant-variance model: the model never catches up, defaults") {
    // The same fixed model's level, 1 % per bar, without the GARCH recursion.
    const std::string toml = R"(
[model]
mean = "constant"
variance = "flat"
innovations = "gaussian"
[model.params]
mu = 0.0002
omega = 1e-4
[refit]
every_bars = 0
[bars]
interval = "1m"
grace = "200ms"
session = { start = "08:00", end = "16:30", timezone_offset_minutes = 60 }
)";
    int64_t change = 0;
    const auto high = RegimeAlertsOfTripledVariance(toml, &change);
    REQUIRE_FALSE(high.empty());
    const Alert& entry = high[0];
    CHECK(entry.kind == AlertKind::kRegime);
    CHECK(entry.severity == Severity::kWarn);
    CHECK(entry.t_ns > change);  // no false entry before the change
    const double bars_after = static_cast<double>(entry.t_ns - change) / kMin;
    INFO("regime entered " << bars_after << " bars after the change");
    CHECK(bars_after <= 60);
    // The model keeps forecasting the old level, so the regime does not end.
    for (const Alert& a : high) {
      INFO(a.message);
      CHECK(a.kind == AlertKind::kRegime);
    }
    CHECK(high.size() == 1);
  }
  SECTION("a GARCH model absorbs the change; a lower threshold still sees it") {
    // GARCH(1,1) with beta 0.9 moves its forecast most of the way within about
    // ten bars, which leaves little evidence (README, "The volatility regime
    // detector"): the defaults stay silent, 5 nats flag it.
    int64_t change = 0;
    const auto quiet = RegimeAlertsOfTripledVariance(Config(), &change);
    CHECK(quiet.empty());
    const auto high = RegimeAlertsOfTripledVariance(Config("regime_enter_evidence = 5\n"), &change);
    REQUIRE_FALSE(high.empty());
    CHECK(high[0].t_ns > change);
    const double bars_after = static_cast<double>(high[0].t_ns - change) / kMin;
    INFO("regime entered " << bars_after << " bars after the change");
    CHECK(bars_after <= 510);
  }
}

// Ticks for the stale-feed scenarios, Monday to Friday.
std::vector<Tick> StaleUniverse() {
  std::vector<Tick> ticks;
  AddClockName(&ticks, 0, 4);
  // Each name moves 1 % per bar (the model's unconditional level).
  const auto two_a_minute = [](int64_t) { return 0.01 / std::sqrt(2.0); };
  // Every 30 s exactly (the case of the report).
  AddPath(
      &ticks, "TERN.P", 0, 4, 2, [](int d) { return Every(d, 30 * kSec, 7 * kSec); }, two_a_minute);
  // Random (exponential) gaps with a mean of 30 s: gaps above 60 s are common.
  AddPath(
      &ticks, "WREN.P", 0, 4, 3,
      [](int d) {
        std::mt19937_64 rng(100 + d);
        std::exponential_distribution<double> gap(1.0 / 30.0);
        std::vector<int64_t> v;
        for (double s = gap(rng); s < 510 * 60; s += gap(rng)) {
          v.push_back(Open(d) + static_cast<int64_t>(s * kSec));
        }
        return v;
      },
      two_a_minute);
  // Every 10 s, silent from 10:00 to 10:10 local on Tuesday.
  AddPath(
      &ticks, "CEDAR.P", 0, 4, 4,
      [](int d) {
        std::vector<int64_t> v;
        for (int64_t t : Every(d, 10 * kSec, 1 * kSec)) {
          const int64_t since_open = t - Open(d);
          if (d == 1 && since_open >= 120 * kMin && since_open < 130 * kMin) continue;
          v.push_back(t);
        }
        return v;
      },
      [](int64_t) { return 0.01 / std::sqrt(6.0); });
  return ticks;
}

// The Monday after the stale universe's week (day 7): every name but WREN.P.
std::vector<Tick> MondayWithoutWren() {
  std::vector<Tick> monday;
  AddClockName(&monday, 7, 7);
  AddPath(
      &monday, "TERN.P", 7, 7, 5, [](int d) { return Every(d, 30 * kSec, 20 * kSec); },
      [](int64_t) { return 0.01 / std::sqrt(2.0); });
  AddPath(
      &monday, "CEDAR.P", 7, 7, 6, [](int d) { return Every(d, 10 * kSec, 4 * kSec); },
      [](int64_t) { return 0.01 / std::sqrt(6.0); });
  return monday;
}

TEST_CASE(
    "stale feed on time bars over sessions: no storm, no alert at the open, one real "
    "silence alerted once",
    "[services][alerts]") {
  Run run(Config());  // stale_seconds = 60, stale_gap_multiple = 10 (defaults)
  const std::vector<Tick> ticks = StaleUniverse();
  run.Feed(ticks);
  // Over five sessions with overnight gaps the 30 s name never goes stale,
  // and no name warns at an open.
  CHECK(run.rec.Of("TERN.P", AlertRule::kStale).empty());
  CHECK(run.rec.Of("CLOCK.P", AlertRule::kStale).empty());
  // Random arrivals with a 30 s mean: a gap beyond ten times the mean is rare
  // (e^-10 per gap for exponential gaps) but real. In these 5,125 ticks two
  // gaps (279 s and 249 s, against learned means of 25.7 s and 23.6 s) are
  // reported, each once with its resume; the fixed 60 s threshold gives 671
  // (next test).
  const auto wren = run.rec.Of("WREN.P", AlertRule::kStale);
  CHECK(wren.size() <= 2);
  CHECK(run.rec.Of("WREN.P", AlertRule::kTicksResumed).size() == wren.size());
  for (const Alert& a : wren) CHECK(a.value > 200);
  // CEDAR.P's ten silent minutes: one alert, one resume.
  const auto stale = run.rec.Of("CEDAR.P", AlertRule::kStale);
  const auto resumed = run.rec.Of("CEDAR.P", AlertRule::kTicksResumed);
  REQUIRE(stale.size() == 1);
  REQUIRE(resumed.size() == 1);
  int64_t last_before = 0, first_after = 0;
  for (const Tick& t : ticks) {
    if (t.symbol.view() != "CEDAR.P") continue;
    if (t.t_ns < Open(1) + 120 * kMin) last_before = t.t_ns;
    if (first_after == 0 && t.t_ns >= Open(1) + 130 * kMin) first_after = t.t_ns;
  }
  // Its typical gap is 10 s, so the threshold is max(60, 10 x 10) = 100 s; the
  // clock sweeps every 2 s here.
  CHECK(stale[0].threshold == Approx(100).epsilon(1e-3));
  CHECK(stale[0].value >= 100);
  CHECK(stale[0].value < 102.5);
  CHECK(stale[0].t_ns == last_before + static_cast<int64_t>(stale[0].value * kSec));
  CHECK(resumed[0].value == Approx(static_cast<double>(first_after - last_before) / kSec));
  CHECK(resumed[0].t_ns >= first_after);
  CHECK(resumed[0].t_ns - first_after <= 2 * kSec);
  CHECK(run.rec.FeedAlerts("WREN.P") == 2);  // no other feed alert: the two above
  CHECK(std::string(resumed[0].message) ==
        "CEDAR.P: ticks resumed after 610 s without data; "
        "no action needed.");

  // The weekend: the live clock runs through Saturday's session hours with no
  // tick anywhere; nothing is stale.
  const int64_t before_weekend = run.rec.FeedAlerts();
  for (int64_t t = Open(5) - kMin; t <= Open(5) + kSessionLength + kMin; t += 30 * kSec) {
    run.Clock(t);
  }
  CHECK(run.rec.FeedAlerts() == before_weekend);
  // Monday: every name but WREN.P ticks. None warns at the open; WREN.P, silent
  // while the feed is live, is stale once its in-session silence reaches its
  // threshold, the weekend and the night not counted.
  std::vector<Tick> monday = MondayWithoutWren();
  run.Feed(monday);
  REQUIRE(run.rec.FeedAlerts() == before_weekend + 1);
  Alert silent;
  for (const Alert& a : run.rec.alerts) {
    if (a.kind == AlertKind::kFeed) silent = a;
  }
  CHECK(silent.symbol.view() == "WREN.P");
  CHECK(silent.rule == AlertRule::kStale);
  CHECK(silent.threshold > 200);  // ten times its learned gap
  CHECK(silent.value >= silent.threshold);
  CHECK(silent.value < silent.threshold + 2.5);
  // Counted from Monday's first tick of the feed (CLOCK.P at the open).
  CHECK(silent.t_ns == Open(7) + static_cast<int64_t>(silent.value * kSec));
}

TEST_CASE("without the learned rate the random-gap name would be a stale storm",
          "[services][alerts]") {
  Run run(Config("stale_gap_multiple = 0\n"));
  run.Feed(StaleUniverse());
  const auto wren = run.rec.Of("WREN.P", AlertRule::kStale);
  INFO(wren.size() << " stale alerts for WREN.P with the fixed 60 s threshold");
  CHECK(wren.size() > 100);
  CHECK(run.rec.Of("WREN.P", AlertRule::kTicksResumed).size() == wren.size());
  // The regular 30 s name is fine either way, and nothing warns at an open.
  CHECK(run.rec.Of("TERN.P", AlertRule::kStale).empty());
  for (const Alert& a : wren) {
    const int64_t into_session = (a.t_ns - kOpenUtc) % kNanosPerDay;
    CHECK(into_session >= 60 * kSec);  // the floor, counted from the open
    CHECK(a.value < 600);              // measured from the last tick, never across a night
  }
}

// The stale check skips symbols that cannot alert yet (no message since their
// last check, due time not reached). Against checking every symbol on every
// clock tick: the same alerts, in the same order, with the same values, over
// five sessions, a weekend of clock ticks with no data, a Monday whose clock
// runs two minutes before a late tick (stamped before those checks) starts
// the feed, which moves the silence count's start back, and a symbol that
// joins on Monday and falls silent.
TEST_CASE("the stale check that skips quiet symbols sends the alerts of a check of all",
          "[services][alerts]") {
  std::vector<Tick> monday = MondayWithoutWren();
  AddPath(
      &monday, "NEWT.P", 7, 7, 7,
      [](int d) {
        std::vector<int64_t> v;
        for (int64_t t = Open(d) + 60 * kMin; t < Open(d) + 80 * kMin; t += 5 * kSec)
          v.push_back(t);
        return v;
      },
      [](int64_t) { return 0.01 / std::sqrt(12.0); });
  const int64_t start = Open(7) + 3 * kMin;
  monday.erase(
      std::remove_if(monday.begin(), monday.end(), [&](const Tick& t) { return t.t_ns < start; }),
      monday.end());
  for (const char* alerts : {"", "stale_gap_multiple = 0\n"}) {
    std::vector<std::vector<Alert>> out;
    for (const bool every : {true, false}) {
      Run run(Config(alerts), every);
      run.Feed(StaleUniverse());
      for (int64_t t = Open(5) - kMin; t <= Open(5) + kSessionLength + kMin; t += 30 * kSec) {
        run.Clock(t);
      }
      for (int64_t t = Open(7) - kMin; t <= Open(7) + 2 * kMin; t += 30 * kSec) run.Clock(t);
      run.core->OnTick(Price("TERN.P", Open(7) + 10 * kSec, 100.0));  // late: before the checks
      run.Feed(monday);
      out.push_back(run.rec.alerts);
    }
    INFO("config [alerts] " << alerts << ": " << out[0].size() << " alerts checking every symbol");
    REQUIRE(out[0].size() == out[1].size());
    for (size_t i = 0; i < out[0].size(); ++i) {
      const Alert& a = out[0][i];
      const Alert& b = out[1][i];
      INFO("alert " << i << ": " << a.message);
      CHECK(a.symbol.view() == b.symbol.view());
      CHECK(a.rule == b.rule);
      CHECK(a.t_ns == b.t_ns);
      CHECK(a.value == b.value);
      CHECK(a.threshold == b.threshold);
      CHECK(std::string(a.message) == std::string(b.message));
    }
    // The scenario exercises what the skip must get right: Monday's silent
    // WREN.P is counted from the late tick, and the newcomer goes stale.
    int monday_wren = 0, newt = 0;
    for (const Alert& a : out[1]) {
      if (a.rule != AlertRule::kStale || a.t_ns < Open(7)) continue;
      if (a.symbol.view() == "WREN.P") {
        ++monday_wren;
        if (monday_wren == 1) {
          CHECK(a.t_ns - static_cast<int64_t>(std::llround(a.value * kSec)) == Open(7) + 10 * kSec);
        }
      }
      newt += a.symbol.view() == "NEWT.P";
    }
    CHECK(monday_wren >= 1);
    CHECK(newt == 1);
  }
}

TEST_CASE("track mode publishes tracking records on m.<symbol>", "[services][tracking]") {
  Run run(std::string(testing::kFixedModelToml) +
          "[tracking]\nmode = \"track\"\nburn_in_bars = 20\nreport_every_bars = 50\n");
  std::vector<Tick> ticks;
  std::mt19937_64 rng(7);
  std::normal_distribution<double> norm(0.0, 0.01);
  for (int i = 0; i < 200; ++i) {  // the last record is at the last bar
    Tick t;
    t.symbol.assign("ASPEN.T");
    t.t_ns = int64_t{1772443800000000000} + i * kSec;
    t.kind = Tick::kReturn;
    t.value = norm(rng);
    ticks.push_back(t);
  }
  run.Feed(ticks);
  std::vector<nlohmann::json> records;
  for (const auto& m : run.sink.messages) {
    if (m.topic != "m.ASPEN.T") continue;
    records.push_back(nlohmann::json::parse(m.body));
  }
  // Bars 50, 100, 150 and 200 after the anchor (the first bar).
  REQUIRE(records.size() == 4);
  const nlohmann::json& j = records.back();
  CHECK(j["outcome"] == "tracking");
  CHECK(j["mode"] == "track");
  CHECK(j["version"] == 1);
  CHECK(j["bars_since_refit"] == 200);
  CHECK(j["stepping"] == true);
  REQUIRE(j["estimates"].size() == 3);
  const char* names[] = {"omega", "alpha_1", "beta_1"};
  const RecursiveTracker& t = run.core->tracker(0);
  for (int i = 0; i < 3; ++i) {
    const nlohmann::json& p = j["estimates"][i];
    CHECK(p["name"] == names[i]);
    CHECK(p["value"].get<double>() == t.coefficient(i));
    CHECK(p["refit"].get<double>() == Approx(run.config.model.params.values[i + 1]).epsilon(1e-12));
    CHECK(p["drift"].get<double>() == t.coefficient(i) - t.anchor_coefficient(i));
  }
  CHECK(j["resets"] == 0);
  CHECK(j["level_ratio"].get<double>() == t.level_ratio());
}

// The live engine spreads a clock tick's bar closes over gaps between input
// batches (IngestCore::StartClock/ContinueClock, Engine's clock slices). On
// the path users run — price ticks, one-minute bars over sessions with
// overnight gaps, warm-up, refits applied at bar closes, seasonality, alerts —
// every symbol must get the same bars and the same messages as with one whole
// clock tick followed by the same input: with ticks of symbols the clock has
// not reached yet, ticks arriving late (event time before a bar the clock has
// due), and a symbol that joins during a tick. What symbols share (the
// seasonal pool, group models) sees other symbols' bars in the order they
// were handled, so with those on only the bars are compared.
void RunWholeAndSliced(const std::string& toml, bool same_bytes) {
  constexpr int kSymbols = 24;
  constexpr int64_t kSession = 150 * kMin;
  std::vector<Tick> ticks;
  for (int s = 0; s < kSymbols; ++s) {
    // The last symbol joins on the second day.
    const int first = s == kSymbols - 1 ? 1 : 0;
    const int64_t step = (7 + s % 5) * kSec, offset = (s * 1300 % 6000) * 1000 * 1000;
    AddPath(
        &ticks, "TERN" + std::to_string(s) + ".P", first, 3, 500 + s,
        [&](int d) {
          std::vector<int64_t> v;
          for (int64_t t = Open(d) + offset; t < Open(d) + kSession; t += step) v.push_back(t);
          return v;
        },
        [s](int64_t) { return 0.001 * (1 + s % 3); });
  }
  std::stable_sort(ticks.begin(), ticks.end(),
                   [](const Tick& a, const Tick& b) { return a.t_ns < b.t_ns; });
  // Every 37th tick arrives late: its event time is 1.5 s earlier than its
  // place in the feed, inside a bar the clock may already have due.
  constexpr int64_t kLate = 1500 * 1000 * 1000;
  for (size_t k = 0; k < ticks.size(); k += 37) ticks[k].t_ns -= kLate;
  const auto time_of = [&](size_t k) { return ticks[k].t_ns + (k % 37 == 0 ? kLate : 0); };

  // Whole: the event-time clock of `replay` (a tick once 100 ms passed), then the tick.
  Run whole(toml);
  int64_t next = 0;
  for (size_t k = 0; k < ticks.size(); ++k) {
    if (time_of(k) >= next) {
      whole.Clock(time_of(k));
      next = time_of(k) + 100 * 1000 * 1000;
    }
    whole.core->OnTick(ticks[k]);
  }
  whole.core->CloseAllOpenBars();

  // Sliced: the same clock times, but between two ticks of the feed the
  // clock closes at most 3 bars and visits at most 5 symbols.
  Run sliced(toml);
  next = 0;
  int64_t during = 0;
  for (size_t k = 0; k < ticks.size(); ++k) {
    if (time_of(k) >= next) {
      sliced.clock.Set(time_of(k));
      sliced.core->StartClock(time_of(k));
      next = time_of(k) + 100 * 1000 * 1000;
    }
    sliced.core->ContinueClock(3, 5);
    during += sliced.core->clock_under_way();
    sliced.core->OnTick(ticks[k]);
  }
  sliced.core->CloseAllOpenBars();
  CHECK_FALSE(sliced.core->clock_under_way());

  // The slices did interleave with input, and the run exercised what matters.
  CHECK(during > 1000);
  CHECK(whole.core->counters().bars_clock_closed > 2000);
  CHECK(whole.core->counters().rejects.Total() > 100);  // the late ticks
  const RefitStats rs = whole.services->refit_stats();
  CHECK(rs.swapped > 2 * kSymbols);
  std::map<std::string, std::vector<std::string>> a, b;
  for (const auto& m : whole.sink.messages) a[m.topic].push_back(m.body);
  for (const auto& m : sliced.sink.messages) b[m.topic].push_back(m.body);
  CHECK(a.count("u.TERN23.P") == 1);
  CHECK(a.count("m.TERN0.P") == 1);
  CHECK(whole.core->counters().bars == sliced.core->counters().bars);
  CHECK(whole.core->counters().bars_clock_closed == sliced.core->counters().bars_clock_closed);
  CHECK(whole.core->counters().rejects.Total() == sliced.core->counters().rejects.Total());
  CHECK(whole.core->counters().updates_out == sliced.core->counters().updates_out);
  for (int s = 0; s < kSymbols; ++s) {
    INFO("symbol " << s);
    CHECK(whole.core->symbol_bars(s) == sliced.core->symbol_bars(s));
  }
  if (!same_bytes) {
    CHECK(rs.pooled > 0);  // shared state did its part
    return;
  }
  CHECK(rs.pooled == 0);
  REQUIRE(a.size() == b.size());
  for (const auto& [topic, bodies] : a) {
    INFO(topic);
    REQUIRE(b.count(topic) == 1);
    REQUIRE(bodies.size() == b[topic].size());
    for (size_t k = 0; k < bodies.size(); ++k) REQUIRE(bodies[k] == b[topic][k]);
  }
  CHECK(whole.sink.messages.size() == sliced.sink.messages.size());
}

TEST_CASE("a clock tick spread over input gives every symbol the bars and bytes of a whole tick",
          "[services][clock]") {
  const auto toml = [](bool shared) {
    return std::string(R"(
[bars]
interval = "1m"
grace = "200ms"
session = { start = "08:00", end = "10:30", timezone_offset_minutes = 60 }
[warmup]
start_bars = 8
[refit]
every_bars = 30
window = 200
min_bars = 50
reidentify_every = 0
holdout_bars = 20
apply_lag_bars = 3
group_models = )") +
           (shared ? "true" : "false") + R"(
[seasonality]
enabled = true
min_sessions = 2
prior_sessions = )" +
           (shared ? "5" : "0") + R"(
[alerts]
shock_z = 2.5
)";
  };
  SECTION("per-symbol state only: every topic's bytes") { RunWholeAndSliced(toml(false), true); }
  SECTION("with the seasonal pool and group models: every symbol's bars") {
    RunWholeAndSliced(toml(true), false);
  }
}

}  // namespace
}  // namespace aftershock
