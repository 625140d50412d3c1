#include "io/ack_window.h"

#include <algorithm>
#include <limits>
#include <utility>

#include "absl/strings/str_cat.h"

namespace aftershock {

bool AckWindow::CanAdmit(absl::string_view key) const {
  absl::MutexLock lock(&mu_);
  return static_cast<int64_t>(by_id_.size()) < options_.max_in_flight && !keys_.contains(key);
}

void AckWindow::Admit(absl::string_view key, absl::string_view id, absl::string_view subject,
                      absl::string_view body, int64_t now_ns) {
  absl::MutexLock lock(&mu_);
  Entry e;
  e.key = std::string(key);
  e.subject = std::string(subject);
  e.body = std::string(body);
  e.order = next_order_++;
  e.first_sent_ns = now_ns;
  keys_.insert(e.key);
  by_order_.emplace(e.order, std::string(id));
  by_id_.insert_or_assign(std::string(id), std::move(e));
  ++stats_.admitted;
}

bool AckWindow::OnAck(absl::string_view id, bool duplicate) {
  absl::MutexLock lock(&mu_);
  auto it = by_id_.find(id);
  if (it == by_id_.end()) return false;
  keys_.erase(it->second.key);
  by_order_.erase(it->second.order);
  if (it->second.failed) --failed_;
  by_id_.erase(it);
  ++stats_.acked;
  if (duplicate) ++stats_.duplicates;
  ++version_;
  return true;
}

bool AckWindow::OnFailure(absl::string_view id, absl::string_view error, int64_t now_ns) {
  absl::MutexLock lock(&mu_);
  auto it = by_id_.find(id);
  if (it == by_id_.end()) return false;
  Entry& e = it->second;
  if (!e.failed) ++failed_;
  e.failed = true;
  e.resend_ns = now_ns + options_.retry_delay_ms * 1000000;
  e.last_error = std::string(error);
  ++stats_.failures;
  ++version_;
  return true;
}

std::vector<AckWindowResend> AckWindow::TakeDue(int64_t now_ns) {
  absl::MutexLock lock(&mu_);
  std::vector<std::pair<uint64_t, AckWindowResend>> due;
  if (failed_ == 0) return {};
  for (auto& [id, e] : by_id_) {
    if (!e.failed || e.resend_ns > now_ns) continue;
    e.failed = false;
    --failed_;
    ++e.attempts;
    ++stats_.resends;
    due.push_back({e.order, AckWindowResend{id, e.subject, e.body, e.attempts}});
  }
  std::sort(due.begin(), due.end(), [](const auto& a, const auto& b) { return a.first < b.first; });
  std::vector<AckWindowResend> out;
  out.reserve(due.size());
  for (auto& d : due) out.push_back(std::move(d.second));
  return out;
}

absl::Status AckWindow::CheckGiveUp(int64_t now_ns) const {
  absl::MutexLock lock(&mu_);
  if (by_order_.empty()) return absl::OkStatus();
  // Admission order is first-send order, so the oldest entry expires first.
  const std::string* oldest_id = &by_order_.begin()->second;
  const Entry* oldest = &by_id_.find(*oldest_id)->second;
  if (now_ns - oldest->first_sent_ns < options_.give_up_ms * 1000000) return absl::OkStatus();
  return absl::DeadlineExceededError(absl::StrCat(
      "tick of ", oldest->key, " (message id ", *oldest_id, ") not acknowledged by JetStream ",
      options_.give_up_ms / 1000.0, " s after its first send (", oldest->attempts,
      oldest->attempts == 1 ? " attempt" : " attempts",
      "; last error: ", oldest->last_error.empty() ? "none reported" : oldest->last_error, "); ",
      by_id_.size(), " tick(s) unacknowledged"));
}

int64_t AckWindow::NextDeadline() const {
  absl::MutexLock lock(&mu_);
  int64_t next = std::numeric_limits<int64_t>::max();
  if (by_order_.empty()) return next;
  next =
      by_id_.find(by_order_.begin()->second)->second.first_sent_ns + options_.give_up_ms * 1000000;
  if (failed_ == 0) return next;
  for (const auto& [id, e] : by_id_) {
    if (e.failed) next = std::min(next, e.resend_ns);
  }
  return next;
}

size_t AckWindow::in_flight() const {
  absl::MutexLock lock(&mu_);
  return by_id_.size();
}

AckWindowStats AckWindow::stats() const {
  absl::MutexLock lock(&mu_);
  return stats_;
}

uint64_t AckWindow::version() const {
  absl::MutexLock lock(&mu_);
  return version_;
}

void AckWindow::AwaitChange(uint64_t seen, absl::Duration timeout) const {
  absl::MutexLock lock(&mu_);
  auto changed = [this, seen]() ABSL_EXCLUSIVE_LOCKS_REQUIRED(mu_) { return version_ != seen; };
  mu_.AwaitWithTimeout(absl::Condition(&changed), timeout);
}

}  // namespace aftershock
