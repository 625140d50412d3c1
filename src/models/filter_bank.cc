#include "aftershock/filter_bank.h"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstddef>

#if defined(__SSE2__)
#include <emmintrin.h>
#endif
#include "absl/base/attributes.h"
#include "models/cpu_features.h"

#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
#include <immintrin.h>
#endif

// Bit-identity with FilterStep rests on both computing every value with the
// same IEEE operations in the same order: this file and online_filter.cc are
// compiled with -ffp-contract=off (CMakeLists.txt), so that no build fuses a
// multiply and an add in one of them only. SSE2 sqrtpd/divpd and AVX
// vsqrtpd/vdivpd round exactly as sqrtsd/divsd (IEEE: correctly rounded).

namespace aftershock {
namespace {

// Every order <= 1: a step reads and writes lag 0 only (no shifts).
bool Lag1(int np, int nq, int na, int no, int nb) {
  return np <= 1 && nq <= 1 && na <= 1 && no <= 1 && nb <= 1;
}

// Lanes per pass of StepBatch: the chunk arrays (6 x 64 doubles) stay in L1.
// Pass 2 pads a chunk to whole groups of four lanes within these arrays.
constexpr int kChunk = 64;
static_assert(kChunk % 4 == 0, "pass 2 pads a chunk to a multiple of 4 lanes");

// Pass 1 asks for the row of the lane this many ahead: a large universe's
// rows live past L2 (224 bytes a lane with the default outputs, 2.2 MB at
// 10,000 symbols). filter_bench, builds alternated three times (medians of
// 7): 10,000 symbols 11.1 / 11.4 / 11.6 -> 11.0 / 11.0 / 11.0 ns a step (16
// lanes ahead, or 4, no better); 1,000 symbols, rows inside L2, unchanged
// (9.9-10.1 ns both).
constexpr int kPrefetchLanes = 8;

// Prefetches (for writing) the cache lines of lane's row of row_size doubles.
ABSL_ATTRIBUTE_ALWAYS_INLINE inline void PrefetchRow(const double* rows, size_t row_size,
                                                     int lane) {
  // Four lines unconditionally (a row of the default outputs; a shorter one
  // asks for some of the next lane's, which the next step reads anyway).
  const char* p = reinterpret_cast<const char*>(rows + static_cast<size_t>(lane) * row_size);
  __builtin_prefetch(p, 1);
  __builtin_prefetch(p + 64, 1);
  __builtin_prefetch(p + 128, 1);
  __builtin_prefetch(p + 192, 1);
  for (size_t at = 256; at < row_size * sizeof(double); at += 64) __builtin_prefetch(p + at, 1);
}

#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
// StepChunk's pass 2 four lanes per instruction: the divider is the step's
// bottleneck, and a 256-bit vsqrtpd/vdivpd costs about what a 128-bit one
// does (filter_bench, alternated builds: the batch step 15.2-18.0 -> 13.7-14.6
// ns CPU).
// Compiled for AVX in this function only; FilterBank calls it only when the
// CPU has AVX (avx_). REQUIRES: n a multiple of 4; arrays 32-byte aligned.
__attribute__((target("avx"))) void RootsAndQuotientsAvx(int n, const double* vn, const double* eps,
                                                         const double* sd, double num, double* sdn,
                                                         double* z, double* sc) {
  const __m256d vnum = _mm256_set1_pd(num);
  for (int k = 0; k < n; k += 4) {
    const __m256d s = _mm256_sqrt_pd(_mm256_load_pd(vn + k));
    _mm256_store_pd(sdn + k, s);
    _mm256_store_pd(z + k, _mm256_div_pd(_mm256_load_pd(eps + k), _mm256_load_pd(sd + k)));
    _mm256_store_pd(sc + k, _mm256_div_pd(vnum, s));
  }
}
#endif

}  // namespace

void FilterBank::Reserve(int n) {
  const size_t k = static_cast<size_t>(std::max(n, 0));
  rows_.reserve(k * static_cast<size_t>(row_));
  cold_.reserve(k * kCold);
  cold_stamp_.reserve(k);
  model_.reserve(k);
  kind_.reserve(k);
}

int FilterBank::Add(const FilterModel* model, const FilterState& state) {
  const int lane = size();
  rows_.resize(rows_.size() + static_cast<size_t>(row_), 0.0);
  cold_.resize(cold_.size() + kCold);
  cold_stamp_.push_back(0);  // Set below stamps it
  model_.push_back(model);
  kind_.push_back(0);
  ++kind_lanes_[0];  // FillRow moves the lane to its kind
  FillRow(lane);
  Set(lane, state);
  return lane;
}

void FilterBank::SetModel(int lane, const FilterModel* model) {
  model_[lane] = model;
  FillRow(lane);
}

bool FilterBank::SameShape(const FilterModel& m) const {
  if (m.horizons_.size() != nh_ || m.risk_.size() != nl_) return false;
  for (int i = 0; i < nh_; ++i) {
    if (m.horizons_.horizon(i) != shape_.horizons[i]) return false;
  }
  for (int i = 0; i < nl_; ++i) {
    if (m.risk_.level(i) != shape_.levels[i]) return false;
  }
  return m.sqrt_ppy_ == shape_.sqrt_ppy && m.scale_num_ == shape_.scale_num &&
         m.scale_cap_ == shape_.scale_cap;
}

void FilterBank::FillRow(int lane) {
  const FilterModel& m = *model_[lane];
  double* row = Row(lane);
  StoreVersion(row, m.version_);
  const bool lag1 = Lag1(m.np_, m.nq_, m.na_, m.no_, m.nb_);
  const bool closed = m.horizons_.closed() || m.horizons_.size() == 0;
  uint8_t kind = 0;
  if (lag1 && closed && SameShape(m)) kind |= kFast;
  if (m.np_ == 1) kind |= kAr;
  if (m.nq_ == 1) kind |= kMa;
  if (m.na_ == 1) kind |= kAlpha;
  if (m.no_ == 1) kind |= kGamma;
  if (m.nb_ == 1) kind |= kBeta;
  if (m.variance_ == VarianceKind::kConstant) kind |= kFlat;
  if (m.variance_ == VarianceKind::kEwma) kind |= kEwma;
  --kind_lanes_[kind_[lane]];
  ++kind_lanes_[kind];
  kind_[lane] = kind;
  row[kMu] = m.mu_;
  row[kArC] = m.ar_[0];
  row[kMaC] = m.ma_[0];
  row[kOmega] = m.omega_;
  row[kAlphaC] = m.alpha_[0];
  row[kGammaC] = m.gamma_[0];
  row[kBetaC] = m.beta_[0];
  row[kLambda] = m.lambda_;
  if (!(kind & kFast)) return;  // the rest is read on fast lanes only
  for (int i = 0; i < nh_; ++i) {
    row[kRowHead + i] = m.horizons_.sum_a(i);
    row[kRowHead + nh_ + i] = m.horizons_.sum_b(i);
  }
  for (int i = 0; i < nl_; ++i) {
    row[kRowHead + 2 * nh_ + i] = m.risk_.quantile(i);
    row[kRowHead + 2 * nh_ + nl_ + i] = m.risk_.es_multiplier(i);
  }
}

void FilterBank::GatherHot(int lane, FilterState* s) const {
  const double* row = Row(lane);
  s->r_hist[0] = row[kR1];
  s->eps_hist[0] = row[kEps1];
  s->var.next_variance = row[kNv];
  s->var.eps2[0] = row[kE21];
  s->var.neg_eps2[0] = row[kNeg21];
  s->var.sigma2[0] = row[kS21];
  s->sd_next = row[kSd];
  s->mu_next = row[kMn];
  s->bars = LoadBars(row);
}

void FilterBank::ScatterHot(int lane, const FilterState& s) {
  double* row = Row(lane);
  row[kR1] = s.r_hist[0];
  row[kEps1] = s.eps_hist[0];
  row[kNv] = s.var.next_variance;
  row[kE21] = s.var.eps2[0];
  row[kNeg21] = s.var.neg_eps2[0];
  row[kS21] = s.var.sigma2[0];
  row[kSd] = s.sd_next;
  row[kMn] = s.mu_next;
  StoreBars(row, s.bars);
}

FilterState FilterBank::Get(int lane) const {
  FilterState s;
  GatherHot(lane, &s);
  GetCold(lane, &s);
  return s;
}

void FilterBank::GetCold(int lane, FilterState* out) const {
  FilterState& s = *out;
  const double* c = &cold_[static_cast<size_t>(lane) * kCold];
  std::copy(c, c + kColdR, s.r_hist + 1);
  c += kColdR;
  std::copy(c, c + kColdEps, s.eps_hist + 1);
  c += kColdEps;
  std::copy(c, c + kColdE2, s.var.eps2.begin() + 1);
  c += kColdE2;
  std::copy(c, c + kColdNeg, s.var.neg_eps2.begin() + 1);
  c += kColdNeg;
  std::copy(c, c + kColdS2, s.var.sigma2.begin() + 1);
}

void FilterBank::Set(int lane, const FilterState& s) {
  ScatterHot(lane, s);
  cold_stamp_[lane] = ++cold_clock_;
  double* c = &cold_[static_cast<size_t>(lane) * kCold];
  c = std::copy(s.r_hist + 1, s.r_hist + kMaxArmaOrder, c);
  c = std::copy(s.eps_hist + 1, s.eps_hist + kMaxArmaOrder, c);
  c = std::copy(s.var.eps2.begin() + 1, s.var.eps2.end(), c);
  c = std::copy(s.var.neg_eps2.begin() + 1, s.var.neg_eps2.end(), c);
  std::copy(s.var.sigma2.begin() + 1, s.var.sigma2.end(), c);
}

void FilterBank::Init(int lane, double variance) {
  FilterState s;
  InitFilterState(*model_[lane], variance, &s);
  Set(lane, s);
}

void FilterBank::Advance(int lane, double r) {
  const FilterModel& m = *model_[lane];
  if (Lag1(m.np_, m.nq_, m.na_, m.no_, m.nb_)) {
    GatherHot(lane, &scratch_);
    AdvanceState(m, &scratch_, r);
    ScatterHot(lane, scratch_);
  } else {
    FilterState s = Get(lane);
    AdvanceState(m, &s, r);
    Set(lane, s);
  }
}

void FilterBank::Step(int lane, const FilterModel& m, double r, BarUpdate* out) {
  if (&m == model_[lane] && (kind_[lane] & kFast)) {
    (this->*lane_)(&lane, &r, 1, out);
    return;
  }
  StepGathered(lane, m, r, out);
}

void FilterBank::StepGathered(int lane, const FilterModel& m, double r, BarUpdate* out) {
  // Every order <= 1: the step (and a forecast recursion of a non-closed
  // table) reads and writes lag 0 only, so the hot values are the whole state.
  if (Lag1(m.np_, m.nq_, m.na_, m.no_, m.nb_)) {
    GatherHot(lane, &scratch_);
    FilterStep(m, &scratch_, r, out);
    ScatterHot(lane, scratch_);
  } else {
    FilterState s = Get(lane);
    FilterStep(m, &s, r, out);
    Set(lane, s);
  }
}

struct FilterBank::Bases {
  double* rows;
  const uint8_t* kind;
};

ABSL_ATTRIBUTE_ALWAYS_INLINE inline FilterBank::Bases FilterBank::bases() {
  return Bases{rows_.data(), kind_.data()};
}

ABSL_ATTRIBUTE_ALWAYS_INLINE inline double FilterBank::Recurse(const Bases& c, size_t row_size,
                                                               int l, uint8_t kind, double x,
                                                               BarUpdate* o, double* eps,
                                                               double* sd) {
  // FilterModel::Advance term by term: the lag writes, then the variance and
  // the mean forecast in its summation order. Inlined where kind is a
  // compile-time constant (RecurseUniform), the kind tests fold away.
  double* row = c.rows + static_cast<size_t>(l) * row_size;
  const double mu = row[kMn];
  const double var = row[kNv];
  const double e = x - mu;
  const double e2 = e * e;
  if (kind & kAr) row[kR1] = x;
  if (kind & kMa) row[kEps1] = e;
  row[kE21] = e2;
  const double neg = e < 0.0 ? e2 : 0.0;
  if (kind & kGamma) row[kNeg21] = neg;
  row[kS21] = var;
  double v;
  if (kind & kFlat) {
    v = row[kOmega];
  } else if (kind & kEwma) {
    v = row[kLambda] * var + (1.0 - row[kLambda]) * e2;
  } else {
    v = row[kOmega];
    if (kind & kAlpha) v += row[kAlphaC] * e2;
    if (kind & kGamma) v += row[kGammaC] * neg;
    if (kind & kBeta) v += row[kBetaC] * var;
  }
  row[kNv] = v;
  double m = row[kMu];
  if (kind & kAr) m += row[kArC] * x;
  if (kind & kMa) m += row[kMaC] * e;
  row[kMn] = m;
  StoreBars(row, LoadBars(row) + 1);
  o->r = x;
  o->mu = mu;
  o->eps = e;
  o->var = var;
  o->var_next = v;
  *eps = e;
  *sd = row[kSd];
  return v;
}

template <int NH, int NL>
ABSL_ATTRIBUTE_ALWAYS_INLINE inline void FilterBank::Publish(const Bases& c, const Shape& sh, int l,
                                                             double s, double v, double z,
                                                             double sc, BarUpdate* o) const {
  // FilterStep's outputs from the next-bar forecasts, in its order.
  constexpr size_t kRow = kRowHead + 2 * NH + 2 * NL;
  double* row = c.rows + static_cast<size_t>(l) * kRow;
  const double m = row[kMn];
  row[kSd] = s;
  o->z = z;
  o->vol_ann = s * sh.sqrt_ppy;
  o->n_horizons = NH;
  const double* sum_a = row + kRowHead;
  const double* sum_b = sum_a + NH;
  const double* q = sum_b + NH;
  const double* es = q + NL;
#pragma GCC unroll 8
  for (int i = 0; i < NH; ++i) o->horizons[i] = sh.horizons[i];
  o->n_levels = NL;
#pragma GCC unroll 4
  for (int i = 0; i < NL; ++i) o->levels[i] = sh.levels[i];
  int h = 0;
  int k = 0;
#if defined(__SSE2__)
  // Two outputs per instruction where two adjacent ones share a formula:
  // mulpd/addpd/subpd round each half as mulsd/addsd/subsd do, so the bits
  // are FilterStep's. 124 -> 117 instructions a lane under callgrind; with
  // StepChunk's kind count, filter_bench (alternated builds, medians of 5):
  // the batch step 12.9-13.1 -> 11.5-12.3 ns, one-lane Step 16.5 -> 15.6 ns.
  const __m128d s2 = _mm_set1_pd(s);
  const __m128d m2 = _mm_set1_pd(m);
  const __m128d v2 = _mm_set1_pd(v);
  const __m128d sign = _mm_set1_pd(-0.0);
#pragma GCC unroll 4
  for (; h + 2 <= NH; h += 2) {
    _mm_storeu_pd(o->var_h + h,
                  _mm_add_pd(_mm_loadu_pd(sum_a + h), _mm_mul_pd(_mm_loadu_pd(sum_b + h), v2)));
  }
#pragma GCC unroll 2
  for (; k + 2 <= NL; k += 2) {
    const __m128d qk = _mm_loadu_pd(q + k);
    _mm_storeu_pd(o->var_risk + k, _mm_xor_pd(sign, _mm_add_pd(m2, _mm_mul_pd(s2, qk))));
    _mm_storeu_pd(o->es + k, _mm_sub_pd(_mm_mul_pd(s2, _mm_loadu_pd(es + k)), m2));
  }
#endif
#pragma GCC unroll 8
  for (; h < NH; ++h) o->var_h[h] = sum_a[h] + sum_b[h] * v;
#pragma GCC unroll 4
  for (; k < NL; ++k) {
    o->var_risk[k] = -(m + s * q[k]);
    o->es[k] = s * es[k] - m;
  }
  o->scale = std::min(sh.scale_cap, sc);
  o->ver = LoadVersion(row);
}

template <int NH, int NL>
void FilterBank::StepLane(const int* lane, const double* r, int /*c*/, BarUpdate* out) {
  // One fast lane (Step): the root and divisions one at a time; sqrtsd/divsd
  // round as the chunk's sqrtpd/divpd do.
  const Bases c = bases();
  double e, sd;
  constexpr size_t kRow = kRowHead + 2 * NH + 2 * NL;  // == row_
  const double v = Recurse(c, kRow, *lane, c.kind[*lane], *r, out, &e, &sd);
  const double s = std::sqrt(v);
  Publish<NH, NL>(c, shape_, *lane, s, v, e / sd, shape_.scale_num / s, out);
}

template <uint8_t K>
void FilterBank::RecurseUniform(const Bases& b, size_t row_size, const int* lanes, const double* r,
                                int c, BarUpdate* __restrict out, double* __restrict buf) {
  // One base for the three chunk arrays: the loop is short of registers.
  double* eps = buf;
  double* sd = buf + kChunk;
  double* vn = buf + 2 * kChunk;
  for (int k = 0; k < c; ++k) {
    if (k + kPrefetchLanes < c) PrefetchRow(b.rows, row_size, lanes[k + kPrefetchLanes]);
    vn[k] = Recurse(b, row_size, lanes[k], K, r[k], &out[k], &eps[k], &sd[k]);
  }
}

template <size_t... I>
auto FilterBank::UniformTable(std::index_sequence<I...>) {
  // Entry i: the kind (i << 1) | kFast.
  return std::array<UniformFn, sizeof...(I)>{
      &FilterBank::RecurseUniform<static_cast<uint8_t>((I << 1) | kFast)>...};
}

template <int NH, int NL>
void FilterBank::StepChunk(const int* lanes, const double* r, int c, BarUpdate* out) {
  // Per chunk: eps, the standardizing sd, next variance; then sd_next, z and
  // the unclamped scale from pass 2.
  alignas(32) double buf[6 * kChunk];
  double* const eps = buf;
  double* const sd = buf + kChunk;
  double* const vn = buf + 2 * kChunk;
  double* const sdn = buf + 3 * kChunk;
  double* const z = buf + 4 * kChunk;
  double* const sc = buf + 5 * kChunk;
  bool fast[kChunk];
  constexpr size_t kRow = kRowHead + 2 * NH + 2 * NL;  // == row_
  const Bases base = bases();
  // A copy: stores through BarUpdate* cannot alias a local, so the output
  // loops keep the shape in registers instead of reloading the member after
  // every store.
  const Shape sh = shape_;
  // Pass 1, per lane: the recursions and the outputs that need no division or
  // root; lanes that are not fast step whole through FilterStep. A chunk
  // whose lanes are all fast with one kind (the usual case: one model family
  // across a universe) runs a loop compiled for that kind, without the
  // per-term branches (with the shape copy above, filter_bench: the batch step
  // 13.5 -> 12.9 ns).
  // Every lane of the bank of one kind (kind_lanes_) spares the check per
  // lane (7 instructions a lane under callgrind).
  const uint8_t k0 = base.kind[lanes[0]];
  bool uniform = (k0 & kFast) != 0;
  if (uniform && kind_lanes_[k0] != size()) {
    for (int k = 1; k < c; ++k) uniform &= base.kind[lanes[k]] == k0;
  }
  if (uniform) {
    static const auto table = UniformTable(std::make_index_sequence<128>());
    (this->*table[k0 >> 1])(base, kRow, lanes, r, c, out, buf);
  } else {
    for (int k = 0; k < c; ++k) {
      const int l = lanes[k];
      const uint8_t kind = base.kind[l];
      fast[k] = (kind & kFast) != 0;
      if (!fast[k]) {
        StepGathered(l, *model_[l], r[k], &out[k]);
        eps[k] = 0.0;  // pass 2 computes on these harmlessly; pass 3 skips the lane
        sd[k] = 1.0;
        vn[k] = 1.0;
        continue;
      }
      if (k + kPrefetchLanes < c) PrefetchRow(base.rows, kRow, lanes[k + kPrefetchLanes]);
      vn[k] = Recurse(base, kRow, l, kind, r[k], &out[k], &eps[k], &sd[k]);
    }
  }
  // Pass 2, over the chunk: the root and the two divisions, four lanes per
  // instruction with AVX, two with SSE2 (the divider is the step's
  // bottleneck). Padding lanes compute harmlessly and are never read.
#if defined(__SSE2__)
  const int cp = avx_ ? (c + 3) & ~3 : (c + 1) & ~1;
  for (int k = c; k < cp; ++k) {
    eps[k] = 0.0;
    sd[k] = 1.0;
    vn[k] = 1.0;
  }
#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
  if (avx_) {
    RootsAndQuotientsAvx(cp, vn, eps, sd, sh.scale_num, sdn, z, sc);
  } else
#endif
  {
    const __m128d num = _mm_set1_pd(sh.scale_num);
    for (int k = 0; k < cp; k += 2) {
      const __m128d s = _mm_sqrt_pd(_mm_load_pd(vn + k));
      _mm_store_pd(sdn + k, s);
      _mm_store_pd(z + k, _mm_div_pd(_mm_load_pd(eps + k), _mm_load_pd(sd + k)));
      _mm_store_pd(sc + k, _mm_div_pd(num, s));
    }
  }
#else
  for (int k = 0; k < c; ++k) {
    sdn[k] = std::sqrt(vn[k]);
    z[k] = eps[k] / sd[k];
    sc[k] = sh.scale_num / sdn[k];
  }
#endif
  // Pass 3, per lane: sd_next into the state and the outputs from the
  // next-bar forecasts.
  if (uniform) {
    for (int k = 0; k < c; ++k)
      Publish<NH, NL>(base, sh, lanes[k], sdn[k], vn[k], z[k], sc[k], &out[k]);
  } else {
    for (int k = 0; k < c; ++k) {
      if (fast[k]) Publish<NH, NL>(base, sh, lanes[k], sdn[k], vn[k], z[k], sc[k], &out[k]);
    }
  }
}

template <bool kOneLane, size_t... I>
auto FilterBank::ChunkTable(std::index_sequence<I...>) {
  constexpr int kL = kMaxRiskLevels + 1;
  if constexpr (kOneLane) {
    return std::array<ChunkFn, sizeof...(I)>{
        &FilterBank::StepLane<static_cast<int>(I / kL), static_cast<int>(I % kL)>...};
  } else {
    return std::array<ChunkFn, sizeof...(I)>{
        &FilterBank::StepChunk<static_cast<int>(I / kL), static_cast<int>(I % kL)>...};
  }
}

// After ChunkTable: its return type is deduced from its definition.
FilterBank::FilterBank(const OutputOptions& outputs) : avx_(internal::CpuHasAvx()) {
  // As FilterModel::Create computes them, so that SameShape compares equal.
  nh_ = std::min(static_cast<int>(outputs.horizons.size()), kMaxHorizons);
  nl_ = std::min(static_cast<int>(outputs.risk_levels.size()), kMaxRiskLevels);
  for (int i = 0; i < nh_; ++i) shape_.horizons[i] = outputs.horizons[i];
  for (int i = 0; i < nl_; ++i) shape_.levels[i] = outputs.risk_levels[i];
  shape_.sqrt_ppy = std::sqrt(outputs.periods_per_year);
  shape_.scale_num = outputs.target_vol_ann / shape_.sqrt_ppy;
  shape_.scale_cap = outputs.scale_cap;
  row_ = kRowHead + 2 * nh_ + 2 * nl_;
  constexpr size_t kShapes = (kMaxHorizons + 1) * (kMaxRiskLevels + 1);
  static const auto chunks = ChunkTable<false>(std::make_index_sequence<kShapes>());
  static const auto lanes = ChunkTable<true>(std::make_index_sequence<kShapes>());
  const size_t shape = static_cast<size_t>(nh_ * (kMaxRiskLevels + 1) + nl_);
  chunk_ = chunks[shape];
  lane_ = lanes[shape];
}

void FilterBank::StepBatch(absl::Span<const int> lanes, absl::Span<const double> r,
                           BarUpdate* out) {
  const ChunkFn chunk = chunk_;
  const size_t n = lanes.size();
  for (size_t base = 0; base < n; base += kChunk) {
    const int c = static_cast<int>(std::min<size_t>(kChunk, n - base));
    (this->*chunk)(lanes.data() + base, r.data() + base, c, out + base);
  }
}

}  // namespace aftershock
