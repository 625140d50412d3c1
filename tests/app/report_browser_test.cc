// Loads a generated report in headless Chromium (Debian package `chromium`)
// and checks that the page's own script drew every chart without an error.
// Skipped, with a message, when /usr/bin/chromium is absent.
#include <unistd.h>

#include <algorithm>
#include <catch2/catch.hpp>
#include <filesystem>
#include <regex>
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
  const ReportInput in = testing::FixtureReport(6000);
  const std::string page = dir + "/report.html";
  REQUIRE(WriteHtmlReport(in, page).ok());
  const std::string url = "file://" + page;
  // Expected charts, counted here from the input: returns, volatility, QQ and
  // histogram per symbol, plus a parameter history for each symbol with at
  // least two accepted refits.
  int expected = 0;
  for (const auto& s : in.symbols) {
    int accepted = 0;
    for (const auto& w : s.swaps) accepted += w.accepted ? 1 : 0;
    expected += 4 + (accepted >= 2 ? 1 : 0);
  }

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
    html.insert(end,
                "<script>document.querySelectorAll('#overview th')[10].click();</script>"
                "<script>deliberatelyMissingFunction();</script>");
    const std::string sorted_page = testing::WriteFile(dir + "/sorted.html", html);
    const CommandResult sorted =
        Chromium(dir, "profile-sort", {"--dump-dom"}, "file://" + sorted_page);
    REQUIRE(sorted.exit_code == 0);
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
