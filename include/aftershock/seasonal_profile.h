// Intraday seasonality (PRODUCT.md C9): a per-symbol time-of-day volatility
// profile s(k) over the bars of the trading session, k = 0..K-1 the bar's
// index in its session (bar_builder.h), and its estimator.
//
// Model (Andersen & Bollerslev 1997, "Intraday periodicity and volatility
// persistence in financial markets", J. Empirical Finance 4, 115-158): an
// intraday return is r_{d,k} = sigma_d * s(k) * x_{d,k}, where sigma_d is the
// level of session d, s(k) the deterministic time-of-day factor and x the
// deseasonalized return that the GARCH filter models. The engine filters
// x = r / s(k) and re-seasonalizes its forecasts with s(k)^2.
//
// Estimator (EstimateSeasonalProfile), our design after the cited paper's
// two-step idea (normalize by the session level, then fit a smooth function of
// the time of day):
//   1. Split the sample into sessions (a new session starts where a tag has
//      kSeasonalTagSessionStart or k does not increase).
//   2. Alternate three times between
//        L_d  = mean over session d of w(|r|) / m(k)        (session level)
//        m0(k) = mean over sessions of w(|r_{d,k}|) / L_d    (raw bucket profile)
//        m = Smooth(m0), weighted by the bucket counts,
//      starting from m = 1. w() winsorizes |r| at kSeasonalWinsor * L_d * m(k)
//      (from the second pass on), so a dirty tick moves one bucket by a
//      bounded amount. Absolute returns (not squares) keep the sample mean
//      robust to fat tails; E|r_{d,k}| = sigma_d s(k) E|x| makes m proportional
//      to s.
//   3. Smooth: "local-linear" = a local linear regression across neighbouring
//      buckets with a Gaussian kernel of `smoothing` bars (a local linear fit
//      has no first-order bias at the session edges, where the open and close
//      peak); "fourier" = the flexible Fourier form of the paper, least squares
//      on c0 + c1 x + c2 x^2 + sum_{p<=P} (a_p cos 2 pi p x + b_p sin 2 pi p x),
//      x = (k + 0.5) / K, P = `smoothing`, weighted by the bucket counts.
//   4. s(k)^2 = m(k)^2, floored at kSeasonalFloor^2 and normalized so that the
//      mean of s(k)^2 over the buckets that hold returns is 1 (so the
//      deseasonalized returns keep the raw returns' average variance).
//   5. The first return of a session that spans the night (tag bit
//      kSeasonalTagOvernight, [seasonality] opening_return = "scaled") is not
//      an intraday bucket: its variance multiplier is estimated the same way
//      (mean of w(|r|)/L_d, squared, relative to the same normalization) but
//      never smoothed with its neighbours.
//   6. Shrinkage: with n sessions in the sample and a prior profile p (pooled
//      over other symbols), s^2 = (n s_own^2 + n0 p^2) / (n + n0), n0 =
//      prior_sessions, renormalized. Fewer than min_sessions sessions: the own
//      estimate is not used (the prior alone when there is one, else no profile).
//
// Thread-safety: SeasonalProfile is immutable after Create and may be shared
// across threads (std::shared_ptr<const SeasonalProfile>); the functions are
// pure; SeasonalPool is a plain value owned by one thread.
#ifndef AFTERSHOCK_SEASONAL_PROFILE_H_
#define AFTERSHOCK_SEASONAL_PROFILE_H_

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <memory>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "absl/types/span.h"
#include "aftershock/state_codec.h"

