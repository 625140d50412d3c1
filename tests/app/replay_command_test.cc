// `aftershock replay` and `aftershock run` command behaviour (the built binary).
#include <arpa/inet.h>
#include <netinet/in.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <catch2/catch.hpp>
#include <chrono>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <random>
#include <sstream>
#include <thread>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/strings/str_split.h"
#include "absl/time/time.h"
#include "aftershock/evaluation.h"
#include "aftershock/tick_file.h"
#include "aftershock/update_codec.h"
#include "streaming/engine_test_util.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::HttpGet;
using testing::RunCli;
constexpr int64_t kT0 = 1772443800000000000;

std::string ReturnCsv(const std::vector<std::string>& syms, int n,
                      std::vector<std::vector<double>>* rets) {
  std::string csv = "symbol,time,return\n";
  for (size_t s = 0; s < syms.size(); ++s) rets->push_back(testing::TestReturns(n, 70 + s));
  for (int i = 0; i < n; ++i) {
    for (size_t s = 0; s < syms.size(); ++s) {
      char buf[64];
      std::snprintf(buf, sizeof(buf), "%.17g", (*rets)[s][i]);
      absl::StrAppend(&csv, syms[s], ",", kT0 + int64_t{i} * 1000000000, ",", buf, "\n");
    }
  }
  return csv;
}

std::vector<std::string> Lines(const std::string& text) {
  std::vector<std::string> out = absl::StrSplit(text, '\n', absl::SkipEmpty());
  return out;
}

TEST_CASE("replay: one update line per CSV row, equal to the offline filter", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_rows");
  const std::vector<std::string> syms = {"QUAIL.A", "RAVEN.B"};
  std::vector<std::vector<double>> rets;
  const std::string input = testing::WriteFile(dir + "/ticks.csv", ReturnCsv(syms, 500, &rets));
  const std::string cfg = testing::WriteFile(dir + "/c.toml", testing::kFixedModelToml);
  const auto r =
      RunCli({"replay", "--config", cfg, "--input", input, "--output", dir + "/u.jsonl"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  // The summary line: bars, rejects, seconds and bars/s.
  CHECK(r.err.find("replay: 1000 ticks, 1000 bars, 1000 updates, 0 rejects, 2 symbols") !=
        std::string::npos);
  CHECK(r.err.find(" bars/s") != std::string::npos);
  const auto lines = Lines(testing::ReadFileOrDie(dir + "/u.jsonl"));
  REQUIRE(lines.size() == 1000);
  const EngineConfig config = testing::ParseConfigOrDie(testing::kFixedModelToml);
  auto model = FilterModel::Create(config.model.params, testing::OutputsOf(config), 1);
  REQUIRE(model.ok());
  // Reference: offline FilterSeries (online_filter.h) of the same model.
  const auto ref = FilterSeries(*model, 0.0, rets[1]);
  int k = 0;
  for (const auto& line : lines) {
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(line, &u).ok());
    if (u.symbol.view() != "RAVEN.B") continue;
    CHECK(testing::RelDiff(u.var, ref[k].var) < 1e-12);
    CHECK(testing::RelDiff(u.z, ref[k].z) < 1e-12);
    ++k;
  }
  CHECK(k == 500);
}

TEST_CASE("replay output is byte-identical on repeated runs (time bars, prices)", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_repeat");
  // Irregular price ticks for three symbols, 1 s bars: exercises aggregation,
  // clock closes by event time and the warm-up EWMA (no [model.params]).
  std::string csv = "symbol,time,price\n";
  std::mt19937_64 rng(5);
  std::uniform_int_distribution<int> gap(1, 900);
  std::normal_distribution<double> step(0, 0.001);
  double p[3] = {100, 50, 20};
  int64_t t = kT0;
  for (int i = 0; i < 6000; ++i) {
    t += int64_t{gap(rng)} * 1000000;
    const int s = i % 3 == 0 ? 0 : (i % 7 == 0 ? 2 : 1);
    p[s] *= std::exp(step(rng));
    char buf[64];
    std::snprintf(buf, sizeof(buf), "%.10f", p[s]);
    absl::StrAppend(&csv, s == 0 ? "SWIFT.C" : (s == 1 ? "TERN.D" : "URIA.E"), ",", t, ",", buf,
                    "\n");
  }
  const std::string input = testing::WriteFile(dir + "/ticks.csv", csv);
  // Refits off (the old default): every update stays on the warm-up EWMA.
  const std::string cfg =
      testing::WriteFile(dir + "/c.toml", "[bars]\ninterval = \"1s\"\n[refit]\nevery_bars = 0\n");
  const auto a =
      RunCli({"replay", "--config", cfg, "--input", input, "--output", dir + "/a.jsonl"});
  const auto b =
      RunCli({"replay", "--config", cfg, "--input", input, "--output", dir + "/b.jsonl"});
  INFO(a.err << b.err);
  REQUIRE(a.exit_code == 0);
  REQUIRE(b.exit_code == 0);
  const std::string ta = testing::ReadFileOrDie(dir + "/a.jsonl");
  CHECK(ta.size() > 10000);
  CHECK(ta == testing::ReadFileOrDie(dir + "/b.jsonl"));
  // Warm-up flags on every update; bars after one-second intervals in which
  // their symbol had no tick are flagged stale.
  const auto lines = Lines(ta);
  int stale = 0;
  for (const auto& line : lines) {
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(line, &u).ok());
    CHECK((u.flags & kFlagWarmup) != 0);
    stale += (u.flags & kFlagStale) != 0;
  }
  CHECK(stale > 0);
}

