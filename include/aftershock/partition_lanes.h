// PartitionLanes: one engine state per stream partition (an IngestCore with
// its EngineServices, "lane"), so that a partition's state is checkpointed,
// handed to another instance and restored on its own, in the existing
// checkpoint format (engine_checkpoint.h: CaptureEngineState +
// SerializeEngineSnapshot, RestoreEngineState), without touching the other
// partitions. The NatsFeed (nats_feed.h) drives it as its PartitionConsumer.
//
// Every lane publishes into the one UpdateSink of the engine and shares its
// clock; symbols are independent and a symbol lives in exactly one partition
// (the broker's mapping), so the union of the lanes' updates is what one core
// fed every tick would publish. Each lane's EngineServices runs its own refit
// workers ([refit] workers per held partition) and, with [nats] exact_refits,
// the replay hand-off: a fit scheduled at bar n is swapped in at bar n +
// apply_lag_bars exactly, so a restored lane (its pending refit jobs are in
// the checkpoint and re-submitted on restore) swaps at the same bars as the
// lane it continues. Alerts are published on a.<symbol> as usual; the
// --alerts file is not written in this mode.
//
// Register it as a BarObserver of the engine's core: OnClock forwards the
// clock to every lane (bar closes by time, stale checks) and as a
// MetricsSource (the lanes' counters, summed).
//
// Thread-safety: everything on the ingest thread. `sink` and `clock` must
// outlive the lanes.
#ifndef AFTERSHOCK_PARTITION_LANES_H_
#define AFTERSHOCK_PARTITION_LANES_H_

#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/nats_feed.h"
#include "aftershock/update_sink.h"

namespace aftershock {

class PartitionLanes : public PartitionConsumer, public BarObserver, public MetricsSource {
 public:
  // Checks that a lane can be built from `config` (a trial core and
  // services). REQUIRES: sink, clock non-null.
  static absl::StatusOr<std::unique_ptr<PartitionLanes>> Create(const EngineConfig& config,
                                                                UpdateSink* sink, Clock* clock);
  ~PartitionLanes() override;

  // PartitionConsumer.
  absl::Status StartPartition(int partition, const Checkpoint* checkpoint) override;
  void OnPartitionMessage(int partition, absl::string_view symbol, absl::string_view body) override;
  absl::Status CheckpointPartition(int partition, int64_t now_ns, std::string* out) override;
  void StopPartition(int partition) override;

  // BarObserver (on the engine's core).
  void OnBar(IngestCore*, int, const ClosedBar&, BarUpdate*) override {}
  void OnClock(IngestCore* core, int64_t now_ns) override;

  // MetricsSource: aftershock_lanes (gauge) and the lanes' summed updates,
  // bars, ticks, symbols and refits (live lanes plus those dropped).
  void AppendPrometheus(std::string* out) const override;

  // What this instance's lanes did since Create, dropped lanes included: a
  // restored lane counts from its restore (its checkpoint's counters are its
  // predecessors'); `symbols` counts a symbol once per lane start that found
  // it new.
  EngineCounters TotalCounters() const;
  // Inspection (tests): the lane of a partition, null when not held.
  const IngestCore* core(int partition) const;
  const EngineServices* services(int partition) const;

 private:
  struct Lane;
  PartitionLanes(const EngineConfig& config, UpdateSink* sink, Clock* clock);
  absl::StatusOr<std::unique_ptr<Lane>> NewLane() const;
  void Retire(Lane* lane);  // adds a dropped lane's counters to the totals

  const EngineConfig config_;
  UpdateSink* const sink_;
  Clock* const clock_;
  std::vector<std::unique_ptr<Lane>> lanes_;  // by partition; null = not held
  // Counters of lanes already dropped (so the totals only grow).
  EngineCounters retired_;
  uint64_t retired_refits_ = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_PARTITION_LANES_H_
