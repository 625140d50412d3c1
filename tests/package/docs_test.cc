// The documentation's structure and cross-references: the contributor guide
// keeps the sections a contributor needs, every reference to a section of
// README.md or DEVELOPERS.md (`DEVELOPERS.md "Filter state layout"`,
// `README, "Checkpoints"`) from any document or source names one that exists,
// and the dependency table lists every package tools/dev installs.
//
// Why: a large edit once dropped eight sections of DEVELOPERS.md (among them
// "How to add a model" and the dependency table) while headers and the README
// still pointed at them, and nothing noticed.
#include <algorithm>
#include <catch2/catch.hpp>
#include <cctype>
#include <filesystem>
#include <regex>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "support/test_support.h"

namespace aftershock {
namespace {

namespace fs = std::filesystem;

std::string Source(const std::string& rel) {
  return std::string(AFTERSHOCK_SOURCE_DIR) + "/" + rel;
}

std::string Lower(std::string s) {
  std::transform(s.begin(), s.end(), s.begin(),
                 [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  return s;
}

std::string WithoutBackticks(std::string s) {
  s.erase(std::remove(s.begin(), s.end(), '`'), s.end());
  return s;
}

// What a reference may name in a document, lower case without backticks: its
// markdown headings and its bold run-in headings ("**The traffic-light zone.**"
// at the start of a line).
std::vector<std::string> Anchors(const std::string& text, bool with_run_ins) {
  std::vector<std::string> anchors;
  std::istringstream in(text);
  std::string line;
  bool fenced = false;
  static const std::regex kHeading(R"(^#{1,6}\s+(.+?)\s*$)");
  static const std::regex kRunIn(R"(^\*\*([^*]+?)\.?\*\*)");
  std::smatch m;
  while (std::getline(in, line)) {
    if (line.rfind("```", 0) == 0) fenced = !fenced;
    if (fenced) continue;
    if (std::regex_search(line, m, kHeading)) {
      anchors.push_back(Lower(WithoutBackticks(m[1].str())));
    } else if (with_run_ins && std::regex_search(line, m, kRunIn)) {
      anchors.push_back(Lower(WithoutBackticks(m[1].str())));
    }
  }
  return anchors;
}

// A reference resolves when an anchor starts with its text ("Scale-out" names
// "Scale-out on NATS JetStream").
bool Resolves(const std::vector<std::string>& anchors, const std::string& ref) {
  const std::string r = Lower(WithoutBackticks(ref));
  return std::any_of(anchors.begin(), anchors.end(),
                     [&](const std::string& a) { return a.rfind(r, 0) == 0; });
}

// The repository's documents and sources that may carry references.
std::vector<fs::path> ReferencingFiles() {
  std::vector<fs::path> files;
  for (const char* top : {"README.md", "DEVELOPERS.md", "CHANGELOG.md", "CMakeLists.txt"}) {
    files.push_back(Source(top));
  }
  const std::set<std::string> kExt = {".h", ".cc", ".py", ".md", ".txt", ".cmake", ".toml", ".sh"};
  for (const char* dir : {"include", "src", "tests", "bench", "tools", "config", "fuzz"}) {
    const fs::path root = Source(dir);
    if (!fs::exists(root)) continue;
    for (const auto& e : fs::recursive_directory_iterator(root)) {
      if (!e.is_regular_file()) continue;
      const fs::path& p = e.path();
      if (kExt.count(p.extension().string()) || p.filename() == "dev") files.push_back(p);
    }
  }
  return files;
}

TEST_CASE("the contributor guide keeps the sections a contributor needs", "[docs]") {
  const auto anchors = Anchors(testing::ReadFileOrDie(Source("DEVELOPERS.md")), false);
  for (const char* section :
       {"Build and test", "Layout", "How the pieces fit", "Conventions", "Dependencies",
        "How to add a model", "Renaming a user-visible name", "Benchmarks", "Fuzzers"}) {
    INFO("DEVELOPERS.md section " << section);
    CHECK(Resolves(anchors, section));
  }
}

TEST_CASE("every reference to a section of README.md or DEVELOPERS.md names one that exists",
          "[docs]") {
  const auto readme = Anchors(testing::ReadFileOrDie(Source("README.md")), true);
  const auto developers = Anchors(testing::ReadFileOrDie(Source("DEVELOPERS.md")), true);
  // `DEVELOPERS.md "X"`, `DEVELOPERS.md, "X"`, `DEVELOPERS.md ("X"`, and the
  // same with README; the quoted name may start on the next line.
  const std::regex kRef(R"re(\b(README|DEVELOPERS)(?:\.md)?,?\s+\(?"([^"\n]{2,80})")re");
  int found = 0;
  for (const fs::path& p : ReferencingFiles()) {
    if (p.filename() == "docs_test.cc") continue;  // this file's examples
    const std::string text = testing::ReadFileOrDie(p.string());
    for (std::sregex_iterator it(text.begin(), text.end(), kRef), end; it != end; ++it) {
      const std::string doc = (*it)[1].str();
      const std::string name = (*it)[2].str();
      ++found;
      INFO(p.string() << ": " << doc << " \"" << name << "\"");
      CHECK(Resolves(doc == "README" ? readme : developers, name));
    }
  }
  // The pattern still finds the references (dozens at the time of writing).
  CHECK(found >= 30);
}

TEST_CASE("the dependency table lists every package tools/dev installs", "[docs]") {
  const std::string dev = testing::ReadFileOrDie(Source("tools/dev"));
  const std::string guide = testing::ReadFileOrDie(Source("DEVELOPERS.md"));
  const size_t table = guide.find("## Dependencies");
  REQUIRE(table != std::string::npos);
  const size_t table_end = guide.find("\n## ", table + 1);
  const std::string deps = guide.substr(table, table_end - table);
  int packages = 0;
  for (const char* list : {"\npackages=(", "\noptional_packages=("}) {
    const size_t open = dev.find(list);
    INFO("tools/dev " << list + 1);
    REQUIRE(open != std::string::npos);
    const size_t close = dev.find(')', open);
    std::istringstream names(
        dev.substr(open + std::string(list).size(), close - open - std::string(list).size()));
    std::string name;
    while (names >> name) {
      // Tools the build runs rather than libraries it uses.
      static const std::set<std::string> kToolchain = {"build-essential", "cmake", "ninja-build",
                                                       "pkg-config", "python3"};
      if (kToolchain.count(name)) continue;
      ++packages;
      INFO("package " << name);
      CHECK(deps.find("`" + name + "`") != std::string::npos);
    }
  }
  CHECK(packages >= 15);
}

}  // namespace
}  // namespace aftershock
