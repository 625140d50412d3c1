// Loads a generated report in headless Chromium (Debian package `chromium`)
// and checks that the page's own script drew every chart without an error.
// Skipped, with a message, when /usr/bin/chromium is absent.
#include <unistd.h>

#include <algorithm>
#include <catch2/catch.hpp>
#include <filesystem>
#include <regex>
#include <sstream>
#include <string>

#include "aftershock/html_report.h"
#include "app/report_fixture.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

namespace fs = std::filesystem;
using testing::CommandResult;
using testing::RunCommand;

constexpr char kChromium[] = "/usr/bin/chromium";
constexpr char kTimeout[] = "/usr/bin/timeout";

// One headless run with a fresh profile; a hung browser is killed after 90 s.
CommandResult Chromium(const std::string& scratch, const std::string& profile,
                       std::vector<std::string> extra, const std::string& url) {
  std::vector<std::string> argv = {kTimeout,
                                   "-k",
                                   "5",
                                   "90",
                                   kChromium,
                                   "--headless",
                                   "--no-sandbox",
                                   "--disable-gpu",
                                   "--disable-dev-shm-usage",
                                   "--disable-quic",
                                   "--no-first-run",
                                   "--disable-background-networking",
                                   "--disable-component-update",
                                   "--disable-sync",
                                   "--disable-extensions",
                                   "--hide-scrollbars",
                                   "--user-data-dir=" + scratch + "/" + profile,
                                   "--enable-logging=stderr",
                                   "--v=0",
                                   "--virtual-time-budget=5000"};
  for (auto& e : extra) argv.push_back(std::move(e));
  argv.push_back(url);
  return RunCommand(argv);
}

std::string Attr(const std::string& tag, const std::string& name) {
  std::smatch m;
  const std::regex re(name + "=\"([^\"]*)\"");
  return std::regex_search(tag, m, re) ? m[1].str() : std::string("<missing>");
}

