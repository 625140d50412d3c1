// Human-readable summaries of EngineCounters shared by `run` and `replay`.
#ifndef AFTERSHOCK_APP_ENGINE_REPORT_H_
#define AFTERSHOCK_APP_ENGINE_REPORT_H_

#include <nlohmann/json.hpp>
#include <optional>
#include <string>

#include "aftershock/engine_services.h"
#include "aftershock/evaluation.h"
#include "aftershock/ingest_core.h"
#include "aftershock/recursive_tracker.h"

namespace aftershock::app {

// "3 rejects (too_old 2, bad_symbol 1)" or "0 rejects".
std::string RejectSummary(const EngineCounters& c);

// "refits: 12 swapped, 3 rejected, 0 fallbacks; alerts: 5 emitted, 2 suppressed"
// (or "refits off; alerts: ...").
std::string ServicesSummary(const EngineServices& services);

// The tracker `t` of a symbol in tracking `mode` as a TrackedParameters (names
// omega, alpha_1, [gamma_1,] beta_1, as the `m.` tracking records), or nullopt
// when the mode is off or the tracker inactive. instability_alerts stays -1.
std::optional<TrackedParameters> TrackedParametersOf(const RecursiveTracker& t, TrackingMode mode);
// The same for the core's symbol `index`. REQUIRES: 0 <= index < num_symbols().
std::optional<TrackedParameters> TrackedParametersOf(const IngestCore& core, int index);

// One line: "drive GARCH(1,1), 60 bars since the refit: omega 3.1e-09 (refit
// 3e-09, +3.3 %), alpha_1 0.0712 (refit 0.07, +0.0012), ...; persistence ...,
// level x1.04, instability 2.7, 1 instability alert, 0 resets".
std::string TrackedParametersText(const TrackedParameters& p);

// As JSON, in the keys of the `m.` tracking records: mode, variance,
// bars_since_refit, stepping, estimates [{name, value, refit, drift}],
// persistence, refit_persistence, level_ratio, instability, resets and, when
// known, instability_alerts.
nlohmann::json TrackedParametersJson(const TrackedParameters& p);

// The tracked symbols of a run or replay at its end, for the closing summary:
// a header line "tracking: N symbols tracked (...), M instability alerts" and
// then one line per symbol ("  SYMBOL " + TrackedParametersText), the highest
// instability statistic first, at most `max_symbols` of them (then a line
// saying how many more). Empty when no symbol is tracked.
std::string TrackingSummary(const IngestCore& core, const EngineServices& services,
                            int max_symbols = 10);

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_ENGINE_REPORT_H_
