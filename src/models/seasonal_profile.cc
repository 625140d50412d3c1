#include "aftershock/seasonal_profile.h"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <optional>
#include <utility>

#if defined(__x86_64__)
#include <immintrin.h>
#endif

#include "absl/base/attributes.h"
#include "absl/strings/str_cat.h"
#include "aftershock/least_squares.h"
#include "models/cpu_features.h"
#include "models/local_linear_smoother.h"

namespace aftershock {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr int kPasses = 3;  // level / profile alternations (step 2)

double Bandwidth(const SeasonalOptions& o) {
  if (o.smoothing > 0) return o.smoothing;
  return std::max(1.5, o.buckets / 40.0);
}

int FourierOrder(const SeasonalOptions& o) {
  if (o.smoothing > 0) return static_cast<int>(o.smoothing);
  return std::max(1, std::min(4, o.buckets / 4));
}

// Flexible Fourier form (Andersen & Bollerslev 1997, eq. (8) without the
// dummies): weighted least squares of y on 1, x, x^2 and P harmonics.
std::vector<double> SmoothFourier(const std::vector<double>& y, const std::vector<int>& cnt,
                                  int order) {
  const int n = static_cast<int>(y.size());
  const int cols = 3 + 2 * order;
  auto row = [&](int k, double* out) {
    const double x = (k + 0.5) / n;
    out[0] = 1;
    out[1] = x;
    out[2] = x * x;
    for (int p = 1; p <= order; ++p) {
      out[1 + 2 * p] = std::cos(2 * kPi * p * x);
      out[2 + 2 * p] = std::sin(2 * kPi * p * x);
    }
  };
  std::vector<double> yy, xx;
  std::vector<double> r(cols);
  for (int k = 0; k < n; ++k) {
    if (cnt[k] == 0) continue;
    const double sw = std::sqrt(static_cast<double>(cnt[k]));
    row(k, r.data());
    yy.push_back(sw * y[k]);
    for (double v : r) xx.push_back(sw * v);
  }
  OlsOptions oo;
  oo.add_intercept = false;
  auto fit = OrdinaryLeastSquares(yy, xx, cols, oo);
  std::vector<double> out(n);
  if (!fit.ok()) {
    // Too few buckets for the form: the count-weighted mean.
    double s = 0, w = 0;
    for (int k = 0; k < n; ++k) {
      s += cnt[k] * y[k];
      w += cnt[k];
    }
    std::fill(out.begin(), out.end(), w > 0 ? s / w : 1.0);
    return out;
  }
  for (int k = 0; k < n; ++k) {
    row(k, r.data());
    double v = 0;
    for (int c = 0; c < cols; ++c) v += fit->coefficients[c] * r[c];
    out[k] = v;
  }
  return out;
}

// Element-wise divisions and square roots over whole arrays, L lanes per
// instruction: V is a vector of L doubles (two with SSE2, four where
// internal::CpuHasAvx()). IEEE division and square root are correctly
// rounded at any width, so every path gives the bits of one at a time.
using V2 = double __attribute__((vector_size(16)));

// out[j] = a[j] / b[j] (b == nullptr: a[j] / d).
template <typename V>
ABSL_ATTRIBUTE_ALWAYS_INLINE inline void DivideLanes(const double* a, const double* b, double d,
                                                     double* out, size_t n) {
  constexpr size_t kL = sizeof(V) / sizeof(double);
  V dv;
  for (size_t l = 0; l < kL; ++l) dv[l] = d;
  size_t j = 0;
  for (; j + kL <= n; j += kL) {
    V x, y = dv;
    std::memcpy(&x, a + j, sizeof x);
    if (b != nullptr) std::memcpy(&y, b + j, sizeof y);
    const V z = x / y;
    std::memcpy(out + j, &z, sizeof z);
  }
  for (; j < n; ++j) out[j] = a[j] / (b != nullptr ? b[j] : d);
}

#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
using V4 = double __attribute__((vector_size(32)));
__attribute__((target("avx"))) void DivideAvx(const double* a, const double* b, double d,
                                              double* out, size_t n) {
  DivideLanes<V4>(a, b, d, out, n);
}
__attribute__((target("avx"))) void SqrtAvx(const double* a, double* out, size_t n) {
  size_t j = 0;
  for (; j + 4 <= n; j += 4) _mm256_storeu_pd(out + j, _mm256_sqrt_pd(_mm256_loadu_pd(a + j)));
  for (; j < n; ++j) out[j] = std::sqrt(a[j]);
}
#endif

void DivideAny(const double* a, const double* b, double d, double* out, size_t n, bool avx) {
#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
  if (avx) {
    DivideAvx(a, b, d, out, n);
    return;
  }
#endif
  (void)avx;
  DivideLanes<V2>(a, b, d, out, n);
}
// (*out)[j] = a[j] / b[j]. REQUIRES: a, b and *out the same size.
void Divide(const std::vector<double>& a, const std::vector<double>& b, std::vector<double>* out,
            bool avx) {
  DivideAny(a.data(), b.data(), 0.0, out->data(), a.size(), avx);
}
// (*v)[j] /= d.
void DivideBy(std::vector<double>* v, double d, bool avx) {
  DivideAny(v->data(), nullptr, d, v->data(), v->size(), avx);
}
// (*out)[j] = sqrt(a[j]). REQUIRES: *out the size of a, every a[j] >= 0.
void Sqrt(const std::vector<double>& a, std::vector<double>* out, bool avx) {
#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
  if (avx) {
    SqrtAvx(a.data(), out->data(), a.size());
    return;
  }
#endif
  (void)avx;
  size_t j = 0;
#if defined(__SSE2__)
  for (; j + 2 <= a.size(); j += 2) {
    _mm_storeu_pd(out->data() + j, _mm_sqrt_pd(_mm_loadu_pd(a.data() + j)));
  }
#endif
  for (; j < a.size(); ++j) (*out)[j] = std::sqrt(a[j]);
}

// Floors s at kSeasonalFloor and scales s^2 to mean 1 over the buckets with
// counts (all buckets when none has). Returns the normalizing divisor of s^2.
double Normalize(std::vector<double>* s2, const std::vector<int>* cnt, bool avx) {
  const double floor2 = kSeasonalFloor * kSeasonalFloor;
  double total = 1;
  for (int pass = 0; pass < 2; ++pass) {
    double sum = 0;
    int n = 0;
    for (size_t k = 0; k < s2->size(); ++k) {
      double& v = (*s2)[k];
      if (!(v >= floor2) || !std::isfinite(v)) v = floor2;
      if (cnt == nullptr || (*cnt)[k] > 0) {
        sum += v;
        ++n;
      }
    }
    if (n == 0) {
      for (double v : *s2) sum += v;
      n = static_cast<int>(s2->size());
    }
    const double mean = sum / n;
    DivideBy(s2, mean, avx);
    total *= mean;
  }
  return total;
}

}  // namespace

