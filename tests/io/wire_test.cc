#include "aftershock/wire.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <new>
#include <random>
#include <string>
#include <vector>

#include "aftershock/update_codec.h"
#include "aftershock/update_csv.h"

// ---- Allocation counter ------------------------------------------------------
// Replaces the global operator new for this test binary; allocations are
// counted only between StartCounting() and StopCounting().
namespace {
bool g_counting = false;
long g_allocations = 0;
void StartCounting() {
  g_allocations = 0;
  g_counting = true;
}
long StopCounting() {
  g_counting = false;
  return g_allocations;
}
}  // namespace

// The replacements pair malloc with free; GCC cannot see that the inlined
// delete matches this new and warns, so the check is off for this file.
#if defined(__GNUC__) && !defined(__clang__)
#pragma GCC diagnostic ignored "-Wmismatched-new-delete"
#endif
void* operator new(std::size_t n) {
  if (g_counting) ++g_allocations;
  if (void* p = std::malloc(n == 0 ? 1 : n)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n) { return operator new(n); }
// The nothrow forms are replaced too, so every pointer freed by the
// replacements below came from malloc (sanitizers check the pairing).
void* operator new(std::size_t n, const std::nothrow_t&) noexcept {
  if (g_counting) ++g_allocations;
  return std::malloc(n == 0 ? 1 : n);
}
void* operator new[](std::size_t n, const std::nothrow_t& t) noexcept {
  return operator new(n, t);
}
void operator delete(void* p, const std::nothrow_t&) noexcept { std::free(p); }
void operator delete[](void* p, const std::nothrow_t&) noexcept { std::free(p); }
void operator delete(void* p) noexcept { std::free(p); }
void operator delete[](void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t) noexcept { std::free(p); }

namespace aftershock {
namespace {

constexpr size_t kLimit = kDefaultMaxMessageBytes;

Tick MakeTick(const char* sym, int64_t t, Tick::Kind kind, double value, double size = 0) {
  Tick tick;
  tick.symbol.assign(sym);
  tick.t_ns = t;
  tick.kind = kind;
  tick.value = value;
  tick.size = size;
  return tick;
}

// Decodes a single JSON message and returns the one reason it was rejected
// for, or "ok".
std::string JsonReason(const std::string& frame, const std::string& body) {
  Tick out[4];
  RejectCounters c;
  const DecodeResult r = DecodeTicks(frame, body, WireEncoding::kJson, kLimit, out, &c);
  if (r.n_ticks == 1 && c.Total() == 0) return "ok";
  if (c.Total() != 1 || r.n_rejected != 1) return "counted " + std::to_string(c.Total());
  for (int i = 0; i < kNumRejectReasons; ++i) {
    if (c.by_reason[i] == 1) return std::string(RejectReasonName(static_cast<RejectReason>(i)));
  }
  return "?";
}

TEST_CASE("JSON single ticks decode exactly", "[wire]") {
  Tick out[1];
  RejectCounters c;
  auto r = DecodeTicks("ALDER.X", R"({"t": 1772443800000000001, "p": 101.25, "v": 300})",
                       WireEncoding::kJson, kLimit, out, &c);
  REQUIRE(r.n_ticks == 1);
  CHECK(c.Total() == 0);
  CHECK(out[0].symbol.view() == "ALDER.X");
  CHECK(out[0].t_ns == 1772443800000000001);
  CHECK(out[0].kind == Tick::kPrice);
  CHECK(out[0].value == 101.25);
  CHECK(out[0].size == 300);
  CHECK(std::isnan(out[0].rv));

  r = DecodeTicks("b:1", "{\"r\":-4.2e-4,\"t\":0}", WireEncoding::kJson, kLimit, out, &c);
  REQUIRE(r.n_ticks == 1);
  CHECK(out[0].kind == Tick::kReturn);
  CHECK(out[0].value == -4.2e-4);
  CHECK(out[0].size == 0);
  // Underflow to zero is a finite value, not an error.
  CHECK(JsonReason("A", R"({"t":1,"r":1e-400})") == "ok");
}

TEST_CASE("JSON encoder round-trips every double exactly", "[wire]") {
  const double values[] = {0.1,
                           1.0 / 3.0,
                           101.25,
                           5e-324,
                           1.7976931348623157e308,
                           -2.2250738585072014e-308,
                           123456789.123456789};
  Tick out[1];
  RejectCounters c;
  std::string body;
  for (double v : values) {
    Tick t = MakeTick("CEDAR-1", 42, Tick::kReturn, v, 0.5);
    EncodeTickJson(t, &body);
    REQUIRE(DecodeTicks("CEDAR-1", body, WireEncoding::kJson, kLimit, out, &c).n_ticks == 1);
    CHECK(out[0].value == v);
    CHECK(out[0].size == 0.5);
    CHECK(out[0].t_ns == 42);
  }
  CHECK(c.Total() == 0);
}

TEST_CASE("JSON numbers decode to the double strtod gives, in every written form", "[wire]") {
  // Decimal texts of every shape the grammar allows (sign, integer digits,
  // fraction, exponent), short ones (the decoder's exact fast path) and long
  // ones (its fallback), compared bit for bit with strtod of the same text.
  std::mt19937_64 g(13);
  auto digits = [&](int n, bool lead_nonzero) {
    std::string d;
    for (int i = 0; i < n; ++i) {
      d.push_back(static_cast<char>('0' + (i == 0 && lead_nonzero ? 1 + g() % 9 : g() % 10)));
    }
    return d;
  };
  Tick out[1];
  RejectCounters c;
  int checked = 0, short_forms = 0;
  for (int n = 0; n < 40000; ++n) {
    const int int_digits = static_cast<int>(g() % 12);  // 0 = "0"
    const int frac_digits = static_cast<int>(g() % 21);
    std::string text = g() % 3 == 0 ? "-" : "";
    text += int_digits == 0 ? "0" : digits(int_digits, true);
    if (frac_digits > 0) text += "." + digits(frac_digits, false);
    if (g() % 3 == 0) {
      text += g() % 2 ? "e" : "E";
      const int r = static_cast<int>(g() % 3);
      text += r == 0 ? "" : r == 1 ? "+" : "-";
      text += std::to_string(g() % (g() % 4 == 0 ? 330 : 25));
    }
    const double want = std::strtod(text.c_str(), nullptr);
    if (!std::isfinite(want)) continue;  // overflow is non_finite, tested elsewhere
    const std::string body = "{\"t\":7,\"r\":" + text + "}";
    INFO(body);
    REQUIRE(DecodeTicks("ASPEN.Q", body, WireEncoding::kJson, kLimit, out, &c).n_ticks == 1);
    uint64_t a, b;
    std::memcpy(&a, &out[0].value, 8);
    std::memcpy(&b, &want, 8);
    REQUIRE(a == b);
    ++checked;
    if (int_digits + frac_digits <= 15) ++short_forms;
  }
  CHECK(c.Total() == 0);
  CHECK(checked > 39000);
  CHECK(short_forms > 10000);
}

TEST_CASE("each JSON rejection class is named", "[wire]") {
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1") == "malformed_json");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1} x") == "malformed_json");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":01}") == "malformed_json");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1.}") == "malformed_json");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1,\"p\":2}") == "malformed_json");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1,\"r\":2}") == "malformed_json");
  CHECK(JsonReason("A", "{'t':1}") == "malformed_json");
  CHECK(JsonReason("", "{\"t\":1,\"p\":1}") == "bad_symbol");
  CHECK(JsonReason("A B", "{\"t\":1,\"p\":1}") == "bad_symbol");
  CHECK(JsonReason(std::string(33, 'A'), "{\"t\":1,\"p\":1}") == "bad_symbol");
  CHECK(JsonReason(std::string(32, 'A'), "{\"t\":1,\"p\":1}") == "ok");
  CHECK(JsonReason("A", "{\"s\":\"B\",\"t\":1,\"p\":1}") == "bad_symbol");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":NaN}") == "non_finite");
  CHECK(JsonReason("A", "{\"t\":1,\"r\":-Infinity}") == "non_finite");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1e999}") == "non_finite");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":0}") == "non_positive_price");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":-3.5}") == "non_positive_price");
  CHECK(JsonReason("A", "{\"t\":1}") == "missing_field");
  CHECK(JsonReason("A", "{\"p\":1}") == "missing_field");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1,\"q\":[1,{\"x\":null}]}") == "unknown_field");
  CHECK(JsonReason("A", "{\"t\":1.5,\"p\":1}") == "bad_time");
  CHECK(JsonReason("A", "{\"t\":-1,\"p\":1}") == "bad_time");
  CHECK(JsonReason("A", "{\"t\":99999999999999999999,\"p\":1}") == "bad_time");
  CHECK(JsonReason("A", "{\"t\":\"now\",\"p\":1}") == "bad_time");
  CHECK(JsonReason("A", "{\"t\":1,\"p\":1,\"v\":-1}") == "bad_size");
  Tick out[1];
  RejectCounters c;
  const std::string big(100, ' ');
  CHECK(DecodeTicks("A", big, WireEncoding::kJson, 64, out, &c).n_ticks == 0);
  CHECK(c.Get(RejectReason::kOversize) == 1);
  CHECK(RejectReasonName(RejectReason::kSymbolLimit) == "symbol_limit");
  CHECK(RejectReasonName(RejectReason::kTooOld) == "too_old");
  CHECK(RejectReasonName(RejectReason::kOutsideSession) == "outside_session");
}

