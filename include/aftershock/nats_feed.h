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
// eventfd (ReadinessFd). A reader starts at the stream's first
// message of the partition, or, when this instance held the partition before,
// right after the last message it fetched then, so its symbols' state is
// continued without a gap. If no lease round succeeds for lease_seconds (the
// broker is unreachable), every reader stops: the leases may have passed to
// other instances, which then own those symbols.
// Pump takes one lock per call (not per tick) to move up to max_messages
// queued messages, and hands the consumed buffers back to the readers, which
// free them; its buffers are reused, so in steady state the ingest thread
// neither allocates nor frees.
//
// Destruction is the clean shutdown: readers stop and every lease is
// released at once (no expiry wait for the survivors).
//
// Thread-safety: TickSource and MetricsSource methods on the ingest thread
// (as for every source); stats() from any thread.
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

struct NatsFeedOptions {
  int fetch_batch = 512;        // messages a reader queues under one lock; default 512
  int64_t fetch_wait_ms = 100;  // longest wait for a partition's next message, ms; default 100
  // Release every lease on destruction (the clean shutdown). false leaves them
  // to expire as after a crash (tests of the takeover path). Default true.
  bool release_on_destroy = true;
};

struct NatsFeedStats {
  std::string instance;              // this instance's name in the lease bucket
  std::vector<int> partitions;       // partitions being read now, ascending
  LeaseStats leases;                 // lease round counters
  uint64_t lease_errors = 0;         // rounds that failed (broker unreachable, ...)
  uint64_t fenced = 0;               // times every reader stopped for want of a lease round
  uint64_t messages = 0;             // messages handed to the engine
  uint64_t bad_subjects = 0;         // messages whose subject token did not decode
  // Messages of the held partitions not yet handed to the engine: queued
  // here plus the broker's pending count after the last fetch.
  uint64_t replay_lag = 0;
  int64_t last_round_ns = 0;         // wall time of the last successful round; 0 = none
};

class NatsFeed : public TickSource, public MetricsSource {
 public:
  // Connects, ensures the stream, opens the lease bucket and starts the
  // coordinator (the first round runs before Open returns).
  static absl::StatusOr<std::unique_ptr<NatsFeed>> Open(const EngineConfig& config,
                                                        const NatsFeedOptions& options = {});
  ~NatsFeed() override = default;

  virtual NatsFeedStats stats() const = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_NATS_FEED_H_