absl::string_view SeasonalMethodName(SeasonalMethod m) {
  return m == SeasonalMethod::kFourier ? "fourier" : "local-linear";
}

absl::Status ValidateSeasonalOptions(const SeasonalOptions& o) {
  if (o.buckets < 2 || o.buckets > kMaxSeasonalBuckets) {
    return absl::InvalidArgumentError(
        absl::StrCat("bars per session must be in 2..", kMaxSeasonalBuckets, ", got ", o.buckets));
  }
  if (!(o.smoothing >= 0) || !std::isfinite(o.smoothing)) {
    return absl::InvalidArgumentError("smoothing must be a finite number >= 0");
  }
  if (o.method == SeasonalMethod::kFourier && o.smoothing > 0 &&
      (o.smoothing != std::floor(o.smoothing) || o.smoothing > o.buckets / 4)) {
    return absl::InvalidArgumentError(
        absl::StrCat("smoothing (the Fourier order) must be a whole number in 1..", o.buckets / 4,
                     " for ", o.buckets, " bars per session, got ", o.smoothing));
  }
  if (o.min_sessions < 1) return absl::InvalidArgumentError("min_sessions must be >= 1");
  if (!(o.prior_sessions >= 0) || !std::isfinite(o.prior_sessions)) {
    return absl::InvalidArgumentError("prior_sessions must be a finite number >= 0");
  }
  return absl::OkStatus();
}

