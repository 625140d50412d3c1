#include "aftershock/ingest_core.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstring>
#include <map>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/update_codec.h"
#include "aftershock/wire.h"
#include "streaming/engine_test_util.h"
#include "support/alloc_counter.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::CollectingSink;
using testing::ParseConfigOrDie;
using testing::RelDiff;

constexpr int64_t kT0 = 1772443800000000000;  // 2026-03-02T09:30:00Z
constexpr int64_t kSec = 1000000000;

Tick ReturnTick(const std::string& sym, int64_t t, double r) {
  Tick k;
  k.symbol.assign(sym);
  k.t_ns = t;
  k.kind = Tick::kReturn;
  k.value = r;
  return k;
}

Tick PriceTick(const std::string& sym, int64_t t, double p) {
  Tick k = ReturnTick(sym, t, p);
  k.kind = Tick::kPrice;
  return k;
}

void SendJson(IngestCore* core, const Tick& t) {
  std::string body;
  EncodeTickJson(t, &body);
  core->OnMessage(t.symbol.view(), body);
}

std::vector<BarUpdate> Decoded(const CollectingSink& sink, const std::string& topic) {
  std::vector<BarUpdate> out;
  for (const auto& m : sink.messages) {
    if (m.topic != topic) continue;
    BarUpdate u;
    auto s = DecodeUpdateJson(m.body, &u);
    INFO(m.body);
    REQUIRE(s.ok());
    out.push_back(u);
  }
  return out;
}

struct Fixture {
  explicit Fixture(const std::string& toml) : config(ParseConfigOrDie(toml)) {
    auto c = IngestCore::Create(config, &sink, &clock);
    INFO(c.status().ToString());
    REQUIRE(c.ok());
    core = *std::move(c);
  }
  EngineConfig config;
  CollectingSink sink;
  ManualClock clock{kT0};
  std::unique_ptr<IngestCore> core;
};

// Reference: the offline FilterSeries of online_filter.h (itself checked bit
// for bit against the likelihood recursion in tests/models/online_filter_test.cc)
// with the same model, parameters and starting state.
TEST_CASE("fixed-parameter stream equals the offline filter per symbol", "[core]") {
  Fixture f(testing::kFixedModelToml);
  const std::vector<std::string> syms = {"ALDER.X", "BIRCH.Y", "CEDAR.Z"};
  std::vector<std::vector<double>> rets;
  for (size_t s = 0; s < syms.size(); ++s) rets.push_back(testing::TestReturns(300, 11 + s));
  for (int i = 0; i < 300; ++i) {
    for (size_t s = 0; s < syms.size(); ++s) {
      SendJson(f.core.get(), ReturnTick(syms[s], kT0 + i * kSec, rets[s][i]));
    }
  }
  auto model = FilterModel::Create(f.config.model.params, testing::OutputsOf(f.config), 1);
  REQUIRE(model.ok());
  for (size_t s = 0; s < syms.size(); ++s) {
    const auto ref = FilterSeries(*model, 0.0, rets[s]);
    const auto got = Decoded(f.sink, "u." + syms[s]);
    REQUIRE(got.size() == ref.size());
    for (size_t i = 0; i < ref.size(); ++i) {
      CHECK(RelDiff(got[i].var, ref[i].var) < 1e-12);
      CHECK(RelDiff(got[i].z, ref[i].z) < 1e-12);
      CHECK(RelDiff(got[i].var_next, ref[i].var_next) < 1e-12);
      CHECK(got[i].t_ns == kT0 + static_cast<int64_t>(i) * kSec);
      CHECK(got[i].ver == 1);
      // [warmup] min_bars = 2: only the first filtered bar carries first_bar.
      CHECK(got[i].flags == (i == 0 ? kFlagFirstBar : 0u));
    }
  }
  CHECK(f.core->counters().updates_out == 900);
  CHECK(f.core->counters().bars == 900);
  CHECK(f.core->counters().RejectTotal() == 0);
  CHECK(f.core->symbol_updates(f.core->FindSymbol("BIRCH.Y")) == 300);
}

TEST_CASE("start_bars = 1: EWMA warm-up from the first non-zero return squared", "[core]") {
  Fixture f("[warmup]\newma_lambda = 0.97\nstart_bars = 1\n");
  std::vector<double> r = {0.0, 0.004, -0.002, 0.01, 0.0005};
  for (size_t i = 0; i < r.size(); ++i) {
    SendJson(f.core.get(), ReturnTick("DELTA.Q", kT0 + i * kSec, r[i]));
  }
  // The zero return cannot start a variance: nothing is published for it.
  auto got = Decoded(f.sink, "u.DELTA.Q");
  REQUIRE(got.size() == 4);
  auto ewma = FilterModel::Ewma(0.97, testing::OutputsOf(f.config), 0);
  REQUIRE(ewma.ok());
  const std::vector<double> tail(r.begin() + 1, r.end());
  const auto ref = FilterSeries(*ewma, 0.004 * 0.004, tail);
  for (size_t i = 0; i < ref.size(); ++i) {
    CHECK(got[i].ver == 0);
    CHECK((got[i].flags & kFlagWarmup) != 0);
    CHECK(RelDiff(got[i].var, ref[i].var) < 1e-12);
    CHECK(RelDiff(got[i].var_next, ref[i].var_next) < 1e-12);
  }
  CHECK(got[0].var == 0.004 * 0.004);
  CHECK((got[0].flags & kFlagFirstBar) != 0);
  CHECK((got[1].flags & kFlagFirstBar) == 0);
}

