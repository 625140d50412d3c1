// PartitionLanes (partition_lanes.h): a partition's lane checkpointed,
// dropped and restored in another PartitionLanes (another instance)
// continues exactly as the uninterrupted lane: the concatenation of what the
// two published equals the uninterrupted output message for message, byte
// for byte, refit records and swaps included. That covers three promises:
// the checkpoint is the engine checkpoint of the partition's symbols; the
// refit schedule and the pending jobs move with it (exact hand-off, some
// splits have jobs in flight); and a dropped lane publishes nothing for its
// open bars (a released partition never sends a partial last bar).
#include "aftershock/partition_lanes.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "aftershock/checkpoint_file.h"
#include "aftershock/clock.h"
#include "aftershock/wire.h"
#include "streaming/engine_test_util.h"

namespace aftershock {
namespace {

using testing::CollectingSink;
using testing::ParseConfigOrDie;

constexpr int64_t kDay0 = 1772409600000000000;  // 2026-03-02 00:00Z
constexpr int kPartition = 5;

constexpr const char* kToml = R"(
[feed]
source = "nats"
[bars]
interval = "1m"
session = { start = "08:00", end = "09:30" }
[warmup]
start_bars = 8
[refit]
every_bars = 30
window = 200
min_bars = 50
reidentify_every = 0
holdout_bars = 20
apply_lag_bars = 12
[alerts]
shock_z = 2.5
)";

// Price ticks of three invented instruments, two ticks a minute each,
// 08:00-09:30Z on three days.
std::vector<Tick> Ticks() {
  std::mt19937_64 rng(11);
  std::normal_distribution<double> norm(0.0, 1.0);
  const char* names[3] = {"KESTREL.A", "PLOVER", "AVOCET:2"};
  double price[3] = {80, 30, 12};
  std::vector<Tick> out;
  for (int day = 0; day < 3; ++day) {
    for (int m = 0; m < 90; ++m) {
      for (int sec : {10, 40}) {
        for (int s = 0; s < 3; ++s) {
          Tick t;
          t.symbol.assign(names[s]);
          t.t_ns = kDay0 + day * kNanosPerDay + (8 * 60 + m) * 60 * kNanosPerSecond +
                   (sec + s) * kNanosPerSecond;
          t.kind = Tick::kPrice;
          price[s] *= std::exp(0.0009 * (1.0 + (m < 10 || m > 80)) * norm(rng));
          t.value = price[s];
          out.push_back(t);
        }
      }
    }
  }
  return out;
}

// One instance's lanes fed one partition like the NATS feed does (JSON tick
// bodies through OnPartitionMessage), with a clock sweep every 100 ms of
// event time like a replay.
struct Instance {
  CollectingSink sink;
  ManualClock clock;
  std::unique_ptr<PartitionLanes> lanes;
  int64_t next_sweep = -1;
  std::string body;