TEST_CASE("the report renders in headless Chromium without errors", "[report][browser]") {
  if (access(kChromium, X_OK) != 0) {
    WARN("SKIPPED: " << kChromium
                     << " not found; install the Debian package 'chromium' "
                        "(tools/dev lists it among the optional installs) to run this check");
    return;
  }
  const std::string dir = testing::ScratchDir("report_browser");
  ReportInput in = testing::FixtureReport(6000);
  // Crowded model swaps on the first symbol: 40 on consecutive bars (a few
  // pixels in all) and 15 every 60 bars (about 12 pixels apart): the marks
  // must be merged or staggered so that no label is drawn over another.
  {
    SymbolHistory& h = in.symbols[0];
    ModelSwapRecord base = h.swaps.front();
    uint32_t version = 10;
    for (int k = 0; k < 40; ++k) {
      base.t_ns = h.t_ns[3000 + k];
      base.accepted = k % 5 != 4;
      base.version = base.accepted ? version++ : 0;
      h.swaps.push_back(base);
    }
    for (int k = 0; k < 15; ++k) {
      base.t_ns = h.t_ns[4000 + 60 * k];
      base.accepted = true;
      base.version = version++;
      h.swaps.push_back(base);
    }
    std::stable_sort(h.swaps.begin(), h.swaps.end(),
                     [](const auto& a, const auto& b) { return a.t_ns < b.t_ns; });
  }
  // Bar-of-session indices on the second symbol: its time-of-day chart.
  for (size_t i = 0; i < in.symbols[1].t_ns.size(); ++i) {
    in.symbols[1].session_bar.push_back(static_cast<int32_t>(i % 390));
  }
  const std::string page = dir + "/report.html";
  REQUIRE(WriteHtmlReport(in, page).ok());
  const std::string url = "file://" + page;
  // Expected charts, counted here from the input: losses, volatility and PIT
  // per symbol, a time-of-day chart for each symbol with bar-of-session
  // indices, and a parameter history for each symbol with at least two
  // accepted refits.
  int expected = 0;
  for (const auto& s : in.symbols) {
    int accepted = 0;
    for (const auto& w : s.swaps) accepted += w.accepted ? 1 : 0;
    expected += 3 + (s.session_bar.empty() ? 0 : 1) + (accepted >= 2 ? 1 : 0);
  }
  REQUIRE(expected == 3 * 4 + 1);

  const CommandResult dom = Chromium(dir, "profile-dom", {"--dump-dom"}, url);
  INFO("chromium stderr (tail): " << dom.err.substr(dom.err.size() > 3000 ? dom.err.size() - 3000
                                                                          : 0));
  REQUIRE(dom.exit_code == 0);
  const size_t at = dom.out.find("id=\"report-status\"");
  REQUIRE(at != std::string::npos);
  const size_t open = dom.out.rfind('<', at);
  const size_t close = dom.out.find("</div>", at);
  const std::string tag = dom.out.substr(open, close - open);
  INFO("status element: " << tag);
  CHECK(Attr(tag, "data-errors") == "0");
  CHECK(Attr(tag, "data-charts-expected") == std::to_string(expected));
  CHECK(Attr(tag, "data-charts-rendered") == std::to_string(expected));
  // The drawn DOM holds the SVG elements: one per chart and one per extra
  // parameter panel (a parameter history draws a panel per parameter).
  size_t svgs = 0;
  for (size_t p = dom.out.find("<svg"); p != std::string::npos; p = dom.out.find("<svg", p + 4)) {
    ++svgs;
  }
  CHECK(svgs >= static_cast<size_t>(expected));
  // The console hook must not have seen anything either (the messages land in
  // the status element's text).
  CHECK(tag.find("console.error") == std::string::npos);
  // Independently of the page's hooks, Chromium logs every console message
  // (any level, uncaught exceptions included) to stderr as "...:CONSOLE...";
  // the report writes none.
  std::vector<std::string> console_lines;
  for (size_t p = dom.err.find(":CONSOLE"); p != std::string::npos;
       p = dom.err.find(":CONSOLE", p + 1)) {
    const size_t b = dom.err.rfind('\n', p);
    const size_t e = dom.err.find('\n', p);
    console_lines.push_back(dom.err.substr(b == std::string::npos ? 0 : b + 1, e - b));
  }
  for (const auto& l : console_lines) UNSCOPED_INFO(l);
  CHECK(console_lines.empty());

  // A copy of the page with two injected scripts: a click on the QLIKE header
  // (the overview's eleventh column), after which the symbols must be listed by
  // ascending QLIKE, and a deliberate error, which the page's hooks must count
  // (so data-errors = 0 above is a check that can fail).
  {
    std::string html = testing::ReadFileOrDie(page);
    const size_t end = html.rfind("</body>");
    REQUIRE(end != std::string::npos);
    html.insert(
        end,
        "<script>document.querySelectorAll('#overview th')[10].click();</script>"
        // Laid-out geometry: swap labels that intersect, swap lines
        // closer than a pixel, and where the overview ends.
        "<script>(function () {"
        "  var L = document.querySelectorAll('text.swap-label'), B = [], o = 0, m = 0, n = 0;"
        "  L.forEach(function (t) { var b = t.getBBox(); B.push([t.ownerSVGElement, b.x, b.x + "
        "b.width, b.y, b.y + b.height]); });"
        "  for (var i = 0; i < B.length; ++i) for (var j = i + 1; j < B.length; ++j)"
        "    if (B[i][0] === B[j][0] && B[i][1] < B[j][2] && B[j][1] < B[i][2] && B[i][3] < "
        "B[j][4] && B[j][3] < B[i][4]) ++o;"
        "  var G = document.querySelectorAll('g.swap-mark'), X = [];"
        "  G.forEach(function (g) { n += +g.getAttribute('data-marks'); var l = "
        "g.querySelector('line'); X.push([g.ownerSVGElement, +l.getAttribute('x1')]); });"
        "  for (var a = 0; a < X.length; ++a) for (var c = a + 1; c < X.length; ++c)"
        "    if (X[a][0] === X[c][0] && Math.abs(X[a][1] - X[c][1]) < 1) ++m;"
        "  var r = document.getElementById('overview').getBoundingClientRect();"
        "  document.body.setAttribute('data-geometry', [L.length, o, G.length, m, n, "
        "Math.round(r.top + window.scrollY), Math.round(r.bottom + window.scrollY)].join(' '));"
        "})();</script>"
        "<script>deliberatelyMissingFunction();</script>");
    const std::string sorted_page = testing::WriteFile(dir + "/sorted.html", html);
    const CommandResult sorted = Chromium(
        dir, "profile-sort", {"--window-size=1400,3000", "--dump-dom"}, "file://" + sorted_page);
    REQUIRE(sorted.exit_code == 0);
    {
      const std::string geo = Attr(sorted.out.substr(sorted.out.find("<body")), "data-geometry");
      INFO(
          "geometry: labels, label overlaps, marks, mark overlaps, swaps drawn, overview top "
          "and bottom: "
          << geo);
      std::istringstream g(geo);
      int labels = -1, overlaps = -1, marks = -1, mark_overlaps = -1, swaps = -1, top = -1,
          bottom = -1;
      g >> labels >> overlaps >> marks >> mark_overlaps >> swaps >> top >> bottom;
      size_t all_swaps = 0;
      for (const auto& s : in.symbols) all_swaps += s.swaps.size();
      CHECK(swaps == static_cast<int>(all_swaps));  // every swap is in some mark
      CHECK(marks < swaps);                         // the crowded ones were merged
      CHECK(labels == marks);
      CHECK(overlaps == 0);
      CHECK(mark_overlaps == 0);
      // The screenshot (1400 x 3000) shows the whole overview.
      CHECK(top > 0);
      CHECK(bottom < 3000);
    }
    const size_t st = sorted.out.find("id=\"report-status\"");
    REQUIRE(st != std::string::npos);
    const size_t st_open = sorted.out.rfind('<', st);
    const std::string status = sorted.out.substr(st_open, sorted.out.find("</div>", st) - st_open);
    INFO("status element: " << status);
    CHECK(Attr(status, "data-errors") == "1");
    CHECK(status.find("deliberatelyMissingFunction") != std::string::npos);
    std::vector<std::pair<double, std::string>> by_qlike;
    for (size_t i = 0; i < in.symbols.size(); ++i) {
      auto ev = EvaluateSymbol(in.symbols[i], in.options.evaluation);
      REQUIRE(ev.ok());
      by_qlike.emplace_back(ev->vs_r2.qlike, "href=\"#sym-" + std::to_string(i) + "\"");
    }
    std::sort(by_qlike.begin(), by_qlike.end());
    const size_t table = sorted.out.find("id=\"overview\"");
    REQUIRE(table != std::string::npos);
    size_t prev = table;
    for (const auto& [q, anchor] : by_qlike) {
      INFO("QLIKE " << q << " " << anchor);
      const size_t pos = sorted.out.find(anchor, table);
      REQUIRE(pos != std::string::npos);
      CHECK(pos > prev);
      prev = pos;
    }
    // The page's own order (worst first) differs, so the check can fail.
    const std::string original = testing::ReadFileOrDie(page);
    const size_t orig_table = original.find("id=\"overview\"");
    REQUIRE(orig_table != std::string::npos);
    std::vector<std::pair<size_t, std::string>> initial;
    for (const auto& [q, anchor] : by_qlike) {
      initial.emplace_back(original.find(anchor, orig_table), anchor);
    }
    std::sort(initial.begin(), initial.end());
    bool same_order = true;
    for (size_t i = 0; i < by_qlike.size(); ++i) {
      same_order = same_order && by_qlike[i].second == initial[i].second;
    }
    CHECK_FALSE(same_order);
  }

  const std::string png = dir + "/report.png";
  const CommandResult shot =
      Chromium(dir, "profile-shot", {"--window-size=1400,3000", "--screenshot=" + png}, url);
  INFO("chromium stderr (tail): " << shot.err.substr(shot.err.size() > 3000 ? shot.err.size() - 3000
                                                                            : 0));
  REQUIRE(shot.exit_code == 0);
  REQUIRE(fs::exists(png));
  const auto size = fs::file_size(png);
  WARN("screenshot " << png << ": " << size << " bytes");
  // A blank 1400x3000 page compresses to a few kB; drawn charts and tables to far more.
  CHECK(size > 100 * 1024);
  const std::string head = testing::ReadFileOrDie(png).substr(0, 8);
  CHECK(head == std::string("\x89PNG\r\n\x1a\n", 8));
}

}  // namespace
}  // namespace aftershock
