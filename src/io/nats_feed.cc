#include "aftershock/nats_feed.h"

#include <sys/eventfd.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdio>
#include <deque>
#include <map>
#include <mutex>
#include <thread>
#include <utility>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/clock.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/partition_checkpoints.h"
#include "aftershock/subject_token.h"
#include "io/nats_client.h"

namespace aftershock {
namespace {

using nats_internal::NatsSession;
using nats_internal::ToStatus;

int64_t WallNs() {
  return std::chrono::duration_cast<std::chrono::nanoseconds>(
             std::chrono::system_clock::now().time_since_epoch())
      .count();
}

// How long a reader waits for the broker to create its consumer, ms.
constexpr int64_t kReaderWaitMs = 500;

// A partition's consumer silent for this long is asked whether it is alive
// (ConsumerAlive), and again after each further such interval, ms.
constexpr int64_t kReaderProbeMs = 1000;

// Largest batch Pump moves per call (the staging buffer is reserved once).
constexpr size_t kMaxPumpBatch = 16384;

class NatsFeedImpl : public NatsFeed {
 private:
  enum class ItemKind : uint8_t { kMessage, kStart, kStop };
  // What the readers and the coordinator queue for the ingest thread.
  struct Item {
    natsMsg* msg = nullptr;  // kMessage
    int partition = 0;
    uint64_t seq = 0;  // kMessage: its stream sequence; kStart: the checkpoint's (0 none)
    ItemKind kind = ItemKind::kMessage;
    bool caught_up = false;  // kMessage: the first one after a start with nothing pending
    bool store = false;      // kStop: checkpoint before dropping (a hand-over)
    std::shared_ptr<const Checkpoint> checkpoint;  // kStart: the state to restore (null none)
  };
  // A checkpoint for the writer thread.
  struct WriteJob {
    int partition = 0;
    uint64_t sequence = 0;
    std::unique_ptr<std::string> bytes;
    bool handover = false;    // the coordinator waits for it (HandOverDone)
    int64_t snapshot_ns = 0;  // wall time the state was captured (its age counts from here)
  };
  // The ingest thread's view of a partition's lane.
  struct LaneState {
    bool active = false;
    uint64_t delivered = 0;  // last sequence handed to the lane
    uint64_t start_seq = 0;  // sequence the lane's state started from
    uint64_t replayed = 0;   // messages since the start
    bool reported = false;   // the catch-up line was printed
    int64_t started_ns = 0;
  };

 public:
  NatsFeedImpl(const EngineConfig& config, const NatsFeedOptions& options)
      : engine_config_(config),
        config_(config.nats),
        options_(options),
        lanes_(options.partitions),
        last_fetched_(new std::atomic<uint64_t>[static_cast<size_t>(config_.partitions)]),
        pending_(new std::atomic<uint64_t>[static_cast<size_t>(config_.partitions)]),
        stored_seq_(new std::atomic<uint64_t>[static_cast<size_t>(config_.partitions)]),
        stored_ns_(new std::atomic<int64_t>[static_cast<size_t>(config_.partitions)]),
        in_flight_(new std::atomic<bool>[static_cast<size_t>(config_.partitions)]),
        lane_(static_cast<size_t>(config_.partitions)) {
    for (int p = 0; p < config_.partitions; ++p) {
      last_fetched_[p].store(0);
      pending_[p].store(0);
      stored_seq_[p].store(0);
      stored_ns_[p].store(0);
      in_flight_[p].store(false);
    }
    staging_.reserve(kMaxPumpBatch);
    done_.reserve(kMaxPumpBatch);
  }

  absl::Status Init() {
    instance_ = config_.instance.empty() ? DefaultInstanceName() : config_.instance;
    efd_ = eventfd(0, EFD_NONBLOCK | EFD_CLOEXEC);
    if (efd_ < 0) return absl::InternalError("eventfd failed");
    auto session = NatsSession::Connect(config_, absl::StrCat("aftershock-feed-", instance_));
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
    if (absl::Status s = nats_internal::EnsureTickStream(session_.get(), config_); !s.ok()) {
      return s;
    }
    {
      // Readers create their consumers through a context that waits 0.5 s: a
      // consumer placed on a server that just died never answers, and the
      // reader tries again (200 ms later) instead of waiting the session's 2 s.
      jsOptions o;
      jsOptions_Init(&o);
      o.Wait = kReaderWaitMs;
      const natsStatus s = natsConnection_JetStream(&reader_js_, session_->conn(), &o);
      if (s != NATS_OK) return ToStatus(s, "cannot create a JetStream context");
    }
    if (lanes_ != nullptr) {
      auto store = PartitionCheckpointStore::Open(
          config_, absl::StrCat("aftershock-checkpoints-", instance_), /*create=*/true);
      if (!store.ok()) return store.status();
      store_ = *std::move(store);
      writer_ = std::thread([this] { WriteCheckpoints(); });
    }
    auto leases = PartitionLeases::Open(config_, instance_);
    if (!leases.ok()) return leases.status();
    leases_ = *std::move(leases);
    {
      std::lock_guard<std::mutex> l(stats_mu_);
      stats_.instance = instance_;
    }
    RunRound();  // the first claim happens before Open returns
    coordinator_ = std::thread([this] { Coordinate(); });
    return absl::OkStatus();
  }

  ~NatsFeedImpl() override {
    StopCoordinator();
    StopWriter();
    if (leases_ != nullptr && options_.release_on_destroy && !released_) {
      if (absl::Status s = leases_->ReleaseAll(); !s.ok()) {
        std::fprintf(stderr, "aftershock: nats: releasing the leases failed: %s\n",
                     std::string(s.message()).c_str());
      }
    }
    for (Item& it : queue_) natsMsg_Destroy(it.msg);
    for (Item& it : staging_) natsMsg_Destroy(it.msg);
    for (natsMsg* m : graveyard_) natsMsg_Destroy(m);
    for (natsMsg* m : done_) natsMsg_Destroy(m);
    leases_.reset();
    store_.reset();
    if (reader_js_ != nullptr) jsCtx_Destroy(reader_js_);
    session_.reset();
    if (efd_ >= 0) close(efd_);
  }

