// Tests of the synthetic market (include/aftershock/market_sim.h).
// Sources of the checks: the batch simulator Simulate (aftershock/simulate.h),
// whose documented recursion the streaming generator must reproduce bit for
// bit; the definitions in market_sim.h (price = start * exp(cumulated returns),
// time = start + i * interval, parameter mapping); and the unconditional
// variance of a GARCH-type model, omega / (1 - persistence) (Bollerslev 1986),
// for the regime check.
#include "aftershock/market_sim.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <map>
#include <numeric>

#include "aftershock/bar_builder.h"
#include "aftershock/engine_config.h"
#include "aftershock/simulate.h"

namespace aftershock {
namespace {

std::vector<MarketInstrument> Instruments(int n, double ppy = 98280) {
  auto profiles = DefaultInstruments(n);
  REQUIRE(profiles.ok());
  std::vector<MarketInstrument> out;
  for (const auto& p : *profiles) {
    auto params = InstrumentModel(p, p.family, ppy);
    REQUIRE(params.ok());
    out.push_back({p.symbol, p.start_price, *params, {}});
  }
  return out;
}

// All ticks of a simulation, grouped by symbol in bar order.
std::map<std::string, std::vector<Tick>> Run(std::vector<MarketInstrument> insts,
                                             const MarketSimOptions& o, Tick::Kind field) {
  auto sim = MarketSim::Create(std::move(insts), o);
  REQUIRE(sim.ok());
  std::map<std::string, std::vector<Tick>> out;
  Tick t;
  while ((*sim)->Next(field, &t)) out[std::string(t.symbol.view())].push_back(t);
  return out;
}

TEST_CASE("streaming returns equal the batch simulator bit for bit") {
  // Source: Simulate (simulate.h) with the per-instrument seed of market_sim.h.
  auto insts = Instruments(3);
  insts[0].regimes = {{10, 4.0}, {40, 0.5}};
  // Step-shaped changes, one after an omega-shaped one.
  insts[1].regimes = {
      {15, 3.0, VarianceChangeShape::kStep}, {30, 2.0}, {45, 0.5, VarianceChangeShape::kStep}};
  // An ARMA(1,1) mean exercises the full mean recursion as well.
  auto spec = MakeModelSpec("arma", {1, 1}, "garch", {1, 1}, "student");
  REQUIRE(spec.ok());
  auto arma = ModelParams::FromNamed(*spec, {{"mu", 1e-5},
                                             {"ar_1", 0.2},
                                             {"ma_1", -0.1},
                                             {"omega", 2e-7},
                                             {"alpha_1", 0.08},
                                             {"beta_1", 0.9},
                                             {"nu", 6.0}});
  REQUIRE(arma.ok());
  insts.push_back({"ARMA.TEST", 50.0, *arma, {{5, 2.0}, {20, 3.0, VarianceChangeShape::kStep}}});
  MarketSimOptions o;
  o.bars = 60;
  o.seed = 42;
  o.burn_in = 100;
  auto got = Run(insts, o, Tick::kReturn);
  for (const auto& inst : insts) {
    SimulationOptions so;
    so.n = o.bars;
    so.seed = InstrumentSeed(o.seed, inst.symbol);
    so.burn_in = o.burn_in;
    so.regime_changes = inst.regimes;
    auto want = Simulate(inst.params, so);
    REQUIRE(want.ok());
    const auto& ticks = got[inst.symbol];
    REQUIRE(ticks.size() == 60);
    for (size_t i = 0; i < ticks.size(); ++i) {
      INFO(inst.symbol << " bar " << i);
      CHECK(ticks[i].value == want->returns[i]);  // exact: same operations in the same order
      CHECK(ticks[i].kind == Tick::kReturn);
    }
  }
}

TEST_CASE("prices cumulate the log returns and times step by the interval") {
  // Source: the definitions in market_sim.h.
  MarketSimOptions o;
  o.bars = 200;
  o.seed = 7;
  o.start_ns = 1772443800000000000;  // 2026-03-02T09:30:00Z
  o.interval_ns = 5000000000;        // 5 s
  auto returns = Run(Instruments(4), o, Tick::kReturn);
  auto prices = Run(Instruments(4), o, Tick::kPrice);
  const auto& universe = DefaultUniverse();
  for (int k = 0; k < 4; ++k) {
    const std::string sym = universe[k].symbol;
    double cum = 0;
    REQUIRE(prices[sym].size() == 200);
    for (size_t i = 0; i < 200; ++i) {
      cum += returns[sym][i].value;
      CHECK(prices[sym][i].value == Approx(universe[k].start_price * std::exp(cum)).epsilon(1e-12));
      CHECK(prices[sym][i].t_ns == o.start_ns + static_cast<int64_t>(i) * o.interval_ns);
      CHECK(returns[sym][i].t_ns == prices[sym][i].t_ns);
    }
  }
}

TEST_CASE("ticks come bar by bar in universe order") {
  auto sim = MarketSim::Create(Instruments(3), MarketSimOptions{});
  REQUIRE(sim.ok());
  CHECK((*sim)->total_ticks() == 390 * 3);
  Tick t;
  std::vector<std::string> first;
  for (int i = 0; i < 6; ++i) {
    REQUIRE((*sim)->Next(Tick::kPrice, &t));
    first.emplace_back(t.symbol.view());
    CHECK(t.t_ns == (i / 3) * 60000000000LL);
  }
  CHECK(first == std::vector<std::string>{"BRANDR.NRG", "SKJOLD.GAS", "VARDE.PWR", "BRANDR.NRG",
                                          "SKJOLD.GAS", "VARDE.PWR"});
  while ((*sim)->Next(Tick::kPrice, &t)) {
  }
  CHECK((*sim)->ticks_emitted() == 390 * 3);
  CHECK_FALSE((*sim)->Next(Tick::kPrice, &t));
}

TEST_CASE("determinism: same seed same data; a symbol's path ignores the rest of the universe") {
  MarketSimOptions o;
  o.bars = 50;
  o.seed = 11;
  auto a = Run(Instruments(12), o, Tick::kReturn);
  auto b = Run(Instruments(12), o, Tick::kReturn);
  auto small = Run(Instruments(2), o, Tick::kReturn);
  o.seed = 12;
  auto c = Run(Instruments(12), o, Tick::kReturn);
  for (const auto& [sym, ticks] : a) {
    for (size_t i = 0; i < ticks.size(); ++i) CHECK(ticks[i].value == b[sym][i].value);
    CHECK(ticks[0].value != c[sym][0].value);
  }
  for (const auto& [sym, ticks] : small) {
    for (size_t i = 0; i < ticks.size(); ++i) CHECK(ticks[i].value == a[sym][i].value);
  }
  // Different symbols get different streams.
  CHECK(InstrumentSeed(1, "BRANDR.NRG") != InstrumentSeed(1, "SKJOLD.GAS"));
  CHECK(InstrumentSeed(1, "BRANDR.NRG") != InstrumentSeed(2, "BRANDR.NRG"));
}

TEST_CASE("a variance regime jump shows in the sample variance") {
  // Expected ratio: the regime multiplies omega by 4, hence the unconditional
  // variance omega / (1 - persistence) by 4 (Bollerslev 1986; simulate.h).
  auto insts = Instruments(2);
  const int64_t n = 40000, jump = 20000;
  insts[1].regimes = {{jump, 4.0}};
  MarketSimOptions o;
  o.bars = n;
  o.seed = 3;
  auto got = Run(insts, o, Tick::kReturn);
  auto sample_var = [](const std::vector<Tick>& t, size_t from, size_t to) {
    double m = 0;
    for (size_t i = from; i < to; ++i) m += t[i].value;
    m /= static_cast<double>(to - from);
    double v = 0;
    for (size_t i = from; i < to; ++i) v += (t[i].value - m) * (t[i].value - m);
    return v / static_cast<double>(to - from - 1);
  };
  const auto& g = got["SKJOLD.GAS"];
  // Skip 200 bars after the jump (the variance adjusts with half-life
  // ln 0.5 / ln 0.96 = 17 bars).
  const double before = sample_var(g, 0, jump);
  const double after = sample_var(g, jump + 200, n);
  CHECK(after / before == Approx(4.0).epsilon(0.2));
  // Level before the jump: SKJOLD.GAS has vol_ann 0.55 at 98280 bars a year.
  CHECK(before == Approx(0.55 * 0.55 / 98280).epsilon(0.2));
  // The instrument without a regime keeps its level.
  const auto& b = got["BRANDR.NRG"];
  CHECK(sample_var(b, jump + 200, n) / sample_var(b, 0, jump) == Approx(1.0).epsilon(0.2));
}

TEST_CASE("InstrumentModel maps desk terms to per-bar parameters") {
  InstrumentProfile p;
  p.symbol = "TEST.X";
  p.vol_ann = 0.2;
  p.drift_ann = 0.05;
  p.persistence = 0.95;
  p.alpha = 0.05;
  p.gamma = 0.04;
  p.nu = 7;
  const double ppy = 252;
  auto garch = InstrumentModel(p, VarianceKind::kGarch, ppy);
  REQUIRE(garch.ok());
  CHECK(garch->spec.Label() == "const/GARCH(1,1)/student");
  CHECK(*garch->Get("beta_1") == Approx(0.90));
  CHECK(*garch->Get("mu") == Approx(0.05 / 252));
  CHECK(std::sqrt(garch->UnconditionalVariance() * ppy) == Approx(0.2));
  auto gjr = InstrumentModel(p, VarianceKind::kGjr, ppy);
  REQUIRE(gjr.ok());
  CHECK(*gjr->Get("beta_1") == Approx(0.95 - 0.05 - 0.02));
  CHECK(gjr->Persistence() == Approx(0.95));
  CHECK(std::sqrt(gjr->UnconditionalVariance() * ppy) == Approx(0.2));
  auto flat = InstrumentModel(p, VarianceKind::kConstant, ppy);
  REQUIRE(flat.ok());
  CHECK(*flat->Get("omega") == Approx(0.04 / 252));

  p.alpha = 0.99;
  auto bad = InstrumentModel(p, VarianceKind::kGarch, ppy);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message())
            .find("instrument TEST.X: alpha exceeds the "
                  "persistence") != std::string::npos);
  p.alpha = 0.05;
  p.nu = 2;
  bad = InstrumentModel(p, VarianceKind::kGarch, ppy);
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()).find("nu must be in (2, 500]") != std::string::npos);
  CHECK_FALSE(InstrumentModel(p, VarianceKind::kEwma, ppy).ok());
}

