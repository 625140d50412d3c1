#include "aftershock/rolling_window.h"

#include <algorithm>

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

}  // namespace aftershock
