#include "aftershock/html_report.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdio>
#include <regex>

#include "app/report_fixture.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::FixtureReport;

bool Contains(const std::string& s, const std::string& what) {
  return s.find(what) != std::string::npos;
}

TEST_CASE("HtmlEscape escapes the five metacharacters", "[report]") {
  CHECK(HtmlEscape("a<b>&\"c'") == "a&lt;b&gt;&amp;&quot;c&#39;");
  CHECK(HtmlEscape("plain") == "plain");
}

TEST_CASE("the report opens with the risk view: period, models, worst symbol first", "[report]") {
  const ReportInput in = FixtureReport(3000);
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  const std::string& html = *page;
  CHECK(Contains(html, "<dt>data period</dt>"));
  CHECK(Contains(html, "<dt>models at the end</dt>"));
  CHECK(Contains(html, "VaR / ES next bar"));
  // One-minute bars over a few days: the zone is a count over the last 250
  // bars and says so; the overview states the published basis.
  CHECK(Contains(html, "Basel Committee's 1996 backtesting framework"));
  CHECK(Contains(html, "in the last 250 bars; yellow from 5, red from 10</small>"));
  CHECK_FALSE(Contains(html, "trading days ("));
  // Overview rows: zone rank never increases down the table, and within a
  // zone the Kupiec p never decreases.
  const size_t table = html.find("id=\"overview\"");
  const size_t end = html.find("</table>", table);
  REQUIRE(table != std::string::npos);
  std::vector<std::pair<int, double>> order;
  for (size_t i = 0; i < in.symbols.size(); ++i) {
    auto ev = EvaluateSymbol(in.symbols[i], in.options.evaluation);
    REQUIRE(ev.ok());
    const LevelBacktest* b = nullptr;
    for (const auto& l : ev->levels) {
      if (std::fabs(l.level - in.options.var_level) < 1e-12) b = &l;
    }
    REQUIRE(b != nullptr);
    const int zone = b->traffic_light.zone == TrafficLightZone::kRed      ? 2
                     : b->traffic_light.zone == TrafficLightZone::kYellow ? 1
                     : b->traffic_light.zone == TrafficLightZone::kGreen  ? 0
                                                                          : -1;
    const size_t at = html.find("href=\"#sym-" + std::to_string(i) + "\"", table);
    REQUIRE(at < end);
    order.emplace_back(static_cast<int>(at), 0);
    order.back().second = zone * 10.0 - b->tests.p_pof;  // larger is worse
  }
  std::sort(order.begin(), order.end());  // by position in the table
  for (size_t i = 1; i < order.size(); ++i) CHECK(order[i - 1].second >= order[i].second);
}

TEST_CASE("the report is one self-contained page", "[report]") {
  const ReportInput in = FixtureReport(3000);
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  const std::string& html = *page;
  CHECK(html.rfind("<!DOCTYPE html>", 0) == 0);
  // No external resource of any kind: no src/href to another document (only
  // in-page anchors), no url() outside the in-page clip paths, no fetch.
  CHECK_FALSE(Contains(html, "src="));
  // The SVG namespace URI is a name passed to createElementNS, never loaded;
  // it must be the only URL in the page.
  std::string no_ns = html;
  const std::string ns = "'http://www.w3.org/2000/svg'";
  for (size_t p = no_ns.find(ns); p != std::string::npos; p = no_ns.find(ns))
    no_ns.erase(p, ns.size());
  CHECK(no_ns.size() == html.size() - ns.size());  // exactly one occurrence
  CHECK_FALSE(Contains(no_ns, "http://"));
  CHECK_FALSE(Contains(no_ns, "https://"));
  CHECK_FALSE(Contains(no_ns, "www."));
  CHECK_FALSE(Contains(html, "fetch("));
  CHECK_FALSE(Contains(html, "XMLHttpRequest"));
  CHECK_FALSE(Contains(html, "@import"));
  const std::regex href("href=\"([^\"]*)\"");
  for (auto it = std::sregex_iterator(html.begin(), html.end(), href); it != std::sregex_iterator();
       ++it) {
    INFO((*it)[1].str());
    CHECK((*it)[1].str().rfind("#", 0) == 0);
  }
  // Header, overview, sections and the caution.
  CHECK(Contains(html, "<h1>Replay evaluation: harbour desk scenario</h1>"));
  CHECK(Contains(html, "replays/harbour_&lt;week&gt;.bin"));
  CHECK(Contains(html, "5.2e+06 bars/s"));
  CHECK(Contains(html, "id=\"overview\""));
  CHECK(Contains(html, "not advice"));
  CHECK(Contains(html, "model-risk policy"));
  // 3 x (losses, volatility, PIT, parameter history); no time-of-day chart
  // without bar-of-session indices.
  CHECK(Contains(html, "data-charts-expected=\"12\""));
  // Strings from the input are escaped in HTML ...
  CHECK(Contains(html, "<h2>OSPREY&lt;&amp;&gt;&quot;&#39;</h2>"));
  CHECK_FALSE(Contains(html, "OSPREY<&>"));
  CHECK(Contains(html, "Ljung-Box on z^2 failed &lt;p=0.001&gt;"));
  CHECK_FALSE(Contains(html, "<b>breach</b>"));
  // ... and in the embedded JSON, where no '<' may appear inside the data block.
  const size_t a = html.find("<script type=\"application/json\" id=\"report-data\">");
  REQUIRE(a != std::string::npos);
  const size_t b = html.find("</script>", a);
  const std::string block = html.substr(a + 50, b - a - 50);
  CHECK(block.find('<') == std::string::npos);
  CHECK(Contains(block, "OSPREY\\u003c\\u0026\\u003e\\\"'"));
}