// One-minute bars of price ticks (three ticks a bar) whose first return is
// `first` and whose later returns are TestReturns(.., sd 0.001).
std::vector<BarUpdate> WarmupOnMinuteBars(const std::string& warmup_toml, double first,
                                          std::vector<double>* returns) {
  Fixture f("[bars]\ninterval = \"1m\"\n" + warmup_toml);
  const int64_t kMin = 60 * kSec;
  *returns = testing::TestReturns(40, 7, 0.001);
  (*returns)[0] = first;
  double logp = std::log(50.0);
  f.core->OnTick(PriceTick("OAK.W", kT0 + 5 * kSec, 50.0));  // bar 0: no return
  for (size_t i = 0; i < returns->size(); ++i) {
    const int64_t bar = kT0 + static_cast<int64_t>(i + 1) * kMin;
    const double close = logp + (*returns)[i];
    // Two ticks inside the bar, then its close.
    f.core->OnTick(PriceTick("OAK.W", bar + 2 * kSec, std::exp(logp + 0.3 * (*returns)[i])));
    f.core->OnTick(PriceTick("OAK.W", bar + 20 * kSec, std::exp(logp - 0.2 * (*returns)[i])));
    f.core->OnTick(PriceTick("OAK.W", bar + 50 * kSec, std::exp(close)));
    logp = close;
  }
  f.core->CloseAllOpenBars();
  // The core's bar returns are differences of log closes: `returns` up to rounding.
  return Decoded(f.sink, "u.OAK.W");
}

TEST_CASE("warm-up starts at a robust scale: a tiny or huge first return stays harmless",
          "[core]") {
  for (double first : {1e-7, 0.03}) {
    INFO("first return " << first);
    std::vector<double> r;
    // Default [warmup]: start_bars = 10, lambda 0.94.
    const auto got = WarmupOnMinuteBars("", first, &r);
    // 40 returns, the first 10 only start the variance.
    REQUIRE(got.size() == 30);
    for (int i = 0; i < 2; ++i) {
      INFO("update " << i);
      CHECK(std::fabs(got[i].z) < 4.0);
      CHECK(got[i].ver == 0);
      CHECK((got[i].flags & kFlagWarmup) != 0);
      CHECK(std::fabs(got[i].r - r[10 + i]) < 1e-12);
    }
    // Reference, computed here from the definition: v0 = (1.4826 * median |r|)^2
    // over the first 10 returns (even count: mean of the 5th and 6th smallest),
    // then the EWMA over all returns.
    std::vector<double> a;
    for (int i = 0; i < 10; ++i) a.push_back(std::fabs(r[i]));
    std::sort(a.begin(), a.end());
    const double s0 = 1.4826 * 0.5 * (a[4] + a[5]);
    auto ewma = FilterModel::Ewma(0.94, OutputOptions{}, 0);
    REQUIRE(ewma.ok());
    const auto ref = FilterSeries(*ewma, s0 * s0, r);
    for (size_t i = 0; i < got.size(); ++i) {
      CHECK(RelDiff(got[i].var, ref[10 + i].var) < 1e-9);
    }
  }
  // The plain start (start_bars = 1) on the tiny first return: the second
  // update's z is absurd, which is what the robust start prevents.
  std::vector<double> r;
  const auto plain = WarmupOnMinuteBars("[warmup]\nstart_bars = 1\n", 1e-7, &r);
  REQUIRE(plain.size() == 40);
  CHECK(std::fabs(plain[1].z) > 20.0);
}

TEST_CASE("warm-up start: all-zero returns collect afresh; flags carry to the first update",
          "[core]") {
  Fixture f("[warmup]\nstart_bars = 4\n");
  const std::vector<double> r = {0, 0, 0, 0, 0.001, -0.002, 0.0015, 0.0005, 0.001};
  for (size_t i = 0; i < r.size(); ++i) {
    f.core->OnTick(ReturnTick("IDLE.Z", kT0 + static_cast<int64_t>(i) * kSec, r[i]));
  }
  const auto got = Decoded(f.sink, "u.IDLE.Z");
  // Four zeros start nothing; the next four start the variance; one update.
  REQUIRE(got.size() == 1);
  const double v0 = std::pow(1.4826 * 0.5 * (0.001 + 0.0015), 2);
  auto ewma = FilterModel::Ewma(0.94, OutputOptions{}, 0);
  REQUIRE(ewma.ok());
  const auto ref = FilterSeries(*ewma, v0, std::vector<double>(r.begin() + 4, r.end()));
  CHECK(RelDiff(got[0].var, ref[4].var) < 1e-12);
}

TEST_CASE("price ticks: first bar publishes nothing, then log returns", "[core]") {
  Fixture f(testing::kFixedModelToml);
  f.core->OnTick(PriceTick("ELM.P", kT0, 100.0));
  CHECK(f.sink.messages.empty());
  f.core->OnTick(PriceTick("ELM.P", kT0 + kSec, 101.0));
  f.core->OnTick(PriceTick("ELM.P", kT0 + 2 * kSec, 100.5));
  auto got = Decoded(f.sink, "u.ELM.P");
  REQUIRE(got.size() == 2);
  // The bar builder forms log(p1) - log(p0) (no overflow of the ratio).
  CHECK(got[0].r == std::log(101.0) - std::log(100.0));
  CHECK(got[1].r == std::log(100.5) - std::log(101.0));
  CHECK(f.core->counters().bars == 3);
}

TEST_CASE("percent units scale price-derived returns by 100", "[core]") {
  Fixture f(std::string(testing::kFixedModelToml) + "[outputs]\nreturn_units = \"percent\"\n" +
            "target_vol_ann = 10\n");
  f.core->OnTick(PriceTick("ELM.P", kT0, 100.0));
  f.core->OnTick(PriceTick("ELM.P", kT0 + kSec, 101.0));
  auto got = Decoded(f.sink, "u.ELM.P");
  REQUIRE(got.size() == 1);
  CHECK(got[0].r == 100.0 * (std::log(101.0) - std::log(100.0)));
}

