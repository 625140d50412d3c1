#include "aftershock/partition_checkpoints.h"

#include <algorithm>
#include <mutex>
#include <utility>
#include <vector>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "aftershock/checkpoint_file.h"
#include "io/nats_client.h"

namespace aftershock {
namespace {

using nats_internal::KvStorePtr;
using nats_internal::NatsSession;
using nats_internal::RetryOnTimeout;
using nats_internal::ToStatus;

// First line of a manifest; the format's name and version.
constexpr char kManifestMagic[] = "aftershock-partition-checkpoint 1";

std::string ManifestKey(int p) { return absl::StrCat("p.", p); }
std::string ChunkKey(int p, int slot, size_t i) { return absl::StrCat("c.", p, ".", slot, ".", i); }

struct Manifest {
  bool present = false;
  uint64_t revision = 0;
  int64_t written_ns = 0;
  int slot = 0;
  uint64_t sequence = 0;
  uint64_t bytes = 0;
  uint64_t chunks = 0;
  uint32_t crc = 0;
};

std::string EncodeManifest(const Manifest& m) {
  return absl::StrCat(kManifestMagic, "\nslot=", m.slot, "\nsequence=", m.sequence,
                      "\nbytes=", m.bytes, "\nchunks=", m.chunks, "\ncrc32c=", m.crc, "\n");
}

absl::Status DecodeManifest(absl::string_view text, Manifest* m) {
  std::vector<absl::string_view> lines = absl::StrSplit(text, '\n', absl::SkipEmpty());
  if (lines.empty() || lines[0] != kManifestMagic) {
    return absl::DataLossError("checkpoint manifest of another format");
  }
  int seen = 0;
  for (size_t i = 1; i < lines.size(); ++i) {
    const std::pair<absl::string_view, absl::string_view> kv =
        absl::StrSplit(lines[i], absl::MaxSplits('=', 1));
    uint64_t v = 0;
    if (!absl::SimpleAtoi(kv.second, &v)) {
      return absl::DataLossError(absl::StrCat("checkpoint manifest: bad line '", lines[i], "'"));
    }
    if (kv.first == "slot" && v <= 1) {
      m->slot = static_cast<int>(v);
    } else if (kv.first == "sequence") {
      m->sequence = v;
    } else if (kv.first == "bytes") {
      m->bytes = v;
    } else if (kv.first == "chunks") {
      m->chunks = v;
    } else if (kv.first == "crc32c" && v <= 0xffffffffu) {
      m->crc = static_cast<uint32_t>(v);
    } else {
      return absl::DataLossError(absl::StrCat("checkpoint manifest: bad line '", lines[i], "'"));
    }
    ++seen;
  }
  const uint64_t want_chunks = (m->bytes + kCheckpointChunkBytes - 1) / kCheckpointChunkBytes;
  if (seen != 5 || m->chunks != want_chunks) {
    return absl::DataLossError("checkpoint manifest incomplete or inconsistent");
  }
  return absl::OkStatus();
}

class StoreImpl : public PartitionCheckpointStore {
 public:
  explicit StoreImpl(NatsConfig config) : config_(std::move(config)) {}
  ~StoreImpl() override { kv_.reset(); }  // before the session it belongs to

  absl::Status Init(const std::string& name, bool create) {
    auto session = NatsSession::Connect(config_, name);
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
    kvStore* kv = nullptr;
    natsStatus s = RetryOnTimeout(
        [&] { return js_KeyValue(&kv, session_->js(), config_.checkpoint_bucket.c_str()); });
    if (s == NATS_NOT_FOUND && create) {
      kvConfig kc;
      kvConfig_Init(&kc);
      kc.Bucket = config_.checkpoint_bucket.c_str();
      kc.History = 1;
      kc.StorageType = js_FileStorage;
      kc.Replicas = config_.replicas;
      s = RetryOnTimeout([&] { return js_CreateKeyValue(&kv, session_->js(), &kc); });
      if (s != NATS_OK) {
        // Created by another instance at the same moment: open that one.
        kv = nullptr;
        s = RetryOnTimeout(
            [&] { return js_KeyValue(&kv, session_->js(), config_.checkpoint_bucket.c_str()); });
      }
    }
    if (s != NATS_OK) {
      return ToStatus(
          s, absl::StrCat("cannot open key-value bucket '", config_.checkpoint_bucket, "'"));
    }
    kv_.reset(kv);
    return absl::OkStatus();
  }

  absl::StatusOr<StoredCheckpoint> Peek(int partition) override {
    std::lock_guard<std::mutex> l(mu_);
    auto m = ReadManifest(partition);
    if (!m.ok()) return m.status();
    if (!m->present) return NoCheckpoint(partition);
    StoredCheckpoint c;
    c.sequence = m->sequence;
    c.written_ns = m->written_ns;
    return c;
  }

