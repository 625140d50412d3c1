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

std::string FormatHealthJson(const IngestCore& core) {
  const EngineCounters& c = core.counters();
  return absl::StrCat("{\"status\":\"ok\",\"symbols\":", c.symbols, ",\"updates\":", c.updates_out,
                      ",\"rejects\":", c.RejectTotal(), "}\n");
}

}  // namespace aftershock