TEST_CASE("default universe and numbered variants") {
  const auto& u = DefaultUniverse();
  REQUIRE(u.size() == 12);
  for (const auto& p : u) {
    CHECK(IsValidSymbol(p.symbol));
    CHECK(InstrumentModel(p, p.family, 98280).ok());
  }
  auto many = DefaultInstruments(25);
  REQUIRE(many.ok());
  CHECK((*many)[12].symbol == "BRANDR2.NRG");
  CHECK((*many)[24].symbol == "BRANDR3.NRG");
  CHECK((*many)[12].vol_ann != u[0].vol_ann);
  auto none = DefaultInstruments(0);
  REQUIRE_FALSE(none.ok());
  CHECK(std::string(none.status().message()) == "number of instruments must be in 1..10000, got 0");
  CHECK(PeriodsPerYearForInterval(60000000000LL) == Approx(98280));
  CHECK(PeriodsPerYearForInterval(86400000000000LL) == Approx(252));
}

TEST_CASE("Create rejects bad universes with a clear message") {
  auto msg = [](std::vector<MarketInstrument> insts, MarketSimOptions o = {}) {
    auto s = MarketSim::Create(std::move(insts), o);
    REQUIRE_FALSE(s.ok());
    return std::string(s.status().message());
  };
  auto two = Instruments(2);
  two[1].symbol = two[0].symbol;
  CHECK(msg(two) == "symbol BRANDR.NRG appears twice");
  auto bad = Instruments(1);
  bad[0].symbol = "BAD SYMBOL";
  CHECK(msg(bad).find("bad symbol 'BAD SYMBOL'") == 0);
  auto late = Instruments(1);
  late[0].regimes = {{390, 2.0}};
  CHECK(msg(late) == "instrument BRANDR.NRG: regime bar must be in [0, 390), got 390");
  CHECK(msg({}) == "the market has no instruments");
  MarketSimOptions zero;
  zero.interval_ns = 0;
  CHECK(msg(Instruments(1), zero) == "bar interval must be > 0 ns, got 0");
}

