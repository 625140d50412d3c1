#include "io/ack_window.h"

#include <algorithm>
#include <limits>
#include <utility>

#include "absl/strings/str_cat.h"

namespace aftershock {

bool AckWindow::HasRoom() const {
  absl::MutexLock lock(&mu_);
  return static_cast<int64_t>(pending_) < options_.max_pending;
}

void AckWindow::StartLocked(const std::string& key, const Message& m, int64_t now_ns) {
  Sent s;
  s.key = key;
  s.subject = m.subject;
  s.body = m.body;
  s.order = next_order_++;
  s.first_sent_ns = now_ns;
  by_order_.emplace(s.order, m.id);
  sent_.insert_or_assign(m.id, std::move(s));
  keys_[key].in_flight = m.id;
}

void AckWindow::Add(absl::string_view key, absl::string_view id, absl::string_view subject,
                    absl::string_view body, int64_t now_ns) {
  Message m{std::string(id), std::string(subject), std::string(body)};
  {
    absl::MutexLock lock(&mu_);
    ++pending_;
    ++stats_.added;
    Key& k = keys_[key];
    if (!k.in_flight.empty()) {
      k.queue.push_back(std::move(m));  // behind the key's unacknowledged message
      return;
    }
    StartLocked(std::string(key), m, now_ns);
  }
  send_(m.id, m.subject, m.body);
}

bool AckWindow::OnAck(absl::string_view id, bool duplicate, int64_t now_ns) {
  Message next;
  {
    absl::MutexLock lock(&mu_);
    auto it = sent_.find(id);
    if (it == sent_.end()) return false;
    const std::string key = std::move(it->second.key);
    by_order_.erase(it->second.order);
    if (it->second.failed) --failed_;
    sent_.erase(it);
    --pending_;
    ++stats_.acked;
    if (duplicate) ++stats_.duplicates;
    auto k = keys_.find(key);
    if (k->second.queue.empty()) {
      keys_.erase(k);  // idle keys hold no memory
      return true;
    }
    next = std::move(k->second.queue.front());
    k->second.queue.pop_front();
    StartLocked(key, next, now_ns);
  }
  send_(next.id, next.subject, next.body);
  return true;
}

bool AckWindow::OnFailure(absl::string_view id, absl::string_view error, int64_t now_ns) {
  absl::MutexLock lock(&mu_);
  auto it = sent_.find(id);
  if (it == sent_.end()) return false;
  Sent& s = it->second;
  if (!s.failed) ++failed_;
  s.failed = true;
  s.resend_ns = now_ns + options_.retry_delay_ms * 1000000;
  s.last_error = std::string(error);
  ++stats_.failures;
  return true;
}

size_t AckWindow::ResendDue(int64_t now_ns) {
  std::vector<Message> due;
  {
    absl::MutexLock lock(&mu_);
    if (failed_ == 0) return 0;
    for (const auto& [order, id] : by_order_) {  // oldest first send first
      Sent& s = sent_.find(id)->second;
      if (!s.failed || s.resend_ns > now_ns) continue;
      s.failed = false;
      --failed_;
      ++s.attempts;
      ++stats_.resends;
      due.push_back(Message{id, s.subject, s.body});
    }
  }
  for (const Message& m : due) send_(m.id, m.subject, m.body);
  return due.size();
}

absl::Status AckWindow::CheckGiveUp(int64_t now_ns) const {
  absl::MutexLock lock(&mu_);
  if (by_order_.empty()) return absl::OkStatus();
  // The first send with the lowest send number is the oldest one.
  const std::string& id = by_order_.begin()->second;
  const Sent& s = sent_.find(id)->second;
  if (now_ns - s.first_sent_ns < options_.give_up_ms * 1000000) return absl::OkStatus();
  return absl::DeadlineExceededError(absl::StrCat(
      "tick of ", s.key, " (message id ", id, ") not acknowledged by JetStream ",
      options_.give_up_ms / 1000.0, " s after its first send (", s.attempts,
      s.attempts == 1 ? " attempt" : " attempts", "; last error: ",
      s.last_error.empty() ? "none reported" : s.last_error, "); ", pending_, " tick(s) pending"));
}

int64_t AckWindow::NextResend() const {
  absl::MutexLock lock(&mu_);
  int64_t next = std::numeric_limits<int64_t>::max();
  if (failed_ == 0) return next;
  for (const auto& [id, s] : sent_) {
    if (s.failed) next = std::min(next, s.resend_ns);
  }
  return next;
}

size_t AckWindow::pending() const {
  absl::MutexLock lock(&mu_);
  return pending_;
}

size_t AckWindow::in_flight() const {
  absl::MutexLock lock(&mu_);
  return sent_.size();
}

AckWindowStats AckWindow::stats() const {
  absl::MutexLock lock(&mu_);
  return stats_;
}

bool AckWindow::AwaitRoom(absl::Duration timeout) const {
  const int64_t low = options_.max_pending - std::max<int64_t>(1, options_.max_pending / 4);
  absl::MutexLock lock(&mu_);
  auto room = [this, low]() ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) {
    return static_cast<int64_t>(pending_) <= low;
  };
  return mu_.AwaitWithTimeout(absl::Condition(&room), timeout);
}

bool AckWindow::AwaitEmpty(absl::Duration timeout) const {
  absl::MutexLock lock(&mu_);
  auto empty = [this]() ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) { return pending_ == 0; };
  return mu_.AwaitWithTimeout(absl::Condition(&empty), timeout);
}

}  // namespace aftershock
