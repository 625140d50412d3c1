// RefitOptions: the [refit] configuration of background re-estimation and hot
// swap (PRODUCT.md C5). Field names equal the TOML keys of the [refit] table.
//
// Thread-safety: plain value type.
#ifndef AFTERSHOCK_REFIT_OPTIONS_H_
#define AFTERSHOCK_REFIT_OPTIONS_H_

#include "absl/status/status.h"
#include "aftershock/seasonal_profile.h"

namespace aftershock {

// How completed refits reach the stream.
//   kLive:   at each bar boundary of a symbol, a completed refit is applied; the
//            ingest thread never waits.
//   kReplay: a refit scheduled at bar n is applied at bar n + apply_lag_bars
//            exactly; the ingest thread waits there for the job if it is not done,
//            so outputs are identical whatever the thread timing or worker count.
enum class RefitMode { kLive, kReplay };

struct RefitOptions {
  // Refit every this many closed bars of a symbol; 0 disables the bar schedule.
  // Default 250. Cost: one fit per symbol per every_bars bars.
  int every_bars = 250;
  // Refit every this many seconds of bar time (bar end timestamps); 0 disables
  // the time schedule. With both set, whichever falls due first fires and
  // restarts both. Default 0.
  double every_seconds = 0;
  // Capacity of the rolling window of closed-bar returns, bars. Default 2000.
  // Cost: 8 bytes per bar per symbol, plus 8 bytes per bar per job buffer
  // (refit.h, "Job buffers"; 12 and 12 with seasonality's tags).
  int window = 2000;
  // Bars a symbol must have before its first fit. Must exceed holdout_bars.
  // Default 250.
  int min_bars = 250;
  // Worker threads of the refit pool (never the ingest thread). Default 1.
  int workers = 1;
  // Every this many refits of a symbol re-identifies the model (order and law)
  // instead of re-estimating the current spec; 0 = never. The first fit of a
  // symbol counts as refit 0. Default 0.
  int reidentify_every = 0;
  // The quality gate rejects a fit whose persistence is >= this. Default 0.9995.
  double max_persistence = 0.9995;
  // Most recent bars on which the candidate and the current model are scored
  // by log-likelihood. 0 disables the holdout rule. Default 100.
  int holdout_bars = 100;
  // The gate rejects a candidate whose holdout log-likelihood per bar is lower
  // than the current model's by more than this many nats. Default 0.05.
  double holdout_margin = 0.05;
  // Consecutive gate failures after which the symbol uses the EWMA fallback
  // (flag "fallback") until a fit passes. Default 3.
  int max_failures = 3;
  // A refit scheduled at bar n is applied at bar n + apply_lag_bars (replay
  // mode; the earliest bar in live mode). >= 1. Default 1.
  int apply_lag_bars = 1;
  // Share of the bar period over which the symbols' schedules are spread: a
  // stable hash of the symbol picks a phase in [0, every_bars * jitter_fraction)
  // bars (and likewise seconds). In [0, 1]. Default 1 (full spread; the first fit
  // of a symbol may come up to every_bars bars after min_bars).
  double jitter_fraction = 1.0;
  // Refit jobs in flight at once (queued, running or completed but not yet
  // applied). A due refit finding no free slot is dropped, counted, and retried
  // at the next due point. Default 256. Cost: a few hundred bytes per slot,
  // plus the job buffers (window copies) preallocated for min(queue_capacity,
  // 256 * workers) of them (4 MB for 256 buffers of 2000 bars; refit.h, "Job
  // buffers"). A slot is freed when its job is applied, so in replay mode
  // drops depend on the bar sequence only.
  int queue_capacity = 256;
  // The gate rejects a candidate whose diagnostics p-values (when it carries
  // them) are below this level. 0 disables the rule. Default 0.01.
  double diagnostics_level = 0.01;
  // EWMA decay of the fallback model. Default 0.94.
  double ewma_lambda = 0.94;
  // Version number of a symbol's first estimated model (later ones count up).
  // 2 when version 1 is a configured starting model. >= 1. Default 1.
  uint32_t first_version = 1;
  // Live or replay hand-off (see RefitMode). Default kLive.
  RefitMode mode = RefitMode::kLive;
  // Group models: a symbol without a passed fit of its own takes the latest
  // passed model of its group (RefitCoordinator::AddSymbol), re-levelled to
  // its own variance, until its own fit passes (see refit.h). Default true.
  bool group_models = true;
  // Intraday seasonality: windows keep bar-of-session tags, each job
  // re-estimates the symbol's profile (shrunk toward the pool of the other
  // symbols' estimates), fits the model on the deseasonalized returns and the
  // two are swapped together. Default false.
  bool seasonal = false;
  SeasonalOptions seasonal_options;  // REQUIRED valid when seasonal

  // OK when every field is in range; InvalidArgument naming the field otherwise.
  absl::Status Validate() const;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_REFIT_OPTIONS_H_
