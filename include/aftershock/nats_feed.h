// NatsFeed: the engine's tick source in scale-out mode ([feed] source =
// "nats"). It holds partition leases (partition_leases.h) and pulls the
// partitions it holds from the JetStream stream of [nats], handing each
// message [symbol][body] to the engine like the ZeroMQ source does (the body
// in the tick wire format, wire.h; the symbol decoded from the subject token,
// subject_token.h). NATS types stay in src/io/nats_feed.cc.
//
// Threads: a coordinator runs a lease round every lease_seconds / 3 and starts
// or stops one reader thread per held partition; a reader takes its partition
// from an ordered consumer (ephemeral, in stream order, no acknowledgements:
// the position is ours; not a pull consumer, see nats_feed.cc for the libnats
// 3.4.1 defect that rules out natsSubscription_Fetch) in batches of up to
// `fetch_batch`, and queues the messages for the ingest thread, signalling an
// eventfd (ReadinessFd). Without lanes (below) a reader starts at the
// stream's first message of the partition, or, when this instance held the
// partition before, right after the last message it fetched then, so its
// symbols' state is continued without a gap. If no lease round succeeds for lease_seconds (the
// broker is unreachable), every reader stops: the leases may have passed to
// other instances, which then own those symbols.
// Pump takes one lock per call (not per tick) to move up to max_messages
// queued messages, and hands the consumed buffers back to the readers, which
// free them; its buffers are reused, so in steady state the ingest thread
// neither allocates nor frees.
//
// Partition lanes (NatsFeedOptions::partitions set; what `aftershock run`
// uses): each held partition is filtered by its own engine state (a
// PartitionConsumer lane, partition_lanes.h), checkpointed on its own into
// the [nats] checkpoint_bucket (partition_checkpoints.h) with the stream
// sequence it covers, and handed over with that checkpoint:
//   * start (claim, takeover, restart): the coordinator reads the partition's
//     checkpoint; a usable one (parses, same state-relevant configuration) is
//     restored by the lane and the reader starts right after its sequence S;
//     without one the lane starts empty and the reader at the partition's
//     first message (the fallback: the whole partition is replayed);
//   * every [nats] checkpoint_seconds (OnClock, ingest thread) each lane that
//     took messages since its last checkpoint is serialized there and stored
//     by a writer thread. The cut is exact: the lane has applied every message
//     of its partition up to the last one handed to it (sequence S) and none
//     after, because a partition's messages reach it in stream order from
//     one queue;
//   * release (rebalancing surplus): the reader stops, then the lane takes
//     every message already queued, is checkpointed at that last sequence and
//     dropped WITHOUT closing its open bars (they are in the checkpoint; the
//     next holder completes them, so no partial bar is published); the lease
//     is released once the checkpoint is stored (or after lease_seconds / 3);
//   * lost lease or fence: the lane is dropped without a checkpoint (the new
//     holder continues from the last stored one);
//   * OnStopped (clean shutdown, after the engine's loop ended): every lane is
//     checkpointed and dropped, then every lease released.
// A reader that catches up after a start logs the replay it did (messages,
// seconds, messages per second).
// Without lanes, every message goes to the engine's consumer, no checkpoint
// is written, and a partition's new holder reads it from its first message.
//
// Destruction is the clean shutdown: readers stop and every lease is
// released at once (no expiry wait for the survivors).
//
// Thread-safety: TickSource, BarObserver and MetricsSource methods on the
// ingest thread (as for every source); stats() from any thread.
#ifndef AFTERSHOCK_NATS_FEED_H_
#define AFTERSHOCK_NATS_FEED_H_

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "aftershock/engine_config.h"
#include "aftershock/ingest_core.h"
#include "aftershock/partition_leases.h"
#include "aftershock/tick_source.h"

namespace aftershock {

class Checkpoint;

// Per-partition engine state fed by a NatsFeed (partition_lanes.h implements
// it). Every method on the ingest thread.
class PartitionConsumer {
 public:
  virtual ~PartitionConsumer() = default;
  // Partition p begins (its messages follow). `checkpoint`: the state to
  // restore, or null to start empty. An error leaves the partition empty
  // (the feed logs it).
  virtual absl::Status StartPartition(int partition, const Checkpoint* checkpoint) = 0;
  // One message of partition p, in stream order.
  virtual void OnPartitionMessage(int partition, absl::string_view symbol,
                                  absl::string_view body) = 0;
  // The partition's state now as a checkpoint file's bytes (content of *out
  // replaced); `now_ns` is stamped as its creation time.
  virtual absl::Status CheckpointPartition(int partition, int64_t now_ns, std::string* out) = 0;
  // Drops the partition's state; open bars are neither closed nor published.
  virtual void StopPartition(int partition) = 0;
};

struct NatsFeedOptions {
  int fetch_batch = 512;        // messages a reader queues under one lock; default 512
  int64_t fetch_wait_ms = 100;  // longest wait for a partition's next message, ms; default 100
  // Release every lease on destruction (the clean shutdown) and, with lanes,
  // checkpoint every partition in OnStopped. false leaves the leases to expire
  // and writes no final checkpoints, as after a crash (tests of the takeover
  // path). Default true.
  bool release_on_destroy = true;
  // Per-partition lanes with checkpoints in JetStream (see above); not owned,
  // used on the ingest thread only. null (default): one consumer for all.
  PartitionConsumer* partitions = nullptr;
};

struct NatsFeedStats {
  std::string instance;            // this instance's name in the lease bucket
  std::vector<int> partitions;     // partitions being read now, ascending
  LeaseStats leases;               // lease round counters
  uint64_t lease_errors = 0;       // rounds that failed (broker unreachable, ...)
  uint64_t fenced = 0;             // times every reader stopped: a lease unconfirmed too long
  uint64_t consumer_restarts = 0;  // readers' consumers found silent and created again
  uint64_t messages = 0;           // messages handed to the engine
  uint64_t bad_subjects = 0;       // messages whose subject token did not decode
  // Messages of the held partitions not yet handed to the engine: queued
  // here plus the broker's pending count after the last fetch.
  uint64_t replay_lag = 0;
  int64_t last_round_ns = 0;  // wall time of the last successful round; 0 = none
  // Partition lanes only:
  uint64_t checkpoints_written = 0;  // partition checkpoints stored
  uint64_t checkpoint_failures = 0;  // serializations or stores that failed
  uint64_t restores = 0;             // partitions started from a stored checkpoint
  uint64_t fresh_starts = 0;         // partitions started empty (no usable checkpoint)
  uint64_t last_checkpoint_bytes = 0;
  // Age of the oldest held partition's stored state, s: since the snapshot
  // of its last stored checkpoint was taken, or since the last checkpoint
  // round found it current (no message since); -1 = a held partition has
  // none yet.
  double checkpoint_age_seconds = -1;
};

class NatsFeed : public TickSource, public MetricsSource, public BarObserver {
 public:
  // Connects, ensures the stream, opens the lease bucket and starts the
  // coordinator (the first round runs before Open returns).
  static absl::StatusOr<std::unique_ptr<NatsFeed>> Open(const EngineConfig& config,
                                                        const NatsFeedOptions& options = {});
  ~NatsFeed() override = default;

  virtual NatsFeedStats stats() const = 0;

  // BarObserver (add the feed to the engine's core): OnClock writes the due
  // partition checkpoints.
  void OnBar(IngestCore*, int, const ClosedBar&, BarUpdate*) override {}
};

}  // namespace aftershock

#endif  // AFTERSHOCK_NATS_FEED_H_
