#include "aftershock/rolling_window.h"

#include <algorithm>
#include <cmath>

#include "absl/strings/str_cat.h"

namespace aftershock {

absl::StatusOr<RollingWindow> RollingWindow::Create(int capacity, bool with_tags) {
  if (capacity < 1) {
    return absl::InvalidArgumentError(
        absl::StrCat("window capacity must be at least 1 bar, got ", capacity));
  }
  RollingWindow w;
  w.buf_.assign(static_cast<size_t>(capacity), 0.0);
  if (with_tags) w.tags_.assign(static_cast<size_t>(capacity), 0);
  w.capacity_ = capacity;
  return w;
}

void RollingWindow::CopyTagsTo(std::vector<int32_t>* out) const {
  out->resize(tags_.empty() ? 0 : static_cast<size_t>(size_));
  for (size_t i = 0; i < out->size(); ++i) (*out)[i] = tag_at(static_cast<int>(i));
}

void RollingWindow::CopyTo(std::vector<double>* out) const {
  out->resize(static_cast<size_t>(size_));
  // Two contiguous runs: [start, capacity) then [0, head).
  int start = head_ - size_;
  if (start < 0) start += capacity_;
  const int first = std::min(size_, capacity_ - start);
  std::copy(buf_.begin() + start, buf_.begin() + start + first, out->begin());
  std::copy(buf_.begin(), buf_.begin() + (size_ - first), out->begin() + first);
}

size_t RollingWindow::SyncFrom(const RollingWindow& live) {
  const int64_t fresh = live.total_ - total_;
  const bool follows = capacity_ == live.capacity_ && has_tags() == live.has_tags() && fresh >= 0 &&
                       fresh <= capacity_ &&
                       std::min<int64_t>(capacity_, size_ + fresh) == live.size_;
  if (!follows) {
    if (capacity_ != live.capacity_ || tags_.size() != live.tags_.size()) {
      buf_.assign(live.buf_.size(), 0.0);
      tags_.assign(live.tags_.size(), 0);
      capacity_ = live.capacity_;
    }
    std::copy(live.buf_.begin(), live.buf_.end(), buf_.begin());
    std::copy(live.tags_.begin(), live.tags_.end(), tags_.begin());
    head_ = live.head_;
    size_ = live.size_;
    total_ = live.total_;
    return buf_.size() * sizeof(double) + tags_.size() * sizeof(uint16_t);
  }
  // The `fresh` newest returns of `live`, oldest first.
  for (int64_t i = fresh; i > 0; --i) {
    const int k = static_cast<int>(i - 1);
    Push(live.back(k), live.has_tags() ? live.tag_back(k) : 0);
  }
  return static_cast<size_t>(fresh) * (sizeof(double) + (has_tags() ? sizeof(uint16_t) : 0));
}

}  // namespace aftershock

namespace aftershock {

void RollingWindow::SaveState(StateWriter* w) const {
  w->U64(static_cast<uint64_t>(size_));
  w->I64(total_);
  w->Bool(has_tags());
  // Oldest first, as two contiguous runs [start, capacity) and [0, head): the
  // host is little-endian (state_codec.h), so the raw bytes are the encoding.
  int start = head_ - size_;
  if (start < 0) start += capacity_;
  const int first = std::min(size_, capacity_ - start);
  const char* data = reinterpret_cast<const char*>(buf_.data());
  w->Append(absl::string_view(data + start * sizeof(double), first * sizeof(double)));
  w->Append(absl::string_view(data, (size_ - first) * sizeof(double)));
  if (!has_tags()) return;
  // Tags as int32 (the encoding before windows held them in 16 bits), in
  // blocks expanded on the stack.
  constexpr int kBlock = 256;
  int32_t block[kBlock];
  for (int i = 0; i < size_; i += kBlock) {
    const int m = std::min(kBlock, size_ - i);
    for (int j = 0; j < m; ++j) block[j] = tag_at(i + j);
    w->Append(absl::string_view(reinterpret_cast<const char*>(block), m * sizeof(int32_t)));
  }
}

void RollingWindow::RestoreState(StateReader* r, absl::string_view what) {
  const std::string field = absl::StrCat(what, " window");
  const uint64_t n = r->Count(field, static_cast<uint64_t>(capacity_));
  const int64_t total = r->I64(field);
  const bool tags = r->Bool(field);
  if (!r->ok()) return;
  if (total < static_cast<int64_t>(n)) {
    r->Fail(field, absl::StrCat("total ", total, " below its size ", n));
    return;
  }
  if (tags != has_tags()) {
    r->Fail(field, tags ? "has tags the configuration does not keep"
                        : "has no tags; the configuration keeps them");
    return;
  }
  for (uint64_t i = 0; i < n; ++i) {
    buf_[i] = r->FiniteF64(field);
    if (!r->ok()) return;
  }
  for (uint64_t i = 0; tags && i < n; ++i) tags_[i] = CompactSeasonalTag(r->I32(field));
  size_ = static_cast<int>(n);
  head_ = size_ == capacity_ ? 0 : size_;
  total_ = total;
}

}  // namespace aftershock
