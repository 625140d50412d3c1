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
#include "aftershock/clock.h"
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

// Largest batch Pump moves per call (the staging buffer is reserved once).
constexpr size_t kMaxPumpBatch = 16384;

class NatsFeedImpl : public NatsFeed {
 public:
  NatsFeedImpl(const EngineConfig& config, const NatsFeedOptions& options)
      : config_(config.nats),
        options_(options),
        last_fetched_(new std::atomic<uint64_t>[static_cast<size_t>(config_.partitions)]),
        pending_(new std::atomic<uint64_t>[static_cast<size_t>(config_.partitions)]) {
    for (int p = 0; p < config_.partitions; ++p) {
      last_fetched_[p].store(0);
      pending_[p].store(0);
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
    if (coordinator_.joinable()) {
      {
        std::lock_guard<std::mutex> l(coord_mu_);
        stopping_ = true;
      }
      coord_cv_.notify_all();
      coordinator_.join();
    } else {
      StopAllReaders();
    }
    if (leases_ != nullptr && options_.release_on_destroy) {
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
    session_.reset();
    if (efd_ >= 0) close(efd_);
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
    char symbol[kMaxSymbolLength];
    for (const Item& it : staging_) {
      const absl::string_view subject = natsMsg_GetSubject(it.msg);
      const size_t dot = subject.rfind('.');
      const absl::string_view token =
          dot == absl::string_view::npos ? subject : subject.substr(dot + 1);
      const int n = DecodeSubjectTokenTo(token, symbol, sizeof(symbol));
      const absl::string_view body(natsMsg_GetData(it.msg),
                                   static_cast<size_t>(natsMsg_GetDataLength(it.msg)));
      if (n > 0) {
        consumer->OnMessage(absl::string_view(symbol, static_cast<size_t>(n)), body);
      } else {
        // The raw token is no valid symbol ('~' is outside the alphabet), so
        // the consumer counts it as bad_symbol.
        bad_subjects_.fetch_add(1, std::memory_order_relaxed);
        consumer->OnMessage(token, body);
      }
      done_.push_back(it.msg);
    }
    const int delivered = static_cast<int>(staging_.size());
    staging_.clear();
    messages_.fetch_add(static_cast<uint64_t>(delivered), std::memory_order_relaxed);
    return delivered;
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
    metric("aftershock_nats_replay_lag_messages", "gauge",
           "Messages of the held partitions not yet handed to the engine.", s.replay_lag);
    metric("aftershock_nats_messages_total", "counter", "Messages taken from JetStream.",
           s.messages);
    metric("aftershock_nats_bad_subjects_total", "counter",
           "Messages whose subject token did not decode.", s.bad_subjects);
  }

  void AppendHealthJson(std::string* o) const override {
    const NatsFeedStats s = stats();
    absl::StrAppend(o, ",\"nats\":{\"instance\":\"", s.instance, "\",\"partitions\":[",
                    absl::StrJoin(s.partitions, ","), "],\"lease_renewals\":", s.leases.renewals,
                    ",\"takeovers\":", s.leases.takeovers, ",\"lease_errors\":", s.lease_errors,
                    ",\"replay_lag\":", s.replay_lag, "}");
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
    return s;
  }

 private:
  struct Item {
    natsMsg* msg;
    int partition;
  };
  struct Reader {
    int partition = 0;
    std::atomic<bool> stop{false};
    std::thread thread;
  };

  // ---- coordinator thread ----
  void Coordinate() {
    const auto period = std::chrono::milliseconds(
        std::max<int64_t>(100, static_cast<int64_t>(config_.lease_seconds * 1000 / 3)));
    std::unique_lock<std::mutex> l(coord_mu_);
    while (!stopping_) {
      coord_cv_.wait_for(l, period, [this] { return stopping_; });
      if (stopping_) break;
      l.unlock();
      RunRound();
      l.lock();
    }
    l.unlock();
    StopAllReaders();
    PublishStats();
  }

  void RunRound() {
    auto r = leases_->Round();
    const int64_t now = WallNs();
    if (!r.ok()) {
      ++lease_errors_;
      if (lease_errors_ == 1 || lease_errors_ % 20 == 0) {
        std::fprintf(stderr, "aftershock: nats: lease round failed: %s\n",
                     std::string(r.status().message()).c_str());
      }
      // Fence: without a successful round for the lease time, the leases may
      // belong to others by now; stop reading rather than filter twice.
      const int64_t lease_ns = static_cast<int64_t>(config_.lease_seconds * 1e9);
      if (!readers_.empty() && (last_round_ns_ == 0 || now - last_round_ns_ >= lease_ns)) {
        StopAllReaders();
        ++fenced_;
      }
      PublishStats();
      return;
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
    std::vector<int> unwanted;
    for (auto& [p, reader] : readers_) {
      if (std::find(wanted.begin(), wanted.end(), p) == wanted.end()) {
        reader->stop.store(true);
        unwanted.push_back(p);
      }
    }
    for (int p : unwanted) {
      StopReader(readers_[p].get());
      readers_.erase(p);
    }
    if (!r->surplus.empty()) {
      if (absl::Status s = leases_->Release(r->surplus); !s.ok()) {
        std::fprintf(stderr, "aftershock: nats: %s\n", std::string(s.message()).c_str());
      }
    }
    for (int p : wanted) {
      if (readers_.count(p) != 0) continue;
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
    PublishStats();
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
            js_SubscribeSync(&sub, session_->js(), filter.c_str(), nullptr, &so, &jerr);
        if (s != NATS_OK) {
          sub = nullptr;
          if (++failures == 1 || failures % 50 == 0) {
            std::fprintf(stderr, "aftershock: nats: %s\n",
                         std::string(ToStatus(s, absl::StrCat("cannot read partition ", p), jerr)
                                         .message())
                             .c_str());
          }
          std::this_thread::sleep_for(std::chrono::milliseconds(200));
          continue;
        }
        // The client may buffer many messages of a replay; no slow-consumer drops.
        natsSubscription_SetPendingLimits(sub, -1, -1);
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
        }
        FreeGraveyard(&scratch);
        continue;
      }
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
          queue_.push_back(Item{msg, p});
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

  const NatsConfig config_;
  const NatsFeedOptions options_;
  std::string instance_;
  int efd_ = -1;
  std::unique_ptr<NatsSession> session_;
  std::unique_ptr<PartitionLeases> leases_;  // coordinator thread (and Init / destructor)

  // Per partition, written by its reader: last stream sequence fetched (kept
  // across reader restarts) and the broker's pending count after it.
  std::unique_ptr<std::atomic<uint64_t>[]> last_fetched_;
  std::unique_ptr<std::atomic<uint64_t>[]> pending_;

  std::mutex mu_;                   // guards queue_ and graveyard_
  std::deque<Item> queue_;          // fetched, not yet handed to the engine
  std::vector<natsMsg*> graveyard_; // consumed, to be freed by a reader
  std::atomic<size_t> queued_{0};   // queue_.size(), readable without the lock

  std::vector<Item> staging_;   // ingest thread
  std::vector<natsMsg*> done_;  // ingest thread: consumed this round

  // Coordinator thread only.
  std::map<int, std::unique_ptr<Reader>> readers_;
  uint64_t lease_errors_ = 0;
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
};

}  // namespace

absl::StatusOr<std::unique_ptr<NatsFeed>> NatsFeed::Open(const EngineConfig& config,
                                                         const NatsFeedOptions& options) {
  auto feed = std::make_unique<NatsFeedImpl>(config, options);
  if (absl::Status s = feed->Init(); !s.ok()) return s;
  return std::unique_ptr<NatsFeed>(std::move(feed));
}

}  // namespace aftershock
