#include "aftershock/regime_detector.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

// Adds one bar to a CUSUM run: the evidence never goes below 0, and a run that
// returns to 0 starts afresh (its length and sum restart).
void Advance(double g, double z2, double* evidence, float* sum_z2, int32_t* bars) {
  *evidence += g;
  if (*evidence <= 0) {
    *evidence = 0;
    if (sum_z2 != nullptr) {
      *sum_z2 = 0;
      *bars = 0;
    }
    return;
  }
  if (sum_z2 != nullptr && *bars < std::numeric_limits<int32_t>::max()) {
    *sum_z2 += static_cast<float>(z2);
    ++*bars;
  }
}

}  // namespace

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
      k_(options.scale),
      a_up_(0.5 * (1.0 - 1.0 / options.scale)),
      a_down_(0.5 * (1.0 - options.scale)),
      half_log_k_(0.5 * std::log(options.scale)),
      t_c_(options.tail_nu > 0 ? 1.0 / (options.tail_nu - 2.0) : 0.0),
      t_e_(options.tail_nu > 0 ? 0.5 * (options.tail_nu + 1.0) : 0.0) {}

absl::StatusOr<RegimeDetector> RegimeDetector::Create(const RegimeOptions& o) {
  auto finite_pos = [](double v) { return std::isfinite(v) && v > 0; };
  // The upper bounds only keep the arithmetic finite; useful values are far below.
  if (!std::isfinite(o.scale) || !(o.scale > 1) || o.scale > 1e6) {
    return absl::InvalidArgumentError(
        absl::StrCat("regime_scale must be in (1, 1e6], got ", o.scale));
  }
  if (!finite_pos(o.enter) || o.enter > 1e6) {
    return absl::InvalidArgumentError(
        absl::StrCat("regime_enter_evidence must be in (0, 1e6] nats, got ", o.enter));
  }
  if (!finite_pos(o.exit) || o.exit > 1e6) {
    return absl::InvalidArgumentError(
        absl::StrCat("regime_exit_evidence must be in (0, 1e6] nats, got ", o.exit));
  }
  if (!std::isfinite(o.tail_nu) || (o.tail_nu != 0 && !(o.tail_nu > 2)) || o.tail_nu > 1000) {
    return absl::InvalidArgumentError(
        absl::StrCat("regime_tail_nu must be 0 (normal law) or in (2, 1000], got ", o.tail_nu));
  }
  if (o.warmup_bars < 0 || o.warmup_bars > 1000000000) {
    return absl::InvalidArgumentError(
        absl::StrCat("regime_warmup_bars must be in [0, 1e9], got ", o.warmup_bars));
  }
  return RegimeDetector(o);
}

void RegimeDetector::Increments(double z, double* g_up, double* g_down) const {
  // 0.5 ln(inv_k) with inv_k = 1/k (up) and k (down): -half_log_k_ and
  // +half_log_k_; a_up_ and a_down_ are the normal law's coefficients of z^2.
  const double z2 = z * z;
  if (t_e_ == 0) {
    *g_up = -half_log_k_ + a_up_ * z2;
    *g_down = half_log_k_ + a_down_ * z2;
    return;
  }
  const double x = t_c_ * z2;
  const double l = std::log1p(x);
  *g_up = -half_log_k_ - t_e_ * (std::log1p(x * (1.0 / k_)) - l);
  *g_down = half_log_k_ - t_e_ * (std::log1p(x * k_) - l);
}

RegimeEvent RegimeDetector::Update(double z, RegimeState* s) const {
  if (!std::isfinite(z)) return RegimeEvent::kNone;
  if (s->bars < std::numeric_limits<int32_t>::max()) ++s->bars;
  if (s->bars <= options_.warmup_bars) return RegimeEvent::kNone;
  const double z2 = z * z;
  double g_up, g_down;
  Increments(z, &g_up, &g_down);
  Advance(g_up, z2, &s->up, &s->up_sum_z2, &s->up_bars);
  Advance(g_down, z2, &s->down, &s->down_sum_z2, &s->down_bars);
  switch (s->direction) {
    case RegimeDirection::kHigh:
    case RegimeDirection::kLow: {
      const bool high = s->direction == RegimeDirection::kHigh;
      Advance(high ? -g_up : -g_down, z2, &s->back, nullptr, nullptr);
      if (s->back < options_.exit) return RegimeEvent::kNone;
      s->direction = RegimeDirection::kNone;
      // A new entry needs fresh evidence; back keeps its value for the alert.
      s->up = s->down = 0;
      s->up_sum_z2 = s->down_sum_z2 = 0;
      s->up_bars = s->down_bars = 0;
      return high ? RegimeEvent::kClearHigh : RegimeEvent::kClearLow;
    }
    case RegimeDirection::kNone:
      break;
  }
  if (s->up >= options_.enter || s->down >= options_.enter) {
    s->direction = s->up >= options_.enter ? RegimeDirection::kHigh : RegimeDirection::kLow;
    s->back = 0;
    return s->direction == RegimeDirection::kHigh ? RegimeEvent::kEnterHigh
                                                  : RegimeEvent::kEnterLow;
  }
  return RegimeEvent::kNone;
}

}  // namespace aftershock