  // Stops the coordinator (which stops the readers). Idempotent.
  void StopCoordinator() {
    if (coordinator_.joinable()) {
      {
        std::lock_guard<std::mutex> l(coord_mu_);
        stopping_ = true;
      }
      coord_cv_.notify_all();
      {
        std::lock_guard<std::mutex> l(mu_);  // wakes a hand-over wait
        handover_cv_.notify_all();
      }
      coordinator_.join();
    } else {
      StopAllReaders();
    }
  }

  // Lets the writer store what is queued, then joins it. Idempotent.
  void StopWriter() {
    if (!writer_.joinable()) return;
    {
      std::lock_guard<std::mutex> l(write_mu_);
      writer_stopping_ = true;
    }
    write_cv_.notify_all();
    writer_.join();
  }

  // ---- TickSource::OnStopped (ingest thread, after the loop ended) ----
  void OnStopped() override {
    if (lanes_ == nullptr) return;
    StopCoordinator();
    if (!options_.release_on_destroy) return;  // as after a crash: no final checkpoints
    const int64_t now = WallNs();
    int stored = 0;
    for (int p = 0; p < config_.partitions; ++p) {
      if (!lane_[p].active) continue;
      if (lane_[p].delivered > stored_seq_[p].load()) {
        auto bytes = std::make_unique<std::string>();
        if (absl::Status s = lanes_->CheckpointPartition(p, now, bytes.get()); s.ok()) {
          QueueWrite(WriteJob{p, lane_[p].delivered, std::move(bytes), false, now});
          ++stored;
        } else {
          checkpoint_failures_.fetch_add(1, std::memory_order_relaxed);
          std::fprintf(stderr, "aftershock: nats: cannot checkpoint partition %d: %s\n", p,
                       std::string(s.message()).c_str());
        }
      }
      lanes_->StopPartition(p);
      lane_[p].active = false;
    }
    StopWriter();  // stores the final checkpoints before the leases go
    if (stored > 0) {
      std::fprintf(stderr, "aftershock: nats: %d partition checkpoint(s) stored at shutdown\n",
                   stored);
    }
    if (leases_ != nullptr && options_.release_on_destroy) {
      if (absl::Status s = leases_->ReleaseAll(); !s.ok()) {
        std::fprintf(stderr, "aftershock: nats: releasing the leases failed: %s\n",
                     std::string(s.message()).c_str());
      }
      released_ = true;
    }
  }

  // ---- BarObserver::OnClock (ingest thread): periodic checkpoints ----
  void OnClock(IngestCore*, int64_t) override {
    if (lanes_ == nullptr || config_.checkpoint_seconds <= 0) return;
    const int64_t now = WallNs();
    if (now < next_checkpoint_ns_) return;
    next_checkpoint_ns_ = now + static_cast<int64_t>(config_.checkpoint_seconds * 1e9);
    for (int p = 0; p < config_.partitions; ++p) {
      if (!lane_[p].active || in_flight_[p].load()) continue;
      if (lane_[p].delivered <= stored_seq_[p].load()) {
        stored_ns_[p].store(now);  // nothing new: the stored state is current
        continue;
      }
      auto bytes = std::make_unique<std::string>();
      if (absl::Status s = lanes_->CheckpointPartition(p, now, bytes.get()); !s.ok()) {
        checkpoint_failures_.fetch_add(1, std::memory_order_relaxed);
        std::fprintf(stderr, "aftershock: nats: cannot checkpoint partition %d: %s\n", p,
                     std::string(s.message()).c_str());
        continue;
      }
      QueueWrite(WriteJob{p, lane_[p].delivered, std::move(bytes), false, now});
    }
  }

  // ---- TickSource (ingest thread) ----
  int Pump(TickConsumer* consumer, int max_messages) override {
    uint64_t ignored;
    if (read(efd_, &ignored, sizeof(ignored)) < 0) {
      // EAGAIN: not signalled since the last read; the queue may still hold
      // messages from a full previous round.
    }
    staging_.clear();
    const size_t want = std::min<size_t>(static_cast<size_t>(max_messages), kMaxPumpBatch);
    {
      std::lock_guard<std::mutex> l(mu_);
      const size_t n = std::min(want, queue_.size());
      for (size_t i = 0; i < n; ++i) {
        staging_.push_back(queue_.front());
        queue_.pop_front();
      }
      queued_.fetch_sub(n, std::memory_order_relaxed);
      // Hand the previous round's buffers to the readers, which free them.
      if (graveyard_.empty()) {
        graveyard_.swap(done_);
      } else {
        graveyard_.insert(graveyard_.end(), done_.begin(), done_.end());
      }
    }
    done_.clear();
    if (lanes_ != nullptr) return PumpLanes();
    char symbol[kMaxSymbolLength];
    for (const Item& it : staging_) {
      absl::string_view body;
      const absl::string_view sym = SymbolAndBody(it.msg, symbol, &body);
      consumer->OnMessage(sym, body);
      done_.push_back(it.msg);
    }
    const int delivered = static_cast<int>(staging_.size());
    staging_.clear();
    messages_.fetch_add(static_cast<uint64_t>(delivered), std::memory_order_relaxed);
    return delivered;
  }

