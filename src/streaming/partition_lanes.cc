#include "aftershock/partition_lanes.h"

#include <utility>

#include "absl/strings/str_cat.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/engine_checkpoint.h"

namespace aftershock {

struct PartitionLanes::Lane {
  // The counters the lane started with (a restored core brings its
  // predecessor's); this instance's share is the difference.
  EngineCounters base;
  uint64_t base_swapped = 0;
  std::unique_ptr<IngestCore> core;
  std::unique_ptr<EngineServices> services;  // attached to core; destroyed first
  ~Lane() { services.reset(); }
};

PartitionLanes::PartitionLanes(const EngineConfig& config, UpdateSink* sink, Clock* clock)
    : config_(config),
      sink_(sink),
      clock_(clock),
      lanes_(static_cast<size_t>(config.nats.partitions)) {}

PartitionLanes::~PartitionLanes() = default;

absl::StatusOr<std::unique_ptr<PartitionLanes>> PartitionLanes::Create(const EngineConfig& config,
                                                                       UpdateSink* sink,
                                                                       Clock* clock) {
  std::unique_ptr<PartitionLanes> lanes(new PartitionLanes(config, sink, clock));
  auto trial = lanes->NewLane();  // the configuration errors now, not at the first claim
  if (!trial.ok()) return trial.status();
  return lanes;
}

absl::StatusOr<std::unique_ptr<PartitionLanes::Lane>> PartitionLanes::NewLane() const {
  auto lane = std::make_unique<Lane>();
  auto core = IngestCore::Create(config_, sink_, clock_);
  if (!core.ok()) return core.status();
  lane->core = *std::move(core);
  ServiceOptions so;
  so.mode = config_.nats.exact_refits ? RefitMode::kReplay : RefitMode::kLive;
  auto services = EngineServices::Attach(lane->core.get(), config_, so);
  if (!services.ok()) return services.status();
  lane->services = *std::move(services);
  return lane;
}

absl::Status PartitionLanes::StartPartition(int partition, const Checkpoint* checkpoint) {
  if (partition < 0 || partition >= static_cast<int>(lanes_.size())) {
    return absl::InvalidArgumentError(absl::StrCat("no partition ", partition));
  }
  if (lanes_[partition] != nullptr) StopPartition(partition);
  auto lane = NewLane();
  if (!lane.ok()) return lane.status();
  if (checkpoint != nullptr) {
    absl::Status s =
        RestoreEngineState(*checkpoint, config_, (*lane)->core.get(), (*lane)->services.get());
    if (!s.ok()) {
      // A failed restore leaves the lane unusable: the caller gets an error
      // and may start the partition empty instead.
      return absl::Status(s.code(), absl::StrCat("partition ", partition, ": ", s.message()));
    }
    (*lane)->base = (*lane)->core->counters();
    (*lane)->base_swapped = (*lane)->services->refit_stats().swapped;
  }
  lanes_[partition] = *std::move(lane);
  return absl::OkStatus();
}

void PartitionLanes::OnPartitionMessage(int partition, absl::string_view symbol,
                                        absl::string_view body) {
  Lane* lane = lanes_[partition].get();
  if (lane == nullptr) {  // not started: the feed always starts a lane first
    if (!StartPartition(partition, nullptr).ok()) return;
    lane = lanes_[partition].get();
  }
  lane->core->OnMessage(symbol, body);
}

absl::Status PartitionLanes::CheckpointPartition(int partition, int64_t now_ns, std::string* out) {
  const Lane* lane = lanes_[partition].get();
  if (lane == nullptr) {
    return absl::FailedPreconditionError(absl::StrCat("partition ", partition, " is not held"));
  }
  const EngineSnapshot snapshot = CaptureEngineState(*lane->core, lane->services.get(), now_ns);
  auto bytes = SerializeEngineSnapshot(snapshot, config_);
  if (!bytes.ok()) return bytes.status();
  *out = *std::move(bytes);
  return absl::OkStatus();
}

namespace {

// *to += c - base, field by field (unsigned: c >= base).
void AddCounters(const EngineCounters& c, const EngineCounters& base, EngineCounters* to) {
  to->messages_in += c.messages_in - base.messages_in;
  to->ticks_in += c.ticks_in - base.ticks_in;
  to->ticks_accepted += c.ticks_accepted - base.ticks_accepted;
  to->bars += c.bars - base.bars;
  to->bars_clock_closed += c.bars_clock_closed - base.bars_clock_closed;
  to->updates_out += c.updates_out - base.updates_out;
  to->drops += c.drops - base.drops;
  to->non_finite_output += c.non_finite_output - base.non_finite_output;
  to->extra_out += c.extra_out - base.extra_out;
  to->extra_drops += c.extra_drops - base.extra_drops;
  to->model_swaps += c.model_swaps - base.model_swaps;
  to->symbols += c.symbols - base.symbols;
  for (int r = 0; r < kNumRejectReasons; ++r) {
    to->rejects.by_reason[r] += c.rejects.by_reason[r] - base.rejects.by_reason[r];
  }
}

}  // namespace

void PartitionLanes::Retire(Lane* lane) {
  AddCounters(lane->core->counters(), lane->base, &retired_);
  retired_refits_ += lane->services->refit_stats().swapped - lane->base_swapped;
}

EngineCounters PartitionLanes::TotalCounters() const {
  EngineCounters sum = retired_;
  for (const auto& lane : lanes_) {
    if (lane != nullptr) AddCounters(lane->core->counters(), lane->base, &sum);
  }
  return sum;
}

void PartitionLanes::StopPartition(int partition) {
  if (lanes_[partition] == nullptr) return;
  // No CloseAllOpenBars: a bar still open is completed by the partition's
  // next holder from the checkpoint; publishing it here would send a bar
  // missing its later ticks.
  Retire(lanes_[partition].get());
  lanes_[partition].reset();
}

void PartitionLanes::OnClock(IngestCore*, int64_t now_ns) {
  for (auto& lane : lanes_) {
    if (lane != nullptr) lane->core->OnClock(now_ns);
  }
}

const IngestCore* PartitionLanes::core(int partition) const {
  return lanes_[partition] == nullptr ? nullptr : lanes_[partition]->core.get();
}

const EngineServices* PartitionLanes::services(int partition) const {
  return lanes_[partition] == nullptr ? nullptr : lanes_[partition]->services.get();
}

void PartitionLanes::AppendPrometheus(std::string* o) const {
  const EngineCounters sum = TotalCounters();
  uint64_t refits = retired_refits_;
  uint64_t symbols = 0, live = 0;
  for (const auto& lane : lanes_) {
    if (lane == nullptr) continue;
    ++live;
    symbols += static_cast<uint64_t>(lane->core->num_symbols());
    refits += lane->services->refit_stats().swapped - lane->base_swapped;
  }
  auto metric = [o](const char* name, const char* type, const char* help, uint64_t v) {
    absl::StrAppend(o, "# HELP ", name, " ", help, "\n# TYPE ", name, " ", type, "\n", name, " ", v,
                    "\n");
  };
  metric("aftershock_lanes", "gauge", "Partition lanes (held partitions with engine state).", live);
  metric("aftershock_lanes_symbols", "gauge", "Symbols in the held partitions' lanes.", symbols);
  metric("aftershock_lanes_messages_total", "counter", "Messages the lanes took.", sum.messages_in);
  metric("aftershock_lanes_ticks_total", "counter", "Ticks the lanes decoded.", sum.ticks_in);
  metric("aftershock_lanes_bars_total", "counter", "Bars the lanes closed.", sum.bars);
  metric("aftershock_lanes_updates_total", "counter", "Updates the lanes published.",
         sum.updates_out);
  metric("aftershock_lanes_update_drops_total", "counter",
         "Updates the sink refused (subscriber queue full).", sum.drops);
  metric("aftershock_lanes_model_swaps_total", "counter", "Refitted models the lanes swapped in.",
         refits);
}

}  // namespace aftershock