absl::StatusOr<SeasonalProfile> SeasonalProfile::Create(std::vector<double> factors,
                                                        double overnight_factor, int sessions) {
  const int k = static_cast<int>(factors.size());
  if (k < 2 || k > kMaxSeasonalBuckets) {
    return absl::InvalidArgumentError(
        absl::StrCat("a profile needs 2..", kMaxSeasonalBuckets, " buckets, got ", k));
  }
  for (double v : factors) {
    if (!(v > 0) || !std::isfinite(v)) {
      return absl::InvalidArgumentError("profile factors must be finite and > 0");
    }
  }
  if (!(overnight_factor >= 0) || !std::isfinite(overnight_factor)) {
    return absl::InvalidArgumentError("the overnight factor must be finite and >= 0");
  }
  SeasonalProfile p;
  p.factor0_ = factors[0];
  p.overnight_ = overnight_factor;
  p.sessions_ = sessions;
  p.cycle_ = std::move(factors);
  if (p.overnight_ > 0) p.cycle_[0] = p.overnight_;
  return p;
}

void SeasonalProfile::InvScales(std::vector<double>* out) const {
  out->resize(cycle_.size());
  for (int k = 0; k < buckets(); ++k) (*out)[static_cast<size_t>(k)] = inv_scale(k);
}

std::vector<double> SeasonalProfile::factors() const {
  std::vector<double> f = cycle_;
  f[0] = factor0_;
  return f;
}

