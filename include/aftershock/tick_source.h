// TickSource: where the engine's input comes from (a ZeroMQ SUB socket, a tick
// CSV file, or a test double), and TickConsumer, what it delivers to.
//
// A source pushes what it has into a consumer without blocking: raw two-frame
// messages (wire.h format, decoded and validated by the consumer) or ticks that
// are already parsed (files). The engine's event loop waits on ReadinessFd().
//
// Thread-safety: a source and its consumer are used by one thread (the ingest
// thread); neither is thread-safe.
#ifndef AFTERSHOCK_TICK_SOURCE_H_
#define AFTERSHOCK_TICK_SOURCE_H_

#include <memory>
#include <string>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/tick_file.h"
#include "aftershock/wire.h"

namespace aftershock {

// Receives input on the ingest thread. Implemented by IngestCore.
class TickConsumer {
 public:
  virtual ~TickConsumer() = default;
  // One inbound message [topic][body]; views valid only during the call.
  virtual void OnMessage(absl::string_view topic, absl::string_view body) = 0;
  // A message whose frame count is not two: counted as malformed, dropped.
  virtual void OnMalformedMessage() = 0;
  // One already-validated tick (file input).
  virtual void OnTick(const Tick& tick) = 0;
};

class TickSource {
 public:
  static constexpr int kEndOfInput = -1;

  virtual ~TickSource() = default;

  // Delivers up to max_messages pending messages (or ticks) to *consumer
  // without blocking. Returns how many were delivered (0 = nothing pending
  // now), or kEndOfInput once the source is exhausted (files; then status()
  // tells whether it ended cleanly). REQUIRES: consumer != nullptr, max > 0.
  virtual int Pump(TickConsumer* consumer, int max_messages) = 0;

  // A descriptor that becomes readable (edge-triggered, as ZMQ_FD) when input
  // may have arrived, or -1 for a source that is always ready (files).
  virtual int ReadinessFd() const { return -1; }

  // True when input may be pending without the descriptor signalling again
  // (ZMQ_EVENTS has POLLIN). The loop calls it after a short Pump before it
  // waits on ReadinessFd(), which is what edge triggering requires.
  virtual bool MaybePending() { return false; }

  // Called once on the ingest thread after the engine's loop ended, before
  // the sink is flushed: a source may still hand state to its consumers (the
  // NATS feed checkpoints its partitions and releases its leases). Default:
  // nothing.
  virtual void OnStopped() {}

  // OK, or why the source stopped (a read error of a file).
  virtual absl::Status status() const { return absl::OkStatus(); }
};

// Replays a tick CSV (tick_file.h) through OnTick, as fast as the consumer
// takes it. Bad lines are counted by the reader and skipped.
class TickFileSource : public TickSource {
 public:
  static absl::StatusOr<std::unique_ptr<TickFileSource>> Open(const std::string& path,
                                                              const TickFileOptions& options = {});
  explicit TickFileSource(std::unique_ptr<TickFileReader> reader);

  int Pump(TickConsumer* consumer, int max_messages) override;
  absl::Status status() const override { return reader_->status(); }
  const TickFileReader& reader() const { return *reader_; }

 private:
  std::unique_ptr<TickFileReader> reader_;
  Tick tick_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_TICK_SOURCE_H_
