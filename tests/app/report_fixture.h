// A small simulated replay (three invented instruments, refits, alerts and
// regimes) shared by the report tests.
#ifndef AFTERSHOCK_TESTS_APP_REPORT_FIXTURE_H_
#define AFTERSHOCK_TESTS_APP_REPORT_FIXTURE_H_

#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "aftershock/evaluation.h"
#include "aftershock/html_report.h"
#include "aftershock/online_filter.h"
#include "aftershock/simulate.h"

namespace aftershock::testing {

inline ModelParams FixtureParams(const char* var, VarianceLags order, const char* law,
                                 std::vector<std::pair<std::string, double>> named) {
  auto spec = MakeModelSpec("constant", {}, var, order, law);
  REQUIRE(spec.ok());
  auto p = ModelParams::FromNamed(*spec, named);
  REQUIRE(p.ok());
  return *p;
}

// One symbol: `n` one-minute bars simulated from `p` (with a variance regime
// from 40 % to 55 % of the run), filtered with the true parameters; refits at
// a quarter, a half (rejected) and three quarters of the run with perturbed
// estimates; shock alerts for |z| >= 4; the regime as a RegimePeriod.
inline SymbolHistory FixtureSymbol(const std::string& name, const ModelParams& p, int64_t n,
                                   uint64_t seed, int warmup_bars) {
  SimulationOptions so;
  so.n = n;
  so.seed = seed;
  so.regime_changes = {{n * 40 / 100, 3.0}, {n * 55 / 100, 1.0}};
  auto sim = Simulate(p, so);
  REQUIRE(sim.ok());
  OutputOptions oo;
  oo.risk_levels = {0.99, 0.975};
  auto fm = FilterModel::Create(p, oo, 1);
  REQUIRE(fm.ok());
  const auto ups = FilterSeries(*fm, sim->sigma2[0], sim->returns);
  SymbolHistory h;
  h.symbol = name;
  auto law = InnovationLaw::FromParams(p);
  REQUIRE(law.ok());
  h.law = *law;
  const int64_t t0 = 1'780'000'000LL * 1'000'000'000LL;  // 2026-05-28 UTC
  const int64_t bar = 60LL * 1'000'000'000LL;
  for (int64_t i = 0; i < n; ++i) {
    BarUpdate u = ups[i];
    u.t_ns = t0 + (i + 1) * bar;
    if (i < warmup_bars) {
      u.flags |= kFlagWarmup;
      u.ver = 0;
    }
    REQUIRE(AppendBarUpdate(u, std::nan(""), &h).ok());
    if (std::fabs(u.z) >= 4.0) {
      h.alerts.push_back(
          {u.t_ns, "shock", std::fabs(u.z) >= 5.0 ? "critical" : "warning", std::fabs(u.z),
           "|z| = " + std::to_string(std::fabs(u.z)) + " <b>breach</b> & \"quoted\""});
    }
  }
  const auto names = p.spec.ParamNames();
  const int64_t at[3] = {n / 4, n / 2, 3 * n / 4};
  for (int k = 0; k < 3; ++k) {
    ModelSwapRecord s;
    s.t_ns = h.t_ns[at[k]];
    s.model = p.spec.Label();
    s.param_names = names;
    for (size_t j = 0; j < names.size(); ++j) {
      s.values.push_back(p.values[j] * (1.0 + 0.04 * (k - 1) * (j % 2 ? 1 : -1)));
      s.std_errors.push_back(0.05 * std::fabs(p.values[j]) + 1e-4);
    }
    s.loglik = -1000.0 - 10.0 * k;
    s.accepted = k != 1;
    s.version = s.accepted ? static_cast<uint32_t>(k == 0 ? 1 : 2) : 0;
    if (!s.accepted) s.gate_reason = "Ljung-Box on z^2 failed <p=0.001>";
    h.swaps.push_back(s);
  }
  h.regimes.push_back({h.t_ns[n * 40 / 100 + 20], h.t_ns[n * 55 / 100 + 60], +1});
  h.alerts.push_back(
      {h.t_ns[n * 40 / 100 + 20], "regime", "warning", 2.1, "short/long variance ratio 2.1"});
  return h;
}

// Three symbols, one with a name full of HTML metacharacters.
inline ReportInput FixtureReport(int64_t n) {
  ReportInput in;
  in.run.title = "Replay evaluation: harbour desk scenario";
  in.run.input_file = "replays/harbour_<week>.bin";
  in.run.config_summary = "bars = 60 s\nrisk_levels = [0.99, 0.975]\nrefit every 1000 bars";
  in.run.generated_at = "2026-12-02 04:00 UTC";
  in.run.engine_version = "aftershock 0.1.0";
  in.run.replay_speed = 5.2e6;
  in.options.periods_per_year = 252.0 * 390.0;  // one-minute bars, 390 a day
  in.symbols.push_back(FixtureSymbol(
      "KESTREL.X",
      FixtureParams("garch", {1, 1}, "gaussian",
                    {{"mu", 0.0}, {"omega", 2e-3}, {"alpha_1", 0.06}, {"beta_1", 0.92}}),
      n, 11, 0));
  in.symbols.push_back(FixtureSymbol(
      "OSPREY<&>\"'",
      FixtureParams(
          "garch", {1, 1}, "student",
          {{"mu", 0.001}, {"omega", 1e-3}, {"alpha_1", 0.08}, {"beta_1", 0.9}, {"nu", 6.0}}),
      n, 12, 120));
  in.symbols.push_back(FixtureSymbol("HARRIER-9",
                                     FixtureParams("gjr", {1, 1, 1}, "student",
                                                   {{"mu", 0.0},
                                                    {"omega", 1.5e-3},
                                                    {"alpha_1", 0.03},
                                                    {"gamma_1", 0.08},
                                                    {"beta_1", 0.91},
                                                    {"nu", 8.0}}),
                                     n, 13, 0));
  return in;
}

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_APP_REPORT_FIXTURE_H_
