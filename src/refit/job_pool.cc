#include "refit/job_pool.h"

#ifdef __linux__
#include <sys/resource.h>
#include <sys/syscall.h>
#include <unistd.h>
#endif

namespace aftershock::refit_internal {
namespace {

// Niceness of the worker threads (Linux). The ingest thread stays at the
// process's own: with equal weights the scheduler splits a core evenly between
// ingest and a busy worker, so a refit storm (every symbol due at one bar
// close) would delay ticks by as much as it takes CPU. At niceness 10 a worker
// has about a tenth of ingest's weight: it still gets every cycle ingest does
// not use, and ingest gets the core back as soon as it is runnable.
constexpr int kWorkerNice = 10;

}  // namespace

JobPool::JobPool(int workers, int capacity, Work work)
    : work_(std::move(work)), done_(new DoneFlag[static_cast<size_t>(capacity)]) {
  {
    MutexLock l(&mu_);
    for (Lane& lane : lanes_) lane.ring.assign(static_cast<size_t>(capacity), 0);
  }
  threads_.reserve(static_cast<size_t>(workers));
  for (int i = 0; i < workers; ++i) threads_.emplace_back([this] { WorkerLoop(); });
}

JobPool::~JobPool() {
  {
    MutexLock l(&mu_);
    stop_ = true;
  }
  work_cv_.notify_all();
  for (std::thread& t : threads_) t.join();
}

void JobPool::Submit(uint32_t slot, bool priority) {
  {
    MutexLock l(&mu_);
    Lane& lane = lanes_[priority ? 0 : 1];
    lane.ring[(lane.head + lane.size) % lane.ring.size()] = slot;
    ++lane.size;
    queued_.fetch_add(1, std::memory_order_relaxed);
  }
  work_cv_.notify_one();
}

void JobPool::WaitDone(uint32_t slot) {
  MutexLock l(&done_mu_);
  while (!done_[slot].v.load(std::memory_order_acquire)) done_mu_.Wait(&done_cv_);
}

void JobPool::WorkerLoop() {
#ifdef __linux__
  // Linux applies a niceness to the calling thread alone; raising it needs no
  // privilege. Failure only leaves the default priority.
  (void)setpriority(PRIO_PROCESS, static_cast<id_t>(::syscall(SYS_gettid)), kWorkerNice);
#endif
  for (;;) {
    uint32_t slot = 0;
    {
      MutexLock l(&mu_);
      while (!stop_ && lanes_[0].size == 0 && lanes_[1].size == 0) mu_.Wait(&work_cv_);
      if (stop_) return;
      Lane& lane = lanes_[0].size > 0 ? lanes_[0] : lanes_[1];
      slot = lane.ring[lane.head];
      lane.head = (lane.head + 1) % lane.ring.size();
      --lane.size;
      // running_ first, then queued_ (release): a reader that sees the queued
      // count drop (acquire) sees this job counted as running.
      running_.fetch_add(1, std::memory_order_relaxed);
      queued_.fetch_sub(1, std::memory_order_release);
    }
    work_(slot);
    {
      // The release store publishes the slot's results; holding done_mu_ makes
      // the store and the notify atomic with respect to a waiter's check.
      MutexLock l(&done_mu_);
      done_[slot].v.store(true, std::memory_order_release);
    }
    // After the done store, with release: a reader that sees running() drop
    // (acquire) also sees the done flag of the job that just finished.
    running_.fetch_sub(1, std::memory_order_release);
    done_cv_.notify_all();
  }
}

}  // namespace aftershock::refit_internal