// ---- Sessions, intraday profile, ticks per bar -----------------------------
// Sources: the definitions in market_sim.h; calendar facts checked with
// Python's datetime (2026-03-02 and 2026-03-09 are Mondays, 2026-03-06 a
// Friday); the bar builder (bar_builder.h) as the consumer of the ticks.

SessionWindow Session0800To1630Utc1() {
  SessionWindow w;
  w.enabled = true;
  w.start_minute = 8 * 60;
  w.end_minute = 16 * 60 + 30;
  w.tz_offset_minutes = 60;
  return w;
}

constexpr int64_t kMinute = 60000000000LL;
constexpr int64_t kMonday0700Z = 1772434800LL * 1000000000LL;    // 2026-03-02T07:00:00Z
constexpr int64_t kFriday1500Z = 1772809200LL * 1000000000LL;    // 2026-03-06T15:00:00Z
constexpr int64_t kMonday2_0700Z = 1773039600LL * 1000000000LL;  // 2026-03-09T07:00:00Z

TEST_CASE("a session: ticks only inside, the clock jumps over nights and the weekend") {
  MarketSimOptions o;
  o.session = Session0800To1630Utc1();
  o.start_ns = kFriday1500Z;  // Friday 16:00 local: 30 bars left that day
  o.bars = 30 + 510 + 5;
  o.overnight_bars = 0;
  REQUIRE(BarsPerSession(o.session, o.interval_ns) == 510);
  auto ticks = Run(Instruments(1), o, Tick::kReturn)["BRANDR.NRG"];
  REQUIRE(ticks.size() == 545);
  CHECK(ticks[0].t_ns == kFriday1500Z);
  CHECK(ticks[29].t_ns == kFriday1500Z + 29 * kMinute);  // 16:29 local, the last bar
  CHECK(ticks[30].t_ns == kMonday2_0700Z);               // Monday's open
  CHECK(ticks[30 + 509].t_ns == kMonday2_0700Z + 509 * kMinute);
  CHECK(ticks[30 + 510].t_ns == kMonday2_0700Z + kNanosPerDay);  // Tuesday's open
  for (const Tick& t : ticks) CHECK(InSession(o.session, t.t_ns));
  // Without a profile or overnight move the returns are the batch simulator's.
  SimulationOptions so;
  so.n = o.bars;
  so.seed = InstrumentSeed(o.seed, "BRANDR.NRG");
  so.burn_in = o.burn_in;
  auto want = Simulate(Instruments(1)[0].params, so);
  REQUIRE(want.ok());
  for (size_t i = 0; i < ticks.size(); ++i) CHECK(ticks[i].value == want->returns[i]);
  // Every day: the session after Friday's is Saturday's.
  o.skip_weekends = false;
  auto every = Run(Instruments(1), o, Tick::kReturn)["BRANDR.NRG"];
  CHECK(every[30].t_ns == kFriday1500Z - 8 * 60 * kMinute + kNanosPerDay);
  // A start before the open begins at the open.
  o.start_ns = kMonday0700Z - 3 * 60 * kMinute;
  o.bars = 2;
  CHECK(Run(Instruments(1), o, Tick::kPrice)["BRANDR.NRG"][0].t_ns == kMonday0700Z);
}