// The shipped intraday example and the simulator agree out of the box: same
// session, same encoding, a first model inside the first session.
TEST_CASE("simulate output replays with config/example-intraday.toml: no rejects, models, alerts",
          "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_example_intraday");
  // Two sessions of 510 one-minute bars; SKJOLD.GAS's variance x9 from bar
  // 700 (2026-03-03 11:10 local, 10:10Z).
  const auto sim = RunCli({"simulate", "--session", "08:00-16:30", "--utc-offset", "60",
                           "--sessions", "2", "--intraday-shape", "u", "--regime",
                           "SKJOLD.GAS@700:9", "--output", dir + "/ticks.csv", "--quiet"});
  INFO(sim.err);
  REQUIRE(sim.exit_code == 0);
  const auto r = RunCli({"replay", "--config",
                         std::string(AFTERSHOCK_SOURCE_DIR) + "/config/example-intraday.toml",
                         "--input", dir + "/ticks.csv", "--output", dir + "/u.jsonl", "--alerts",
                         dir + "/a.jsonl", "--models", dir + "/m.jsonl"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.err.find("replay: 12240 ticks, 12240 bars, ") != std::string::npos);
  CHECK(r.err.find(", 0 rejects, 12 symbols") != std::string::npos);
  CHECK(r.err.find("warning") == std::string::npos);  // nothing contradicts
  // The last update of each symbol: version 1 is the configured starting
  // model, so version >= 2 means a refit was swapped in.
  std::map<std::string, uint32_t> last_version;
  for (const std::string& line : Lines(testing::ReadFileOrDie(dir + "/u.jsonl"))) {
    const auto j = nlohmann::json::parse(line);
    last_version[j["s"].get<std::string>()] = j["ver"].get<uint32_t>();
  }
  REQUIRE(last_version.size() == 12);
  int refitted = 0;
  for (const auto& [sym, ver] : last_version) refitted += ver >= 2 ? 1 : 0;
  CHECK(refitted >= 10);
  // Alerts work: shocks, and the variance jump is alerted within 60 bars. A
  // x9 jump of omega ramps up, and the refitted GARCH filter follows it,
  // over-forecasting between the outliers (most z^2 after the jump are below
  // 1), so what flags it is the shock rule; the regime rule reads z and needs
  // a persistent excess (README, "The volatility regime detector").
  const int64_t jump = *ParseTickTime("2026-03-03T10:10:00Z");
  int shocks = 0;
  int64_t first_alert = -1;
  for (const std::string& line : Lines(testing::ReadFileOrDie(dir + "/a.jsonl"))) {
    const auto j = nlohmann::json::parse(line);
    if (j["kind"] == "shock") ++shocks;
    const bool flags_jump =
        j["kind"] == "shock" || (j["kind"] == "regime" && j["rule"] == "regime_high");
    if (j["s"] == "SKJOLD.GAS" && flags_jump && j["t"].get<int64_t>() >= jump && first_alert < 0) {
      first_alert = j["t"].get<int64_t>();
    }
  }
  CHECK(shocks >= 1);
  REQUIRE(first_alert >= 0);
  CHECK(first_alert - jump <= 60 * 60 * kNanosPerSecond);
}

