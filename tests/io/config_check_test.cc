// Tests of ConfigWarnings (include/aftershock/config_check.h): each check
// fires on a configuration or run that contradicts itself and stays quiet on
// the shipped configurations. Expected numbers follow from the definitions:
// AutoPeriodsPerYear = 252 * bars per session (engine_config.h).
#include "aftershock/config_check.h"

#include <catch2/catch.hpp>
#include <string>

#include "absl/strings/str_join.h"

namespace aftershock {
namespace {

EngineConfig Parse(const std::string& toml) {
  auto c = ParseEngineConfig(toml, "c.toml");
  INFO((c.ok() ? "" : std::string(c.status().message())));
  REQUIRE(c.ok());
  return *c;
}

bool Has(const std::vector<std::string>& ws, const std::string& needle) {
  for (const auto& w : ws) {
    if (w.find(needle) != std::string::npos) return true;
  }
  return false;
}

constexpr const char* kSession =
    "[bars]\ninterval = \"1m\"\nsession = { start = \"08:00\", end = \"16:30\", "
    "timezone_offset_minutes = 60 }\n";

TEST_CASE("the defaults and the shipped examples raise no warning", "[config_check]") {
  CHECK(ConfigWarnings(Parse("")).empty());
  auto e =
      LoadEngineConfigFile(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/example-intraday.toml");
  REQUIRE(e.ok());
  const auto ws = ConfigWarnings(*e);
  INFO(absl::StrJoin(ws, "\n"));
  CHECK(ws.empty());
}

TEST_CASE("annualization against the bar interval", "[config_check]") {
  const auto ws =
      ConfigWarnings(Parse(std::string(kSession) + "[outputs]\nperiods_per_year = 252\n"));
  REQUIRE(ws.size() == 1);
  // sqrt(128520 / 252) = 22.58
  CHECK(ws[0] ==
        "[outputs] periods_per_year = 252, but [bars] interval \"1m\" with a 08:00-16:30 session "
        "gives 128520 bars a year (252 days; \"auto\"): vol_ann and the sizing scale are off by a "
        "factor 22.6");
  // Within a factor 1.5 of auto: no warning (98280 vs 128520 is 1.31).
  CHECK(ConfigWarnings(Parse(std::string(kSession) + "[outputs]\nperiods_per_year = 98280\n"))
            .empty());
  // "0s" bars with an explicit number: the feed's bars are the user's business...
  CHECK(ConfigWarnings(Parse("[outputs]\nperiods_per_year = 98280\n")).empty());
  // ...unless the input shows ticks a minute apart annualized as days.
  RunFacts f;
  f.present = true;
  f.from_file = true;
  f.ticks_accepted = 2 * 390;
  f.symbols = 2;
  f.max_symbol_bars = 390;
  f.symbols_fitted = 2;
  f.first_tick_ns = 0;
  f.last_tick_ns = 389 * 60 * kNanosPerSecond;
  const auto tick_bars = ConfigWarnings(Parse(""), f);
  INFO(absl::StrJoin(tick_bars, "\n"));
  REQUIRE(tick_bars.size() == 1);
  CHECK(tick_bars[0].find("a symbol's ticks come about every 59.8 s, but periods_per_year = 252 "
                          "annualizes each bar as a day") != std::string::npos);
}

TEST_CASE("time bars without a session on an input with nights", "[config_check]") {
  // Six 6.5 h sessions of 1m bars over Monday..Monday: 2340 bars in 7.27 days.
  RunFacts f;
  f.present = true;
  f.from_file = true;
  f.ticks_accepted = 12 * 2340;
  f.symbols = 12;
  f.max_symbol_bars = 2340;
  f.symbols_fitted = 12;
  f.first_tick_ns = 0;
  f.last_tick_ns = 7 * kNanosPerDay + 390 * 60 * kNanosPerSecond;
  const auto ws = ConfigWarnings(Parse("[bars]\ninterval = \"1m\"\n"), f);
  INFO(absl::StrJoin(ws, "\n"));
  REQUIRE(ws.size() == 1);
  // 2340 of 10470 possible bars = 22 %.
  CHECK(ws[0] ==
        "the input spans 7.3 days but fills only 22% of its 1m bars (nights, weekends?), and "
        "without a [bars] session periods_per_year \"auto\" = 362880 counts 24-hour days: set "
        "[bars] session");
  // With the session, nothing.
  CHECK(ConfigWarnings(Parse(kSession), f).empty());
}

TEST_CASE("refits off, min_bars beyond a session, a binary feed", "[config_check]") {
  auto off = ConfigWarnings(Parse("[refit]\nevery_bars = 0\n"));
  REQUIRE(off.size() == 1);
  CHECK(off[0].find("refits are off") == 0);
  CHECK(off[0].find("EWMA warm-up (version 0) for good") != std::string::npos);
  auto long_fit = ConfigWarnings(Parse(std::string(kSession) + "[refit]\nmin_bars = 1020\n"));
  REQUIRE(long_fit.size() == 1);
  CHECK(long_fit[0] ==
        "[refit] min_bars = 1020 is longer than one session (510 bars of 1m): no model before "
        "session 3");
  auto warm = ConfigWarnings(Parse(std::string(kSession) + "[warmup]\nmin_bars = 600\n"));
  CHECK(Has(warm, "[warmup] min_bars = 600 is longer than one session (510 bars)"));
  auto binary = ConfigWarnings(Parse("[feed]\nencoding = \"binary\"\n"));
  REQUIRE(binary.size() == 1);
  CHECK(binary[0].find("[feed] encoding = \"binary\": the producer must send binary frames") == 0);
  RunFacts file;
  file.present = true;
  file.from_file = true;
  CHECK(ConfigWarnings(Parse("[feed]\nencoding = \"binary\"\n"), file)[0].find(
            "replay reads the tick file and ignores it") != std::string::npos);
}

TEST_CASE("facts of a run: most inputs rejected, no fitted model, too few bars", "[config_check]") {
  RunFacts f;
  f.present = true;
  f.ticks_accepted = 30;
  f.rejects.Add(RejectReason::kOutsideSession, 960);
  f.rejects.Add(RejectReason::kTooOld, 10);
  f.symbols = 12;
  f.max_symbol_bars = 3;
  f.symbols_fitted = 0;
  const auto ws = ConfigWarnings(Parse(kSession), f);
  INFO(absl::StrJoin(ws, "\n"));
  CHECK(Has(ws, "[refit] min_bars = 200, but no symbol had more than 3 bars in this input"));
  CHECK(Has(ws, "[warmup] min_bars = 2, but no symbol had more than 3 bars") == false);
  CHECK(Has(ws,
            "most inputs were rejected: 970 of 1000 (97%; outside_session 960, too_old 10): "
            "check [bars] session and timezone_offset_minutes against the ticks' times"));
  CHECK(Has(ws, "no symbol got a fitted model (all 12 ended on version 0 or the EWMA fallback)"));
  // A healthy run: nothing.
  RunFacts ok = f;
  ok.rejects = RejectCounters();
  ok.ticks_accepted = 12 * 1020;
  ok.max_symbol_bars = 1020;
  ok.symbols_fitted = 11;
  CHECK(ConfigWarnings(Parse(kSession), ok).empty());
  // Half rejected is not "most".
  RunFacts half = ok;
  half.ticks_accepted = 500;
  half.rejects.Add(RejectReason::kMalformedJson, 500);
  CHECK(ConfigWarnings(Parse(kSession), half).empty());
}

TEST_CASE("group models in the NATS mode pool within a partition", "[config_check]") {
  const auto ws = ConfigWarnings(Parse("[feed]\nsource = \"nats\"\n"));
  REQUIRE(ws.size() == 1);
  CHECK(ws[0].find("[refit] group_models with [feed] source = \"nats\"") == 0);
  CHECK(
      ConfigWarnings(Parse("[feed]\nsource = \"nats\"\n[refit]\ngroup_models = false\n")).empty());
  CHECK(ConfigWarnings(Parse("[refit]\ngroup_models = true\n")).empty());  // one engine
}

}  // namespace
}  // namespace aftershock
