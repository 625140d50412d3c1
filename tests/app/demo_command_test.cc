// Tests of `aftershock demo` (src/app/demo_command.cc), run as a separate
// process under coreutils `timeout` so that a hang fails the test instead of
// stalling it. Sources of the checks: the instrument list and profiles come
// from the library's DefaultInstruments (aftershock/market_sim.h); the bar
// counts follow from --duration x --rate; the bars per year from the
// definition 252 days x 23400 s / 60 s (PeriodsPerYearForInterval); the
// printed configuration is validated by `aftershock run --check`
// (ParseEngineConfig); the --fit-only estimates are compared with the known
// simulation parameters using the asymptotic normality of the MLE (a z-score
// beyond 4 has probability below 1e-4 per parameter; common practice).
#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <map>
#include <regex>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "aftershock/market_sim.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::CommandResult;

// Runs the CLI under `timeout`: SIGKILL after `limit_s`; with `interrupt_after_s`
// > 0 a SIGINT (Ctrl-C) first, the demo's exit status preserved.
CommandResult RunDemo(const std::vector<std::string>& args, int limit_s, double* seconds,
                      int interrupt_after_s = 0) {
  std::vector<std::string> argv = {"/usr/bin/timeout"};
  if (interrupt_after_s > 0) {
    argv.insert(argv.end(), {"--preserve-status", "-s", "INT", "-k", std::to_string(limit_s),
                             std::to_string(interrupt_after_s)});
  } else {
    argv.insert(argv.end(), {"-s", "KILL", std::to_string(limit_s)});
  }
  argv.push_back(AFTERSHOCK_CLI);
  argv.push_back("demo");
  argv.insert(argv.end(), args.begin(), args.end());
  const auto t0 = std::chrono::steady_clock::now();
  CommandResult r = testing::RunCommand(argv);
  *seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return r;
}

struct SummaryRow {
  long bars = -1;
  long updates = -1;
  int ver = -1;
  std::string model;
  double vol_ann = 0;
};

// Parses the summary table (rows between the header and "totals:").
std::map<std::string, SummaryRow> ParseSummary(const std::string& out) {
  std::map<std::string, SummaryRow> rows;
  const size_t at = out.find("\nSummary after ");
  if (at == std::string::npos) return rows;
  std::istringstream in(out.substr(at + 1));
  std::string line;
  std::getline(in, line);  // "Summary after ..."
  std::getline(in, line);  // header
  const std::regex row(R"(^(\S+)\s+(\d+)\s+(\d+)\s+(\d+)\s+(.+?)\s+([0-9.]+)\s+\d+/\d+\s+.*$)");
  while (std::getline(in, line) && line.rfind("totals:", 0) != 0) {
    std::smatch m;
    if (!std::regex_match(line, m, row)) continue;
    SummaryRow r;
    r.bars = std::stol(m[2]);
    r.updates = std::stol(m[3]);
    r.ver = std::stoi(m[4]);
    r.model = m[5];
    r.vol_ann = std::stod(m[6]);
    rows[m[1]] = r;
  }
  return rows;
}

std::set<std::string> Instruments(int n) {
  auto profiles = DefaultInstruments(n);
  REQUIRE(profiles.ok());
  std::set<std::string> out;
  for (const auto& p : *profiles) out.insert(p.symbol);
  return out;
}

