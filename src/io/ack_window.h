// AckWindow: the bookkeeping of a producer that resends every message until
// the broker acknowledges it, without breaking the order of any key (symbol).
//
// Invariant: at most one message per key is unacknowledged. A key's next
// message is admitted only once the previous one is acknowledged, so a resend
// can never be stored after a later message of the same key, whatever the
// broker lost (a stream leader that dies takes the in-flight messages and
// their acknowledgements with it; the new leader may already store later
// messages while the lost ones wait for their timeout). Copies of a message
// that was stored but whose acknowledgement was lost are dropped by the
// broker's duplicate window, keyed on the message id.
//
// A failed attempt (negative acknowledgement, no responders, the client's
// acknowledgement timeout, a send error) is resent after retry_delay_ms by the
// producer thread (TakeDue); a message not acknowledged within give_up_ms of
// its first send is reported by CheckGiveUp. Times are caller-supplied
// nanoseconds of a monotonic clock, so the logic is tested with an injected
// clock; only AwaitChange waits in real time.
//
// Thread-safety: thread-safe. The producer thread admits, takes resends and
// checks the give-up; the client's thread reports acknowledgements and
// failures.
#ifndef AFTERSHOCK_SRC_IO_ACK_WINDOW_H_
#define AFTERSHOCK_SRC_IO_ACK_WINDOW_H_

#include <cstdint>
#include <map>
#include <string>
#include <vector>

#include "absl/base/thread_annotations.h"
#include "absl/container/flat_hash_map.h"
#include "absl/container/flat_hash_set.h"
#include "absl/status/status.h"
#include "absl/strings/string_view.h"
#include "absl/synchronization/mutex.h"
#include "absl/time/time.h"

namespace aftershock {

struct AckWindowOptions {
  // Unacknowledged messages at once, over all keys; Admit waits above it.
  // >= 1; default 4096.
  int64_t max_in_flight = 4096;
  // Wait after a failed attempt before it is resent, ms (a leaderless stream
  // answers "no responders" at once; resending at once would spin). >= 0;
  // default 250.
  int64_t retry_delay_ms = 250;
  // A message not acknowledged this long after its first send fails the
  // producer, ms. Must stay below the stream's duplicate window, or a late
  // resend of a stored message would be stored twice. >= 1; default 60000.
  int64_t give_up_ms = 60000;
};

struct AckWindowStats {
  uint64_t admitted = 0;    // messages admitted (first attempts)
  uint64_t acked = 0;       // messages acknowledged
  uint64_t duplicates = 0;  // of those, acknowledged as a duplicate: an earlier copy was stored
  uint64_t failures = 0;    // failed attempts reported
  uint64_t resends = 0;     // attempts after the first
};

// One attempt the producer must send again.
struct AckWindowResend {
  std::string id;       // message id (the broker's deduplication key)
  std::string subject;  // where it is published
  std::string body;     // payload
  int attempt = 0;      // 2 for the first resend
};

class AckWindow {
 public:
  explicit AckWindow(AckWindowOptions options) : options_(options) {}

  // True when `key` has no unacknowledged message and the window has room.
  bool CanAdmit(absl::string_view key) const ABSL_LOCKS_EXCLUDED(mu_);
  // Records the first attempt of message `id` of `key`, sent at now_ns.
  // REQUIRES: CanAdmit(key); `id` unique among unacknowledged messages.
  void Admit(absl::string_view key, absl::string_view id, absl::string_view subject,
             absl::string_view body, int64_t now_ns) ABSL_LOCKS_EXCLUDED(mu_);
  // The broker stored message `id` (`duplicate`: it had stored a copy
  // before). Frees its key. False for an id not in flight (already
  // acknowledged through another attempt).
  bool OnAck(absl::string_view id, bool duplicate) ABSL_LOCKS_EXCLUDED(mu_);
  // An attempt of `id` failed at now_ns with `error`; it is resent at
  // now_ns + retry_delay_ms. False for an id not in flight.
  bool OnFailure(absl::string_view id, absl::string_view error, int64_t now_ns)
      ABSL_LOCKS_EXCLUDED(mu_);
  // The failed messages whose resend is due at now_ns, oldest admission
  // first; each is counted as sent again at now_ns. The caller sends them.
  std::vector<AckWindowResend> TakeDue(int64_t now_ns) ABSL_LOCKS_EXCLUDED(mu_);
  // DeadlineExceeded naming the oldest message unacknowledged for
  // give_up_ms or more at now_ns (its key, id, attempts and last error).
  absl::Status CheckGiveUp(int64_t now_ns) const ABSL_LOCKS_EXCLUDED(mu_);
  // Earliest time after which TakeDue or CheckGiveUp may have something new
  // (a resend due, a give-up); INT64_MAX when nothing is in flight.
  int64_t NextDeadline() const ABSL_LOCKS_EXCLUDED(mu_);

  size_t in_flight() const ABSL_LOCKS_EXCLUDED(mu_);
  AckWindowStats stats() const ABSL_LOCKS_EXCLUDED(mu_);
  // Counter of OnAck/OnFailure calls that changed something.
  uint64_t version() const ABSL_LOCKS_EXCLUDED(mu_);
  // Waits until version() differs from `seen` or `timeout` passes.
  void AwaitChange(uint64_t seen, absl::Duration timeout) const ABSL_LOCKS_EXCLUDED(mu_);

 private:
  struct Entry {
    std::string key, subject, body;
    uint64_t order = 0;         // admission number: oldest first
    int attempts = 1;           // attempts sent
    int64_t first_sent_ns = 0;  // first attempt
    bool failed = false;        // the last attempt failed; a resend is due at resend_ns
    int64_t resend_ns = 0;
    std::string last_error;
  };

  const AckWindowOptions options_;
  mutable absl::Mutex mu_;
  absl::flat_hash_map<std::string, Entry> by_id_ ABSL_GUARDED_BY(mu_);
  absl::flat_hash_set<std::string> keys_ ABSL_GUARDED_BY(mu_);     // keys with a message in flight
  std::map<uint64_t, std::string> by_order_ ABSL_GUARDED_BY(mu_);  // admission number -> id
  size_t failed_ ABSL_GUARDED_BY(mu_) = 0;  // entries waiting for their resend
  uint64_t next_order_ ABSL_GUARDED_BY(mu_) = 0;
  uint64_t version_ ABSL_GUARDED_BY(mu_) = 0;
  AckWindowStats stats_ ABSL_GUARDED_BY(mu_);
};

}  // namespace aftershock

#endif  // AFTERSHOCK_SRC_IO_ACK_WINDOW_H_