absl::StatusOr<SeasonalEstimate> EstimateSeasonalProfile(absl::Span<const double> returns,
                                                         absl::Span<const int32_t> tags,
                                                         const SeasonalOptions& o,
                                                         const SeasonalProfile* prior) {
  if (auto s = ValidateSeasonalOptions(o); !s.ok()) return s;
  if (returns.size() != tags.size()) {
    return absl::InvalidArgumentError("returns and tags must have the same length");
  }
  const int K = o.buckets;
  const size_t n = returns.size();
  // 1. Sessions.
  std::vector<int> session(n, 0);
  int d = -1;
  int prev_k = -1;
  bool prev_overnight = false;
  for (size_t i = 0; i < n; ++i) {
    const int k = SeasonalTagBucket(tags[i]);
    // An opening (overnight) return starts its session; the intraday bar after
    // it may carry the session-start mark too without starting another one.
    const bool start = (tags[i] & kSeasonalTagSessionStart) && !prev_overnight;
    if (i == 0 || start || k <= prev_k) ++d;
    session[i] = d;
    prev_k = k;
    prev_overnight = (tags[i] & kSeasonalTagOvernight) != 0;
  }
  const int num_sessions = d + 1;
  auto usable = [&](size_t i) {
    return SeasonalTagBucket(tags[i]) < K && std::isfinite(returns[i]);
  };

  // What the passes read of each usable observation, in window order:
  // intraday ones (bucket, session, |r|) and overnight ones (session, |r|).
  std::vector<int> ik, is, os;
  std::vector<double> ia, oa;
  ik.reserve(n);
  is.reserve(n);
  ia.reserve(n);
  for (size_t i = 0; i < n; ++i) {
    if (!usable(i)) continue;
    if (tags[i] & kSeasonalTagOvernight) {
      os.push_back(session[i]);
      oa.push_back(std::fabs(returns[i]));
    } else {
      ik.push_back(SeasonalTagBucket(tags[i]));
      is.push_back(session[i]);
      ia.push_back(std::fabs(returns[i]));
    }
  }
  const size_t ni = ik.size();
  // Per pass: m(k) of each intraday observation, its winsorized |r|, and a
  // quotient (the divisions run over whole arrays, several lanes at once).
  std::vector<double> mk(ni), wv(ni), q(ni), lv(ni);
  const bool avx = internal::CpuHasAvx();

  SeasonalEstimate est;
  est.counts.assign(K, 0);
  std::vector<double> m(K, 1.0), level(num_sessions, 0.0), prev_level(num_sessions, 0.0);
  double m_on = 1.0;
  std::vector<double> sum(K);
  std::vector<int> cnt(K);
  std::vector<double> lsum(num_sessions);
  std::vector<int> lcnt(num_sessions);
  double on_sum = 0;
  int on_cnt = 0;
  bool any = false;
  std::optional<internal::LocalLinearSmoother> smoother;
  if (o.method == SeasonalMethod::kLocalLinear) smoother.emplace(K, Bandwidth(o));
  for (int pass = 0; pass < kPasses; ++pass) {
    // Winsorized |r| at kSeasonalWinsor times its fitted mean, level times
    // m(k) (no cap in the first pass: nothing fitted yet).
    auto w = [&](double a, double fitted) {
      return pass == 0 ? a : std::min(a, kSeasonalWinsor * fitted);
    };
    for (size_t j = 0; j < ni; ++j) {
      mk[j] = m[ik[j]];
      wv[j] = w(ia[j], prev_level[is[j]] * mk[j]);
    }
    // Session levels: the mean of |r| / m(k) over the session. A session's
    // observations are consecutive, so each sum runs in a register, adding in
    // window order.
    Divide(wv, mk, &q, avx);
    std::fill(lsum.begin(), lsum.end(), 0.0);
    std::fill(lcnt.begin(), lcnt.end(), 0);
    for (size_t j = 0; j < ni;) {
      const int s = is[j];
      double acc = lsum[s];
      int c = 0;
      for (; j < ni && is[j] == s; ++j, ++c) acc += q[j];
      lsum[s] = acc;
      lcnt[s] += c;
    }
    for (int s = 0; s < num_sessions; ++s) level[s] = lcnt[s] > 0 ? lsum[s] / lcnt[s] : 0.0;
    // Raw bucket profile: |r| over its session's level, averaged per bucket
    // (sessions without a level left out).
    std::fill(sum.begin(), sum.end(), 0.0);
    std::fill(cnt.begin(), cnt.end(), 0);
    on_sum = 0;
    on_cnt = 0;
    for (size_t j = 0; j < ni; ++j) lv[j] = level[is[j]];
    Divide(wv, lv, &q, avx);  // inf or NaN where the level is 0: not used
    for (size_t j = 0; j < ni; ++j) {
      if (!(lv[j] > 0)) continue;
      sum[ik[j]] += q[j];
      ++cnt[ik[j]];
    }
    for (size_t j = 0; j < os.size(); ++j) {
      const double l = level[os[j]];
      if (!(l > 0)) continue;
      on_sum += w(oa[j], prev_level[os[j]] * m_on) / l;
      ++on_cnt;
    }
    any = false;
    std::vector<double> raw(K, 0.0);
    for (int k = 0; k < K; ++k) {
      if (cnt[k] > 0) {
        raw[k] = sum[k] / cnt[k];
        any = true;
      }
    }
    if (!any) break;
    std::vector<double> sm = o.method == SeasonalMethod::kFourier
                                 ? SmoothFourier(raw, cnt, FourierOrder(o))
                                 : smoother->Smooth(raw, cnt);
    for (int k = 0; k < K; ++k) sm[k] = sm[k] > 0 ? sm[k] * sm[k] : 0.0;  // s^2, floored below
    const double div = Normalize(&sm, &cnt, avx);
    Sqrt(sm, &m, avx);  // m(k) = sqrt(s(k)^2), every s(k)^2 floored above 0
    m_on = on_cnt > 0 ? (on_sum / on_cnt) / std::sqrt(div) : 1.0;
    if (!(m_on > 0)) m_on = kSeasonalFloor;
    // Levels are in the units of the normalized m.
    for (int s = 0; s < num_sessions; ++s) prev_level[s] = level[s] * std::sqrt(div);
  }
  // Sessions with a usable intraday return: the runs of `is` (a session's
  // observations are consecutive).
  int sessions_used = 0;
  for (size_t j = 0; j < ni; ++j) sessions_used += j == 0 || is[j] != is[j - 1];
  est.sessions = sessions_used;
  est.counts = cnt;
  est.overnight_count = on_cnt;
  if (any) {
    est.own.resize(K);
    for (int k = 0; k < K; ++k) est.own[k] = m[k] * m[k];
    if (on_cnt > 0) est.own_overnight = m_on * m_on;
  }

  const bool prior_ok = prior != nullptr && prior->buckets() == K;
  const bool own_ok = any && est.sessions >= o.min_sessions;
  std::vector<double> f;
  double on = 0;
  if (own_ok) {
    const double wn = est.sessions;
    const double w0 = prior_ok ? o.prior_sessions : 0.0;
    f.resize(K);
    for (int k = 0; k < K; ++k) {
      f[k] = (wn * est.own[k] + (prior_ok ? w0 * prior->factor(k) : 0.0)) / (wn + w0);
    }
    if (est.own_overnight > 0 && prior_ok && prior->has_overnight()) {
      on = (wn * est.own_overnight + w0 * prior->overnight_factor()) / (wn + w0);
    } else if (est.own_overnight > 0) {
      on = est.own_overnight;
    } else if (prior_ok) {
      on = prior->overnight_factor();
    }
    const double div = Normalize(&f, &est.counts, avx);
    on /= div;
  } else if (prior_ok) {
    f = prior->factors();
    on = prior->overnight_factor();
  } else {
    return est;
  }
  auto prof = SeasonalProfile::Create(std::move(f), on, est.sessions);
  if (!prof.ok()) return prof.status();
  est.profile = std::make_shared<const SeasonalProfile>(*std::move(prof));
  return est;
}

