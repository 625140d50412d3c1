#include "aftershock/partition_leases.h"

#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <thread>
#include <utility>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "absl/strings/str_split.h"
#include "io/nats_client.h"

namespace aftershock {
namespace {

using nats_internal::KvStorePtr;
using nats_internal::NatsSession;
using nats_internal::ToStatus;
using Clock = std::chrono::steady_clock;

constexpr char kAlive[] = "alive";
constexpr char kMembersKey[] = "members";
// Passes of the members read-merge-write within one round (each pass after a
// compare-and-set lost to another instance's concurrent write).
constexpr int kMemberPasses = 4;

std::string PartitionKey(int p) { return absl::StrCat("p.", p); }
std::string InstanceKey(const std::string& instance) { return absl::StrCat("i.", instance); }

// A request worth trying again: it may succeed a moment later (a timeout, a
// bucket or stream electing its leader, a reconnection in progress).
bool Transient(natsStatus s) {
  return s == NATS_TIMEOUT || s == NATS_NO_RESPONDERS || s == NATS_CONNECTION_DISCONNECTED ||
         s == NATS_STALE_CONNECTION || s == NATS_IO_ERROR;
}

// Runs `request` (returning natsStatus) until it is not transient or the next
// attempt could not end before `deadline` (each waits at most `wait`). A fast
// failure ("no responders") pauses 50 ms before the next attempt. Counts the
// extra attempts in *retries.
template <typename Request>
natsStatus Attempt(Request request, Clock::time_point deadline, Clock::duration wait,
                   uint64_t* retries) {
  for (;;) {
    const Clock::time_point began = Clock::now();
    const natsStatus s = request();
    if (!Transient(s)) return s;
    Clock::time_point next = Clock::now();
    if (next - began < wait / 2) next += std::chrono::milliseconds(50);
    if (next + wait > deadline) return s;
    std::this_thread::sleep_until(next);
    ++*retries;
  }
}

// One key as read: absent, or value and revision.
struct KeyState {
  bool present = false;
  std::string value;
  uint64_t revision = 0;
  int64_t created_ns = 0;
};

absl::StatusOr<KeyState> GetKey(kvStore* kv, const std::string& key, Clock::time_point deadline,
                                Clock::duration wait, uint64_t* retries) {
  kvEntry* e = nullptr;
  const natsStatus s =
      Attempt([&] { return kvStore_Get(&e, kv, key.c_str()); }, deadline, wait, retries);
  KeyState k;
  if (s == NATS_NOT_FOUND) return k;  // absent, expired or deleted
  if (s != NATS_OK) return ToStatus(s, absl::StrCat("cannot read lease key ", key));
  k.present = true;
  k.value.assign(static_cast<const char*>(kvEntry_Value(e)),
                 static_cast<size_t>(kvEntry_ValueLen(e)));
  k.revision = kvEntry_Revision(e);
  k.created_ns = kvEntry_Created(e);
  kvEntry_Destroy(e);
  return k;
}

// The names in a members value (one a line; empty lines skipped).
std::vector<std::string> ParseMembers(const std::string& value) {
  std::vector<std::string> out;
  for (absl::string_view name : absl::StrSplit(value, '\n', absl::SkipEmpty())) {
    out.emplace_back(name);
  }
  std::sort(out.begin(), out.end());
  out.erase(std::unique(out.begin(), out.end()), out.end());
  return out;
}

// The members whose heartbeat key is present, sorted (`self`, if not empty,
// counts as live without a read: its heartbeat was just written).
absl::StatusOr<std::vector<std::string>> LiveMembers(kvStore* kv,
                                                     const std::vector<std::string>& members,
                                                     const std::string& self,
                                                     Clock::time_point deadline,
                                                     Clock::duration wait, uint64_t* retries) {
  std::vector<std::string> live;
  for (const std::string& name : members) {
    if (name == self) continue;
    auto k = GetKey(kv, InstanceKey(name), deadline, wait, retries);
    if (!k.ok()) return k.status();
    if (k->present) live.push_back(name);
  }
  if (!self.empty()) live.push_back(self);
  std::sort(live.begin(), live.end());
  return live;
}

absl::StatusOr<KvStorePtr> OpenRoundBucket(jsCtx* js, const NatsConfig& config) {
  // The bucket exists (OpenLeaseBucket made sure); opening it again on the
  // short-wait context may time out while a new cluster elects its leader.
  kvStore* kv = nullptr;
  natsStatus s = NATS_TIMEOUT;
  const Clock::time_point deadline = Clock::now() + std::chrono::seconds(10);
  while (Clock::now() < deadline) {
    s = js_KeyValue(&kv, js, config.lease_bucket.c_str());
    if (!Transient(s)) break;
  }
  if (s != NATS_OK) {
    return ToStatus(s, absl::StrCat("cannot open key-value bucket '", config.lease_bucket, "'"));
  }
  return KvStorePtr(kv);
}

class LeasesImpl : public PartitionLeases {
 public:
  LeasesImpl(NatsConfig config, std::string instance)
      : config_(std::move(config)),
        instance_(std::move(instance)),
        timing_(LeaseTimingFor(config_.lease_seconds)),
        wait_(std::chrono::milliseconds(timing_.request_ms)),
        held_revision_(static_cast<size_t>(config_.partitions), 0),
        confirmed_at_(static_cast<size_t>(config_.partitions)),
        last_other_owner_(static_cast<size_t>(config_.partitions)) {}

