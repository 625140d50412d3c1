// The replay report (PRODUCT.md C8): one self-contained HTML file with the
// evaluation tables and charts of every symbol of a replay.
//
// The file needs nothing but a browser: CSS and script are inline, the charts
// are inline SVG drawn by the page's own script from JSON embedded in the page
// (no network fetch, no external asset). Series are downsampled for drawing
// only (min and max per bucket, so spikes survive; at most
// ReportOptions::max_points points per series); every statistic is computed on
// all bars by EvaluateSymbol (aftershock/evaluation.h). Every string from the
// input (symbols, messages, file names) is escaped for HTML and for the
// embedded JSON.
//
// The page reports on itself for automated checks: the element #report-status
// carries data-errors (script errors and console.error calls seen, counted by
// hooks installed before any chart code), data-charts-rendered and
// data-charts-expected.
//
// Thread-safety: pure functions; safe to call concurrently.
#ifndef AFTERSHOCK_HTML_REPORT_H_
#define AFTERSHOCK_HTML_REPORT_H_

#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/evaluation.h"

namespace aftershock {

// Run information shown in the report header. Empty fields are left out.
struct ReportRunInfo {
  std::string title = "Replay evaluation";  // page title and main heading
  std::string input_file;                   // recorded file replayed
  std::string config_summary;               // free text, may span lines
  std::string generated_at;                 // e.g. "2026-12-02 04:00 UTC"; caller-supplied
                                            // so the output is reproducible
  std::string engine_version;               // e.g. "aftershock 0.1.0"
  double replay_speed = 0;                  // bars per second achieved; 0 = not shown
  std::string bar_interval;                 // e.g. "1m" or "0s (one bar per tick)"
};

struct ReportOptions {
  // Bars per year for annualized volatility (252 for daily bars); 0 shows
  // volatility per bar. Default 0.
  double periods_per_year = 0;
  // Most points drawn per series (>= 100). Default 2000.
  int max_points = 2000;
  // Level of the VaR limit drawn against the losses, of the overview's
  // exception column and of the time-of-day exceptions; must be one of the
  // histories' risk levels to be drawn. Default 0.99.
  double var_level = 0.99;
  // Passed to EvaluateSymbol.
  EvaluationOptions evaluation;
};

struct ReportInput {
  ReportRunInfo run;
  std::vector<SymbolHistory> symbols;
  ReportOptions options;
};

// The whole page. A symbol whose evaluation fails is listed with the error
// message and drawn without charts; InvalidArgument only when there are no
// symbols or the options are out of range.
absl::StatusOr<std::string> RenderHtmlReport(const ReportInput& input);

// RenderHtmlReport written to `path` (through a temporary file and a rename).
// Internal error naming the path when the file cannot be written.
absl::Status WriteHtmlReport(const ReportInput& input, const std::string& path);

// Text escaped for HTML element content and quoted attribute values (& < > " ').
std::string HtmlEscape(const std::string& text);

}  // namespace aftershock

#endif  // AFTERSHOCK_HTML_REPORT_H_
