// FilterBank: the filter states of many symbols, one packed row per symbol
// holding its hot state beside a compact copy of its model's coefficients,
// and the batch step that advances the symbols whose bars close together
// (time bars closed by the clock: IngestCore::OnClock). The ingest core keeps
// every symbol's filter state here; a symbol is a lane (its index).
//
// Layout (DEVELOPERS.md "Filter state layout"), for lane i:
//   * one row of doubles: the hot state (r_hist[0], eps_hist[0],
//     var.next_variance, var.eps2[0], var.neg_eps2[0], var.sigma2[0],
//     sd_next, mu_next, the bits of bars and of the model version), then the
//     coefficients: mu, ar_1, ma_1, omega, alpha_1, gamma_1, beta_1, lambda,
//     the horizon table's sum coefficients (a then b) and the risk quantiles
//     and ES multipliers of the bank's output shape. A step of a model whose
//     orders are all <= 1 reads and writes only its row, front to back, from
//     one base address.
//   * cold state, one row per lane: the higher lags (r_hist[1..], eps_hist[1..],
//     eps2[1..], neg_eps2[1..], sigma2[1..]), touched only by steps of higher
//     orders and by Get/Set.
//   * the model pointer and a kind byte (which terms the model has).
//
// A lane is "fast" when its model has every order <= 1, closed-form horizons
// (forecast.h) and the bank's output shape (horizons, risk levels,
// annualization, scale: the OutputOptions the bank was made with, which in the
// engine are every model's). StepBatch computes fast lanes with the
// arithmetic of FilterStep term by term, in the same order, so the results
// are bit-identical; other lanes go through FilterStep itself.
//
// Thread-safety: not thread-safe; one thread (the ingest thread) owns a bank.
// The models are not owned: each must outlive its lane's use of it (until
// SetModel replaces it or the bank is destroyed).
#ifndef AFTERSHOCK_FILTER_BANK_H_
#define AFTERSHOCK_FILTER_BANK_H_

#include <array>
#include <cstddef>
#include <cstdint>
#include <cstring>
#include <utility>
#include <vector>

#include "absl/types/span.h"
#include "aftershock/bar_update.h"
#include "aftershock/online_filter.h"

namespace aftershock {

class FilterBank {
 public:
  // `outputs`: the output options of the models the batch kernel computes
  // itself (a model created with others still steps, through FilterStep).
  // REQUIRES: FilterModel::Create accepts `outputs`.
  explicit FilterBank(const OutputOptions& outputs);
  FilterBank(const FilterBank&) = delete;
  FilterBank& operator=(const FilterBank&) = delete;

  // Address space for n lanes, so that adding up to n lanes does not move the
  // rows.
  void Reserve(int n);
  int size() const { return static_cast<int>(model_.size()); }

  // Appends a lane running `model` (REQUIRES: created) from `state`; returns
  // its index.
  int Add(const FilterModel* model, const FilterState& state);
  // Replaces a lane's model (the state is kept). REQUIRES: 0 <= lane < size().
  void SetModel(int lane, const FilterModel* model);
  const FilterModel& model(int lane) const { return *model_[lane]; }
  // True when StepBatch computes the lane itself rather than through FilterStep.
  bool fast(int lane) const { return (kind_[lane] & kFast) != 0; }

  // The lane's whole state (every lag), as a FilterState value.
  FilterState Get(int lane) const;
  void Set(int lane, const FilterState& state);
  // The lane's state in two parts, for a checkpoint capture that copies only
  // what changed (IngestCore::CaptureSymbols): GetHot writes the lag-0
  // values and the bar count into *s (every step changes them), GetCold the
  // higher lags (written only by Set: Add, Init, a restore, and the step or
  // advance of a lane with an order above 1). Get(lane) == GetHot + GetCold.
  // cold_stamp(lane) takes a value the bank never gave before (any lane)
  // each time the lane's higher lags are written, so a copy of GetCold taken
  // when the stamp was x is current while cold_stamp(lane) == x.
  void GetHot(int lane, FilterState* s) const { GatherHot(lane, s); }
  void GetCold(int lane, FilterState* s) const;
  uint64_t cold_stamp(int lane) const { return cold_stamp_[lane]; }
  // Hot values without a gather.
  double next_variance(int lane) const { return Row(lane)[kNv]; }
  double mu_next(int lane) const { return Row(lane)[kMn]; }
  double sd_next(int lane) const { return Row(lane)[kSd]; }