  // The symbol of a tick message (its subject's last token, decoded into
  // `buf`) and its body. A token that does not decode is returned raw and
  // counted in bad_subjects_: it is no valid symbol ('~' is outside the
  // alphabet), so the consumer counts it as bad_symbol.
  // REQUIRES: buf has kMaxSymbolLength bytes.
  absl::string_view SymbolAndBody(natsMsg* msg, char* buf, absl::string_view* body) {
    const absl::string_view subject = natsMsg_GetSubject(msg);
    const size_t dot = subject.rfind('.');
    const absl::string_view token =
        dot == absl::string_view::npos ? subject : subject.substr(dot + 1);
    const int n = DecodeSubjectTokenTo(token, buf, kMaxSymbolLength);
    *body =
        absl::string_view(natsMsg_GetData(msg), static_cast<size_t>(natsMsg_GetDataLength(msg)));
    if (n > 0) return absl::string_view(buf, static_cast<size_t>(n));
    bad_subjects_.fetch_add(1, std::memory_order_relaxed);
    return token;
  }

  // Pump's lane path: control items start and stop lanes; messages go to
  // their partition's lane in stream order.
  int PumpLanes() {
    char symbol[kMaxSymbolLength];
    int delivered = 0;
    for (Item& it : staging_) {
      const int p = it.partition;
      LaneState& lane = lane_[p];
      if (it.kind == ItemKind::kStart) {
        StartLane(p, it);
        continue;
      }
      if (it.kind == ItemKind::kStop) {
        StopLane(p, it.store);
        continue;
      }
      done_.push_back(it.msg);
      if (!lane.active) continue;  // cannot happen: a partition's messages follow its start
      absl::string_view body;
      const absl::string_view sym = SymbolAndBody(it.msg, symbol, &body);
      lanes_->OnPartitionMessage(p, sym, body);
      lane.delivered = it.seq;
      ++lane.replayed;
      ++delivered;
      if (it.caught_up && !lane.reported) {
        lane.reported = true;
        const double secs = static_cast<double>(WallNs() - lane.started_ns) / 1e9;
        std::fprintf(stderr,
                     "aftershock: nats: partition %d caught up: %llu messages (sequence %llu to "
                     "%llu) filtered in %.3f s (%.0f messages/s)\n",
                     p, static_cast<unsigned long long>(lane.replayed),
                     static_cast<unsigned long long>(lane.start_seq + 1),
                     static_cast<unsigned long long>(it.seq), secs,
                     secs > 0 ? static_cast<double>(lane.replayed) / secs : 0.0);
      }
    }
    staging_.clear();
    messages_.fetch_add(static_cast<uint64_t>(delivered), std::memory_order_relaxed);
    return delivered;
  }

  void StartLane(int p, const Item& it) {
    LaneState& lane = lane_[p];
    if (lane.active) lanes_->StopPartition(p);  // not expected: a stop precedes a start
    absl::Status s = lanes_->StartPartition(p, it.checkpoint.get());
    if (!s.ok()) {
      // The lane is empty now, but the reader starts after the checkpoint:
      // its symbols restart from scratch. Loud, and counted as a fresh start.
      std::fprintf(stderr,
                   "aftershock: nats: partition %d: the checkpoint at sequence %llu could not be "
                   "restored (%s); its symbols restart empty\n",
                   p, static_cast<unsigned long long>(it.seq), std::string(s.message()).c_str());
      (void)lanes_->StartPartition(p, nullptr);
    }
    lane.active = true;
    lane.delivered = it.seq;
    lane.start_seq = it.seq;
    lane.replayed = 0;
    lane.reported = false;
    lane.started_ns = WallNs();
  }

  void StopLane(int p, bool store) {
    LaneState& lane = lane_[p];
    bool queued = false;
    if (lane.active && store && lane.delivered > stored_seq_[p].load()) {
      auto bytes = std::make_unique<std::string>();
      const int64_t now = WallNs();
      if (absl::Status s = lanes_->CheckpointPartition(p, now, bytes.get()); s.ok()) {
        QueueWrite(WriteJob{p, lane.delivered, std::move(bytes), true, now});
        queued = true;
      } else {
        checkpoint_failures_.fetch_add(1, std::memory_order_relaxed);
        std::fprintf(stderr, "aftershock: nats: cannot checkpoint partition %d: %s\n", p,
                     std::string(s.message()).c_str());
      }
    }
    if (lane.active) lanes_->StopPartition(p);
    lane.active = false;
    if (store && !queued) HandOverDone(p);
  }

  // The hand-over of p may proceed (its final checkpoint is stored, failed,
  // or was not needed).
  void HandOverDone(int p) {
    std::lock_guard<std::mutex> l(mu_);
    handed_over_.push_back(p);
    handover_cv_.notify_all();
  }

  void QueueWrite(WriteJob job) {
    in_flight_[job.partition].store(true);
    {
      std::lock_guard<std::mutex> l(write_mu_);
      writes_.push_back(std::move(job));
    }
    write_cv_.notify_one();
  }

  // ---- writer thread: stores the partitions' checkpoints ----
  void WriteCheckpoints() {
    std::unique_lock<std::mutex> l(write_mu_);
    while (true) {
      write_cv_.wait(l, [this] { return writer_stopping_ || !writes_.empty(); });
      if (writes_.empty()) return;  // stopping, nothing left
      WriteJob job = std::move(writes_.front());
      writes_.pop_front();
      l.unlock();
      auto put = store_->Put(job.partition, job.sequence, *job.bytes);
      if (put.ok()) {
        if (put->written) {
          checkpoints_written_.fetch_add(1, std::memory_order_relaxed);
          last_checkpoint_bytes_.store(job.bytes->size(), std::memory_order_relaxed);
        }
        stored_seq_[job.partition].store(put->stored_sequence);
        // The stored state is as old as its snapshot, not as its write: under
        // load a write can finish while the lane has moved on well past it.
        stored_ns_[job.partition].store(job.snapshot_ns);
      } else {
        checkpoint_failures_.fetch_add(1, std::memory_order_relaxed);
        std::fprintf(stderr, "aftershock: nats: cannot store the checkpoint of partition %d: %s\n",
                     job.partition, std::string(put.status().message()).c_str());
      }
      in_flight_[job.partition].store(false);
      if (job.handover) HandOverDone(job.partition);
      l.lock();
    }
  }