TEST_CASE("replay --exceptions lists every VaR exception the backtest counts; --output optional",
          "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_exceptions");
  const auto sim = RunCli({"simulate", "--symbols", "3", "--bars", "1500", "--seed", "9", "--field",
                           "return", "--output", dir + "/ticks.csv", "--quiet"});
  REQUIRE(sim.exit_code == 0);
  const std::string cfg = testing::WriteFile(dir + "/c.toml", "[refit]\nevery_bars = 250\n");
  // Neither updates nor any other output: a usage error.
  auto none = RunCli({"replay", "--config", cfg, "--input", dir + "/ticks.csv"});
  CHECK(none.exit_code == 2);
  CHECK(none.err.find("give --output for the updates, or at least one of --csv, --report") !=
        std::string::npos);
  const auto r = RunCli({"replay", "--config", cfg, "--input", dir + "/ticks.csv", "--summary-json",
                         dir + "/s.json", "--exceptions", dir + "/x.csv", "--report",
                         dir + "/r.html", "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const auto summary = nlohmann::json::parse(testing::ReadFileOrDie(dir + "/s.json"));
  const std::string html = testing::ReadFileOrDie(dir + "/r.html");
  const std::vector<std::string> rows = Lines(testing::ReadFileOrDie(dir + "/x.csv"));
  REQUIRE(!rows.empty());
  CHECK(rows[0] == "symbol,time,bar,return,limit,level");
  std::map<std::pair<std::string, std::string>, int> counted;
  for (size_t i = 1; i < rows.size(); ++i) {
    const std::vector<std::string> f = absl::StrSplit(rows[i], ',');
    REQUIRE(f.size() == 6);
    // The loss exceeds the limit it was tested against.
    CHECK(-std::stod(f[3]) > std::stod(f[4]));
    CHECK(f[1].back() == 'Z');
    ++counted[{f[0], f[5]}];
  }
  CHECK(summary.at("bar_interval") == "0s (one bar per tick)");
  int symbols = 0;
  for (const auto& s : summary.at("symbols")) {
    if (!s.contains("var_backtests")) continue;
    ++symbols;
    // The figures of the report's overview are in the summary too.
    CHECK(s.at("next_bar").at("0.99").at("value_at_risk").get<double>() > 0);
    CHECK(s.at("next_bar").at("0.99").at("es").get<double>() >
          s.at("next_bar").at("0.99").at("value_at_risk").get<double>());
    CHECK(s.at("var_next").get<double>() > 0);
    const std::string regime = s.at("regime_at_end").get<std::string>();
    CHECK((regime == "none" || regime == "high" || regime == "low"));
    CHECK(s.at("model_at_end").get<std::string>().find('/') != std::string::npos);
    // The report's "last model version" of the symbol is the summary's.
    CHECK(html.find(absl::StrCat("last model version ", s.at("version_at_end").get<int>(), ".")) !=
          std::string::npos);
    CHECK(s.at("last_bar_ns").get<int64_t>() > s.at("first_bar_ns").get<int64_t>());
    for (const auto& l : s.at("var_backtests")) {
      const std::string level = absl::StrFormat("%g", l.at("level").get<double>());
      INFO(s.at("symbol").get<std::string>() << " " << level);
      CHECK(counted[{s.at("symbol").get<std::string>(), level}] == l.at("exceptions").get<int>());
      if (level != "0.99") continue;
      // One bar per tick, one second apart: intraday, 1500 bars on one day,
      // so the zone is over bars and the report says so.
      CHECK(l.at("zone_basis") == "bars");
      CHECK(l.at("zone_window_days") == 0);
      CHECK(l.at("zone_yellow_from") == 5);
      CHECK(l.at("zone_red_from") == 10);
      CHECK(html.find(absl::StrCat(l.at("zone_window_exceptions").get<int>(), " in the last ",
                                   l.at("zone_window_bars").get<int>(),
                                   " bars; yellow from 5, red from 10")) != std::string::npos);
    }
    // The calibration figures the report prints are the summary's.
    const auto& pit = s.at("pit");
    int64_t total = 0;
    for (const auto& c : pit.at("counts")) total += c.get<int64_t>();
    CHECK(total == pit.at("bars").get<int64_t>());
    CHECK(pit.at("chi_square_dof") == 19);
    const std::string line =
        absl::StrFormat("chi-square %.4g on 19 df, p = %.3g; Kolmogorov-Smirnov D = %.4g, p = %.3g",
                        pit.at("chi_square").get<double>(), pit.at("chi_square_p").get<double>(),
                        pit.at("ks_distance").get<double>(), pit.at("ks_p").get<double>());
    INFO(line);
    CHECK(html.find(line) != std::string::npos);
  }
  CHECK(symbols == 3);
  CHECK(summary.at("zone_rule").at("source").get<std::string>().find("Basel Committee") == 0);
  CHECK(summary.at("zone_rule").at("window_days") == 250);
  CHECK(summary.at("models_at_end").size() >= 1);
}

TEST_CASE("replay --csv: one row per update, the same numbers as the JSON Lines", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_csv");
  const std::vector<std::string> syms = {"QUAIL.A", "RAVEN.B"};
  std::vector<std::vector<double>> rets;
  const std::string input = testing::WriteFile(dir + "/ticks.csv", ReturnCsv(syms, 300, &rets));
  const std::string cfg = testing::WriteFile(dir + "/c.toml", testing::kFixedModelToml);
  const auto a = RunCli(
      {"replay", "--config", cfg, "--input", input, "--output", dir + "/a.jsonl", "--quiet"});
  const auto b = RunCli({"replay", "--config", cfg, "--input", input, "--output", dir + "/b.jsonl",
                         "--csv", dir + "/b.csv", "--quiet"});
  const auto c =
      RunCli({"replay", "--config", cfg, "--input", input, "--csv", dir + "/c.csv", "--quiet"});
  INFO(a.err << b.err << c.err);
  REQUIRE(a.exit_code == 0);
  REQUIRE(b.exit_code == 0);
  REQUIRE(c.exit_code == 0);
  // The JSON Lines beside the CSV are byte for byte those of a JSON-only run.
  const std::string jsonl = testing::ReadFileOrDie(dir + "/a.jsonl");
  CHECK(testing::ReadFileOrDie(dir + "/b.jsonl") == jsonl);
  const std::string csv = testing::ReadFileOrDie(dir + "/b.csv");
  CHECK(testing::ReadFileOrDie(dir + "/c.csv") == csv);
  const auto json_lines = Lines(jsonl);
  const auto rows = Lines(csv);
  REQUIRE(json_lines.size() == 600);
  REQUIRE(rows.size() == 601);
  BarUpdate first;
  REQUIRE(DecodeUpdateJson(json_lines[0], &first).ok());
  std::string header = "symbol,time,r,mu,eps,var,z,var_next,vol_ann";
  for (int i = 0; i < first.n_horizons; ++i) absl::StrAppend(&header, ",var_h_", first.horizons[i]);
  for (int i = 0; i < first.n_levels; ++i) {
    absl::StrAppend(&header, ",value_at_risk_", absl::StrFormat("%g", first.levels[i]), ",es_",
                    absl::StrFormat("%g", first.levels[i]));
  }
  header += ",scale,ver,flags";
  CHECK(rows[0] == header);
  for (size_t i = 0; i < json_lines.size(); ++i) {
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(json_lines[i], &u).ok());
    std::string row = rows[i + 1];
    INFO(row);
    const std::string sym = row.substr(0, row.find(','));
    row = row.substr(row.find(',') + 1);
    CHECK(sym == std::string(u.symbol.view()));
    const std::vector<std::string> f = absl::StrSplit(row, ',');
    REQUIRE(f.size() == static_cast<size_t>(1 + 7 + u.n_horizons + 2 * u.n_levels + 3));
    CHECK(f[0] == absl::FormatTime("%Y-%m-%dT%H:%M:%E*SZ", absl::FromUnixNanos(u.t_ns),
                                   absl::UTCTimeZone()));
    // Every number parses back to the JSON's double exactly.
    size_t k = 1;
    for (double v : {u.r, u.mu, u.eps, u.var, u.z, u.var_next, u.vol_ann}) {
      CHECK(std::strtod(f[k++].c_str(), nullptr) == v);
    }
    for (int h = 0; h < u.n_horizons; ++h)
      CHECK(std::strtod(f[k++].c_str(), nullptr) == u.var_h[h]);
    for (int l = 0; l < u.n_levels; ++l) {
      CHECK(std::strtod(f[k++].c_str(), nullptr) == u.var_risk[l]);
      CHECK(std::strtod(f[k++].c_str(), nullptr) == u.es[l]);
    }
    CHECK(std::strtod(f[k++].c_str(), nullptr) == u.scale);
    CHECK(f[k++] == std::to_string(u.ver));
    std::vector<std::string> names;
    for (int bit = 0; bit < kNumUpdateFlags; ++bit) {
      if (u.flags & (1u << bit)) names.emplace_back(FlagName(bit));
    }
    CHECK(f[k] == absl::StrJoin(names, "|"));
  }
  // Both outputs on standard output cannot be told apart: refused.
  const auto both = RunCli(
      {"replay", "--config", cfg, "--input", input, "--output", "-", "--csv", "-", "--quiet"});
  CHECK(both.exit_code == 2);
  CHECK(both.err.find("cannot both be standard output") != std::string::npos);
  const auto bad = RunCli({"replay", "--config", cfg, "--input", input, "--csv",
                           dir + "/no-such-dir/u.csv", "--quiet"});
  CHECK(bad.exit_code == 2);
  CHECK(bad.err.find("No such file or directory") != std::string::npos);
}