  // InitFilterState / AdvanceState on a lane with its own model.
  void Init(int lane, double variance);
  void Advance(int lane, double r);

  // One bar of one lane with `model` (the lane's own, or another one, e.g. the
  // drive-mode model of recursive tracking): exactly FilterStep(model, state,
  // r, out) on the lane's state. A fast lane with its own model runs the batch
  // kernel on one lane (no gather); others run FilterStep on a gathered state.
  void Step(int lane, const FilterModel& model, double r, BarUpdate* out);

  // One bar of each lanes[k] with its own model and return r[k], written to
  // out[k]: every lane's state and out[k] end bit for bit as FilterStep leaves
  // them (symbol, t_ns and flags of out[k] untouched). Hot path: no allocation.
  // REQUIRES: lanes distinct and in [0, size()); r.size() == lanes.size();
  // out has lanes.size() entries.
  void StepBatch(absl::Span<const int> lanes, absl::Span<const double> r, BarUpdate* out);

 private:
  // kind_ bits: which terms the recursion has (the orders are 0 or 1 on a
  // fast lane) and the variance kind.
  enum : uint8_t {
    kFast = 1 << 0,
    kAr = 1 << 1,     // ar order 1
    kMa = 1 << 2,     // ma order 1
    kAlpha = 1 << 3,  // arch order 1 (not constant/EWMA)
    kGamma = 1 << 4,  // asym order 1
    kBeta = 1 << 5,   // garch order 1
    kFlat = 1 << 6,   // constant variance: omega
    kEwma = 1 << 7,   // lambda var + (1 - lambda) e2
  };
  // Offsets in a lane's row: the hot state (lag-0 values, sd_next,
  // mu_next, the bar count's and the version's bits), then the coefficients
  // (head, then the tables from kRowHead on).
  enum {
    kR1,     // r_hist[0]
    kEps1,   // eps_hist[0]
    kNv,     // var.next_variance
    kE21,    // var.eps2[0]
    kNeg21,  // var.neg_eps2[0]
    kS21,    // var.sigma2[0]
    kSd,     // sd_next
    kMn,     // mu_next
    kBars,   // bars: the int64's bits (LoadBars/StoreBars)
    kVer,    // model version: a uint32's bits in the slot's first 4 bytes
    kMu,
    kArC,
    kMaC,
    kOmega,
    kAlphaC,
    kGammaC,
    kBetaC,
    kLambda,
    kRowHead
  };
  const double* Row(int lane) const { return &rows_[static_cast<size_t>(lane) * row_]; }
  double* Row(int lane) { return &rows_[static_cast<size_t>(lane) * row_]; }
  static int64_t LoadBars(const double* row) {
    int64_t b;
    std::memcpy(&b, row + kBars, sizeof(b));
    return b;
  }
  static void StoreBars(double* row, int64_t b) { std::memcpy(row + kBars, &b, sizeof(b)); }
  static uint32_t LoadVersion(const double* row) {
    uint32_t v;
    std::memcpy(&v, row + kVer, sizeof(v));
    return v;
  }
  static void StoreVersion(double* row, uint32_t v) { std::memcpy(row + kVer, &v, sizeof(v)); }
  // Higher lags per lane in the cold row.
  static constexpr int kColdR = kMaxArmaOrder - 1;
  static constexpr int kColdEps = kMaxArmaOrder - 1;
  static constexpr int kColdE2 = kMaxArchOrder - 1;
  static constexpr int kColdNeg = kMaxGarchOrder - 1;
  static constexpr int kColdS2 = kMaxGarchOrder - 1;
  static constexpr int kCold = kColdR + kColdEps + kColdE2 + kColdNeg + kColdS2;

