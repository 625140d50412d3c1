// Partition leases in a JetStream key-value bucket, against a real
// nats-server -js: balancing across live instances, release on clean
// shutdown, takeover after expiry, loss detection by compare-and-set.
#include "aftershock/partition_leases.h"

#include <catch2/catch.hpp>
#include <chrono>
#include <set>
#include <string>
#include <thread>
#include <vector>

#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

// One lease round for each instance (in order); returns the last results.
std::vector<LeaseRound> RoundAll(const std::vector<PartitionLeases*>& all) {
  std::vector<LeaseRound> out;
  for (PartitionLeases* l : all) {
    auto r = l->Round();
    REQUIRE(r.ok());
    if (!r->surplus.empty()) REQUIRE(l->Release(r->surplus).ok());
    out.push_back(*r);
  }
  return out;
}

// Partitions held per instance after `rounds` rounds of everybody.
std::vector<std::set<int>> Settle(const std::vector<PartitionLeases*>& all, int rounds) {
  std::vector<LeaseRound> last;
  for (int i = 0; i < rounds; ++i) last = RoundAll(all);
  std::vector<std::set<int>> held;
  for (const LeaseRound& r : last) {
    std::set<int> s(r.owned.begin(), r.owned.end());
    for (int p : r.surplus) s.erase(p);
    held.push_back(s);
  }
  return held;
}

// True when the sets are disjoint and cover 0..n-1.
bool Partitioned(const std::vector<std::set<int>>& held, int n) {
  std::set<int> all;
  size_t total = 0;
  for (const auto& s : held) {
    all.insert(s.begin(), s.end());
    total += s.size();
  }
  return total == static_cast<size_t>(n) && all.size() == static_cast<size_t>(n) &&
         *all.begin() == 0 && *all.rbegin() == n - 1;
}

TEST_CASE("leases balance, hand over on release and are taken over after expiry") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("partition_leases"));
  NatsConfig nc;
  nc.servers = {server.url()};
  nc.partitions = 12;
  nc.lease_seconds = 2;
  nc.lease_bucket = "leases_test";

  auto a = PartitionLeases::Open(nc, "eng-a");
  auto b = PartitionLeases::Open(nc, "eng-b");
  auto c = PartitionLeases::Open(nc, "eng-c");
  REQUIRE(a.ok());
  REQUIRE(b.ok());
  REQUIRE(c.ok());
  CHECK(!PartitionLeases::Open(nc, "bad name").ok());

  // Alone, A claims everything.
  auto first = (*a)->Round();
  REQUIRE(first.ok());
  CHECK(first->owned.size() == 12);
  CHECK(first->acquired.size() == 12);
  CHECK(first->taken_over.empty());
  CHECK(first->share == 12);

  // B and C join: A gives up its surplus, the others claim the released
  // partitions; three rounds settle at 4 + 4 + 4.
  std::vector<PartitionLeases*> abc = {a->get(), b->get(), c->get()};
  std::vector<std::set<int>> held = Settle(abc, 3);
  CHECK(Partitioned(held, 12));
  for (const auto& s : held) CHECK(s.size() == 4);
  CHECK((*a)->stats().releases == 8);
  CHECK((*b)->stats().takeovers == 0);  // handed over, not expired
  CHECK((*a)->stats().renewals > 0);

  auto view = ReadClusterAssignment(nc);
  REQUIRE(view.ok());
  CHECK(view->instances == std::vector<std::string>{"eng-a", "eng-b", "eng-c"});
  REQUIRE(view->partitions.size() == 12);
  for (const PartitionAssignment& p : view->partitions) {
    const std::string want = held[0].count(p.partition)   ? "eng-a"
                             : held[1].count(p.partition) ? "eng-b"
                                                          : "eng-c";
    CHECK(p.owner == want);
    CHECK(p.revision > 0);
    CHECK(p.written_ns > 0);
  }

  // B stops renewing (a hung or killed process). Within the lease time plus a
  // bounded margin its keys expire and A and C take its partitions over.
  const std::set<int> b_had = held[1];
  std::vector<PartitionLeases*> ac = {a->get(), c->get()};
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(12);
  std::vector<std::set<int>> ac_held;
  while (std::chrono::steady_clock::now() < deadline) {
    ac_held = Settle(ac, 1);
    if (Partitioned(ac_held, 12)) break;
    std::this_thread::sleep_for(std::chrono::milliseconds(200));
  }
  REQUIRE(Partitioned(ac_held, 12));
  CHECK(ac_held[0].size() == 6);
  CHECK(ac_held[1].size() == 6);
  CHECK((*a)->stats().takeovers + (*c)->stats().takeovers == b_had.size());

  // B comes back: every lease it thought it held is reported lost (the
  // compare-and-set on its old revision fails or the key is someone else's).
  auto back = (*b)->Round();
  REQUIRE(back.ok());
  CHECK(std::set<int>(back->lost.begin(), back->lost.end()) == b_had);
  CHECK((*b)->stats().lost == b_had.size());
  held = Settle(abc, 3);
  CHECK(Partitioned(held, 12));
  for (const auto& s : held) CHECK(s.size() == 4);

  // Clean shutdown of A: its partitions are free at once (no expiry wait) and
  // it leaves the live list; B and C split the 12.
  REQUIRE((*a)->ReleaseAll().ok());
  a->reset();
  std::vector<PartitionLeases*> bc = {b->get(), c->get()};
  held = Settle(bc, 3);
  CHECK(Partitioned(held, 12));
  CHECK(held[0].size() == 6);
  CHECK(held[1].size() == 6);
  view = ReadClusterAssignment(nc);
  REQUIRE(view.ok());
  CHECK(view->instances == std::vector<std::string>{"eng-b", "eng-c"});
}

