// UpdateSink: where encoded outbound messages go (a ZeroMQ PUB socket, a JSON
// Lines file, or a test double). Messages are two parts, [topic][body]:
// topics "u.<symbol>" (updates), "a.<symbol>" (alerts), "m.<symbol>" (model
// events), "b.u" (update batches, update_batch.h).
//
// Thread-safety: a sink is used by one thread (the ingest thread).
#ifndef AFTERSHOCK_UPDATE_SINK_H_
#define AFTERSHOCK_UPDATE_SINK_H_

#include <cstdio>
#include <memory>
#include <string>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"

namespace aftershock {

class MetricsSource;  // ingest_core.h

class UpdateSink {
 public:
  virtual ~UpdateSink() = default;
  // Hands one message over without blocking. False when it was dropped (a
  // full queue); the caller counts the drop. Never blocks, never throws.
  virtual bool Send(absl::string_view topic, absl::string_view body) = 0;
  // Pushes buffered output out (files: fflush). Called at shutdown and at the
  // end of a replay.
  virtual absl::Status Flush() { return absl::OkStatus(); }
  // The end of a round of input: the engine calls it after each drain of the
  // feed and each clock tick. A sink that gathers messages (update_batch.h)
  // sends them now; a sink that wraps another passes the call on. Never blocks.
  virtual void EndRound() {}
  // Metrics of the sink itself (served on /metrics by the engine that owns
  // it), or null. A wrapping sink returns its inner sink's.
  virtual const MetricsSource* metrics() const { return nullptr; }
  // The endpoint actually bound ("tcp://127.0.0.1:40123" after binding
  // "tcp://127.0.0.1:*"), or "" for sinks that are not sockets.
  virtual std::string BoundEndpoint() const { return ""; }
};

// Writes the body of every message whose topic starts with `topic_prefix`
// as one line (JSON Lines when the bodies are JSON); other topics are skipped.
// Buffered (1 MiB); Flush() or destruction writes the rest.
class JsonLinesSink : public UpdateSink {
 public:
  // path "-" writes standard output. Error (naming the path) when it cannot
  // be opened.
  static absl::StatusOr<std::unique_ptr<JsonLinesSink>> Open(const std::string& path,
                                                             std::string topic_prefix = "u.");
  ~JsonLinesSink() override;

  bool Send(absl::string_view topic, absl::string_view body) override;
  absl::Status Flush() override;
  uint64_t lines() const { return lines_; }

 private:
  JsonLinesSink(std::FILE* f, bool owned, std::string path, std::string prefix);
  std::FILE* file_;
  bool owned_;
  std::string path_;
  std::string prefix_;
  std::string buffer_;
  uint64_t lines_ = 0;
  bool failed_ = false;
};

// Accepts and discards everything (benchmarks).
class NullSink : public UpdateSink {
 public:
  bool Send(absl::string_view topic, absl::string_view body) override {
    bytes_ += topic.size() + body.size();
    ++messages_;
    return true;
  }
  uint64_t messages() const { return messages_; }
  uint64_t bytes() const { return bytes_; }

 private:
  uint64_t messages_ = 0;
  uint64_t bytes_ = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_UPDATE_SINK_H_