TEST_CASE("replay of 300 short sessions: zone over 250 trading days, time of day, summary = report",
          "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_trading_days");
  // Two instruments, 300 sessions of 20 one-minute bars (09:00-09:20 UTC).
  const auto sim =
      RunCli({"simulate", "--symbols", "2", "--session", "09:00-09:20", "--sessions", "300",
              "--field", "return", "--seed", "4", "--output", dir + "/ticks.csv", "--quiet"});
  INFO(sim.err);
  REQUIRE(sim.exit_code == 0);
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      "[bars]\ninterval = \"1m\"\nsession = { start = \"09:00\", end = \"09:20\", "
      "timezone_offset_minutes = 0 }\n[refit]\nevery_bars = 500\n");
  const auto r = RunCli({"replay", "--config", cfg, "--input", dir + "/ticks.csv", "--summary-json",
                         dir + "/s.json", "--report", dir + "/r.html", "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const auto summary = nlohmann::json::parse(testing::ReadFileOrDie(dir + "/s.json"));
  const std::string html = testing::ReadFileOrDie(dir + "/r.html");
  REQUIRE(summary.at("symbols").size() == 2);
  for (const auto& s : summary.at("symbols")) {
    INFO(s.dump().substr(0, 400));
    REQUIRE(s.contains("var_backtests"));
    const auto& b99 = s.at("var_backtests").at(0);
    REQUIRE(b99.at("level") == 0.99);
    // Intraday bars over more than 250 sessions: every bar of the last 250.
    CHECK(b99.at("zone_basis") == "trading_days");
    CHECK(b99.at("zone_window_days") == 250);
    CHECK(b99.at("zone_window_bars") == 250 * 20);
    CHECK(b99.at("zone_windows").get<int>() >= 1);
    const auto bounds = ZoneThresholds(5000, 0.01, EvaluationOptions{});
    CHECK(b99.at("zone_yellow_from") == bounds.first);
    CHECK(b99.at("zone_red_from") == bounds.second);
    CHECK(bounds.first > 5);
    CHECK(html.find(absl::StrCat(b99.at("zone_window_exceptions").get<int>(),
                                 " in the last 250 trading days (5000 bars); yellow from ",
                                 bounds.first, ", red from ", bounds.second)) != std::string::npos);
    // The time-of-day figures of the summary are the report's table rows.
    REQUIRE(s.contains("time_of_day"));
    const auto& tod = s.at("time_of_day");
    CHECK(tod.at("session_bars") == 20);
    REQUIRE(tod.at("segments").size() == 12);
    const std::string sym = s.at("symbol").get<std::string>();
    size_t at = html.find("By time of day", html.find("<h2>" + sym + "</h2>"));
    REQUIRE(at != std::string::npos);
    int64_t bars = 0;
    for (const auto& g : tod.at("segments")) {
      const auto& e = g.at("by_level").at("0.99");
      const std::string cell =
          absl::StrFormat("<td class=\"num\">%d (%.1f)</td>", e.at("exceptions").get<int>(),
                          e.at("expected").get<double>());
      const size_t next = html.find(cell, at);
      INFO(cell);
      CHECK(next < html.find("</table>", at));
      at = next == std::string::npos ? at : next;
      bars += g.at("bars").get<int64_t>();
    }
    CHECK(bars == s.at("evaluated").get<int64_t>());
  }
}

TEST_CASE("replay ends with warnings when the settings contradict the input", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_warnings");
  // One session of simulated 1m prices against the old intraday example: a
  // binary feed, an annualization for another session, min_bars of two days,
  // and a session an hour off the data (UTC+2 instead of UTC+1).
  const auto sim = RunCli({"simulate", "--symbols", "3", "--session", "08:00-16:30", "--utc-offset",
                           "60", "--sessions", "1", "--output", dir + "/ticks.csv", "--quiet"});
  REQUIRE(sim.exit_code == 0);
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      "[feed]\nencoding = \"binary\"\n[bars]\ninterval = \"1m\"\nsession = { start = \"08:00\", "
      "end = \"16:30\", timezone_offset_minutes = 120 }\n[outputs]\nperiods_per_year = 252\n"
      "[refit]\nmin_bars = 1020\n");
  const auto r = RunCli({"replay", "--config", cfg, "--input", dir + "/ticks.csv", "--output",
                         dir + "/u.jsonl", "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.err.find("replay: warning: [outputs] periods_per_year = 252, but [bars] interval "
                   "\"1m\" with a 08:00-16:30 session gives 128520 bars a year") !=
        std::string::npos);
  CHECK(r.err.find("replay: warning: [refit] min_bars = 1020 is longer than one session (510 "
                   "bars of 1m)") != std::string::npos);
  CHECK(r.err.find("replay: warning: [refit] min_bars = 1020, but no symbol had more than 450 "
                   "bars in this input") != std::string::npos);
  CHECK(r.err.find("replay: warning: [feed] encoding = \"binary\": replay reads the tick file") !=
        std::string::npos);
  CHECK(r.err.find("replay: warning: no symbol got a fitted model (all 3 ended on version 0") !=
        std::string::npos);
  // 60 of 510 bars of each symbol fall outside the shifted session: not most.
  CHECK(r.err.find("most inputs were rejected") == std::string::npos);
  // Shifted by the whole session: every tick is outside, and the replay says so.
  const std::string off = testing::WriteFile(
      dir + "/off.toml",
      "[bars]\ninterval = \"1m\"\nsession = { start = \"20:00\", end = \"23:00\" }\n");
  const auto all = RunCli({"replay", "--config", off, "--input", dir + "/ticks.csv", "--output",
                           dir + "/u2.jsonl", "--quiet"});
  INFO(all.err);
  CHECK(all.err.find("replay: warning: most inputs were rejected: 1530 of 1530 (100%; "
                     "outside_session 1530): check [bars] session and timezone_offset_minutes") !=
        std::string::npos);
}