  absl::Status Init() {
    auto session = NatsSession::Connect(config_, absl::StrCat("aftershock-leases-", instance_));
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
    // Created or opened with the session's patient context (startup may meet
    // an election), then used through a context whose requests wait
    // request_ms: a round's requests are tried again rather than waited for.
    auto created = nats_internal::OpenLeaseBucket(session_.get(), config_, /*create=*/true);
    if (!created.ok()) return created.status();
    created->reset();
    jsOptions o;
    jsOptions_Init(&o);
    o.Wait = timing_.request_ms;
    const natsStatus s = natsConnection_JetStream(&round_js_, session_->conn(), &o);
    if (s != NATS_OK) return ToStatus(s, "cannot create a JetStream context");
    auto kv = OpenRoundBucket(round_js_, config_);
    if (!kv.ok()) return kv.status();
    kv_ = *std::move(kv);
    return absl::OkStatus();
  }

  ~LeasesImpl() override {
    kv_.reset();  // before the context and the session it belongs to
    if (round_js_ != nullptr) jsCtx_Destroy(round_js_);
  }

  absl::StatusOr<LeaseRound> Round() override {
    return Round(Clock::now() + std::chrono::milliseconds(timing_.period_ms));
  }

  absl::StatusOr<LeaseRound> Round(Clock::time_point deadline) override {
    auto r = RoundOnce(deadline);
    previous_failed_ = !r.ok();
    return r;
  }