TEST_CASE("a symbol that cannot be evaluated is listed with its error", "[report]") {
  ReportInput in = FixtureReport(1000);
  in.symbols[1].z.pop_back();
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  CHECK(Contains(*page,
                 "Evaluation failed: evaluation of &#39;OSPREY&lt;&amp;&gt;&quot;&#39;&#39;: "
                 "field &#39;z&#39; has 999 entries, t_ns has 1000"));
  CHECK(Contains(*page, "data-charts-expected=\"8\""));
}

TEST_CASE("drawn series are downsampled, statistics are not", "[report]") {
  ReportInput in = FixtureReport(20000);
  in.options.max_points = 400;
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  // 200 buckets of min/max: the lower loss array has 200 entries.
  const size_t l = page->find("\"losses\":{");
  REQUIRE(l != std::string::npos);
  const size_t a = page->find("\"lo\":[", l);
  REQUIRE(a != std::string::npos);
  const size_t b = page->find(']', a);
  const std::string lo = page->substr(a, b - a);
  CHECK(std::count(lo.begin(), lo.end(), ',') == 199);
  // The overview still counts every bar.
  CHECK(Contains(*page, "data-v=\"20000\""));
}

TEST_CASE("a long replay gives a page whose size does not grow with the bars", "[report]") {
  // 3 x 100,000 bars: every drawn series is capped at max_points, the PIT
  // histogram has 20 bins and the exception markers 4,000 per symbol, so the page
  // stays a few hundred kB (the returns alone would be several MB).
  auto page = RenderHtmlReport(FixtureReport(100000));
  REQUIRE(page.ok());
  WARN("report of 3 x 100,000 bars: " << page->size() << " bytes");
  CHECK(page->size() < 1500 * 1024);
  auto small = RenderHtmlReport(FixtureReport(10000));
  REQUIRE(small.ok());
  CHECK(page->size() < 2 * small->size());
}

TEST_CASE("bad report input is refused with a clear message", "[report]") {
  ReportInput empty;
  auto e = RenderHtmlReport(empty);
  REQUIRE_FALSE(e.ok());
  CHECK(std::string(e.status().message()) == "report: no symbols to report on");
  ReportInput in = FixtureReport(500);
  in.options.max_points = 10;
  auto m = RenderHtmlReport(in);
  REQUIRE_FALSE(m.ok());
  CHECK(std::string(m.status().message()) == "report: max_points is 10, expected >= 100");
  auto w = WriteHtmlReport(FixtureReport(500), "/nonexistent-dir/report.html");
  REQUIRE_FALSE(w.ok());
  CHECK(Contains(std::string(w.message()), "/nonexistent-dir/report.html.tmp"));
}

