// RollingWindow: fixed-capacity ring buffer of a symbol's most recent
// closed-bar returns (PRODUCT.md C5). All storage is allocated by Create; Push
// never allocates.
//
// Thread-safety: not thread-safe; owned by the ingest thread. Copies taken with
// CopyTo are independent of the window.
#ifndef AFTERSHOCK_ROLLING_WINDOW_H_
#define AFTERSHOCK_ROLLING_WINDOW_H_

#include <cstdint>
#include <vector>

#include "absl/status/statusor.h"

namespace aftershock {

class RollingWindow {
 public:
  RollingWindow() = default;  // capacity 0: REQUIRES Create before use

  // InvalidArgument unless capacity >= 1. Cost: capacity doubles.
  static absl::StatusOr<RollingWindow> Create(int capacity);

  // Appends r, overwriting the oldest return once full. No allocation.
  void Push(double r) {
    buf_[head_] = r;
    head_ = head_ + 1 == capacity_ ? 0 : head_ + 1;
    if (size_ < capacity_) ++size_;
    ++total_;
  }

  int capacity() const { return capacity_; }
  int size() const { return size_; }        // returns held, <= capacity
  int64_t total() const { return total_; }  // returns pushed since creation

  // i-th held return, oldest first. REQUIRES: 0 <= i < size().
  double at(int i) const {
    int k = head_ - size_ + i;
    if (k < 0) k += capacity_;
    return buf_[k];
  }
  // i-th most recent return (0 = latest). REQUIRES: 0 <= i < size().
  double back(int i) const { return at(size_ - 1 - i); }

  // Replaces *out with the held returns, oldest first. No allocation when
  // out->capacity() >= size().
  void CopyTo(std::vector<double>* out) const;

  // Bytes owned by the window (its buffer).
  size_t MemoryBytes() const { return buf_.capacity() * sizeof(double); }

 private:
  std::vector<double> buf_;
  int capacity_ = 0;
  int head_ = 0;  // next write position
  int size_ = 0;
  int64_t total_ = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_ROLLING_WINDOW_H_
