// Private helpers over the NATS C client (libnats 3.4): connection and
// JetStream context ownership, natsStatus -> absl::Status, and the two
// JetStream objects of the scale-out mode (the tick stream and the lease
// bucket). Only .cc files under src/ include this header; no public header
// names a NATS type.
//
// Thread-safety: a NatsSession may be used from several threads (the C
// client's connection and JetStream context are thread-safe); creating and
// destroying it is the owner's job.
#ifndef AFTERSHOCK_SRC_IO_NATS_CLIENT_H_
#define AFTERSHOCK_SRC_IO_NATS_CLIENT_H_

#include <nats/nats.h>

#include <memory>
#include <string>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/engine_config.h"

namespace aftershock::nats_internal {

// `what` + the client's text for `s` (and the JetStream error code, if any).
// Unavailable for connection problems and timeouts, NotFound for
// NATS_NOT_FOUND, FailedPrecondition for a JetStream "wrong last sequence",
// Internal otherwise.
absl::Status ToStatus(natsStatus s, absl::string_view what,
                      jsErrCode jerr = static_cast<jsErrCode>(0));

// One client connection with its JetStream context.
class NatsSession {
 public:
  // Connects to any of `config.servers` (the client reconnects to the others
  // forever, 250 ms apart); `name` is shown by the server (connz).
  // `js_options` (may be null) configures the JetStream context (asynchronous
  // publishing limits and handlers); it is copied.
  static absl::StatusOr<std::unique_ptr<NatsSession>> Connect(const NatsConfig& config,
                                                              const std::string& name,
                                                              jsOptions* js_options = nullptr);
  ~NatsSession();
  NatsSession(const NatsSession&) = delete;
  NatsSession& operator=(const NatsSession&) = delete;

  natsConnection* conn() const { return conn_; }
  jsCtx* js() const { return js_; }

 private:
  NatsSession(natsConnection* conn, jsCtx* js) : conn_(conn), js_(js) {}
  natsConnection* conn_;
  jsCtx* js_;
};

// Calls `api` (a JetStream API request returning natsStatus) again while it
// times out, at most kApiAttempts times in all. A JetStream cluster answers
// late while it elects the leader of a stream just created (a replicated
// stream or bucket another engine is creating), which is no reason to fail.
inline constexpr int kApiAttempts = 5;
template <typename Api>
natsStatus RetryOnTimeout(Api api) {
  natsStatus s = api();
  for (int attempt = 1; attempt < kApiAttempts && s == NATS_TIMEOUT; ++attempt) s = api();
  return s;
}

// The stream of [nats] stream with subjects "<partition_subject>.>": looked up,
// and created (file storage, [nats] replicas, limits retention, a duplicate
// window of [nats] duplicate_window_seconds) when absent. FailedPrecondition
// when a stream of that name exists with other subjects.
absl::Status EnsureTickStream(NatsSession* session, const NatsConfig& config);

// The duplicate window of the existing tick stream, ns (how long JetStream
// remembers a Nats-Msg-Id to drop a resent copy).
absl::StatusOr<int64_t> TickStreamDuplicateWindow(NatsSession* session, const NatsConfig& config);

// Owning handle of a kvStore.
struct KvDeleter {
  void operator()(kvStore* kv) const { kvStore_Destroy(kv); }
};
using KvStorePtr = std::unique_ptr<kvStore, KvDeleter>;

// The lease bucket ([nats] lease_bucket, TTL = lease_seconds, history 1),
// created when absent (`create` true) or opened (NotFound when absent).
absl::StatusOr<KvStorePtr> OpenLeaseBucket(NatsSession* session, const NatsConfig& config,
                                           bool create);

// Subject a producer publishes a tick of `symbol` to: "<subject>.<token>".
std::string TickSubject(const NatsConfig& config, absl::string_view symbol);
// Filter subject of one partition: "<partition_subject>.<p>.*".
std::string PartitionFilter(const NatsConfig& config, int partition);

}  // namespace aftershock::nats_internal

#endif  // AFTERSHOCK_SRC_IO_NATS_CLIENT_H_
