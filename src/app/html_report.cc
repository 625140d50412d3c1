#include "aftershock/html_report.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <map>
#include <nlohmann/json.hpp>
#include <utility>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/time/time.h"
#include "aftershock/bar_update.h"
#include "app/html_report_assets.h"

namespace aftershock {
namespace {

using nlohmann::json;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr size_t kMaxExceptionMarks = 4000;  // markers drawn per chart

json Num(double v) { return std::isfinite(v) ? json(v) : json(nullptr); }

// A table cell number: printf `fmt` (one double conversion) or an en dash
// when not finite.
std::string Fmt(double v, const char* fmt = "%.4g") {
  if (!std::isfinite(v)) return "\xE2\x80\x93";
  char buf[64];
  std::snprintf(buf, sizeof(buf), fmt, v);
  return buf;
}
std::string FmtP(double p) { return Fmt(p, "%.3g"); }
std::string SortKey(double v) { return std::isfinite(v) ? absl::StrFormat("%.17g", v) : ""; }

// JSON safe inside <script>: no "<", ">" or "&" survive (all are legal as
// \u escapes inside JSON strings and never appear outside them), and invalid
// UTF-8 in the input is replaced rather than thrown on.
std::string EmbedJson(const json& j) {
  const std::string raw = j.dump(-1, ' ', true, json::error_handler_t::replace);
  std::string out;
  out.reserve(raw.size() + raw.size() / 16);
  for (char c : raw) {
    switch (c) {
      case '<':
        out += "\\u003c";
        break;
      case '>':
        out += "\\u003e";
        break;
      case '&':
        out += "\\u0026";
        break;
      default:
        out += c;
    }
  }
  return out;
}

// [begin, end) index ranges splitting n bars into at most max_buckets buckets.
std::vector<std::pair<size_t, size_t>> Buckets(size_t n, size_t max_buckets) {
  std::vector<std::pair<size_t, size_t>> b;
  const size_t k = std::max<size_t>(1, std::min(n, max_buckets));
  b.reserve(k);
  for (size_t j = 0; j < k; ++j) b.emplace_back(j * n / k, (j + 1) * n / k);
  return b;
}

struct MinMax {
  double lo = kNaN, hi = kNaN;
  void Add(double v) {
    if (!std::isfinite(v)) return;
    if (!(lo <= v)) lo = v;
    if (!(hi >= v)) hi = v;
  }
};

int LevelIndex(const SymbolHistory& h, double level) {
  for (size_t k = 0; k < h.risk_levels.size(); ++k) {
    if (std::fabs(h.risk_levels[k] - level) < 1e-9) return static_cast<int>(k);
  }
  return -1;
}

std::string LawLabel(const InnovationLaw& law) {
  if (law.kind() == Innovations::kStudentT) {
    return absl::StrFormat("standardized t, \xCE\xBD = %.2f", law.nu());
  }
  return "standard normal";
}

std::string LevelLabel(double level) { return absl::StrFormat("%.4g %%", 100.0 * level); }

// Everything the page script draws for one symbol.
json ChartData(const SymbolHistory& h, const SymbolEvaluation& ev, const ReportOptions& opt,
               int* charts) {
  const size_t n = h.t_ns.size();
  bool time_axis = n > 1;
  for (size_t i = 1; i < n && time_axis; ++i) time_axis = h.t_ns[i] > h.t_ns[i - 1];
  auto x_of = [&](size_t i) { return time_axis ? h.t_ns[i] / 1e6 : static_cast<double>(i); };
  // x of an event time: the time itself, or the first bar at or after it.
  auto x_at = [&](int64_t t) {
    if (time_axis) return t / 1e6;
    const size_t i = std::lower_bound(h.t_ns.begin(), h.t_ns.end(), t) - h.t_ns.begin();
    return static_cast<double>(std::min(i, n - 1));
  };
  const int lv = LevelIndex(h, opt.var_level);
  const double ppy = opt.periods_per_year;
  const double vol_scale = ppy > 0 ? std::sqrt(ppy) : 1.0;

  json d;
  d["time_axis"] = time_axis;
  d["law"] = LawLabel(h.law);
  d["var_level"] = LevelLabel(opt.var_level);
  d["annualized"] = ppy > 0;
  d["ppy"] = ppy;

  // (a) losses against the previous bar's VaR limit; (b) volatility. Both
  // min/max per bucket so single-bar spikes survive the downsampling.
  const auto buckets = Buckets(n, static_cast<size_t>(opt.max_points / 2));
  json xs = json::array(), lo = json::array(), hi = json::array(), llo = json::array(),
       lhi = json::array(), vlo = json::array(), vhi = json::array();
  for (const auto& [b, e] : buckets) {
    MinMax loss, limit, vol;
    for (size_t i = b; i < e; ++i) {
      loss.Add(-h.r[i]);
      if (h.var[i] > 0) vol.Add(std::sqrt(h.var[i]) * vol_scale);
      if (lv >= 0 && i > 0) limit.Add(h.var_risk_next[lv][i - 1]);
    }
    xs.push_back(x_of(b));
    lo.push_back(Num(loss.lo));
    hi.push_back(Num(loss.hi));
    llo.push_back(Num(limit.lo));
    lhi.push_back(Num(limit.hi));
    vlo.push_back(Num(vol.lo));
    vhi.push_back(Num(vol.hi));
  }
  json exc = json::array();
  int64_t n_exc = 0;
  if (lv >= 0) {
    for (int64_t i : ev.levels[lv].exception_bars) {
      ++n_exc;
      if (exc.size() < kMaxExceptionMarks) exc.push_back({x_of(i), -h.r[i]});
    }
  }
  d["losses"] = {{"x", xs},
                 {"lo", lo},
                 {"hi", hi},
                 {"limit_lo", lv >= 0 ? llo : json(nullptr)},
                 {"limit_hi", lv >= 0 ? lhi : json(nullptr)},
                 {"exc", exc},
                 {"n_exc", n_exc}};
  json regimes = json::array();
  for (const auto& g : h.regimes)
    regimes.push_back({x_at(g.start_ns), x_at(g.end_ns), g.direction});
  json swaps = json::array();
  for (const auto& s : h.swaps) swaps.push_back({x_at(s.t_ns), s.version, s.accepted});
  d["vol"] = {{"x", xs}, {"lo", vlo}, {"hi", vhi}, {"regimes", regimes}, {"swaps", swaps}};
  *charts += 2;

  // (c) calibration of the shocks: PIT histogram and its uniformity tests.
  const PitTest& pit = ev.pit;
  d["pit"] = {{"counts", pit.counts},      {"n", pit.n},
              {"chi2", Num(pit.chi2)},     {"dof", pit.chi2_dof},
              {"chi2_p", Num(pit.chi2_p)}, {"ks_d", Num(pit.ks_d)},
              {"ks_p", Num(pit.ks_p)}};
  *charts += 1;

  // (d) exceptions and mean z^2 by time of day (intraday histories only).
  const TimeOfDay& tod = ev.time_of_day;
  if (!tod.segments.empty()) {
    json segs = json::array();
    for (const TimeOfDaySegment& g : tod.segments) {
      const int64_t el = lv >= 0 ? g.eligible[lv] : 0;
      const int64_t ex = lv >= 0 ? g.exceptions[lv] : 0;
      const double expected = (1.0 - opt.var_level) * static_cast<double>(el);
      segs.push_back({{"bars", absl::StrCat(g.first_bar, "\xE2\x80\x93", g.last_bar)},
                      {"n", g.bars},
                      {"mean_z2", Num(g.mean_z2)},
                      {"exceptions", ex},
                      {"expected", expected},
                      {"ratio", expected > 0 ? Num(ex / expected) : json(nullptr)}});
    }
    d["tod"] = {{"session_bars", tod.session_bars}, {"segments", segs}};
    *charts += 1;
  } else {
    d["tod"] = nullptr;
  }

  // (e) parameter history across accepted refits.
  std::vector<std::string> names;
  std::map<std::string, json> series;
  for (const auto& s : h.swaps) {
    if (!s.accepted) continue;
    for (size_t k = 0; k < s.param_names.size() && k < s.values.size(); ++k) {
      const std::string& nm = s.param_names[k];
      if (!series.count(nm)) {
        names.push_back(nm);
        series[nm] = json::array();
      }
      const double se = k < s.std_errors.size() ? s.std_errors[k] : kNaN;
      series[nm].push_back({x_at(s.t_ns), Num(s.values[k]), Num(se)});
    }
  }
  json params = json::array();
  for (const auto& nm : names) params.push_back({{"name", nm}, {"points", series[nm]}});
  const bool params_chart = ev.swaps.accepted >= 2 && !names.empty();
  d["params"] = params_chart ? params : json(nullptr);
  if (params_chart) *charts += 1;
  return d;
}

// "YYYY-MM-DD HH:MM:SS" in UTC.
std::string UtcTime(int64_t t_ns) {
  return absl::FormatTime("%Y-%m-%d %H:%M:%S", absl::FromUnixNanos(t_ns), absl::UTCTimeZone());
}

std::string ZoneChip(TrafficLightZone zone) {
  return absl::StrCat("<span class=\"chip zone-",
                      ZoneName(zone) == std::string("n/a") ? "na" : ZoneName(zone), "\">",
                      ZoneName(zone), "</span>");
}

int ZoneRank(TrafficLightZone z) {
  switch (z) {
    case TrafficLightZone::kGreen:
      return 0;
    case TrafficLightZone::kYellow:
      return 1;
    case TrafficLightZone::kRed:
      return 2;
    default:
      return -1;
  }
}

// What the zone counted, in words: "4 in the last 250 bars; yellow from 5, red
// from 10" or "1012 in the last 250 trading days (97500 bars); yellow from
// 1026, red from 1093".
std::string ZoneWindowText(const TrafficLight& tl) {
  std::string s = absl::StrCat(tl.window_exceptions, " in the last ");
  if (tl.basis == ZoneBasis::kTradingDays) {
    absl::StrAppend(&s, tl.window_days, " trading days (", tl.window, " bars)");
  } else {
    absl::StrAppend(&s, tl.window, tl.basis == ZoneBasis::kDailyBars ? " daily bars" : " bars");
  }
  if (tl.red_from > 0) {
    absl::StrAppend(&s, "; yellow from ", tl.yellow_from, ", red from ", tl.red_from);
  }
  return s;
}

std::string Td(const std::string& text, const std::string& key = "", bool num = true) {
  return absl::StrCat("<td", num ? " class=\"num\"" : "",
                      key.empty() ? "" : absl::StrCat(" data-v=\"", HtmlEscape(key), "\""), ">",
                      text, "</td>");
}

std::string LrCell(double lr, double p) { return absl::StrCat(Fmt(lr), " (", FmtP(p), ")"); }

std::string BacktestTable(const SymbolEvaluation& ev) {
  std::string s =
      "<table class=\"grid\"><caption>VaR backtests (forecast made at the previous bar; "
      "exception when the loss &minus;r exceeds it)</caption><thead><tr><th>level</th>"
      "<th>bars</th><th>exceptions (expected)</th><th>rate</th><th>Kupiec LR (p)</th>"
      "<th>n00 / n01 / n10 / n11</th><th>Christoffersen LR (p)</th>"
      "<th>cond. coverage LR (p)</th><th>zone, last window</th>"
      "<th>rolling windows green / yellow / red</th><th>ES ratio (n)</th></tr></thead><tbody>";
  for (const auto& lb : ev.levels) {
    const auto& t = lb.tests;
    const auto& tl = lb.traffic_light;
    std::string windows =
        tl.n_windows > 0 ? absl::StrFormat("%.1f / %.1f / %.1f %% of %d", 100 * tl.share_green,
                                           100 * tl.share_yellow, 100 * tl.share_red, tl.n_windows)
                         : "\xE2\x80\x93";
    std::string zone = ZoneChip(tl.zone);
    if (tl.window > 0) absl::StrAppend(&zone, " ", ZoneWindowText(tl));
    absl::StrAppend(&s, "<tr>", Td(LevelLabel(lb.level)), Td(absl::StrCat(t.n)),
                    Td(absl::StrCat(t.exceptions, " (",
                                    Fmt(t.tail_prob * static_cast<double>(t.n), "%.1f"), ")")),
                    Td(Fmt(t.rate, "%.4f")), Td(LrCell(t.lr_pof, t.p_pof)),
                    Td(absl::StrCat(t.n00, " / ", t.n01, " / ", t.n10, " / ", t.n11)),
                    Td(LrCell(t.lr_ind, t.p_ind)), Td(LrCell(t.lr_cc, t.p_cc)), Td(zone, "", false),
                    Td(windows), Td(absl::StrCat(Fmt(lb.es_ratio, "%.3f"), " (", lb.es_n, ")")),
                    "</tr>");
  }
  s += "</tbody></table>";
  return s;
}

std::string ForecastRow(const ForecastLoss& f) {
  const auto& mz = f.mz;
  return absl::StrCat(
      "<tr>", Td(f.target == "rv" ? "realized variance" : "(r &minus; &mu;)&sup2;", "", false),
      Td(absl::StrCat(f.n)), Td(Fmt(f.qlike, "%.6g")),
      Td(absl::StrCat(Fmt(f.qlike_normalized, "%.5g"), " (", f.n_normalized, ")")),
      Td(Fmt(f.mse, "%.5g")),
      Td(absl::StrCat(Fmt(mz.intercept, "%.4g"), " (", Fmt(mz.intercept_se, "%.2g"), "; ",
                      Fmt(mz.intercept_se_robust, "%.2g"), ")")),
      Td(absl::StrCat(Fmt(mz.slope, "%.4g"), " (", Fmt(mz.slope_se, "%.2g"), "; ",
                      Fmt(mz.slope_se_robust, "%.2g"), ")")),
      Td(Fmt(mz.r_squared, "%.4f")), "</tr>");
}

std::string ForecastTable(const SymbolEvaluation& ev) {
  std::string s =
      "<table class=\"grid\"><caption>Variance forecast evaluation (forecast h = variance "
      "used for the bar, made at the previous bar)</caption><thead><tr><th>target y</th>"
      "<th>bars</th><th>QLIKE: mean log h + y/h</th><th>QLIKE: mean y/h &minus; log(y/h) "
      "&minus; 1 (bars with y &gt; 0)</th><th>MSE</th><th>MZ intercept (s.e.; robust s.e.)"
      "</th><th>MZ slope (s.e.; robust s.e.)</th><th>MZ R&sup2;</th></tr></thead><tbody>";
  s += ForecastRow(ev.vs_r2);
  if (ev.vs_rv) s += ForecastRow(*ev.vs_rv);
  s += "</tbody></table>";
  const auto& z = ev.z;
  absl::StrAppend(&s,
                  "<table class=\"grid\"><caption>Standardized shocks z</caption><thead><tr>"
                  "<th>bars</th><th>mean</th><th>variance</th><th>skewness</th>"
                  "<th>excess kurtosis</th><th>max |z|</th></tr></thead><tbody><tr>",
                  Td(absl::StrCat(z.n)), Td(Fmt(z.mean)), Td(Fmt(z.variance)), Td(Fmt(z.skewness)),
                  Td(Fmt(z.excess_kurtosis)), Td(Fmt(z.max_abs)), "</tr></tbody></table>");
  return s;
}

std::string AlertTable(const SymbolEvaluation& ev) {
  std::string s = "<table class=\"grid\"><caption>Alerts (" + std::to_string(ev.alerts_total) +
                  " in total)</caption><thead><tr><th>kind</th><th>severity</th><th>count</th>"
                  "</tr></thead><tbody>";
  if (ev.alerts.empty()) s += "<tr><td colspan=\"3\">no alerts</td></tr>";
  for (const auto& a : ev.alerts) {
    absl::StrAppend(&s, "<tr>", Td(HtmlEscape(a.kind), "", false),
                    Td(HtmlEscape(a.severity), "", false), Td(absl::StrCat(a.count)), "</tr>");
  }
  s += "</tbody></table>";
  return s;
}

std::string SwapTable(const SymbolHistory& h, const SymbolEvaluation& ev) {
  std::string s = absl::StrCat(
      "<table class=\"grid\"><caption>Refits: ", ev.swaps.attempts, " offered, ", ev.swaps.accepted,
      " swapped in, ", ev.swaps.rejected,
      " rejected by the gate</caption><thead><tr><th>bar end (UTC)</th><th>version</th>"
      "<th>model</th><th>estimates (s.e.)</th><th>log-likelihood</th><th>gate</th></tr>"
      "</thead><tbody>");
  if (h.swaps.empty()) s += "<tr><td colspan=\"6\">no refits</td></tr>";
  for (const auto& w : h.swaps) {
    std::vector<std::string> est;
    for (size_t k = 0; k < w.param_names.size() && k < w.values.size(); ++k) {
      std::string e = absl::StrCat(HtmlEscape(w.param_names[k]), " = ", Fmt(w.values[k], "%.5g"));
      if (k < w.std_errors.size() && std::isfinite(w.std_errors[k])) {
        absl::StrAppend(&e, " (", Fmt(w.std_errors[k], "%.2g"), ")");
      }
      est.push_back(e);
    }
    const std::string gate = w.accepted
                                 ? "<span class=\"chip gate-pass\">passed</span>"
                                 : absl::StrCat("<span class=\"chip gate-fail\">failed</span> ",
                                                HtmlEscape(w.gate_reason));
    absl::StrAppend(&s, "<tr>", Td(UtcTime(w.t_ns)),
                    Td(w.accepted ? absl::StrCat(w.version) : "\xE2\x80\x93"),
                    Td(HtmlEscape(w.model), "", false), Td(absl::StrJoin(est, ", "), "", false),
                    Td(Fmt(w.loglik, "%.6g")), Td(gate, "", false), "</tr>");
  }
  s += "</tbody></table>";
  return s;
}

// Recursive tracking at the end of the replay: the tracked coefficients beside
// the refit model's (the model in force, which the tracker started from) and
// their drift; the instability statistic and its alerts in the caption. Empty
// for a symbol that was not tracked.
std::string TrackingTable(const SymbolHistory& h) {
  if (!h.tracking) return "";
  const TrackedParameters& t = *h.tracking;
  std::string s = absl::StrCat(
      "<table class=\"grid tracking\"><caption>Parameter tracking (", HtmlEscape(t.mode), ", ",
      HtmlEscape(t.variance), "): ", t.bars_since_refit, " bars since the refit",
      t.stepping ? "" : " (burn-in: not moving yet)", "; instability ", Fmt(t.instability, "%.3g"),
      t.instability_alerts >= 0 ? absl::StrCat(", ", t.instability_alerts, " instability alert",
                                               t.instability_alerts == 1 ? "" : "s")
                                : std::string(),
      ", ", t.resets, t.resets == 1 ? " reset" : " resets",
      "</caption><thead><tr><th>parameter</th><th>refit (in force)</th><th>tracked</th>"
      "<th>drift</th><th>drift %</th></tr></thead><tbody>");
  auto row = [&](const std::string& name, double refit, double value) {
    const double d = value - refit;
    absl::StrAppend(&s, "<tr>", Td(HtmlEscape(name), "", false), Td(Fmt(refit, "%.5g")),
                    Td(Fmt(value, "%.5g")), Td(Fmt(d, "%+.3g")),
                    Td(refit > 0 ? Fmt(100.0 * d / refit, "%+.1f") : "\xE2\x80\x93"), "</tr>");
  };
  for (size_t i = 0; i < t.names.size() && i < t.values.size() && i < t.refit.size(); ++i) {
    row(t.names[i], t.refit[i], t.values[i]);
  }
  row("persistence", t.refit_persistence, t.persistence);
  // The level: tracked unconditional variance over the refit model's (1 by definition).
  row("level", 1.0, t.level_ratio);
  s += "</tbody></table>";
  return s;
}

// Intraday view (EvaluateSymbol's TimeOfDay): per segment of the session the
// profile s^2 in force at the end (drawn as a bar), mean z^2 and the VaR
// exceptions at var_level against their expected count. Empty when the
// history has no bar-of-session indices.
std::string TimeOfDayTable(const SymbolHistory& h, const SymbolEvaluation& ev,
                           const ReportOptions& opt) {
  const TimeOfDay& tod = ev.time_of_day;
  if (tod.segments.empty()) return "";
  const int lv = LevelIndex(h, opt.var_level);
  double s2_max = 0;
  for (const auto& g : tod.segments) {
    if (std::isfinite(g.profile_s2)) s2_max = std::max(s2_max, g.profile_s2);
  }
  std::string s =
      absl::StrCat("<table class=\"grid\"><caption>By time of day (", tod.session_bars,
                   " bars a session in ", tod.segments.size(), " segments; ",
                   tod.profile ? "profile s&sup2; in force at the end" : "no intraday profile",
                   tod.deseasonalized_only ? "; statistics over the deseasonalized bars" : "",
                   ")</caption><thead><tr><th>bars of the session</th><th>profile s&sup2;</th>"
                   "<th>bars</th><th>mean z&sup2;</th><th>exceptions @",
                   LevelLabel(opt.var_level), " (expected)</th></tr></thead><tbody>");
  for (const TimeOfDaySegment& g : tod.segments) {
    std::string bar_cell = "&ndash;";
    if (tod.profile && std::isfinite(g.profile_s2)) {
      const double width = s2_max > 0 ? 100.0 * g.profile_s2 / s2_max : 0;
      bar_cell =
          absl::StrCat("<span class=\"tod-bar\" style=\"display:inline-block;height:0.7em;width:",
                       Fmt(0.6 * width, "%.1f"), "px;background:#6a8caf;margin-right:4px\"></span>",
                       Fmt(g.profile_s2, "%.3g"));
    }
    absl::StrAppend(
        &s, "<tr>", Td(absl::StrCat(g.first_bar, "&ndash;", g.last_bar), "", false),
        Td(bar_cell, "", false), Td(absl::StrCat(g.bars)),
        Td(g.bars > 0 ? Fmt(g.mean_z2, "%.3f") : "&ndash;"),
        Td(lv >= 0
               ? absl::StrCat(
                     g.exceptions[lv], " (",
                     Fmt((1 - opt.var_level) * static_cast<double>(g.eligible[lv]), "%.1f"), ")")
               : "&ndash;"),
        "</tr>");
  }
  s += "</tbody></table>";
  return s;
}

// The calibration figures under the PIT chart, as text (the chart draws them too).
std::string PitLine(const SymbolEvaluation& ev) {
  const PitTest& t = ev.pit;
  return absl::StrCat(
      "<p class=\"meta pit\">Calibration of the shocks (probability integral transform, ", t.n,
      " bars, ", t.counts.size(), " bins): chi-square ", Fmt(t.chi2, "%.4g"), " on ", t.chi2_dof,
      " df, p = ", FmtP(t.chi2_p), "; Kolmogorov-Smirnov D = ", Fmt(t.ks_d, "%.4g"),
      ", p = ", FmtP(t.ks_p), " (asymptotic).",
      t.n < 5 * static_cast<int64_t>(t.counts.size())
          ? " Fewer than 5 bars expected a bin: too few for the chi-square law, read with care."
          : "",
      "</p>");
}

}  // namespace

std::string HtmlEscape(const std::string& text) {
  std::string out;
  out.reserve(text.size());
  for (char c : text) {
    switch (c) {
      case '&':
        out += "&amp;";
        break;
      case '<':
        out += "&lt;";
        break;
      case '>':
        out += "&gt;";
        break;
      case '"':
        out += "&quot;";
        break;
      case '\'':
        out += "&#39;";
        break;
      default:
        out += c;
    }
  }
  return out;
}

absl::StatusOr<std::string> RenderHtmlReport(const ReportInput& in) {
  if (in.symbols.empty()) {
    return absl::InvalidArgumentError("report: no symbols to report on");
  }
  const ReportOptions& opt = in.options;
  if (opt.max_points < 100) {
    return absl::InvalidArgumentError(
        absl::StrCat("report: max_points is ", opt.max_points, ", expected >= 100"));
  }
  if (!(opt.periods_per_year >= 0) || !std::isfinite(opt.periods_per_year)) {
    return absl::InvalidArgumentError("report: periods_per_year must be finite and >= 0");
  }
  const std::string vol_unit =
      opt.periods_per_year > 0 ? absl::StrFormat("annualized, %g bars/year", opt.periods_per_year)
                               : std::string("per bar");

  int charts = 0;
  int64_t total_bars = 0;
  json data = json::array();
  std::string sections;
  // Overview rows with their risk rank, sorted worst first below: zone, then
  // the coverage test, then alert count.
  struct OverviewRow {
    int zone_rank = 0;
    double p_pof = 1.0;
    int64_t alerts = 0;
    size_t index = 0;
    std::string html;
  };
  std::vector<OverviewRow> rows;
  int64_t first_bar = 0, last_bar = 0;
  std::map<std::string, int> model_mix;  // final model label -> symbols
  for (size_t si = 0; si < in.symbols.size(); ++si) {
    const SymbolHistory& h = in.symbols[si];
    total_bars += static_cast<int64_t>(h.t_ns.size());
    if (!h.t_ns.empty()) {
      first_bar = first_bar == 0 ? h.t_ns.front() : std::min(first_bar, h.t_ns.front());
      last_bar = std::max(last_bar, h.t_ns.back());
    }
    {
      std::string label = "no fitted model";
      for (auto it = h.swaps.rbegin(); it != h.swaps.rend(); ++it) {
        if (it->accepted) {
          label = it->model;
          break;
        }
      }
      ++model_mix[label];
    }
    std::string overview;
    const std::string sym = HtmlEscape(h.symbol);
    const std::string anchor = absl::StrCat("sym-", si);
    auto ev = EvaluateSymbol(h, opt.evaluation);
    if (!ev.ok()) {
      absl::StrAppend(
          &overview, "<tr>",
          Td(absl::StrCat("<a href=\"#", anchor, "\">", sym, "</a>"), h.symbol, false),
          Td(absl::StrCat(h.t_ns.size()), std::to_string(h.t_ns.size())), "<td colspan=\"9\"></td>",
          Td(absl::StrCat("evaluation failed: ", HtmlEscape(std::string(ev.status().message()))),
             "9", false),
          "</tr>");
      rows.push_back({4, 0.0, 0, si, overview});  // a failed evaluation first: look at it
      absl::StrAppend(&sections, "<section class=\"symbol\" id=\"", anchor, "\"><h2>", sym,
                      "</h2><p class=\"failed\">Evaluation failed: ",
                      HtmlEscape(std::string(ev.status().message())), "</p></section>");
      data.push_back(nullptr);
      continue;
    }
    const int lv = LevelIndex(h, opt.var_level);
    const LevelBacktest* b = lv >= 0 ? &ev->levels[lv] : nullptr;
    const double last_vol = std::sqrt(ev->last_var_next) *
                            (opt.periods_per_year > 0 ? std::sqrt(opt.periods_per_year) : 1.0);
    // The zone is the traffic-light level's (which may differ from var_level).
    TrafficLightZone zone = TrafficLightZone::kNotApplicable;
    std::string zone_basis;
    for (const LevelBacktest& l : ev->levels) {
      if (std::fabs(l.level - opt.evaluation.traffic_light_level) > 1e-9) continue;
      zone = l.traffic_light.zone;
      if (l.traffic_light.window > 0) {
        zone_basis = absl::StrCat("<br><small class=\"basis\">", ZoneWindowText(l.traffic_light),
                                  "</small>");
      }
    }
    std::string warn_text =
        ev->warnings.empty() ? std::string("none") : HtmlEscape(absl::StrJoin(ev->warnings, "; "));
    // The limits in force for the next bar: VaR / ES at every level.
    std::string limits;
    for (size_t k = 0; k < h.risk_levels.size(); ++k) {
      const bool have = k < h.var_risk_next.size() && !h.var_risk_next[k].empty() &&
                        k < h.es_next.size() && !h.es_next[k].empty();
      absl::StrAppend(&limits, k ? "<br>" : "", LevelLabel(h.risk_levels[k]), ": ",
                      have ? Fmt(h.var_risk_next[k].back()) : "\xE2\x80\x93", " / ",
                      have ? Fmt(h.es_next[k].back()) : "\xE2\x80\x93");
    }
    // Regime at the end: a regime period that reaches the last bar is open.
    std::string regime = "none";
    if (!h.regimes.empty() && !h.t_ns.empty() && h.regimes.back().end_ns >= h.t_ns.back()) {
      regime = h.regimes.back().direction > 0 ? "high" : "low";
    }
    absl::StrAppend(
        &overview, "<tr>",
        Td(absl::StrCat("<a href=\"#", anchor, "\">", sym, "</a>"), h.symbol, false),
        Td(absl::StrCat(ZoneChip(zone), zone_basis), absl::StrCat(ZoneRank(zone)), false),
        Td(b ? absl::StrCat(b->tests.exceptions, " / ", b->tests.n) : "\xE2\x80\x93",
           b ? absl::StrCat(b->tests.exceptions) : ""),
        Td(b ? FmtP(b->tests.p_pof) : "\xE2\x80\x93", b ? SortKey(b->tests.p_pof) : ""),
        Td(b ? FmtP(b->tests.p_ind) : "\xE2\x80\x93", b ? SortKey(b->tests.p_ind) : ""),
        Td(absl::StrCat(ev->alerts_total), absl::StrCat(ev->alerts_total)),
        Td(regime, regime, false), Td(Fmt(last_vol, "%.4g"), SortKey(last_vol)),
        Td(limits, "", false), Td(absl::StrCat(ev->bars), absl::StrCat(ev->bars)),
        Td(Fmt(ev->vs_r2.qlike, "%.5g"), SortKey(ev->vs_r2.qlike)),
        Td(warn_text, absl::StrCat(ev->warnings.size()), false), "</tr>");
    rows.push_back({ZoneRank(zone), b && std::isfinite(b->tests.p_pof) ? b->tests.p_pof : 1.0,
                    ev->alerts_total, si, overview});

    const int before = charts;
    json d = ChartData(h, *ev, opt, &charts);
    d["symbol"] = h.symbol;
    data.push_back(d);
    absl::StrAppend(&sections, "<section class=\"symbol\" id=\"", anchor, "\"><h2>", sym, "</h2>",
                    "<p class=\"meta\">", ev->bars, " bars, ", ev->evaluated, " evaluated (",
                    ev->warmup_bars, " warm-up, ", ev->fallback_bars,
                    " on fallback); innovation law of "
                    "the latest model: ",
                    HtmlEscape(LawLabel(h.law)), "; last model version ",
                    h.ver.empty() ? 0u : h.ver.back(), ".</p>");
    if (!ev->warnings.empty()) {
      sections += "<ul class=\"warnings\">";
      for (const auto& w : ev->warnings) absl::StrAppend(&sections, "<li>", HtmlEscape(w), "</li>");
      sections += "</ul>";
    }
    absl::StrAppend(&sections, "<div class=\"charts\" data-symbol-index=\"", si,
                    "\" data-charts=\"", charts - before, "\"></div>");
    absl::StrAppend(&sections, "<div class=\"tables\">", BacktestTable(*ev), PitLine(*ev),
                    TimeOfDayTable(h, *ev, opt), ForecastTable(*ev), "<div class=\"pair\">",
                    AlertTable(*ev), "</div>", SwapTable(h, *ev), TrackingTable(h),
                    "</div></section>");
  }

  std::stable_sort(rows.begin(), rows.end(), [](const OverviewRow& a, const OverviewRow& b) {
    if (a.zone_rank != b.zone_rank) return a.zone_rank > b.zone_rank;
    if (a.p_pof != b.p_pof) return a.p_pof < b.p_pof;
    return a.alerts > b.alerts;
  });
  std::string overview;
  for (const OverviewRow& r : rows) overview += r.html;
  json meta = {{"vol_unit", vol_unit}};
  std::string page;
  page.reserve(1 << 16);
  absl::StrAppend(&page, "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">",
                  "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
                  "<title>", HtmlEscape(in.run.title), "</title>", "<style>", kReportCss,
                  "</style><script>", kReportErrorHooks, "</script></head><body>");
  absl::StrAppend(&page, "<header><h1>", HtmlEscape(in.run.title), "</h1><dl class=\"run\">");
  auto run_item = [&](const char* k, const std::string& v) {
    if (!v.empty()) {
      absl::StrAppend(&page, "<div><dt>", k, "</dt><dd>", HtmlEscape(v), "</dd></div>");
    }
  };
  run_item("input", in.run.input_file);
  if (last_bar > 0) {
    run_item("data period", absl::StrCat(UtcTime(first_bar), " to ", UtcTime(last_bar), " UTC"));
  }
  run_item("bar interval", in.run.bar_interval);
  run_item("symbols", std::to_string(in.symbols.size()));
  {
    std::vector<std::pair<std::string, int>> mix(model_mix.begin(), model_mix.end());
    std::stable_sort(mix.begin(), mix.end(),
                     [](const auto& a, const auto& b) { return a.second > b.second; });
    std::vector<std::string> parts;
    for (const auto& [label, n] : mix) parts.push_back(absl::StrCat(n, " ", label));
    run_item("models at the end", absl::StrJoin(parts, ", "));
  }
  run_item("bars", std::to_string(total_bars));
  if (in.run.replay_speed > 0) {
    run_item("replay speed", absl::StrFormat("%.4g bars/s", in.run.replay_speed));
  }
  run_item("volatility", vol_unit);
  run_item("generated", in.run.generated_at);
  run_item("engine", in.run.engine_version);
  page += "</dl>";
  if (!in.run.config_summary.empty()) {
    absl::StrAppend(&page, "<details class=\"config\"><summary>configuration</summary><pre>",
                    HtmlEscape(in.run.config_summary), "</pre></details>");
  }
  absl::StrAppend(
      &page, "</header><main><section class=\"overview\"><h2>Overview</h2>",
      "<p class=\"hint\">Worst first: traffic-light zone, then the coverage test (Kupiec p), "
      "then alerts; click a column header to sort otherwise. Exceptions, Kupiec and "
      "Christoffersen at ",
      LevelLabel(opt.var_level),
      ". Zone: the traffic light of the Basel Committee's 1996 "
      "backtesting framework at ",
      LevelLabel(opt.evaluation.traffic_light_level),
      ", on what each row says it counted: ", "<em>daily bars</em>, the last ",
      opt.evaluation.traffic_light_window, " bars (green 0&ndash;", opt.evaluation.yellow_from - 1,
      ", yellow ", opt.evaluation.yellow_from, "&ndash;", opt.evaluation.red_from - 1, ", red ",
      opt.evaluation.red_from,
      "+ exceptions); <em>trading days</em>, intraday bars: every "
      "exception over the bars of the last ",
      opt.evaluation.zone_window_days,
      " trading days, yellow from the first count k with P(X &le; k) &ge; ",
      Fmt(100 * opt.evaluation.zone_yellow_probability, "%.4g"), " % and red from ",
      Fmt(100 * opt.evaluation.zone_red_probability, "%.6g"),
      " %, X binomial over that many bars (the rule behind the published 4 / 9 bounds); "
      "<em>bars</em>, intraday bars with fewer trading days: the last ",
      opt.evaluation.traffic_light_window,
      " bars, a count over bars and not a regulatory zone. VaR / ES are the limits "
      "in force for the next bar, as positive losses in return units.</p>",
      "<table class=\"grid sortable\" id=\"overview\"><thead><tr>",
      "<th data-type=\"text\">symbol</th><th data-type=\"num\">zone</th>",
      "<th data-type=\"num\">exceptions @", LevelLabel(opt.var_level), "</th>",
      "<th data-type=\"num\">Kupiec p</th><th data-type=\"num\">Christoffersen p</th>",
      "<th data-type=\"num\">alerts</th><th data-type=\"text\">regime</th>",
      "<th data-type=\"num\">vol now (", vol_unit, ")</th>",
      "<th data-type=\"text\">VaR / ES next bar</th><th data-type=\"num\">bars</th>",
      "<th data-type=\"num\">QLIKE</th>", "<th data-type=\"num\">warnings</th></tr></thead><tbody>",
      overview, "</tbody></table></section>", sections, "</main>");
  absl::StrAppend(
      &page,
      "<footer><p><strong>Caution.</strong> Everything in this report is a statistical "
      "estimate, not advice. Volatility models fail in crises, exactly when they matter most; "
      "their parameters are estimated with error, and a backtest that passes on history does "
      "not guarantee future coverage. Any use of these numbers for trading decisions or risk "
      "limits must follow the firm's own model-risk policy and the applicable regulation.</p>"
      "</footer>");
  absl::StrAppend(&page,
                  "<div id=\"report-status\" hidden data-errors=\"0\" "
                  "data-charts-rendered=\"0\" data-charts-expected=\"",
                  charts, "\"></div>");
  absl::StrAppend(&page, "<script type=\"application/json\" id=\"report-data\">",
                  EmbedJson({{"meta", meta}, {"symbols", data}}), "</script><script>",
                  kReportScript, "</script></body></html>\n");
  return page;
}

absl::Status WriteHtmlReport(const ReportInput& input, const std::string& path) {
  auto page = RenderHtmlReport(input);
  if (!page.ok()) return page.status();
  const std::string tmp = path + ".tmp";
  {
    std::ofstream f(tmp, std::ios::binary | std::ios::trunc);
    if (!f) return absl::InternalError(absl::StrCat("report: cannot open '", tmp, "' to write"));
    f.write(page->data(), static_cast<std::streamsize>(page->size()));
    f.flush();
    if (!f) return absl::InternalError(absl::StrCat("report: writing '", tmp, "' failed"));
  }
  if (std::rename(tmp.c_str(), path.c_str()) != 0) {
    std::remove(tmp.c_str());
    return absl::InternalError(absl::StrCat("report: cannot rename '", tmp, "' to '", path, "'"));
  }
  return absl::OkStatus();
}

}  // namespace aftershock
