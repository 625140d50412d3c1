#include "aftershock/rolling_window.h"

#include <catch2/catch.hpp>

#include "support/alloc_counter.h"

namespace aftershock {
namespace {

TEST_CASE("the window keeps the latest returns in order", "[window]") {
  auto w = RollingWindow::Create(5);
  REQUIRE(w.ok());
  CHECK(w->size() == 0);
  for (int i = 1; i <= 3; ++i) w->Push(i);
  CHECK(w->size() == 3);
  CHECK(w->at(0) == 1);
  CHECK(w->back(0) == 3);
  for (int i = 4; i <= 12; ++i) w->Push(i);
  CHECK(w->size() == 5);
  CHECK(w->total() == 12);
  for (int i = 0; i < 5; ++i) CHECK(w->at(i) == 8 + i);
  CHECK(w->back(0) == 12);
  CHECK(w->back(4) == 8);
  std::vector<double> out;
  w->CopyTo(&out);
  CHECK(out == std::vector<double>{8, 9, 10, 11, 12});
}

TEST_CASE("copies at every wrap position match the ring", "[window]") {
  auto w = RollingWindow::Create(7);
  REQUIRE(w.ok());
  std::vector<double> all;
  std::vector<double> out;
  out.reserve(7);
  for (int i = 0; i < 30; ++i) {
    w->Push(i * 0.5);
    all.push_back(i * 0.5);
    w->CopyTo(&out);
    const size_t n = std::min<size_t>(all.size(), 7);
    REQUIRE(out.size() == n);
    for (size_t k = 0; k < n; ++k) REQUIRE(out[k] == all[all.size() - n + k]);
  }
}

TEST_CASE("push and reserved copies allocate nothing", "[window]") {
  if (!testing::AllocationCountingEnabled()) WARN("allocation counting is off in this build");
  auto w = RollingWindow::Create(2000);
  REQUIRE(w.ok());
  std::vector<double> out;
  out.reserve(2000);
  const uint64_t before = testing::AllocationCount();
  for (int i = 0; i < 5000; ++i) w->Push(i);
  w->CopyTo(&out);
  if (testing::AllocationCountingEnabled()) CHECK(testing::AllocationCount() == before);
  CHECK(out.front() == 3000);
  CHECK(w->MemoryBytes() == 16000);
}

TEST_CASE("a window needs a positive capacity", "[window]") {
  auto w = RollingWindow::Create(0);
  REQUIRE_FALSE(w.ok());
  CHECK(std::string(w.status().message()) == "window capacity must be at least 1 bar, got 0");
}

}  // namespace
}  // namespace aftershock
