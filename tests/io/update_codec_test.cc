#include "aftershock/update_codec.h"

#include <catch2/catch.hpp>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <nlohmann/json.hpp>
#include <random>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"

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

// The header's layout, written field by field with explicit little-endian
// byte order (independent of the encoder's stores and of the host's order).
std::string LayoutBytes(const BarUpdate& u) {
  std::string b;
  auto le = [&b](uint64_t bits, int n) {
    for (int i = 0; i < n; ++i) b.push_back(static_cast<char>((bits >> (8 * i)) & 0xff));
  };
  auto dbl = [&le](double d) {
    uint64_t bits = 0;
    std::memcpy(&bits, &d, 8);
    le(bits, 8);
  };
  le(kUpdateMagic, 1);
  le(kUpdateWireVersion, 1);
  le(u.symbol.size, 1);
  b.append(u.symbol.data, u.symbol.size);
  le(static_cast<uint64_t>(u.t_ns), 8);
  for (double d : {u.r, u.mu, u.eps, u.var, u.z, u.var_next, u.vol_ann}) dbl(d);
  le(static_cast<uint64_t>(u.n_horizons), 1);
  for (int i = 0; i < u.n_horizons; ++i) {
    le(static_cast<uint32_t>(u.horizons[i]), 4);
    dbl(u.var_h[i]);
  }
  le(static_cast<uint64_t>(u.n_levels), 1);
  for (int i = 0; i < u.n_levels; ++i) {
    dbl(u.levels[i]);
    dbl(u.var_risk[i]);
    dbl(u.es[i]);
  }
  dbl(u.scale);
  le(u.ver, 4);
  le(u.flags, 4);
  return b;
}

