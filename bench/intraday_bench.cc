// intraday_bench: the intraday path measured end to end, on simulated price
// ticks aggregated to one-minute bars over sessions with overnight gaps.
//
// Scenario (invented universe, fixed seeds): N instruments of the built-in
// universe, S sessions of 08:00-16:30 local (UTC+1, 510 one-minute bars),
// a U-shaped intraday profile (amplitude a: the first and last bars' variance
// about (1 + a) times midday's), T price ticks per instrument and bar at random
// times, an overnight move of the size of `overnight_bars` bars, and, for
// every fifth instrument, its variance multiplied by `jump` from a bar inside
// one session (the jump session; the bar differs per instrument). The jump is
// step-shaped by default (every bar from the jump on has `jump` times the
// variance it would have had); --jump-shape omega multiplies the model's omega
// instead, so the variance ramps up over about 1 / (1 - persistence) bars.
//
// Each configuration variant replays the same ticks through the engine
// (IngestCore + EngineServices, replay mode: deterministic) starting from
// config/default.toml with the session and interval set, and reports
//   * calibration by half hour of the session, over the sessions after the
//     first `settle` ones: mean z^2, 99 % VaR exceptions (each bar's return
//     against the VaR published at the previous bar) and shock alerts;
//     a chi-square test that the exceptions are spread over the half hours in
//     proportion to their bars (Pearson; p-value from Boost.Math);
//   * regime detection: for the instruments with a jump, the delay in bars
//     from the jump to the first emitted high-regime alert (none within 60
//     bars counts as missed); false regime entries (every emitted regime alert
//     except the one detecting a jump) per instrument-session, over the
//     sessions after the first `settle` ones;
//   * models: instruments on a conditional-variance model at the end, and mean
//     QLIKE (Patton 2011: y/h - log(y/h) - 1, y the squared return, h the
//     published variance) over the evaluated bars.
//
// Usage: intraday_bench [--instruments N] [--sessions S] [--seed K]
//                       [--jump-shape step|omega] [--quick] [--try ...] [--only-tries]
// Output: markdown tables on standard output (what README.md quotes).
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <fstream>
#include <memory>
#include <sstream>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/market_sim.h"
#include "aftershock/update_sink.h"
#include "boost/math/distributions/chi_squared.hpp"