TEST_CASE("JSON batch decodes good records and counts bad ones individually", "[wire]") {
  const std::string body = R"([{"s":"ALDER.X","t":1,"p":10},)"
                           R"({"s":"BIRCH.Y","t":2,"p":-1},)"
                           R"({"t":3,"p":1},)"
                           R"({"s":"CEDAR","t":4,"r":0.01,"zz":1},)"
                           R"({"s":"bad sym","t":5,"p":1},)"
                           R"({"s":"ELM","t":6,"r":-0.02,"v":7}])";
  Tick out[8];
  RejectCounters c;
  const DecodeResult r = DecodeTicks("*", body, WireEncoding::kJson, kLimit, out, &c);
  REQUIRE(r.n_ticks == 2);
  CHECK(r.n_rejected == 4);
  CHECK(out[0].symbol.view() == "ALDER.X");
  CHECK(out[1].symbol.view() == "ELM");
  CHECK(out[1].size == 7);
  CHECK(c.Get(RejectReason::kNonPositivePrice) == 1);
  CHECK(c.Get(RejectReason::kMissingField) == 1);
  CHECK(c.Get(RejectReason::kUnknownField) == 1);
  CHECK(c.Get(RejectReason::kBadSymbol) == 1);
  CHECK(c.Total() == 4);

  // A syntax error anywhere rejects the whole batch once.
  RejectCounters c2;
  const DecodeResult r2 = DecodeTicks("*", R"([{"s":"A","t":1,"p":1},{"s":"B",])",
                                      WireEncoding::kJson, kLimit, out, &c2);
  CHECK(r2.n_ticks == 0);
  CHECK(c2.Get(RejectReason::kMalformedJson) == 1);
  CHECK(c2.Total() == 1);

  // More records than capacity.
  RejectCounters c3;
  const DecodeResult r3 =
      DecodeTicks("*", R"([{"s":"A","t":1,"p":1},{"s":"B","t":1,"p":1},{"s":"C","t":1,"p":1}])",
                  WireEncoding::kJson, kLimit, absl::Span<Tick>(out, 2), &c3);
  CHECK(r3.n_ticks == 0);
  CHECK(c3.Get(RejectReason::kBatchTooLarge) == 1);
  CHECK(c3.Total() == 1);

  RejectCounters c4;
  CHECK(DecodeTicks("*", " [ ] ", WireEncoding::kJson, kLimit, out, &c4).n_ticks == 0);
  CHECK(c4.Total() == 0);
}