TEST_CASE("time bars: ticks aggregate; the clock closes bars; stale marks silent intervals",
          "[core]") {
  Fixture f(std::string(testing::kFixedModelToml) +
            "[bars]\ninterval = \"1s\"\ngrace = \"200ms\"\n");
  const std::string s = "FIR.T";
  f.core->OnTick(ReturnTick(s, kT0 + 100, 0.001));
  f.core->OnTick(ReturnTick(s, kT0 + 500000000, 0.002));
  CHECK(f.sink.messages.empty());
  // A tick in the next bar closes the first one (sum of returns).
  f.core->OnTick(ReturnTick(s, kT0 + kSec + 10, -0.0005));
  auto got = Decoded(f.sink, "u." + s);
  REQUIRE(got.size() == 1);
  CHECK(RelDiff(got[0].r, 0.003) < 1e-15);
  CHECK(got[0].t_ns == kT0 + kSec);
  CHECK((got[0].flags & kFlagStale) == 0);
  // Not yet due: end (t0 + 2 s) + grace (200 ms).
  f.core->OnClock(kT0 + 2 * kSec + 100000000);
  CHECK(Decoded(f.sink, "u." + s).size() == 1);
  f.core->OnClock(kT0 + 2 * kSec + 200000000);
  got = Decoded(f.sink, "u." + s);
  REQUIRE(got.size() == 2);
  CHECK(got[1].r == -0.0005);
  // Closed by the clock, but it had a tick and follows the previous bar: normal.
  CHECK((got[1].flags & kFlagStale) == 0);
  CHECK(f.core->counters().bars_clock_closed == 1);
  // No tick in [t0 + 2 s, t0 + 4 s): the next bar's return spans that silence.
  f.core->OnTick(ReturnTick(s, kT0 + 4 * kSec + 10, 0.004));
  f.core->OnClock(kT0 + 5 * kSec + 200000000);
  got = Decoded(f.sink, "u." + s);
  REQUIRE(got.size() == 3);
  CHECK(got[2].t_ns == kT0 + 5 * kSec);
  CHECK((got[2].flags & kFlagStale) != 0);
  CHECK(f.core->counters().bars_clock_closed == 2);
}

// Records every update in memory (exact bits) and swaps models from OnBar as
// the refit coordinator does: at its 30th update a symbol moves to a fast
// GARCH(1,1) (kRerun over its last returns) or, for every third symbol, to a
// GARCH(2,1) that the batch kernel hands to FilterStep.
class SwappingRecorder : public BarObserver {
 public:
  explicit SwappingRecorder(const OutputOptions& oo) {
    auto s11 = MakeModelSpec("constant", {}, "garch", {1, 1}, "student");
    auto s21 = MakeModelSpec("constant", {}, "garch", {2, 1}, "gaussian");
    REQUIRE((s11.ok() && s21.ok()));
    auto m11 = FilterModel::Create(ModelParams{*s11, {1e-4, 3e-6, 0.07, 0.9, 7.0}}, oo, 5);
    auto m21 = FilterModel::Create(ModelParams{*s21, {1e-4, 3e-6, 0.05, 0.03, 0.88}}, oo, 6);
    REQUIRE((m11.ok() && m21.ok()));
    fast_ = std::make_shared<const FilterModel>(*m11);
    general_ = std::make_shared<const FilterModel>(*m21);
  }
  void OnNewSymbol(IngestCore*, int index, absl::string_view) override {
    if (static_cast<int>(updates.size()) <= index) updates.resize(index + 1);
    returns.resize(updates.size());
  }
  void OnBar(IngestCore* core, int index, const ClosedBar&, BarUpdate* u) override {
    updates[index].push_back(*u);
    returns[index].push_back(u->r);
    if (updates[index].size() != 30) return;
    ModelSwap swap;
    swap.model = index % 3 == 0 ? general_ : fast_;
    swap.start = ModelSwap::Start::kRerun;
    swap.rerun_returns = absl::MakeConstSpan(returns[index].data() + 10, 20);
    REQUIRE(core->SwapModel(index, swap).ok());
  }
  std::vector<std::vector<BarUpdate>> updates;
  std::vector<std::vector<double>> returns;

 private:
  std::shared_ptr<const FilterModel> fast_, general_;
};

bool SameBits(double a, double b) { return std::memcmp(&a, &b, sizeof a) == 0; }

// The batch step in the engine: time bars of 150 symbols closed by the clock
// (OnClock: chunks of bars batch-stepped by FilterBank::StepBatch) publish
// exactly what the same ticks give when each bar is closed by the symbol's
// next tick (HandleBar: FilterBank::Step, i.e. FilterStep): EWMA warm-up,
// fast and general models after swaps, silent symbols, one absurd return.
TEST_CASE("bars closed by the clock are batch-stepped, bit-identical to tick-closed bars",
          "[core][batch]") {
  const std::string toml =
      "[bars]\ninterval = \"1s\"\ngrace = \"200ms\"\n[refit]\nevery_bars = 0\n";
  Fixture clocked(toml), ticked(toml);
  SwappingRecorder rec_clocked(testing::OutputsOf(clocked.config));
  SwappingRecorder rec_ticked(testing::OutputsOf(ticked.config));
  clocked.core->AddObserver(&rec_clocked);
  ticked.core->AddObserver(&rec_ticked);
  constexpr int kSymbols = 150, kSeconds = 80;
  std::vector<std::vector<double>> rets;
  for (int s = 0; s < kSymbols; ++s) rets.push_back(testing::TestReturns(2 * kSeconds, 100 + s));
  uint64_t bars_with_ticks = 0;
  for (int i = 0; i < kSeconds; ++i) {
    for (int s = 0; s < kSymbols; ++s) {
      if ((s * 7 + i) % 11 == 0) continue;  // silent this second
      for (int j = 0; j < 2; ++j) {
        double r = rets[s][2 * i + j];
        if (s == 42 && i == 50 && j == 0) r = 1e200;  // absurd: dropped, state kept
        const Tick t = ReturnTick("SYM" + std::to_string(s), kT0 + i * kSec + (1 + j) * 1000, r);
        clocked.core->OnTick(t);
        ticked.core->OnTick(t);
      }
    }
    // Every bar of second i is due: the clock closes them all at once.
    clocked.core->OnClock(kT0 + (i + 1) * kSec + 200000000);
    bars_with_ticks = clocked.core->counters().bars_clock_closed;
  }
  clocked.core->CloseAllOpenBars();
  ticked.core->CloseAllOpenBars();
  CHECK(bars_with_ticks == clocked.core->counters().bars);
  CHECK(ticked.core->counters().bars_clock_closed == 0);
  REQUIRE(rec_clocked.updates.size() == static_cast<size_t>(kSymbols));
  REQUIRE(rec_ticked.updates.size() == static_cast<size_t>(kSymbols));
  size_t compared = 0;
  for (int s = 0; s < kSymbols; ++s) {
    const auto& a = rec_clocked.updates[s];
    const auto& b = rec_ticked.updates[s];
    INFO("symbol " << s);
    REQUIRE(a.size() == b.size());
    REQUIRE(a.size() > 40);  // past the swap at 30
    for (size_t k = 0; k < a.size(); ++k) {
      INFO("update " << k);
      const double fa[] = {a[k].r,        a[k].mu,       a[k].eps,         a[k].var,
                           a[k].z,        a[k].var_next, a[k].vol_ann,     a[k].scale,
                           a[k].var_h[0], a[k].var_h[2], a[k].var_risk[0], a[k].es[1]};
      const double fb[] = {b[k].r,        b[k].mu,       b[k].eps,         b[k].var,
                           b[k].z,        b[k].var_next, b[k].vol_ann,     b[k].scale,
                           b[k].var_h[0], b[k].var_h[2], b[k].var_risk[0], b[k].es[1]};
      for (int f = 0; f < 12; ++f) REQUIRE(SameBits(fa[f], fb[f]));
      REQUIRE(a[k].t_ns == b[k].t_ns);
      REQUIRE(a[k].flags == b[k].flags);
      REQUIRE(a[k].ver == b[k].ver);
      ++compared;
    }
    const FilterState fa = clocked.core->filter_state(s), fb = ticked.core->filter_state(s);
    REQUIRE(std::memcmp(&fa, &fb, sizeof fa) == 0);
  }
  CHECK(compared == clocked.core->counters().updates_out);
  CHECK(clocked.core->counters().non_finite_output == 1);
  CHECK(clocked.core->counters().updates_out == ticked.core->counters().updates_out);
}

