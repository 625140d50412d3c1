// The documented JSON wire format, used from another language: a pyzmq
// publisher and subscriber (Debian python3-zmq) around the built `aftershock run`.
#include <catch2/catch.hpp>

#include "support/test_support.h"

namespace aftershock {
namespace {

TEST_CASE("pyzmq publisher and subscriber round trip through `aftershock run`", "[app][zmq]") {
  const std::string dir = testing::ScratchDir("pyzmq_roundtrip");
  // Reference: the script's own Python evaluation of the GARCH(1,1) recursion
  // (Bollerslev 1986), independent of the C++ filter.
  // json: per-symbol updates and JSON batches on b.u, which must be equal;
  // binary: binary batches only, decoded in Python from the documented layout.
  const std::string mode = GENERATE("json", "binary");
  const auto r = testing::RunPython("pyzmq_roundtrip.py", {AFTERSHOCK_CLI, dir, mode});
  INFO(r.out << r.err);
  CHECK(r.exit_code == 0);
  CHECK(r.out.rfind("OK 120 updates (" + mode + "; 120 in batches)", 0) == 0);
}

}  // namespace
}  // namespace aftershock
