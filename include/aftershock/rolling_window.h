// RollingWindow: fixed-capacity ring buffer of a symbol's most recent
// closed-bar returns (PRODUCT.md C5), optionally each with a bar-of-session
// tag (seasonal_profile.h), read and written as int32 and held in 16 bits
// (CompactSeasonalTag). All storage is allocated by Create; Push never
// allocates.
//
// Thread-safety: not thread-safe; owned by the ingest thread. Copies taken with
// CopyTo are independent of the window.
#ifndef AFTERSHOCK_ROLLING_WINDOW_H_
#define AFTERSHOCK_ROLLING_WINDOW_H_

#include <cstdint>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/seasonal_profile.h"
#include "aftershock/state_codec.h"

namespace aftershock {

class RollingWindow {
 public:
  RollingWindow() = default;  // capacity 0: REQUIRES Create before use

  // InvalidArgument unless capacity >= 1. Cost: capacity doubles (and
  // capacity 16-bit tags when with_tags).
  static absl::StatusOr<RollingWindow> Create(int capacity, bool with_tags = false);

  // Appends r (and its tag, kept only when the window has tags, as
  // CompactSeasonalTag holds it), overwriting the oldest return once full. No
  // allocation.
  void Push(double r, int32_t tag = 0) {
    if (!tags_.empty()) tags_[head_] = CompactSeasonalTag(tag);
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
  bool has_tags() const { return !tags_.empty(); }
  // Tags, indexed like at() / back(): what Push got, but a bucket above
  // kSeasonalTagCompactBucketMax reads as that. REQUIRES: has_tags(), index
  // in range.
  int32_t tag_at(int i) const {
    int k = head_ - size_ + i;
    if (k < 0) k += capacity_;
    return ExpandSeasonalTag(tags_[k]);
  }
  int32_t tag_back(int i) const { return tag_at(size_ - 1 - i); }
  // Replaces *out with the held tags, oldest first (empty without tags).
  void CopyTagsTo(std::vector<int32_t>* out) const;

  // Replaces *out with the held returns, oldest first. No allocation when
  // out->capacity() >= size().
  void CopyTo(std::vector<double>* out) const;

  // Makes this window equal to `live` (same capacity, tags, held returns and
  // total), copying only the returns `live` pushed since this window last
  // equalled it: a checkpoint capture's mirror (state_capture.h) follows its
  // live window at a cost proportional to the new returns. Everything is
  // copied (allocating when the capacity or tag setting differs) when this
  // window never equalled `live` or the two diverged (a total that went
  // back, or a held count that does not follow from the new returns).
  // Returns the bytes copied (returns and tags; 0: the window was already
  // equal to `live`).
  size_t SyncFrom(const RollingWindow& live);

  // Checkpoint encoding: size, total, then the held returns (and tags, as
  // int32) oldest first.
  void SaveState(StateWriter* w) const;
  // Restores what SaveState wrote into a window created with the same capacity
  // and tag setting (REQUIRES: Create'd, nothing pushed). More values than the
  // capacity, a total below the size, non-finite returns or a tag setting
  // that differs set the reader's error naming `what`.
  void RestoreState(StateReader* r, absl::string_view what);

  // Bytes owned by the window (its buffer).
  size_t MemoryBytes() const {
    return buf_.capacity() * sizeof(double) + tags_.capacity() * sizeof(uint16_t);
  }

 private:
  std::vector<double> buf_;
  // Empty, or capacity entries parallel to buf_ (CompactSeasonalTag).
  std::vector<uint16_t> tags_;
  int capacity_ = 0;
  int head_ = 0;  // next write position
  int size_ = 0;
  int64_t total_ = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_ROLLING_WINDOW_H_