  int ReadinessFd() const override { return efd_; }
  bool MaybePending() override { return queued_.load(std::memory_order_relaxed) > 0; }

  // ---- MetricsSource (ingest thread) ----
  void AppendPrometheus(std::string* o) const override {
    const NatsFeedStats s = stats();
    auto metric = [o](const char* name, const char* type, const char* help, uint64_t v) {
      absl::StrAppend(o, "# HELP ", name, " ", help, "\n# TYPE ", name, " ", type, "\n", name, " ",
                      v, "\n");
    };
    metric("aftershock_nats_partitions_owned", "gauge",
           "Stream partitions this instance reads (leases held).", s.partitions.size());
    metric("aftershock_nats_lease_renewals_total", "counter",
           "Partition leases renewed (compare-and-set).", s.leases.renewals);
    metric("aftershock_nats_lease_acquisitions_total", "counter", "Partition leases claimed.",
           s.leases.acquisitions);
    metric("aftershock_nats_takeovers_total", "counter",
           "Partitions claimed after their holder's lease expired.", s.leases.takeovers);
    metric("aftershock_nats_lease_releases_total", "counter",
           "Partition leases released (rebalancing, shutdown).", s.leases.releases);
    metric("aftershock_nats_leases_lost_total", "counter",
           "Leases found expired or taken by another instance.", s.leases.lost);
    metric("aftershock_nats_lease_errors_total", "counter",
           "Lease rounds that failed (broker unreachable).", s.lease_errors);
    metric("aftershock_nats_lease_retries_total", "counter",
           "Lease requests tried again within a round (timeout, no responders).", s.leases.retries);
    metric("aftershock_nats_fences_total", "counter",
           "Times every reader stopped because a lease went unconfirmed too long.", s.fenced);
    metric("aftershock_nats_consumer_restarts_total", "counter",
           "Partition consumers found silent (not answering) and created again.",
           s.consumer_restarts);
    metric("aftershock_nats_replay_lag_messages", "gauge",
           "Messages of the held partitions not yet handed to the engine.", s.replay_lag);
    metric("aftershock_nats_messages_total", "counter", "Messages taken from JetStream.",
           s.messages);
    metric("aftershock_nats_bad_subjects_total", "counter",
           "Messages whose subject token did not decode.", s.bad_subjects);
    if (lanes_ == nullptr) return;
    metric("aftershock_nats_checkpoints_total", "counter",
           "Partition checkpoints stored in the checkpoint bucket.", s.checkpoints_written);
    metric("aftershock_nats_checkpoint_failures_total", "counter",
           "Partition checkpoints that could not be serialized or stored.", s.checkpoint_failures);
    metric("aftershock_nats_restores_total", "counter",
           "Partitions started from a stored checkpoint.", s.restores);
    metric("aftershock_nats_fresh_starts_total", "counter",
           "Partitions started empty (no usable checkpoint: replayed from the start).",
           s.fresh_starts);
    metric("aftershock_nats_checkpoint_last_bytes", "gauge",
           "Size of the last partition checkpoint stored.", s.last_checkpoint_bytes);
    absl::StrAppend(o,
                    "# HELP aftershock_nats_checkpoint_age_seconds Age of the oldest held "
                    "partition's last stored checkpoint (-1: one has none).\n"
                    "# TYPE aftershock_nats_checkpoint_age_seconds gauge\n"
                    "aftershock_nats_checkpoint_age_seconds ",
                    s.checkpoint_age_seconds, "\n");
  }

  void AppendHealthJson(std::string* o) const override {
    const NatsFeedStats s = stats();
    absl::StrAppend(o, ",\"nats\":{\"instance\":\"", s.instance, "\",\"partitions\":[",
                    absl::StrJoin(s.partitions, ","), "],\"lease_renewals\":", s.leases.renewals,
                    ",\"takeovers\":", s.leases.takeovers, ",\"lease_errors\":", s.lease_errors,
                    ",\"replay_lag\":", s.replay_lag);
    if (lanes_ != nullptr) {
      absl::StrAppend(o, ",\"checkpoints\":", s.checkpoints_written,
                      ",\"checkpoint_failures\":", s.checkpoint_failures,
                      ",\"restores\":", s.restores, ",\"fresh_starts\":", s.fresh_starts,
                      ",\"checkpoint_age_seconds\":");
      if (s.checkpoint_age_seconds < 0) {
        absl::StrAppend(o, "null");
      } else {
        absl::StrAppend(o, s.checkpoint_age_seconds);
      }
    }
    absl::StrAppend(o, "}");
  }

  NatsFeedStats stats() const override {
    NatsFeedStats s;
    {
      std::lock_guard<std::mutex> l(stats_mu_);
      s = stats_;
    }
    s.messages = messages_.load(std::memory_order_relaxed);
    s.bad_subjects = bad_subjects_.load(std::memory_order_relaxed);
    uint64_t lag = queued_.load(std::memory_order_relaxed);
    for (int p : s.partitions) lag += pending_[p].load(std::memory_order_relaxed);
    s.replay_lag = lag;
    s.checkpoints_written = checkpoints_written_.load(std::memory_order_relaxed);
    s.checkpoint_failures = checkpoint_failures_.load(std::memory_order_relaxed);
    s.restores = restores_.load(std::memory_order_relaxed);
    s.consumer_restarts = consumer_restarts_.load(std::memory_order_relaxed);
    s.fresh_starts = fresh_starts_.load(std::memory_order_relaxed);
    s.last_checkpoint_bytes = last_checkpoint_bytes_.load(std::memory_order_relaxed);
    if (lanes_ != nullptr && !s.partitions.empty()) {
      int64_t oldest = INT64_MAX;
      for (int p : s.partitions) oldest = std::min(oldest, stored_ns_[p].load());
      s.checkpoint_age_seconds = oldest <= 0 ? -1 : static_cast<double>(WallNs() - oldest) / 1e9;
    }
    return s;
  }

