#include "aftershock/zmq_transport.h"

#include <zmq.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <string>
#include <thread>
#include <vector>
#include <zmq.hpp>

namespace aftershock {
namespace {

struct Recorder : TickConsumer {
  void OnMessage(absl::string_view topic, absl::string_view body) override {
    messages.push_back(std::string(topic) + "|" + std::string(body));
  }
  void OnMalformedMessage() override { ++malformed; }
  void OnTick(const Tick&) override {}
  std::vector<std::string> messages;
  int malformed = 0;
};

// Pumps until n messages arrived (or 5 s), sending `resend` meanwhile so the
// slow-joining subscription gets them once live.
void PumpUntil(TickSource* src, Recorder* rec, size_t n, const std::function<void()>& resend) {
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(5);
  while (rec->messages.size() < n && std::chrono::steady_clock::now() < deadline) {
    resend();
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
    src->Pump(rec, 100);
  }
}

TEST_CASE("SUB source: two-frame messages delivered, others counted malformed", "[zmq]") {
  zmq::context_t ctx;
  zmq::socket_t pub(ctx, zmq::socket_type::pub);
  pub.bind("tcp://127.0.0.1:*");
  auto transport = ZmqTransport::Create();
  REQUIRE(transport.ok());
  FeedConfig feed;
  feed.endpoints = {pub.get(zmq::sockopt::last_endpoint)};
  auto src = (*transport)->Subscribe(feed);
  REQUIRE(src.ok());
  CHECK((*src)->ReadinessFd() >= 0);
  Recorder rec;
  PumpUntil(src->get(), &rec, 1, [&] {
    pub.send(zmq::str_buffer("A.B"), zmq::send_flags::sndmore);
    pub.send(zmq::str_buffer("{}"), zmq::send_flags::none);
  });
  REQUIRE(!rec.messages.empty());
  CHECK(rec.messages[0] == "A.B|{}");
  rec.messages.clear();
  pub.send(zmq::str_buffer("ONE"), zmq::send_flags::none);
  pub.send(zmq::str_buffer("T"), zmq::send_flags::sndmore);
  pub.send(zmq::str_buffer("x"), zmq::send_flags::sndmore);
  pub.send(zmq::str_buffer("y"), zmq::send_flags::none);
  pub.send(zmq::str_buffer("C.D"), zmq::send_flags::sndmore);
  pub.send(zmq::str_buffer("body"), zmq::send_flags::none);
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(5);
  while (rec.messages.empty() && std::chrono::steady_clock::now() < deadline) {
    (*src)->Pump(&rec, 100);
  }
  CHECK(rec.malformed == 2);
  REQUIRE(rec.messages.size() == 1);
  CHECK(rec.messages[0] == "C.D|body");
}

TEST_CASE("PUB sink binds an ephemeral port and reports it; bad endpoints are errors", "[zmq]") {
  auto transport = ZmqTransport::Create();
  REQUIRE(transport.ok());
  PublishConfig pc;
  pc.endpoint = "tcp://127.0.0.1:*";
  auto sink = (*transport)->Publish(pc);
  REQUIRE(sink.ok());
  CHECK((*sink)->BoundEndpoint().rfind("tcp://127.0.0.1:", 0) == 0);
  CHECK((*sink)->BoundEndpoint() != pc.endpoint);
  pc.endpoint = "nonsense://x";
  auto bad = (*transport)->Publish(pc);
  REQUIRE(!bad.ok());
  CHECK(std::string(bad.status().message()) ==
        "[publish] endpoint 'nonsense://x' uses a transport other than tcp://, ipc:// or "
        "inproc://");
  FeedConfig fc;
  fc.endpoints = {"tcp://"};
  auto bad_sub = (*transport)->Subscribe(fc);
  REQUIRE(!bad_sub.ok());
  CHECK(std::string(bad_sub.status().message()) == "[feed] endpoint 'tcp://' has no address");
  // An address ZeroMQ itself refuses still names the endpoint.
  fc.endpoints = {"tcp://no-such-host-name:x"};
  auto refused = (*transport)->Subscribe(fc);
  REQUIRE(!refused.ok());
  CHECK(refused.status().message().find("[feed] cannot connect to 'tcp://no-such-host-name:x'") !=
        std::string::npos);
}

TEST_CASE("CheckEndpoint accepts ZeroMQ transports and suggests tcp:// for host:port", "[zmq]") {
  CHECK(CheckEndpoint("tcp://127.0.0.1:7302").ok());
  CHECK(CheckEndpoint("ipc:///tmp/feed").ok());
  CHECK(CheckEndpoint("inproc://x").ok());
  CHECK(std::string(CheckEndpoint("localhost:7302").message()) ==
        "endpoint 'localhost:7302' names no transport; did you mean 'tcp://localhost:7302'?");
  CHECK(std::string(CheckEndpoint("udp://1.2.3.4:5").message()).find("other than tcp://") !=
        std::string::npos);
  CHECK(std::string(CheckEndpoint("tcp://").message()) == "endpoint 'tcp://' has no address");
}

TEST_CASE("CURVE: publisher as server, subscriber as client", "[zmq][curve]") {
  if (!zmq_has("curve")) {
    WARN("libzmq built without CURVE; skipped");
    return;
  }
  char server_pub[41], server_sec[41];
  REQUIRE(zmq_curve_keypair(server_pub, server_sec) == 0);
  auto transport = ZmqTransport::Create();
  REQUIRE(transport.ok());

  // Our PUB as CURVE server; a CURVE client receives, a plain one does not.
  PublishConfig pc;
  pc.endpoint = "tcp://127.0.0.1:*";
  pc.curve_secret_key = server_sec;
  auto sink = (*transport)->Publish(pc);
  REQUIRE(sink.ok());
  zmq::context_t ctx;
  zmq::socket_t secure(ctx, zmq::socket_type::sub), plain(ctx, zmq::socket_type::sub);
  char cpub[41], csec[41];
  REQUIRE(zmq_curve_keypair(cpub, csec) == 0);
  secure.set(zmq::sockopt::curve_serverkey, std::string(server_pub, 40));
  secure.set(zmq::sockopt::curve_publickey, std::string(cpub, 40));
  secure.set(zmq::sockopt::curve_secretkey, std::string(csec, 40));
  secure.set(zmq::sockopt::subscribe, "");
  plain.set(zmq::sockopt::subscribe, "");
  secure.connect((*sink)->BoundEndpoint());
  plain.connect((*sink)->BoundEndpoint());
  bool got = false;
  for (int i = 0; i < 400 && !got; ++i) {
    (*sink)->Send("u.X", "hello");
    zmq::pollitem_t it{secure.handle(), 0, ZMQ_POLLIN, 0};
    got = zmq::poll(&it, 1, std::chrono::milliseconds(10)) > 0;
  }
  CHECK(got);
  zmq::message_t m;
  CHECK(!plain.recv(m, zmq::recv_flags::dontwait).has_value());

  // Our SUB as CURVE client of a CURVE server feed.
  zmq::socket_t feed(ctx, zmq::socket_type::pub);
  feed.set(zmq::sockopt::curve_server, 1);
  feed.set(zmq::sockopt::curve_secretkey, std::string(server_sec, 40));
  feed.bind("tcp://127.0.0.1:*");
  FeedConfig fc;
  fc.endpoints = {feed.get(zmq::sockopt::last_endpoint)};
  fc.curve_server_key = server_pub;
  auto src = (*transport)->Subscribe(fc);
  REQUIRE(src.ok());
  Recorder rec;
  PumpUntil(src->get(), &rec, 1, [&] {
    feed.send(zmq::str_buffer("S.Y"), zmq::send_flags::sndmore);
    feed.send(zmq::str_buffer("b"), zmq::send_flags::none);
  });
  REQUIRE(!rec.messages.empty());
  CHECK(rec.messages[0] == "S.Y|b");
}

}  // namespace
}  // namespace aftershock