  // StepBatch on up to kChunk lanes, for NH horizons and NL risk levels (the
  // bank's shape as compile-time counts: the output loops unroll).
  template <int NH, int NL>
  void StepChunk(const int* lanes, const double* r, int c, BarUpdate* out);
  // The rows' and kind bytes' bases for the kernels (loaded once per call).
  struct Bases;
  Bases bases();
  // The kernel of one fast lane in two halves around the root and the two
  // divisions (which StepChunk does for several lanes per instruction): Recurse advances the
  // state and writes the outputs that need neither, returning the next
  // variance, eps and the standardizing sd; Publish writes sd_next and the rest.
  double Recurse(const Bases& c, size_t row_size, int lane, uint8_t kind, double r, BarUpdate* out,
                 double* eps, double* sd);
  // Recurse on c lanes that are all of kind K (K has kFast; row_size ==
  // row_), for StepChunk's pass 1; UniformTable(0..127) lists them by K >> 1.
  template <uint8_t K>
  void RecurseUniform(const Bases& c, size_t row_size, const int* lanes, const double* r, int n,
                      BarUpdate* out, double* chunk_buf);
  using UniformFn = void (FilterBank::*)(const Bases&, size_t, const int*, const double*, int,
                                         BarUpdate*, double*);
  template <size_t... I>
  static auto UniformTable(std::index_sequence<I...>);
  // Output shape of the fast lanes (Publish reads a copy of shape_: stores
  // through BarUpdate* cannot alias a local).
  struct Shape {
    int horizons[kMaxHorizons] = {};
    double levels[kMaxRiskLevels] = {};
    double sqrt_ppy = 0;   // sqrt(periods per year)
    double scale_num = 0;  // target annual vol / sqrt_ppy
    double scale_cap = 0;
  };
  template <int NH, int NL>
  void Publish(const Bases& c, const Shape& shape, int lane, double sd_next, double v, double z,
               double scale, BarUpdate* out) const;
  template <int NH, int NL>
  void StepLane(const int* lane, const double* r, int c, BarUpdate* out);
  using ChunkFn = void (FilterBank::*)(const int*, const double*, int, BarUpdate*);
  template <bool kOneLane, size_t... I>
  static auto ChunkTable(std::index_sequence<I...>);
  // Step through FilterStep on a gathered state (any model).
  void StepGathered(int lane, const FilterModel& model, double r, BarUpdate* out);

  // Lane state gathered into / scattered from a FilterState: only the hot
  // values (enough for a model with every order <= 1), or everything.
  void GatherHot(int lane, FilterState* s) const;
  void ScatterHot(int lane, const FilterState& s);
  void FillRow(int lane);
  bool SameShape(const FilterModel& m) const;

  // Output shape of the fast lanes.
  int nh_ = 0, nl_ = 0;
  Shape shape_;
  int row_ = kRowHead;       // doubles per lane row: state, head, 2 nh + 2 nl
  ChunkFn chunk_ = nullptr;  // StepChunk<nh_, nl_>
  ChunkFn lane_ = nullptr;   // StepLane<nh_, nl_>
  // StepChunk takes the roots and divisions four lanes at a time (the CPU has
  // AVX); otherwise two (SSE2) or one. The results are the same to the bit.
  bool avx_ = false;
  friend class FilterBankTestPeer;  // sets avx_, so that tests cover both paths

  // One row per lane (row_ doubles): hot state, version and coefficients.
  std::vector<double> rows_;
  std::vector<double> cold_;  // kCold per lane
  // Per lane: the stamp of the last write of its cold row (cold_stamp);
  // stamps come from cold_clock_, which only grows.
  std::vector<uint64_t> cold_stamp_;
  uint64_t cold_clock_ = 0;
  // Per lane: model and kind bits.
  std::vector<const FilterModel*> model_;
  std::vector<uint8_t> kind_;
  // Lanes of each kind (indexed by the kind byte): StepChunk skips its
  // per-lane uniformity check when one kind holds every lane.
  std::array<int, 256> kind_lanes_{};
  // Step/Advance of a model with every order <= 1 gather the hot values into
  // it; its higher lags stay zero (such a step never reads or writes them),
  // so it is never cleared.
  FilterState scratch_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_FILTER_BANK_H_
