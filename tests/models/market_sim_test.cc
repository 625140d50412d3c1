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
  // An ARMA(1,1) mean exercises the full mean recursion as well.
  auto spec = MakeModelSpec("arma", {1, 1}, "garch", {1, 1}, "t");
  REQUIRE(spec.ok());
  auto arma = ModelParams::FromNamed(*spec, {{"mu", 1e-5},
                                             {"ar1", 0.2},
                                             {"ma1", -0.1},
                                             {"omega", 2e-7},
                                             {"alpha1", 0.08},
                                             {"beta1", 0.9},
                                             {"nu", 6.0}});
  REQUIRE(arma.ok());
  insts.push_back({"ARMA.TEST", 50.0, *arma, {{5, 2.0}}});
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
  CHECK(garch->spec.Label() == "constant-mean-GARCH(1,1)-t");
  CHECK(*garch->Get("beta1") == Approx(0.90));
  CHECK(*garch->Get("mu") == Approx(0.05 / 252));
  CHECK(std::sqrt(garch->UnconditionalVariance() * ppy) == Approx(0.2));
  auto gjr = InstrumentModel(p, VarianceKind::kGjr, ppy);
  REQUIRE(gjr.ok());
  CHECK(*gjr->Get("beta1") == Approx(0.95 - 0.05 - 0.02));
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

}  // namespace
}  // namespace aftershock