namespace aftershock {

// Most bars per session a profile supports (e.g. 1-minute bars over 24 h are
// 1440, 5-second bars over 5.7 h are 4096). Memory: a double a bucket a profile.
inline constexpr int kMaxSeasonalBuckets = 4096;
// Winsorization of |r| at this multiple of its fitted mean (step 2 above).
inline constexpr double kSeasonalWinsor = 5.0;
// Smallest s(k) a profile holds (relative to the normalized level 1), so a
// bucket of near-zero returns cannot divide a later return by ~0.
inline constexpr double kSeasonalFloor = 0.1;

// An observation tag: the bar-of-session index k in the low bits, plus flags.
inline constexpr int32_t kSeasonalTagBucketMask = (1 << 24) - 1;
inline constexpr int32_t kSeasonalTagSessionStart = 1 << 24;  // first return of a session
inline constexpr int32_t kSeasonalTagOvernight = 1 << 25;     // the return spans the night
// Tag of an observation. REQUIRES: 0 <= k <= kSeasonalTagBucketMask.
inline int32_t SeasonalTag(int k, bool session_start, bool overnight) {
  return k | (session_start ? kSeasonalTagSessionStart : 0) |
         (overnight ? kSeasonalTagOvernight : 0);
}
inline int SeasonalTagBucket(int32_t tag) { return tag & kSeasonalTagBucketMask; }

// A tag in 16 bits, as rolling windows hold them (rolling_window.h): the
// bucket in bits 0-13 and the session-start and overnight flags in bits 14 and
// 15. A bucket of kSeasonalTagCompactBucketMax or more (only a session of that
// many bars or more has one) is held as kSeasonalTagCompactBucketMax, which is
// above kMaxSeasonalBuckets: no profile covers either, so both are treated
// alike. Half the bytes of an int32 tag (4 KB a symbol for a 2,000-bar window,
// P5).
inline constexpr int32_t kSeasonalTagCompactBucketMax = (1 << 14) - 1;
static_assert(kSeasonalTagCompactBucketMax >= kMaxSeasonalBuckets,
              "a clamped bucket must lie beyond every profile");
inline uint16_t CompactSeasonalTag(int32_t tag) {
  const int32_t k = std::min(SeasonalTagBucket(tag), kSeasonalTagCompactBucketMax);
  return static_cast<uint16_t>(k | ((tag & kSeasonalTagSessionStart) ? 1 << 14 : 0) |
                               ((tag & kSeasonalTagOvernight) ? 1 << 15 : 0));
}
inline int32_t ExpandSeasonalTag(uint16_t c) {
  return SeasonalTag(c & kSeasonalTagCompactBucketMax, (c & (1 << 14)) != 0, (c & (1 << 15)) != 0);
}

enum class SeasonalMethod : uint8_t { kLocalLinear, kFourier };
absl::string_view SeasonalMethodName(SeasonalMethod m);  // "local-linear" | "fourier"

struct SeasonalOptions {
  // Bars per session K (REQUIRED: 2..kMaxSeasonalBuckets).
  int buckets = 0;
  // Smoother of the bucket profile; default local-linear.
  SeasonalMethod method = SeasonalMethod::kLocalLinear;
  // local-linear: Gaussian kernel bandwidth in bars (> 0; 0 = auto, K / 40 but
  // at least 1.5). fourier: the order P (integer 1..K/4; 0 = auto, 4).
  double smoothing = 0;
  // Sessions of the symbol's own history needed before its own estimate is
  // used; default 3.
  int min_sessions = 3;
  // Weight of the prior (pooled) profile, in sessions; default 5.
  double prior_sessions = 5;
};

// Checks the options. InvalidArgument naming the field otherwise.
absl::Status ValidateSeasonalOptions(const SeasonalOptions& options);

// The variance factors s^2 of the bars after a bar, in session order: a view
// into a profile's cycle of factors, valid while the profile lives. The
// factor j + 1 bars ahead is cycle()[(start() + j) % period()]: past the
// session's last bar the sequence wraps to the next session's bar 0, whose
// factor is the overnight multiplier when the profile has one (its return
// spans the night), else s(0)^2. Any number of bars ahead.
class SeasonalAhead {
 public:
  SeasonalAhead(const double* cycle, int period, int start)
      : cycle_(cycle), period_(period), start_(start) {}
  // The factor j + 1 bars ahead. REQUIRES: j >= 0.
  double at(int j) const { return cycle_[(start_ + j) % period_]; }
  const double* cycle() const { return cycle_; }
  int period() const { return period_; }
  int start() const { return start_; }  // index of the next bar's factor