// Counts bars and clock ticks as an observer sees them.
struct ClockCounter : BarObserver {
  void OnBar(IngestCore*, int index, const ClosedBar& bar, BarUpdate*) override {
    closed_by.push_back({index, bar.closed_by_clock});
  }
  void OnClock(IngestCore* core, int64_t now) override {
    ticks.push_back(now);
    under_way_at_tick += core->clock_under_way();
  }
  std::vector<std::pair<int, bool>> closed_by;
  std::vector<int64_t> ticks;
  int under_way_at_tick = 0;
};

// The mechanics of a clock tick in slices (the bytes on the path users run:
// engine_services_test "a clock tick spread over input ...").
TEST_CASE("a clock tick in slices: bars per call, the observers' OnClock once at the end",
          "[core][clock]") {
  Fixture f(std::string(testing::kFixedModelToml) +
            "[bars]\ninterval = \"1s\"\ngrace = \"200ms\"\n");
  ClockCounter seen;
  f.core->AddObserver(&seen);
  // 10 symbols with an open bar in second 0; symbol 4 has none open.
  for (int s = 0; s < 10; ++s) {
    f.core->OnTick(ReturnTick("S" + std::to_string(s), kT0 + 100, 0.001));
    f.core->OnTick(ReturnTick("S" + std::to_string(s), kT0 + kSec + 100, 0.002));
  }
  f.core->OnTick(ReturnTick("S4", kT0 + 2 * kSec + 100, 0.001));  // bar of second 2
  const int64_t now = kT0 + 2 * kSec + 300000000;                 // second 1 due, 2 not
  seen.closed_by.clear();
  f.core->StartClock(now);
  CHECK(f.core->clock_under_way());
  CHECK(f.core->last_clock_ns() == now);
  // 3 bars per call: symbols 0-2, then 3 and 5-6 (4's bar is not due).
  CHECK(f.core->ContinueClock(3, 100));
  REQUIRE(seen.closed_by.size() == 3);
  CHECK(seen.ticks.empty());
  // A tick of symbol 8 (not reached) closes its due bar first, then opens second 2.
  f.core->OnTick(ReturnTick("S8", kT0 + 2 * kSec + 200, 0.003));
  REQUIRE(seen.closed_by.size() == 4);
  CHECK(seen.closed_by[3] == std::make_pair(8, true));
  // A symbol joining during the tick is not the tick's: its late bar stays open.
  f.core->OnTick(ReturnTick("NEW", kT0 + 100, 0.001));
  // At most 2 symbols visited: 3 and 4 (4 not due).
  CHECK(f.core->ContinueClock(100, 2));
  REQUIRE(seen.closed_by.size() == 5);
  CHECK(seen.closed_by[4].first == 3);
  CHECK(f.core->ContinueClock(2, 100));          // 5, 6
  CHECK_FALSE(f.core->ContinueClock(100, 100));  // 7, 9 (8 done), then OnClock
  CHECK_FALSE(f.core->clock_under_way());
  std::vector<int> order;
  for (const auto& [i, by_clock] : seen.closed_by) {
    order.push_back(i);
    CHECK(by_clock);
  }
  CHECK(order == std::vector<int>{0, 1, 2, 8, 3, 5, 6, 7, 9});
  REQUIRE(seen.ticks == std::vector<int64_t>{now});
  CHECK(seen.under_way_at_tick == 0);
  CHECK_FALSE(f.core->ContinueClock(1, 1));  // nothing under way: no second OnClock
  CHECK(seen.ticks.size() == 1);
  // A new tick while one is under way finishes that one first, at its time;
  // that one closes the newcomer's bar and the second-2 bars of 4 and 8.
  f.core->StartClock(now + kSec);
  f.core->StartClock(now + 2 * kSec);
  CHECK(seen.ticks == std::vector<int64_t>{now, now + kSec});
  f.core->FinishClock();
  CHECK(seen.ticks == std::vector<int64_t>{now, now + kSec, now + 2 * kSec});
  CHECK(f.core->symbol_bars(f.core->num_symbols() - 1) == 1);
  CHECK(f.core->counters().bars_clock_closed == 9 + 3);
}

