// RetireQueue: what the ingest thread retires is released by the thread that
// calls Release (a worker), never by the retiring thread, exactly once.
#include "refit/retire_queue.h"

#include <atomic>
#include <catch2/catch.hpp>
#include <memory>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "support/alloc_counter.h"

namespace aftershock::refit_internal {
namespace {

// Objects whose deleter notes the thread that released them.
struct Releases {
  std::mutex mu;
  std::vector<std::thread::id> by;  // one entry per object released
  std::atomic<int> count{0};

  std::shared_ptr<const void> Make(int value) {
    return std::shared_ptr<const int>(new int(value), [this](const int* p) {
      {
        std::lock_guard<std::mutex> l(mu);
        by.push_back(std::this_thread::get_id());
      }
      count.fetch_add(1, std::memory_order_relaxed);
      delete p;
    });
  }
  int On(std::thread::id t) {
    std::lock_guard<std::mutex> l(mu);
    int n = 0;
    for (const auto& id : by) n += id == t;
    return n;
  }
};

// Release on a thread of its own, as a worker does.
void ReleaseOnAnotherThread(RetireQueue* q) {
  std::thread t([q] { q->Release(); });
  t.join();
}

TEST_CASE("retired objects are released by the thread that calls Release", "[refit]") {
  RetireQueue q(4, 4);
  Releases rel;
  for (int i = 0; i < 10; ++i) q.Retire(rel.Make(i));  // grows past the reserve
  q.Retire(std::shared_ptr<const void>());             // null: ignored
  CHECK(q.pending() == 10);
  q.HandOver();
  CHECK(q.pending() == 0);
  CHECK(rel.count.load() == 0);  // handed over, not released
  ReleaseOnAnotherThread(&q);
  CHECK(rel.count.load() == 10);
  CHECK(rel.On(std::this_thread::get_id()) == 0);
  // A shared object still referenced elsewhere outlives its release there.
  std::shared_ptr<const void> kept = rel.Make(99);
  q.Retire(kept);
  q.HandOver();
  ReleaseOnAnotherThread(&q);
  CHECK(rel.count.load() == 10);
  CHECK(kept.use_count() == 1);
}

TEST_CASE("a batch not yet taken by a worker is not handed over again", "[refit]") {
  RetireQueue q(8, 8);
  Releases rel;
  q.Retire(rel.Make(1));
  q.HandOver();  // the first batch waits for a worker
  q.Retire(rel.Make(2));
  q.Retire(rel.Make(3));
  q.HandOver();  // kept: the first is still there
  CHECK(q.pending() == 2);
  ReleaseOnAnotherThread(&q);
  CHECK(rel.count.load() == 1);
  ReleaseOnAnotherThread(&q);  // nothing handed over since: no-op
  CHECK(rel.count.load() == 1);
  q.HandOver();
  CHECK(q.pending() == 0);
  ReleaseOnAnotherThread(&q);
  CHECK(rel.count.load() == 3);
  CHECK(rel.On(std::this_thread::get_id()) == 0);
}

TEST_CASE("a retired record is freed on the releasing thread, not the retiring one", "[refit]") {
  if (!testing::AllocationCountingEnabled()) WARN("allocation counting is off in this build");
  RetireQueue q(4, 4);
  RefitRecord r;
  r.symbol = "a symbol name longer than the short-string buffer";
  r.names = {"omega_with_a_long_enough_name", "alpha_1_with_a_long_enough_name"};
  r.values = {1, 2};
  r.reasons = {"a gate reason long enough to live on the heap"};
  RefitRecordJson numbers;
  numbers.Prepare(r);
  const uint64_t before = testing::ThreadReleaseCount();
  q.Retire(std::move(r));
  q.Retire(std::move(numbers));
  q.HandOver();
  CHECK(testing::ThreadReleaseCount() == before);  // nothing freed here
  uint64_t freed_there = 0;
  std::thread t([&] {
    const uint64_t b = testing::ThreadReleaseCount();
    q.Release();
    freed_there = testing::ThreadReleaseCount() - b;
  });
  t.join();
  // symbol, two names and their vector, values, the reason and its vector,
  // the numbers' text.
  if (testing::AllocationCountingEnabled()) CHECK(freed_there >= 8);
}

TEST_CASE("retiring and releasing concurrently loses and doubles nothing", "[refit]") {
  // The ingest thread retires and hands over after every object; two workers
  // release as fast as they can (run under the thread-sanitizer build too).
  constexpr int kObjects = 200000;
  RetireQueue q(64, 64);
  Releases rel;
  std::atomic<bool> stop{false};
  std::vector<std::thread> workers;
  for (int w = 0; w < 2; ++w) {
    workers.emplace_back([&] {
      while (!stop.load(std::memory_order_acquire)) q.Release();
    });
  }
  for (int i = 0; i < kObjects; ++i) {
    q.Retire(rel.Make(i));
    q.HandOver();
  }
  // What is left: hand over until the workers have everything.
  while (q.pending() > 0) {
    q.HandOver();
    std::this_thread::yield();
  }
  while (rel.count.load() < kObjects) std::this_thread::yield();
  stop.store(true, std::memory_order_release);
  for (std::thread& t : workers) t.join();
  CHECK(rel.count.load() == kObjects);
  CHECK(rel.On(std::this_thread::get_id()) == 0);
}

}  // namespace
}  // namespace aftershock::refit_internal