TEST_CASE("the time-of-day table shows the profile and exceptions by segment", "[report]") {
  ReportInput in = FixtureReport(1200);
  SymbolHistory& h = in.symbols[0];
  const int K = 390;
  for (size_t i = 0; i < h.t_ns.size(); ++i) {
    h.session_bar.push_back(static_cast<int32_t>(i % K));
    if (i % K == 0 && i > 0) h.flags[i] |= kFlagGap;
  }
  h.seasonal_factors.assign(K, 0.8);
  for (int k = 0; k < 33; ++k) h.seasonal_factors[k] = 2.0;  // the first segment: bars 0-32
  // Independent count for the first segment (bars 0..32 of each session):
  // r below minus the previous bar's 99 % VaR, previous bar in the same session.
  int exc = 0, eligible = 0;
  for (size_t i = 1; i < h.t_ns.size(); ++i) {
    if (h.session_bar[i] > 32 || (h.flags[i] & kFlagGap)) continue;
    ++eligible;
    if (h.r[i] < -h.var_risk_next[0][i - 1]) ++exc;
  }
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  CHECK(Contains(*page, "By time of day (390 bars a session in 12 segments"));
  // Only the symbol with bar-of-session indices gets the table.
  size_t n_tables = 0;
  for (size_t at = page->find("By time of day"); at != std::string::npos;
       at = page->find("By time of day", at + 1)) {
    ++n_tables;
  }
  CHECK(n_tables == 1);
  char want[64];
  std::snprintf(want, sizeof(want), "<td class=\"num\">%d (%.1f)</td>", exc,
                (1.0 - 0.99) * eligible);
  INFO(want);
  const size_t row = page->find("<td>0&ndash;32</td>");
  REQUIRE(row != std::string::npos);
  INFO(page->substr(row, page->find("</tr>", row) - row));
  CHECK(page->find(want, row) < page->find("</tr>", row));
  CHECK(page->find("</span>2</td>", row) < page->find("</tr>", row));  // mean s^2 of bars 0-32
  CHECK(Contains(page->substr(row, page->find("</tr>", row) - row), "width:60.0px"));
}

TEST_CASE("the charts answer the desk's questions: losses, calibration, swaps, time of day",
          "[report]") {
  ReportInput in = FixtureReport(3000);
  SymbolHistory& h = in.symbols[0];
  for (size_t i = 0; i < h.t_ns.size(); ++i) h.session_bar.push_back(static_cast<int32_t>(i % 390));
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  const std::string& html = *page;
  // No return band, no QQ/density pair.
  CHECK_FALSE(Contains(html, "band_sigmas"));
  CHECK_FALSE(Contains(html, "\"qq\""));
  CHECK_FALSE(Contains(html, "\u00b1 ' + sig"));
  // The drawing code for each chart is in the page.
  CHECK(Contains(html, "function lossChart("));
  CHECK(Contains(html, "function pitChart("));
  CHECK(Contains(html, "function todChart("));
  CHECK(Contains(html, "function swapClusters("));
  // 3 x (losses, volatility, PIT, parameters) + one time-of-day chart.
  CHECK(Contains(html, "data-charts-expected=\"13\""));
  // The PIT figures in the page are EvaluateSymbol's, to the digits shown.
  auto ev = EvaluateSymbol(h, in.options.evaluation);
  REQUIRE(ev.ok());
  char line[256];
  std::snprintf(line, sizeof(line),
                "chi-square %.4g on %d df, p = %.3g; Kolmogorov-Smirnov D = %.4g, p = %.3g",
                ev->pit.chi2, ev->pit.chi2_dof, ev->pit.chi2_p, ev->pit.ks_d, ev->pit.ks_p);
  INFO(line);
  CHECK(Contains(html, line));
  std::string counts = "\"counts\":[";
  for (size_t k = 0; k < ev->pit.counts.size(); ++k) {
    counts += (k ? "," : "") + std::to_string(ev->pit.counts[k]);
  }
  CHECK(Contains(html, counts + "]"));
  // Exceptions drawn on the loss chart: the backtest's count at 99 %.
  CHECK(Contains(html, "\"n_exc\":" + std::to_string(ev->levels[0].tests.exceptions)));
  // The time-of-day data: 12 segments, the first one's exceptions as counted.
  REQUIRE(ev->time_of_day.segments.size() == 12);
  const auto& g0 = ev->time_of_day.segments[0];
  CHECK(g0.first_bar == 0);
  CHECK(g0.last_bar == 32);
  // JSON keys are sorted; the label is "0" EN DASH "32", escaped as \u2013.
  CHECK(Contains(
      html, "{\"bars\":\"0\\u201332\",\"exceptions\":" + std::to_string(g0.exceptions[0]) + ","));
}