TEST_CASE("every truncation of a valid message is rejected whole", "[wire]") {
  const std::vector<Tick> ticks = {MakeTick("ALDER.X", 12345, Tick::kPrice, 101.25, 3),
                                   MakeTick("B", 7, Tick::kReturn, -0.125)};
  std::string json, binary;
  EncodeBatchJson(ticks, &json);
  EncodeBatchBinary(ticks, &binary);
  Tick out[4];
  for (int which = 0; which < 2; ++which) {
    const std::string& full = which == 0 ? json : binary;
    const WireEncoding enc = which == 0 ? WireEncoding::kJson : WireEncoding::kBinary;
    const RejectReason expected =
        which == 0 ? RejectReason::kMalformedJson : RejectReason::kMalformedBinary;
    int wrong = 0;
    for (size_t n = 0; n < full.size(); ++n) {
      RejectCounters c;
      const DecodeResult r = DecodeTicks("*", full.substr(0, n), enc, kLimit, out, &c);
      if (r.n_ticks != 0 || c.Get(expected) != 1 || c.Total() != 1) ++wrong;
    }
    CHECK(wrong == 0);
    RejectCounters c;
    CHECK(DecodeTicks("*", full, enc, kLimit, out, &c).n_ticks == 2);
  }
}

TEST_CASE("binary ticks and batches round-trip exactly", "[wire]") {
  std::vector<Tick> ticks = {MakeTick("ALDER.X", 1772443800000000000, Tick::kPrice, 101.25, 3),
                             MakeTick("B", 7, Tick::kReturn, -1.0 / 3.0),
                             MakeTick(std::string(32, 'z').c_str(), 0, Tick::kPrice, 5e-324)};
  std::string body;
  EncodeBatchBinary(ticks, &body);
  CHECK(body.size() == 4 + (26 + 7) + (26 + 1) + (26 + 32));
  Tick out[8];
  RejectCounters c;
  const DecodeResult r = DecodeTicks("*", body, WireEncoding::kBinary, kLimit, out, &c);
  REQUIRE(r.n_ticks == 3);
  CHECK(c.Total() == 0);
  for (int i = 0; i < 3; ++i) {
    CHECK(out[i].symbol == ticks[i].symbol);
    CHECK(out[i].t_ns == ticks[i].t_ns);
    CHECK(out[i].kind == ticks[i].kind);
    CHECK(out[i].value == ticks[i].value);
    CHECK(out[i].size == ticks[i].size);
  }
  EncodeTickBinary(ticks[1], &body);
  REQUIRE(DecodeTicks("B", body, WireEncoding::kBinary, kLimit, out, &c).n_ticks == 1);
  CHECK(out[0].value == -1.0 / 3.0);
  // Frame and record symbol must agree for a single-record message.
  CHECK(DecodeTicks("C", body, WireEncoding::kBinary, kLimit, out, &c).n_ticks == 0);
  CHECK(c.Get(RejectReason::kBadSymbol) == 1);
}

