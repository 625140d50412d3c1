// End-to-end tests of `aftershock watch` (src/app/watch_command.cc): a test
// publisher sends known updates with the engine's message shape ([u.<symbol>]
// [body], JSON or binary from aftershock/update_codec.h) and the command's
// output must be exactly what the table model renders for them.
#include <catch2/catch.hpp>
#include <chrono>
#include <cstdio>
#include <string>
#include <thread>
#include <zmq.hpp>

#include "aftershock/update_codec.h"
#include "app/watch_table.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

BarUpdate Make(const char* sym, int64_t t_ns, double r, double z, double scale, uint32_t ver) {
  BarUpdate u;
  u.symbol.assign(sym);
  u.t_ns = t_ns;
  u.r = r;
  u.mu = 0;
  u.eps = r;
  u.var = 1e-6;
  u.z = z;
  u.var_next = 1.1e-6;
  u.vol_ann = 0.2;
  u.scale = scale;
  u.ver = ver;
  return u;
}

// XPUB test publisher: waits for `subs` subscription messages, then sends.
class TestPublisher {
 public:
  TestPublisher() : sock_(ctx_, zmq::socket_type::xpub) {
    sock_.set(zmq::sockopt::linger, 1000);
    sock_.set(zmq::sockopt::rcvtimeo, 10000);
    sock_.bind("tcp://127.0.0.1:*");
    endpoint_ = sock_.get(zmq::sockopt::last_endpoint);
  }
  const std::string& endpoint() const { return endpoint_; }
  bool WaitSubscriptions(int subs) {
    for (int i = 0; i < subs; ++i) {
      zmq::message_t m;
      if (!sock_.recv(m)) return false;
    }
    return true;
  }
  void SendText(const std::string& topic, const std::string& body) {
    sock_.send(zmq::buffer(topic), zmq::send_flags::sndmore);
    sock_.send(zmq::buffer(body), zmq::send_flags::none);
  }
  void Send(const BarUpdate& u, bool binary, const std::string& topic_prefix = "u.") {
    std::string body;
    REQUIRE((binary ? EncodeUpdateBinary(u, &body) : EncodeUpdateJson(u, &body)).ok());
    const std::string topic = topic_prefix + std::string(u.symbol.view());
    sock_.send(zmq::buffer(topic), zmq::send_flags::sndmore);
    sock_.send(zmq::buffer(body), zmq::send_flags::none);
  }

 private:
  zmq::context_t ctx_{1};
  zmq::socket_t sock_;
  std::string endpoint_;
};

constexpr int64_t k0931 = 1772443860000000000;  // 2026-03-02T09:31:00Z

TEST_CASE("watch --once prints the table of the first N updates (JSON and binary)") {
  TestPublisher pub;
  testing::CommandResult r;
  std::thread watcher([&] {
    r = testing::RunCli(
        {"watch", "--endpoint", pub.endpoint(), "--once", "--count", "3", "--timeout", "10"});
  });
  REQUIRE(pub.WaitSubscriptions(2));  // u. and a.
  const auto a = Make("SKJOLD.GAS", k0931, 0.004, 3.2, 0.5, 1);
  // A regime alert (alerts.h JSON) sets the symbol's regime column.
  pub.SendText("a.SKJOLD.GAS",
               R"({"s":"SKJOLD.GAS","t":1,"kind":"regime","rule":"regime_high",)"
               R"("severity":"warn","value":2.4,"threshold":2,"ver":1,"message":"x"})");
  const auto b = Make("BRANDR.NRG", k0931, -0.001, -0.7, 0.45, 2);
  const auto c = Make("ASKE.CRB", k0931, 0.0, 0.1, 0.6, 0);
  pub.Send(Make("IGNORED.X", k0931, 0, 0, 1, 0), false, "alert.");  // other topic: not subscribed
  pub.Send(a, false);
  pub.Send(b, true);
  pub.Send(c, false);
  watcher.join();
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  app::WatchTable want;
  want.ApplyAlert("SKJOLD.GAS", "regime", "regime_high");
  want.Apply(a);
  want.Apply(b);
  want.Apply(c);
  CHECK(r.out == want.Render(false));
  CHECK(r.out.find(" high ") != std::string::npos);
  CHECK(r.err.find("3 updates, 3 symbols, 0 undecodable messages") != std::string::npos);
}