  absl::StatusOr<LeaseRound> RoundOnce(Clock::time_point deadline) {
    // After failed rounds (the bucket unreachable or electing its leader),
    // every instance's keys may have expired at once, and the others'
    // heartbeats may not be rewritten yet: this round re-claims only what
    // this instance held, so nobody grabs a partition of an instance it
    // cannot see yet only to hand it back a round later.
    const bool recovering = previous_failed_;
    const std::vector<uint64_t> held_at_start = held_revision_;
    LeaseRound r;
    ++stats_.rounds;
    kvStore* kv = kv_.get();
    uint64_t rev = 0;
    natsStatus s =
        Attempt([&] { return kvStore_PutString(&rev, kv, InstanceKey(instance_).c_str(), kAlive); },
                deadline, wait_, &stats_.retries);
    if (s != NATS_OK) return ToStatus(s, "cannot write the instance heartbeat");
    auto live = UpdateMembers(deadline);
    if (!live.ok()) return live.status();
    const int n = config_.partitions;
    const int L = static_cast<int>(live->size());
    const int rank =
        static_cast<int>(std::find(live->begin(), live->end(), instance_) - live->begin());
    r.live_instances = L;
    r.share = n / L + (rank < n % L ? 1 : 0);

    // Read every lease; renew ours.
    std::vector<KeyState> keys(static_cast<size_t>(n));
    for (int p = 0; p < n; ++p) {
      auto k = GetKey(kv, PartitionKey(p), deadline, wait_, &stats_.retries);
      if (!k.ok()) return k.status();
      keys[p] = *std::move(k);
      const bool held_before = held_revision_[p] != 0;
      if (keys[p].present && keys[p].value == instance_) {
        auto renewed = WriteIfUnchanged(p, keys[p], deadline);
        if (!renewed.ok()) return renewed.status();
        if (*renewed) {
          ++stats_.renewals;
          continue;
        }
        keys[p] = KeyState{true, "?", 0, 0};  // written meanwhile by someone else
      }
      if (held_before) {  // not ours any more
        held_revision_[p] = 0;
        r.lost.push_back(p);
        ++stats_.lost;
      }
      if (keys[p].present && !keys[p].value.empty() && keys[p].value != "?") {
        last_other_owner_[p] = keys[p].value;
      }
    }
    int owned = 0;
    for (int p = 0; p < n; ++p) owned += held_revision_[p] != 0 ? 1 : 0;

    // Claim free partitions up to the share: first the ones this instance
    // held (their leases expired), then, unless recovering, others starting
    // at this instance's slice of the ring so that instances starting
    // together rarely collide.
    const int start = L > 0 ? rank * n / L : 0;
    std::vector<int> order;
    for (int i = 0; i < n; ++i) {
      if (held_at_start[(start + i) % n] != 0) order.push_back((start + i) % n);
    }
    for (int i = 0; i < n && !recovering; ++i) {
      if (held_at_start[(start + i) % n] == 0) order.push_back((start + i) % n);
    }
    for (size_t i = 0; i < order.size() && owned < r.share; ++i) {
      const int p = order[i];
      if (held_revision_[p] != 0) continue;
      const KeyState& k = keys[p];
      const bool free = !k.present || k.value.empty();
      if (!free) continue;
      auto claimed = WriteIfUnchanged(p, k, deadline);
      if (!claimed.ok()) return claimed.status();
      if (!*claimed) continue;  // another instance was first
      ++owned;
      r.acquired.push_back(p);
      ++stats_.acquisitions;
      // Absent key + a holder seen before that was not us: that lease expired.
      if (!k.present && !last_other_owner_[p].empty()) {
        r.taken_over.push_back(p);
        ++stats_.takeovers;
      }
      last_other_owner_[p].clear();
    }
    std::sort(r.acquired.begin(), r.acquired.end());
    std::sort(r.taken_over.begin(), r.taken_over.end());

    // Surplus: the highest-numbered held partitions beyond the share.
    for (int p = n - 1; p >= 0 && owned > r.share; --p) {
      if (held_revision_[p] == 0) continue;
      r.surplus.insert(r.surplus.begin(), p);
      --owned;
    }
    for (int p = 0; p < n; ++p) {
      if (held_revision_[p] != 0) r.owned.push_back(p);
    }
    return r;
  }

  Clock::time_point confirmed_since() const override {
    Clock::time_point oldest = Clock::time_point::max();
    for (int p = 0; p < config_.partitions; ++p) {
      if (held_revision_[p] != 0) oldest = std::min(oldest, confirmed_at_[p]);
    }
    return oldest;
  }

  absl::Status Release(absl::Span<const int> partitions) override {
    absl::Status first;
    if (natsConnection_Status(session_->conn()) != NATS_CONN_STATUS_CONNECTED) {
      // Nothing can be written; the leases expire after lease_seconds.
      for (int p : partitions) {
        if (p >= 0 && p < config_.partitions) held_revision_[p] = 0;
      }
      return absl::UnavailableError("not connected to NATS: the leases expire instead");
    }
    const Clock::time_point deadline = Clock::now() + std::chrono::milliseconds(timing_.period_ms);
    for (int p : partitions) {
      if (p < 0 || p >= config_.partitions || held_revision_[p] == 0) continue;
      uint64_t next = 0;
      const uint64_t held = held_revision_[p];
      natsStatus s = Attempt(
          [&] { return kvStore_UpdateString(&next, kv_.get(), PartitionKey(p).c_str(), "", held); },
          deadline, wait_, &stats_.retries);
      held_revision_[p] = 0;
      absl::Status st = ToStatus(s, absl::StrCat("cannot release lease ", PartitionKey(p)));
      if (absl::IsFailedPrecondition(st)) {
        // A retried release may find its first attempt stored.
        auto k = GetKey(kv_.get(), PartitionKey(p), deadline, wait_, &stats_.retries);
        if (k.ok() && k->present && k->value.empty()) {
          ++stats_.adopted;
          st = absl::OkStatus();
        }
      }
      if (st.ok()) {
        ++stats_.releases;
      } else {
        if (absl::IsFailedPrecondition(st)) {
          ++stats_.lost;  // it had expired and was taken already
        } else if (first.ok()) {
          first = st;
        }
        if (absl::IsUnavailable(st)) {  // broker gone: the rest expire instead
          for (int q : partitions) {
            if (q >= 0 && q < config_.partitions) held_revision_[q] = 0;
          }
          break;
        }
      }
    }
    return first;
  }