// The clock passes over symbols whose open bar is not due without reading
// their slots (a compact copy of each bar's close time). Reference: the bar
// builder's own FeedTick and CloseIfDue (bar_builder.h) run per symbol, every
// symbol checked at every clock tick. 300 symbols of price ticks on one-second
// bars inside a short daily session over three days, with late and
// out-of-session ticks, clock ticks every 50 to 400 ms, some in slices with
// ticks between them, and symbols joining throughout: every symbol closes the
// same bars, at the same times, with the same returns, by the same cause.
TEST_CASE("the clock closes exactly the bars a check of every symbol closes", "[core][clock]") {
  Fixture f(std::string(testing::kFixedModelToml) +
            "[bars]\ninterval = \"1s\"\ngrace = \"200ms\"\nmax_lateness = \"2s\"\n"
            "session = { start = \"09:30\", end = \"09:31\", timezone_offset_minutes = 0 }\n");
  struct Seen : BarObserver {
    void OnBar(IngestCore*, int index, const ClosedBar& b, BarUpdate*) override {
      bars[index].push_back(b);
    }
    std::map<int, std::vector<ClosedBar>> bars;
  } seen;
  f.core->AddObserver(&seen);
  const BarOptions options = f.config.ToBarOptions();
  const int64_t grace = f.config.bars.grace_ns;
  std::vector<BarState> ref;  // by core index
  std::map<int, std::vector<ClosedBar>> ref_bars;
  std::vector<uint64_t> ref_closed;
  auto keep = [&](int i, const ClosedBar& b) {
    ++ref_closed[i];
    if (b.has_return) ref_bars[i].push_back(b);
  };
  std::mt19937_64 rng(41);
  std::uniform_real_distribution<double> u01(0, 1);
  auto tick = [&](int64_t t) {
    const int sym = static_cast<int>(u01(rng) * 300);
    // One tick in 20 is late by up to 3 s (some beyond max_lateness).
    const int64_t when = u01(rng) < 0.05 ? t - static_cast<int64_t>(u01(rng) * 3 * kSec) : t;
    const Tick k =
        PriceTick(absl::StrCat("N", sym), when, 100.0 * std::exp(0.01 * (u01(rng) - 0.5)));
    f.core->OnTick(k);
    const int i = f.core->FindSymbol(k.symbol.view());
    REQUIRE(i >= 0);
    if (i == static_cast<int>(ref.size())) {
      ref.emplace_back();
      ref_closed.push_back(0);
    }
    const FeedResult r = FeedTick(&ref[i], k, options);
    if (r.closed) keep(i, r.bar);
  };
  int sliced = 0;
  for (int day = 0; day < 3; ++day) {
    // From 10 s before the open to 10 s after the close (ticks outside are refused).
    const int64_t open = kT0 + day * kNanosPerDay;
    int64_t t = open - 10 * kSec;
    int64_t next_clock = t;
    while (t < open + 70 * kSec) {
      t += static_cast<int64_t>(u01(rng) * 20e6);  // about 100 ticks a second
      if (t >= next_clock) {
        next_clock = t + static_cast<int64_t>((0.05 + 0.35 * u01(rng)) * kSec);
        const int symbols_then = f.core->num_symbols();
        for (int i = 0; i < symbols_then; ++i) {
          ClosedBar b;
          if (CloseIfDue(&ref[i], t, grace, options, &b)) keep(i, b);
        }
        f.core->StartClock(t);
        if (u01(rng) < 0.3) {  // in slices, with ticks between them
          ++sliced;
          while (f.core->ContinueClock(1 + static_cast<int>(u01(rng) * 5), 40)) tick(t);
        } else {
          f.core->FinishClock();
        }
        continue;
      }
      tick(t);
    }
  }
  REQUIRE(f.core->num_symbols() == 300);
  CHECK(sliced > 50);
  uint64_t by_clock = 0, compared = 0;
  for (int i = 0; i < 300; ++i) {
    INFO("symbol " << f.core->symbol(i));
    CHECK(f.core->symbol_bars(i) == ref_closed[i]);
    const std::vector<ClosedBar>& a = seen.bars[i];
    const std::vector<ClosedBar>& b = ref_bars[i];
    REQUIRE(a.size() == b.size());
    for (size_t k = 0; k < a.size(); ++k) {
      CHECK(a[k].t_end_ns == b[k].t_end_ns);
      CHECK(a[k].ret == b[k].ret);
      CHECK(a[k].n_ticks == b[k].n_ticks);
      CHECK(a[k].flags == b[k].flags);
      CHECK(a[k].closed_by_clock == b[k].closed_by_clock);
      by_clock += a[k].closed_by_clock;
      ++compared;
    }
  }
  INFO(compared << " bars, " << by_clock << " closed by the clock");
  CHECK(by_clock > 1000);
  CHECK(compared - by_clock > 1000);
}