TEST_CASE("demo runs the live pipeline and prints updates, refits and the summary") {
  double secs = 0;
  // Short schedule so that versions > 0 come in within the 6 s run (360 bars a symbol).
  auto r = RunDemo({"--duration", "6", "--rate", "60", "--mode", "lines", "--refit-every", "50",
                    "--min-bars", "100"},
                   40, &secs);
  INFO(r.err);
  INFO(r.out.substr(0, 2000));
  REQUIRE(r.exit_code == 0);
  CHECK(secs < 15);  // 6 s of demo plus shutdown
  CHECK(r.err.empty());
  CHECK(r.out.find("12 invented instruments, 1-minute bars at 60 bars/s each (720 ticks/s)") !=
        std::string::npos);
  // The regime jumps: 45 % and 65 % of the 360 planned bars.
  CHECK(r.out.find("VARDE.PWR variance x6 from bar 162") != std::string::npos);
  CHECK(r.out.find("SOLVBERG.MTL variance x4 from bar 234") != std::string::npos);

  // Update lines (watch_table.h format) for the invented symbols.
  const std::set<std::string> universe = Instruments(12);
  const std::regex update(
      R"(^\S+Z (\S+) r=\S+ z=\S+ vol_ann=\S+ vol_next=\S+ var99=\S+ es99=\S+ scale=\S+ ver=(\d+) )"
      R"(flags=\S+( !)?$)");
  std::map<std::string, int> lines_per_symbol;
  int max_ver_on_wire = -1;
  long update_lines = 0;
  {
    std::istringstream in(r.out);
    std::string line;
    while (std::getline(in, line)) {
      std::smatch m;
      if (!std::regex_match(line, m, update)) continue;
      ++update_lines;
      ++lines_per_symbol[m[1]];
      max_ver_on_wire = std::max(max_ver_on_wire, std::stoi(m[2]));
    }
  }
  for (const auto& [sym, count] : lines_per_symbol) CHECK(universe.count(sym) == 1);
  CHECK(lines_per_symbol.size() >= 6);
  CHECK(max_ver_on_wire >= 1);                         // estimated versions reached the stream
  CHECK(r.out.find("\nmodel ") != std::string::npos);  // m.<symbol> records shown

  // Summary: every instrument, at most 360 bars each, and most of them delivered.
  const auto rows = ParseSummary(r.out);
  REQUIRE(rows.size() == 12);
  long bar_sum = 0;
  int versioned = 0;
  const auto profiles = DefaultInstruments(12);
  REQUIRE(profiles.ok());
  for (const auto& p : *profiles) {
    INFO(p.symbol);
    REQUIRE(rows.count(p.symbol) == 1);
    const SummaryRow& row = rows.at(p.symbol);
    CHECK(row.bars <= 360);
    CHECK(row.bars >= 100);
    // A price symbol's first bar publishes nothing, nor do the [warmup]
    // start_bars (default 10) bars whose returns start the warm-up variance.
    CHECK(row.updates == row.bars - 1 - 10);
    bar_sum += row.bars;
    if (row.ver > 0) {
      ++versioned;
      CHECK(row.model.find("EWMA") == std::string::npos);
    } else {
      CHECK(row.model.find("EWMA") == 0);
    }
    // Loose plausibility against the profile's annualized volatility (the
    // jumped instruments may reach sqrt(6) times it).
    CHECK(row.vol_ann > p.vol_ann / 4);
    CHECK(row.vol_ann < p.vol_ann * 4);
  }
  CHECK(versioned >= 1);

  std::smatch t;
  const std::regex totals(
      R"(totals: (\d+) ticks published, (\d+) received, (\d+) bars, (\d+) updates \((\d+) dropped\))");
  REQUIRE(std::regex_search(r.out, t, totals));
  const long published = std::stol(t[1]), received = std::stol(t[2]), bars = std::stol(t[3]),
             updates = std::stol(t[4]);
  CHECK(published <= 12 * 360);
  CHECK(received <= published);
  CHECK(bars == bar_sum);
  CHECK(updates == bars - 12 * (1 + 10));
  std::smatch seen;
  REQUIRE(std::regex_search(r.out, seen, std::regex(R"(the live view saw (\d+) updates)")));
  CHECK(std::stol(seen[1]) == update_lines);
  CHECK(std::stol(seen[1]) <= updates);
  CHECK(std::regex_search(r.out, std::regex(R"(refits [1-9]\d* swapped)")));
  CHECK(r.out.find("not advice") != std::string::npos);
  CHECK(r.out.find("model-risk policy") != std::string::npos);
}

TEST_CASE("demo stops cleanly on Ctrl-C with the summary") {
  double secs = 0;
  auto r = RunDemo({"--duration", "60", "--symbols", "3", "--mode", "lines"}, 20, &secs, 2);
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(secs < 8);
  CHECK(r.out.find("(interrupted)") != std::string::npos);
  const auto rows = ParseSummary(r.out);
  CHECK(rows.size() == 3);
  for (const auto& sym : Instruments(3)) CHECK(rows.count(sym) == 1);
  CHECK(r.out.find("totals: ") != std::string::npos);
}

