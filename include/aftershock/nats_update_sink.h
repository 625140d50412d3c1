// NATS copy of the update stream: an UpdateSink that hands every message to
// an inner sink (the ZeroMQ publisher, unchanged) and also publishes each
// update (topic "u.<symbol>") as a core NATS message on
// "<[nats] updates_subject>.<symbol token>" (subject_token.h) with the same
// body. Alerts and other topics go to the inner sink only. Used by
// Engine::CreateFromConfig when [nats] updates_subject is set. NATS types stay
// in the .cc file.
//
// Send never blocks: the client buffers the message and its own thread
// writes it; a message the client refuses (connection closed, buffer full
// while reconnecting) is counted in nats_drops() and does not affect the
// inner sink's result. After a warm-up the subject buffer is reused, so Send
// does not allocate.
//
// Thread-safety: like every UpdateSink, used by one thread (the ingest
// thread); nats_drops() from any thread.
#ifndef AFTERSHOCK_NATS_UPDATE_SINK_H_
#define AFTERSHOCK_NATS_UPDATE_SINK_H_

#include <cstdint>
#include <memory>

#include "absl/status/statusor.h"
#include "aftershock/engine_config.h"
#include "aftershock/update_sink.h"

namespace aftershock {

class NatsUpdateSink : public UpdateSink {
 public:
  // Connects to [nats] servers. REQUIRES: inner != nullptr,
  // !config.updates_subject.empty().
  static absl::StatusOr<std::unique_ptr<NatsUpdateSink>> Open(const NatsConfig& config,
                                                              std::unique_ptr<UpdateSink> inner);
  ~NatsUpdateSink() override = default;

  // Updates the NATS client refused since Open.
  virtual uint64_t nats_drops() const = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_NATS_UPDATE_SINK_H_