 private:
  struct Reader {
    int partition = 0;
    std::atomic<bool> stop{false};
    std::thread thread;
  };

  // ---- coordinator thread ----
  void Coordinate() {
    const LeaseTiming timing = LeaseTimingFor(config_.lease_seconds);
    auto delay = std::chrono::milliseconds(timing.period_ms);
    std::unique_lock<std::mutex> l(coord_mu_);
    while (!stopping_) {
      // Wake for the next round, or earlier when the fence is due.
      auto wake = std::chrono::steady_clock::now() + delay;
      wake = std::min(wake, FenceAt());
      coord_cv_.wait_until(l, wake, [this] { return stopping_; });
      if (stopping_) break;
      l.unlock();
      MaybeFence();
      const bool ok = RunRound();
      l.lock();
      // A failed round is tried again sooner: the leases are renewed as soon
      // as the bucket answers again (after its leader's election, say).
      delay = std::chrono::milliseconds(ok ? timing.period_ms : timing.retry_ms);
    }
    l.unlock();
    StopAllReaders();
    PublishStats();
  }

  // When the readers must stop unless a renewal is confirmed first: the
  // oldest held lease's confirmed write + lease_seconds - the fence margin
  // (time_point::max() when nothing is read).
  std::chrono::steady_clock::time_point FenceAt() const {
    const auto since = leases_->confirmed_since();
    if (readers_.empty() || since == std::chrono::steady_clock::time_point::max()) {
      return std::chrono::steady_clock::time_point::max();
    }
    const LeaseTiming timing = LeaseTimingFor(config_.lease_seconds);
    return since + std::chrono::milliseconds(static_cast<int64_t>(config_.lease_seconds * 1000) -
                                             timing.fence_margin_ms);
  }

  // Fence: a held lease whose renewal was not confirmed for lease_seconds
  // minus the margin may expire at the broker and be claimed by another
  // instance; stop reading every partition rather than filter one twice.
  void MaybeFence() {
    const auto at = FenceAt();
    const auto now = std::chrono::steady_clock::now();
    if (now < at) return;
    std::vector<int> held;
    for (const auto& [p, reader] : readers_) held.push_back(p);
    StopAllReaders();
    if (lanes_ != nullptr) {
      for (int p : held) QueueControl(p, ItemKind::kStop, false);
    }
    ++fenced_;
    // Logged because it is what turns a broker outage into a re-lease:
    // every held partition is read again (from its checkpoint) only after a
    // later round claims it.
    const LeaseTiming timing = LeaseTimingFor(config_.lease_seconds);
    const double unconfirmed =
        std::chrono::duration<double>(now - leases_->confirmed_since()).count();
    std::fprintf(stderr,
                 "aftershock: nats: a lease unconfirmed for %.1f s (lease %.1f s, fence %.1f s "
                 "before it): stopped reading partition(s) %s\n",
                 unconfirmed, config_.lease_seconds,
                 static_cast<double>(timing.fence_margin_ms) / 1000,
                 absl::StrJoin(held, ",").c_str());
    PublishStats();
  }

  // One lease round and what follows from it; false when it failed.
  bool RunRound() {
    const int64_t began = WallNs();
    const LeaseTiming timing = LeaseTimingFor(config_.lease_seconds);
    // The round's requests are tried again until the next round is due, or
    // the fence, whichever is first.
    auto deadline = std::chrono::steady_clock::now() + std::chrono::milliseconds(timing.period_ms);
    deadline = std::min(deadline, FenceAt());
    auto r = leases_->Round(deadline);
    const int64_t now = WallNs();
    if (!r.ok()) {
      ++lease_errors_;
      ++failed_streak_;
      // The first rounds of a run of failures and then every 20th: enough to
      // see what an outage is made of without flooding the log.
      if (failed_streak_ <= 3 || failed_streak_ % 20 == 0) {
        std::fprintf(stderr, "aftershock: nats: lease round failed (%d in a row, %.1f s): %s\n",
                     failed_streak_, static_cast<double>(now - began) / 1e9,
                     std::string(r.status().message()).c_str());
      }
      MaybeFence();
      PublishStats();
      return false;
    }
    if (failed_streak_ > 0) {
      std::fprintf(stderr,
                   "aftershock: nats: lease round succeeded after %d failed round(s), %.1f s "
                   "since the last successful one\n",
                   failed_streak_,
                   last_round_ns_ == 0 ? 0.0 : static_cast<double>(now - last_round_ns_) / 1e9);
      failed_streak_ = 0;
    }
    last_round_ns_ = now;
    std::vector<int> wanted;
    for (int p : r->owned) {
      if (std::find(r->surplus.begin(), r->surplus.end(), p) == r->surplus.end()) {
        wanted.push_back(p);
      }
    }
    // Stop readers of partitions no longer wanted (lost or surplus), then
    // release the surplus: nobody else starts reading it while we still do.
    // With lanes a surplus partition is handed over: its lane is checkpointed
    // at the last message it took before the lease goes.
    std::vector<int> unwanted;
    for (auto& [p, reader] : readers_) {
      if (std::find(wanted.begin(), wanted.end(), p) == wanted.end()) {
        reader->stop.store(true);
        unwanted.push_back(p);
      }
    }
    std::vector<int> handing_over;
    for (int p : unwanted) {
      StopReader(readers_[p].get());
      readers_.erase(p);
      if (lanes_ != nullptr) {
        const bool surplus = std::find(r->surplus.begin(), r->surplus.end(), p) != r->surplus.end();
        QueueControl(p, ItemKind::kStop, surplus);
        if (surplus) handing_over.push_back(p);
      }
    }
    if (!handing_over.empty()) WaitHandOver(handing_over);
    if (!r->surplus.empty()) {
      if (absl::Status s = leases_->Release(r->surplus); !s.ok()) {
        std::fprintf(stderr, "aftershock: nats: %s\n", std::string(s.message()).c_str());
      }
    }
    for (int p : wanted) {
      if (readers_.count(p) != 0) continue;
      if (lanes_ != nullptr) PrepareLane(p);
      auto reader = std::make_unique<Reader>();
      reader->partition = p;
      Reader* raw = reader.get();
      reader->thread = std::thread([this, raw] { ReadPartition(raw); });
      readers_[p] = std::move(reader);
    }
    if (!r->taken_over.empty()) {
      std::fprintf(stderr, "aftershock: nats: %s took over partition(s) %s (lease expired)\n",
                   instance_.c_str(), absl::StrJoin(r->taken_over, ",").c_str());
    }
    if (!r->lost.empty()) {
      std::fprintf(stderr,
                   "aftershock: nats: %s lost the lease(s) of partition(s) %s (expired or "
                   "written by another instance)\n",
                   instance_.c_str(), absl::StrJoin(r->lost, ",").c_str());
    }
    PublishStats();
    return true;
  }

