#include "aftershock/tick_file.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "support/test_support.h"

namespace aftershock {
namespace {

// Synthetic files below count time in small numbers of ns, which auto
// detection rightly refuses as dates: they say their unit.
TickFileOptions NanosOptions() {
  TickFileOptions o;
  o.time_unit = TimeUnit::kNanos;
  return o;
}

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
  const std::string content =
      "# recorded by the simulator\nsymbol,time,price\r\n"
      "ALDER.X,2026-03-02T09:30:00Z,101.25\r\n\n"
      " BIRCH.Y , 1772443800000000001 , 5e-3 \n";
  auto r = TickFileReader::FromString(content, "ticks.csv");
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
  // Every byte is counted (the progress of `replay` divides it by the file size).
  CHECK((*r)->bytes_read() == static_cast<int64_t>(content.size()));
}

TEST_CASE("return files with rv, columns in any order", "[tick_file]") {
  auto r = TickFileReader::FromString(
      "time,rv,return,symbol\n"
      "0,0.0001,-0.0025,C1\n"
      "1,,0.5,C1\n",
      "r.csv", NanosOptions());
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
  auto r = TickFileReader::FromString(content, "ticks.csv", NanosOptions());
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

  TickFileOptions stop = NanosOptions();
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
        "h.csv:1: header: needs exactly one of the columns price or return, or the pair bid and "
        "ask");
  CHECK(msg("symbol,time,price,return\n") ==
        "h.csv:1: header: needs exactly one of the columns price or return");
  CHECK(msg("symbol,time,bid\n") == "h.csv:1: header: bid and ask come together");
  CHECK(msg("symbol,time,price,bid,ask\n") ==
        "h.csv:1: header: needs exactly one of the columns price or return, or the pair bid and "
        "ask");
  CHECK(msg("symbol,price\n") == "h.csv:1: header: needs a time column");
  CHECK(msg("time,time,price\n") == "h.csv:1: header: column 'time' given twice");
  auto missing = TickFileReader::Open("/nonexistent/ticks.csv");
  // The OS reason is part of the message.
  CHECK(std::string(missing.status().message()) ==
        "cannot open the tick file '/nonexistent/ticks.csv': No such file or directory");
}

TEST_CASE("reads a file from disk line by line", "[tick_file]") {
  const std::string dir = testing::ScratchDir("tick_file_test");
  std::string content = "symbol,time,price,size\n";
  for (int i = 0; i < 1000; ++i) {
    content += "ALDER.X," + std::to_string(1000 + i) + "," + std::to_string(100 + i) + ",2\n";
  }
  const std::string path = testing::WriteFile(dir + "/ticks.csv", content);
  auto r = TickFileReader::Open(path, NanosOptions());
  REQUIRE(r.ok());
  const auto ticks = ReadAll(r->get());
  REQUIRE(ticks.size() == 1000);
  CHECK(ticks[999].t_ns == 1999);
  CHECK(ticks[999].value == 1099);
  CHECK(ticks[999].size == 2);
  CHECK((*r)->line_number() == 1001);
}

TEST_CASE("numeric times: the unit is read off the magnitude, implausible dates are refused",
          "[tick_file]") {
  // 2026-03-02T09:30:00Z = 1772443800 s (Python datetime ... .timestamp(), as above).
  const int64_t ns = 1772443800LL * 1000000000;
  for (const auto& [text, unit] :
       std::vector<std::pair<std::string, TimeUnit>>{{"1772443800", TimeUnit::kSeconds},
                                                     {"1772443800000", TimeUnit::kMillis},
                                                     {"1772443800000000", TimeUnit::kMicros},
                                                     {"1772443800000000000", TimeUnit::kNanos}}) {
    INFO(text);
    auto u = DetectTimeUnit(text);
    REQUIRE(u.ok());
    CHECK(*u == unit);
    CHECK(*NumericTimeToNs(text, unit) == ns);
  }
  CHECK(*NumericTimeToNs("1772443800.25", TimeUnit::kSeconds) == ns + 250000000);
  CHECK(*NumericTimeToNs("1772443800000.5", TimeUnit::kMillis) == ns + 500000);
  CHECK(*NumericTimeToNs("1772443800.1234567891", TimeUnit::kSeconds) == ns + 123456789);
  CHECK_FALSE(NumericTimeToNs("1.5", TimeUnit::kNanos).ok());
  CHECK_FALSE(NumericTimeToNs("99999999999999999", TimeUnit::kSeconds).ok());
  // Plausible in no unit: 5 (1970 in every unit) and a 10^19-scale number.
  for (const char* bad : {"5", "20000000", "99999999999999999999"}) {
    auto u = DetectTimeUnit(bad);
    INFO(bad);
    REQUIRE_FALSE(u.ok());
    CHECK(std::string(u.status().message()).find("give the unit (--time-unit)") !=
          std::string::npos);
  }
}

