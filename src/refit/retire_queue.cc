#include "refit/retire_queue.h"

namespace aftershock::refit_internal {

RetireQueue::RetireQueue(size_t objects, size_t records)
    : reserve_objects_(objects), reserve_records_(records) {
  bin_.Reserve(objects, records);
  MutexLock l(&mu_);
  shared_.Reserve(objects, records);
}

void RetireQueue::HandOver() {
  if (bin_.size() == 0) return;
  // A lock held by a worker (taking a batch, a few instructions) is not waited
  // for: the objects stay in the bin until the next call.
  if (!mu_.TryLock()) return;
  if (shared_.size() == 0) shared_.swap(bin_);
  mu_.Unlock();
}

void RetireQueue::Release() {
  // Empty between calls; it carries its capacity from one batch to the next,
  // so the buffers the ingest thread gets back in a swap are already grown.
  thread_local Bin taken;
  // Grown here, on the worker, before it is handed back through shared_: the
  // ingest thread gets bins with room (a no-op once grown).
  taken.Reserve(reserve_objects_, reserve_records_);
  {
    MutexLock l(&mu_);
    if (shared_.size() == 0) return;
    shared_.swap(taken);
  }
  taken.clear();  // the releases, on this thread
}

}  // namespace aftershock::refit_internal
