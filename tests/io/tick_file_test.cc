#include "aftershock/tick_file.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "support/test_support.h"

namespace aftershock {
namespace {

std::vector<Tick> ReadAll(TickFileReader* r) {
  std::vector<Tick> out;
  Tick t;
  while (r->Next(&t)) out.push_back(t);
  return out;
}

TEST_CASE("ISO-8601 and integer times", "[tick_file]") {
  // Reference: Python datetime(2026,3,2,9,30,tzinfo=timezone.utc).timestamp() = 1772443800.
  CHECK(*ParseTickTime("2026-03-02T09:30:00Z") == 1772443800LL * 1000000000);
  CHECK(*ParseTickTime("2026-03-02 09:30:00Z") == 1772443800LL * 1000000000);
  CHECK(*ParseTickTime("2026-03-02T09:30:00.5Z") == 1772443800LL * 1000000000 + 500000000);
  CHECK(*ParseTickTime("2026-03-02T09:30:00.000000001Z") == 1772443800LL * 1000000000 + 1);
  CHECK(*ParseTickTime("2026-03-02T10:30:00+01:00") == 1772443800LL * 1000000000);
  CHECK(*ParseTickTime("2026-03-02T04:00:00-05:30") == 1772443800LL * 1000000000);
  CHECK(*ParseTickTime("1970-01-01T00:00:00Z") == 0);
  // 2024 is a leap year: Python datetime(2024,2,29,tzinfo=utc).timestamp() = 1709164800.
  CHECK(*ParseTickTime("2024-02-29T00:00:00Z") == 1709164800LL * 1000000000);
  CHECK(*ParseTickTime("1772443800000000123") == 1772443800000000123);
  for (const char* bad :
       {"2026-13-40", "2026-02-29T00:00:00Z", "2026-03-02T24:00:00Z", "2026-03-02T09:30:00",
        "2026-03-02T09:30:00.Z", "2026-03-02T09:30:00.1234567891Z", "2026-03-02T09:30:00+1:00",
        "1969-12-31T23:59:59Z", "-5", "", "12x", "99999999999999999999", "2026-03-02T09:30:60Z",
        "2026-03-02T09:30:00Zjunk"}) {
    auto t = ParseTickTime(bad);
    INFO(bad);
    REQUIRE_FALSE(t.ok());
    CHECK(std::string(t.status().message()) == std::string("cannot parse '") + bad + "'");
  }
}

TEST_CASE("price files with comments, CRLF and spaces", "[tick_file]") {
  auto r = TickFileReader::FromString(
      "# recorded by the simulator\nsymbol,time,price\r\n"
      "ALDER.X,2026-03-02T09:30:00Z,101.25\r\n\n"
      " BIRCH.Y , 1772443800000000001 , 5e-3 \n",
      "ticks.csv");
  REQUIRE(r.ok());
  CHECK((*r)->kind() == Tick::kPrice);
  CHECK_FALSE((*r)->has_rv());
  const auto ticks = ReadAll(r->get());
  CHECK((*r)->status().ok());
  REQUIRE(ticks.size() == 2);
  CHECK(ticks[0].symbol.view() == "ALDER.X");
  CHECK(ticks[0].t_ns == 1772443800LL * 1000000000);
  CHECK(ticks[0].value == 101.25);
  CHECK(std::isnan(ticks[0].rv));
  CHECK(ticks[1].symbol.view() == "BIRCH.Y");
  CHECK(ticks[1].value == 5e-3);
  CHECK((*r)->good_lines() == 2);
  CHECK((*r)->bad_lines() == 0);
}

TEST_CASE("return files with rv, columns in any order", "[tick_file]") {
  auto r = TickFileReader::FromString(
      "time,rv,return,symbol\n"
      "0,0.0001,-0.0025,C1\n"
      "1,,0.5,C1\n",
      "r.csv");
  REQUIRE(r.ok());
  CHECK((*r)->kind() == Tick::kReturn);
  CHECK((*r)->has_rv());
  const auto ticks = ReadAll(r->get());
  REQUIRE(ticks.size() == 2);
  CHECK(ticks[0].kind == Tick::kReturn);
  CHECK(ticks[0].value == -0.0025);
  CHECK(ticks[0].rv == 0.0001);
  CHECK(std::isnan(ticks[1].rv));
}

TEST_CASE("bad lines are counted with line numbers, or stop the read", "[tick_file]") {
  const std::string content =
      "symbol,time,price\n"  // 1
      "A,1,10\n"             // 2
      "A,2026-13-40,10\n"    // 3
      "A B,3,10\n"           // 4
      "A,4,-1\n"             // 5
      "A,5,nan\n"            // 6
      "A,6\n"                // 7
      "A,7,10,9\n"           // 8
      "A,8,11\n";            // 9
  auto r = TickFileReader::FromString(content, "ticks.csv");
  REQUIRE(r.ok());
  const auto ticks = ReadAll(r->get());
  CHECK((*r)->status().ok());
  CHECK(ticks.size() == 2);
  CHECK((*r)->bad_lines() == 6);
  const std::vector<std::string> expected = {
      "ticks.csv:3: time: cannot parse '2026-13-40'",
      "ticks.csv:4: symbol: 'A B' is not 1-32 characters of A-Z a-z 0-9 . _ : -",
      "ticks.csv:5: price: must be > 0, got '-1'",
      "ticks.csv:6: price: expected a finite number, got 'nan'",
      "ticks.csv:7: expected 3 fields, got 2",
      "ticks.csv:8: expected 3 fields, got more"};
  CHECK((*r)->errors() == expected);

  TickFileOptions stop;
  stop.stop_at_first_error = true;
  auto s = TickFileReader::FromString(content, "ticks.csv", stop);
  REQUIRE(s.ok());
  CHECK(ReadAll(s->get()).size() == 1);
  CHECK(std::string((*s)->status().message()) == "ticks.csv:3: time: cannot parse '2026-13-40'");
}

TEST_CASE("a file where nothing parses is an error", "[tick_file]") {
  auto r = TickFileReader::FromString("symbol,time,return\nA,x,1\nA,1,y\n", "bad.csv");
  REQUIRE(r.ok());
  CHECK(ReadAll(r->get()).empty());
  CHECK(std::string((*r)->status().message()) ==
        "bad.csv: no line could be read (2 bad lines); first error: bad.csv:2: time: cannot "
        "parse 'x'");
  // Header only: an empty but valid file.
  auto e = TickFileReader::FromString("symbol,time,return\n", "e.csv");
  REQUIRE(e.ok());
  CHECK(ReadAll(e->get()).empty());
  CHECK((*e)->status().ok());
}

TEST_CASE("header errors", "[tick_file]") {
  auto msg = [](const std::string& content) {
    auto r = TickFileReader::FromString(content, "h.csv");
    return r.ok() ? std::string("ok") : std::string(r.status().message());
  };
  CHECK(msg("") == "h.csv: empty file (expected a header like symbol,time,price)");
  CHECK(msg("symbol,time,px\n") ==
        "h.csv:1: header: unknown column 'px' (expected symbol, time, price or return, rv, size)");
  CHECK(msg("symbol,time,price,return\n") ==
        "h.csv:1: header: needs exactly one of the columns price or return");
  CHECK(msg("symbol,price\n") == "h.csv:1: header: needs a time column");
  CHECK(msg("time,time,price\n") == "h.csv:1: header: column 'time' given twice");
  auto missing = TickFileReader::Open("/nonexistent/ticks.csv");
  CHECK(std::string(missing.status().message()) == "/nonexistent/ticks.csv: cannot open tick file");
}

TEST_CASE("reads a file from disk line by line", "[tick_file]") {
  const std::string dir = testing::ScratchDir("tick_file_test");
  std::string content = "symbol,time,price,size\n";
  for (int i = 0; i < 1000; ++i) {
    content += "ALDER.X," + std::to_string(1000 + i) + "," + std::to_string(100 + i) + ",2\n";
  }
  const std::string path = testing::WriteFile(dir + "/ticks.csv", content);
  auto r = TickFileReader::Open(path);
  REQUIRE(r.ok());
  const auto ticks = ReadAll(r->get());
  REQUIRE(ticks.size() == 1000);
  CHECK(ticks[999].t_ns == 1999);
  CHECK(ticks[999].value == 1099);
  CHECK(ticks[999].size == 2);
  CHECK((*r)->line_number() == 1001);
}

}  // namespace
}  // namespace aftershock
