#include "aftershock/engine_metrics.h"

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

void Metric(std::string* o, absl::string_view name, absl::string_view type, absl::string_view help,
            uint64_t value) {
  absl::StrAppend(o, "# HELP aftershock_", name, " ", help, "\n# TYPE aftershock_", name, " ", type,
                  "\naftershock_", name, " ", value, "\n");
}

}  // namespace

std::string FormatPrometheusMetrics(const IngestCore& core) {
  const EngineCounters& c = core.counters();
  std::string o;
  o.reserve(4096 + 160 * static_cast<size_t>(core.num_symbols()));
  Metric(&o, "messages_in_total", "counter", "Inbound messages, any outcome.", c.messages_in);
  Metric(&o, "ticks_in_total", "counter", "Ticks decoded from inbound messages.", c.ticks_in);
  Metric(&o, "ticks_accepted_total", "counter", "Ticks accepted by the bar builder.",
         c.ticks_accepted);
  Metric(&o, "bars_total", "counter", "Bars closed.", c.bars);
  Metric(&o, "bars_clock_closed_total", "counter",
         "Bars closed by the clock after their end plus grace (informational; normal bars).",
         c.bars_clock_closed);
  Metric(&o, "updates_out_total", "counter", "Updates handed to the publisher.", c.updates_out);
  Metric(&o, "drops_total", "counter", "Updates dropped at a full subscriber queue.", c.drops);
  Metric(&o, "extra_out_total", "counter", "Alert and model messages sent.", c.extra_out);
  Metric(&o, "extra_drops_total", "counter", "Alert and model messages dropped.", c.extra_drops);
  Metric(&o, "model_swaps_total", "counter", "Model replacements applied.", c.model_swaps);
  Metric(&o, "symbols", "gauge", "Symbols known.", c.symbols);
  absl::StrAppend(&o,
                  "# HELP aftershock_rejects_total Inputs dropped, by reason.\n"
                  "# TYPE aftershock_rejects_total counter\n");
  for (int i = 0; i < kNumRejectReasons; ++i) {
    absl::StrAppend(&o, "aftershock_rejects_total{reason=\"",
                    RejectReasonName(static_cast<RejectReason>(i)), "\"} ", c.rejects.by_reason[i],
                    "\n");
  }
  absl::StrAppend(&o, "aftershock_rejects_total{reason=\"non_finite_output\"} ",
                  c.non_finite_output, "\n");
  // Symbols match [A-Za-z0-9._:-], so they need no escaping inside a label.
  for (const char* kind : {"ticks", "bars", "updates"}) {
    absl::StrAppend(&o, "# HELP aftershock_symbol_", kind, "_total Per-symbol ", kind,
                    ".\n# TYPE aftershock_symbol_", kind, "_total counter\n");
    for (int i = 0; i < core.num_symbols(); ++i) {
      const uint64_t v = kind[0] == 't'   ? core.symbol_ticks(i)
                         : kind[0] == 'b' ? core.symbol_bars(i)
                                          : core.symbol_updates(i);
      absl::StrAppend(&o, "aftershock_symbol_", kind, "_total{symbol=\"", core.symbol(i), "\"} ", v,
                      "\n");
    }
  }
  for (const MetricsSource* src : core.metrics_sources()) src->AppendPrometheus(&o);
  return o;
}

void RejectWindow::Sample(const EngineCounters& c, int64_t now_ns) {
  if (count_ > 0) {
    const Point& last = ring_[(next_ + kSlots - 1) % kSlots];
    if (now_ns < last.t_ns + kNanosPerSecond) return;
  }
  Point& p = ring_[next_];
  p.t_ns = now_ns;
  p.accepted = c.ticks_accepted;
  p.rejects = c.rejects;
  next_ = (next_ + 1) % kSlots;
  if (count_ < kSlots) ++count_;
}

void RejectWindow::Recent(const EngineCounters& c, int64_t now_ns, uint64_t* inputs,
                          RejectCounters* rejects) const {
  // The oldest sample inside the window; none: every input since start.
  const Point* base = nullptr;
  for (int i = count_; i >= 1; --i) {
    const Point& p = ring_[(next_ + kSlots - i) % kSlots];
    if (p.t_ns >= now_ns - kWindowNs) {
      base = &p;
      break;
    }
  }
  if (base == nullptr && count_ > 0) base = &ring_[(next_ + kSlots - 1) % kSlots];
  *rejects = c.rejects;
  uint64_t accepted = c.ticks_accepted;
  if (base != nullptr) {
    accepted -= base->accepted;
    for (int i = 0; i < kNumRejectReasons; ++i) rejects->by_reason[i] -= base->rejects.by_reason[i];
  }
  *inputs = accepted + rejects->Total();
}

HealthStatus CheckHealth(const IngestCore& core, const RejectWindow& window, int64_t now_ns) {
  const EngineCounters& c = core.counters();
  uint64_t inputs = 0;
  RejectCounters recent;
  window.Recent(c, now_ns, &inputs, &recent);
  const uint64_t rejected = recent.Total();
  HealthStatus h;
  h.degraded = inputs >= kDegradedMinInputs &&
               static_cast<double>(rejected) > kDegradedRejectShare * static_cast<double>(inputs);
  if (h.degraded) {
    int top = 0;
    for (int i = 1; i < kNumRejectReasons; ++i) {
      if (recent.by_reason[i] > recent.by_reason[top]) top = i;
    }
    h.reason = absl::StrCat(
        static_cast<int>(100.0 * static_cast<double>(rejected) / static_cast<double>(inputs)),
        "% of inputs rejected in the last minute (", rejected, " of ", inputs, "; most ",
        RejectReasonName(static_cast<RejectReason>(top)), " ", recent.by_reason[top], ")");
  }
  h.json =
      absl::StrCat("{\"status\":\"", h.degraded ? "degraded" : "ok", "\",\"symbols\":", c.symbols,
                   ",\"updates\":", c.updates_out, ",\"rejects\":", c.RejectTotal(),
                   ",\"recent_inputs\":", inputs, ",\"recent_rejects\":", rejected);
  // The reason holds only digits, letters, '%', '(', ')', ';', '_' and spaces: no escaping.
  if (h.degraded) absl::StrAppend(&h.json, ",\"reason\":\"", h.reason, "\"");
  for (const MetricsSource* src : core.metrics_sources()) src->AppendHealthJson(&h.json);
  absl::StrAppend(&h.json, "}\n");
  return h;
}

std::string FormatHealthJson(const IngestCore& core) {
  return CheckHealth(core, RejectWindow(), 0).json;
}

}  // namespace aftershock