  // Queues a start or stop of partition p's lane for the ingest thread.
  void QueueControl(int p, ItemKind kind, bool store,
                    std::shared_ptr<const Checkpoint> checkpoint = nullptr, uint64_t seq = 0) {
    Item it;
    it.partition = p;
    it.kind = kind;
    it.store = store;
    it.seq = seq;
    it.checkpoint = std::move(checkpoint);
    {
      std::lock_guard<std::mutex> l(mu_);
      queue_.push_back(std::move(it));
      queued_.fetch_add(1, std::memory_order_relaxed);
    }
    const uint64_t one = 1;
    if (write(efd_, &one, sizeof(one)) < 0) {
      // Counter saturated: the ingest thread is signalled already.
    }
  }

  // Before partition p's reader starts (coordinator): reads its checkpoint
  // and queues the lane's start; the reader then begins after the
  // checkpoint's sequence (or at the partition's first message).
  void PrepareLane(int p) {
    std::shared_ptr<const Checkpoint> cp;
    uint64_t seq = 0;
    int64_t written_ns = 0;
    auto stored = store_->Get(p);
    if (stored.ok()) {
      const uint64_t at = stored->sequence;
      const size_t size = stored->bytes.size();
      written_ns = stored->written_ns;
      auto parsed = ParseCheckpoint(std::move(stored->bytes));
      absl::Status s = parsed.status();
      if (parsed.ok()) s = CheckCheckpointConfig(*parsed, engine_config_);
      if (s.ok()) {
        std::fprintf(stderr,
                     "aftershock: nats: partition %d: restoring its checkpoint (%llu symbols, "
                     "%zu bytes, written %.1f s ago); reading from sequence %llu\n",
                     p, static_cast<unsigned long long>(parsed->header().symbol_count), size,
                     static_cast<double>(WallNs() - written_ns) / 1e9,
                     static_cast<unsigned long long>(at + 1));
        cp = std::make_shared<const Checkpoint>(*std::move(parsed));
        seq = at;
      } else {
        std::fprintf(stderr,
                     "aftershock: nats: partition %d: stored checkpoint not usable (%s); "
                     "replaying the partition from its first message\n",
                     p, std::string(s.message()).c_str());
      }
    } else if (!absl::IsNotFound(stored.status())) {
      std::fprintf(stderr,
                   "aftershock: nats: partition %d: cannot read its checkpoint (%s); replaying "
                   "the partition from its first message\n",
                   p, std::string(stored.status().message()).c_str());
    }
    if (cp != nullptr) {
      restores_.fetch_add(1, std::memory_order_relaxed);
    } else {
      fresh_starts_.fetch_add(1, std::memory_order_relaxed);
    }
    last_fetched_[p].store(seq);
    stored_seq_[p].store(seq);
    stored_ns_[p].store(cp != nullptr ? written_ns : 0);
    QueueControl(p, ItemKind::kStart, false, std::move(cp), seq);
  }

  // Waits (at most a third of the lease time) until the ingest thread has
  // checkpointed each of `partitions` and the writer stored it.
  void WaitHandOver(const std::vector<int>& partitions) {
    const auto deadline =
        std::chrono::steady_clock::now() +
        std::chrono::milliseconds(static_cast<int64_t>(config_.lease_seconds * 1000 / 3));
    std::unique_lock<std::mutex> l(mu_);
    auto all_done = [&] {
      for (int p : partitions) {
        if (std::find(handed_over_.begin(), handed_over_.end(), p) == handed_over_.end()) {
          return false;
        }
      }
      return true;
    };
    const bool done = handover_cv_.wait_until(l, deadline, [&] {
      std::lock_guard<std::mutex> c(coord_mu_);
      return stopping_ || all_done();
    });
    if (!done) {
      std::fprintf(stderr,
                   "aftershock: nats: hand-over checkpoint of partition(s) %s not stored in time; "
                   "releasing anyway (the next holder replays from the previous one)\n",
                   absl::StrJoin(partitions, ",").c_str());
    }
    for (int p : partitions) {
      handed_over_.erase(std::remove(handed_over_.begin(), handed_over_.end(), p),
                         handed_over_.end());
    }
  }

  void StopReader(Reader* r) {
    r->stop.store(true);
    if (r->thread.joinable()) r->thread.join();
    pending_[r->partition].store(0);
  }

  void StopAllReaders() {
    // All flags first, then the joins: the readers wind down in parallel
    // (each may be inside a request bounded by the 2 s JetStream wait).
    for (auto& [p, r] : readers_) r->stop.store(true);
    for (auto& [p, r] : readers_) StopReader(r.get());
    readers_.clear();
  }

