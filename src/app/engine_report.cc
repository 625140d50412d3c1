#include "app/engine_report.h"

#include "absl/strings/str_cat.h"

namespace aftershock::app {

std::string RejectSummary(const EngineCounters& c) {
  std::string out = absl::StrCat(c.RejectTotal(), " rejects");
  std::string detail;
  for (int i = 0; i < kNumRejectReasons; ++i) {
    const uint64_t n = c.rejects.by_reason[i];
    if (n == 0) continue;
    absl::StrAppend(&detail, detail.empty() ? "" : ", ",
                    RejectReasonName(static_cast<RejectReason>(i)), " ", n);
  }
  if (c.non_finite_output > 0) {
    absl::StrAppend(&detail, detail.empty() ? "" : ", ", "non_finite_output ", c.non_finite_output);
  }
  if (!detail.empty()) absl::StrAppend(&out, " (", detail, ")");
  return out;
}

std::string ServicesSummary(const EngineServices& services) {
  std::string out;
  if (services.refit_enabled()) {
    const RefitStats r = services.refit_stats();
    out = absl::StrCat("refits: ", r.submitted, " run, ", r.swapped, " swapped, ", r.rejected,
                       " rejected, ", r.fallbacks, " fallbacks");
  } else {
    out = "refits off";
  }
  const AlertCounters& a = services.alert_counters();
  absl::StrAppend(&out, "; alerts: ", a.TotalEmitted(), " emitted, ", a.TotalSuppressed(),
                  " suppressed");
  return out;
}

}  // namespace aftershock::app
