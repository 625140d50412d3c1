// RegimeDetector: a per-symbol volatility regime detector with hysteresis
// (PRODUCT.md C7), the statistic behind the `regime` and `regime_clear` alerts.
//
// Definition. For every bar t with residual eps_t (r_t minus the mean forecast):
//   x_t    = min(eps_t^2, c^2 * S_{t-1})          (c = clip_z; no clip when c = 0)
//   F_t    = lf * F_{t-1} + (1 - lf) * x_t          lf = 2^(-1 / fast_halflife)
//   S_t    = ls * S_{t-1} + (1 - ls) * x_t          ls = 2^(-1 / slow_halflife)
//   R_t    = F_t / S_t
// F is a short-run and S a long-run average of squared residuals, both in
// variance units, so R is the short/long variance ratio: about 1 in a steady
// state, about m shortly after the variance level is multiplied by m. The clip
// keeps one isolated outlier (the shock rule's business) from entering a regime
// on its own: a |z| = 8 bar moves F by at most (1 - lf) * c^2 instead of
// (1 - lf) * 64. Both averages start at the model variance of the first bar
// seen (BarUpdate::var), so no long presample is needed; the detector stays
// silent for `warmup_bars` bars.
//
// The statistic needs only the data, not the model parameters, so a model swap
// or the EWMA fallback does not disturb it. Once the new level is established
// the slow average catches up and R returns towards 1: the regime ends when the
// new variance has become the norm (after roughly one slow half-life or more),
// not when the volatility falls back.
//
// States and thresholds (enter > exit >= 1):
//   none -> high   when R >= enter              (event kEnterHigh)
//   high -> none   when R <  exit               (event kClearHigh)
//   none -> low    when R <= 1 / enter          (event kEnterLow)
//   low  -> none   when R >  1 / exit           (event kClearLow)
// The gap between enter and exit is the hysteresis: a ratio bouncing around the
// enter threshold gives one entry, not a flapping sequence. At most one event
// per bar; a clear and a new entry in the opposite direction need separate bars.
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
  // Ratio R at or above which the high-volatility regime is entered; its
  // reciprocal enters the low regime. > exit. Default 2.
  double enter = 2.0;
  // Ratio below which the high regime ends; its reciprocal ends the low regime.
  // In [1, enter). Default 1.3.
  double exit = 1.3;
  // Half-life of the short-run average F, in bars. > 0. Default 10.
  double fast_halflife = 10.0;
  // Half-life of the long-run average S, in bars. > fast_halflife. Default 250.
  double slow_halflife = 250.0;
  // Squared residuals are capped at clip_z^2 times the long-run average before
  // they enter either average. 0 disables the cap; otherwise > 1. Default 4.
  double clip_z = 4.0;
  // The first warmup_bars bars absorbed enter no regime (the averages still
  // update). >= 0. Default 50.
  int64_t warmup_bars = 50;
};

enum class RegimeDirection : int8_t { kNone = 0, kHigh = 1, kLow = -1 };
// "none", "high", "low".
absl::string_view RegimeDirectionName(RegimeDirection d);

enum class RegimeEvent : uint8_t { kNone, kEnterHigh, kClearHigh, kEnterLow, kClearLow };

// Per-symbol detector state; plain fixed-size value (32 bytes + flags).
struct RegimeState {
  double fast = 0;   // F, short-run average of squared residuals (variance units)
  double slow = 0;   // S, long-run average of squared residuals (variance units)
  double ratio = 1;  // R = F / S after the last update
  int64_t bars = 0;  // bars absorbed since the state was started
  RegimeDirection direction = RegimeDirection::kNone;  // current regime
  bool in_regime() const { return direction != RegimeDirection::kNone; }
};

// Turns residuals into regime events. Cheap to copy (a few doubles).
class RegimeDetector {
 public:
  RegimeDetector() : RegimeDetector(RegimeOptions{}) {}  // the (valid) defaults

  // InvalidArgument naming the offending option when the options are out of range.
  static absl::StatusOr<RegimeDetector> Create(const RegimeOptions& options);

  const RegimeOptions& options() const { return options_; }
  double enter_low() const { return 1.0 / options_.enter; }  // R at or below: enter low
  double exit_low() const { return 1.0 / options_.exit; }    // R above: leave low

  // Absorbs one bar with residual `eps` and model variance `var` (the variance
  // used to standardize the bar; it only seeds the first update). Bars with a
  // non-finite eps, or a first bar without a positive finite var, are ignored
  // (kNone, state unchanged). Hot path: no allocation, no I/O.
  RegimeEvent Update(double eps, double var, RegimeState* state) const;

 private:
  explicit RegimeDetector(const RegimeOptions& options);

  RegimeOptions options_;
  double lf_;     // 2^(-1 / fast_halflife)
  double ls_;     // 2^(-1 / slow_halflife)
  double clip2_;  // clip_z^2, or +inf when the cap is off
};

}  // namespace aftershock

#endif  // AFTERSHOCK_REGIME_DETECTOR_H_