 private:
  const double* cycle_;
  int period_;
  int start_;
};

// A compiled profile: s(k)^2 per bucket and the overnight multiplier (when
// estimated), in one table of K doubles; 1/s(k) is computed from it. Immutable.
class SeasonalProfile {
 public:
  // factors: s(k)^2 for k = 0..K-1 (K = factors.size() in 2..kMaxSeasonalBuckets),
  // each finite and > 0; overnight_factor: the overnight return's variance
  // multiplier, or 0 for none; sessions: history it rests on (information).
  // InvalidArgument otherwise.
  static absl::StatusOr<SeasonalProfile> Create(std::vector<double> factors,
                                                double overnight_factor, int sessions);

  int buckets() const { return static_cast<int>(cycle_.size()); }
  int sessions() const { return sessions_; }
  // s(k)^2, 1/s(k). REQUIRES: 0 <= k < buckets(). inv_scale computes
  // 1 / sqrt(factor(k)) each call (a square root and a division, the same bits
  // as a stored table; no table is kept, see cycle_); loops over many returns
  // take InvScales once instead.
  double factor(int k) const { return k == 0 ? factor0_ : cycle_[k]; }
  double inv_scale(int k) const { return 1.0 / std::sqrt(factor(k)); }
  // Replaces *out with inv_scale(k) for k = 0..K-1.
  void InvScales(std::vector<double>* out) const;
  bool has_overnight() const { return overnight_ > 0; }
  double overnight_factor() const { return overnight_; }  // 0 when none
  // s^2 of the bars after bar k (SeasonalAhead). REQUIRES: 0 <= k < buckets().
  SeasonalAhead ahead(int k) const {
    return SeasonalAhead(cycle_.data(), buckets(), k + 1 == buckets() ? 0 : k + 1);
  }
  // s(k)^2 for k = 0..K-1 (a copy).
  std::vector<double> factors() const;