TEST_CASE("the first return of each session carries the overnight move") {
  MarketSimOptions o;
  o.session = Session0800To1630Utc1();
  o.start_ns = kMonday0700Z;
  o.bars = 510 * 3;
  o.seed = 5;
  auto flat = Run(Instruments(2), o, Tick::kReturn);
  o.overnight_bars = 100;
  auto night = Run(Instruments(2), o, Tick::kReturn);
  for (const auto& [sym, ticks] : night) {
    const auto& base = flat[sym];
    for (size_t i = 0; i < ticks.size(); ++i) {
      INFO(sym << " bar " << i);
      if (i % 510 == 0 && i > 0) {
        // The move is sqrt(100 h) * z: far larger than a bar's return as a rule.
        CHECK(ticks[i].value != base[i].value);
      } else {
        CHECK(ticks[i].value == base[i].value);  // other bars are untouched
      }
    }
  }
}

TEST_CASE("IntradayMultiplier: session mean of s^2 is 1, U-shaped, symmetric") {
  // Source: the closed form in market_sim.h; the mean of x_k^2 over the bar
  // midpoints is (K^2 - 1) / (3 K^2), so the mean of s^2 is exactly 1.
  for (int64_t k_bars : {1, 2, 7, 390, 510}) {
    for (double a : {0.0, 0.5, 2.0, 5.0}) {
      double sum = 0;
      for (int64_t k = 0; k < k_bars; ++k) {
        const double s = IntradayMultiplier(k, k_bars, a);
        sum += s * s;
        CHECK(s == Approx(IntradayMultiplier(k_bars - 1 - k, k_bars, a)).epsilon(1e-14));
      }
      CHECK(sum / static_cast<double>(k_bars) == Approx(1.0).epsilon(1e-12));
    }
  }
  const double open = IntradayMultiplier(0, 510, 2.0);
  const double mid = IntradayMultiplier(255, 510, 2.0);
  CHECK(open * open / (mid * mid) == Approx(3.0).epsilon(0.01));  // about 1 + a
  CHECK(IntradayMultiplier(100, 510, 0.0) == 1.0);
}