  absl::StatusOr<StoredCheckpoint> Get(int partition) override {
    std::lock_guard<std::mutex> l(mu_);
    for (int attempt = 0; attempt < 3; ++attempt) {
      auto m = ReadManifest(partition);
      if (!m.ok()) return m.status();
      if (!m->present) return NoCheckpoint(partition);
      StoredCheckpoint c;
      c.sequence = m->sequence;
      c.written_ns = m->written_ns;
      c.bytes.reserve(m->bytes);
      bool complete = true;
      for (uint64_t i = 0; i < m->chunks && complete; ++i) {
        kvEntry* e = nullptr;
        const std::string key = ChunkKey(partition, m->slot, i);
        const natsStatus s = kvStore_Get(&e, kv_.get(), key.c_str());
        if (s == NATS_NOT_FOUND) {
          complete = false;
          break;
        }
        if (s != NATS_OK) return ToStatus(s, absl::StrCat("cannot read checkpoint chunk ", key));
        c.bytes.append(static_cast<const char*>(kvEntry_Value(e)),
                       static_cast<size_t>(kvEntry_ValueLen(e)));
        kvEntry_Destroy(e);
      }
      if (complete && c.bytes.size() == m->bytes && Crc32c(c.bytes) == m->crc) return c;
      // A writer refilled the slot under us (or the chunks are damaged): again.
    }
    return absl::DataLossError(absl::StrCat("the checkpoint of partition ", partition,
                                            " in bucket '", config_.checkpoint_bucket,
                                            "' does not match its manifest"));
  }

  absl::StatusOr<CheckpointPut> Put(int partition, uint64_t sequence,
                                    absl::string_view bytes) override {
    std::lock_guard<std::mutex> l(mu_);
    for (int attempt = 0; attempt < 3; ++attempt) {
      auto old = ReadManifest(partition);
      if (!old.ok()) return old.status();
      if (old->present && old->sequence >= sequence) {
        return CheckpointPut{false, old->sequence};
      }
      Manifest m;
      m.slot = old->present ? 1 - old->slot : 0;
      m.sequence = sequence;
      m.bytes = bytes.size();
      m.chunks = (bytes.size() + kCheckpointChunkBytes - 1) / kCheckpointChunkBytes;
      m.crc = Crc32c(bytes);
      for (uint64_t i = 0; i < m.chunks; ++i) {
        const absl::string_view chunk =
            bytes.substr(i * kCheckpointChunkBytes, kCheckpointChunkBytes);
        const std::string key = ChunkKey(partition, m.slot, i);
        uint64_t rev = 0;
        const natsStatus s =
            kvStore_Put(&rev, kv_.get(), key.c_str(), chunk.data(), static_cast<int>(chunk.size()));
        if (s != NATS_OK) return ToStatus(s, absl::StrCat("cannot write checkpoint chunk ", key));
      }
      const std::string text = EncodeManifest(m);
      const std::string key = ManifestKey(partition);
      uint64_t rev = 0;
      const natsStatus s = old->present
                               ? kvStore_Update(&rev, kv_.get(), key.c_str(), text.data(),
                                                static_cast<int>(text.size()), old->revision)
                               : kvStore_Create(&rev, kv_.get(), key.c_str(), text.data(),
                                                static_cast<int>(text.size()));
      if (s == NATS_OK) return CheckpointPut{true, sequence};
      const absl::Status st = ToStatus(s, absl::StrCat("cannot write checkpoint manifest ", key));
      // Another writer switched the manifest first: look again (its sequence
      // may already cover ours).
      if (!absl::IsFailedPrecondition(st) && !absl::IsAlreadyExists(st)) return st;
    }
    return absl::AbortedError(absl::StrCat("the checkpoint manifest of partition ", partition,
                                           " keeps changing (another writer)"));
  }

 private:
  absl::Status NoCheckpoint(int partition) const {
    return absl::NotFoundError(absl::StrCat("no checkpoint of partition ", partition,
                                            " in bucket '", config_.checkpoint_bucket, "'"));
  }

  absl::StatusOr<Manifest> ReadManifest(int partition) {
    Manifest m;
    kvEntry* e = nullptr;
    const std::string key = ManifestKey(partition);
    const natsStatus s = kvStore_Get(&e, kv_.get(), key.c_str());
    if (s == NATS_NOT_FOUND) return m;
    if (s != NATS_OK) return ToStatus(s, absl::StrCat("cannot read checkpoint manifest ", key));
    const std::string text(static_cast<const char*>(kvEntry_Value(e)),
                           static_cast<size_t>(kvEntry_ValueLen(e)));
    m.revision = kvEntry_Revision(e);
    m.written_ns = kvEntry_Created(e);
    kvEntry_Destroy(e);
    if (absl::Status st = DecodeManifest(text, &m); !st.ok()) {
      return absl::Status(st.code(), absl::StrCat(st.message(), " (key ", key, " of bucket '",
                                                  config_.checkpoint_bucket, "')"));
    }
    m.present = true;
    return m;
  }

  const NatsConfig config_;
  std::mutex mu_;  // serializes the calls
  std::unique_ptr<NatsSession> session_;
  KvStorePtr kv_;
};

}  // namespace

absl::StatusOr<std::unique_ptr<PartitionCheckpointStore>> PartitionCheckpointStore::Open(
    const NatsConfig& config, const std::string& name, bool create) {
  auto store = std::make_unique<StoreImpl>(config);
  if (absl::Status s = store->Init(name, create); !s.ok()) return s;
  return std::unique_ptr<PartitionCheckpointStore>(std::move(store));
}

}  // namespace aftershock
