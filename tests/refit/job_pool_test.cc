#include "refit/job_pool.h"

#include <catch2/catch.hpp>
#include <cerrno>
#include <condition_variable>
#ifdef __linux__
#include <sys/resource.h>
#include <sys/syscall.h>
#include <unistd.h>
#endif
#include <mutex>
#include <vector>

namespace aftershock::refit_internal {
namespace {

TEST_CASE("every submitted slot completes and its results are visible", "[pool]") {
  const int kSlots = 64;
  std::vector<int> input(kSlots), output(kSlots, 0);  // plain memory, protocol-protected
  JobPool pool(2, kSlots, [&](uint32_t s) { output[s] = input[s] * 2; });
  for (int round = 0; round < 20; ++round) {
    for (int s = 0; s < kSlots; ++s) {
      input[s] = round * 1000 + s;
      pool.Submit(static_cast<uint32_t>(s), s % 3 == 0);
    }
    for (int s = 0; s < kSlots; ++s) {
      pool.WaitDone(static_cast<uint32_t>(s));
      REQUIRE(pool.IsDone(static_cast<uint32_t>(s)));
      REQUIRE(output[s] == 2 * (round * 1000 + s));
      pool.Recycle(static_cast<uint32_t>(s));
    }
  }
  CHECK(pool.queued() == 0);
}

#ifdef __linux__
TEST_CASE("workers run at niceness 10 or lower priority, the ingest thread unchanged", "[pool]") {
  errno = 0;
  const int ingest_before = getpriority(PRIO_PROCESS, static_cast<id_t>(::syscall(SYS_gettid)));
  REQUIRE(errno == 0);
  std::vector<int> nice(2, -100);  // written by the job of each slot
  {
    JobPool pool(2, 2, [&](uint32_t s) {
      nice[s] = getpriority(PRIO_PROCESS, static_cast<id_t>(::syscall(SYS_gettid)));
    });
    for (uint32_t s = 0; s < 2; ++s) pool.Submit(s, false);
    for (uint32_t s = 0; s < 2; ++s) pool.WaitDone(s);
  }
  // 10, or the process's own niceness when it already runs above 10 (an
  // unprivileged thread cannot lower it).
  for (int n : nice) CHECK(n >= 10);
  CHECK(getpriority(PRIO_PROCESS, static_cast<id_t>(::syscall(SYS_gettid))) == ingest_before);
}
#endif

TEST_CASE("the priority lane is served first", "[pool]") {
  std::mutex mu;
  std::condition_variable cv;
  bool open = false;
  std::vector<uint32_t> order;  // guarded by mu
  JobPool pool(1, 8, [&](uint32_t s) {
    std::unique_lock<std::mutex> l(mu);
    cv.wait(l, [&] { return open || s != 0; });
    order.push_back(s);
  });
  pool.Submit(0, false);  // occupies the single worker until `open`
  while (pool.running() == 0) std::this_thread::yield();
  pool.Submit(1, false);
  pool.Submit(2, false);
  pool.Submit(3, true);
  pool.Submit(4, true);
  CHECK(pool.queued() == 4);
  {
    std::lock_guard<std::mutex> l(mu);
    open = true;
  }
  cv.notify_all();
  for (uint32_t s = 0; s < 5; ++s) pool.WaitDone(s);
  std::lock_guard<std::mutex> l(mu);
  CHECK(order == std::vector<uint32_t>{0, 3, 4, 1, 2});
}

}  // namespace
}  // namespace aftershock::refit_internal
