// JobPool: the refit worker threads and the hand-off of job slots between the
// ingest thread and the workers (PRODUCT.md C5).
//
// Slots are integers in [0, capacity). Protocol for one slot:
//   1. ingest: fills the slot's payload (owned by the caller), then Submit(slot).
//      Submit pushes the index into a lane under mu_; the mutex release/acquire
//      orders the payload writes before the worker's reads.
//   2. worker: pops the index (under mu_, O(1)), runs `work(slot)` outside any
//      lock, writing the slot's results, then publishes done_[slot] with a
//      release store (under done_mu_, so a replay-mode waiter is woken).
//   3. ingest: IsDone(slot) is an acquire load (wait-free, lock-free); when true,
//      every result write of step 2 is visible. The ingest thread then reads the
//      results, calls Recycle(slot) (relaxed store of false: the next Submit's
//      mutex orders it) and may reuse the slot.
// Between Submit and IsDone()==true only the worker touches the payload/results;
// otherwise only the ingest thread does. Workers never hold mu_ while working,
// so the ingest side's Submit waits at most for an O(1) lane operation.
//
// Two lanes: priority (symbols without a model or after a failed fit) is
// served before normal; FIFO within a lane.
//
// Thread-safety: Submit/IsDone/WaitDone/Recycle from one thread (the ingest
// thread); the destructor stops the workers after their current job (queued
// jobs are discarded) and joins them.
#ifndef AFTERSHOCK_REFIT_JOB_POOL_H_
#define AFTERSHOCK_REFIT_JOB_POOL_H_

#include <atomic>
#include <condition_variable>
#include <cstdint>
#include <functional>
#include <memory>
#include <thread>
#include <vector>

#include "absl/base/thread_annotations.h"
#include "refit/sync.h"

namespace aftershock::refit_internal {

class JobPool {
 public:
  using Work = std::function<void(uint32_t slot)>;

  // REQUIRES: workers >= 1, capacity >= 1. Starts the threads.
  JobPool(int workers, int capacity, Work work);
  ~JobPool();
  JobPool(const JobPool&) = delete;
  JobPool& operator=(const JobPool&) = delete;

  // REQUIRES: slot not in flight; at most `capacity` slots in flight.
  void Submit(uint32_t slot, bool priority) ABSL_LOCKS_EXCLUDED(mu_);
  bool IsDone(uint32_t slot) const { return done_[slot].v.load(std::memory_order_acquire); }
  // Blocks until IsDone(slot) (replay mode only).
  void WaitDone(uint32_t slot) ABSL_LOCKS_EXCLUDED(done_mu_);
  void Recycle(uint32_t slot) { done_[slot].v.store(false, std::memory_order_relaxed); }

  // Jobs submitted and not yet picked up by a worker. Read queued() before
  // running(): the pair then never misses a job in between (see WorkerLoop).
  int queued() const { return queued_.load(std::memory_order_acquire); }
  // Jobs a worker is running now. Decremented (release) after the job's done
  // store, read with acquire: once queued() + running() reads 0, every job
  // submitted before is IsDone().
  int running() const { return running_.load(std::memory_order_acquire); }

 private:
  // Fixed-capacity FIFO of slot indices; storage allocated at construction.
  struct Lane {
    std::vector<uint32_t> ring;
    size_t head = 0, size = 0;
  };
  void WorkerLoop() ABSL_LOCKS_EXCLUDED(mu_);
  // One cache line per flag: a worker's store must not invalidate the line the
  // ingest thread polls for other symbols' jobs.
  struct alignas(64) DoneFlag {
    std::atomic<bool> v{false};
  };

  // ---- constant after construction ----
  const Work work_;
  const std::unique_ptr<DoneFlag[]> done_;  // one per slot, see protocol

  // ---- guarded by mu_ ----
  Mutex mu_;
  std::condition_variable work_cv_;     // signalled on Submit and on stop
  Lane lanes_[2] ABSL_GUARDED_BY(mu_);  // [0] priority, [1] normal
  bool stop_ ABSL_GUARDED_BY(mu_) = false;

  // ---- replay-mode completion wait ----
  Mutex done_mu_;                    // held only to store a done flag / to wait
  std::condition_variable done_cv_;  // signalled after each done store

  // ---- metrics ----
  std::atomic<int> queued_{0};   // see queued()
  std::atomic<int> running_{0};  // see running()

  // Last: the threads start after every member above exists, and are joined
  // (in the destructor) before any is destroyed.
  std::vector<std::thread> threads_;
};

}  // namespace aftershock::refit_internal

#endif  // AFTERSHOCK_REFIT_JOB_POOL_H_
