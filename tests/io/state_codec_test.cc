#include "aftershock/state_codec.h"

#include <cmath>
#include <limits>

#include "catch2/catch.hpp"

namespace aftershock {
namespace {

TEST_CASE("StateWriter and StateReader round-trip exact bit patterns") {
  StateWriter w;
  w.U8(7);
  w.Bool(true);
  w.U32(0xDEADBEEF);
  w.U64(0x0123456789ABCDEFULL);
  w.I32(-5);
  w.I64(std::numeric_limits<int64_t>::min());
  w.F64(0.1);
  w.F64(-0.0);
  w.F64(std::numeric_limits<double>::denorm_min());
  w.Bytes("BRANDR.NRG");
  StateReader r(w.data());
  CHECK(r.U8("a") == 7);
  CHECK(r.Bool("b"));
  CHECK(r.U32("c") == 0xDEADBEEF);
  CHECK(r.U64("d") == 0x0123456789ABCDEFULL);
  CHECK(r.I32("e") == -5);
  CHECK(r.I64("f") == std::numeric_limits<int64_t>::min());
  CHECK(r.F64("g") == 0.1);
  const double nz = r.F64("h");
  CHECK(nz == 0.0);
  CHECK(std::signbit(nz));
  CHECK(r.F64("i") == std::numeric_limits<double>::denorm_min());
  CHECK(r.Bytes("j", 32) == "BRANDR.NRG");
  CHECK(r.Finish("record").ok());
}

TEST_CASE("StateReader: a short input is a sticky error naming the field, never a read past the end") {
  StateWriter w;
  w.U32(1);
  w.U64(2);
  const std::string full = w.data();
  for (size_t cut = 0; cut < full.size(); ++cut) {
    StateReader r(absl::string_view(full).substr(0, cut));
    r.U32("first");
    const uint64_t second = r.U64("second");
    CHECK_FALSE(r.ok());
    CHECK(second == 0);
    CHECK(r.status().code() == absl::StatusCode::kDataLoss);
    const std::string msg(r.status().message());
    CHECK((msg.find("first") != std::string::npos || msg.find("second") != std::string::npos));
    CHECK(msg.find("truncated") != std::string::npos);
  }
}

TEST_CASE("StateReader: limits, booleans and trailing bytes are checked") {
  StateWriter w;
  w.Bytes("abcdef");
  w.U8(2);
  w.U64(1000);
  {
    StateReader r(w.data());
    r.Bytes("name", 3);
    CHECK(r.status().message().find("exceeds the limit 3") != absl::string_view::npos);
  }
  {
    StateReader r(w.data());
    r.Bytes("name", 16);
    r.Bool("flag");
    CHECK(r.status().message().find("flag: expected 0 or 1, got 2") != absl::string_view::npos);
  }
  {
    StateReader r(w.data());
    r.Bytes("name", 16);
    r.U8("x");
    CHECK(r.Count("symbols", 999) == 0);
    CHECK(r.status().message().find("count 1000 exceeds the limit 999") !=
          absl::string_view::npos);
  }
  {
    StateReader r(w.data());
    r.Bytes("name", 16);
    CHECK_FALSE(r.Finish("record").ok());
    CHECK(r.status().message().find("9 unexpected trailing bytes") != absl::string_view::npos);
  }
}

}  // namespace
}  // namespace aftershock
