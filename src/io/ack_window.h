// AckWindow: the bookkeeping of a producer that resends every message until
// the broker acknowledges it, without breaking the order of any key (symbol).
//
// Invariant: at most one message per key is sent and unacknowledged. A key's
// later messages wait in the key's queue and the next one is sent when the
// previous one is acknowledged (by the thread that reports the
// acknowledgement), so a resend can never be stored after a later message of
// the same key, whatever the broker lost (a stream leader that dies takes the
// in-flight messages and their acknowledgements with it; the new leader may
// already store later messages while the lost ones wait for their timeout).
// Other keys' messages stay in flight meanwhile. Copies of a message that was
// stored but whose acknowledgement was lost are dropped by the broker's
// duplicate window, keyed on the message id.
//
// A failed attempt (negative acknowledgement, no responders, the client's
// acknowledgement timeout, a send error) is resent retry_delay_ms later
// (ResendDue); a message not acknowledged within give_up_ms of its first send
// is reported by CheckGiveUp. Times are caller-supplied nanoseconds of a
// monotonic clock, so the logic is tested with an injected clock; only the
// Await* calls wait in real time.
//
// Thread-safety: thread-safe. `send` is called without the window's lock held,
// from the thread that made the call (Add, OnAck, ResendDue); it may call
// OnFailure.
#ifndef AFTERSHOCK_SRC_IO_ACK_WINDOW_H_
#define AFTERSHOCK_SRC_IO_ACK_WINDOW_H_

#include <cstdint>
#include <deque>
#include <functional>
#include <map>
#include <string>
#include <vector>

#include "absl/base/thread_annotations.h"
#include "absl/container/flat_hash_map.h"
#include "absl/status/status.h"
#include "absl/strings/string_view.h"
#include "absl/synchronization/mutex.h"
#include "absl/time/time.h"

namespace aftershock {

struct AckWindowOptions {
  // Messages queued or unacknowledged at once, over all keys; the producer
  // waits above it (AwaitRoom). >= 1; default 4096.
  int64_t max_pending = 4096;
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
  uint64_t added = 0;       // messages added
  uint64_t acked = 0;       // messages acknowledged
  uint64_t duplicates = 0;  // of those, acknowledged as a duplicate: an earlier copy was stored
  uint64_t failures = 0;    // failed attempts reported
  uint64_t resends = 0;     // attempts after the first
};

class AckWindow {
 public:
  // Sends one attempt of message `id` to `subject`.
  using SendFn = std::function<void(const std::string& id, const std::string& subject,
                                    const std::string& body)>;

  AckWindow(AckWindowOptions options, SendFn send) : options_(options), send_(std::move(send)) {}

  // True while fewer than max_pending messages are queued or unacknowledged.
  bool HasRoom() const ABSL_LOCKS_EXCLUDED(mu_);
  // Adds message `id` of `key`: sent now (first attempt at now_ns) when the
  // key has no unacknowledged message, else queued behind it.
  // REQUIRES: `id` unique among the messages in the window.
  void Add(absl::string_view key, absl::string_view id, absl::string_view subject,
           absl::string_view body, int64_t now_ns) ABSL_LOCKS_EXCLUDED(mu_);
  // The broker stored message `id` (`duplicate`: it had stored a copy
  // before). Sends the key's next queued message (first attempt at now_ns).
  // False for an id not in flight (e.g. reported twice).
  bool OnAck(absl::string_view id, bool duplicate, int64_t now_ns) ABSL_LOCKS_EXCLUDED(mu_);
  // An attempt of `id` failed at now_ns with `error`; it is resent at
  // now_ns + retry_delay_ms. False for an id not in flight.
  bool OnFailure(absl::string_view id, absl::string_view error, int64_t now_ns)
      ABSL_LOCKS_EXCLUDED(mu_);
  // Sends again the failed messages whose resend is due at now_ns, oldest
  // first send first; returns how many.
  size_t ResendDue(int64_t now_ns) ABSL_LOCKS_EXCLUDED(mu_);
  // DeadlineExceeded naming the oldest message unacknowledged for
  // give_up_ms or more at now_ns (its key, id, attempts and last error).
  absl::Status CheckGiveUp(int64_t now_ns) const ABSL_LOCKS_EXCLUDED(mu_);
  // Earliest resend due; INT64_MAX when no attempt failed.
  int64_t NextResend() const ABSL_LOCKS_EXCLUDED(mu_);

  size_t pending() const ABSL_LOCKS_EXCLUDED(mu_);    // queued + unacknowledged
  size_t in_flight() const ABSL_LOCKS_EXCLUDED(mu_);  // sent, unacknowledged
  AckWindowStats stats() const ABSL_LOCKS_EXCLUDED(mu_);

  // Waits up to `timeout` until a quarter of max_pending (at least one) is
  // free again (one wake-up per batch, not per acknowledgement); true then.
  bool AwaitRoom(absl::Duration timeout) const ABSL_LOCKS_EXCLUDED(mu_);
  // Waits up to `timeout` until nothing is pending; true then.
  bool AwaitEmpty(absl::Duration timeout) const ABSL_LOCKS_EXCLUDED(mu_);

 private:
  struct Message {
    std::string id, subject, body;
  };
  struct Sent {
    std::string key, subject, body;
    uint64_t order = 0;         // send number of the first attempt: oldest first
    int attempts = 1;           // attempts sent
    int64_t first_sent_ns = 0;  // first attempt
    bool failed = false;        // the last attempt failed; a resend is due at resend_ns
    int64_t resend_ns = 0;
    std::string last_error;
  };
  struct Key {
    std::string in_flight;  // id of the key's unacknowledged message; "" = none
    std::deque<Message> queue;
  };

  // Marks `m` of `key` as sent at now_ns; the caller sends it after unlocking.
  void StartLocked(const std::string& key, const Message& m, int64_t now_ns)
      ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_);

  const AckWindowOptions options_;
  const SendFn send_;
  mutable absl::Mutex mu_;
  absl::flat_hash_map<std::string, Sent> sent_ ABSL_GUARDED_BY(mu_);  // by id
  absl::flat_hash_map<std::string, Key> keys_ ABSL_GUARDED_BY(mu_);   // keys with pending messages
  std::map<uint64_t, std::string> by_order_ ABSL_GUARDED_BY(mu_);     // send number -> id
  uint64_t next_order_ ABSL_GUARDED_BY(mu_) = 0;
  size_t pending_ ABSL_GUARDED_BY(mu_) = 0;
  size_t failed_ ABSL_GUARDED_BY(mu_) = 0;  // sent messages waiting for their resend
  AckWindowStats stats_ ABSL_GUARDED_BY(mu_);
};

}  // namespace aftershock

#endif  // AFTERSHOCK_SRC_IO_ACK_WINDOW_H_
