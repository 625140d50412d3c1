#include "aftershock/filter_bank.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstring>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "aftershock/online_filter.h"
#include "support/alloc_counter.h"

namespace aftershock {

// Chooses the width of StepChunk's roots and divisions, so that the test
// covers the four-lane (AVX) and the two-lane (SSE2) paths on one machine.
class FilterBankTestPeer {
 public:
  static bool Avx(const FilterBank& bank) { return bank.avx_; }
  static void SetAvx(FilterBank* bank, bool on) { bank->avx_ = on; }
};

namespace {

bool SameBits(double a, double b) { return std::memcmp(&a, &b, sizeof a) == 0; }

// Every field FilterStep writes, bit for bit (NaN payloads included).
void RequireSameUpdate(const BarUpdate& a, const BarUpdate& b) {
  const double fa[] = {a.r, a.mu, a.eps, a.var, a.z, a.var_next, a.vol_ann, a.scale};
  const double fb[] = {b.r, b.mu, b.eps, b.var, b.z, b.var_next, b.vol_ann, b.scale};
  for (int i = 0; i < 8; ++i) {
    INFO("scalar field " << i << ": " << fa[i] << " vs " << fb[i]);
    REQUIRE(SameBits(fa[i], fb[i]));
  }
  REQUIRE(a.n_horizons == b.n_horizons);
  for (int i = 0; i < a.n_horizons; ++i) {
    REQUIRE(a.horizons[i] == b.horizons[i]);
    REQUIRE(SameBits(a.var_h[i], b.var_h[i]));
  }
  REQUIRE(a.n_levels == b.n_levels);
  for (int i = 0; i < a.n_levels; ++i) {
    REQUIRE(SameBits(a.levels[i], b.levels[i]));
    REQUIRE(SameBits(a.var_risk[i], b.var_risk[i]));
    REQUIRE(SameBits(a.es[i], b.es[i]));
  }
  REQUIRE(a.ver == b.ver);
  REQUIRE(a.flags == b.flags);
}

// FilterState is 8-byte fields only (its layout is its checkpoint encoding,
// online_filter.cc), so a byte comparison is a bit comparison of every lag.
void RequireSameState(const FilterState& a, const FilterState& b) {
  REQUIRE(std::memcmp(&a, &b, sizeof a) == 0);
}

// A random valid parameter vector for a spec: stationary, positive variance.
ModelParams RandomParams(const ModelSpec& spec, std::mt19937_64* rng) {
  std::uniform_real_distribution<double> u(0.0, 1.0);
  for (;;) {
    ModelParams p{spec, {}};
    const std::vector<std::string> names = spec.ParamNames();
    const double a_share = 0.02 + 0.15 * u(*rng), persistence = 0.5 + 0.49 * u(*rng);
    for (const std::string& n : names) {
      double v = 0;
      if (n == "mu") {
        v = 1e-3 * (2 * u(*rng) - 1);
      } else if (n.rfind("ar_", 0) == 0) {
        v = 0.4 * (2 * u(*rng) - 1) / spec.ar_order;
      } else if (n.rfind("ma_", 0) == 0) {
        v = 0.4 * (2 * u(*rng) - 1) / spec.ma_order;
      } else if (n == "omega") {
        v = 1e-6 + 1e-4 * u(*rng);
      } else if (n.rfind("alpha_", 0) == 0) {
        v = a_share / spec.arch_order;
      } else if (n.rfind("gamma_", 0) == 0) {
        v = 0.1 * u(*rng) / spec.asym_order;
      } else if (n.rfind("beta_", 0) == 0) {
        v = (persistence - a_share - 0.06) / spec.garch_order;
      } else if (n == "lambda") {
        v = 0.9 + 0.09 * u(*rng);
      } else if (n == "nu") {
        v = 3 + 20 * u(*rng);
      }
      p.values.push_back(v);
    }
    if (p.CheckConstraints().ok()) return p;
  }
}

struct Family {
  const char* mean;
  std::vector<int> order;
  const char* variance;
  VarianceLags lags;
};

// Every mean kind, every variance kind, orders 1 and above (fast and general
// lanes); each with both innovation laws.
const std::vector<Family>& Families() {
  static const auto* f = new std::vector<Family>{
      {"zero", {}, "flat", {}},
      {"constant", {}, "flat", {}},
      {"constant", {}, "arch", {1, -1, -1}},
      {"zero", {}, "arch", {2, -1, -1}},
      {"constant", {}, "garch", {1, 1, -1}},
      {"zero", {}, "garch", {1, 1, -1}},
      {"arma", {1, 0}, "garch", {1, 1, -1}},
      {"arma", {0, 1}, "garch", {1, 1, -1}},
      {"arma", {1, 1}, "garch", {1, 1, -1}},
      {"arma", {1, 1}, "gjr", {1, 1, 1}},
      {"constant", {}, "gjr", {1, 1, 1}},
      {"constant", {}, "garch", {2, 1, -1}},
      {"constant", {}, "garch", {1, 2, -1}},
      {"arma", {2, 1}, "garch", {1, 1, -1}},
      {"arma", {1, 2}, "gjr", {1, 1, 1}},
      {"zero", {}, "gjr", {2, 2, 2}},
      {"zero", {}, "ewma", {}},
      {"arma", {1, 1}, "ewma", {}},
  };
  return *f;
}

struct Universe {
  std::vector<std::unique_ptr<FilterModel>> models;  // owned; lanes point here
  std::vector<const FilterModel*> lane_model;
  std::vector<FilterState> ref;  // the scalar reference of each lane
  explicit Universe(const OutputOptions& oo) : bank(oo) {}
  FilterBank bank;
};

// A return as a feed delivers them: mostly ordinary, some exact zeros, some
// huge moves (a squared return overflows for the largest).
double RandomReturn(std::mt19937_64* rng, double scale) {
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> g(0.0, 1.0);
  const double p = u(*rng);
  if (p < 0.05) return 0.0;
  if (p < 0.07) return (u(*rng) < 0.5 ? -1 : 1) * std::pow(10.0, 1 + 170 * u(*rng));
  return scale * g(*rng);
}

// One bar through StepBatch on a random share of the lanes in random order
// (the engine's batches are ascending), each lane compared bit for bit with
// FilterStep on its reference state.
void StepRandomSubset(Universe* w, double share, int bar, std::mt19937_64* rng) {
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::vector<int> lanes;
  for (int l = 0; l < w->bank.size(); ++l) {
    if (u(*rng) < share) lanes.push_back(l);
  }
  std::shuffle(lanes.begin(), lanes.end(), *rng);
  std::vector<double> r;
  for (size_t k = 0; k < lanes.size(); ++k) r.push_back(RandomReturn(rng, 0.01));
  std::vector<BarUpdate> out(lanes.size()), want(lanes.size());
  w->bank.StepBatch(lanes, r, out.data());
  for (size_t k = 0; k < lanes.size(); ++k) {
    const int l = lanes[k];
    FilterStep(*w->lane_model[l], &w->ref[l], r[k], &want[k]);
    INFO("bar " << bar << " lane " << l << " " << w->lane_model[l]->params().spec.Label()
                << " fast " << w->bank.fast(l) << " r " << r[k]);
    RequireSameUpdate(out[k], want[k]);
    RequireSameState(w->bank.Get(l), w->ref[l]);
  }
}

TEST_CASE("batch step equals the scalar step bit for bit, every family and law", "[bank]") {
  // The bank's own choice (AVX where the CPU has it), then two lanes at a time.
  const bool wide = GENERATE(true, false);
  for (uint64_t seed : {1u, 2u, 3u, 4u}) {
    INFO("seed " << seed << (wide ? ", the CPU's widest roots" : ", two lanes per root"));
    std::mt19937_64 rng(seed);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    OutputOptions engine_outputs;  // the engine's: every model shares them
    OutputOptions other;           // a second shape: those lanes are not fast
    other.horizons = {2, 9};
    other.risk_levels = {0.95};
    other.periods_per_year = 252 * 78;
    Universe w(engine_outputs);
    if (!wide) FilterBankTestPeer::SetAvx(&w.bank, false);
    INFO("four lanes per root: " << FilterBankTestPeer::Avx(w.bank));
    const int kLanes = 400;
    w.bank.Reserve(kLanes);
    std::shared_ptr<FilterModel> shared;
    for (int l = 0; l < kLanes; ++l) {
      const Family& f = Families()[rng() % Families().size()];
      const char* law = (rng() & 1) ? "student" : "gaussian";
      auto spec = MakeModelSpec(f.mean, f.order, f.variance, f.lags, law);
      REQUIRE(spec.ok());
      const bool ewma = spec->variance == VarianceKind::kEwma;
      const uint32_t version = ewma ? 0 : 1 + static_cast<uint32_t>(rng() % 9);
      const OutputOptions& oo = u(rng) < 0.1 ? other : engine_outputs;
      auto m = FilterModel::Create(RandomParams(*spec, &rng), oo, version);
      REQUIRE(m.ok());
      w.models.push_back(std::make_unique<FilterModel>(*m));
      w.lane_model.push_back(w.models.back().get());
      FilterState st;
      // Warm-up/fallback EWMA lanes start from a squared return; the others
      // from their unconditional variance or a given one; some run a few bars.
      const double v0 = ewma || u(rng) < 0.3 ? 1e-4 * (0.1 + u(rng)) : 0.0;
      InitFilterState(*w.lane_model.back(), v0, &st);
      const int pre = static_cast<int>(rng() % 5);
      for (int b = 0; b < pre; ++b)
        AdvanceState(*w.lane_model.back(), &st, RandomReturn(&rng, 0.01));
      w.ref.push_back(st);
      REQUIRE(w.bank.Add(w.lane_model.back(), st) == l);
    }
    int fast = 0;
    for (int l = 0; l < kLanes; ++l) {
      RequireSameState(w.bank.Get(l), w.ref[l]);
      fast += w.bank.fast(l);
    }
    // Both kinds of lanes are present: the batch kernel itself is under test,
    // not only its delegation to FilterStep.
    REQUIRE(fast > kLanes / 3);
    REQUIRE(fast < kLanes);

    for (int bar = 0; bar < 60; ++bar) {
      StepRandomSubset(&w, 0.8, bar, &rng);
      // Model swaps between bars, as the refit coordinator makes them: a new
      // version kept on the state, or an EWMA fallback restarted.
      for (int s = 0; s < 5; ++s) {
        const int l = static_cast<int>(rng() % kLanes);
        if (!std::isfinite(w.ref[l].var.next_variance) || !(w.ref[l].var.next_variance > 0)) {
          // A huge return may overflow a lane: restart it as the engine does.
          w.bank.Init(l, 0.0 + (w.lane_model[l]->is_ewma() ? 1e-4 : 0.0));
          InitFilterState(*w.lane_model[l], w.lane_model[l]->is_ewma() ? 1e-4 : 0.0, &w.ref[l]);
        }
        if (rng() & 1) {
          auto m = FilterModel::Ewma(0.94, engine_outputs, 0);
          REQUIRE(m.ok());
          w.models.push_back(std::make_unique<FilterModel>(*m));
          w.lane_model[l] = w.models.back().get();
          w.bank.SetModel(l, w.lane_model[l]);
          const double v = 1e-4 * (0.5 + u(rng));
          w.bank.Init(l, v);
          InitFilterState(*w.lane_model[l], v, &w.ref[l]);
        } else {
          const Family& f = Families()[rng() % Families().size()];
          auto spec = MakeModelSpec(f.mean, f.order, f.variance, f.lags, "student");
          REQUIRE(spec.ok());
          if (spec->variance == VarianceKind::kEwma) continue;
          auto m = FilterModel::Create(RandomParams(*spec, &rng), engine_outputs, 100 + bar);
          REQUIRE(m.ok());
          w.models.push_back(std::make_unique<FilterModel>(*m));
          w.lane_model[l] = w.models.back().get();
          w.bank.SetModel(l, w.lane_model[l]);
          // kKeepState: lags of the old model's orders stay.
        }
      }
    }
  }
}

// StepChunk runs a chunk whose lanes are all fast and of one kind through a
// loop compiled for that kind (RecurseUniform); the mixed universe above
// almost never forms such a chunk. Here every lane of a bank has one family,
// so every chunk does: each fast family, both laws, both widths of the roots.
TEST_CASE("a chunk of one kind equals the scalar step bit for bit, every fast family", "[bank]") {
  const bool wide = GENERATE(true, false);
  std::mt19937_64 rng(wide ? 21 : 22);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  OutputOptions oo;
  int families_run = 0;
  for (const Family& f : Families()) {
    for (const char* law : {"student", "gaussian"}) {
      auto spec = MakeModelSpec(f.mean, f.order, f.variance, f.lags, law);
      REQUIRE(spec.ok());
      const bool ewma = spec->variance == VarianceKind::kEwma;
      Universe w(oo);
      if (!wide) FilterBankTestPeer::SetAvx(&w.bank, false);
      const int kLanes = 150;  // two full chunks and a partial one
      for (int l = 0; l < kLanes; ++l) {
        const uint32_t version = ewma ? 0 : 1 + static_cast<uint32_t>(rng() % 9);
        auto m = FilterModel::Create(RandomParams(*spec, &rng), oo, version);
        REQUIRE(m.ok());
        w.models.push_back(std::make_unique<FilterModel>(*m));
        w.lane_model.push_back(w.models.back().get());
        FilterState st;
        InitFilterState(*w.lane_model.back(), ewma ? 1e-4 * (0.1 + u(rng)) : 0.0, &st);
        w.ref.push_back(st);
        w.bank.Add(w.lane_model.back(), st);
      }
      if (!w.bank.fast(0)) continue;  // higher orders: FilterStep, tested above
      ++families_run;
      INFO(spec->Label() << (wide ? ", the CPU's widest roots" : ", two lanes per root"));
      // Bars 20-29: one lane runs a family of another kind (its chunk is
      // mixed, the others still uniform); at bar 30 it gets its own back.
      const int odd = static_cast<int>(rng() % kLanes);
      const FilterModel* own = w.lane_model[odd];
      const bool flat = std::string(f.variance) == "flat";
      auto other_spec = flat ? MakeModelSpec("constant", {}, "garch", {1, 1, -1}, law)
                             : MakeModelSpec("zero", {}, "flat", {}, law);
      REQUIRE(other_spec.ok());
      auto other = FilterModel::Create(RandomParams(*other_spec, &rng), oo, 50);
      REQUIRE(other.ok());
      for (int bar = 0; bar < 40; ++bar) {
        if (bar == 20 || bar == 30) {
          w.lane_model[odd] = bar == 20 ? &*other : own;
          w.bank.SetModel(odd, w.lane_model[odd]);
          REQUIRE(w.bank.fast(odd));
        }
        StepRandomSubset(&w, 0.85, bar, &rng);
        for (int l = 0; l < kLanes; ++l) {
          if (!std::isfinite(w.ref[l].var.next_variance) || !(w.ref[l].var.next_variance > 0)) {
            w.bank.Init(l, ewma ? 1e-4 : 0.0);  // an overflowed lane restarts, as in the engine
            InitFilterState(*w.lane_model[l], ewma ? 1e-4 : 0.0, &w.ref[l]);
          }
        }
      }
    }
  }
  // Every family of orders <= 1 in Families() ran (12 of 18), with both laws.
  REQUIRE(families_run == 24);
}

TEST_CASE("scalar step, init and advance on a lane equal the FilterState functions", "[bank]") {
  std::mt19937_64 rng(11);
  OutputOptions oo;
  FilterBank bank(oo);
  std::vector<std::unique_ptr<FilterModel>> models;
  std::vector<FilterState> ref;
  for (const Family& f : Families()) {
    auto spec = MakeModelSpec(f.mean, f.order, f.variance, f.lags, "student");
    REQUIRE(spec.ok());
    auto m = FilterModel::Create(RandomParams(*spec, &rng), oo, 3);
    REQUIRE(m.ok());
    models.push_back(std::make_unique<FilterModel>(*m));
    FilterState st;
    InitFilterState(*models.back(), 2e-4, &st);
    ref.push_back(st);
    bank.Add(models.back().get(), st);
  }
  // A drive-mode model: the lane's GARCH(1,1) retuned, stepped with Step.
  auto drive_spec = MakeModelSpec("constant", {}, "garch", {1, 1, -1}, "student");
  REQUIRE(drive_spec.ok());
  auto driven = FilterModel::Create(RandomParams(*drive_spec, &rng), oo, 5);
  REQUIRE(driven.ok());
  driven->RetuneVariance(3e-6, 0.07, 0.0, 0.9);
  FilterState drive_ref;
  InitFilterState(*driven, 0, &drive_ref);
  const int drive_lane = bank.Add(&*driven, drive_ref);
  for (int bar = 0; bar < 200; ++bar) {
    for (int l = 0; l < bank.size() - 1; ++l) {
      const double x = RandomReturn(&rng, 0.01);
      if (bar % 7 == 3) {
        bank.Advance(l, x);
        AdvanceState(*models[l], &ref[l], x);
      } else {
        BarUpdate a, b;
        bank.Step(l, bank.model(l), x, &a);
        FilterStep(*models[l], &ref[l], x, &b);
        RequireSameUpdate(a, b);
      }
      RequireSameState(bank.Get(l), ref[l]);
      if (!std::isfinite(ref[l].var.next_variance)) {
        bank.Init(l, 1e-4);
        InitFilterState(*models[l], 1e-4, &ref[l]);
        RequireSameState(bank.Get(l), ref[l]);
      }
    }
    const double x = RandomReturn(&rng, 0.01);
    BarUpdate a, b;
    bank.Step(drive_lane, *driven, x, &a);
    FilterStep(*driven, &drive_ref, x, &b);
    RequireSameUpdate(a, b);
    RequireSameState(bank.Get(drive_lane), drive_ref);
    if (!std::isfinite(drive_ref.var.next_variance)) {
      bank.Init(drive_lane, 0);
      InitFilterState(*driven, 0, &drive_ref);
    }
  }
}

TEST_CASE("Get and Set keep every lag; the batch step allocates nothing", "[bank]") {
  std::mt19937_64 rng(5);
  std::uniform_real_distribution<double> u(0.5, 2.0);
  auto spec = MakeModelSpec("arma", {2, 2}, "gjr", {3, 2, 3}, "student");
  REQUIRE(spec.ok());
  auto m = FilterModel::Create(RandomParams(*spec, &rng), OutputOptions{}, 1);
  REQUIRE(m.ok());
  FilterBank bank{OutputOptions{}};
  bank.Reserve(64);
  for (int l = 0; l < 64; ++l) {
    FilterState s;
    for (double& v : s.r_hist) v = u(rng);
    for (double& v : s.eps_hist) v = u(rng);
    for (double& v : s.var.eps2) v = u(rng);
    for (double& v : s.var.neg_eps2) v = u(rng);
    for (double& v : s.var.sigma2) v = u(rng);
    s.var.next_variance = u(rng);
    s.sd_next = std::sqrt(s.var.next_variance);
    s.mu_next = u(rng);
    s.bars = l;
    bank.Add(&*m, s);
    RequireSameState(bank.Get(l), s);
  }
  std::vector<int> lanes(64);
  for (int l = 0; l < 64; ++l) lanes[l] = l;
  std::vector<double> r(64, 0.01);
  std::vector<BarUpdate> out(64);
  const uint64_t before = testing::AllocationCount();
  bank.StepBatch(lanes, r, out.data());
  if (testing::AllocationCountingEnabled()) CHECK(testing::AllocationCount() == before);
}

// The checkpoint capture's reuse (IngestCore::CaptureSymbols): a copy of a
// lane's higher lags taken at cold_stamp x must equal the lane's higher lags
// whenever cold_stamp is still x, whatever ran meanwhile (batch and single
// steps with the lane's or another model, advances, inits, sets, model
// changes), for every family; and a lane whose orders are all 1 keeps its
// stamp through its steps (else nothing would be reused).
TEST_CASE("cold_stamp: a copy of the higher lags is current while the stamp is unchanged",
          "[bank]") {
  std::mt19937_64 rng(17);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  OutputOptions oo;
  FilterBank bank(oo);
  std::vector<std::unique_ptr<FilterModel>> models;
  for (const Family& f : Families()) {
    auto spec = MakeModelSpec(f.mean, f.order, f.variance, f.lags, "student");
    REQUIRE(spec.ok());
    auto m = FilterModel::Create(RandomParams(*spec, &rng), oo, 3);
    REQUIRE(m.ok());
    models.push_back(std::make_unique<FilterModel>(*m));
    FilterState st;
    InitFilterState(*models.back(), 2e-4, &st);
    bank.Add(models.back().get(), st);
  }
  const int n = bank.size();
  // Per lane: the state assembled as the capture does (hot every time, cold
  // only when the stamp moved) and the stamp of its cold part.
  std::vector<FilterState> copy(n);
  std::vector<uint64_t> stamp(n, 0);
  int reused = 0, recopied = 0;
  auto capture_and_check = [&] {
    for (int l = 0; l < n; ++l) {
      bank.GetHot(l, &copy[l]);
      if (stamp[l] != bank.cold_stamp(l)) {
        bank.GetCold(l, &copy[l]);
        stamp[l] = bank.cold_stamp(l);
        ++recopied;
      } else {
        ++reused;
      }
      INFO("lane " << l);
      RequireSameState(copy[l], bank.Get(l));
    }
  };
  capture_and_check();
  std::vector<int> lanes(n);
  for (int l = 0; l < n; ++l) lanes[l] = l;
  std::vector<double> r(n);
  std::vector<BarUpdate> out(n);
  for (int round = 0; round < 300; ++round) {
    const int op = round % 6;
    if (op == 0 || op == 3) {
      for (double& x : r) x = RandomReturn(&rng, 0.01);
      bank.StepBatch(lanes, r, out.data());
    } else if (op == 1) {
      for (int l = 0; l < n; ++l) bank.Step(l, bank.model(l), RandomReturn(&rng, 0.01), &out[l]);
    } else if (op == 2) {
      const int l = static_cast<int>(u(rng) * n);
      bank.Advance(l, RandomReturn(&rng, 0.01));
    } else if (op == 4 && round % 24 == 4) {
      const int l = static_cast<int>(u(rng) * n);
      bank.Init(l, 1e-4);
    } else if (op == 5 && round % 30 == 5) {
      // Another lane's model on this lane (a swap keeps the state).
      const int l = static_cast<int>(u(rng) * n);
      bank.SetModel(l, models[static_cast<size_t>(u(rng) * n)].get());
    }
    for (int l = 0; l < n; ++l) {
      if (!std::isfinite(bank.next_variance(l))) bank.Init(l, 1e-4);
    }
    capture_and_check();
  }
  // Most lanes have orders of at most 1: their higher lags are not rewritten.
  CHECK(reused > recopied);
  // A lane of order 1 stepped alone keeps its stamp; one of order 2 moves it.
  const int fast = 4;   // constant / garch(1,1)
  const int slow = 11;  // constant / garch(2,1)
  REQUIRE(models[fast]->params().spec.arch_order == 1);
  REQUIRE(models[slow]->params().spec.arch_order == 2);
  bank.SetModel(fast, models[fast].get());
  bank.SetModel(slow, models[slow].get());
  const uint64_t fast_stamp = bank.cold_stamp(fast), slow_stamp = bank.cold_stamp(slow);
  bank.Step(fast, bank.model(fast), 0.003, &out[0]);
  bank.Step(slow, bank.model(slow), 0.003, &out[1]);
  CHECK(bank.cold_stamp(fast) == fast_stamp);
  CHECK(bank.cold_stamp(slow) != slow_stamp);
}

}  // namespace
}  // namespace aftershock
