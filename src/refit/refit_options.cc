#include "aftershock/refit_options.h"

#include <cmath>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

absl::Status Bad(absl::string_view field, absl::string_view rule) {
  return absl::InvalidArgumentError(absl::StrCat("[refit] ", field, " ", rule));
}

}  // namespace

absl::Status RefitOptions::Validate() const {
  if (every_bars < 0) return Bad("every_bars", "must be >= 0");
  if (seasonal) {
    if (auto s = ValidateSeasonalOptions(seasonal_options); !s.ok()) {
      return absl::InvalidArgumentError(absl::StrCat("[seasonality] ", s.message()));
    }
  }
  if (!(every_seconds >= 0) || !std::isfinite(every_seconds)) {
    return Bad("every_seconds", "must be a finite number >= 0");
  }
  if (every_bars == 0 && every_seconds == 0) {
    return Bad("every_bars", "and every_seconds cannot both be 0");
  }
  if (window < 2) return Bad("window", "must be at least 2 bars");
  if (min_bars < 2 || min_bars > window) return Bad("min_bars", "must be in 2..window");
  if (workers < 1 || workers > 256) return Bad("workers", "must be in 1..256");
  if (reidentify_every < 0) return Bad("reidentify_every", "must be >= 0");
  if (!(max_persistence > 0 && max_persistence <= 1)) {
    return Bad("max_persistence", "must be in (0, 1]");
  }
  if (holdout_bars < 0 || (holdout_bars > 0 && holdout_bars >= min_bars)) {
    return Bad("holdout_bars", "must be >= 0 and below min_bars");
  }
  if (!(holdout_margin >= 0) || !std::isfinite(holdout_margin)) {
    return Bad("holdout_margin", "must be a finite number >= 0");
  }
  if (max_failures < 1) return Bad("max_failures", "must be >= 1");
  if (apply_lag_bars < 1) return Bad("apply_lag_bars", "must be >= 1");
  if (!(jitter_fraction >= 0 && jitter_fraction <= 1)) {
    return Bad("jitter_fraction", "must be in [0, 1]");
  }
  if (queue_capacity < 1) return Bad("queue_capacity", "must be >= 1");
  if (!(diagnostics_level >= 0 && diagnostics_level < 1)) {
    return Bad("diagnostics_level", "must be in [0, 1)");
  }
  if (!(ewma_lambda > 0 && ewma_lambda < 1)) return Bad("ewma_lambda", "must be in (0, 1)");
  return absl::OkStatus();
}

}  // namespace aftershock
