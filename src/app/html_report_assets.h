// Inline style sheet and scripts of the replay report (html_report.cc).
#ifndef AFTERSHOCK_APP_HTML_REPORT_ASSETS_H_
#define AFTERSHOCK_APP_HTML_REPORT_ASSETS_H_

namespace aftershock {

// The page's style sheet (goes inside <style>).
extern const char kReportCss[];
// Installed first in <head>: counts script errors and console.error calls into
// #report-status[data-errors] so headless checks can read them from the DOM.
extern const char kReportErrorHooks[];
// Draws every chart from #report-data and makes the overview table sortable;
// writes the number of charts drawn into #report-status[data-charts-rendered].
extern const char kReportScript[];

}  // namespace aftershock

#endif  // AFTERSHOCK_APP_HTML_REPORT_ASSETS_H_
