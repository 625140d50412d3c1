#include "models/local_linear_smoother.h"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <cstring>

#include "absl/base/attributes.h"
#include "models/cpu_features.h"

// The baseline and AVX kernels agree to the bit because they do the same IEEE
// multiplications and additions in the same order, lane by lane; this file is
// compiled with -ffp-contract=off (CMakeLists.txt) so that no build fuses a
// multiply-add in one of them only.

namespace aftershock {
namespace internal {
namespace {

// Buckets per block of KernelSums at its widest (2 x 4 lanes); the arrays are
// padded to whole blocks.
constexpr int kBlock = 8;

// The kernel sums of the header for every bucket k, by offset d = j - k from
// -span to span, each computed and added as one bucket at a time would. c and v hold the
// counts and values with `span` zeros on each side (and zeros for empty
// buckets): a zero weight adds a signed zero, which leaves every sum as it was
// (a sum that starts at +0 never becomes -0), so neither the padding nor the
// empty buckets change a bit. V is a vector of L doubles; a block of 2 L
// buckets runs at once, its 2 x 5 sums independent, so the adder is not left
// waiting on one sum's latency. with_counts false: only t0 and t1 (s0..s2
// depend on the counts alone).
template <typename V, bool kWithCounts>
ABSL_ATTRIBUTE_ALWAYS_INLINE inline void KernelSums(int padded, int span, const double* g,
                                                    const double* c, const double* v, double* s0,
                                                    double* s1, double* s2, double* t0,
                                                    double* t1) {
  constexpr int kL = sizeof(V) / sizeof(double);
  for (int k0 = 0; k0 < padded; k0 += 2 * kL) {
    V a0[2] = {}, a1[2] = {}, a2[2] = {}, b0[2] = {}, b1[2] = {};
    for (int d = -span; d <= span; ++d) {
      const double gd = g[std::abs(d)];
      const double dd = d;
      for (int u = 0; u < 2; ++u) {
        V cl, vl;
        std::memcpy(&cl, c + span + k0 + d + u * kL, sizeof(V));
        std::memcpy(&vl, v + span + k0 + d + u * kL, sizeof(V));
        const V w = gd * cl;
        const V wd = w * dd;
        if constexpr (kWithCounts) {
          a0[u] += w;
          a1[u] += wd;
          a2[u] += wd * dd;
        }
        b0[u] += w * vl;
        b1[u] += wd * vl;
      }
    }
    for (int u = 0; u < 2; ++u) {
      const int k = k0 + u * kL;
      if constexpr (kWithCounts) {
        std::memcpy(s0 + k, &a0[u], sizeof(V));
        std::memcpy(s1 + k, &a1[u], sizeof(V));
        std::memcpy(s2 + k, &a2[u], sizeof(V));
      }
      std::memcpy(t0 + k, &b0[u], sizeof(V));
      std::memcpy(t1 + k, &b1[u], sizeof(V));
    }
  }
}

typedef double Double2 __attribute__((vector_size(2 * sizeof(double))));

void KernelSumsBase(bool with_counts, int padded, int span, const double* g, const double* c,
                    const double* v, double* s0, double* s1, double* s2, double* t0, double* t1) {
  if (with_counts) {
    KernelSums<Double2, true>(padded, span, g, c, v, s0, s1, s2, t0, t1);
  } else {
    KernelSums<Double2, false>(padded, span, g, c, v, s0, s1, s2, t0, t1);
  }
}

#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
typedef double Double4 __attribute__((vector_size(4 * sizeof(double))));

// The same sums four lanes per instruction (IEEE multiplications and
// additions round the same at any width; this file is compiled without
// contraction into fused multiply-adds). REQUIRES: internal::CpuHasAvx().
__attribute__((target("avx"))) void KernelSumsAvx(bool with_counts, int padded, int span,
                                                  const double* g, const double* c, const double* v,
                                                  double* s0, double* s1, double* s2, double* t0,
                                                  double* t1) {
  if (with_counts) {
    KernelSums<Double4, true>(padded, span, g, c, v, s0, s1, s2, t0, t1);
  } else {
    KernelSums<Double4, false>(padded, span, g, c, v, s0, s1, s2, t0, t1);
  }
}
#endif

}  // namespace

LocalLinearSmoother::LocalLinearSmoother(int n, double h) : n_(n), avx_(CpuHasAvx()) {
  const int reach = static_cast<int>(std::ceil(4 * h));
  // Every neighbour within reach of a bucket is within n - 1 of it.
  span_ = std::min(reach, n - 1);
  // The kernel by distance, once: it depends on |j - k| only, and (-x)(-x) is
  // x x exactly, so g[|d|] is the weight computed at d to the bit. (Computed
  // per pair, the exp calls were most of a seasonal refit's worker time:
  // about 100 per bucket for 510 buckets, in each pass.)
  g_.resize(static_cast<size_t>(span_) + 1);
  for (int d = 0; d <= span_; ++d) {
    const double x = static_cast<double>(d) / h;
    g_[static_cast<size_t>(d)] = std::exp(-0.5 * x * x);
  }
  padded_ = (n + kBlock - 1) / kBlock * kBlock;
  const size_t m = static_cast<size_t>(padded_);
  c_.assign(m + 2 * static_cast<size_t>(span_), 0.0);
  v_.assign(c_.size(), 0.0);
  for (std::vector<double>* a : {&s0_, &s1_, &s2_, &t0_, &t1_}) a->assign(m, 0.0);
}

std::vector<double> LocalLinearSmoother::Smooth(const std::vector<double>& y,
                                                const std::vector<int>& cnt) {
  const bool with_counts = cnt != cnt_;
  if (with_counts) cnt_ = cnt;
  for (int j = 0; j < n_; ++j) {
    const size_t i = static_cast<size_t>(span_ + j);
    c_[i] = cnt[j];
    v_[i] = cnt[j] == 0 ? 0.0 : y[j];
  }
#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
  if (avx_) {
    KernelSumsAvx(with_counts, padded_, span_, g_.data(), c_.data(), v_.data(), s0_.data(),
                  s1_.data(), s2_.data(), t0_.data(), t1_.data());
  } else {
    KernelSumsBase(with_counts, padded_, span_, g_.data(), c_.data(), v_.data(), s0_.data(),
                   s1_.data(), s2_.data(), t0_.data(), t1_.data());
  }
#else
  KernelSumsBase(with_counts, padded_, span_, g_.data(), c_.data(), v_.data(), s0_.data(),
                 s1_.data(), s2_.data(), t0_.data(), t1_.data());
#endif
  std::vector<double> out(n_, 0.0);
  std::vector<bool> have(n_, false);
  for (int k = 0; k < n_; ++k) {
    const double s0 = s0_[k], s1 = s1_[k], s2 = s2_[k], t0 = t0_[k], t1 = t1_[k];
    if (!(s0 > 0)) continue;
    const double det = s0 * s2 - s1 * s1;
    out[k] = det > 1e-9 * s0 * s0 ? (s2 * t0 - s1 * t1) / det : t0 / s0;
    have[k] = true;
  }
  // Fill holes from the nearest estimated bucket (left first).
  for (int k = 0; k < n_; ++k) {
    if (have[k]) continue;
    for (int d = 1; d < n_; ++d) {
      if (k - d >= 0 && have[k - d]) {
        out[k] = out[k - d];
        break;
      }
      if (k + d < n_ && have[k + d]) {
        out[k] = out[k + d];
        break;
      }
    }
  }
  return out;
}

}  // namespace internal
}  // namespace aftershock
