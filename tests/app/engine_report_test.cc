// The closing summaries of `run` and `replay` (engine_report.h): the tracked
// parameters of a recursive tracker beside the refit model's, as a struct, a
// text line and JSON, and the per-symbol tracking lines a tracked replay
// prints at its end.
#include "app/engine_report.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/simulate.h"
#include "support/test_support.h"

namespace aftershock::app {
namespace {

bool Contains(const std::string& s, const std::string& what) {
  return s.find(what) != std::string::npos;
}

ModelParams Garch(double omega, double alpha, double beta) {
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "student");
  REQUIRE(spec.ok());
  return ModelParams{*spec, {0.0, omega, alpha, beta, 7.0}};
}

ModelParams Gjr(double omega, double alpha, double gamma, double beta) {
  auto spec = MakeModelSpec("zero", {}, "gjr", {1, 1, 1}, "student");
  REQUIRE(spec.ok());
  return ModelParams{*spec, {omega, alpha, gamma, beta, 7.0}};
}

// A tracker anchored on `anchor` that has followed n bars simulated from `truth`.
RecursiveTracker Tracked(const ModelParams& anchor, const ModelParams& truth, int64_t n) {
  SimulationOptions so;
  so.n = n;
  so.seed = 17;
  auto sim = Simulate(truth, so);
  REQUIRE(sim.ok());
  TrackerOptions o;
  o.burn_in_bars = 50;
  RecursiveTracker t;
  t.Anchor(anchor, anchor.UnconditionalVariance(), o);
  REQUIRE(t.active());
  for (double x : sim->returns) t.Step(x, o);
  return t;
}

TEST_CASE("tracked parameters: off or inactive give nothing", "[report][tracking]") {
  RecursiveTracker inactive;
  CHECK_FALSE(TrackedParametersOf(inactive, TrackingMode::kDrive).has_value());
  const ModelParams anchor = Garch(0.05, 0.05, 0.90);
  RecursiveTracker t;
  t.Anchor(anchor, 1.0, TrackerOptions{});
  CHECK_FALSE(TrackedParametersOf(t, TrackingMode::kOff).has_value());
  CHECK(TrackedParametersOf(t, TrackingMode::kTrack).has_value());
}

TEST_CASE("tracked parameters of a GARCH(1,1) tracker beside the refit model's",
          "[report][tracking]") {
  // Anchor alpha_1 0.05, beta_1 0.90; the data have 0.12 / 0.83: after 4,000
  // bars the tracked alpha_1 has moved up, and the drift is its difference.
  const ModelParams anchor = Garch(0.05, 0.05, 0.90);
  const RecursiveTracker t = Tracked(anchor, Garch(0.05, 0.12, 0.83), 4000);
  const auto p = TrackedParametersOf(t, TrackingMode::kDrive);
  REQUIRE(p.has_value());
  CHECK(p->mode == "drive");
  CHECK(p->variance == "GARCH(1,1)");
  CHECK(p->names == std::vector<std::string>{"omega", "alpha_1", "beta_1"});
  REQUIRE(p->values.size() == 3);
  REQUIRE(p->refit.size() == 3);
  // The refit column is the anchor: its coefficients, omega through the
  // unconditional variance (equal up to rounding).
  CHECK(p->refit[0] == Approx(0.05).epsilon(1e-12));
  CHECK(p->refit[1] == 0.05);
  CHECK(p->refit[2] == 0.90);
  CHECK(p->refit_persistence == Approx(0.95).epsilon(1e-12));
  for (int i = 0; i < 3; ++i) {
    CHECK(p->values[i] == t.coefficient(i));
    CHECK(p->drift(i) == p->values[i] - p->refit[i]);
  }
  CHECK(p->drift(1) > 0.01);  // alpha_1 moved toward 0.12
  CHECK(p->persistence == t.persistence());
  CHECK(p->level_ratio == t.level_ratio());
  CHECK(p->instability == t.instability());
  CHECK(p->bars_since_refit == 4000);
  CHECK(p->stepping);
  CHECK(p->resets == t.resets());
  CHECK(p->instability_alerts == -1);  // not known from a tracker alone
}

TEST_CASE("tracked parameters of a GJR(1,1,1) tracker name gamma_1", "[report][tracking]") {
  const ModelParams anchor = Gjr(0.03, 0.03, 0.05, 0.90);
  const RecursiveTracker t = Tracked(anchor, Gjr(0.03, 0.02, 0.15, 0.88), 3000);
  const auto p = TrackedParametersOf(t, TrackingMode::kTrack);
  REQUIRE(p.has_value());
  CHECK(p->mode == "track");
  CHECK(p->variance == "GJR-GARCH(1,1)");
  CHECK(p->names == std::vector<std::string>{"omega", "alpha_1", "gamma_1", "beta_1"});
  CHECK(p->refit[2] == 0.05);
  CHECK(p->values[2] == t.gamma());
  CHECK(p->refit_persistence == Approx(0.03 + 0.025 + 0.90).epsilon(1e-12));
}

TEST_CASE("the text line and JSON of tracked parameters", "[report][tracking]") {
  TrackedParameters p;
  p.mode = "drive";
  p.variance = "GARCH(1,1)";
  p.names = {"omega", "alpha_1", "beta_1"};
  p.values = {0.0105, 0.0712, 0.8915};
  p.refit = {0.0100, 0.0700, 0.9000};
  p.persistence = 0.9627;
  p.refit_persistence = 0.97;
  p.level_ratio = 1.04;
  p.instability = 2.7;
  p.bars_since_refit = 60;
  p.stepping = true;
  p.resets = 0;
  const std::string text = TrackedParametersText(p);
  INFO(text);
  CHECK(Contains(text, "drive GARCH(1,1), 60 bars since the refit:"));
  // omega's drift relative (+5 %), the others absolute.
  CHECK(Contains(text, "omega 0.0105 (refit 0.01, +5.0 %)"));
  CHECK(Contains(text, "alpha_1 0.0712 (refit 0.07, +0.0012)"));
  CHECK(Contains(text, "beta_1 0.8915 (refit 0.9, -0.0085)"));
  CHECK(Contains(text, "persistence 0.9627 (refit 0.9700), level x1.04, instability 2.7"));
  CHECK(Contains(text, "0 resets"));
  CHECK_FALSE(Contains(text, "instability alert"));  // unknown: not shown
  p.instability_alerts = 1;
  p.stepping = false;
  const std::string text2 = TrackedParametersText(p);
  CHECK(Contains(text2, "(burn-in)"));
  CHECK(Contains(text2, ", 1 instability alert,"));

  const nlohmann::json j = TrackedParametersJson(p);
  CHECK(j["mode"] == "drive");
  CHECK(j["variance"] == "GARCH(1,1)");
  CHECK(j["bars_since_refit"] == 60);
  CHECK(j["stepping"] == false);
  REQUIRE(j["estimates"].size() == 3);
  CHECK(j["estimates"][1]["name"] == "alpha_1");
  CHECK(j["estimates"][1]["value"].get<double>() == 0.0712);
  CHECK(j["estimates"][1]["refit"].get<double>() == 0.07);
  CHECK(j["estimates"][1]["drift"].get<double>() == 0.0712 - 0.07);
  CHECK(j["level_ratio"].get<double>() == 1.04);
  CHECK(j["instability"].get<double>() == 2.7);
  CHECK(j["instability_alerts"] == 1);
  p.instability_alerts = -1;
  CHECK_FALSE(TrackedParametersJson(p).contains("instability_alerts"));
}

TEST_CASE("a tracked replay closes with one tracking line per symbol", "[report][tracking]") {
  const std::string dir = testing::ScratchDir("engine_report_tracking");
  const std::string ticks = dir + "/ticks.csv";
  auto sim = testing::RunCli({"simulate", "--output", ticks, "--field", "return", "--bars", "1500",
                              "--symbols", "3", "--seed", "8", "--quiet"});
  INFO(sim.err);
  REQUIRE(sim.exit_code == 0);
  // The simulated instruments' names, in the order of the file.
  std::vector<std::string> symbols;
  {
    const std::string csv = testing::ReadFileOrDie(ticks);
    size_t at = csv.find('\n') + 1;
    while (at < csv.size() && symbols.size() < 3) {
      const std::string sym = csv.substr(at, csv.find(',', at) - at);
      if (std::find(symbols.begin(), symbols.end(), sym) == symbols.end()) symbols.push_back(sym);
      at = csv.find('\n', at) + 1;
    }
  }
  REQUIRE(symbols.size() == 3);
  // Two symbols drive (the default mode), a group of the third tracks.
  const std::string config = testing::WriteFile(dir + "/c.toml", absl::StrCat(R"([bars]
interval = "0s"
[model]
mean = "constant"
variance = "garch"
shock_lags = 1
variance_lags = 1
innovations = "student"
[refit]
every_bars = 200
window = 800
min_bars = 400
holdout_bars = 50
workers = 1
[tracking]
mode = "drive"
burn_in_bars = 20
[tracking.groups.watch]
symbols = [")",
                                                                              symbols[2], R"("]
mode = "track"
[http]
enabled = false
)"));
  auto r = testing::RunCli(
      {"replay", "--config", config, "--input", ticks, "--output", dir + "/u.jsonl"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(Contains(r.err, "tracking: 3 symbols tracked (2 drive, 1 track), "));
  CHECK(Contains(r.err, "; highest instability first\n"));
  for (int i = 0; i < 2; ++i) CHECK(Contains(r.err, "\n  " + symbols[i] + " drive GARCH(1,1), "));
  CHECK(Contains(r.err, "\n  " + symbols[2] + " track GARCH(1,1), "));
  for (const char* name : {"omega ", "alpha_1 ", "beta_1 ", "(refit "}) {
    CHECK(Contains(r.err, name));
  }
  // --quiet leaves the summary out.
  auto q = testing::RunCli(
      {"replay", "--config", config, "--input", ticks, "--output", dir + "/u2.jsonl", "--quiet"});
  REQUIRE(q.exit_code == 0);
  CHECK_FALSE(Contains(q.err, "tracking:"));
}

}  // namespace
}  // namespace aftershock::app
