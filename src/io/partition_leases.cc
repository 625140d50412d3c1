#include "aftershock/partition_leases.h"

#include <unistd.h>

#include <algorithm>
#include <map>
#include <utility>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "io/nats_client.h"

namespace aftershock {
namespace {

using nats_internal::KvStorePtr;
using nats_internal::NatsSession;
using nats_internal::ToStatus;

constexpr char kAlive[] = "alive";

std::string PartitionKey(int p) { return absl::StrCat("p.", p); }
std::string InstanceKey(const std::string& instance) { return absl::StrCat("i.", instance); }

// One key as read: absent, or value and revision.
struct KeyState {
  bool present = false;
  std::string value;
  uint64_t revision = 0;
  int64_t created_ns = 0;
};

absl::StatusOr<KeyState> GetKey(kvStore* kv, const std::string& key) {
  kvEntry* e = nullptr;
  const natsStatus s = kvStore_Get(&e, kv, key.c_str());
  KeyState k;
  if (s == NATS_NOT_FOUND) return k;  // absent, expired or deleted
  if (s != NATS_OK) return ToStatus(s, absl::StrCat("cannot read lease key ", key));
  k.present = true;
  k.value.assign(static_cast<const char*>(kvEntry_Value(e)), static_cast<size_t>(kvEntry_ValueLen(e)));
  k.revision = kvEntry_Revision(e);
  k.created_ns = kvEntry_Created(e);
  kvEntry_Destroy(e);
  return k;
}

// Sorted names of the live instances (i.* keys).
absl::StatusOr<std::vector<std::string>> LiveInstances(kvStore* kv) {
  kvKeysList list;
  std::vector<std::string> out;
  const natsStatus s = kvStore_Keys(&list, kv, nullptr);
  if (s == NATS_NOT_FOUND) return out;  // an empty bucket
  if (s != NATS_OK) return ToStatus(s, "cannot list the lease bucket");
  for (int i = 0; i < list.Count; ++i) {
    const absl::string_view key = list.Keys[i];
    if (absl::StartsWith(key, "i.")) out.emplace_back(key.substr(2));
  }
  kvKeysList_Destroy(&list);
  std::sort(out.begin(), out.end());
  return out;
}

class LeasesImpl : public PartitionLeases {
 public:
  LeasesImpl(NatsConfig config, std::string instance)
      : config_(std::move(config)),
        instance_(std::move(instance)),
        held_revision_(static_cast<size_t>(config_.partitions), 0),
        last_other_owner_(static_cast<size_t>(config_.partitions)) {}

  absl::Status Init() {
    auto session = NatsSession::Connect(config_, absl::StrCat("aftershock-leases-", instance_));
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
    auto kv = nats_internal::OpenLeaseBucket(session_.get(), config_, /*create=*/true);
    if (!kv.ok()) return kv.status();
    kv_ = *std::move(kv);
    return absl::OkStatus();
  }

  ~LeasesImpl() override {
    kv_.reset();  // before the session it belongs to
  }