  absl::Status ReleaseAll() override {
    std::vector<int> held;
    for (int p = 0; p < config_.partitions; ++p) {
      if (held_revision_[p] != 0) held.push_back(p);
    }
    absl::Status st = Release(held);
    if (absl::IsUnavailable(st)) return st;
    const Clock::time_point deadline = Clock::now() + std::chrono::milliseconds(timing_.period_ms);
    // The others' next rounds drop this name from `members` (its heartbeat
    // is gone).
    const natsStatus s =
        Attempt([&] { return kvStore_Delete(kv_.get(), InstanceKey(instance_).c_str()); }, deadline,
                wait_, &stats_.retries);
    if (s != NATS_OK && st.ok()) st = ToStatus(s, "cannot delete the instance heartbeat");
    return st;
  }

  LeaseStats stats() const override { return stats_; }
  const std::string& instance() const override { return instance_; }

 private:
  // Step 1 of a round: the live instances, this one included, written back
  // to `members`.
  absl::StatusOr<std::vector<std::string>> UpdateMembers(Clock::time_point deadline) {
    kvStore* kv = kv_.get();
    absl::Status last;
    for (int pass = 0; pass < kMemberPasses; ++pass) {
      auto m = GetKey(kv, kMembersKey, deadline, wait_, &stats_.retries);
      if (!m.ok()) return m.status();
      auto live =
          LiveMembers(kv, ParseMembers(m->value), instance_, deadline, wait_, &stats_.retries);
      if (!live.ok()) return live.status();
      // Rewritten every round, changed or not: a key not rewritten within
      // the lease time expires, and `members` must outlive any one instance.
      const std::string value = absl::StrJoin(*live, "\n");
      uint64_t next = 0;
      const natsStatus s = Attempt(
          [&] {
            return m->present
                       ? kvStore_UpdateString(&next, kv, kMembersKey, value.c_str(), m->revision)
                       : kvStore_CreateString(&next, kv, kMembersKey, value.c_str());
          },
          deadline, wait_, &stats_.retries);
      if (s == NATS_OK) return *std::move(live);
      last = ToStatus(s, "cannot write the lease bucket's members");
      // Another instance wrote `members` meanwhile (or a retried write of
      // ours was stored): read it again and merge.
      if (!absl::IsFailedPrecondition(last)) return last;
    }
    // Lost every pass to concurrent writers: they keep `members` alive; this
    // instance's name is added in its next round. The set read last is used.
    auto m = GetKey(kv, kMembersKey, deadline, wait_, &stats_.retries);
    if (!m.ok()) return m.status();
    return LiveMembers(kv, ParseMembers(m->value), instance_, deadline, wait_, &stats_.retries);
  }

  // Writes this instance's name to p.<p> if the key is still as `seen`
  // (compare-and-set on its revision, or create-if-absent). True when the key
  // now holds this instance's name (held_revision_ and confirmed_at_ set);
  // false when another instance wrote it first.
  absl::StatusOr<bool> WriteIfUnchanged(int p, const KeyState& seen, Clock::time_point deadline) {
    const std::string key = PartitionKey(p);
    const Clock::time_point sent = Clock::now();
    uint64_t next = 0;
    const natsStatus s = Attempt(
        [&] {
          return seen.present
                     ? kvStore_UpdateString(&next, kv_.get(), key.c_str(), instance_.c_str(),
                                            seen.revision)
                     : kvStore_CreateString(&next, kv_.get(), key.c_str(), instance_.c_str());
        },
        deadline, wait_, &stats_.retries);
    if (s == NATS_OK) {
      held_revision_[p] = next;
      confirmed_at_[p] = sent;
      return true;
    }
    const absl::Status st = ToStatus(s, absl::StrCat("cannot write lease ", key));
    if (!absl::IsFailedPrecondition(st)) return st;
    // Written meanwhile, possibly by an earlier attempt of this very write
    // whose answer was lost: only this instance writes its name.
    auto now = GetKey(kv_.get(), key, deadline, wait_, &stats_.retries);
    if (!now.ok()) return now.status();
    if (now->present && now->value == instance_) {
      held_revision_[p] = now->revision;
      confirmed_at_[p] = sent;
      ++stats_.adopted;
      return true;
    }
    return false;
  }

