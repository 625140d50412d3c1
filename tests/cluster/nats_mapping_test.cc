// The shipped server configuration (config/nats-server.conf) partitions tick
// subjects with the server's own partition() mapping: checked live against a
// real nats-server -js.
#include <nats/nats.h>

#include <catch2/catch.hpp>
#include <cstdint>
#include <map>
#include <set>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "aftershock/engine_config.h"
#include "aftershock/jetstream_publisher.h"
#include "aftershock/subject_token.h"
#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

// FNV-1a, 32 bit, of the token, modulo n: how nats-server's partition()
// chooses a partition (server/subject_transform.go, getHashPartition:
// fnv.New32a over the wildcard token, Sum32() % numBuckets).
int FnvPartition(const std::string& token, int n) {
  uint32_t h = 2166136261u;
  for (unsigned char c : token) {
    h ^= c;
    h *= 16777619u;
  }
  return static_cast<int>(h % static_cast<uint32_t>(n));
}

TEST_CASE("the shipped partition() mapping places every symbol in one partition") {
  testing::SkipUnlessNatsServer();
  const std::string dir = testing::ScratchDir("nats_mapping");
  testing::NatsServer server(dir);
  NatsConfig nc;
  nc.servers = {server.url()};
  nc.stream = "TICKS_MAP";
  auto pub = JetStreamTickPublisher::Connect(nc);
  REQUIRE(pub.ok());

  // Invented instruments, some with '.', ':' and '-' (the symbol alphabet).
  std::vector<std::string> symbols;
  for (int i = 0; i < 40; ++i) {
    symbols.push_back(absl::StrCat(i % 3 == 0 ? "QZ." : "Z", i, i % 4 == 1 ? ":X-1" : ""));
  }
  int64_t t = 1772443800000000000;
  for (int round = 0; round < 3; ++round) {
    for (const std::string& s : symbols) {
      Tick tick;
      tick.symbol.assign(s);
      tick.t_ns = t++;
      tick.value = 100.0 + round;
      REQUIRE((*pub)->Publish(tick).ok());
    }
  }
  REQUIRE((*pub)->Flush(10000).ok());
  CHECK((*pub)->stats().published == 3 * symbols.size());

  // Read every stored message back by stream sequence.
  natsConnection* conn = nullptr;
  REQUIRE(natsConnection_ConnectTo(&conn, server.url().c_str()) == NATS_OK);
  jsCtx* js = nullptr;
  REQUIRE(natsConnection_JetStream(&js, conn, nullptr) == NATS_OK);
  std::map<std::string, std::set<int>> partitions_of;
  std::set<int> used;
  for (uint64_t seq = 1; seq <= 3 * symbols.size(); ++seq) {
    natsMsg* msg = nullptr;
    REQUIRE(js_GetMsg(&msg, js, nc.stream.c_str(), seq, nullptr, nullptr) == NATS_OK);
    const std::vector<std::string> parts = absl::StrSplit(natsMsg_GetSubject(msg), '.');
    natsMsg_Destroy(msg);
    REQUIRE(parts.size() == 3);
    CHECK(parts[0] == "ticks-p");
    const int p = std::stoi(parts[1]);
    CHECK(p >= 0);
    CHECK(p < 12);
    auto symbol = DecodeSubjectToken(parts[2]);
    REQUIRE(symbol.ok());
    CHECK(FnvPartition(parts[2], 12) == p);
    partitions_of[*symbol].insert(p);
    used.insert(p);
  }
  jsCtx_Destroy(js);
  natsConnection_Destroy(conn);
  REQUIRE(partitions_of.size() == symbols.size());  // every symbol decoded back
  for (const auto& [s, ps] : partitions_of) {
    INFO(s);
    CHECK(ps.size() == 1);  // deterministic: all three ticks in one partition
  }
  CHECK(used.size() >= 8);  // 40 symbols spread over most of the 12 partitions
}

}  // namespace
}  // namespace aftershock