  absl::StatusOr<LeaseRound> Round() override {
    LeaseRound r;
    ++stats_.rounds;
    uint64_t rev = 0;
    natsStatus s = kvStore_PutString(&rev, kv_.get(), InstanceKey(instance_).c_str(), kAlive);
    if (s != NATS_OK) return ToStatus(s, "cannot write the instance heartbeat");
    auto live = LiveInstances(kv_.get());
    if (!live.ok()) return live.status();
    if (std::find(live->begin(), live->end(), instance_) == live->end()) {
      live->push_back(instance_);  // our own write is not visible yet
      std::sort(live->begin(), live->end());
    }
    const int n = config_.partitions;
    const int L = static_cast<int>(live->size());
    const int rank = static_cast<int>(std::find(live->begin(), live->end(), instance_) - live->begin());
    r.live_instances = L;
    r.share = n / L + (rank < n % L ? 1 : 0);

    // Read every lease; renew ours.
    std::vector<KeyState> keys(static_cast<size_t>(n));
    for (int p = 0; p < n; ++p) {
      auto k = GetKey(kv_.get(), PartitionKey(p));
      if (!k.ok()) return k.status();
      keys[p] = *std::move(k);
      const bool held_before = held_revision_[p] != 0;
      if (keys[p].present && keys[p].value == instance_) {
        uint64_t next = 0;
        s = kvStore_UpdateString(&next, kv_.get(), PartitionKey(p).c_str(), instance_.c_str(),
                                 keys[p].revision);
        if (s == NATS_OK) {
          held_revision_[p] = next;
          ++stats_.renewals;
          continue;
        }
        const absl::Status st = ToStatus(s, absl::StrCat("cannot renew lease ", PartitionKey(p)));
        if (!absl::IsFailedPrecondition(st)) return st;
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

    // Claim free partitions up to the share, starting at this instance's
    // slice of the ring so that instances starting together rarely collide.
    const int start = L > 0 ? rank * n / L : 0;
    for (int i = 0; i < n && owned < r.share; ++i) {
      const int p = (start + i) % n;
      if (held_revision_[p] != 0) continue;
      const KeyState& k = keys[p];
      const bool free = !k.present || k.value.empty();
      if (!free) continue;
      uint64_t next = 0;
      s = k.present ? kvStore_UpdateString(&next, kv_.get(), PartitionKey(p).c_str(),
                                           instance_.c_str(), k.revision)
                    : kvStore_CreateString(&next, kv_.get(), PartitionKey(p).c_str(),
                                           instance_.c_str());
      if (s != NATS_OK) {
        const absl::Status st = ToStatus(s, absl::StrCat("cannot claim lease ", PartitionKey(p)));
        if (absl::IsFailedPrecondition(st)) continue;  // another instance was first
        return st;
      }
      held_revision_[p] = next;
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

  absl::Status Release(absl::Span<const int> partitions) override {
    absl::Status first;
    if (natsConnection_Status(session_->conn()) != NATS_CONN_STATUS_CONNECTED) {
      // Nothing can be written; the leases expire after lease_seconds.
      for (int p : partitions) {
        if (p >= 0 && p < config_.partitions) held_revision_[p] = 0;
      }
      return absl::UnavailableError("not connected to NATS: the leases expire instead");
    }
    for (int p : partitions) {
      if (p < 0 || p >= config_.partitions || held_revision_[p] == 0) continue;
      uint64_t next = 0;
      const natsStatus s = kvStore_UpdateString(&next, kv_.get(), PartitionKey(p).c_str(), "",
                                                held_revision_[p]);
      held_revision_[p] = 0;
      if (s == NATS_OK) {
        ++stats_.releases;
      } else {
        const absl::Status st = ToStatus(s, absl::StrCat("cannot release lease ", PartitionKey(p)));
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
    const natsStatus s = kvStore_Delete(kv_.get(), InstanceKey(instance_).c_str());
    if (s != NATS_OK && st.ok()) st = ToStatus(s, "cannot delete the instance heartbeat");
    return st;
  }

  LeaseStats stats() const override { return stats_; }
  const std::string& instance() const override { return instance_; }

 private:
  const NatsConfig config_;
  const std::string instance_;
  std::unique_ptr<NatsSession> session_;
  KvStorePtr kv_;
  std::vector<uint64_t> held_revision_;        // per partition; 0 = not held
  std::vector<std::string> last_other_owner_;  // per partition: last other holder seen
  LeaseStats stats_;
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
  ClusterAssignment a;
  auto live = LiveInstances(kv->get());
  if (!live.ok()) return live.status();
  a.instances = *std::move(live);
  for (int p = 0; p < config.partitions; ++p) {
    auto k = GetKey(kv->get(), PartitionKey(p));
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

}  // namespace aftershock