TEST_CASE("run --check prints warnings for contradicting settings", "[app][run]") {
  const std::string dir = testing::ScratchDir("run_check_warnings");
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      "[bars]\ninterval = \"1m\"\n[outputs]\nperiods_per_year = 252\n[refit]\nevery_bars = 0\n");
  const auto r = RunCli({"run", "--config", cfg, "--check"});
  INFO(r.out << r.err);
  CHECK(r.exit_code == 0);
  CHECK(r.out.find("configuration OK") != std::string::npos);
  CHECK(r.out.find("warning: [outputs] periods_per_year = 252, but [bars] interval \"1m\" gives "
                   "362880 bars a year") != std::string::npos);
  CHECK(r.out.find("warning: refits are off") != std::string::npos);
  const auto clean =
      RunCli({"run", "--config",
              std::string(AFTERSHOCK_SOURCE_DIR) + "/config/example-intraday.toml", "--check"});
  CHECK(clean.exit_code == 0);
  CHECK(clean.out.find("(128520 a year, auto)") != std::string::npos);
  CHECK(clean.out.find("warning") == std::string::npos);
}

TEST_CASE("run --check names update batches and the low-latency mode in the plan", "[app][run]") {
  const std::string dir = testing::ScratchDir("run_check_batches");
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      "[feed]\nbusy_poll_us = 500\n[publish]\nencoding = \"binary\"\nupdate_topics = \"both\"\n");
  const auto r = RunCli({"run", "--config", cfg, "--check"});
  INFO(r.out << r.err);
  CHECK(r.exit_code == 0);
  CHECK(r.out.find("(json, busy-polling: one core at 100 % within 500 us of a message) -> bars") !=
        std::string::npos);
  CHECK(r.out.find("(binary, u.<symbol> and batches on b.u)") != std::string::npos);
}

