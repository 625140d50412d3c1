#include "aftershock/rolling_window.h"

#include <catch2/catch.hpp>
#include <string>
#include <vector>

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

// The encoding of a window (its checkpoint bytes): what a mirror must match.
std::string Saved(const RollingWindow& w) {
  StateWriter out;
  w.SaveState(&out);
  return out.Release();
}

TEST_CASE("a mirror follows its window with the new returns only", "[window]") {
  for (bool tags : {false, true}) {
    INFO("tags " << tags);
    auto live = RollingWindow::Create(7, tags);
    REQUIRE(live.ok());
    RollingWindow mirror;  // never equalled it: the first sync copies everything
    mirror.SyncFrom(*live);
    CHECK(Saved(mirror) == Saved(*live));
    int pushed = 0;
    // Steps below, at and above the capacity, so the ring wraps at every
    // position and a step longer than the window is copied afresh.
    for (int step : {1, 2, 3, 6, 7, 8, 1, 15, 4, 5, 0, 9, 2}) {
      for (int k = 0; k < step; ++k, ++pushed) live->Push(0.5 * pushed - 3, 100 + pushed);
      const uint64_t before = testing::AllocationCount();
      mirror.SyncFrom(*live);
      // Once sized, following allocates nothing.
      if (testing::AllocationCountingEnabled()) CHECK(testing::AllocationCount() == before);
      INFO("after " << pushed << " pushes");
      REQUIRE(mirror.total() == live->total());
      REQUIRE(mirror.size() == live->size());
      REQUIRE(Saved(mirror) == Saved(*live));
    }
  }
}

TEST_CASE("a mirror whose window changed shape or went back copies it whole", "[window]") {
  // A mirror is only ever synced from its own window; another capacity,
  // another tag setting or a total below the mirror's are detected and the
  // window is copied whole.
  auto a = RollingWindow::Create(5);
  auto wide = RollingWindow::Create(9, /*with_tags=*/true);
  REQUIRE((a.ok() && wide.ok()));
  for (int i = 0; i < 3; ++i) a->Push(i);
  for (int i = 0; i < 4; ++i) wide->Push(20 + i, i);
  RollingWindow mirror;
  mirror.SyncFrom(*a);
  REQUIRE(Saved(mirror) == Saved(*a));
  mirror.SyncFrom(*wide);
  CHECK(mirror.capacity() == 9);
  CHECK(mirror.has_tags());
  CHECK(Saved(mirror) == Saved(*wide));
  mirror.SyncFrom(*a);  // total 3 below 4, and capacity 5 again
  CHECK(mirror.capacity() == 5);
  CHECK(Saved(mirror) == Saved(*a));
}

TEST_CASE("tags are held in 16 bits and read back as pushed", "[window]") {
  auto w = RollingWindow::Create(6, /*with_tags=*/true);
  REQUIRE(w.ok());
  // Every flag combination, buckets at the edges of the 14 bits, and two
  // beyond them (a session of more bars than any profile covers).
  const std::vector<int32_t> pushed = {
      SeasonalTag(0, false, false),    SeasonalTag(4095, true, false),
      SeasonalTag(16382, false, true), SeasonalTag(7, true, true),
      SeasonalTag(16383, true, false), SeasonalTag(200000, false, true)};
  const std::vector<int32_t> read = {
      pushed[0], pushed[1], pushed[2],
      pushed[3], pushed[4], SeasonalTag(kSeasonalTagCompactBucketMax, false, true)};
  for (size_t i = 0; i < pushed.size(); ++i) w->Push(0.5 * static_cast<double>(i), pushed[i]);
  for (int i = 0; i < 6; ++i) CHECK(w->tag_at(i) == read[static_cast<size_t>(i)]);
  CHECK(SeasonalTagBucket(w->tag_back(0)) >= kMaxSeasonalBuckets);
  std::vector<int32_t> tags;
  w->CopyTagsTo(&tags);
  CHECK(tags == read);
  CHECK(w->MemoryBytes() == 6 * (sizeof(double) + sizeof(uint16_t)));
}

TEST_CASE("a tagged window's checkpoint holds its tags as int32, whatever the wrap", "[window]") {
  // The encoding written before windows held their tags in 16 bits: size,
  // total, a tag flag, the returns, then one little-endian int32 per tag,
  // oldest first. Built here field by field, for a window that wrapped and
  // one longer than the 256-tag blocks the encoder expands at a time.
  for (const int capacity : {5, 600}) {
    INFO("capacity " << capacity);
    auto w = RollingWindow::Create(capacity, /*with_tags=*/true);
    REQUIRE(w.ok());
    std::vector<double> r;
    std::vector<int32_t> t;
    const int pushes = capacity + 3;
    for (int i = 0; i < pushes; ++i) {
      const int32_t tag = SeasonalTag(i % 510, i % 510 == 0, i % 1020 == 0);
      w->Push(0.25 * i, tag);
      r.push_back(0.25 * i);
      t.push_back(tag);
    }
    StateWriter expected;
    expected.U64(static_cast<uint64_t>(capacity));
    expected.I64(pushes);
    expected.Bool(true);
    for (int i = pushes - capacity; i < pushes; ++i) expected.F64(r[static_cast<size_t>(i)]);
    for (int i = pushes - capacity; i < pushes; ++i) expected.I32(t[static_cast<size_t>(i)]);
    CHECK(Saved(*w) == expected.data());

    // Restored, it reads the same and saves the same bytes.
    auto back = RollingWindow::Create(capacity, /*with_tags=*/true);
    REQUIRE(back.ok());
    StateReader in(expected.data());
    back->RestoreState(&in, "test");
    REQUIRE(in.ok());
    CHECK(back->tag_back(0) == t.back());
    CHECK(back->tag_at(0) == t[static_cast<size_t>(pushes - capacity)]);
    CHECK(Saved(*back) == expected.data());
  }
}

TEST_CASE("a window needs a positive capacity", "[window]") {
  auto w = RollingWindow::Create(0);
  REQUIRE_FALSE(w.ok());
  CHECK(std::string(w.status().message()) == "window capacity must be at least 1 bar, got 0");
}

}  // namespace
}  // namespace aftershock
