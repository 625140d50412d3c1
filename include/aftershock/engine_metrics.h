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

// The engine's inputs and rejects over the last minute: samples of the
// counters (at most one a second, the last kWindowNs kept) taken on the
// engine's clock tick; the window runs from the oldest sample at most
// kWindowNs old (or from zero before the first sample) to the live counters.
// Fixed size, no allocation. Thread-safety: the ingest thread only.
class RejectWindow {
 public:
  static constexpr int64_t kWindowNs = 60 * kNanosPerSecond;

  // Records the counters at now_ns (ignored within 1 s of the last sample).
  void Sample(const EngineCounters& counters, int64_t now_ns);
  // Inputs (ticks accepted + inputs rejected) and rejects by reason from the
  // window's start to `counters` at now_ns.
  void Recent(const EngineCounters& counters, int64_t now_ns, uint64_t* inputs,
              RejectCounters* rejects) const;

 private:
  struct Point {
    int64_t t_ns = 0;
    uint64_t accepted = 0;
    RejectCounters rejects;
  };
  static constexpr int kSlots = 64;  // > 60 samples of one a second
  Point ring_[kSlots];
  int count_ = 0;  // samples held, <= kSlots
  int next_ = 0;   // slot of the next sample
};

// Health of the engine. Degraded when more than kDegradedRejectShare of at
// least kDegradedMinInputs inputs in the last minute were rejected (e.g. a
// producer sending JSON to a binary feed, or ticks outside the session).
inline constexpr double kDegradedRejectShare = 0.5;
inline constexpr uint64_t kDegradedMinInputs = 20;
struct HealthStatus {
  bool degraded = false;
  std::string reason;  // "" when ok; e.g. "97% of inputs rejected in the last minute (...)"
  // {"status":"ok"|"degraded","symbols":N,"updates":N,"rejects":N,
  //  "recent_inputs":N,"recent_rejects":N[,"reason":"..."]
  //  [, the members of each MetricsSource::AppendHealthJson]} and a newline;
  // rejects counts since start, recent_* the last minute.
  std::string json;
};
HealthStatus CheckHealth(const IngestCore& core, const RejectWindow& window, int64_t now_ns);

// CheckHealth(core, a window without samples (every input since start), 0).json.
std::string FormatHealthJson(const IngestCore& core);

}  // namespace aftershock

#endif  // AFTERSHOCK_ENGINE_METRICS_H_
