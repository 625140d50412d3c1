// RegimeDetector: a per-symbol volatility regime detector (PRODUCT.md C7), the
// statistic behind the `regime` and `regime_clear` alerts. It reads the model's
// standardized residuals z and asks, bar by bar, whether the recent returns are
// persistently more (or less) variable than the model forecasts.
//
// Why z and not raw squared residuals. A conditional-variance model already
// explains volatility clusters: under the model z is close to iid with unit
// variance, whereas a ratio of a fast and a slow average of squared returns
// doubles during an ordinary GARCH cluster. A change of the variance level that
// the model did not foresee shows up as z^2 above 1 until the filter has caught
// up, which is what is tested here.
//
// Definition. For every bar t after the warm-up, with k = scale (> 1) and f
// the density of the standardized law assumed for z (Student t with tail_nu
// degrees of freedom scaled to unit variance, or N(0, 1) when tail_nu = 0):
//   g+_t   = ln(f(z_t / sqrt(k)) / sqrt(k)) - ln f(z_t)   log-likelihood ratio of
//                                                  "variance k" against "variance 1"
//   g-_t   = the same with 1/k for k                "variance 1/k" against "1"
//   up_t   = max(0, up_{t-1} + g+_t)                one-sided CUSUM (Page 1954)
//   down_t = max(0, down_{t-1} + g-_t)
// For the t law, g(z) = -ln(k)/2 - (nu+1)/2 * [ln(1 + z^2/(k(nu-2))) -
// ln(1 + z^2/(nu-2))], bounded by (nu/2) ln k, so one outlier (the shock
// rule's business) adds a limited amount; for the normal law g+ = ((1 - 1/k)
// z^2 - ln k) / 2. up and down are evidence in nats for "the variance is k
// times (1/k times) the forecast since some recent bar" against "as
// forecast". A high (low) regime is entered when up (down) reaches `enter`.
// When z follows the assumed law, E[exp(g)] = 1, so the average run length
// between false entries of one statistic is at least exp(enter) bars (Lorden
// 1971). The t law keeps that roughly true for normal and heavier-tailed z
// alike, which the normal law does not (under Student-t z, at enter = 8, the
// normal law's low-regime test fires twice as often as its bound allows);
// regime_detector_test measures both.
//
// Clearing (hysteresis). Once in a regime the detector runs the opposite test,
//   back_t = max(0, back_{t-1} - g+_t)   (high)   or   - g-_t   (low),
// from 0 at the entry: evidence that z is back to unit variance against the
// regime's k. The regime ends when back reaches `exit`; the ending clears up
// and down, so a new entry needs fresh evidence (back keeps its value until the
// next entry, for the clear's alert text). Because the model's
// filter absorbs a lasting level change within about 1 / (1 - beta) bars, a
// regime ends once the model forecasts the new level, not when the volatility
// falls back.
//
// States: none -> high (kEnterHigh) -> none (kClearHigh); none -> low
// (kEnterLow) -> none (kClearLow). At most one event per bar.
//
// up and down also keep the length and the sum of z^2 of their current run
// (the bars since they were last 0): the run's mean z^2 estimates the variance
// multiple behind the evidence, for the alert texts.
//
// Thread-safety: RegimeDetector is immutable after Create and may be shared; a
// RegimeState belongs to the thread that updates it (the ingest thread).
#ifndef AFTERSHOCK_REGIME_DETECTOR_H_
#define AFTERSHOCK_REGIME_DETECTOR_H_

#include <cstdint>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"

