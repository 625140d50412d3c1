// RefitScheduler: decides, bar by bar, when a symbol's refit falls due
// (PRODUCT.md C5): after min_bars, then every every_bars bars and/or every
// every_seconds of bar time, each symbol shifted by a stable per-symbol phase so
// that a universe that starts together does not refit in lockstep.
//
// Rules, per symbol, with `bars` = returns seen and `t` = bar end (ns):
//   - not due while bars < min_bars;
//   - at the first bar with bars >= min_bars the schedule is armed:
//       next_due_bar = bars + phase_bars,  next_due_ns = t + phase_ns;
//   - due when (every_bars > 0 and bars >= next_due_bar) or
//              (every_seconds > 0 and t >= next_due_ns);
//   - a due point (whatever then happens to the request: submitted, coalesced
//     into a pending job, or dropped on a full queue) restarts both clocks:
//       next_due_bar = bars + every_bars,  next_due_ns = t + every_seconds.
//   phase_bars = StableSymbolHash(symbol) mod max(1, floor(every_bars * jitter_fraction)),
//   phase_ns   = (hash >> 32) mod max(1, floor(every_seconds * 1e9 * jitter_fraction)).
// In steady state a symbol is due at bars min_bars + phase + k * every_bars.
//
// Thread-safety: the scheduler is immutable after construction; a
// ScheduleState belongs to the ingest thread.
#ifndef AFTERSHOCK_REFIT_SCHEDULER_H_
#define AFTERSHOCK_REFIT_SCHEDULER_H_

#include <cstdint>

#include "absl/strings/string_view.h"
#include "aftershock/refit_options.h"

namespace aftershock {

// 64-bit FNV-1a of the symbol's bytes: stable across runs, platforms and
// compilers (unlike std::hash), so phases and shards are reproducible.
uint64_t StableSymbolHash(absl::string_view symbol);

// Per-symbol schedule. Plain fixed-size value (40 bytes).
struct ScheduleState {
  int64_t next_due_bar = 0;
  int64_t next_due_ns = 0;
  int64_t phase_ns = 0;
  int32_t phase_bars = 0;
  bool armed = false;
};

class RefitScheduler {
 public:
  // REQUIRES: options.Validate() is OK.
  explicit RefitScheduler(const RefitOptions& options);

  // Sets the symbol's phases; the schedule starts unarmed.
  void InitSymbol(absl::string_view symbol, ScheduleState* state) const;

  // Called once per closed bar, after the return entered the window. Returns
  // true when a refit is due at this bar and moves the due point on.
  // `bars` = returns seen by the symbol (this one included), `t_ns` = bar end.
  bool OnBar(ScheduleState* state, int64_t bars, int64_t t_ns) const;

  // Number of distinct phases of the bar schedule: max(1, floor(every_bars *
  // jitter_fraction)); 10,000 symbols spread over this many bars.
  int64_t bar_phase_span() const { return bar_span_; }

 private:
  const int64_t min_bars_;
  const int64_t every_bars_;
  const int64_t every_ns_;
  int64_t bar_span_;
  int64_t ns_span_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_REFIT_SCHEDULER_H_