TEST_CASE("binary rejections: structure rejects the message, content the record", "[wire]") {
  std::vector<Tick> ticks = {MakeTick("A", 1, Tick::kPrice, 1), MakeTick("B", 2, Tick::kPrice, 2)};
  std::string good;
  EncodeBatchBinary(ticks, &good);
  Tick out[4];
  auto reason_count = [&](const std::string& body, RejectReason reason, int* n_ticks) {
    RejectCounters c;
    *n_ticks = DecodeTicks("*", body, WireEncoding::kBinary, kLimit, out, &c).n_ticks;
    return c.Get(reason) == 1 && c.Total() == 1;
  };
  int n = -1;
  std::string b = good;
  b[0] = 0x7b;  // a JSON body sent to a binary feed
  CHECK(reason_count(b, RejectReason::kMalformedBinary, &n));
  CHECK(n == 0);
  b = good;
  b[1] = 2;  // unknown version
  CHECK(reason_count(b, RejectReason::kMalformedBinary, &n));
  CHECK(reason_count(good.substr(0, good.size() - 1), RejectReason::kMalformedBinary, &n));
  CHECK(reason_count(good + "x", RejectReason::kMalformedBinary, &n));
  b = good;
  b[4] = 0;  // symbol length 0
  CHECK(reason_count(b, RejectReason::kMalformedBinary, &n));

  // Record-level: second record's price NaN, first record stays good.
  Tick bad = ticks[1];
  bad.value = std::numeric_limits<double>::quiet_NaN();
  EncodeBatchBinary({ticks[0], bad}, &b);
  CHECK(reason_count(b, RejectReason::kNonFinite, &n));
  CHECK(n == 1);
  bad.value = -2;
  EncodeBatchBinary({ticks[0], bad}, &b);
  CHECK(reason_count(b, RejectReason::kNonPositivePrice, &n));
  bad = ticks[1];
  bad.symbol.assign("B?");
  EncodeBatchBinary({bad, ticks[0]}, &b);
  CHECK(reason_count(b, RejectReason::kBadSymbol, &n));
  CHECK(n == 1);
  bad = ticks[1];
  bad.kind = static_cast<Tick::Kind>(5);
  EncodeBatchBinary({bad}, &b);
  CHECK(reason_count(b, RejectReason::kMalformedBinary, &n));
  bad = ticks[1];
  bad.t_ns = -5;
  EncodeBatchBinary({bad}, &b);
  CHECK(reason_count(b, RejectReason::kBadTime, &n));
  bad = ticks[1];
  bad.size = -1;
  EncodeBatchBinary({bad}, &b);
  CHECK(reason_count(b, RejectReason::kBadSize, &n));
  // Capacity.
  RejectCounters c;
  CHECK(
      DecodeTicks("*", good, WireEncoding::kBinary, kLimit, absl::Span<Tick>(out, 1), &c).n_ticks ==
      0);
  CHECK(c.Get(RejectReason::kBatchTooLarge) == 1);
}

