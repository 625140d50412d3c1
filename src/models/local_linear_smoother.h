// LocalLinearSmoother: the "local-linear" smoother of a seasonal profile's
// bucket values (seasonal_profile.h, step 3): for every bucket k, a local
// linear regression of the values on the bucket index, Gaussian kernel
// weights of bandwidth h times the buckets' counts, evaluated at k. Buckets
// with no counted neighbour within 4 h take the nearest estimate (left first).
//
// For every bucket, with d = j - k over the neighbours j within
// reach = ceil(4 h) that have counts, w = exp(-(d / h)^2 / 2) c_j:
//   s0 = sum w, s1 = sum (w d), s2 = sum (w d) d, t0 = sum w y_j,
//   t1 = sum (w d) y_j, each added in the order of j ascending, and
//   m(k) = (s2 t0 - s1 t1) / (s0 s2 - s1^2), or t0 / s0 when the determinant
//   is at most 1e-9 s0^2.
// The result is that computation's to the bit, on the baseline and the AVX
// path alike (local_linear_smoother_test compares both with it).
//
// Thread-safety: not thread-safe; one object serves the passes of one
// estimate on one thread.
#ifndef AFTERSHOCK_MODELS_LOCAL_LINEAR_SMOOTHER_H_
#define AFTERSHOCK_MODELS_LOCAL_LINEAR_SMOOTHER_H_

#include <vector>

namespace aftershock {
namespace internal {

class LocalLinearSmoother {
 public:
  // n buckets, bandwidth h in buckets. REQUIRES: n >= 1; h > 0 and finite.
  // Allocates about 9 (n + 8 h) doubles.
  LocalLinearSmoother(int n, double h);

  // The smoothed values of y, weighted by cnt. The sums over the counts alone
  // (s0, s1, s2) are kept and reused while the counts equal the last call's
  // (the passes of an estimate usually share them).
  // REQUIRES: y.size() == cnt.size() == n; counts >= 0; y finite where the
  // count is > 0 (other entries are not read).
  std::vector<double> Smooth(const std::vector<double>& y, const std::vector<int>& cnt);

 private:
  int n_;
  int span_ = 0;               // offsets -span_..span_ cover every neighbour (min(reach, n - 1))
  int padded_ = 0;             // n_ rounded up to whole blocks of the widest kernel
  bool avx_;                   // the AVX kernel runs (internal::CpuHasAvx() when made)
  std::vector<double> g_;      // kernel by distance |d|, span_ + 1 entries
  std::vector<double> c_, v_;  // counts and values (0 where no count), span_ zeros each side
  std::vector<double> s0_, s1_, s2_, t0_, t1_;  // the sums per bucket, padded_ entries
  std::vector<int> cnt_;                        // the counts s0_..s2_ hold (empty: none)
};

}  // namespace internal
}  // namespace aftershock

#endif  // AFTERSHOCK_MODELS_LOCAL_LINEAR_SMOOTHER_H_
