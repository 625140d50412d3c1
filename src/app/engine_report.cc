#include "app/engine_report.h"

#include <algorithm>
#include <cmath>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "app/fit_report.h"

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

std::optional<TrackedParameters> TrackedParametersOf(const RecursiveTracker& t, TrackingMode mode) {
  if (mode == TrackingMode::kOff || !t.active()) return std::nullopt;
  TrackedParameters p;
  p.mode = std::string(TrackingModeName(mode));
  p.variance = t.gjr() ? "GJR-GARCH(1,1)" : "GARCH(1,1)";
  p.names = t.gjr() ? std::vector<std::string>{"omega", "alpha_1", "gamma_1", "beta_1"}
                    : std::vector<std::string>{"omega", "alpha_1", "beta_1"};
  for (int i = 0; i < t.num_params(); ++i) {
    p.values.push_back(t.coefficient(i));
    p.refit.push_back(t.anchor_coefficient(i));
  }
  p.persistence = t.persistence();
  // alpha_1 + gamma_1/2 + beta_1 of the anchor (coefficients 1.. of refit).
  p.refit_persistence = p.refit[1] + (t.gjr() ? 0.5 * p.refit[2] : 0.0) + p.refit.back();
  p.level_ratio = t.level_ratio();
  p.instability = t.instability();
  p.bars_since_refit = t.bars_since_anchor();
  p.stepping = t.stepping();
  p.resets = t.resets();
  return p;
}

std::optional<TrackedParameters> TrackedParametersOf(const IngestCore& core, int index) {
  return TrackedParametersOf(core.tracker(index), core.tracking_mode(index));
}

std::string TrackedParametersText(const TrackedParameters& p) {
  std::string out = absl::StrCat(p.mode, " ", p.variance, ", ", p.bars_since_refit,
                                 " bars since the refit", p.stepping ? "" : " (burn-in)", ":");
  for (size_t i = 0; i < p.names.size() && i < p.values.size() && i < p.refit.size(); ++i) {
    absl::StrAppendFormat(&out, "%s %s %.4g (refit %.4g, ", i ? "," : "", p.names[i], p.values[i],
                          p.refit[i]);
    // omega is in squared return units: its drift reads better relative.
    if (p.names[i] == "omega" && p.refit[i] > 0) {
      absl::StrAppendFormat(&out, "%+.1f %%)", 100.0 * p.drift(i) / p.refit[i]);
    } else {
      absl::StrAppendFormat(&out, "%+.3g)", p.drift(i));
    }
  }
  absl::StrAppendFormat(&out, "; persistence %.4f (refit %.4f), level x%.3g, instability %.3g",
                        p.persistence, p.refit_persistence, p.level_ratio, p.instability);
  if (p.instability_alerts >= 0) {
    absl::StrAppend(&out, ", ", p.instability_alerts, " instability alert",
                    p.instability_alerts == 1 ? "" : "s");
  }
  absl::StrAppend(&out, ", ", p.resets, p.resets == 1 ? " reset" : " resets");
  return out;
}

nlohmann::json TrackedParametersJson(const TrackedParameters& p) {
  nlohmann::json est = nlohmann::json::array();
  for (size_t i = 0; i < p.names.size() && i < p.values.size() && i < p.refit.size(); ++i) {
    est.push_back({{"name", p.names[i]},
                   {"value", JsonNumber(p.values[i])},
                   {"refit", JsonNumber(p.refit[i])},
                   {"drift", JsonNumber(p.drift(i))}});
  }
  nlohmann::json j = {{"mode", p.mode},
                      {"variance", p.variance},
                      {"bars_since_refit", p.bars_since_refit},
                      {"stepping", p.stepping},
                      {"estimates", std::move(est)},
                      {"persistence", JsonNumber(p.persistence)},
                      {"refit_persistence", JsonNumber(p.refit_persistence)},
                      {"level_ratio", JsonNumber(p.level_ratio)},
                      {"instability", JsonNumber(p.instability)},
                      {"resets", p.resets}};
  if (p.instability_alerts >= 0) j["instability_alerts"] = p.instability_alerts;
  return j;
}

std::string TrackingSummary(const IngestCore& core, const EngineServices& services,
                            int max_symbols) {
  std::vector<std::pair<int, TrackedParameters>> tracked;
  int64_t alerts = 0, drive = 0;
  for (int i = 0; i < core.num_symbols(); ++i) {
    std::optional<TrackedParameters> p = TrackedParametersOf(core, i);
    if (!p) continue;
    p->instability_alerts = static_cast<int64_t>(services.instability_alerts(i));
    alerts += p->instability_alerts;
    drive += core.tracking_mode(i) == TrackingMode::kDrive;
    tracked.emplace_back(i, *std::move(p));
  }
  if (tracked.empty()) return "";
  std::stable_sort(tracked.begin(), tracked.end(), [](const auto& a, const auto& b) {
    return a.second.instability > b.second.instability;
  });
  const int64_t n = static_cast<int64_t>(tracked.size());
  std::string out = absl::StrCat("tracking: ", n, n == 1 ? " symbol" : " symbols", " tracked (",
                                 drive, " drive, ", n - drive, " track), ", alerts,
                                 alerts == 1 ? " instability alert" : " instability alerts",
                                 "; highest instability first\n");
  for (int64_t k = 0; k < n && k < max_symbols; ++k) {
    absl::StrAppend(&out, "  ", core.symbol(tracked[k].first), " ",
                    TrackedParametersText(tracked[k].second), "\n");
  }
  if (n > max_symbols) {
    absl::StrAppend(&out, "  ... and ", n - max_symbols,
                    " more tracked symbols (`aftershock models list` on a checkpoint shows all)\n");
  }
  return out;
}

}  // namespace aftershock::app