TEST_CASE("millisecond ticks are read as milliseconds, not as 1970 nanoseconds",
          "[tick_file]") {
  // 600 ticks over 10 minutes in epoch milliseconds: once misread as ns they
  // all fell into one bar of 1970.
  std::string csv = "symbol,time,price\n";
  for (int i = 0; i < 600; ++i) {
    csv += "ALDER.X," + std::to_string(1772443800000LL + i * 1000LL) + ",100.5\n";
  }
  auto r = TickFileReader::FromString(csv, "ms.csv");
  REQUIRE(r.ok());
  const auto ticks = ReadAll(r->get());
  REQUIRE(ticks.size() == 600);
  CHECK((*r)->time_unit() == TimeUnit::kMillis);
  CHECK(ticks.front().t_ns == 1772443800LL * 1000000000);
  CHECK(ticks.back().t_ns - ticks.front().t_ns == 599LL * 1000000000);
  // A line in another unit than the file's is a bad line naming both.
  auto mixed = TickFileReader::FromString(
      "symbol,time,price\nA,1772443800000,1\nA,1772443801,1\nA,5,1\n", "mixed.csv");
  REQUIRE(mixed.ok());
  CHECK(ReadAll(mixed->get()).size() == 1);
  REQUIRE((*mixed)->errors().size() == 2);
  CHECK((*mixed)->errors()[0] ==
        "mixed.csv:3: time: '1772443801' reads as s but the file's times are in ms");
  CHECK((*mixed)->errors()[1].find("mixed.csv:4: time: '5' is not a date between 1971 and 2200") ==
        0);
}

TEST_CASE("once the unit is known, times near the plausible edges are checked in full",
          "[tick_file]") {
  // Lines after the first skip the unit's detection when they are well inside
  // the plausible dates; at the edges and beyond, the full check decides as
  // before. (The reader's own limit, 2^62 ns, about 2116, comes before 2200.)
  auto r = TickFileReader::FromString(
      "symbol,time,price\n"
      "A,1772443800,1\n"
      "A,31536000,1\n"       // 1971-01-01T00:00:00Z: the first plausible second
      "A,4611686018.25,1\n"  // just below 2^62 ns
      "A,4611686019,1\n"     // beyond it
      "A,7258118400,1\n"     // 2200-01-01: not plausible
      "A,31535999,1\n"       // a second before 1971
      "A,1772443800000,1\n"  // milliseconds in a file of seconds
      "A,1772443801.25,1\n",
      "edges.csv");
  REQUIRE(r.ok());
  const auto ticks = ReadAll(r->get());
  REQUIRE(ticks.size() == 4);
  CHECK((*r)->time_unit() == TimeUnit::kSeconds);
  CHECK(ticks[1].t_ns == 31536000LL * 1000000000);
  CHECK(ticks[2].t_ns == 4611686018LL * 1000000000 + 250000000);
  CHECK(ticks[3].t_ns == 1772443801LL * 1000000000 + 250000000);
  REQUIRE((*r)->errors().size() == 4);
  CHECK((*r)->errors()[0] ==
        "edges.csv:5: time: cannot parse '4611686019' as s since the epoch (out of range)");
  CHECK((*r)->errors()[1].find("edges.csv:6: time: '7258118400' is not a date between 1971") == 0);
  CHECK((*r)->errors()[2].find("edges.csv:7: time: '31535999' is not a date between 1971") == 0);
  CHECK((*r)->errors()[3] ==
        "edges.csv:8: time: '1772443800000' reads as ms but the file's times are in s");
}

TEST_CASE("extra columns are ignored, others mapped, quotes give the mid", "[tick_file]") {
  TickFileOptions o;
  o.column_names = *ParseColumnNames("symbol=ric, time=ts");
  auto r = TickFileReader::FromString(
      "venue,ric,ts,bid,ask,flags\n"
      "XLQ,ALDER.X,2026-03-02 09:30:00Z,99.5,100.5,A\n"
      "XLQ,ALDER.X,2026-03-02 09:30:01Z,100.5,99.5,A\n"
      "XLQ,ALDER.X,2026-03-02 09:30:02Z,0,99.5,A\n",
      "quotes.csv", o);
  REQUIRE(r.ok());
  CHECK((*r)->kind() == Tick::kPrice);
  CHECK((*r)->ignored_columns() == std::vector<std::string>{"venue", "flags"});
  const auto ticks = ReadAll(r->get());
  REQUIRE(ticks.size() == 1);
  CHECK(ticks[0].value == 100.0);
  CHECK(ticks[0].t_ns == 1772443800LL * 1000000000);
  REQUIRE((*r)->errors().size() == 2);
  CHECK((*r)->errors()[0] == "quotes.csv:3: crossed quote: ask 99.5 below bid 100.5");
  CHECK((*r)->errors()[1] == "quotes.csv:4: bid: expected a finite number > 0, got '0'");
  // A mapping to a column the file does not have, and bad mapping text.
  TickFileOptions m;
  m.column_names = *ParseColumnNames("price=last");
  auto missing = TickFileReader::FromString("symbol,time,price\n", "m.csv", m);
  REQUIRE_FALSE(missing.ok());
  CHECK(std::string(missing.status().message()) ==
        "m.csv:1: header: no column 'last' (mapped to price)");
  CHECK_FALSE(ParseColumnNames("price").ok());
  CHECK_FALSE(ParseColumnNames("colour=red").ok());
  CHECK_FALSE(ParseColumnNames("price=a,price=b").ok());
  CHECK(ParseColumnNames("").ok());
  CHECK(*ParseTimeUnit("ms") == TimeUnit::kMillis);
  CHECK_FALSE(ParseTimeUnit("minutes").ok());
}

}  // namespace
}  // namespace aftershock