TEST_CASE("the U-shaped profile scales each bar's return by s(k)") {
  MarketSimOptions o;
  o.session = Session0800To1630Utc1();
  o.start_ns = kMonday0700Z;
  o.bars = 510 * 20;
  o.seed = 3;
  auto flat = Run(Instruments(3), o, Tick::kReturn);
  o.intraday_amplitude = 2.0;
  auto shaped = Run(Instruments(3), o, Tick::kReturn);
  double open_sq = 0, mid_sq = 0;
  int64_t n_open = 0, n_mid = 0;
  for (const auto& [sym, ticks] : shaped) {
    for (size_t i = 0; i < ticks.size(); ++i) {
      const int64_t k = static_cast<int64_t>(i % 510);
      CHECK(ticks[i].value ==
            Approx(IntradayMultiplier(k, 510, 2.0) * flat[sym][i].value).epsilon(1e-12));
      if (k < 30 || k >= 480) {
        open_sq += ticks[i].value * ticks[i].value;
        ++n_open;
      } else if (k >= 225 && k < 285) {
        mid_sq += ticks[i].value * ticks[i].value;
        ++n_mid;
      }
    }
  }
  // Expected ratio of the profile's mean s^2 over those bars: about 2.7;
  // 20 sessions of 3 names is noisy but far from flat (1).
  const double ratio = (open_sq / n_open) / (mid_sq / n_mid);
  CHECK(ratio > 1.8);
  CHECK(ratio < 4.0);
}