TEST_CASE("bad-input corpus: every class counted by reason, never fatal, no NaN", "[core]") {
  const std::string toml = std::string(testing::kFixedModelToml) +
                           "[limits]\nmax_symbols = 3\n"
                           "[bars]\nsession = { start = \"08:00\", end = \"16:30\", "
                           "timezone_offset_minutes = 0 }\n";
  Fixture f(toml);
  Fixture fb(toml + "[feed]\nencoding = \"binary\"\nmax_message_bytes = 1048576\n");
  IngestCore* c = f.core.get();
  const std::string s = "GOOD.A";
  int64_t t = kT0;
  SendJson(c, ReturnTick(s, t += kSec, 0.001));
  // malformed_json
  c->OnMessage(s, "{\"t\":1,\"r\":");
  // malformed_binary (binary feed): bad version byte
  fb.core->OnMessage(s, std::string("\xA7\x02\x00\x00", 4));
  // bad_symbol: a space in the symbol frame
  c->OnMessage("BAD SYM", absl::StrCat("{\"t\":", t + 1, ",\"r\":0.001}"));
  // oversize: a body beyond max_message_bytes (65536)
  c->OnMessage(s, std::string(70000, ' '));
  // non_finite: a NaN token
  c->OnMessage(s, absl::StrCat("{\"t\":", t + 2, ",\"r\":NaN}"));
  // non_positive_price (its own symbol, a price symbol)
  c->OnMessage("PRICE.B", absl::StrCat("{\"t\":", t + 3, ",\"p\":-5}"));
  // missing_field: no value
  c->OnMessage(s, absl::StrCat("{\"t\":", t + 4, "}"));
  // batch_too_large: kMaxBatchTicks + 1 binary records on the binary feed
  {
    std::vector<Tick> many(kMaxBatchTicks + 1, ReturnTick("GOOD.A", t + 5, 0.001));
    std::string body;
    EncodeBatchBinary(many, &body);
    fb.core->OnMessage("*", body);
  }
  // too_old: earlier than the symbol's last tick
  SendJson(c, ReturnTick(s, t - 10 * kSec, 0.001));
  // outside_session: 20:00 UTC
  SendJson(c, ReturnTick(s, kT0 + 10 * 3600 * kSec + 30 * 60 * kSec, 0.001));
  // symbol_limit: GOOD.A is 1; two more fit, the fourth does not
  SendJson(c, ReturnTick("SYM.2", t, 0.001));
  SendJson(c, ReturnTick("SYM.3", t, 0.001));
  SendJson(c, ReturnTick("SYM.4", t, 0.001));
  // A one-frame message.
  c->OnMalformedMessage();

  const RejectCounters& rj = c->counters().rejects;
  CHECK(rj.Get(RejectReason::kMalformedJson) == 2);
  CHECK(rj.Get(RejectReason::kBadSymbol) == 1);
  CHECK(rj.Get(RejectReason::kOversize) == 1);
  CHECK(rj.Get(RejectReason::kNonFinite) == 1);
  CHECK(rj.Get(RejectReason::kNonPositivePrice) == 1);
  CHECK(rj.Get(RejectReason::kMissingField) == 1);
  CHECK(rj.Get(RejectReason::kTooOld) == 1);
  CHECK(rj.Get(RejectReason::kOutsideSession) == 1);
  CHECK(rj.Get(RejectReason::kSymbolLimit) == 1);
  const RejectCounters& rb = fb.core->counters().rejects;
  CHECK(rb.Get(RejectReason::kMalformedBinary) == 1);
  CHECK(rb.Get(RejectReason::kBatchTooLarge) == 1);

  // Later good ticks still produce updates.
  const size_t before = Decoded(f.sink, "u." + s).size();
  for (int i = 0; i < 5; ++i) SendJson(c, ReturnTick(s, t += kSec, 0.002 * (i % 2 ? 1 : -1)));
  CHECK(Decoded(f.sink, "u." + s).size() == before + 5);

  // An absurd (finite) return would make the variance overflow: that update is
  // dropped as non_finite_output and the state is kept, so the next is fine.
  SendJson(c, ReturnTick(s, t += kSec, 1e200));
  CHECK(c->counters().non_finite_output == 1);
  SendJson(c, ReturnTick(s, t += kSec, 0.001));
  CHECK(Decoded(f.sink, "u." + s).size() == before + 6);
  for (const auto& m : f.sink.messages) {
    CHECK(m.body.find("nan") == std::string::npos);
    CHECK(m.body.find("inf") == std::string::npos);
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(m.body, &u).ok());
    CHECK(std::isfinite(u.var));
    CHECK(std::isfinite(u.z));
    CHECK(std::isfinite(u.var_next));
  }
}

class FlaggingObserver : public BarObserver {
 public:
  struct Count : SymbolExtra {
    int bars = 0;
  };
  void OnNewSymbol(IngestCore* core, int index, absl::string_view symbol) override {
    core->set_extra(index, 1, std::make_unique<Count>());
    new_symbols.push_back(std::string(symbol));
  }
  void OnBar(IngestCore* core, int index, const ClosedBar& bar, BarUpdate* u) override {
    auto* c = static_cast<Count*>(core->extra(index, 1));
    ++c->bars;
    if (std::fabs(u->z) > 1.5) {
      u->flags |= kFlagFallback;  // any bit: proves flags reach the wire
      core->PublishSymbolMessage(IngestCore::TopicKind::kAlert, index, "{\"kind\":\"shock\"}");
    }
    last_index = index;
  }
  void OnClock(IngestCore* core, int64_t now_ns) override {
    ++clocks;
    if (core->num_symbols() > 0) {
      core->PublishSymbolMessage(IngestCore::TopicKind::kModel, 0, "{\"event\":\"tick\"}");
    }
  }
  std::vector<std::string> new_symbols;
  int last_index = -1;
  int clocks = 0;
};

TEST_CASE("observers see each bar before publishing; extra topics; extra state", "[core]") {
  Fixture f(testing::kFixedModelToml);
  FlaggingObserver obs;
  f.core->AddObserver(&obs);
  const auto r = testing::TestReturns(200, 5);
  for (int i = 0; i < 200; ++i) SendJson(f.core.get(), ReturnTick("HAZEL.Q", kT0 + i * kSec, r[i]));
  f.core->OnClock(kT0 + 300 * kSec);
  REQUIRE(obs.new_symbols == std::vector<std::string>{"HAZEL.Q"});
  CHECK(static_cast<FlaggingObserver::Count*>(f.core->extra(0, 1))->bars == 200);
  CHECK(obs.clocks == 1);
  int alerts = 0, flagged = 0, models = 0;
  for (const auto& m : f.sink.messages) {
    if (m.topic == "a.HAZEL.Q") ++alerts;
    if (m.topic == "m.HAZEL.Q") ++models;
    if (m.topic == "u.HAZEL.Q") {
      BarUpdate u;
      REQUIRE(DecodeUpdateJson(m.body, &u).ok());
      const bool big = std::fabs(u.z) > 1.5;
      CHECK(((u.flags & kFlagFallback) != 0) == big);
      flagged += big;
    }
  }
  CHECK(alerts == flagged);
  CHECK(alerts > 0);
  CHECK(models == 1);
  CHECK(f.core->counters().extra_out == static_cast<uint64_t>(alerts + models));
}