double SeasonalLogScale(const SeasonalProfile* p, int32_t tag) {
  if (p == nullptr) return 0;
  if (tag & kSeasonalTagOvernight) {
    return p->has_overnight() ? 0.5 * std::log(p->overnight_factor()) : 0;
  }
  const int k = SeasonalTagBucket(tag);
  return k < p->buckets() ? 0.5 * std::log(p->factor(k)) : 0;
}

SeasonalPool::SeasonalPool(const SeasonalOptions& options)
    : options_(options), sum_(static_cast<size_t>(std::max(0, options.buckets)), 0.0) {}

SeasonalContribution PoolContribution(const SeasonalEstimate& e) {
  SeasonalContribution c;
  c.sessions = e.sessions;
  c.own.assign(e.own.begin(), e.own.end());  // rounded to nearest float
  c.own_overnight = e.own_overnight;
  return c;
}

template <typename Own>
void SeasonalPool::Accumulate(int sessions, size_t buckets, Own own, double own_overnight) {
  if (buckets != sum_.size() || sessions < options_.min_sessions) return;
  const double w = sessions;
  for (size_t k = 0; k < sum_.size(); ++k) {
    sum_[k] = kPoolDecay * sum_[k] + w * static_cast<double>(own(k));
  }
  weight_ = kPoolDecay * weight_ + w;
  if (own_overnight > 0) {
    overnight_sum_ = kPoolDecay * overnight_sum_ + w * own_overnight;
    overnight_weight_ = kPoolDecay * overnight_weight_ + w;
  }
  ++adds_since_;
}

void SeasonalPool::Add(const SeasonalEstimate& e) {
  Accumulate(
      e.sessions, e.own.size(), [&](size_t k) { return static_cast<float>(e.own[k]); },
      e.own_overnight);
}

void SeasonalPool::Add(const SeasonalContribution& c) {
  Accumulate(
      c.sessions, c.own.size(), [&](size_t k) { return c.own[k]; }, c.own_overnight);
}