 private:
  // The factors in session order as bars follow each other: cycle_[k] =
  // s(k)^2 for k >= 1, cycle_[0] = the overnight multiplier when there is one
  // (the first bar of a session follows the night), else s(0)^2. One table
  // serves factor() and every horizon of ahead() (it was three: the factors,
  // 1/s(k), and a look-ahead of K + largest horizon + 1 doubles, 20 KB a
  // profile for 510 buckets and horizons to 512 bars; two profiles a symbol
  // are alive while a refit waits to be applied, P5). The per-bar cost of
  // computing 1/s(k) is one square root and one division.
  std::vector<double> cycle_;
  double factor0_ = 0;  // s(0)^2
  double overnight_ = 0;
  int sessions_ = 0;
};

using SeasonalProfilePtr = std::shared_ptr<const SeasonalProfile>;

// Result of an estimation.
struct SeasonalEstimate {
  int sessions = 0;         // sessions in the sample
  std::vector<int> counts;  // intraday returns per bucket (K entries)
  int overnight_count = 0;  // overnight returns
  // The symbol's own normalized s(k)^2 before shrinkage (K entries; empty when
  // the sample has no intraday return) and its overnight multiplier (0: none).
  std::vector<double> own;
  double own_overnight = 0;
  // The profile to use: own estimate shrunk toward the prior; null when
  // sessions < min_sessions and there is no prior.
  SeasonalProfilePtr profile;
};

// What SeasonalPool::Add takes from an estimate: its sessions, its own factors
// rounded to single precision, and its own overnight multiplier. The pool
// averages the rounded factors whichever form it is given, so the two agree
// to the bit. A refit job keeps this, not the estimate, until it is applied
// (half the bytes of the own factors: 2 KB for 510 buckets a waiting job,
// P5); the rounding, a relative 6e-8 at most, is far below a bucket
// estimate's sampling error.
struct SeasonalContribution {
  int sessions = 0;
  std::vector<float> own;  // empty: no own estimate
  double own_overnight = 0;
};
SeasonalContribution PoolContribution(const SeasonalEstimate& estimate);

// Estimates a profile from returns and their tags (same length; oldest
// first). Tags with a bucket >= options.buckets are ignored. prior may be
// null. InvalidArgument for bad options or mismatched lengths.
absl::StatusOr<SeasonalEstimate> EstimateSeasonalProfile(absl::Span<const double> returns,
                                                         absl::Span<const int32_t> tags,
                                                         const SeasonalOptions& options,
                                                         const SeasonalProfile* prior);

// What the filter consumes for one tagged raw return under `profile` (may be
// null): the deseasonalized return r / s(k) (the overnight multiplier for an
// overnight tag), r itself without a profile. False when the filter does not
// consume it: an overnight return without an estimated multiplier.
// The one definition used by the ingest core, the refit worker and the swap
// re-run, so the three agree.
// inv_scales: null, or the profile's InvScales() (K entries), read instead of
// computing 1/s(k): the same bits either way.
inline bool SeasonalInput(const SeasonalProfile* profile, double r, int32_t tag, double* x,
                          const double* inv_scales = nullptr) {
  if (tag & kSeasonalTagOvernight) {
    if (profile == nullptr || !profile->has_overnight()) return false;
    *x = r / std::sqrt(profile->overnight_factor());
    return true;
  }
  const int k = SeasonalTagBucket(tag);
  if (profile == nullptr || k >= profile->buckets()) {
    *x = r;
  } else {
    *x = r * (inv_scales != nullptr ? inv_scales[k] : profile->inv_scale(k));
  }
  return true;
}

// Log of s for a tagged return (0 without a profile): the Jacobian term that
// turns a log-likelihood of deseasonalized returns into one of raw returns.
double SeasonalLogScale(const SeasonalProfile* profile, int32_t tag);

// Checkpoint encoding of a profile (null allowed): its factors, overnight
// multiplier and sessions; the derived tables are rebuilt by Create.
void SaveSeasonalProfile(const SeasonalProfile* profile, StateWriter* w);
// Reads what SaveSeasonalProfile wrote and rebuilds it with Create for
// `options` (buckets must equal options.buckets).
// Anything invalid sets the reader's error naming `what`; the result is then
// null. Check r->ok() after the record.
SeasonalProfilePtr RestoreSeasonalProfile(StateReader* r, const SeasonalOptions& options,
                                          absl::string_view what);

// A pooled profile: an exponentially weighted average (decay kPoolDecay per
// contribution, weights = the contributions' sessions) of symbols' own
// estimates, the prior toward which a short history is shrunk. Deterministic
// given the order of contributions. Owned by one thread.
class SeasonalPool {
 public:
  static constexpr double kPoolDecay = 0.99;
  // REQUIRES: options valid.
  explicit SeasonalPool(const SeasonalOptions& options);
  // Adds an estimate's own profile, its factors rounded to single precision
  // (SeasonalContribution; ignored when it has none or fewer than
  // min_sessions sessions). Marks the snapshot stale. Both forms add the same.
  void Add(const SeasonalEstimate& estimate);
  void Add(const SeasonalContribution& contribution);
  // The pooled profile (null before any contribution). Rebuilt (allocating
  // a double a bucket) when stale and at least `refresh_adds`
  // estimates were added since the last rebuild, or when there is none yet;
  // otherwise the last one is shared. refresh_adds <= 1: rebuilt after every
  // Add. (The refit coordinator asks once per submitted job: in a
  // universe-wide close, rebuilding for each job was a 12 KB profile built on
  // the ingest thread and held by each queued job.)
  SeasonalProfilePtr Snapshot(uint64_t refresh_adds = 1);

  // Checkpoint encoding of the pool: its decayed sums, the snapshot in force
  // and the estimates added since it was built, so that a restored pool
  // hands out the same snapshots as the saved one would have.
  void SaveState(StateWriter* w) const;
  // Restores what SaveState wrote. REQUIRES: a fresh pool with the same
  // options (the bucket count is checked). A mismatch or non-finite sum sets
  // the reader's error naming the field; the pool is then unusable (discard it).
  void RestoreState(StateReader* r);

 private:
  // The one definition of a contribution: own(k) is the k-th own factor as
  // a float.
  template <typename Own>
  void Accumulate(int sessions, size_t buckets, Own own, double own_overnight);

  SeasonalOptions options_;
  std::vector<double> sum_;  // decayed weighted sums of s^2 per bucket
  double weight_ = 0;
  double overnight_sum_ = 0, overnight_weight_ = 0;
  SeasonalProfilePtr snapshot_;
  // Estimates added since snapshot_ was built (0: the snapshot is current).
  uint64_t adds_since_ = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_SEASONAL_PROFILE_H_