  void PublishStats() {
    std::lock_guard<std::mutex> l(stats_mu_);
    stats_.partitions.clear();
    for (const auto& [p, r] : readers_) stats_.partitions.push_back(p);
    stats_.leases = leases_->stats();
    stats_.lease_errors = lease_errors_;
    stats_.fenced = fenced_;
    stats_.last_round_ns = last_round_ns_;
  }

  // ---- reader threads ----
  void FreeGraveyard(std::vector<natsMsg*>* scratch) {
    {
      std::lock_guard<std::mutex> l(mu_);
      scratch->swap(graveyard_);
    }
    for (natsMsg* m : *scratch) natsMsg_Destroy(m);
    scratch->clear();
  }

  // Reads one partition with an ordered consumer (ephemeral, no
  // acknowledgements, in stream order; the client re-creates it after a gap
  // from the next sequence). Why not a pull consumer and
  // natsSubscription_Fetch: in libnats 3.4.1 a fetch whose wait ends while the
  // server still answers an earlier request can collect more messages than
  // its batch and writes past its array (seen under valgrind at 100,000
  // queued ticks); an ordered push consumer has no pull requests.
  void ReadPartition(Reader* r) {
    const int p = r->partition;
    const std::string filter = nats_internal::PartitionFilter(config_, p);
    natsSubscription* sub = nullptr;
    std::vector<natsMsg*> scratch;
    std::vector<natsMsg*> batch;
    batch.reserve(static_cast<size_t>(options_.fetch_batch));
    int failures = 0;
    bool caught_up = false;  // a message with nothing pending after it was queued
    // Last message or probe (or the consumer's creation): a consumer silent
    // for kReaderProbeMs is asked whether it is alive.
    auto last_activity = std::chrono::steady_clock::now();
    while (!r->stop.load()) {
      if (sub == nullptr) {
        jsSubOptions so;
        jsSubOptions_Init(&so);
        so.Stream = config_.stream.c_str();
        so.Ordered = true;  // no acknowledgements: the position is ours
        const uint64_t last = last_fetched_[p].load();
        if (last > 0) {
          so.Config.DeliverPolicy = js_DeliverByStartSequence;
          so.Config.OptStartSeq = last + 1;
        } else {
          so.Config.DeliverPolicy = js_DeliverAll;
        }
        jsErrCode jerr = static_cast<jsErrCode>(0);
        const natsStatus s =
            js_SubscribeSync(&sub, reader_js_, filter.c_str(), nullptr, &so, &jerr);
        if (s != NATS_OK) {
          sub = nullptr;
          if (++failures == 1 || failures % 50 == 0) {
            std::fprintf(
                stderr, "aftershock: nats: %s\n",
                std::string(ToStatus(s, absl::StrCat("cannot read partition ", p), jerr).message())
                    .c_str());
          }
          std::this_thread::sleep_for(std::chrono::milliseconds(200));
          continue;
        }
        // The client may buffer many messages of a replay; no slow-consumer drops.
        natsSubscription_SetPendingLimits(sub, -1, -1);
        last_activity = std::chrono::steady_clock::now();
      }
      // The first message with a bounded wait, then whatever is already
      // buffered, up to fetch_batch, under one lock.
      batch.clear();
      natsMsg* m = nullptr;
      natsStatus s = natsSubscription_NextMsg(&m, sub, options_.fetch_wait_ms);
      while (s == NATS_OK) {
        batch.push_back(m);
        if (static_cast<int>(batch.size()) >= options_.fetch_batch) break;
        s = natsSubscription_NextMsg(&m, sub, 0);
      }
      if (batch.empty()) {
        if (s != NATS_TIMEOUT) {
          // Subscription unusable (connection closed, consumer gone): start
          // again after the last message taken.
          natsSubscription_Destroy(sub);
          sub = nullptr;
          std::this_thread::sleep_for(std::chrono::milliseconds(100));
        } else {
          pending_[p].store(0, std::memory_order_relaxed);
          const auto now = std::chrono::steady_clock::now();
          if (now - last_activity >= std::chrono::milliseconds(kReaderProbeMs)) {
            const double silent = std::chrono::duration<double>(now - last_activity).count();
            last_activity = now;
            if (!ConsumerAlive(sub, p, silent)) {
              consumer_restarts_.fetch_add(1, std::memory_order_relaxed);
              natsSubscription_Destroy(sub);
              sub = nullptr;
            }
          }
        }
        FreeGraveyard(&scratch);
        continue;
      }
      last_activity = std::chrono::steady_clock::now();
      failures = 0;
      uint64_t last = last_fetched_[p].load();
      uint64_t pending = 0;
      size_t queued = 0;
      {
        std::lock_guard<std::mutex> l(mu_);
        for (natsMsg*& msg : batch) {
          jsMsgMetaData* meta = nullptr;
          if (natsMsg_GetMetaData(&meta, msg) != NATS_OK) continue;  // not a stream message
          const uint64_t seq = meta->Sequence.Stream;
          pending = meta->NumPending;
          jsMsgMetaData_Destroy(meta);
          if (seq <= last) continue;  // already taken before a re-subscribe
          last = seq;
          Item it;
          it.msg = msg;
          it.partition = p;
          it.seq = seq;
          it.caught_up = !caught_up && pending == 0;
          caught_up = caught_up || pending == 0;
          queue_.push_back(std::move(it));
          msg = nullptr;  // now owned by the queue
          ++queued;
        }
        queued_.fetch_add(queued, std::memory_order_relaxed);
      }
      for (natsMsg* msg : batch) natsMsg_Destroy(msg);  // the ones not queued
      last_fetched_[p].store(last);
      pending_[p].store(pending, std::memory_order_relaxed);
      if (queued > 0) {
        const uint64_t one = 1;
        if (write(efd_, &one, sizeof(one)) < 0) {
          // Counter saturated: the ingest thread is signalled already.
        }
      }
      FreeGraveyard(&scratch);
    }
    if (sub != nullptr) {
      natsSubscription_Unsubscribe(sub);
      natsSubscription_Destroy(sub);
    }
    FreeGraveyard(&scratch);
  }

