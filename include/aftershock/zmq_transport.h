// ZeroMQ transport: the engine's tick subscriber (SUB, connects to every feed
// endpoint, subscribed to all topics) and update publisher (PUB, binds), as
// TickSource / UpdateSink. ZeroMQ types stay inside src/io/zmq_transport.cc.
//
// Messages are two frames, [topic][body]. The publisher never blocks: it sets
// ZMQ_SNDHWM from [publish] high_water_mark, ZMQ_XPUB_NODROP and sends with
// ZMQ_DONTWAIT, so a message that cannot be queued for a subscriber at its
// high-water mark fails with EAGAIN and is reported as a drop (Send() returns
// false) instead of being discarded silently. Note that with ZMQ_XPUB_NODROP
// such a message is dropped for every subscriber, not only the slow one; a
// deployment with one slow consumer should give it its own shard or a proxy.
//
// CURVE: with [publish] curve_secret_key the PUB is a CURVE server; with
// [feed] curve_server_key the SUB is a CURVE client (with a fresh keypair).
//
// Thread-safety: a ZmqTransport may be shared; each source/sink it creates is
// used by one thread. They keep the transport's context alive.
#ifndef AFTERSHOCK_ZMQ_TRANSPORT_H_
#define AFTERSHOCK_ZMQ_TRANSPORT_H_

#include <cstdint>
#include <memory>
#include <string>

#include "absl/status/statusor.h"
#include "aftershock/engine_config.h"
#include "aftershock/tick_source.h"
#include "aftershock/update_sink.h"

namespace aftershock {

struct ZmqSubscriberOptions {
  // ZMQ_RCVHWM of the SUB socket (messages); 0 = unlimited. Default 1,000,000
  // (the feed's own PUB drops beyond it, so keep it generous).
  int64_t receive_hwm = 1000000;
};

struct ZmqPublisherOptions {
  // ZMQ_LINGER on close, ms: how long queued updates may still be delivered at
  // shutdown. Default 1000.
  int linger_ms = 1000;
};

// OK when `endpoint` names a ZeroMQ transport (tcp://, ipc://, inproc://);
// otherwise InvalidArgument with a suggestion, e.g. for "localhost:7302":
// "endpoint 'localhost:7302' names no transport; did you mean 'tcp://localhost:7302'?".
absl::Status CheckEndpoint(absl::string_view endpoint);

class ZmqTransport {
 public:
  // One ZeroMQ context with `io_threads` I/O threads. Default 1.
  static absl::StatusOr<std::unique_ptr<ZmqTransport>> Create(int io_threads = 1);
  ~ZmqTransport();

  // SUB connecting to every feed.endpoints entry. Errors name the endpoint.
  absl::StatusOr<std::unique_ptr<TickSource>> Subscribe(const FeedConfig& feed,
                                                        const ZmqSubscriberOptions& options = {});
  // PUB bound to publish.endpoint ("tcp://127.0.0.1:*" picks a free port; see
  // UpdateSink::BoundEndpoint()); with publish.update_topics "batch" or
  // "both" wrapped in a BatchingSink (update_batch.h).
  absl::StatusOr<std::unique_ptr<UpdateSink>> Publish(const PublishConfig& publish,
                                                      const ZmqPublisherOptions& options = {});

  struct Impl;

 private:
  explicit ZmqTransport(std::shared_ptr<Impl> impl);
  std::shared_ptr<Impl> impl_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_ZMQ_TRANSPORT_H_
