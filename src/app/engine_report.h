// Human-readable summaries of EngineCounters shared by `run` and `replay`.
#ifndef AFTERSHOCK_APP_ENGINE_REPORT_H_
#define AFTERSHOCK_APP_ENGINE_REPORT_H_

#include <string>

#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"

namespace aftershock::app {

// "3 rejects (too_old 2, bad_symbol 1)" or "0 rejects".
std::string RejectSummary(const EngineCounters& c);

// "refits: 12 swapped, 3 rejected, 0 fallbacks; alerts: 5 emitted, 2 suppressed"
// (or "refits off; alerts: ...").
std::string ServicesSummary(const EngineServices& services);

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_ENGINE_REPORT_H_
