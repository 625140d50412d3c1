// A std::mutex with Clang thread-safety annotations, for the refit pool.
//
// Why not absl::Mutex: Debian's Abseil is built without ThreadSanitizer
// instrumentation, so TSan cannot see the happens-before edges of absl::Mutex
// (its futex fast path lives in the uninstrumented library) and reports false
// races on every guarded member. std::mutex goes through pthread, which TSan
// intercepts; the ABSL_* annotations below keep -Wthread-safety checking the
// "guarded by" discipline exactly as with absl::Mutex.
#ifndef AFTERSHOCK_REFIT_SYNC_H_
#define AFTERSHOCK_REFIT_SYNC_H_

#include <condition_variable>
#include <mutex>

#include "absl/base/thread_annotations.h"

namespace aftershock::refit_internal {

class ABSL_LOCKABLE Mutex {
 public:
  void Lock() ABSL_EXCLUSIVE_LOCK_FUNCTION() { mu_.lock(); }
  void Unlock() ABSL_UNLOCK_FUNCTION() { mu_.unlock(); }
  // True when the lock was free and is now held; never blocks.
  bool TryLock() ABSL_EXCLUSIVE_TRYLOCK_FUNCTION(true) { return mu_.try_lock(); }
  // Blocks on cv until woken (spurious wake-ups possible: callers loop on their
  // predicate). The lock is released while waiting and held again on return.
  void Wait(std::condition_variable* cv) ABSL_EXCLUSIVE_LOCKS_REQUIRED(this) {
    std::unique_lock<std::mutex> lock(mu_, std::adopt_lock);
    cv->wait(lock);
    lock.release();
  }

 private:
  std::mutex mu_;
};

class ABSL_SCOPED_LOCKABLE MutexLock {
 public:
  explicit MutexLock(Mutex* mu) ABSL_EXCLUSIVE_LOCK_FUNCTION(mu) : mu_(mu) { mu_->Lock(); }
  ~MutexLock() ABSL_UNLOCK_FUNCTION() { mu_->Unlock(); }
  MutexLock(const MutexLock&) = delete;
  MutexLock& operator=(const MutexLock&) = delete;

 private:
  Mutex* const mu_;
};

}  // namespace aftershock::refit_internal

#endif  // AFTERSHOCK_REFIT_SYNC_H_
