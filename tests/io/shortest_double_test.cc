#include "io/shortest_double.h"

#include <catch2/catch.hpp>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <limits>
#include <random>
#include <string>
#include <vector>

namespace aftershock::internal {
namespace {

// The reference: std::to_chars with no format argument (libstdc++), the
// notation the JSON and CSV outputs have always used.
std::string Reference(double v) {
  char buf[64];
  return std::string(buf, std::to_chars(buf, buf + sizeof(buf), v).ptr);
}

std::string Ours(double v) {
  char buf[kShortestDoubleBufferBytes + 8];
  std::memset(buf, '#', sizeof(buf));
  char* end = WriteShortestDouble(buf, v);
  REQUIRE(end - buf <= kShortestDoubleMaxChars);
  // Nothing written past the buffer the contract asks for.
  REQUIRE(std::string(buf + kShortestDoubleBufferBytes, 8) == "########");
  return std::string(buf, end);
}

double FromBits(uint64_t b) {
  double v;
  std::memcpy(&v, &b, sizeof(v));
  return v;
}

// Counts values whose text differs from the reference; prints the first few.
int Mismatches(const std::vector<double>& values) {
  int bad = 0;
  for (double v : values) {
    const std::string ours = Ours(v);
    const std::string ref = Reference(v);
    if (ours != ref) {
      if (++bad <= 5) UNSCOPED_INFO("value " << ref << " written as " << ours);
    }
  }
  return bad;
}

TEST_CASE("special values are written as std::to_chars writes them") {
  const double inf = std::numeric_limits<double>::infinity();
  const double nan = std::numeric_limits<double>::quiet_NaN();
  CHECK(Ours(0.0) == "0");
  CHECK(Ours(-0.0) == "-0");
  CHECK(Ours(inf) == "inf");
  CHECK(Ours(-inf) == "-inf");
  CHECK(Ours(nan) == Reference(nan));
  CHECK(Ours(std::numeric_limits<double>::max()) == "1.7976931348623157e+308");
  CHECK(Ours(std::numeric_limits<double>::lowest()) == "-1.7976931348623157e+308");
  CHECK(Ours(std::numeric_limits<double>::min()) == "2.2250738585072014e-308");
  CHECK(Ours(-std::numeric_limits<double>::min()) == "-2.2250738585072014e-308");
  CHECK(Ours(std::numeric_limits<double>::denorm_min()) == "5e-324");
}

TEST_CASE("the notation rule: the shorter of fixed and scientific, fixed on a tie") {
  // Spelled out (C++17 [charconv.to.chars]; the strings are what the rule
  // gives, and the reference agrees).
  CHECK(Ours(0.001) == "0.001");  // 5 characters either way: fixed
  CHECK(Ours(0.0001) == "1e-04");
  CHECK(Ours(0.00012) == "0.00012");  // 7 against 7 ("1.2e-04")
  CHECK(Ours(0.000012) == "1.2e-05");
  CHECK(Ours(123.456) == "123.456");
  CHECK(Ours(-0.5) == "-0.5");
  CHECK(Ours(100000.0) == "1e+05");  // 5 against 6 ("100000")
  CHECK(Ours(12000.0) == "12000");   // 5 against 7 ("1.2e+04")
  CHECK(Ours(1e15) == "1e+15");
  CHECK(Ours(123456789012345.0) == "123456789012345");
  CHECK(Ours(1e100) == "1e+100");
  CHECK(Ours(1.5e-300) == "1.5e-300");
  for (const char* s : {"0.001", "1e-04", "0.00012", "1.2e-05", "123.456", "-0.5", "1e+05", "12000",
                        "1e+15", "123456789012345", "1e+100", "1.5e-300"}) {
    double v = 0;
    std::from_chars(s, s + std::strlen(s), v);
    CHECK(Reference(v) == s);
  }
}

TEST_CASE("integers, powers of ten and two, and their neighbours match std::to_chars") {
  std::vector<double> v;
  for (int i = -100000; i <= 100000; ++i) v.push_back(i);
  for (int k = -324; k <= 308; ++k) {
    const double p = std::pow(10.0, k);
    for (double m : {1.0, 1.5, 2.0, 9.999, 12.5, 123.456789, 999999.0}) {
      const double x = p * m;
      if (!std::isfinite(x)) continue;
      v.push_back(x);
      v.push_back(-x);
      v.push_back(std::nextafter(x, 0.0));
      v.push_back(std::nextafter(x, std::numeric_limits<double>::infinity()));
    }
  }
  for (int k = -1074; k <= 1023; ++k) {
    const double x = std::ldexp(1.0, k);
    v.push_back(x);
    v.push_back(std::nextafter(x, 0.0));
    v.push_back(std::nextafter(x, 4.0 * x));
  }
  // Around 2^53 and the 10^15..10^22 band, where fixed notation of an integer
  // value is the exact integer, not the shortest digits padded with zeros.
  for (double base : {9007199254740992.0, 1e15, 1e16, 1e17, 1e18, 1e20, 1e21, 1e22}) {
    double x = base;
    for (int i = 0; i < 64; ++i) {
      v.push_back(x);
      x = std::nextafter(x, 2 * base);
    }
    x = base;
    for (int i = 0; i < 64; ++i) {
      x = std::nextafter(x, 0.0);
      v.push_back(x);
    }
  }
  CHECK(Mismatches(v) == 0);
}

TEST_CASE("random doubles over every exponent match std::to_chars") {
  std::mt19937_64 rng(20261205);
  std::vector<double> v;
  v.reserve(1 << 22);
  for (int i = 0; i < (1 << 22); ++i) v.push_back(FromBits(rng()));  // every exponent, NaNs too
  CHECK(Mismatches(v) == 0);
}

TEST_CASE("values of the sizes the engine publishes match std::to_chars") {
  // Variances, returns, z-scores, value at risk: lognormal and normal draws.
  std::mt19937_64 rng(7);
  std::normal_distribution<double> normal;
  std::vector<double> v;
  v.reserve(1 << 20);
  for (int i = 0; i < (1 << 18); ++i) {
    v.push_back(1e-4 * std::exp(2.0 * normal(rng)));
    v.push_back(1e-3 * normal(rng));
    v.push_back(normal(rng));
    v.push_back(0.02 * std::exp(0.3 * normal(rng)));
  }
  // Short decimals as a user writes them (levels, prices): 1 to 6 digits.
  for (int digits = 1; digits <= 6; ++digits) {
    const int top = static_cast<int>(std::pow(10, digits));
    for (int k = -8; k <= 8; ++k) {
      for (int i = 1; i < top; i += 1 + top / 2000) v.push_back(i * std::pow(10.0, k));
    }
  }
  CHECK(Mismatches(v) == 0);
}

}  // namespace
}  // namespace aftershock::internal