  // Whether partition p's consumer, silent for `silent` seconds, still
  // delivers. An ordered consumer lives on one server (the broker places it);
  // when that server dies the subscription just stays silent (the client
  // reports missed heartbeats only to an asynchronous error handler), so the
  // reader asks the consumer: no answer within kReaderWaitMs, or messages
  // pending that never arrived, and the reader creates a new consumer after
  // the last message it took.
  bool ConsumerAlive(natsSubscription* sub, int p, double silent) {
    jsConsumerInfo* ci = nullptr;
    jsErrCode jerr = static_cast<jsErrCode>(0);
    const natsStatus s = natsSubscription_GetConsumerInfo(&ci, sub, nullptr, &jerr);
    if (s != NATS_OK) {
      std::fprintf(stderr,
                   "aftershock: nats: partition %d: its consumer does not answer after %.1f s "
                   "without messages (%s); reading again after sequence %llu\n",
                   p, silent, std::string(ToStatus(s, "consumer info", jerr).message()).c_str(),
                   static_cast<unsigned long long>(last_fetched_[p].load()));
      return false;
    }
    const uint64_t pending = ci->NumPending;
    jsConsumerInfo_Destroy(ci);
    if (pending == 0) return true;
    std::fprintf(stderr,
                 "aftershock: nats: partition %d: its consumer holds %llu pending message(s) but "
                 "delivered none for %.1f s; reading again after sequence %llu\n",
                 p, static_cast<unsigned long long>(pending), silent,
                 static_cast<unsigned long long>(last_fetched_[p].load()));
    return false;
  }

  const EngineConfig engine_config_;  // for the checkpoints' configuration check
  const NatsConfig config_;
  const NatsFeedOptions options_;
  PartitionConsumer* const lanes_;  // null: no lanes (ingest thread only)
  std::string instance_;
  int efd_ = -1;
  std::unique_ptr<NatsSession> session_;
  jsCtx* reader_js_ = nullptr;               // owned; on session_'s connection, waits kReaderWaitMs
  std::unique_ptr<PartitionLeases> leases_;  // coordinator thread (and Init / destructor)

  // Per partition, written by its reader: last stream sequence fetched (kept
  // across reader restarts) and the broker's pending count after it.
  std::unique_ptr<std::atomic<uint64_t>[]> last_fetched_;
  std::unique_ptr<std::atomic<uint64_t>[]> pending_;
  // Per partition (lanes): the sequence of the last stored checkpoint (or the
  // one restored), when it was stored (wall ns; 0 none), and whether a write
  // of it is queued or running.
  std::unique_ptr<std::atomic<uint64_t>[]> stored_seq_;
  std::unique_ptr<std::atomic<int64_t>[]> stored_ns_;
  std::unique_ptr<std::atomic<bool>[]> in_flight_;

  // Lanes, ingest thread only.
  std::vector<LaneState> lane_;
  int64_t next_checkpoint_ns_ = 0;
  bool released_ = false;  // OnStopped released the leases

  // The checkpoint store and its writer thread.
  std::unique_ptr<PartitionCheckpointStore> store_;
  std::mutex write_mu_;
  std::condition_variable write_cv_;
  std::deque<WriteJob> writes_;   // guarded by write_mu_
  bool writer_stopping_ = false;  // guarded by write_mu_
  std::thread writer_;
  std::condition_variable handover_cv_;  // with mu_
  std::vector<int> handed_over_;         // guarded by mu_

  std::mutex mu_;                    // guards queue_ and graveyard_
  std::deque<Item> queue_;           // fetched, not yet handed to the engine
  std::vector<natsMsg*> graveyard_;  // consumed, to be freed by a reader
  std::atomic<size_t> queued_{0};    // queue_.size(), readable without the lock

  std::vector<Item> staging_;   // ingest thread
  std::vector<natsMsg*> done_;  // ingest thread: consumed this round

  // Coordinator thread only.
  std::map<int, std::unique_ptr<Reader>> readers_;
  uint64_t lease_errors_ = 0;
  int failed_streak_ = 0;  // lease rounds failed since the last successful one
  uint64_t fenced_ = 0;
  int64_t last_round_ns_ = 0;
  std::thread coordinator_;
  std::mutex coord_mu_;
  std::condition_variable coord_cv_;
  bool stopping_ = false;  // guarded by coord_mu_

  mutable std::mutex stats_mu_;
  NatsFeedStats stats_;  // guarded by stats_mu_ (partition list, lease counters)
  std::atomic<uint64_t> messages_{0};
  std::atomic<uint64_t> bad_subjects_{0};
  std::atomic<uint64_t> checkpoints_written_{0};
  std::atomic<uint64_t> checkpoint_failures_{0};
  std::atomic<uint64_t> restores_{0};
  std::atomic<uint64_t> consumer_restarts_{0};  // readers: ConsumerAlive said no
  std::atomic<uint64_t> fresh_starts_{0};
  std::atomic<uint64_t> last_checkpoint_bytes_{0};
};

}  // namespace

absl::StatusOr<std::unique_ptr<NatsFeed>> NatsFeed::Open(const EngineConfig& config,
                                                         const NatsFeedOptions& options) {
  auto feed = std::make_unique<NatsFeedImpl>(config, options);
  if (absl::Status s = feed->Init(); !s.ok()) return s;
  return std::unique_ptr<NatsFeed>(std::move(feed));
}

}  // namespace aftershock