TEST_CASE("replay: an idle name runs on its group's model (1m bars of prices, sessions)",
          "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_group_models");
  // Three sessions 09:30-16:00 UTC. IRON.A and IRON.B tick every 5..35 s,
  // IRON.Z (same group) and LONE.Q (no group, so its group has no busy name)
  // only every 10..20 minutes.
  struct Row {
    int64_t t;
    int sym;
  };
  const char* names[] = {"IRON.A", "IRON.B", "IRON.Z", "LONE.Q"};
  std::mt19937_64 rng(11);
  std::vector<Row> rows;
  for (int day = 0; day < 3; ++day) {
    const int64_t open = kT0 + int64_t{day} * 86400 * 1000000000;
    const int64_t close = open + int64_t{390} * 60 * 1000000000;
    for (int s = 0; s < 4; ++s) {
      const bool busy = s < 2;
      std::uniform_int_distribution<int> gap_s(busy ? 5 : 600, busy ? 35 : 1200);
      for (int64_t t = open + int64_t{gap_s(rng)} * 1000000000; t < close;
           t += int64_t{gap_s(rng)} * 1000000000) {
        rows.push_back({t, s});
      }
    }
  }
  std::stable_sort(rows.begin(), rows.end(), [](const Row& a, const Row& b) { return a.t < b.t; });
  std::normal_distribution<double> step(0, 0.0008);
  double price[4] = {100, 80, 60, 40};
  std::string csv = "symbol,time,price\n";
  for (const Row& r : rows) {
    price[r.sym] *= std::exp((r.sym >= 2 ? 3.0 : 1.0) * step(rng));
    char buf[64];
    std::snprintf(buf, sizeof(buf), "%.10f", price[r.sym]);
    absl::StrAppend(&csv, names[r.sym], ",", r.t, ",", buf, "\n");
  }
  const std::string input = testing::WriteFile(dir + "/ticks.csv", csv);
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      "[bars]\ninterval = \"1m\"\n"
      "session = { start = \"09:30\", end = \"16:00\", timezone_offset_minutes = 0 }\n"
      "[refit]\nevery_bars = 100\nwindow = 600\nmin_bars = 200\nholdout_bars = 50\n"
      "[alerts.groups.metals]\nsymbols = [\"IRON*\"]\n");
  auto run = [&](const std::string& tag) {
    return RunCli({"replay", "--config", cfg, "--input", input, "--output",
                   dir + "/u" + tag + ".jsonl", "--models", dir + "/m" + tag + ".jsonl"});
  };
  const auto a = run("a");
  const auto b = run("b");
  INFO(a.err << b.err);
  REQUIRE(a.exit_code == 0);
  REQUIRE(b.exit_code == 0);
  const std::string ua = testing::ReadFileOrDie(dir + "/ua.jsonl");
  const std::string ma = testing::ReadFileOrDie(dir + "/ma.jsonl");
  CHECK(ua == testing::ReadFileOrDie(dir + "/ub.jsonl"));
  CHECK(ma == testing::ReadFileOrDie(dir + "/mb.jsonl"));
  // The idle metal adopts its group's model; the lone idle name has none to take.
  int pooled_records = 0;
  for (const auto& line : Lines(ma)) {
    const auto j = nlohmann::json::parse(line);
    INFO(line);
    if (j.at("outcome") == "pooled") {
      CHECK(j.at("symbol") == "IRON.Z");
      ++pooled_records;
    }
  }
  CHECK(pooled_records >= 1);
  int z_updates = 0, z_pooled = 0, lone_updates = 0;
  for (const auto& line : Lines(ua)) {
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(line, &u).ok());
    if (u.symbol.view() == "IRON.Z") {
      ++z_updates;
      if (u.flags & kFlagPooled) {
        ++z_pooled;
        CHECK(u.ver >= 1);
        CHECK((u.flags & kFlagWarmup) == 0);
      }
    } else if (u.symbol.view() == "LONE.Q") {
      ++lone_updates;
      CHECK((u.flags & kFlagWarmup) != 0);
      CHECK((u.flags & kFlagPooled) == 0);
    }
  }
  // IRON.Z never has min_bars of its own (about 26 bars a session).
  CHECK(z_updates < 200);
  CHECK(z_pooled >= 20);
  CHECK(lone_updates > 20);
}

