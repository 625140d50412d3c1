// ConfigWarnings: settings that parse but contradict each other or the data
// they run on (PRODUCT.md C10). `aftershock run --check` prints them for a
// configuration alone; `aftershock replay` prints them at its end with the
// facts of the finished run (RunFacts), which add checks against the input.
//
// Checks (each yields at most one warning line, in this order):
//   * annualization: an explicit [outputs] periods_per_year more than 1.5x
//     away from AutoPeriodsPerYear([bars]) (time bars only); with "0s" bars
//     and run facts, ticks of a symbol spaced less than an hour apart while
//     periods_per_year < 252 * 24 (each tick annualized as a day or more);
//     with time bars, no session and "auto", an input spanning more than two
//     days whose busiest symbol fills less than half of the span's bars
//     (nights and weekends counted as trading time);
//   * refits off ([refit] every_bars = 0 and every_seconds = 0);
//   * [refit] min_bars (with refits on) or [warmup] min_bars longer than one
//     session (BarsPerSession), or, with run facts, than the most bars any
//     symbol had;
//   * a feed encoding the producer does not use: [feed] encoding "binary"
//     (`aftershock simulate --publish` and JSON producers send "json"); with
//     run facts, most rejects being malformed_json / malformed_binary;
//   * run facts: more than half of the inputs rejected (with the top reasons
//     and what to check), or no symbol with a fitted model at the end.
//
// Thread-safety: pure functions.
#ifndef AFTERSHOCK_CONFIG_CHECK_H_
#define AFTERSHOCK_CONFIG_CHECK_H_

#include <cstdint>
#include <string>
#include <vector>

#include "aftershock/engine_config.h"
#include "aftershock/wire.h"

namespace aftershock {

// What a finished run saw (all zero when unknown).
struct RunFacts {
  bool present = false;          // false: check the configuration alone
  bool from_file = false;        // a tick file was replayed ([feed] encoding unused)
  uint64_t ticks_accepted = 0;   // ticks the bar builder accepted
  RejectCounters rejects;        // inputs rejected, by reason
  uint64_t symbols = 0;          // symbols seen
  uint64_t max_symbol_bars = 0;  // most bars closed by any one symbol
  uint64_t symbols_fitted = 0;   // symbols whose model at the end is fitted (version >= 1)
  int64_t first_tick_ns = 0;     // event time of the first and last accepted input
  int64_t last_tick_ns = 0;
};

// The warnings, each one line without a trailing newline ("" never appears);
// empty when nothing contradicts.
std::vector<std::string> ConfigWarnings(const EngineConfig& config, const RunFacts& facts = {});

}  // namespace aftershock

#endif  // AFTERSHOCK_CONFIG_CHECK_H_