namespace aftershock {

struct RegimeOptions {
  // Variance multiple k the tests are tuned to: the high regime tests
  // "variance k times the forecast", the low regime "1/k times". > 1. Default 3.
  double scale = 3.0;
  // Evidence (nats) at which a regime is entered. > 0. Default 10: at least
  // exp(10) ~ 22,000 bars between false entries of each statistic when z
  // follows the assumed law.
  double enter = 10.0;
  // Evidence (nats) that the regime is over at which it ends. > 0. Default 6:
  // while the variance stays k times the forecast, a false ending comes about
  // once in 75,000 bars (normal z); back at the forecast, the regime ends
  // after about 50 bars.
  double exit = 6.0;
  // Degrees of freedom of the standardized Student t law the tests assume for
  // z; 0 = normal law. 0 or in (2, 1000]. Default 5.
  double tail_nu = 5.0;
  // Bars absorbed before the statistics start (the model's first forecasts are
  // rough). In [0, 1e9]. Default 50.
  int64_t warmup_bars = 50;
};

enum class RegimeDirection : int8_t { kNone = 0, kHigh = 1, kLow = -1 };
// "none", "high", "low".
absl::string_view RegimeDirectionName(RegimeDirection d);

enum class RegimeEvent : uint8_t { kNone, kEnterHigh, kClearHigh, kEnterLow, kClearLow };

// Per-symbol detector state; plain fixed-size value (48 bytes).
struct RegimeState {
  double up = 0;    // evidence (nats) for variance `scale` times the forecast
  double down = 0;  // evidence (nats) for variance 1 / `scale` times the forecast
  double back = 0;  // in a regime: evidence (nats) that it is over
  // Sums of z^2 over up's and down's current runs; float: display only.
  float up_sum_z2 = 0;
  float down_sum_z2 = 0;
  int32_t up_bars = 0;    // bars in up's run (0 when up is 0); saturates at INT32_MAX
  int32_t down_bars = 0;  // bars in down's run
  int32_t bars = 0;       // bars absorbed since the state was started; saturates at INT32_MAX
  RegimeDirection direction = RegimeDirection::kNone;  // current regime
  bool in_regime() const { return direction != RegimeDirection::kNone; }
  // Mean z^2 over up's (down's) run: the variance multiple, relative to the
  // forecast, that its evidence rests on; 1 for an empty run.
  double up_ratio() const { return up_bars > 0 ? up_sum_z2 / up_bars : 1.0; }
  double down_ratio() const { return down_bars > 0 ? down_sum_z2 / down_bars : 1.0; }
};

// Turns standardized residuals into regime events. Cheap to copy.
class RegimeDetector {
 public:
  RegimeDetector() : RegimeDetector(RegimeOptions{}) {}  // the (valid) defaults

  // InvalidArgument naming the offending option when the options are out of range.
  static absl::StatusOr<RegimeDetector> Create(const RegimeOptions& options);

  const RegimeOptions& options() const { return options_; }

  // Absorbs one bar's standardized residual z (eps / sqrt(var) of the model in
  // force). A non-finite z is ignored (kNone, state unchanged). Hot path: no
  // allocation, no I/O.
  RegimeEvent Update(double z, RegimeState* state) const;

  // The log-likelihood-ratio increments g+ and g- for one z (definitions
  // above); exposed for tests.
  double UpIncrement(double z) const {
    double up, down;
    Increments(z, &up, &down);
    return up;
  }
  double DownIncrement(double z) const {
    double up, down;
    Increments(z, &up, &down);
    return down;
  }

 private:
  explicit RegimeDetector(const RegimeOptions& options);

  // Both increments of one z: the ln of the density ratio of z under variance
  // k (up) and 1/k (down) against variance 1, sharing the log1p of the t law's
  // variance-1 term (Update runs this at every bar of every symbol).
  void Increments(double z, double* g_up, double* g_down) const;

  RegimeOptions options_;
  double k_;           // scale
  double a_up_;        // (1 - 1/k) / 2
  double a_down_;      // (1 - k) / 2
  double half_log_k_;  // ln(k) / 2
  double t_c_;         // 1 / (nu - 2) for the t law
  double t_e_;         // (nu + 1) / 2 for the t law
};

}  // namespace aftershock

#endif  // AFTERSHOCK_REGIME_DETECTOR_H_
