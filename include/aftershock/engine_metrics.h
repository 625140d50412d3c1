// Text renderings of the engine's counters for the HTTP endpoint (PRODUCT.md
// C10): Prometheus text exposition format (version 0.0.4) and a health body.
//
// Thread-safety: call on the thread that owns the core (the engine serves
// HTTP from its own event loop, so this holds there).
#ifndef AFTERSHOCK_ENGINE_METRICS_H_
#define AFTERSHOCK_ENGINE_METRICS_H_

#include <string>

#include "aftershock/ingest_core.h"

namespace aftershock {

// Every EngineCounters field as an `aftershock_*` metric with HELP and TYPE
// lines, rejects labelled by reason (every reason, zeros included, plus
// non_finite_output), and per-symbol ticks/bars/updates labelled by symbol.
std::string FormatPrometheusMetrics(const IngestCore& core);

// {"status":"ok","symbols":N,"updates":N,"rejects":N}
std::string FormatHealthJson(const IngestCore& core);

}  // namespace aftershock

#endif  // AFTERSHOCK_ENGINE_METRICS_H_
