// JetStreamTickPublisher against a real nats-server -js: a server that stops
// answering (SIGSTOP) loses no tick and stores none twice, each symbol's
// ticks stay in order; a tick that is never acknowledged fails the publisher
// after the give-up time; a duplicate window shorter than the give-up time is
// refused at Connect.
#include "aftershock/jetstream_publisher.h"

#include <nats/nats.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <cstdio>
#include <map>
#include <string>
#include <thread>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/engine_config.h"
#include "aftershock/subject_token.h"
#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

// 6 invented symbols x `rounds` ticks, one per symbol and round, times
// increasing.
std::vector<Tick> Ticks(int rounds) {
  std::vector<Tick> out;
  int64_t t = 1772443800000000000;
  for (int r = 0; r < rounds; ++r) {
    for (int s = 0; s < 6; ++s) {
      Tick tick;
      tick.symbol.assign(absl::StrCat("QW", s, s % 2 ? ".X" : ""));
      tick.t_ns = t;
      tick.value = 100.0 + r * 0.01 + s;
      out.push_back(tick);
      t += 1000000;
    }
  }
  return out;
}

// Every message of `stream` in stream order: (subject, body).
std::vector<std::pair<std::string, std::string>> ReadStream(const std::string& url,
                                                            const std::string& stream) {
  std::vector<std::pair<std::string, std::string>> out;
  natsConnection* conn = nullptr;
  REQUIRE(natsConnection_ConnectTo(&conn, url.c_str()) == NATS_OK);
  jsCtx* js = nullptr;
  REQUIRE(natsConnection_JetStream(&js, conn, nullptr) == NATS_OK);
  jsStreamInfo* si = nullptr;
  REQUIRE(js_GetStreamInfo(&si, js, stream.c_str(), nullptr, nullptr) == NATS_OK);
  const uint64_t last = si->State.LastSeq;
  CHECK(si->State.Msgs == last);  // nothing deleted: sequences 1..last
  jsStreamInfo_Destroy(si);
  for (uint64_t seq = 1; seq <= last; ++seq) {
    natsMsg* msg = nullptr;
    REQUIRE(js_GetMsg(&msg, js, stream.c_str(), seq, nullptr, nullptr) == NATS_OK);
    out.emplace_back(natsMsg_GetSubject(msg),
                     std::string(natsMsg_GetData(msg), natsMsg_GetDataLength(msg)));
    natsMsg_Destroy(msg);
  }
  jsCtx_Destroy(js);
  natsConnection_Destroy(conn);
  return out;
}

TEST_CASE("a server that stops answering: every tick stored once, each symbol in order") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("js_publisher_pause"));
  NatsConfig nc;
  nc.servers = {server.url()};
  JetStreamPublisherOptions o;
  o.ack_timeout_ms = 300;
  o.retry_delay_ms = 100;
  o.give_up_ms = 30000;
  auto pub = JetStreamTickPublisher::Connect(nc, o);
  REQUIRE(pub.ok());
  const std::vector<Tick> ticks = Ticks(40);
  // The first half is acknowledged at once; the second half is published
  // while the server is paused for 1.5 s, so every tick in flight then times
  // out and is resent, and the paused server later reads the first copies and
  // the resent ones from its socket.
  const size_t half = ticks.size() / 2;
  for (size_t i = 0; i < half; ++i) REQUIRE((*pub)->Publish(ticks[i]).ok());
  REQUIRE((*pub)->Flush(10000).ok());
  server.Pause();
  std::thread resume([&server] {
    std::this_thread::sleep_for(std::chrono::milliseconds(1500));
    server.Resume();
  });
  for (size_t i = half; i < ticks.size(); ++i) REQUIRE((*pub)->Publish(ticks[i]).ok());
  const absl::Status flushed = (*pub)->Flush(20000);
  resume.join();
  INFO(flushed.ToString());
  REQUIRE(flushed.ok());
  const JetStreamPublisherStats st = (*pub)->stats();
  std::printf("paused server: %llu failed attempts, %llu resent, %llu already stored\n",
              static_cast<unsigned long long>(st.failed),
              static_cast<unsigned long long>(st.resent),
              static_cast<unsigned long long>(st.duplicates));
  CHECK(st.published == ticks.size());
  CHECK(st.acked == ticks.size());
  CHECK(st.failed > 0);
  CHECK(st.resent > 0);
  CHECK(st.duplicates > 0);  // the first copies reached the paused server

  // The stream holds each tick exactly once, and each symbol's ticks in the
  // order they were published.
  const auto stored = ReadStream(server.url(), nc.stream);
  CHECK(stored.size() == ticks.size());
  std::map<std::string, std::vector<std::string>> got, want;
  for (const auto& [subject, body] : stored) {
    got[subject.substr(subject.rfind('.') + 1)].push_back(body);
  }
  std::string body;
  for (const Tick& t : ticks) {
    EncodeTickJson(t, &body);
    want[EncodeSubjectToken(t.symbol.view())].push_back(body);
  }
  CHECK(got == want);
}

TEST_CASE("a tick never acknowledged fails the publisher after the give-up time") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("js_publisher_give_up"));
  NatsConfig nc;
  nc.servers = {server.url()};
  JetStreamPublisherOptions o;
  o.ack_timeout_ms = 200;
  o.retry_delay_ms = 50;
  o.give_up_ms = 1000;
  auto pub = JetStreamTickPublisher::Connect(nc, o);
  REQUIRE(pub.ok());
  const std::vector<Tick> ticks = Ticks(1);
  server.Pause();
  REQUIRE((*pub)->Publish(ticks[0]).ok());
  const auto t0 = std::chrono::steady_clock::now();
  const absl::Status s = (*pub)->Flush(20000);
  const double waited =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  // While the server still answers nothing, the next Publish fails at once
  // as well.
  const absl::Status again = (*pub)->Publish(ticks[0]);
  server.Resume();
  INFO(s.ToString());
  CHECK(absl::IsDeadlineExceeded(s));
  CHECK(s.message().find("tick of QW0 (message id 1.") != std::string::npos);
  CHECK(s.message().find("not acknowledged by JetStream 1 s after its first send") !=
        std::string::npos);
  CHECK(s.message().find("last error: Timeout") != std::string::npos);
  CHECK(waited < 5);  // the give-up, not the 20 s flush limit
  CHECK((*pub)->stats().resent >= 2);
  CHECK(absl::IsDeadlineExceeded(again));
}

TEST_CASE("a stream whose duplicate window is shorter than the give-up time is refused") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("js_publisher_window"));
  NatsConfig nc;
  nc.servers = {server.url()};
  nc.duplicate_window_seconds = 30;  // the stream is created with it
  JetStreamPublisherOptions o;
  o.give_up_ms = 29000;
  o.ack_timeout_ms = 2000;
  auto pub = JetStreamTickPublisher::Connect(nc, o);
  REQUIRE(!pub.ok());
  CHECK(absl::IsFailedPrecondition(pub.status()));
  CHECK(pub.status().message().find("drops duplicate ticks for 30 s, less than") !=
        std::string::npos);
  o.give_up_ms = 28000;  // 28 + 2 s fit
  CHECK(JetStreamTickPublisher::Connect(nc, o).ok());
}

}  // namespace
}  // namespace aftershock