TEST_CASE("binary update bytes follow the header's layout for every shape", "[update_codec]") {
  // Random updates of every symbol length, horizon and level count, encoded
  // into one reused string (long messages before short ones, and back).
  std::mt19937_64 rng(7);
  std::uniform_real_distribution<double> unit(-1.0, 1.0);
  std::string out;
  int checked = 0;
  for (int round = 0; round < 400; ++round) {
    BarUpdate u = Sample();
    const int len = 1 + static_cast<int>(rng() % kMaxSymbolLength);
    std::string sym(static_cast<size_t>(len), 'A');
    for (char& c : sym) c = static_cast<char>('A' + rng() % 26);
    u.symbol.assign(sym);
    u.t_ns = static_cast<int64_t>(rng() >> 1);
    u.r = unit(rng);
    u.mu = unit(rng) * 1e-3;
    u.eps = u.r - u.mu;
    u.var = 1e-6 * (1 + unit(rng));
    u.z = unit(rng) * 3;
    u.var_next = 2e-6 * (1 + unit(rng));
    u.vol_ann = 0.2 * (1 + unit(rng));
    u.n_horizons = static_cast<int>(rng() % (kMaxHorizons + 1));
    for (int i = 0; i < u.n_horizons; ++i) {
      u.horizons[i] = 1 + static_cast<int>(rng() % 100000);
      u.var_h[i] = 1e-5 * (1 + unit(rng));
    }
    u.n_levels = static_cast<int>(rng() % (kMaxRiskLevels + 1));
    for (int i = 0; i < u.n_levels; ++i) {
      u.levels[i] = 0.95 + 0.04 * (1 + unit(rng)) / 2;
      u.var_risk[i] = 1e-3 * (1 + unit(rng));
      u.es[i] = 2e-3 * (1 + unit(rng));
    }
    u.scale = 10 * (1 + unit(rng));
    u.ver = static_cast<uint32_t>(rng());
    u.flags = static_cast<uint32_t>(rng() & 0xff);
    REQUIRE(EncodeUpdateBinary(u, &out).ok());
    const std::string expected = LayoutBytes(u);
    INFO("round " << round << ": symbol length " << len << ", " << u.n_horizons << " horizons, "
                  << u.n_levels << " levels");
    REQUIRE(out.size() == 3 + static_cast<size_t>(len) + 8 + 56 + 1 + 12 * u.n_horizons + 1 +
                              24 * u.n_levels + 16);
    CHECK(out == expected);
    ++checked;
  }
  CHECK(checked == 400);
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

TEST_CASE("integers in the JSON update are written as std::to_chars writes them",
          "[update_codec]") {
  std::string out;
  for (int64_t t : {int64_t{0}, int64_t{-1}, int64_t{1772443860000000000},
                    std::numeric_limits<int64_t>::min(), std::numeric_limits<int64_t>::max(),
                    int64_t{-9999999999999999}, int64_t{10000000000000000}}) {
    BarUpdate u = Sample();
    u.t_ns = t;
    u.ver = std::numeric_limits<uint32_t>::max();
    REQUIRE(EncodeUpdateJson(u, &out).ok());
    INFO(out);
    CHECK(out.find(absl::StrCat("\"t\":", t, ",")) != std::string::npos);
    CHECK(out.find(",\"ver\":4294967295,") != std::string::npos);
    BarUpdate back;
    REQUIRE(DecodeUpdateJson(out, &back).ok());
    CHECK(back.t_ns == t);
  }
}

TEST_CASE("every non-finite value is caught, and only those", "[update_codec]") {
  // The encoders test all values at once before naming a field: each place a
  // value can sit, each non-finite kind, both encoders.
  const double bad[] = {std::numeric_limits<double>::infinity(),
                        -std::numeric_limits<double>::infinity(), std::nan(""), -std::nan("")};
  std::string out;
  int rejected = 0;
  auto expect_rejected = [&](const BarUpdate& u, const std::string& what) {
    INFO(what);
    CHECK(!EncodeUpdateJson(u, &out).ok());
    CHECK(!EncodeUpdateBinary(u, &out).ok());
    ++rejected;
  };
  for (double b : bad) {
    double BarUpdate::*scalars[] = {&BarUpdate::r,       &BarUpdate::mu,   &BarUpdate::eps,
                                    &BarUpdate::var,     &BarUpdate::z,    &BarUpdate::var_next,
                                    &BarUpdate::vol_ann, &BarUpdate::scale};
    for (int f = 0; f < 8; ++f) {
      BarUpdate u = Sample();
      u.*scalars[f] = b;
      expect_rejected(u, "scalar " + std::to_string(f));
    }
    const BarUpdate sample = Sample();
    for (int i = 0; i < sample.n_horizons; ++i) {
      BarUpdate u = sample;
      u.var_h[i] = b;
      expect_rejected(u, "var_h " + std::to_string(i));
    }
    for (int i = 0; i < sample.n_levels; ++i) {
      BarUpdate u = sample;
      u.levels[i] = b;
      expect_rejected(u, "level " + std::to_string(i));
      u = sample;
      u.var_risk[i] = b;
      expect_rejected(u, "value_at_risk " + std::to_string(i));
      u = sample;
      u.es[i] = b;
      expect_rejected(u, "es " + std::to_string(i));
    }
  }
  CHECK(rejected == 4 * (8 + Sample().n_horizons + 3 * Sample().n_levels));
  // Entries past the counts are not part of the update: not finite there is
  // no error.
  BarUpdate u = Sample();
  for (int i = u.n_horizons; i < kMaxHorizons; ++i) u.var_h[i] = std::nan("");
  for (int i = u.n_levels; i < kMaxRiskLevels; ++i) {
    u.levels[i] = std::numeric_limits<double>::infinity();
    u.var_risk[i] = std::nan("");
    u.es[i] = -std::numeric_limits<double>::infinity();
  }
  std::string with_garbage, clean;
  REQUIRE(EncodeUpdateJson(u, &with_garbage).ok());
  REQUIRE(EncodeUpdateJson(Sample(), &clean).ok());
  CHECK(with_garbage == clean);
  REQUIRE(EncodeUpdateBinary(u, &with_garbage).ok());
  REQUIRE(EncodeUpdateBinary(Sample(), &clean).ok());
  CHECK(with_garbage == clean);
  // The extremes of the finite range pass.
  u = Sample();
  u.var = std::numeric_limits<double>::max();
  u.z = -std::numeric_limits<double>::max();
  u.r = std::numeric_limits<double>::denorm_min();
  CHECK(EncodeUpdateJson(u, &out).ok());
  CHECK(EncodeUpdateBinary(u, &out).ok());
  // Sizes.
  u = Sample();
  u.symbol.size = 0;
  CHECK(std::string(EncodeUpdateBinary(u, &out).message()) == "update: symbol length out of range");
  u.symbol.size = kMaxSymbolLength + 1;
  CHECK(!EncodeUpdateJson(u, &out).ok());
  u = Sample();
  u.n_horizons = kMaxHorizons + 1;
  CHECK(!EncodeUpdateJson(u, &out).ok());
  u.n_horizons = -1;
  CHECK(!EncodeUpdateBinary(u, &out).ok());
  u = Sample();
  u.n_levels = -1;
  CHECK(!EncodeUpdateBinary(u, &out).ok());
  u.n_levels = kMaxRiskLevels + 1;
  CHECK(!EncodeUpdateJson(u, &out).ok());
  CHECK(!EncodeUpdateBinary(u, &out).ok());
  u = Sample();
  u.symbol.size = kMaxSymbolLength;  // the longest allowed
  CHECK(EncodeUpdateBinary(u, &out).ok());
}

uint64_t Bits(double v) {
  uint64_t b;
  std::memcpy(&b, &v, sizeof(b));
  return b;
}

double FromBits(uint64_t b) {
  double v;
  std::memcpy(&v, &b, sizeof(v));
  return v;
}

// Finite doubles over the whole range: random bit patterns (every exponent,
// both signs), subnormals, values near 0, 1 and the extremes, and the cases
// that stress a shortest-form writer. Deterministic (fixed seed).
std::vector<double> AwkwardDoubles(int n_random) {
  std::vector<double> v = {0.0,
                           -0.0,
                           std::numeric_limits<double>::denorm_min(),
                           -std::numeric_limits<double>::denorm_min(),
                           FromBits(0x000FFFFFFFFFFFFFull),  // largest subnormal
                           std::numeric_limits<double>::min(),
                           std::numeric_limits<double>::max(),
                           -std::numeric_limits<double>::max(),
                           std::numeric_limits<double>::epsilon(),
                           1.0,
                           -1.0,
                           0.1,
                           0.2,
                           0.3,
                           1.0 / 3.0,
                           2.0 / 3.0,
                           1e21,
                           1e22,
                           1e23,
                           123456789012345678.0,
                           9007199254740993.0,  // 2^53 + 1 (rounds to 2^53)
                           5e-324,
                           1.7976931348623157e308,
                           2.2250738585072011e-308,
                           100000.0,
                           0.99,
                           0.975,
                           1e-6,
                           1.2e-6};
  std::mt19937_64 g(20261203);
  std::normal_distribution<double> nd(0, 1);
  while (static_cast<int>(v.size()) < n_random) {
    const int kind = static_cast<int>(g() % 4);
    double d = 0;
    if (kind == 0) {
      d = FromBits(g());  // any exponent
    } else if (kind == 1) {
      d = FromBits(g() & 0x800FFFFFFFFFFFFFull);  // subnormal (or zero)
    } else if (kind == 2) {
      d = 1e-6 * std::exp(nd(g));  // variance-like
    } else {
      d = nd(g) * std::pow(10.0, static_cast<double>(static_cast<int>(g() % 41) - 20));
    }
    if (std::isfinite(d)) v.push_back(d);
  }
  return v;
}

// Every number in the encoded update, in text order, read back with strtod:
// a number starts after ':' or after the quote that opens a key (the
// horizon and level keys). Symbol and flag strings start with letters.
std::vector<double> NumbersByStrtod(const std::string& json) {
  std::vector<double> out;
  const char* s = json.c_str();
  for (size_t i = 1; i < json.size(); ++i) {
    const char c = s[i];
    const bool starts = c == '-' || (c >= '0' && c <= '9');
    const bool after_colon = s[i - 1] == ':';
    const bool key_open = s[i - 1] == '"' && i >= 2 && (s[i - 2] == '{' || s[i - 2] == ',');
    if (!starts || !(after_colon || key_open)) continue;
    char* end = nullptr;
    out.push_back(std::strtod(s + i, &end));
    REQUIRE(end > s + i);
    REQUIRE((*end == ',' || *end == '}' || *end == '"'));
    i = static_cast<size_t>(end - s) - 1;
  }
  return out;
}

// The text layout written out field by field with std::to_chars: the encoder
// must produce these bytes exactly (the format is documented and published).
std::string ReferenceJson(const BarUpdate& u) {
  auto num = [](double v) {
    char b[32];
    return std::string(b, std::to_chars(b, b + sizeof(b), v).ptr);
  };
  std::string j = "{\"s\":\"" + std::string(u.symbol.view()) +
                  "\",\"t\":" + std::to_string(u.t_ns) + ",\"r\":" + num(u.r) +
                  ",\"mu\":" + num(u.mu) + ",\"eps\":" + num(u.eps) + ",\"var\":" + num(u.var) +
                  ",\"z\":" + num(u.z) + ",\"var_next\":" + num(u.var_next) +
                  ",\"vol_ann\":" + num(u.vol_ann) + ",\"var_h\":{";
  for (int i = 0; i < u.n_horizons; ++i) {
    j += (i ? ",\"" : "\"") + std::to_string(u.horizons[i]) + "\":" + num(u.var_h[i]);
  }
  j += "},\"value_at_risk\":{";
  for (int i = 0; i < u.n_levels; ++i) {
    j += (i ? ",\"" : "\"") + num(u.levels[i]) + "\":" + num(u.var_risk[i]);
  }
  j += "},\"es\":{";
  for (int i = 0; i < u.n_levels; ++i) {
    j += (i ? ",\"" : "\"") + num(u.levels[i]) + "\":" + num(u.es[i]);
  }
  j += "},\"scale\":" + num(u.scale) + ",\"ver\":" + std::to_string(u.ver) + ",\"flags\":[";
  bool first = true;
  for (int bit = 0; bit < kNumUpdateFlags; ++bit) {
    if (!(u.flags & (1u << bit))) continue;
    j += (first ? "\"" : ",\"") + std::string(FlagName(bit)) + "\"";
    first = false;
  }
  return j + "]}";
}

TEST_CASE("JSON update doubles read back bit-equal with strtod", "[update_codec]") {
  const std::vector<double> pool = AwkwardDoubles(60000);
  BarUpdate u = Sample();
  u.symbol.assign("ALDER.X");
  u.t_ns = 1000;  // exactly representable, so strtod reads it back too
  u.n_horizons = 3;
  u.n_levels = 2;
  u.flags = 0;
  std::string out;
  size_t k = 0;
  auto next = [&] { return pool[k++ % pool.size()]; };
  int checked = 0, level_reuse = 0, one_bar_same = 0;
  for (int n = 0; n < 3500; ++n) {
    for (double* d : {&u.r, &u.mu, &u.eps, &u.var, &u.z, &u.var_next, &u.vol_ann, &u.scale}) {
      *d = next();
    }
    for (int i = 0; i < u.n_horizons; ++i) u.var_h[i] = next();
    // The one-bar horizon often equals var_next exactly (the encoder reuses
    // its text then); -0 against +0 must still be told apart.
    if (n % 3 == 0) {
      u.var_h[0] = u.var_next;
      ++one_bar_same;
    }
    if (n % 7 == 1) {
      u.var_next = -0.0;
      u.var_h[0] = 0.0;
    }
    // Levels change now and then and otherwise repeat (the encoder keeps the
    // last text of each); mu and scale likewise.
    if (n % 4 == 0) {
      for (int i = 0; i < u.n_levels; ++i) u.levels[i] = next();
    } else {
      ++level_reuse;
    }
    if (n % 5 == 0) u.mu = u.scale;
    for (int i = 0; i < u.n_levels; ++i) {
      u.var_risk[i] = next();
      u.es[i] = next();
    }
    u.flags = static_cast<uint32_t>(n) & ((1u << kNumUpdateFlags) - 1);
    REQUIRE(EncodeUpdateJson(u, &out).ok());
    REQUIRE(out == ReferenceJson(u));
    std::vector<double> want = {1000.0, u.r, u.mu, u.eps, u.var, u.z, u.var_next, u.vol_ann};
    for (int i = 0; i < u.n_horizons; ++i) {
      want.push_back(u.horizons[i]);
      want.push_back(u.var_h[i]);
    }
    for (const double* values : {u.var_risk, u.es}) {
      for (int i = 0; i < u.n_levels; ++i) {
        want.push_back(u.levels[i]);
        want.push_back(values[i]);
      }
    }
    want.push_back(u.scale);
    want.push_back(u.ver);
    const std::vector<double> got = NumbersByStrtod(out);
    REQUIRE(got.size() == want.size());
    for (size_t i = 0; i < want.size(); ++i) {
      INFO(out << " number " << i);
      REQUIRE(Bits(got[i]) == Bits(want[i]));
      ++checked;
    }
  }
  CHECK(checked == 3500 * 24);
  CHECK(level_reuse > 2000);
  CHECK(one_bar_same > 1000);
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