TEST_CASE("after failed rounds the first successful one re-claims only the instance's own leases") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("partition_leases_outage"));
  NatsConfig nc;
  nc.servers = {server.url()};
  nc.partitions = 12;
  nc.lease_seconds = 2;
  nc.lease_bucket = "leases_outage";
  auto a = PartitionLeases::Open(nc, "eng-a");
  auto b = PartitionLeases::Open(nc, "eng-b");
  auto c = PartitionLeases::Open(nc, "eng-c");
  REQUIRE(a.ok());
  REQUIRE(b.ok());
  REQUIRE(c.ok());
  std::vector<PartitionLeases*> abc = {a->get(), b->get(), c->get()};
  const std::vector<std::set<int>> held = Settle(abc, 3);
  REQUIRE(Partitioned(held, 12));
  REQUIRE(held[0].size() == 4);
  CHECK((*a)->confirmed_since() <= std::chrono::steady_clock::now());

  // The broker stops answering for longer than the lease: A's round fails
  // (each request waits 0.25 s and is tried again until the deadline).
  server.Pause();
  const auto before = std::chrono::steady_clock::now();
  auto failed = (*a)->Round(before + std::chrono::milliseconds(600));
  CHECK(!failed.ok());
  CHECK(std::chrono::steady_clock::now() - before < std::chrono::seconds(2));
  CHECK((*a)->stats().retries > 0);
  std::this_thread::sleep_for(std::chrono::milliseconds(2500));
  server.Resume();
  // Every key expires (nothing was written for longer than the TTL).
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(15);
  bool expired = false;
  while (!expired && std::chrono::steady_clock::now() < deadline) {
    auto view = ReadClusterAssignment(nc);
    expired = view.ok() && view->instances.empty();
    for (const PartitionAssignment& p :
         view.ok() ? view->partitions : std::vector<PartitionAssignment>{}) {
      expired = expired && p.owner.empty();
    }
    if (!expired) std::this_thread::sleep_for(std::chrono::milliseconds(100));
  }
  REQUIRE(expired);

  // A alone sees no other live instance (share 12), but after its failed
  // round it re-claims only the 4 it held: B and C, not seen yet, may be
  // about to announce themselves again.
  auto back = (*a)->Round();
  REQUIRE(back.ok());
  CHECK(back->live_instances == 1);
  CHECK(back->share == 12);
  CHECK(std::set<int>(back->owned.begin(), back->owned.end()) == held[0]);
  CHECK(back->taken_over.empty());
  // The next round is an ordinary one: A claims the rest.
  auto next = (*a)->Round();
  REQUIRE(next.ok());
  CHECK(next->owned.size() == 12);
  CHECK(next->taken_over.size() == 8);  // B's and C's leases expired
}

TEST_CASE("cluster assignment of a bucket that does not exist is NotFound") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("partition_leases_none"));
  NatsConfig nc;
  nc.servers = {server.url()};
  nc.lease_bucket = "never_created";
  auto view = ReadClusterAssignment(nc);
  CHECK(absl::IsNotFound(view.status()));
}

}  // namespace
}  // namespace aftershock