TEST_CASE("intraday bars over 250 trading days: the zone counts days and says so", "[report]") {
  // 6,500 bars, 25 a day: 260 trading days.
  ReportInput in = FixtureReport(6500);
  const int64_t day = 86400LL * 1000000000LL, minute = 60LL * 1000000000LL;
  for (auto& h : in.symbols) {
    const int64_t t0 = h.t_ns.front() / day * day;
    for (size_t i = 0; i < h.t_ns.size(); ++i) {
      h.t_ns[i] =
          t0 + static_cast<int64_t>(i / 25) * day + static_cast<int64_t>(i % 25 + 1) * minute;
    }
    for (auto& s : h.swaps) s.t_ns = h.t_ns[h.t_ns.size() / 2];
    for (auto& a : h.alerts) a.t_ns = h.t_ns.back();
    for (auto& g : h.regimes) g = {h.t_ns[3000], h.t_ns[3500], +1};
  }
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  auto ev = EvaluateSymbol(in.symbols[0], in.options.evaluation);
  REQUIRE(ev.ok());
  const TrafficLight& tl = ev->levels[0].traffic_light;
  REQUIRE(tl.basis == ZoneBasis::kTradingDays);
  CHECK(tl.window_days == 250);
  CHECK(tl.window == 250 * 25);
  const std::string want = std::to_string(tl.window_exceptions) +
                           " in the last 250 trading days (6250 bars); yellow from " +
                           std::to_string(tl.yellow_from) + ", red from " +
                           std::to_string(tl.red_from);
  INFO(want);
  CHECK(Contains(*page, want));
  CHECK(tl.yellow_from > 5);  // scaled to 6,250 bars, not the 250-bar bounds
}

TEST_CASE("a tracked symbol shows its tracked parameters beside the refit model's",
          "[report][tracking]") {
  ReportInput in = FixtureReport(1500);
  TrackedParameters t;
  t.mode = "drive";
  t.variance = "GJR-GARCH(1,1)";
  t.names = {"omega", "alpha_1", "gamma_1", "beta_1"};
  t.values = {1.65e-3, 0.035, 0.07, 0.905};
  t.refit = {1.5e-3, 0.03, 0.08, 0.9};
  t.persistence = 0.035 + 0.035 + 0.905;
  t.refit_persistence = 0.97;
  t.level_ratio = 1.1;
  t.instability = 12.5;
  t.bars_since_refit = 340;
  t.stepping = true;
  t.resets = 1;
  t.instability_alerts = 2;
  in.symbols[2].tracking = t;
  auto page = RenderHtmlReport(in);
  REQUIRE(page.ok());
  const std::string& html = *page;
  // Only the tracked symbol (HARRIER-9, the third section) has the table.
  const size_t table = html.find(
      "Parameter tracking (drive, GJR-GARCH(1,1)): 340 bars since the "
      "refit; instability 12.5, 2 instability alerts, 1 reset");
  REQUIRE(table != std::string::npos);
  CHECK(html.find("Parameter tracking", table + 1) == std::string::npos);
  CHECK(html.rfind("id=\"sym-2\"", table) > html.rfind("id=\"sym-1\"", table));
  const std::string body = html.substr(table, html.find("</table>", table) - table);
  INFO(body);
  // One row per coefficient: refit (in force), tracked, drift, drift %.
  CHECK(Contains(body,
                 "<td>omega</td><td class=\"num\">0.0015</td><td class=\"num\">0.00165</td>"
                 "<td class=\"num\">+0.00015</td><td class=\"num\">+10.0</td>"));
  CHECK(Contains(body,
                 "<td>gamma_1</td><td class=\"num\">0.08</td><td class=\"num\">0.07</td>"
                 "<td class=\"num\">-0.01</td><td class=\"num\">-12.5</td>"));
  CHECK(Contains(body, "<td>alpha_1</td>"));
  CHECK(Contains(body, "<td>beta_1</td><td class=\"num\">0.9</td><td class=\"num\">0.905</td>"));
  CHECK(Contains(body,
                 "<td>persistence</td><td class=\"num\">0.97</td><td class=\"num\">0.975</td>"));
  CHECK(Contains(body, "<td>level</td><td class=\"num\">1</td><td class=\"num\">1.1</td>"));

  // Untracked: no table at all.
  in.symbols[2].tracking.reset();
  auto plain = RenderHtmlReport(in);
  REQUIRE(plain.ok());
  CHECK_FALSE(Contains(*plain, "Parameter tracking"));
}

}  // namespace
}  // namespace aftershock