TEST_CASE("SwapModel at a bar boundary, with a re-run over recent returns", "[core]") {
  Fixture f(testing::kFixedModelToml);
  const auto r = testing::TestReturns(120, 9);
  for (int i = 0; i < 100; ++i) SendJson(f.core.get(), ReturnTick("IVY.R", kT0 + i * kSec, r[i]));
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "gaussian");
  REQUIRE(spec.ok());
  auto p2 = ModelParams::FromNamed(
      *spec, {{"mu", 0.0001}, {"omega", 4e-6}, {"alpha_1", 0.1}, {"beta_1", 0.85}});
  REQUIRE(p2.ok());
  auto m2 = FilterModel::Create(*p2, testing::OutputsOf(f.config), 2);
  REQUIRE(m2.ok());
  auto shared = std::make_shared<const FilterModel>(*m2);
  ModelSwap swap;
  swap.model = shared;
  swap.start = ModelSwap::Start::kRerun;
  swap.rerun_returns = absl::MakeConstSpan(r.data() + 50, 50);  // bars 50..99
  REQUIRE(f.core->SwapModel(0, swap).ok());
  for (int i = 100; i < 120; ++i) SendJson(f.core.get(), ReturnTick("IVY.R", kT0 + i * kSec, r[i]));
  // Reference: the new model started at its unconditional variance, run over
  // bars 50..119; the last 20 outputs are the stream's.
  const std::vector<double> window(r.begin() + 50, r.end());
  const auto ref = FilterSeries(*m2, 0.0, window);
  const auto got = Decoded(f.sink, "u.IVY.R");
  REQUIRE(got.size() == 120);
  for (int i = 100; i < 120; ++i) {
    CHECK(got[i].ver == 2);
    CHECK(RelDiff(got[i].var, ref[i - 50].var) < 1e-12);
    CHECK(RelDiff(got[i].var_next, ref[i - 50].var_next) < 1e-12);
  }
  CHECK(f.core->counters().model_swaps == 1);
  // With `replaced`, the model the symbol had comes back instead of being
  // released in the call (a profile only when the swap replaces it).
  auto m3 = FilterModel::Create(*p2, testing::OutputsOf(f.config), 3);
  REQUIRE(m3.ok());
  ModelSwap third;
  third.model = std::make_shared<const FilterModel>(*m3);
  third.start = ModelSwap::Start::kKeepState;
  ReplacedModel replaced;
  const FilterModel* second = shared.get();
  shared.reset();  // the core's reference is now the only one
  swap.model.reset();
  REQUIRE(f.core->SwapModel(0, third, &replaced).ok());
  CHECK(replaced.model.get() == second);
  CHECK(replaced.model.use_count() == 1);
  CHECK(replaced.model->version() == 2);
  CHECK(replaced.profile == nullptr);
  CHECK(f.core->counters().model_swaps == 2);
  swap.model = third.model;
  // Errors are values.
  ModelSwap bad;
  CHECK(f.core->SwapModel(0, bad).message() == "SwapModel: model is null");
  CHECK(f.core->SwapModel(7, swap).message() == "SwapModel: no symbol with index 7");
}

TEST_CASE("a refusing sink: updates counted as drops", "[core]") {
  Fixture f(testing::kFixedModelToml);
  f.sink.refuse = true;
  for (int i = 0; i < 10; ++i) SendJson(f.core.get(), ReturnTick("JUNI.P", kT0 + i * kSec, 0.001));
  CHECK(f.core->counters().drops == 10);
  CHECK(f.core->counters().updates_out == 0);
}

TEST_CASE("steady-state hot path allocates nothing (10,000 ticks)", "[core][alloc]") {
  for (const char* enc : {"json", "binary"}) {
    INFO(enc);
    EngineConfig config =
        ParseConfigOrDie(std::string(testing::kFixedModelToml) + "[publish]\nencoding = \"" + enc +
                         "\"\n" + "[bars]\ninterval = \"1s\"\n");
    NullSink sink;
    ManualClock clock(kT0);
    auto core = IngestCore::Create(config, &sink, &clock);
    REQUIRE(core.ok());
    const std::vector<std::string> syms = {"KAPOK.A", "KAPOK.B", "KAPOK.C", "KAPOK.D"};
    const auto r = testing::TestReturns(12000, 3);
    // Pre-encode every message (encoding is the test's cost, not the engine's).
    std::vector<std::string> bodies(r.size());
    std::vector<std::string> batch_bodies;
    for (size_t i = 0; i < r.size(); ++i) {
      EncodeTickJson(ReturnTick(syms[i % 4], kT0 + static_cast<int64_t>(i) * 300000000, r[i]),
                     &bodies[i]);
    }
    for (size_t i = 0; i < 2000; ++i) (*core)->OnMessage(syms[i % 4], bodies[i]);
    const uint64_t bars_before = (*core)->counters().bars;
    const uint64_t a0 = testing::AllocationCount();
    for (size_t i = 2000; i < 12000; ++i) (*core)->OnMessage(syms[i % 4], bodies[i]);
    (*core)->OnClock(kT0 + 12000LL * 300000000);
    const uint64_t a1 = testing::AllocationCount();
    CHECK(a1 - a0 == 0);
    CHECK((*core)->counters().bars - bars_before > 2000);
    CHECK((*core)->counters().updates_out > 2000);
  }
}

// ---- Recursive tracking ([tracking], recursive_tracker.h) ----

// Offline reference of the core's tracking: the tracker anchored on the model
// in force at its unconditional variance, stepped on each return; in drive mode
// the filter steps with the model retuned to the tracked coefficients.
struct TrackingReference {
  std::vector<BarUpdate> updates;
  RecursiveTracker tracker;
};

TrackingReference RunTrackingReference(const EngineConfig& config, const std::vector<double>& r,
                                       bool drive) {
  auto model = FilterModel::Create(config.model.params, testing::OutputsOf(config), 1);
  REQUIRE(model.ok());
  TrackingReference ref;
  FilterState st;
  InitFilterState(*model, 0.0, &st);
  FilterModel driven = *model;
  ref.tracker.Anchor(model->params(), st.var.next_variance, config.tracking.tracker);
  REQUIRE(ref.tracker.active());
  for (double x : r) {
    ref.tracker.Step(x, config.tracking.tracker);
    BarUpdate u;
    if (drive) {
      const RecursiveTracker& t = ref.tracker;
      driven.RetuneVariance(t.omega(), t.alpha(), t.gamma(), t.beta());
      FilterStep(driven, &st, x, &u);
      ref.tracker.SetNextVariance(st.var.next_variance);
    } else {
      FilterStep(*model, &st, x, &u);
    }
    ref.updates.push_back(u);
  }
  return ref;
}