TEST_CASE("several ticks per bar: time order, inside the bar, a bar builder recovers r") {
  MarketSimOptions o;
  o.session = Session0800To1630Utc1();
  o.start_ns = kMonday0700Z;
  o.bars = 510 * 2;
  o.seed = 9;
  o.intraday_amplitude = 1.5;
  o.overnight_bars = 50;
  auto one = Run(Instruments(3), o, Tick::kReturn);
  o.ticks_per_bar = 5;
  auto sim = MarketSim::Create(Instruments(3), o);
  REQUIRE(sim.ok());
  CHECK((*sim)->total_ticks() == 510 * 2 * 3 * 5);
  BarOptions bo{o.interval_ns, 5 * kNanosPerSecond, o.session};
  std::map<std::string, BarState> states;
  std::map<std::string, std::vector<ClosedBar>> bars;
  std::map<std::string, std::vector<double>> sums;  // return ticks per bar
  Tick t;
  int64_t prev_t = 0;
  int64_t n = 0;
  auto sim_r = MarketSim::Create(Instruments(3), o);
  REQUIRE(sim_r.ok());
  Tick tr;
  while ((*sim)->Next(Tick::kPrice, &t)) {
    REQUIRE((*sim_r)->Next(Tick::kReturn, &tr));
    ++n;
    CHECK(t.t_ns >= prev_t);  // time order across instruments
    prev_t = t.t_ns;
    CHECK(InSession(o.session, t.t_ns));
    const std::string sym(t.symbol.view());
    const FeedResult fr = FeedTick(&states[sym], t, bo);
    REQUIRE(fr.status == TickStatus::kAccepted);
    if (fr.closed) bars[sym].push_back(fr.bar);
    const int64_t bar = (t.t_ns - kMonday0700Z) % kNanosPerDay / o.interval_ns +
                        ((t.t_ns - kMonday0700Z) / kNanosPerDay) * 510;
    auto& v = sums[sym];
    if (static_cast<int64_t>(v.size()) <= bar) v.resize(static_cast<size_t>(bar) + 1, 0.0);
    v[static_cast<size_t>(bar)] += tr.value;
  }
  CHECK(n == 510 * 2 * 3 * 5);
  for (auto& [sym, st] : states) {
    ClosedBar last;
    if (CloseIfDue(&st, INT64_MAX / 2, 0, bo, &last)) bars[sym].push_back(last);
    const auto& want = one[sym];
    REQUIRE(bars[sym].size() == 1020);
    for (size_t i = 1; i < 1020; ++i) {
      INFO(sym << " bar " << i);
      CHECK(bars[sym][i].n_ticks == 5);
      if (i == 510) {
        CHECK_FALSE(bars[sym][i].has_return);  // first bar of a session: no overnight return
        continue;
      }
      REQUIRE(bars[sym][i].has_return);
      CHECK(bars[sym][i].ret == Approx(want[i].value).margin(1e-12));
      // Return ticks: the increments of a bar sum to its return.
      CHECK(sums[sym][i] == Approx(want[i].value).margin(1e-12));
    }
  }
}

TEST_CASE("session options are deterministic by seed and validated") {
  MarketSimOptions o;
  o.session = Session0800To1630Utc1();
  o.start_ns = kMonday0700Z;
  o.bars = 600;
  o.intraday_amplitude = 2;
  o.overnight_bars = 100;
  o.ticks_per_bar = 3;
  auto a = Run(Instruments(4), o, Tick::kPrice);
  auto b = Run(Instruments(4), o, Tick::kPrice);
  for (const auto& [sym, ticks] : a) {
    REQUIRE(ticks.size() == b[sym].size());
    for (size_t i = 0; i < ticks.size(); ++i) {
      CHECK(ticks[i].t_ns == b[sym][i].t_ns);
      CHECK(ticks[i].value == b[sym][i].value);
    }
  }
  auto msg = [](MarketSimOptions x) {
    auto s = MarketSim::Create(Instruments(1), x);
    REQUIRE_FALSE(s.ok());
    return std::string(s.status().message());
  };
  MarketSimOptions no_session;
  no_session.intraday_amplitude = 1;
  CHECK(msg(no_session) == "an intraday profile needs a session");
  MarketSimOptions many = o;
  many.ticks_per_bar = 0;
  CHECK(msg(many) == "ticks per bar must be in 1..1000, got 0");
}

}  // namespace
}  // namespace aftershock