namespace aftershock {
namespace {

struct Scenario {
  int instruments = 40;
  int sessions = 8;
  int settle = 3;  // sessions left out of the calibration figures (profile, models settle)
  double amplitude = 2.0;
  int ticks_per_bar = 4;
  double overnight_bars = 30;
  double jump = 3.0;
  // kStep: every bar from the jump on has `jump` times the variance it would
  // have had (immediate); kOmega: omega times `jump`, so the conditional
  // variance ramps up over about 1 / (1 - persistence) bars (simulate.h).
  VarianceChangeShape jump_shape = VarianceChangeShape::kStep;
  int jump_session = 5;  // 0-based
  uint64_t seed = 20261202;
};

constexpr int kBarsPerSession = 510;  // 08:00-16:30 in one-minute bars
constexpr int kHalfHours = 17;
constexpr int kDetectWithin = 60;

struct Variant {
  std::string name;
  std::string toml;  // appended to the defaults (later keys of a table win: we rebuild)
};

std::string ReadDefaults() {
  std::ifstream in(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/default.toml");
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

// Replaces `key = ...` in [table] of a TOML text (the defaults list every key).
std::string SetKey(std::string toml, const std::string& table, const std::string& key,
                   const std::string& value) {
  const size_t t = toml.find("\n[" + table + "]");
  if (t == std::string::npos) {
    std::fprintf(stderr, "no [%s] in config/default.toml\n", table.c_str());
    std::exit(2);
  }
  size_t k = toml.find("\n" + key + " =", t);
  const size_t next_table = toml.find("\n[", t + 1);
  if (k == std::string::npos || (next_table != std::string::npos && k > next_table)) {
    std::fprintf(stderr, "no %s in [%s] of config/default.toml\n", key.c_str(), table.c_str());
    std::exit(2);
  }
  const size_t eol = toml.find('\n', k + 1);
  return toml.replace(k + 1, eol - k - 1, key + " = " + value);
}

struct SymbolTrack {
  bool jump = false;
  int64_t jump_bar = -1;
  int64_t detected_bar = -1;  // first high-regime alert at or after the jump
  double prev_var99 = 0;      // VaR 99 % published at the previous bar (0 = none)
  int64_t session = -1;       // sessions seen (index of the current one)
};

struct Tally {
  double z2[kHalfHours] = {};
  int64_t bars[kHalfHours] = {};
  int64_t exceptions[kHalfHours] = {};
  int64_t var_bars[kHalfHours] = {};
  int64_t shocks[kHalfHours] = {};
  int64_t false_regimes = 0;
  int64_t false_high = 0;  // of which high-volatility entries
  int64_t false_by_half_hour[kHalfHours] = {};  // false entries by the bar's half hour
  int64_t instrument_sessions = 0;
  double qlike = 0;
  int64_t qlike_n = 0;
};

class Probe : public BarObserver, public ServiceListener {
 public:
  Probe(const Scenario& sc, std::vector<SymbolTrack>* tracks,
        const std::vector<MarketInstrument>& insts)
      : sc_(sc), tracks_(tracks), insts_(insts) {}
  void set_core(IngestCore* core) { core_ = core; }
  const Tally& tally() const { return tally_; }

  // Core indexes follow the first ticks' times, not the instrument order.
  void OnNewSymbol(IngestCore* core, int index, absl::string_view symbol) override {
    if (static_cast<int>(inst_of_.size()) <= index) inst_of_.resize(index + 1, 0);
    for (size_t i = 0; i < insts_.size(); ++i) {
      if (insts_[i].symbol == symbol) inst_of_[index] = static_cast<int>(i);
    }
  }

  void OnBar(IngestCore* core, int index, const ClosedBar& bar, BarUpdate* u) override {
    SymbolTrack& t = (*tracks_)[inst_of_[index]];
    const int64_t sim_bar = static_cast<int64_t>(core->symbol_bars(index)) - 1;
    const int64_t session = sim_bar / kBarsPerSession;
    if (session != t.session) {
      t.session = session;
      if (session >= sc_.settle) ++tally_.instrument_sessions;
    }
    const double prev = t.prev_var99;
    t.prev_var99 = u->n_levels > 0 ? u->var_risk[0] : 0;
    if (session < sc_.settle || (u->flags & kFlagFirstBar) || bar.session_bar < 0) return;
    const int h = std::min(kHalfHours - 1, bar.session_bar / 30);
    tally_.z2[h] += u->z * u->z;
    ++tally_.bars[h];
    if (prev > 0) {
      ++tally_.var_bars[h];
      if (u->r < -prev) ++tally_.exceptions[h];
    }
    const double y = u->eps * u->eps;
    if (u->var > 0 && y > 0) {
      tally_.qlike += y / u->var - std::log(y / u->var) - 1;
      ++tally_.qlike_n;
    }
  }

  void OnAlert(int index, const Alert& a) override {
    if (index < 0) return;
    SymbolTrack& t = (*tracks_)[inst_of_[index]];
    const int64_t sim_bar = static_cast<int64_t>(core_->symbol_bars(index)) - 1;
    const int64_t session = sim_bar / kBarsPerSession;
    const int k = static_cast<int>(sim_bar % kBarsPerSession);
    if (a.kind == AlertKind::kShock && session >= sc_.settle) {
      ++tally_.shocks[std::min(kHalfHours - 1, k / 30)];
    }
    if (a.kind != AlertKind::kRegime) return;
    const bool detects = t.jump && a.rule == AlertRule::kRegimeHigh && sim_bar >= t.jump_bar &&
                         t.detected_bar < 0;
    if (detects) {
      t.detected_bar = sim_bar;
    } else if (session >= sc_.settle) {
      ++tally_.false_regimes;
      ++tally_.false_by_half_hour[std::min(kHalfHours - 1, k / 30)];
      if (a.rule == AlertRule::kRegimeHigh) ++tally_.false_high;
    }
  }

 private:
  const Scenario sc_;
  std::vector<SymbolTrack>* tracks_;
  const std::vector<MarketInstrument>& insts_;
  std::vector<int> inst_of_;  // core index -> instrument index
  IngestCore* core_ = nullptr;
  Tally tally_;
};

struct Result {
  std::string name;
  Tally tally;
  std::vector<SymbolTrack> tracks;
  int conditional_models = 0;
  int instruments = 0;
  double seconds = 0;
};

absl::StatusOr<std::vector<MarketInstrument>> Universe(const Scenario& sc, double ppy) {
  auto profiles = DefaultInstruments(sc.instruments);
  if (!profiles.ok()) return profiles.status();
  std::vector<MarketInstrument> out;
  for (int i = 0; i < sc.instruments; ++i) {
    const InstrumentProfile& p = (*profiles)[i];
    auto params = InstrumentModel(p, p.family, ppy);
    if (!params.ok()) return params.status();
    MarketInstrument m{p.symbol, p.start_price, *params, {}};
    if (i % 5 == 4) {
      const int64_t bar = int64_t{sc.jump_session} * kBarsPerSession + 60 + (i * 37) % 380;
      m.regimes.push_back(VarianceRegimeChange{bar, sc.jump, sc.jump_shape});
    }
    out.push_back(std::move(m));
  }
  return out;
}

absl::StatusOr<Result> RunVariant(const Scenario& sc, const Variant& v) {
  auto config = ParseEngineConfig(v.toml, v.name);
  if (!config.ok()) return config.status();
  const double ppy = 252.0 * kBarsPerSession;
  auto insts = Universe(sc, ppy);
  if (!insts.ok()) return insts.status();
  std::vector<SymbolTrack> tracks(insts->size());
  for (size_t i = 0; i < insts->size(); ++i) {
    if (!(*insts)[i].regimes.empty()) {
      tracks[i].jump = true;
      tracks[i].jump_bar = (*insts)[i].regimes[0].bar;
    }
  }
  MarketSimOptions mo;
  mo.bars = int64_t{sc.sessions} * kBarsPerSession;
  mo.seed = sc.seed;
  mo.start_ns = 1772438400LL * 1000000000;  // Monday 2026-03-02 08:00 UTC+1
  mo.interval_ns = kNanosPerMinute;
  mo.session = config->bars.session;
  mo.intraday_amplitude = sc.amplitude;
  mo.overnight_bars = sc.overnight_bars;
  mo.ticks_per_bar = sc.ticks_per_bar;
  auto sim = MarketSim::Create(*insts, mo);
  if (!sim.ok()) return sim.status();

  NullSink sink;
  ManualClock clock;
  auto core = IngestCore::Create(*config, &sink, &clock);
  if (!core.ok()) return core.status();
  Probe probe(sc, &tracks, *insts);
  probe.set_core(core->get());
  ServiceOptions so;
  so.mode = RefitMode::kReplay;
  so.listener = &probe;
  auto services = EngineServices::Attach(core->get(), *config, so);
  if (!services.ok()) return services.status();
  (*core)->AddObserver(&probe);
  const auto t0 = std::chrono::steady_clock::now();
  Tick tick;
  int64_t next_sweep = -1;
  const int64_t sweep = 100000000;  // 100 ms of event time, as replay
  while ((*sim)->Next(Tick::kPrice, &tick)) {
    if (next_sweep < 0) next_sweep = tick.t_ns + sweep;
    if (tick.t_ns >= next_sweep) {
      clock.Set(tick.t_ns);
      (*core)->OnClock(tick.t_ns);
      next_sweep = tick.t_ns + sweep;
    }
    (*core)->OnTick(tick);
  }
  (*core)->CloseAllOpenBars();
  Result res;
  res.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  res.name = v.name;
  res.tally = probe.tally();
  res.tracks = tracks;
  res.instruments = (*core)->num_symbols();
  for (int i = 0; i < (*core)->num_symbols(); ++i) {
    const VarianceKind k = (*core)->model(i).params().spec.variance;
    if (k != VarianceKind::kEwma && k != VarianceKind::kConstant) ++res.conditional_models;
  }
  return res;
}

double ChiSquarePValue(const Tally& t, double* stat, int* df) {
  int64_t total_exc = 0, total_bars = 0;
  for (int h = 0; h < kHalfHours; ++h) {
    total_exc += t.exceptions[h];
    total_bars += t.var_bars[h];
  }
  double x2 = 0;
  int cells = 0;
  for (int h = 0; h < kHalfHours; ++h) {
    if (t.var_bars[h] == 0) continue;
    const double e = static_cast<double>(total_exc) * t.var_bars[h] / total_bars;
    if (e <= 0) continue;
    x2 += (t.exceptions[h] - e) * (t.exceptions[h] - e) / e;
    ++cells;
  }
  *stat = x2;
  *df = cells - 1;
  if (*df < 1) return 1.0;
  return boost::math::cdf(boost::math::complement(boost::math::chi_squared(*df), x2));
}

void PrintCalibration(const std::vector<Result>& results) {
  std::printf("\n### Mean z^2 by half hour of the session (sessions after the first few)\n\n");
  std::printf("| half hour |");
  for (const auto& r : results) std::printf(" %s |", r.name.c_str());
  std::printf("\n|---|");
  for (size_t i = 0; i < results.size(); ++i) std::printf("---|");
  std::printf("\n");
  for (int h = 0; h < kHalfHours; ++h) {
    const int m0 = 8 * 60 + 30 * h;
    std::printf("| %02d:%02d |", m0 / 60, m0 % 60);
    for (const auto& r : results) {
      const Tally& t = r.tally;
      std::printf(" %.2f |", t.bars[h] ? t.z2[h] / t.bars[h] : 0.0);
    }
    std::printf("\n");
  }
  std::printf(
      "\n### 99 %% VaR exceptions, shock alerts and false regime entries by half hour\n\n");
  std::printf("| half hour |");
  for (const auto& r : results) {
    std::printf(" %s exc. (rate) | shocks | false regimes |", r.name.c_str());
  }
  std::printf("\n|---|");
  for (size_t i = 0; i < results.size(); ++i) std::printf("---|---|---|");
  std::printf("\n");
  for (int h = 0; h < kHalfHours; ++h) {
    const int m0 = 8 * 60 + 30 * h;
    std::printf("| %02d:%02d |", m0 / 60, m0 % 60);
    for (const auto& r : results) {
      const Tally& t = r.tally;
      std::printf(" %lld (%.2f %%) | %lld | %lld |", static_cast<long long>(t.exceptions[h]),
                  t.var_bars[h] ? 100.0 * t.exceptions[h] / t.var_bars[h] : 0.0,
                  static_cast<long long>(t.shocks[h]),
                  static_cast<long long>(t.false_by_half_hour[h]));
    }
    std::printf("\n");
  }
}

void PrintSummary(const std::vector<Result>& results) {
  std::printf("\n### Summary per variant\n\n");
  std::printf(
      "| variant | z^2 range over half hours | 99 %% exceptions | chi-square (df), p | shocks in "
      "first/last half hour | jumps detected <= 60 bars | median delay | false regime "
      "entries per instrument-session (high) | conditional-variance models | mean QLIKE | seconds |\n");
  std::printf("|---|---|---|---|---|---|---|---|---|---|---|\n");
  for (const auto& r : results) {
    const Tally& t = r.tally;
    double lo = 1e9, hi = 0;
    int64_t exc = 0, vb = 0, shocks = 0;
    for (int h = 0; h < kHalfHours; ++h) {
      if (t.bars[h] == 0) continue;
      const double m = t.z2[h] / t.bars[h];
      lo = std::min(lo, m);
      hi = std::max(hi, m);
      exc += t.exceptions[h];
      vb += t.var_bars[h];
      shocks += t.shocks[h];
    }
    double x2 = 0;
    int df = 0;
    const double p = ChiSquarePValue(t, &x2, &df);
    std::vector<int64_t> delays;
    int jumps = 0, detected = 0;
    for (const auto& s : r.tracks) {
      if (!s.jump) continue;
      ++jumps;
      if (s.detected_bar >= 0 && s.detected_bar - s.jump_bar <= kDetectWithin) {
        ++detected;
        delays.push_back(s.detected_bar - s.jump_bar);
      }
    }
    std::sort(delays.begin(), delays.end());
    std::string all;
    for (const auto& s : r.tracks) {
      if (s.jump) absl::StrAppend(&all, s.detected_bar < 0 ? -1 : s.detected_bar - s.jump_bar, " ");
    }
    std::fprintf(stderr, "%s: delays from each jump to its first high-regime alert (-1 none): %s\n",
                 r.name.c_str(), all.c_str());
    const std::string median =
        delays.empty() ? "-" : absl::StrCat(delays[delays.size() / 2]);
    std::printf(
        "| %s | %.2f - %.2f | %lld of %lld (%.2f %%) | %.1f (%d), p = %.3g | %lld + %lld of "
        "%lld | %d of %d | %s | %.3f (%.3f) | %d of %d | %.4f | %.1f |\n",
        r.name.c_str(), lo, hi, static_cast<long long>(exc), static_cast<long long>(vb),
        vb ? 100.0 * exc / vb : 0.0, x2, df, p, static_cast<long long>(t.shocks[0]),
        static_cast<long long>(t.shocks[kHalfHours - 1]), static_cast<long long>(shocks),
        detected, jumps, median.c_str(),
        t.instrument_sessions ? static_cast<double>(t.false_regimes) / t.instrument_sessions : 0.0,
        t.instrument_sessions ? static_cast<double>(t.false_high) / t.instrument_sessions : 0.0,
        r.conditional_models, r.instruments, t.qlike_n ? t.qlike / t.qlike_n : 0.0, r.seconds);
  }
}

int Main(int argc, char** argv) {
  Scenario sc;
  std::vector<std::string> tries;  // "label|table.key=value|..."
  bool only_tries = false;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto next = [&](int* out) {
      if (i + 1 >= argc) return false;
      *out = std::atoi(argv[++i]);
      return true;
    };
    int v = 0;
    if (a == "--instruments" && next(&v) && v >= 5 && v <= 1000) {
      sc.instruments = v;
    } else if (a == "--sessions" && next(&v) && v >= 7 && v <= 100) {
      sc.sessions = v;
    } else if (a == "--seed" && next(&v)) {
      sc.seed = static_cast<uint64_t>(v);
    } else if (a == "--jump-shape" && i + 1 < argc &&
               (std::strcmp(argv[i + 1], "step") == 0 ||
                std::strcmp(argv[i + 1], "omega") == 0)) {
      sc.jump_shape = std::strcmp(argv[++i], "step") == 0 ? VarianceChangeShape::kStep
                                                          : VarianceChangeShape::kOmega;
    } else if (a == "--quick") {
      sc.instruments = 20;
    } else if (a == "--try" && i + 1 < argc) {
      tries.emplace_back(argv[++i]);
    } else if (a == "--only-tries") {
      only_tries = true;
    } else {
      std::fprintf(stderr,
                   "usage: intraday_bench [--instruments 5..1000] [--sessions 7..100] [--seed K] "
                   "[--jump-shape step|omega] [--quick] [--try 'LABEL|TABLE.KEY=VALUE|...']... "
                   "[--only-tries]\n"
                   "  --jump-shape: step (default) multiplies the variance of every bar from the "
                   "jump on;\n"
                   "  omega multiplies the model's omega, so the variance ramps up over tens of "
                   "bars\n"
                   "  --try adds a variant: the defaults with the given keys replaced, e.g.\n"
                   "  --try 'cautious|alerts.regime_scale=2|alerts.regime_enter_evidence=12'\n");
      return a == "--help" ? 0 : 2;
    }
  }
  std::string base = ReadDefaults();
  if (base.empty()) {
    std::fprintf(stderr, "cannot read %s/config/default.toml\n", AFTERSHOCK_SOURCE_DIR);
    return 2;
  }
  base = SetKey(base, "bars", "interval", "\"1m\"");
  base = SetKey(base, "bars", "grace", "\"200ms\"");
  // The session line is absent from the defaults (no session): add it.
  {
    const size_t b = base.find("\n[bars]\n");
    base.insert(b + 8,
                "session = { start = \"08:00\", end = \"16:30\", timezone_offset_minutes = 60 }\n");
  }
  std::vector<Variant> variants;
  variants.push_back({"defaults", base});
  variants.push_back({"no seasonality", SetKey(base, "seasonality", "enabled", "false")});
  variants.push_back({"regime enter 7", SetKey(base, "alerts", "regime_enter_evidence", "7")});
  variants.push_back({"regime enter 5", SetKey(base, "alerts", "regime_enter_evidence", "5")});
  if (only_tries) variants.clear();
  for (const std::string& t : tries) {
    std::vector<std::string> parts;
    std::stringstream ss(t);
    std::string part;
    while (std::getline(ss, part, '|')) parts.push_back(part);
    if (parts.size() < 2) {
      std::fprintf(stderr, "--try: expected LABEL|TABLE.KEY=VALUE..., got '%s'\n", t.c_str());
      return 2;
    }
    std::string toml = base;
    for (size_t j = 1; j < parts.size(); ++j) {
      const size_t dot = parts[j].find('.'), eq = parts[j].find('=');
      if (dot == std::string::npos || eq == std::string::npos || eq < dot) {
        std::fprintf(stderr, "--try: expected TABLE.KEY=VALUE, got '%s'\n", parts[j].c_str());
        return 2;
      }
      toml = SetKey(toml, parts[j].substr(0, dot), parts[j].substr(dot + 1, eq - dot - 1),
                    parts[j].substr(eq + 1));
    }
    variants.push_back({parts[0], toml});
  }
  std::printf(
      "## Intraday calibration: %d instruments x %d sessions of 510 one-minute bars, %d price "
      "ticks per bar,\nU-shape amplitude %.1f, overnight move of %.0f bars, variance x%.1f "
      "(%s) for every fifth instrument in session %d; seed %llu\n",
      sc.instruments, sc.sessions, sc.ticks_per_bar, sc.amplitude, sc.overnight_bars, sc.jump,
      sc.jump_shape == VarianceChangeShape::kStep ? "step: at once" : "omega: ramping up",
      sc.jump_session + 1, static_cast<unsigned long long>(sc.seed));
  std::vector<Result> results;
  for (const Variant& v : variants) {
    std::fprintf(stderr, "intraday_bench: %s ...\n", v.name.c_str());
    auto r = RunVariant(sc, v);
    if (!r.ok()) {
      std::fprintf(stderr, "intraday_bench: %s: %s\n", v.name.c_str(),
                   std::string(r.status().message()).c_str());
      return 1;
    }
    results.push_back(*std::move(r));
  }
  PrintSummary(results);
  PrintCalibration(results);
  return 0;
}

}  // namespace
}  // namespace aftershock

int main(int argc, char** argv) { return aftershock::Main(argc, argv); }
