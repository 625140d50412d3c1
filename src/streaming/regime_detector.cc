#include "aftershock/regime_detector.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "absl/strings/str_cat.h"

namespace aftershock {

absl::string_view RegimeDirectionName(RegimeDirection d) {
  switch (d) {
    case RegimeDirection::kHigh:
      return "high";
    case RegimeDirection::kLow:
      return "low";
    case RegimeDirection::kNone:
      break;
  }
  return "none";
}

RegimeDetector::RegimeDetector(const RegimeOptions& options)
    : options_(options),
      lf_(std::exp2(-1.0 / options.fast_halflife)),
      ls_(std::exp2(-1.0 / options.slow_halflife)),
      clip2_(options.clip_z > 0 ? options.clip_z * options.clip_z
                                : std::numeric_limits<double>::infinity()) {}

absl::StatusOr<RegimeDetector> RegimeDetector::Create(const RegimeOptions& o) {
  auto finite_pos = [](double v) { return std::isfinite(v) && v > 0; };
  if (!finite_pos(o.enter) || !finite_pos(o.exit) || !(o.exit >= 1.0) || !(o.enter > o.exit)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "regime thresholds need 1 <= regime_exit < regime_enter, got regime_exit = ", o.exit,
        " and regime_enter = ", o.enter));
  }
  if (!finite_pos(o.fast_halflife)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "regime_fast_halflife must be a positive number of bars, got ", o.fast_halflife));
  }
  if (!finite_pos(o.slow_halflife) || !(o.slow_halflife > o.fast_halflife)) {
    return absl::InvalidArgumentError(absl::StrCat("regime_slow_halflife (", o.slow_halflife,
                                                   ") must be larger than regime_fast_halflife (",
                                                   o.fast_halflife, ")"));
  }
  if (!std::isfinite(o.clip_z) || (o.clip_z != 0 && !(o.clip_z > 1))) {
    return absl::InvalidArgumentError(
        absl::StrCat("regime_clip_z must be 0 (off) or larger than 1, got ", o.clip_z));
  }
  if (o.warmup_bars < 0) {
    return absl::InvalidArgumentError(
        absl::StrCat("regime_warmup_bars must be >= 0, got ", o.warmup_bars));
  }
  return RegimeDetector(o);
}

RegimeEvent RegimeDetector::Update(double eps, double var, RegimeState* s) const {
  if (!std::isfinite(eps)) return RegimeEvent::kNone;
  if (s->bars == 0) {
    if (!(var > 0) || !std::isfinite(var)) return RegimeEvent::kNone;
    s->fast = var;
    s->slow = var;
  }
  const double x = std::min(eps * eps, clip2_ * s->slow);
  s->fast = lf_ * s->fast + (1.0 - lf_) * x;
  s->slow = ls_ * s->slow + (1.0 - ls_) * x;
  ++s->bars;
  // The averages are positive unless every residual so far was exactly 0; a
  // zero long-run average carries no information, so the ratio stays neutral.
  s->ratio = s->slow > 0 ? s->fast / s->slow : 1.0;
  const double r = s->ratio;
  switch (s->direction) {
    case RegimeDirection::kHigh:
      if (r < options_.exit) {
        s->direction = RegimeDirection::kNone;
        return RegimeEvent::kClearHigh;
      }
      return RegimeEvent::kNone;
    case RegimeDirection::kLow:
      if (r * options_.exit > 1.0) {
        s->direction = RegimeDirection::kNone;
        return RegimeEvent::kClearLow;
      }
      return RegimeEvent::kNone;
    case RegimeDirection::kNone:
      break;
  }
  if (s->bars <= options_.warmup_bars) return RegimeEvent::kNone;
  if (r >= options_.enter) {
    s->direction = RegimeDirection::kHigh;
    return RegimeEvent::kEnterHigh;
  }
  if (r * options_.enter <= 1.0) {
    s->direction = RegimeDirection::kLow;
    return RegimeEvent::kEnterLow;
  }
  return RegimeEvent::kNone;
}

}  // namespace aftershock