  explicit Instance(const EngineConfig& config) {
    auto l = PartitionLanes::Create(config, &sink, &clock);
    REQUIRE(l.ok());
    lanes = *std::move(l);
  }
  void Feed(const Tick& t) {
    if (next_sweep < 0) next_sweep = t.t_ns + 100000000;
    if (t.t_ns >= next_sweep) {
      clock.Set(t.t_ns);
      lanes->OnClock(nullptr, t.t_ns);
      next_sweep = t.t_ns + 100000000;
    }
    EncodeTickJson(t, &body);
    lanes->OnPartitionMessage(kPartition, t.symbol.view(), body);
  }
};

TEST_CASE("a partition's lane moves to another instance with its state, refit jobs and open bars",
          "[streaming][cluster]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  REQUIRE(config.nats.exact_refits);
  const std::vector<Tick> ticks = Ticks();

  Instance whole(config);
  REQUIRE(whole.lanes->StartPartition(kPartition, nullptr).ok());
  for (const Tick& t : ticks) whole.Feed(t);
  int models = 0;
  for (const auto& m : whole.sink.messages) models += m.topic[0] == 'm';
  REQUIRE(models > 0);  // refits reached the stream

  int with_jobs = 0;
  // Odd splits cut a minute between its two ticks: the bar is open.
  for (size_t split : {size_t{301}, size_t{640}, size_t{905}, size_t{1203}}) {
    INFO("split " << split);
    Instance first(config);
    REQUIRE(first.lanes->StartPartition(kPartition, nullptr).ok());
    for (size_t i = 0; i < split; ++i) first.Feed(ticks[i]);
    const int in_flight = first.lanes->services(kPartition)->refit_stats().in_flight;
    if (in_flight > 0) ++with_jobs;
    std::string bytes;
    REQUIRE(first.lanes->CheckpointPartition(kPartition, 1, &bytes).ok());
    const size_t published = first.sink.messages.size();
    first.lanes->StopPartition(kPartition);
    CHECK(first.lanes->core(kPartition) == nullptr);
    // Dropping the lane published nothing (its open bars are in the checkpoint).
    CHECK(first.sink.messages.size() == published);

    absl::StatusOr<Checkpoint> cp = ParseCheckpoint(bytes);
    REQUIRE(cp.ok());
    CHECK(cp->header().symbol_count == 3);
    Instance second(config);
    const absl::Status started = second.lanes->StartPartition(kPartition, &*cp);
    INFO(started.ToString());
    REQUIRE(started.ok());
    // The pending jobs were re-submitted by the restore.
    CHECK(second.lanes->services(kPartition)->refit_stats().in_flight == in_flight);
    second.next_sweep = first.next_sweep;
    for (size_t i = split; i < ticks.size(); ++i) second.Feed(ticks[i]);
    // Each instance counts what it took (the restored counters are the first's).
    CHECK(first.lanes->TotalCounters().messages_in == split);
    CHECK(second.lanes->TotalCounters().messages_in == ticks.size() - split);

    std::vector<CollectingSink::Message> joined = first.sink.messages;
    joined.insert(joined.end(), second.sink.messages.begin(), second.sink.messages.end());
    REQUIRE(joined.size() == whole.sink.messages.size());
    for (size_t k = 0; k < joined.size(); ++k) {
      INFO("message " << k);
      REQUIRE(joined[k].topic == whole.sink.messages[k].topic);
      REQUIRE(joined[k].body == whole.sink.messages[k].body);
    }
  }
  CHECK(with_jobs >= 1);  // some hand-overs carried refit jobs in flight
}

TEST_CASE("lanes refuse a checkpoint of another configuration and count every lane",
          "[streaming][cluster]") {
  const EngineConfig config = ParseConfigOrDie(kToml);
  const std::vector<Tick> ticks = Ticks();
  Instance a(config);
  REQUIRE(a.lanes->StartPartition(kPartition, nullptr).ok());
  for (size_t i = 0; i < 200; ++i) a.Feed(ticks[i]);
  std::string bytes;
  REQUIRE(a.lanes->CheckpointPartition(kPartition, 1, &bytes).ok());
  CHECK(a.lanes->TotalCounters().messages_in == 200);
  a.lanes->StopPartition(kPartition);
  CHECK(a.lanes->TotalCounters().messages_in == 200);  // a dropped lane still counts

  EngineConfig other = config;
  other.refit.window = 300;
  absl::StatusOr<Checkpoint> cp = ParseCheckpoint(bytes);
  REQUIRE(cp.ok());
  Instance b(other);
  const absl::Status s = b.lanes->StartPartition(kPartition, &*cp);
  CHECK(absl::IsFailedPrecondition(s));
  CHECK(std::string(s.message()).find("partition 5") != std::string::npos);
  CHECK(b.lanes->core(kPartition) == nullptr);
  CHECK(!a.lanes->CheckpointPartition(kPartition, 1, &bytes).ok());  // not held
}

}  // namespace
}  // namespace aftershock
