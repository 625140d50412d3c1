// JetStreamTickPublisher: sends ticks into the JetStream stream of [nats], one
// message per tick on "<subject>.<symbol token>" (subject_token.h) with a body
// in the existing tick wire format (wire.h, JSON or binary, single tick). The
// broker's partition() mapping (config/nats-server.conf) places it in its
// partition; the publisher knows nothing of partitions. Used by
// `aftershock simulate --nats` and the tests. NATS types stay in the .cc file.
//
// Publishing is asynchronous (at most `max_pending` unacknowledged messages in
// flight); Flush() waits for every acknowledgement. Per-symbol order is the
// call order (one connection, no retries).
//
// Thread-safety: not thread-safe; one thread publishes.
#ifndef AFTERSHOCK_JETSTREAM_PUBLISHER_H_
#define AFTERSHOCK_JETSTREAM_PUBLISHER_H_

#include <cstdint>
#include <memory>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/engine_config.h"
#include "aftershock/wire.h"

namespace aftershock {

struct JetStreamPublisherOptions {
  WireEncoding encoding = WireEncoding::kJson;  // body encoding; default json
  int64_t max_pending = 4096;  // unacknowledged messages in flight before Publish waits; 4096
  bool create_stream = true;   // create the [nats] stream when absent; default true
};

struct JetStreamPublisherStats {
  uint64_t published = 0;  // messages handed to the client
  uint64_t failed = 0;     // acknowledgements that reported an error (or never came)
};

class JetStreamTickPublisher {
 public:
  // Connects to [nats] servers (and creates the stream per options).
  static absl::StatusOr<std::unique_ptr<JetStreamTickPublisher>> Connect(
      const NatsConfig& config, const JetStreamPublisherOptions& options = {});
  virtual ~JetStreamTickPublisher() = default;

  // Queues one tick. Unavailable when the connection is gone.
  // REQUIRES: IsValidSymbol(tick.symbol.view()) is not required: any symbol
  // is encoded, and the engine counts invalid ones as bad_symbol.
  virtual absl::Status Publish(const Tick& tick) = 0;
  // Waits up to timeout_ms for all acknowledgements; DeadlineExceeded when
  // some are missing, Internal when some reported an error.
  virtual absl::Status Flush(int64_t timeout_ms) = 0;
  virtual JetStreamPublisherStats stats() const = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_JETSTREAM_PUBLISHER_H_