TEST_CASE("demo --mode table redraws in place with terminal control codes") {
  double secs = 0;
  auto r = RunDemo({"--duration", "2", "--symbols", "4", "--mode", "table"}, 20, &secs);
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.out.rfind("\x1b[2J\x1b[?25l", 0) == 0);       // clear and hide the cursor
  CHECK(r.out.find("\x1b[?25h") != std::string::npos);  // cursor shown again
  size_t frames = 0;                                    // redraws start with cursor-home
  for (size_t p = r.out.find("\x1b[H"); p != std::string::npos; p = r.out.find("\x1b[H", p + 1)) {
    ++frames;
  }
  CHECK(frames >= 2);
  CHECK(frames <= 2 * 10 + 2);  // at most 10 redraws a second, plus the final one
  CHECK(r.out.find("symbol         bar time (UTC)") != std::string::npos);
  CHECK(ParseSummary(r.out).size() == 4);
}

TEST_CASE("demo --print-config is a valid engine configuration") {
  auto r = testing::RunCli({"demo", "--print-config"});
  REQUIRE(r.exit_code == 0);
  // 252 trading days x 23400 s / 60 s bars.
  CHECK(r.out.find("periods_per_year = " + std::to_string(252 * 23400 / 60) + "\n") !=
        std::string::npos);
  CHECK(r.out.find("interval = \"0s\"") != std::string::npos);
  CHECK(r.out.find("\n[model.params]") == std::string::npos);  // no such table: warm-up start
  const std::string path =
      testing::WriteFile(testing::ScratchDir("demo_config") + "/demo.toml", r.out);
  auto check = testing::RunCli({"run", "--config", path, "--check"});
  INFO(check.err);
  CHECK(check.exit_code == 0);
  CHECK(check.out.find("EWMA warm-up (lambda 0.94), version 0") != std::string::npos);
  CHECK(check.out.find("bars 0s") != std::string::npos);
}

TEST_CASE("demo --fit-only estimates the known model") {
  auto r = testing::RunCli({"demo", "--fit-only", "--bars", "3000"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.out.find("KESTREL.NRG") != std::string::npos);
  const std::regex row(R"(^  (mu|omega|alpha_1|gamma_1|beta_1|nu)\s+(\S+)\s+(\S+)\s+(\S+)$)");
  const std::map<std::string, double> truth = {{"mu", 0.03},      {"omega", 0.02},
                                               {"alpha_1", 0.04}, {"gamma_1", 0.08},
                                               {"beta_1", 0.9},   {"nu", 7.0}};
  std::istringstream in(r.out);
  std::string line;
  std::set<std::string> seen;
  while (std::getline(in, line)) {
    std::smatch m;
    if (!std::regex_match(line, m, row)) continue;
    INFO(line);
    seen.insert(m[1]);
    CHECK(std::stod(m[2]) == Approx(truth.at(m[1])));
    if (m[4] != "n/a") CHECK(std::fabs(std::stod(m[4])) < 4);
  }
  CHECK(seen.size() == truth.size());
}

TEST_CASE("demo refuses bad options with usage errors") {
  struct Case {
    std::vector<std::string> args;
    std::string message;
  };
  const std::vector<Case> cases = {
      {{"--mode", "fancy"}, "--mode must be auto, table or lines, got 'fancy'"},
      {{"--rate", "0"}, "--rate must be bars per second > 0"},
      {{"--duration", "-1"}, "--duration must be seconds in 0..86400"},
      {{"--symbols", "0"}, "--symbols must be an integer in 1..100"},
      {{"--min-bars", "40"}, "--min-bars must be an integer in 51..600"},
      {{"--refit-every", "0"}, "--refit-every must be an integer in 1..100000"},
      {{"--fit-only", "--duration", "5"}, "--duration does not apply to --fit-only"},
      {{"--bars", "500"}, "--bars applies to --fit-only only"},
      {{"--bogus"}, "bogus"},
  };
  for (const Case& c : cases) {
    std::vector<std::string> args = {"demo"};
    args.insert(args.end(), c.args.begin(), c.args.end());
    auto r = testing::RunCli(args);
    INFO(c.message);
    CHECK(r.exit_code == 2);
    CHECK(r.err.find("aftershock demo: ") == 0);
    CHECK(r.err.find(c.message) != std::string::npos);
    CHECK(r.out.empty());
  }
  auto help = testing::RunCli({"demo", "--help"});
  CHECK(help.exit_code == 0);
  CHECK(help.out.find("--fit-only") != std::string::npos);
  CHECK(help.out.find("--duration") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