  const NatsConfig config_;
  const std::string instance_;
  const LeaseTiming timing_;
  const Clock::duration wait_;  // one request's wait (timing_.request_ms)
  std::unique_ptr<NatsSession> session_;
  jsCtx* round_js_ = nullptr;            // owned; requests wait timing_.request_ms
  KvStorePtr kv_;                        // opened on round_js_
  std::vector<uint64_t> held_revision_;  // per partition; 0 = not held
  // Per partition: when its last confirmed write was sent.
  std::vector<Clock::time_point> confirmed_at_;
  std::vector<std::string> last_other_owner_;  // per partition: last other holder seen
  LeaseStats stats_;
  bool previous_failed_ = false;  // the last round returned an error
};

bool IsNameByte(char c) {
  return (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '_' ||
         c == '-';
}

}  // namespace

absl::StatusOr<std::unique_ptr<PartitionLeases>> PartitionLeases::Open(
    const NatsConfig& config, const std::string& instance) {
  if (instance.empty() || instance.size() > 64 ||
      !std::all_of(instance.begin(), instance.end(), IsNameByte)) {
    return absl::InvalidArgumentError(
        absl::StrCat("instance name '", instance, "' must be 1..64 characters of [A-Za-z0-9_-]"));
  }
  auto leases = std::make_unique<LeasesImpl>(config, instance);
  if (absl::Status s = leases->Init(); !s.ok()) return s;
  return std::unique_ptr<PartitionLeases>(std::move(leases));
}

std::string DefaultInstanceName() {
  char host[256] = {};
  if (gethostname(host, sizeof(host) - 1) != 0) host[0] = '\0';
  std::string name = absl::StrCat(host[0] != '\0' ? host : "engine", "-", getpid());
  for (char& c : name) {
    if (!IsNameByte(c)) c = '-';
  }
  if (name.size() > 64) name.erase(0, name.size() - 64);  // keep the pid
  return name;
}

absl::StatusOr<ClusterAssignment> ReadClusterAssignment(const NatsConfig& config) {
  auto session = NatsSession::Connect(config, "aftershock-cluster-status");
  if (!session.ok()) return session.status();
  auto kv = nats_internal::OpenLeaseBucket(session->get(), config, /*create=*/false);
  if (!kv.ok()) return kv.status();
  // The session's own wait (2 s), tried again until 10 s have passed.
  const Clock::time_point deadline = Clock::now() + std::chrono::seconds(10);
  const Clock::duration wait = std::chrono::seconds(2);
  uint64_t retries = 0;
  ClusterAssignment a;
  auto members = GetKey(kv->get(), kMembersKey, deadline, wait, &retries);
  if (!members.ok()) return members.status();
  auto live = LiveMembers(kv->get(), ParseMembers(members->value), "", deadline, wait, &retries);
  if (!live.ok()) return live.status();
  a.instances = *std::move(live);
  for (int p = 0; p < config.partitions; ++p) {
    auto k = GetKey(kv->get(), PartitionKey(p), deadline, wait, &retries);
    if (!k.ok()) return k.status();
    PartitionAssignment pa;
    pa.partition = p;
    if (k->present) {
      pa.owner = k->value;
      pa.revision = k->revision;
      pa.written_ns = k->created_ns;
    }
    a.partitions.push_back(std::move(pa));
  }
  return a;
}

LeaseTiming LeaseTimingFor(double lease_seconds) {
  const int64_t lease_ms = static_cast<int64_t>(lease_seconds * 1000);
  LeaseTiming t;
  t.period_ms = std::max<int64_t>(100, lease_ms / 3);
  t.retry_ms = std::min<int64_t>(t.period_ms, 250);
  t.request_ms = std::clamp<int64_t>(lease_ms / 8, 250, 1000);
  t.fence_margin_ms = std::max<int64_t>(lease_ms / 10, 200);
  return t;
}

}  // namespace aftershock
