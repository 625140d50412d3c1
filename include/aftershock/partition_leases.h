// PartitionLeases: which engine instance filters which partition of the tick
// stream, agreed through leases in a JetStream key-value bucket ([nats]
// lease_bucket) instead of coordination of our own.
//
// Bucket layout (history 1, TTL = [nats] lease_seconds, so a key that is not
// rewritten within the lease time disappears):
//   i.<instance>  "alive"      heartbeat of a live instance, rewritten every round
//   members       "a\nb\nc"    names of the instances that announced themselves,
//                              sorted, one a line; rewritten every round
//   p.<n>         "<instance>" lease of partition n (0-based) held by <instance>
//   p.<n>         ""           released on clean shutdown or rebalancing: free
// A round (Round(), every lease_seconds / 3 from the feed; sooner after a
// failed one) reads and writes single keys only: no request of a round creates
// a consumer (listing a bucket does, and a consumer placed on a dead server
// answers nothing: rounds timed out for minutes after a server died). It:
//   1. rewrites i.<me>; reads `members` and the heartbeat of every name in it;
//      the live instances are the names whose heartbeat is present, plus this
//      one; writes that set back with compare-and-set on the revision it read
//      (create-if-absent when absent), re-reading on a conflict, so a joining
//      instance is never dropped and a dead one is dropped once its heartbeat
//      expired;
//   2. reads every p.<n> (the partition count is known) and renews each lease
//      it holds with compare-and-set on the revision it read (kvStore_Update):
//      if someone else wrote the key, the lease is lost;
//   3. its share is partitions / live, plus one for the first
//      (partitions % live) instances in name order (the shares sum to the
//      partition count, so every partition has exactly one target owner);
//   4. below its share it claims free partitions: absent keys with
//      create-if-absent (kvStore_Create), released ones with compare-and-set
//      on their revision; a claim another instance won first is skipped;
//   5. above its share it names the surplus; the caller stops reading those
//      partitions and then calls Release() for them.
// Every request waits at most LeaseTiming::request_ms and is tried again
// (a timeout, "no responders" while a bucket elects its leader, a
// reconnection) until the round's deadline, so one lost request does not cost
// a round. A write tried again after a timeout may find its first attempt
// stored: a failed compare-and-set is followed by a read, and a key holding
// this instance's name is its own (only the holder writes its name).
// An instance that dies stops renewing; after lease_seconds the broker drops
// its keys and the survivors' next rounds claim the partitions (a takeover).
// Two instances never hold one lease: every write is conditional on the
// revision (or absence) the writer saw. A holder that cannot renew stops
// reading before its lease can expire: confirmed_since() + lease_seconds -
// LeaseTiming::fence_margin_ms (the feed's fence).
//
// Thread-safety: a PartitionLeases is used by one thread (the feed's
// coordinator); ReadClusterAssignment is reentrant.
#ifndef AFTERSHOCK_PARTITION_LEASES_H_
#define AFTERSHOCK_PARTITION_LEASES_H_

#include <chrono>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/engine_config.h"

namespace aftershock {

// What one round changed. Partition numbers ascending.
struct LeaseRound {
  std::vector<int> owned;       // held after the round (acquired included, surplus included)
  std::vector<int> acquired;    // claimed in this round
  std::vector<int> taken_over;  // subset of acquired whose last seen holder was another
                                // instance that did not release it (its lease expired)
  std::vector<int> lost;        // held before, found written by another instance or expired
  std::vector<int> surplus;     // held, above this instance's share: stop reading, Release()
  int live_instances = 0;       // members with a live heartbeat, this instance included
  int share = 0;                // this instance's target number of partitions
};

// Counters since Open. Plain values.
struct LeaseStats {
  uint64_t rounds = 0;
  uint64_t renewals = 0;      // successful compare-and-set renewals
  uint64_t acquisitions = 0;  // partitions claimed
  uint64_t takeovers = 0;     // claims of partitions whose holder's lease expired
  uint64_t releases = 0;      // partitions released (rebalancing, shutdown)
  uint64_t lost = 0;          // leases found expired or taken
  uint64_t retries = 0;       // requests tried again within a round (timeouts, no responders)
  uint64_t adopted = 0;       // writes whose retry found the first attempt stored
};

// Timing derived from [nats] lease_seconds (T). Plain values, milliseconds.
struct LeaseTiming {
  int64_t period_ms = 0;        // between successful rounds: T / 3, at least 100
  int64_t retry_ms = 0;         // after a failed round: min(period, 250)
  int64_t request_ms = 0;       // one request's wait: T / 8 within [250, 1000]
  int64_t fence_margin_ms = 0;  // stop reading this long before the oldest
                                // confirmed lease can expire: max(T / 10, 200)
};
LeaseTiming LeaseTimingFor(double lease_seconds);

class PartitionLeases {
 public:
  // Opens (creating if absent) the lease bucket. `instance` names this engine
  // in the bucket. REQUIRES: instance is 1..64 bytes of [A-Za-z0-9_-].
  static absl::StatusOr<std::unique_ptr<PartitionLeases>> Open(const NatsConfig& config,
                                                               const std::string& instance);
  virtual ~PartitionLeases() = default;

  // One round (see above), its requests tried again until `deadline`.
  // Unavailable when the broker cannot be reached in time; the leases then
  // expire unless a later round succeeds in time.
  virtual absl::StatusOr<LeaseRound> Round(std::chrono::steady_clock::time_point deadline) = 0;
  // The same with a deadline one LeaseTiming::period_ms from now.
  virtual absl::StatusOr<LeaseRound> Round() = 0;
  // When the write that confirmed the oldest held lease was sent (the broker
  // keeps that lease at least lease_seconds past it); time_point::max() when
  // none is held. Leases whose renewal failed keep their older time.
  virtual std::chrono::steady_clock::time_point confirmed_since() const = 0;
  // Marks these held partitions free (compare-and-set; one already lost is
  // skipped). The caller has stopped reading them.
  virtual absl::Status Release(absl::Span<const int> partitions) = 0;
  // Clean shutdown: releases every held partition and deletes i.<instance>.
  virtual absl::Status ReleaseAll() = 0;
  virtual LeaseStats stats() const = 0;
  virtual const std::string& instance() const = 0;
};

// The instance name used when [nats] instance is "": "<hostname>-<pid>" with
// every byte outside [A-Za-z0-9_-] replaced by '-', cut to 64 bytes.
std::string DefaultInstanceName();

// The assignment as the bucket holds it now (for `aftershock cluster status`).
struct PartitionAssignment {
  int partition = 0;
  std::string owner;      // "" = free (released, expired or never claimed)
  uint64_t revision = 0;  // key revision; 0 when the key is absent
  int64_t written_ns =
      0;  // when the key was last written (broker time, ns since epoch); 0 = absent
};
struct ClusterAssignment {
  std::vector<PartitionAssignment> partitions;  // one per partition, in order
  std::vector<std::string> instances;           // live instances (members with a heartbeat), sorted
};
// NotFound when the bucket does not exist yet.
absl::StatusOr<ClusterAssignment> ReadClusterAssignment(const NatsConfig& config);

}  // namespace aftershock

#endif  // AFTERSHOCK_PARTITION_LEASES_H_