SeasonalProfilePtr SeasonalPool::Snapshot(uint64_t refresh_adds) {
  if (adds_since_ == 0) return snapshot_;
  if (snapshot_ != nullptr && adds_since_ < refresh_adds) return snapshot_;
  adds_since_ = 0;
  std::vector<double> f(sum_.size());
  for (size_t k = 0; k < f.size(); ++k) f[k] = sum_[k] / weight_;
  const double div = Normalize(&f, nullptr, internal::CpuHasAvx());
  const double on = overnight_weight_ > 0 ? overnight_sum_ / overnight_weight_ / div : 0.0;
  auto p = SeasonalProfile::Create(std::move(f), on, 0);
  snapshot_ = p.ok() ? std::make_shared<const SeasonalProfile>(*std::move(p)) : nullptr;
  return snapshot_;
}

}  // namespace aftershock

namespace aftershock {

void SeasonalPool::SaveState(StateWriter* w) const {
  w->U64(sum_.size());
  for (double v : sum_) w->F64(v);
  w->F64(weight_);
  w->F64(overnight_sum_);
  w->F64(overnight_weight_);
  w->U64(adds_since_);
  SaveSeasonalProfile(snapshot_.get(), w);
}

void SeasonalPool::RestoreState(StateReader* r) {
  const uint64_t n = r->Count("seasonal pool buckets", kMaxSeasonalBuckets);
  if (!r->ok()) return;
  if (n != sum_.size()) {
    r->Fail("seasonal pool buckets",
            absl::StrCat("the checkpoint has ", n, ", the session has ", sum_.size()));
    return;
  }
  for (double& v : sum_) v = r->F64("seasonal pool sums");
  weight_ = r->F64("seasonal pool weight");
  overnight_sum_ = r->F64("seasonal pool overnight sum");
  overnight_weight_ = r->F64("seasonal pool overnight weight");
  if (!r->ok()) return;
  bool finite = std::isfinite(weight_) && weight_ >= 0 && std::isfinite(overnight_sum_) &&
                std::isfinite(overnight_weight_) && overnight_weight_ >= 0;
  for (double v : sum_) finite = finite && std::isfinite(v);
  if (!finite) {
    r->Fail("seasonal pool", "non-finite or negative sums");
    return;
  }
  adds_since_ = r->U64("seasonal pool estimates since the snapshot");
  snapshot_ = RestoreSeasonalProfile(r, options_, "seasonal pool snapshot");
}

void SaveSeasonalProfile(const SeasonalProfile* p, StateWriter* w) {
  w->Bool(p != nullptr);
  if (p == nullptr) return;
  w->U64(static_cast<uint64_t>(p->buckets()));
  for (int k = 0; k < p->buckets(); ++k) w->F64(p->factor(k));
  w->F64(p->overnight_factor());
  w->I32(p->sessions());
}

SeasonalProfilePtr RestoreSeasonalProfile(StateReader* r, const SeasonalOptions& options,
                                          absl::string_view what) {
  if (!r->Bool(what)) return nullptr;
  const std::string field = absl::StrCat(what, " buckets");
  const uint64_t n = r->Count(field, kMaxSeasonalBuckets);
  if (!r->ok()) return nullptr;
  if (n != static_cast<uint64_t>(options.buckets)) {
    r->Fail(field, absl::StrCat("the checkpoint has ", n, ", the session has ", options.buckets));
    return nullptr;
  }
  std::vector<double> f(n);
  for (double& v : f) v = r->F64(what);
  const double overnight = r->F64(what);
  const int32_t sessions = r->I32(what);
  if (!r->ok()) return nullptr;
  auto p = SeasonalProfile::Create(std::move(f), overnight, sessions);
  if (!p.ok()) {
    r->Fail(what, p.status().message());
    return nullptr;
  }
  return std::make_shared<const SeasonalProfile>(*std::move(p));
}

}  // namespace aftershock
