#include "models/local_linear_smoother.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <cstring>
#include <random>
#include <vector>

#include "models/cpu_features.h"

namespace aftershock {
namespace internal {
namespace {

// The smoother's definition (local_linear_smoother.h), one bucket at a time:
// the computation the blocked kernels must reproduce to the bit.
std::vector<double> Reference(const std::vector<double>& y, const std::vector<int>& cnt, double h) {
  const int n = static_cast<int>(y.size());
  const int reach = static_cast<int>(std::ceil(4 * h));
  std::vector<double> out(n, 0.0);
  std::vector<bool> have(n, false);
  for (int k = 0; k < n; ++k) {
    double s0 = 0, s1 = 0, s2 = 0, t0 = 0, t1 = 0;
    for (int j = std::max(0, k - reach); j <= std::min(n - 1, k + reach); ++j) {
      if (cnt[j] == 0) continue;
      const double d = j - k;
      const double x = d / h;
      const double w = std::exp(-0.5 * x * x) * cnt[j];
      s0 += w;
      s1 += w * d;
      s2 += w * d * d;
      t0 += w * y[j];
      t1 += w * d * y[j];
    }
    if (!(s0 > 0)) continue;
    const double det = s0 * s2 - s1 * s1;
    out[k] = det > 1e-9 * s0 * s0 ? (s2 * t0 - s1 * t1) / det : t0 / s0;
    have[k] = true;
  }
  for (int k = 0; k < n; ++k) {
    if (have[k]) continue;
    for (int d = 1; d < n; ++d) {
      if (k - d >= 0 && have[k - d]) {
        out[k] = out[k - d];
        break;
      }
      if (k + d < n && have[k + d]) {
        out[k] = out[k + d];
        break;
      }
    }
  }
  return out;
}

// Entries that differ in any bit.
int BitDifferences(const std::vector<double>& a, const std::vector<double>& b) {
  if (a.size() != b.size()) return -1;
  int bad = 0;
  for (size_t i = 0; i < a.size(); ++i) bad += std::memcmp(&a[i], &b[i], sizeof(double)) != 0;
  return bad;
}

// Restores the AVX setting when a section ends.
struct AvxSetting {
  explicit AvxSetting(bool disabled) { AvxDisabledForTesting().store(disabled); }
  ~AvxSetting() { AvxDisabledForTesting().store(false); }
};

}  // namespace

TEST_CASE("the smoother reproduces its one-bucket-at-a-time definition to the bit", "[seasonal]") {
  // Both kernels: the widest the CPU has, and the baseline forced.
  const bool baseline = GENERATE(false, true);
  AvxSetting setting(baseline);
  INFO((baseline ? "baseline kernel" : CpuHasAvx() ? "AVX kernel" : "baseline kernel (no AVX)"));
  std::mt19937_64 rng(20261204);
  std::lognormal_distribution<double> value(0, 0.5);
  int compared = 0, differing = 0;
  for (int trial = 0; trial < 400; ++trial) {
    // Bucket counts across the block edges (1..9, 510) and bandwidths from
    // below one bucket to wider than the session.
    const int n = trial < 20 ? 1 + trial % 10 : trial % 7 == 0 ? 510 : 2 + rng() % 700;
    const double h = trial % 5 == 0 ? 0.3 + (rng() % 4000) / 37.0 : std::max(1.5, n / 40.0);
    const int empty_pct = static_cast<int>(rng() % 95);
    std::vector<double> y(n, 0.0);
    std::vector<int> cnt(n, 0);
    for (int k = 0; k < n; ++k) {
      if (static_cast<int>(rng() % 100) < empty_pct) {
        // Not read where the count is 0 (a non-finite value proves it).
        y[k] = trial % 2 ? std::nan("") : 0.0;
        continue;
      }
      cnt[k] = 1 + static_cast<int>(rng() % 6);
      y[k] = value(rng);
    }
    LocalLinearSmoother sm(n, h);
    // Twice with the same counts (the second reuses the count sums), then
    // with new values and changed counts.
    const std::vector<double> first = sm.Smooth(y, cnt);
    differing += BitDifferences(first, Reference(y, cnt, h)) != 0;
    for (double& v : y) v = std::isfinite(v) && v != 0 ? v * value(rng) : v;
    differing += BitDifferences(sm.Smooth(y, cnt), Reference(y, cnt, h)) != 0;
    const int k = static_cast<int>(rng() % n);
    cnt[k] = cnt[k] == 0 ? 3 : 0;
    if (cnt[k] > 0) y[k] = value(rng);
    differing += BitDifferences(sm.Smooth(y, cnt), Reference(y, cnt, h)) != 0;
    compared += 3;
  }
  CHECK(compared == 1200);
  CHECK(differing == 0);
}

TEST_CASE("the smoother fits a straight line and fills buckets without neighbours", "[seasonal]") {
  // A local linear fit reproduces a line (to rounding) wherever at least two
  // counted buckets are within reach; with one, it is that bucket's value;
  // with none, the nearest estimate.
  const int n = 40;
  std::vector<double> y(n);
  std::vector<int> cnt(n, 2);
  for (int k = 0; k < n; ++k) y[k] = 1.0 + 0.05 * k;
  for (int k = 10; k < 30; ++k) cnt[k] = 0;  // a gap of 20 buckets
  LocalLinearSmoother sm(n, 2.0);            // reach ceil(4 h) = 8
  const std::vector<double> out = sm.Smooth(y, cnt);
  for (int k = 0; k <= 16; ++k) CHECK(out[k] == Approx(1.0 + 0.05 * k).epsilon(1e-12));
  for (int k = 23; k < n; ++k) CHECK(out[k] == Approx(1.0 + 0.05 * k).epsilon(1e-12));
  CHECK(out[17] == y[9]);   // only bucket 9 within 8
  CHECK(out[22] == y[30]);  // only bucket 30 within 8
  // 18..21 have no counted bucket within 8: the nearest estimate.
  CHECK(out[18] == out[17]);
  CHECK(out[19] == out[17]);
  CHECK(out[20] == out[22]);
  CHECK(out[21] == out[22]);
}

}  // namespace internal
}  // namespace aftershock
