#include "aftershock/update_codec.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <limits>
#include <nlohmann/json.hpp>
#include <string>

namespace aftershock {
namespace {

BarUpdate Sample() {
  BarUpdate u;
  u.symbol.assign("ALDER.X");
  u.t_ns = 1772443800000000000;
  u.r = -0.0012345678901234567;
  u.mu = 1.0 / 3.0;
  u.eps = u.r - u.mu;
  u.var = 1.1e-6;
  u.z = -1.2345;
  u.var_next = 1.2e-6;
  u.vol_ann = std::sqrt(1.2e-6 * 252);
  u.n_horizons = 3;
  u.horizons[0] = 1;
  u.horizons[1] = 5;
  u.horizons[2] = 20;
  u.var_h[0] = 1.2e-6;
  u.var_h[1] = 6.1e-6;
  u.var_h[2] = 2.5e-5;
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

void CheckSame(const BarUpdate& a, const BarUpdate& b) {
  CHECK(a.symbol == b.symbol);
  CHECK(a.t_ns == b.t_ns);
  CHECK(a.r == b.r);
  CHECK(a.mu == b.mu);
  CHECK(a.eps == b.eps);
  CHECK(a.var == b.var);
  CHECK(a.z == b.z);
  CHECK(a.var_next == b.var_next);
  CHECK(a.vol_ann == b.vol_ann);
  REQUIRE(a.n_horizons == b.n_horizons);
  for (int i = 0; i < a.n_horizons; ++i) {
    CHECK(a.horizons[i] == b.horizons[i]);
    CHECK(a.var_h[i] == b.var_h[i]);
  }
  REQUIRE(a.n_levels == b.n_levels);
  for (int i = 0; i < a.n_levels; ++i) {
    CHECK(a.levels[i] == b.levels[i]);
    CHECK(a.var_risk[i] == b.var_risk[i]);
    CHECK(a.es[i] == b.es[i]);
  }
  CHECK(a.scale == b.scale);
  CHECK(a.ver == b.ver);
  CHECK(a.flags == b.flags);
}

TEST_CASE("flag names", "[update_codec]") {
  CHECK(FlagName(0) == "warmup");
  CHECK(FlagName(1) == "fallback");
  CHECK(FlagName(2) == "stale");
  CHECK(FlagName(3) == "seasonal");
  CHECK(FlagName(4) == "gap");
  CHECK(FlagName(5) == "first_bar");
}

TEST_CASE("JSON update has the documented keys and round-trips exactly", "[update_codec]") {
  const BarUpdate u = Sample();
  std::string out;
  REQUIRE(EncodeUpdateJson(u, &out).ok());
  // An independent parser (nlohmann) sees the documented layout.
  const auto j = nlohmann::ordered_json::parse(out);
  std::string keys;
  for (auto it = j.begin(); it != j.end(); ++it) keys += it.key() + " ";
  CHECK(keys == "s t r mu eps var z var_next vol_ann var_h value_at_risk es scale ver flags ");
  CHECK(j["var_h"].contains("5"));
  CHECK(j["value_at_risk"].contains("0.99"));
  CHECK(j["es"].contains("0.975"));
  CHECK(j["flags"].dump() == R"(["warmup","gap"])");
  CHECK(j["t"].get<int64_t>() == 1772443800000000000);
  CHECK(j["mu"].get<double>() == 1.0 / 3.0);
  BarUpdate back;
  REQUIRE(DecodeUpdateJson(out, &back).ok());
  CheckSame(back, u);
  // An update with the retired key name is refused naming the new one.
  std::string old = out;
  old.replace(old.find("\"value_at_risk\""), 15, "\"var_risk\"");
  CHECK(std::string(DecodeUpdateJson(old, &back).message()) ==
        "update JSON: unknown key 'var_risk': 'var_risk' was renamed: use value_at_risk "
        "(CHANGELOG.md)");
}

TEST_CASE("binary update round-trips exactly and has the documented size", "[update_codec]") {
  const BarUpdate u = Sample();
  std::string out;
  REQUIRE(EncodeUpdateBinary(u, &out).ok());
  CHECK(out.size() == 3 + 7 + 8 + 56 + 1 + 12 * 3 + 1 + 24 * 2 + 16);
  CHECK(static_cast<uint8_t>(out[0]) == kUpdateMagic);
  BarUpdate back;
  REQUIRE(DecodeUpdateBinary(out, &back).ok());
  CheckSame(back, u);
  CHECK(std::string(DecodeUpdateBinary(out.substr(0, out.size() - 1), &back).message()) ==
        "binary update: truncated");
  CHECK(std::string(DecodeUpdateBinary(out + "x", &back).message()) ==
        "binary update: trailing bytes");
  std::string v2 = out;
  v2[1] = 9;
  CHECK(std::string(DecodeUpdateBinary(v2, &back).message()) ==
        "binary update: unsupported version 9");
}

TEST_CASE("non-finite fields are never encoded", "[update_codec]") {
  BarUpdate u = Sample();
  u.var_next = std::numeric_limits<double>::infinity();
  std::string out = "previous";
  absl::Status s = EncodeUpdateJson(u, &out);
  CHECK(std::string(s.message()) == "update for ALDER.X: field var_next is not finite");
  CHECK(out.empty());
  s = EncodeUpdateBinary(u, &out);
  CHECK(std::string(s.message()) == "update for ALDER.X: field var_next is not finite");
  u = Sample();
  u.var_h[2] = std::nan("");
  CHECK(std::string(EncodeUpdateJson(u, &out).message()) ==
        "update for ALDER.X: field var_h[2] is not finite");
  u = Sample();
  u.es[1] = -std::numeric_limits<double>::infinity();
  CHECK(!EncodeUpdateBinary(u, &out).ok());
}

TEST_CASE("update JSON decoder refuses unknown keys and flags", "[update_codec]") {
  BarUpdate u;
  std::string out;
  REQUIRE(EncodeUpdateJson(Sample(), &out).ok());
  std::string extra = out;
  extra.insert(1, "\"zz\":1,");
  CHECK(std::string(DecodeUpdateJson(extra, &u).message()) == "update JSON: unknown key 'zz'");
  std::string flag = out;
  flag.replace(flag.find("\"gap\""), 5, "\"gapp\"");
  CHECK(std::string(DecodeUpdateJson(flag, &u).message()) == "update JSON: unknown flag 'gapp'");
  CHECK(!DecodeUpdateJson("{", &u).ok());
}

}  // namespace
}  // namespace aftershock
