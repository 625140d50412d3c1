// JetStreamTickPublisher: sends ticks into the JetStream stream of [nats], one
// message per tick on "<subject>.<symbol token>" (subject_token.h) with a body
// in the existing tick wire format (wire.h, JSON or binary, single tick). The
// broker's partition() mapping (config/nats-server.conf) places it in its
// partition; the publisher knows nothing of partitions. Used by
// `aftershock simulate --nats` and the tests. NATS types stay in the .cc file.
//
// Publishing is asynchronous, and nothing is lost to a broker failure: every
// tick is kept until JetStream acknowledges it and resent (same body, same
// message id) when an attempt fails, e.g. when the stream's leader dies with
// the acknowledgement. Each message carries the header Nats-Msg-Id =
// TickMessageId(tick, n), so the stream's duplicate window drops the copy of a
// tick that was stored but whose acknowledgement was lost. Per-symbol order is
// the call order, failures included: a symbol has at most one unacknowledged
// tick; its later ticks wait in a queue and the next one is sent when the
// previous one is acknowledged (ticks of other symbols are in flight
// meanwhile, so throughput grows with the number of symbols). Publish waits
// only while `max_pending` ticks are queued or unacknowledged. A tick not
// acknowledged within `give_up_ms` of its first send makes Publish and Flush
// fail with DeadlineExceeded; the give-up time plus the acknowledgement
// timeout must fit in the stream's duplicate window (checked at Connect).
// io/ack_window.h holds the bookkeeping; a thread of the publisher sends the
// due resends.
//
// Thread-safety: not thread-safe; one thread publishes (the client's own
// thread reports the acknowledgements and sends queued ticks).
#ifndef AFTERSHOCK_JETSTREAM_PUBLISHER_H_
#define AFTERSHOCK_JETSTREAM_PUBLISHER_H_

#include <cstdint>
#include <functional>
#include <memory>
#include <string>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/engine_config.h"
#include "aftershock/wire.h"

namespace aftershock {

struct JetStreamPublisherOptions {
  WireEncoding encoding = WireEncoding::kJson;  // body encoding; default json
  int64_t max_pending = 4096;  // ticks queued or unacknowledged before Publish waits; 4096
  bool create_stream = true;   // create the [nats] stream when absent; default true
  // An attempt without an acknowledgement for this long counts as failed and
  // is resent, ms; default 2000.
  int64_t ack_timeout_ms = 2000;
  // Wait after a failed attempt before resending it, ms; default 250.
  int64_t retry_delay_ms = 250;
  // A tick not acknowledged this long after its first send fails Publish and
  // Flush (DeadlineExceeded), ms. give_up_ms + ack_timeout_ms must not exceed
  // the stream's duplicate window. Default 60000 (the window of a stream
  // created by an engine or publisher is [nats] duplicate_window_seconds,
  // default 120 s).
  int64_t give_up_ms = 60000;
  // Polled while Publish and Flush wait for acknowledgements (every 50 ms at
  // most); when it returns true they return Cancelled. Default: never.
  std::function<bool()> stop_requested;
};

struct JetStreamPublisherStats {
  uint64_t published = 0;   // ticks handed to Publish and sent
  uint64_t acked = 0;       // ticks JetStream acknowledged
  uint64_t failed = 0;      // failed attempts (negative acknowledgement, timeout, send error)
  uint64_t resent = 0;      // attempts after the first
  uint64_t duplicates = 0;  // acknowledgements saying the stream already held the tick
};

// The JetStream message id (header Nats-Msg-Id) of the `sequence`-th tick
// (1-based) of its symbol in one publisher: "<sequence>.<digest>.<token>",
// token = EncodeSubjectToken(symbol) and digest = 16 hex digits of the 64-bit
// FNV-1a hash of the tick's kind, time and value (little-endian bytes). A
// resend repeats it; two ticks of one symbol never share it within one
// publisher, and a restarted publisher sending the same feed again gives
// the same ids (its copies inside the duplicate window are dropped).
std::string TickMessageId(const Tick& tick, uint64_t sequence);

class JetStreamTickPublisher {
 public:
  // Connects to [nats] servers (and creates the stream per options).
  static absl::StatusOr<std::unique_ptr<JetStreamTickPublisher>> Connect(
      const NatsConfig& config, const JetStreamPublisherOptions& options = {});
  virtual ~JetStreamTickPublisher() = default;

  // Sends one tick, or queues it behind its symbol's unacknowledged tick
  // (waiting first while max_pending ticks are pending). DeadlineExceeded
  // when some tick was not acknowledged within give_up_ms; Cancelled when
  // stop_requested said so while it waited.
  // REQUIRES: IsValidSymbol(tick.symbol.view()) is not required: any symbol
  // is encoded, and the engine counts invalid ones as bad_symbol.
  virtual absl::Status Publish(const Tick& tick) = 0;
  // Waits up to timeout_ms for all acknowledgements (failed ticks are resent
  // meanwhile); DeadlineExceeded when some are missing then (or were given
  // up), Cancelled as Publish.
  virtual absl::Status Flush(int64_t timeout_ms) = 0;
  virtual JetStreamPublisherStats stats() const = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_JETSTREAM_PUBLISHER_H_