TEST_CASE("tracking: track keeps the filter's outputs, drive filters with tracked parameters",
          "[core][tracking]") {
  const auto r = testing::TestReturns(1500, 21);
  for (const char* mode : {"track", "drive"}) {
    INFO(mode);
    const bool drive = std::string(mode) == "drive";
    Fixture f(std::string(testing::kFixedModelToml) + "[tracking]\nmode = \"" + mode +
              "\"\nburn_in_bars = 50\n");
    for (size_t i = 0; i < r.size(); ++i) {
      SendJson(f.core.get(), ReturnTick("LARCH.T", kT0 + static_cast<int64_t>(i) * kSec, r[i]));
    }
    const TrackingReference ref = RunTrackingReference(f.config, r, drive);
    const auto got = Decoded(f.sink, "u.LARCH.T");
    REQUIRE(got.size() == ref.updates.size());
    const auto off = FilterSeries(
        *FilterModel::Create(f.config.model.params, testing::OutputsOf(f.config), 1), 0.0, r);
    double max_rel_vs_off = 0;
    for (size_t i = 0; i < got.size(); ++i) {
      // Equal to the reference (up to the JSON wire's rounding).
      CHECK(RelDiff(got[i].var_next, ref.updates[i].var_next) < 1e-12);
      CHECK(RelDiff(got[i].var_h[2], ref.updates[i].var_h[2]) < 1e-12);
      CHECK(got[i].ver == 1);
      max_rel_vs_off = std::max(max_rel_vs_off, RelDiff(got[i].var_next, off[i].var_next));
    }
    const int index = f.core->FindSymbol("LARCH.T");
    const RecursiveTracker& t = f.core->tracker(index);
    REQUIRE(t.active());
    CHECK(t.stepping());
    StateWriter wa, wb;
    t.Save(&wa);
    ref.tracker.Save(&wb);
    CHECK(wa.data() == wb.data());
    if (drive) {
      CHECK(max_rel_vs_off > 1e-3);  // the tracked parameters moved the variance
      CHECK(f.core->model(index).params().values == f.config.model.params.values);
    } else {
      CHECK(max_rel_vs_off == 0);
    }
  }
}

TEST_CASE("tracking: a swap re-anchors the tracker on the new model", "[core][tracking]") {
  Fixture f(std::string(testing::kFixedModelToml) + "[tracking]\nmode = \"drive\"\n");
  const auto r = testing::TestReturns(400, 23);
  for (int i = 0; i < 300; ++i) SendJson(f.core.get(), ReturnTick("ROWAN.S", kT0 + i * kSec, r[i]));
  CHECK(f.core->tracker(0).bars_since_anchor() == 300);
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "gaussian");
  REQUIRE(spec.ok());
  const ModelParams p2{*spec, {0.0001, 4e-6, 0.1, 0.85}};  // mu, omega, alpha_1, beta_1
  auto m2 = FilterModel::Create(p2, testing::OutputsOf(f.config), 2);
  REQUIRE(m2.ok());
  ModelSwap swap;
  swap.model = std::make_shared<const FilterModel>(*m2);
  swap.start = ModelSwap::Start::kRestart;
  REQUIRE(f.core->SwapModel(0, swap).ok());
  SendJson(f.core.get(), ReturnTick("ROWAN.S", kT0 + 300 * kSec, r[300]));
  const RecursiveTracker& t = f.core->tracker(0);
  CHECK(t.bars_since_anchor() == 1);
  REQUIRE(t.num_params() == 3);
  for (int i = 0; i < 3; ++i) {
    CHECK(t.anchor_coefficient(i) == Approx(p2.values[i + 1]).epsilon(1e-12));
  }
  // An EWMA model (the fallback) is not tracked: the filter runs it as is.
  auto ewma = FilterModel::Ewma(0.94, testing::OutputsOf(f.config), 0);
  REQUIRE(ewma.ok());
  swap.model = std::make_shared<const FilterModel>(*ewma);
  swap.initial_variance = 1e-4;
  REQUIRE(f.core->SwapModel(0, swap).ok());
  SendJson(f.core.get(), ReturnTick("ROWAN.S", kT0 + 301 * kSec, r[301]));
  CHECK_FALSE(f.core->tracker(0).active());
  const auto got = Decoded(f.sink, "u.ROWAN.S");
  REQUIRE(got.size() == 302);
  CHECK(got.back().ver == 0);
  CHECK(got.back().var_next == Approx(0.94 * 1e-4 + 0.06 * (r[301] - 0) * (r[301] - 0)));
}

TEST_CASE("tracking groups choose the mode per symbol", "[core][tracking]") {
  Fixture f(std::string(testing::kFixedModelToml) +
            "[tracking]\nmode = \"track\"\n[tracking.groups.fast]\nsymbols = [\"SPRUCE*\"]\n"
            "mode = \"drive\"\n[tracking.groups.none]\nsymbols = [\"YEW.Q\"]\nmode = \"off\"\n");
  for (const char* s : {"SPRUCE.A", "YEW.Q", "OAK.B"}) {
    SendJson(f.core.get(), ReturnTick(s, kT0, 0.001));
  }
  CHECK(f.core->tracking_mode(f.core->FindSymbol("SPRUCE.A")) == TrackingMode::kDrive);
  CHECK(f.core->tracking_mode(f.core->FindSymbol("YEW.Q")) == TrackingMode::kOff);
  CHECK(f.core->tracking_mode(f.core->FindSymbol("OAK.B")) == TrackingMode::kTrack);
  CHECK_FALSE(f.core->tracker(f.core->FindSymbol("YEW.Q")).active());
  CHECK(f.core->tracker(f.core->FindSymbol("OAK.B")).active());
}

TEST_CASE("tracking: the drive hot path allocates nothing", "[core][alloc][tracking]") {
  EngineConfig config =
      ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                       "[bars]\ninterval = \"1s\"\n[tracking]\nmode = \"drive\"\n");
  NullSink sink;
  ManualClock clock(kT0);
  auto core = IngestCore::Create(config, &sink, &clock);
  REQUIRE(core.ok());
  const std::vector<std::string> syms = {"THUJA.A", "THUJA.B"};
  const auto r = testing::TestReturns(8000, 5);
  std::vector<std::string> bodies(r.size());
  for (size_t i = 0; i < r.size(); ++i) {
    EncodeTickJson(ReturnTick(syms[i % 2], kT0 + static_cast<int64_t>(i) * 300000000, r[i]),
                   &bodies[i]);
  }
  for (size_t i = 0; i < 1000; ++i) (*core)->OnMessage(syms[i % 2], bodies[i]);
  const uint64_t a0 = testing::AllocationCount();
  for (size_t i = 1000; i < r.size(); ++i) (*core)->OnMessage(syms[i % 2], bodies[i]);
  CHECK(testing::AllocationCount() - a0 == 0);
  CHECK((*core)->tracker(0).stepping());
}

}  // namespace
}  // namespace aftershock