TEST_CASE("decoding 10,000 messages does not allocate", "[wire][alloc]") {
  // Build the messages first (allocates), then decode them under the counter.
  std::vector<std::string> json_bodies, binary_bodies;
  std::vector<Tick> batch;
  for (int i = 0; i < 5000; ++i) {
    Tick t = MakeTick("ALDER.X", 1000 + i, i % 2 ? Tick::kPrice : Tick::kReturn,
                      i % 2 ? 100.0 + i * 0.01 : 1e-4 * i, i);
    std::string s;
    EncodeTickJson(t, &s);
    json_bodies.push_back(s);
    EncodeTickBinary(t, &s);
    binary_bodies.push_back(s);
    if (i < 64) batch.push_back(t);
  }
  std::string json_batch, binary_batch;
  EncodeBatchJson(batch, &json_batch);
  EncodeBatchBinary(batch, &binary_batch);
  // Include rejected messages: the rejection path must not allocate either.
  const std::string bad_json = R"({"t":1,"p":1,"extra":{"a":[1,2,"x"]}})";

  static Tick out[kMaxBatchTicks];
  RejectCounters c;
  long good = 0;
  StartCounting();
  for (int i = 0; i < 5000; ++i) {
    good += DecodeTicks("ALDER.X", json_bodies[i], WireEncoding::kJson, kLimit, out, &c).n_ticks;
    good +=
        DecodeTicks("ALDER.X", binary_bodies[i], WireEncoding::kBinary, kLimit, out, &c).n_ticks;
  }
  for (int i = 0; i < 10; ++i) {
    good += DecodeTicks("*", json_batch, WireEncoding::kJson, kLimit, out, &c).n_ticks;
    good += DecodeTicks("*", binary_batch, WireEncoding::kBinary, kLimit, out, &c).n_ticks;
    DecodeTicks("A", bad_json, WireEncoding::kJson, kLimit, out, &c);
  }
  const long allocations = StopCounting();
  CHECK(allocations == 0);
  CHECK(good == 10000 + 20 * 64);
  CHECK(c.Total() == 10);
  // Sanity check that the counter does count (so the zero above can fail).
  StartCounting();
  auto* probe = new std::string(100, 'x');
  const long probe_count = StopCounting();
  delete probe;
  CHECK(probe_count >= 1);
}

TEST_CASE("update encoding (JSON, binary, CSV row) does not allocate once the buffer has capacity",
          "[wire][alloc]") {
  BarUpdate u;
  u.symbol.assign("ALDER.X");
  u.t_ns = 123;
  u.r = 0.001;
  u.var = 1e-4;
  u.n_horizons = 3;
  u.horizons[0] = 1;
  u.horizons[1] = 5;
  u.horizons[2] = 20;
  u.n_levels = 2;
  u.levels[0] = 0.99;
  u.levels[1] = 0.975;
  u.flags = kFlagWarmup | kFlagGap;
  std::string out;
  out.reserve(1024);
  std::string bin;
  bin.reserve(1024);
  std::string csv;
  csv.reserve(1024);
  StartCounting();
  bool ok = true;
  for (int i = 0; i < 10000; ++i) {
    u.z = i * 0.001;
    u.t_ns = 1772443860000000000 + i * 250000000LL;  // with and without fractional seconds
    csv.clear();
    ok = ok && EncodeUpdateJson(u, &out).ok() && EncodeUpdateBinary(u, &bin).ok() &&
         AppendUpdateCsvRow(u, &csv).ok();
  }
  const long allocations = StopCounting();
  CHECK(ok);
  CHECK(allocations == 0);
}

}  // namespace
}  // namespace aftershock