TEST_CASE("replay and run: clear errors, exit 2", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_errors");
  const std::string good = testing::WriteFile(dir + "/good.toml", "[bars]\ninterval = \"0s\"\n");
  const std::string bad = testing::WriteFile(dir + "/bad.toml", "[bars]\ninterval = \"abc\"\n");
  const std::string input = testing::WriteFile(dir + "/t.csv", "symbol,time,return\nA.B,1,0.1\n");

  auto r = RunCli({"replay", "--config", dir + "/missing.toml", "--input", input, "--output",
                   dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("missing.toml") != std::string::npos);
  r = RunCli({"replay", "--config", bad, "--input", input, "--output", dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("bad.toml:2: [bars] interval") != std::string::npos);
  r = RunCli(
      {"replay", "--config", good, "--input", dir + "/none.csv", "--output", dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("none.csv") != std::string::npos);
  const std::string junk = testing::WriteFile(dir + "/junk.csv", "symbol,time,return\nx\ny\n");
  r = RunCli({"replay", "--config", good, "--input", junk, "--output", dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("junk.csv") != std::string::npos);
  r = RunCli({"replay", "--config", good});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("--input") != std::string::npos);

  r = RunCli({"run", "--config", good, "--check"});
  CHECK(r.exit_code == 0);
  CHECK(r.out.find("configuration OK") != std::string::npos);
  r = RunCli({"run", "--config", bad, "--check"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("bad.toml:2: [bars] interval") != std::string::npos);
  r = RunCli({"run", "--help"});
  CHECK(r.exit_code == 0);
  CHECK(r.out.find("--check") != std::string::npos);
}

int FreePort() {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = 0;
  socklen_t len = sizeof(a);
  if (bind(fd, reinterpret_cast<sockaddr*>(&a), sizeof(a)) != 0 ||
      getsockname(fd, reinterpret_cast<sockaddr*>(&a), &len) != 0) {
    close(fd);
    return -1;
  }
  close(fd);
  return ntohs(a.sin_port);
}

TEST_CASE("SIGTERM on `aftershock run`: flushes and exits 0; health and metrics", "[app][run]") {
  const std::string dir = testing::ScratchDir("run_sigterm");
  const int http_port = FreePort();
  REQUIRE(http_port > 0);
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      absl::StrCat("[feed]\nendpoints = [\"tcp://127.0.0.1:1\"]\n[publish]\nendpoint = "
                   "\"tcp://127.0.0.1:*\"\n[http]\nendpoint = \"127.0.0.1:",
                   http_port, "\"\n"));
  const std::string err_path = dir + "/err.txt";
  const pid_t pid = fork();
  REQUIRE(pid >= 0);
  if (pid == 0) {
    FILE* f = std::freopen(err_path.c_str(), "w", stderr);
    (void)f;
    execl(AFTERSHOCK_CLI, AFTERSHOCK_CLI, "run", "--config", cfg.c_str(), nullptr);
    _exit(127);
  }
  // Wait for the line printed from inside the event loop (handlers installed).
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(10);
  std::string err;
  while (err.find("running:") == std::string::npos && std::chrono::steady_clock::now() < deadline) {
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
    std::ifstream in(err_path);
    std::stringstream ss;
    ss << in.rdbuf();
    err = ss.str();
  }
  REQUIRE(err.find("running:") != std::string::npos);
  CHECK(err.find(absl::StrCat("http 127.0.0.1:", http_port)) != std::string::npos);
  // Prometheus text exposition format 0.0.4: HELP/TYPE lines, labelled counters.
  const std::string metrics = HttpGet(http_port, "/metrics");
  CHECK(metrics.rfind("HTTP/1.1 200 OK", 0) == 0);
  CHECK(metrics.find("text/plain; version=0.0.4") != std::string::npos);
  CHECK(metrics.find(
            "# TYPE aftershock_updates_out_total counter\naftershock_updates_out_total 0\n") !=
        std::string::npos);
  CHECK(metrics.find("aftershock_rejects_total{reason=\"symbol_limit\"} 0\n") != std::string::npos);
  const std::string health = HttpGet(http_port, "/health");
  CHECK(health.rfind("HTTP/1.1 200 OK", 0) == 0);
  CHECK(health.find("{\"status\":\"ok\",\"symbols\":0") != std::string::npos);
  CHECK(HttpGet(http_port, "/other").rfind("HTTP/1.1 404", 0) == 0);
  kill(pid, SIGTERM);
  int status = 0;
  pid_t w = 0;
  while ((w = waitpid(pid, &status, WNOHANG)) == 0 && std::chrono::steady_clock::now() < deadline) {
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  if (w == 0) kill(pid, SIGKILL);
  REQUIRE(w == pid);
  REQUIRE(WIFEXITED(status));
  CHECK(WEXITSTATUS(status) == 0);
  std::ifstream in(err_path);
  std::stringstream ss;
  ss << in.rdbuf();
  CHECK(ss.str().find("aftershock run: stopped; 0 messages") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
