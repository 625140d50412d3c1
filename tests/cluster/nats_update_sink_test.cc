// The NATS copy of the update stream, against a real nats-server: updates
// reach "<updates_subject>.<symbol token>" with the ZeroMQ body; other topics
// and the inner sink are untouched.
#include "aftershock/nats_update_sink.h"

#include <nats/nats.h>

#include <catch2/catch.hpp>
#include <string>

#include "streaming/engine_test_util.h"
#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

TEST_CASE("updates are copied to NATS subjects, alerts are not") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("nats_update_sink"));
  NatsConfig nc;
  nc.servers = {server.url()};
  nc.updates_subject = "md.upd";

  natsConnection* conn = nullptr;
  REQUIRE(natsConnection_ConnectTo(&conn, server.url().c_str()) == NATS_OK);
  natsSubscription* sub = nullptr;
  REQUIRE(natsConnection_SubscribeSync(&sub, conn, "md.upd.>") == NATS_OK);
  REQUIRE(natsConnection_Flush(conn) == NATS_OK);  // the interest is registered

  auto inner = std::make_unique<testing::CollectingSink>();
  testing::CollectingSink* raw = inner.get();
  auto sink = NatsUpdateSink::Open(nc, std::move(inner));
  REQUIRE(sink.ok());
  CHECK((*sink)->Send("u.QAL.X", "{\"s\":\"QAL.X\",\"t\":1}"));
  CHECK((*sink)->Send("a.QAL.X", "{\"kind\":\"shock\"}"));
  CHECK((*sink)->Send("u.QBR", "{\"s\":\"QBR\",\"t\":2}"));
  REQUIRE((*sink)->Flush().ok());
  CHECK(raw->messages.size() == 3);  // the inner sink got everything

  natsMsg* m = nullptr;
  REQUIRE(natsSubscription_NextMsg(&m, sub, 5000) == NATS_OK);
  CHECK(std::string(natsMsg_GetSubject(m)) == "md.upd.QAL~2EX");
  CHECK(std::string(natsMsg_GetData(m), natsMsg_GetDataLength(m)) == "{\"s\":\"QAL.X\",\"t\":1}");
  natsMsg_Destroy(m);
  REQUIRE(natsSubscription_NextMsg(&m, sub, 5000) == NATS_OK);
  CHECK(std::string(natsMsg_GetSubject(m)) == "md.upd.QBR");
  natsMsg_Destroy(m);
  // Nothing else: the alert stayed on the inner sink.
  CHECK(natsSubscription_NextMsg(&m, sub, 300) == NATS_TIMEOUT);
  CHECK((*sink)->nats_drops() == 0);

  natsSubscription_Destroy(sub);
  natsConnection_Destroy(conn);
}

}  // namespace
}  // namespace aftershock
