// RetireQueue: objects the ingest thread lets go of when it applies a refit
// (the replaced record and model versions, which a worker allocated) are
// released by a worker instead.
//
// Why: glibc's malloc returns a freed block to the arena it came from, under
// that arena's lock. A worker allocates in its own arena all through a fit, so
// every release of a worker's block on the ingest thread could wait for the
// worker, and for a worker at niceness 10 that was preempted while holding the
// lock. scale_bench (100,000 instruments) counted about 4,000 such waits of
// the ingest thread in each universe-wide bar close, with bursts of 5-7 ms of
// wall time for 0.1 ms of CPU (DEVELOPERS.md "Applying refits in a
// universe-wide bar close").
//
// Protocol: the ingest thread collects objects in its own bin (Retire) and
// hands the bin over (HandOver) when the workers have taken the previous one
// and the lock is free at that instant; otherwise it keeps collecting. A
// worker takes the handed-over bin at the start of each job (Release) and
// destroys its contents outside the lock. The bins swap their buffers, so once
// their capacity has grown nothing is allocated. What is retired stays alive
// until a worker's next job (or the queue's destruction): a shared object may
// still be in use elsewhere, which only delays its release further.
//
// Thread-safety: Retire, HandOver and pending() from one thread (the ingest
// thread); Release from any thread (the workers). HandOver never blocks.
#ifndef AFTERSHOCK_REFIT_RETIRE_QUEUE_H_
#define AFTERSHOCK_REFIT_RETIRE_QUEUE_H_

#include <cstddef>
#include <memory>
#include <utility>
#include <vector>

#include "absl/base/thread_annotations.h"
#include "aftershock/model_registry.h"
#include "refit/sync.h"

namespace aftershock::refit_internal {

class RetireQueue {
 public:
  // Room for `objects` shared objects and `records` records and numbers in
  // each bin (the ingest thread's, the handed-over one and each worker's), so
  // that a batch that fits moves between threads without allocating.
  RetireQueue(size_t objects, size_t records);
  RetireQueue(const RetireQueue&) = delete;
  RetireQueue& operator=(const RetireQueue&) = delete;

  // Ingest thread: keeps the object (a null pointer is ignored) for a worker
  // to release. No allocation while the bin has room.
  void Retire(std::shared_ptr<const void> object) {
    if (object != nullptr) bin_.objects.push_back(std::move(object));
  }
  void Retire(RefitRecord&& record) { bin_.records.push_back(std::move(record)); }
  void Retire(RefitRecordJson&& numbers) { bin_.numbers.push_back(std::move(numbers)); }

  // Ingest thread: passes the collected objects to the workers if the batch
  // handed over before has been taken and the lock is free; otherwise keeps
  // them for the next call. Never blocks; no allocation.
  void HandOver() ABSL_LOCKS_EXCLUDED(mu_);

  // Worker: releases the batch handed over, if any, on the calling thread.
  void Release() ABSL_LOCKS_EXCLUDED(mu_);

  // Ingest thread: objects collected and not yet handed over.
  size_t pending() const { return bin_.size(); }

 private:
  struct Bin {
    std::vector<std::shared_ptr<const void>> objects;
    std::vector<RefitRecord> records;
    std::vector<RefitRecordJson> numbers;
    size_t size() const { return objects.size() + records.size() + numbers.size(); }
    void clear() {
      objects.clear();
      records.clear();
      numbers.clear();
    }
    void Reserve(size_t n_objects, size_t n_records) {
      objects.reserve(n_objects);
      records.reserve(n_records);
      numbers.reserve(n_records);
    }
    void swap(Bin& o) {
      objects.swap(o.objects);
      records.swap(o.records);
      numbers.swap(o.numbers);
    }
  };

  const size_t reserve_objects_, reserve_records_;
  Bin bin_;  // ingest thread only
  Mutex mu_;
  Bin shared_ ABSL_GUARDED_BY(mu_);  // handed over, not yet taken by a worker
};

}  // namespace aftershock::refit_internal

#endif  // AFTERSHOCK_REFIT_RETIRE_QUEUE_H_