TEST_CASE("watch prints one line per update when not on a terminal, with a symbol filter") {
  TestPublisher pub;
  testing::CommandResult r;
  std::thread watcher([&] {
    r = testing::RunCli({"watch", "--endpoint", pub.endpoint(), "--duration", "4", "--symbols",
                         "BRANDR.NRG,ASKE.CRB"});
  });
  REQUIRE(pub.WaitSubscriptions(4));  // u. and a. prefix subscriptions per symbol
  const auto a = Make("BRANDR.NRG", k0931, -0.001, -0.7, 0.45, 2);
  const auto b = Make("BRANDR.NRGX", k0931, 0.001, 0.7, 0.45, 2);  // prefix match, filtered
  const auto c = Make("ASKE.CRB", k0931 + 60000000000, 0.002, 4.1, 0.6, 0);
  pub.Send(a, true);
  pub.Send(b, false);
  pub.Send(c, false);
  watcher.join();
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  app::WatchTable fmt;
  CHECK(r.out == fmt.FormatLine(a) + "\n" + fmt.FormatLine(c) + "\n");
  CHECK(r.out.find(" !\n") != std::string::npos);  // z = 4.1 is marked
}

TEST_CASE("watch --mode table redraws in place at most ten times a second") {
  TestPublisher pub;
  testing::CommandResult r;
  std::thread watcher([&] {
    r = testing::RunCli(
        {"watch", "--endpoint", pub.endpoint(), "--duration", "4", "--mode", "table"});
  });
  REQUIRE(pub.WaitSubscriptions(1));
  // 200 updates in a burst, then more spread over about a second.
  for (int i = 0; i < 200; ++i) pub.Send(Make("BRANDR.NRG", k0931 + i, 0.001, 0.5, 0.4, 1), false);
  for (int i = 0; i < 20; ++i) {
    pub.Send(Make("SKJOLD.GAS", k0931 + i, 0.001, -3.5, 0.4, 1), true);
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  watcher.join();
  REQUIRE(r.exit_code == 0);
  size_t homes = 0;
  for (size_t at = r.out.find("\x1b[H"); at != std::string::npos;
       at = r.out.find("\x1b[H", at + 1)) {
    ++homes;
  }
  // 4 s (long enough for a loaded machine to deliver every update) at <= 10
  // redraws a second, plus the final redraw (ECMA-48 CSI H = cursor home).
  CHECK(homes >= 2);
  CHECK(homes <= 42);
  CHECK(r.out.rfind("\x1b[2J\x1b[?25l", 0) == 0);  // clear screen, hide cursor
  CHECK(r.out.find("\x1b[7m  -3.50\x1b[0m !") != std::string::npos);
  CHECK(r.out.substr(r.out.size() - 6) == "\x1b[?25h");  // cursor shown again at exit
  CHECK(r.err.find("220 updates, 2 symbols") != std::string::npos);
}

TEST_CASE("watch exits cleanly on SIGINT") {
  TestPublisher pub;
  // watch installs its handler before it connects, so once its subscriptions
  // reached the publisher the interrupt is handled (a fixed delay failed once
  // on a loaded machine). The shell starts it, waits for the test's go file,
  // interrupts it and exits with its status.
  const std::string go = testing::ScratchDir("watch_sigint") + "/subscribed";
  std::remove(go.c_str());
  testing::CommandResult r;
  std::thread shell([&] {
    r = testing::RunCommand({"/bin/sh", "-c",
                             "\"$0\" watch --endpoint \"$1\" & p=$!; "
                             "while [ ! -e \"$2\" ]; do sleep 0.05; done; kill -INT $p; wait $p",
                             AFTERSHOCK_CLI, pub.endpoint(), go});
  });
  const bool subscribed = pub.WaitSubscriptions(1);
  testing::WriteFile(go, "");
  shell.join();
  REQUIRE(subscribed);
  CHECK(r.exit_code == 0);
  CHECK(r.err == "aftershock watch: 0 updates, 0 symbols, 0 undecodable messages\n");
}

TEST_CASE("watch --once without updates times out with a message") {
  TestPublisher pub;
  auto r = testing::RunCli({"watch", "--endpoint", pub.endpoint(), "--once", "--timeout", "0.3"});
  CHECK(r.exit_code == 1);
  CHECK(r.err == "aftershock watch: no update from " + pub.endpoint() + " within 0.3 s\n");
  auto bad = testing::RunCli({"watch", "--refresh-ms", "10"});
  CHECK(bad.exit_code == 2);
  CHECK(bad.err == "aftershock watch: --refresh-ms must be an integer >= 100\n");
  auto no_scheme = testing::RunCli({"watch", "--endpoint", "localhost:7302", "--once"});
  CHECK(no_scheme.exit_code == 2);
  CHECK(no_scheme.err ==
        "aftershock watch: --endpoint: endpoint 'localhost:7302' names no transport; did you "
        "mean 'tcp://localhost:7302'?\n");
}

}  // namespace
}  // namespace aftershock
