#include "aftershock/update_csv.h"

#include <catch2/catch.hpp>
#include <cstdint>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "absl/time/time.h"
#include "aftershock/update_codec.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

BarUpdate Sample() {
  BarUpdate u;
  u.symbol.assign("ALDER.X");
  u.t_ns = 1772443860000000000;  // 2026-03-02T09:31:00Z
  u.r = -0.0012345678901234567;
  u.mu = 1.0 / 3.0;
  u.eps = u.r - u.mu;
  u.var = 1.1e-6;
  u.z = -1.25;
  u.var_next = 1.2e-6;
  u.vol_ann = 0.5;
  u.n_horizons = 2;
  u.horizons[0] = 1;
  u.horizons[1] = 5;
  u.var_h[0] = 1.2e-6;
  u.var_h[1] = 6.1e-6;
  u.n_levels = 2;
  u.levels[0] = 0.99;
  u.levels[1] = 0.975;
  u.var_risk[0] = 0.0025;
  u.var_risk[1] = 0.0021;
  u.es[0] = 0.0029;
  u.es[1] = 0.0025;
  u.scale = 5.74;
  u.ver = 3;
  u.flags = kFlagWarmup | kFlagGap;
  return u;
}

TEST_CASE("CSV header and row: written out in full", "[update_csv]") {
  const int horizons[] = {1, 5};
  const double levels[] = {0.99, 0.975};
  CHECK(UpdateCsvHeader(horizons, levels) ==
        "symbol,time,r,mu,eps,var,z,var_next,vol_ann,var_h_1,var_h_5,value_at_risk_0.99,"
        "es_0.99,value_at_risk_0.975,es_0.975,scale,ver,flags\n");
  std::string row;
  REQUIRE(AppendUpdateCsvRow(Sample(), &row).ok());
  // Shortest round-trip doubles: 1/3 needs all 16 digits, 1.1e-6 two.
  CHECK(row ==
        "ALDER.X,2026-03-02T09:31:00Z,-0.0012345678901234567,0.3333333333333333,"
        "-0.33456790122345675,1.1e-06,-1.25,1.2e-06,0.5,1.2e-06,6.1e-06,0.0025,0.0029,0.0021,"
        "0.0025,5.74,3,warmup|gap\n");
  // Fractional seconds only where the time has them; no flags: empty field.
  BarUpdate v = Sample();
  v.t_ns += 250000000;
  v.flags = 0;
  v.symbol.assign("A,\"B\"");
  row.clear();
  REQUIRE(AppendUpdateCsvRow(v, &row).ok());
  CHECK(row.rfind("\"A,\"\"B\"\"\",2026-03-02T09:31:00.25Z,", 0) == 0);
  CHECK(row.substr(row.size() - 4) == ",3,\n");
  BarUpdate bad = Sample();
  bad.n_levels = kMaxRiskLevels + 1;
  row = "kept";
  CHECK_FALSE(AppendUpdateCsvRow(bad, &row).ok());
  CHECK(row == "kept");
}

TEST_CASE("CSV time column: ISO-8601 UTC as absl formats it, over the whole int64 range",
          "[update_csv]") {
  // The writer formats the time itself (no string per row); absl::FormatTime
  // with "%Y-%m-%dT%H:%M:%E*SZ" is the reference it must equal byte for byte.
  std::mt19937_64 g(1303);
  std::vector<int64_t> times = {0,
                                1,
                                -1,
                                999999999,
                                -1000000000,
                                1772443860000000000,
                                1772443860250000000,
                                951782400000000000,   // 2000-02-29T00:00:00Z
                                4107542399999999999,  // 2100-02-28T23:59:59.999999999Z
                                std::numeric_limits<int64_t>::max(),
                                std::numeric_limits<int64_t>::min()};
  for (int i = 0; i < 20000; ++i) {
    int64_t t = static_cast<int64_t>(g());
    if (i % 3 == 0) t -= t % 1000000000;  // whole seconds
    if (i % 3 == 1) t -= t % 1000;        // microseconds
    times.push_back(t);
  }
  BarUpdate u = Sample();
  std::string row;
  for (int64_t t : times) {
    u.t_ns = t;
    row.clear();
    REQUIRE(AppendUpdateCsvRow(u, &row).ok());
    const std::string want =
        absl::FormatTime("%Y-%m-%dT%H:%M:%E*SZ", absl::FromUnixNanos(t), absl::UTCTimeZone());
    INFO(t);
    REQUIRE(row.substr(8, want.size() + 1) == want + ",");
  }
}

TEST_CASE("CSV sink decodes binary updates and passes JSON on", "[update_csv]") {
  const std::string dir = testing::ScratchDir("update_csv");
  struct Capture : UpdateSink {
    std::string topics, bodies;
    int flushes = 0;
    bool Send(absl::string_view t, absl::string_view b) override {
      topics.append(t.data(), t.size());
      bodies.append(b.data(), b.size());
      return true;
    }
    absl::Status Flush() override {
      ++flushes;
      return absl::OkStatus();
    }
  } json;
  auto sink = UpdateCsvSink::Open(dir + "/u.csv", "h\n", &json);
  REQUIRE(sink.ok());
  std::string bin, want_json;
  REQUIRE(EncodeUpdateBinary(Sample(), &bin).ok());
  REQUIRE(EncodeUpdateJson(Sample(), &want_json).ok());
  CHECK((*sink)->Send("u.ALDER.X", bin));
  CHECK((*sink)->Send("a.ALDER.X", "not an update"));  // other topics are skipped
  CHECK_FALSE((*sink)->Send("u.ALDER.X", "garbage"));  // counted as a drop
  REQUIRE((*sink)->Flush().ok());
  CHECK(json.flushes == 1);
  CHECK(json.topics == "u.ALDER.X");
  CHECK(json.bodies == want_json);
  CHECK((*sink)->rows() == 1);
  std::string row;
  REQUIRE(AppendUpdateCsvRow(Sample(), &row).ok());
  CHECK(testing::ReadFileOrDie(dir + "/u.csv") == "h\n" + row);
  auto missing = UpdateCsvSink::Open(dir + "/no-such-dir/u.csv", "h\n", nullptr);
  REQUIRE_FALSE(missing.ok());
  CHECK(std::string(missing.status().message()).find("No such file or directory") !=
        std::string::npos);
}

}  // namespace
}  // namespace aftershock
