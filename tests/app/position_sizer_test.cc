// Test of the example subscriber tools/examples/position_sizer.py (run with
// Debian's /usr/bin/python3 and python3-zmq): a test publisher sends updates
// with known scales in both encodings of aftershock/update_codec.h, and the
// printed positions must follow the formula of the script's docstring,
//   base = capital * weight, target = base * scale, lots = round_half_away(target / lot),
// with the expected numbers worked out by hand below.
#include <catch2/catch.hpp>
#include <string>
#include <thread>
#include <zmq.hpp>

#include "aftershock/update_codec.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

BarUpdate Make(const char* sym, double scale, uint32_t flags) {
  BarUpdate u;
  u.symbol.assign(sym);
  u.t_ns = 1772443860000000000;  // 2026-03-02T09:31:00Z
  u.var = 1e-6;
  u.var_next = 1e-6;
  u.vol_ann = 0.2;
  u.scale = scale;
  u.flags = flags;
  return u;
}

TEST_CASE("position_sizer turns scales into lots for the example book") {
  zmq::context_t ctx(1);
  zmq::socket_t pub(ctx, zmq::socket_type::xpub);
  pub.set(zmq::sockopt::linger, 1000);
  pub.set(zmq::sockopt::rcvtimeo, 20000);
  pub.bind("tcp://127.0.0.1:*");
  const std::string ep = pub.get(zmq::sockopt::last_endpoint);

  testing::CommandResult r;
  std::thread consumer([&] {
    r = testing::RunCommand(
        {AFTERSHOCK_PYTHON,
         std::string(AFTERSHOCK_SOURCE_DIR) + "/tools/examples/position_sizer.py", "--endpoint", ep,
         "--count", "4", "--capital", "1000000", "--timeout", "20"});
  });
  zmq::message_t sub;
  REQUIRE(pub.recv(sub));  // the subscriber is connected: no slow-joiner loss
  auto send = [&](const BarUpdate& u, bool binary) {
    std::string body;
    REQUIRE((binary ? EncodeUpdateBinary(u, &body) : EncodeUpdateJson(u, &body)).ok());
    const std::string topic = "u." + std::string(u.symbol.view());
    pub.send(zmq::buffer(topic), zmq::send_flags::sndmore);
    pub.send(zmq::buffer(body), zmq::send_flags::none);
  };
  send(Make("SKJOLD.GAS", 0.5, 0), false);
  send(Make("BRANDR.NRG", 1.234, 0), true);
  send(Make("NOT.INBOOK", 2.0, 0), false);
  send(Make("HALVARD.FX", 3.0, kFlagWarmup), true);
  consumer.join();
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  // SKJOLD.GAS: weight 0.08, lot 25,000: base 80,000, target 40,000, 1.6 lots -> 2.
  CHECK(r.out.find("2026-03-02T09:31:00Z SKJOLD.GAS     scale=0.500 base=80,000 target=40,000 "
                   "lots=2\n") != std::string::npos);
  // BRANDR.NRG: weight 0.15, lot 50,000: 150,000 * 1.234 = 185,100, 3.702 lots -> 4.
  CHECK(r.out.find("BRANDR.NRG     scale=1.234 base=150,000 target=185,100 lots=4\n") !=
        std::string::npos);
  CHECK(r.out.find("NOT.INBOOK     scale=2.000  not in the book, skipped\n") != std::string::npos);
  // HALVARD.FX: weight 0.15, lot 100,000: 450,000 is 4.5 lots -> 5 (half away from zero).
  CHECK(r.out.find("HALVARD.FX     scale=3.000 base=150,000 target=450,000 lots=5  "
                   "(EWMA stand-in model)\n") != std::string::npos);
  // Final table: gross 40,000 + 185,100 + 450,000.
  CHECK(r.out.find("gross target 675,100 of capital 1,000,000; statistical estimates, not "
                   "advice") != std::string::npos);
  CHECK(r.err.find("position_sizer: 4 updates, 0 undecodable") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
