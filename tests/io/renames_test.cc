#include "aftershock/renames.h"

#include <catch2/catch.hpp>
#include <fstream>
#include <set>
#include <sstream>
#include <string>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

std::string ReadChangeLog() {
  std::ifstream in(std::string(AFTERSHOCK_SOURCE_DIR) + "/CHANGELOG.md");
  REQUIRE(in);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

const char* KindWord(RenameKind k) {
  switch (k) {
    case RenameKind::kOption:
      return "command-line option";
    case RenameKind::kConfigKey:
      return "configuration key";
    case RenameKind::kValue:
      return "option value";
    case RenameKind::kParameter:
      return "model parameter";
    case RenameKind::kJsonKey:
      return "JSON key";
    case RenameKind::kLabel:
      return "model label";
  }
  return "?";
}

TEST_CASE("CHANGELOG.md lists exactly the retired names of the code", "[renames]") {
  const std::string log = ReadChangeLog();
  std::set<std::string> rows;
  for (const RetiredName& r : RetiredNames()) {
    const std::string row =
        absl::StrCat("| ", KindWord(r.kind), " | ", r.where.empty() ? "any" : r.where, " | `",
                     r.old_name, "` | `", r.new_name, "` |");
    INFO(row);
    CHECK(log.find(row + "\n") != std::string::npos);
    CHECK(rows.insert(row).second);  // no duplicates
  }
  // And no row in the change log's table that the code does not know.
  std::istringstream in(log);
  std::string line;
  int table_rows = 0;
  while (std::getline(in, line)) {
    if (line.rfind("| ", 0) == 0 && line.find("` | `") != std::string::npos) {
      ++table_rows;
      INFO(line);
      CHECK(rows.count(line) == 1);
    }
  }
  CHECK(table_rows == static_cast<int>(rows.size()));
}

TEST_CASE("RenameHint names the replacement of a retired name only", "[renames]") {
  CHECK(RenameHint(RenameKind::kOption, "", "--variance-order") ==
        "'--variance-order' was renamed: use --shock-lags, --asym-lags, --variance-lags "
        "(CHANGELOG.md)");
  CHECK(RenameHint(RenameKind::kConfigKey, "[model]", "variance_order") ==
        "'variance_order' was renamed: use shock_lags, asym_lags, variance_lags (CHANGELOG.md)");
  // The key is retired in [model] only.
  CHECK(RenameHint(RenameKind::kConfigKey, "[alerts]", "variance_order").empty());
  CHECK(RenameHint(RenameKind::kValue, "innovations", "t") ==
        "'t' was renamed: use student (CHANGELOG.md)");
  // "constant" is retired as a variance, not as a mean.
  CHECK(RenameHint(RenameKind::kValue, "variance", "constant") ==
        "'constant' was renamed: use flat (CHANGELOG.md)");
  CHECK(RenameHint(RenameKind::kValue, "mean", "constant").empty());
  // Parameters by pattern, any index.
  CHECK(RenameHint(RenameKind::kParameter, "", "alpha12") ==
        "'alpha12' was renamed: use alpha_12 (CHANGELOG.md)");
  CHECK(RenameHint(RenameKind::kParameter, "", "ar3") ==
        "'ar3' was renamed: use ar_3 (CHANGELOG.md)");
  for (const char* fine : {"alpha_1", "alpha", "mu", "nu", "omega", "lambda", "mar1", "beta1x"}) {
    INFO(fine);
    CHECK(RenameHint(RenameKind::kParameter, "", fine).empty());
  }
  CHECK(RenameHint(RenameKind::kJsonKey, "update", "var_risk") ==
        "'var_risk' was renamed: use value_at_risk (CHANGELOG.md)");
  CHECK(RenameHint(RenameKind::kOption, "", "--shock-lags").empty());
}

}  // namespace
}  // namespace aftershock
