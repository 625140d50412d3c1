// PartitionCheckpointStore: each stream partition's checkpoint, kept in a
// JetStream key-value bucket ([nats] checkpoint_bucket) together with the
// stream sequence it covers, so whichever instance holds the partition next
// restores it and reads the stream from the following sequence.
//
// The payload is an engine checkpoint file (checkpoint_file.h,
// engine_checkpoint.h) of the partition's symbols, often larger than one
// NATS message (1 MiB by default), so it is cut into chunks:
//   c.<p>.<slot>.<i>  chunk i (kCheckpointChunkBytes each, the last shorter)
//                      of partition p's checkpoint in slot 0 or 1
//   p.<p>             the manifest: which slot, the stream sequence covered,
//                      byte count, chunk count and CRC-32C of the whole payload
// A write fills the slot the manifest does NOT point at, then switches the
// manifest with compare-and-set on the revision it read, so a reader never
// sees a half-written checkpoint as current and the bucket holds at most two
// checkpoints per partition (keys are reused; history 1). A reader that
// finds the chunks changed under it (CRC mismatch: a writer refilled the
// slot) reads the manifest again.
// Sequences only move forward: a write whose sequence is not above the stored
// one is skipped (Put returns OK, `written` false). Two writers of one
// partition (an instance that lost its lease and one that took it over) thus
// never replace a later cut by an earlier one; either cut is a valid state of
// the partition, because the state after sequence S does not depend on who
// filtered it.
//
// Thread-safety: one store is used by one thread at a time (calls are
// serialized by an internal mutex); several stores (processes) may share a
// bucket.
#ifndef AFTERSHOCK_PARTITION_CHECKPOINTS_H_
#define AFTERSHOCK_PARTITION_CHECKPOINTS_H_

#include <cstdint>
#include <memory>
#include <string>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/engine_config.h"

namespace aftershock {

// Bytes per chunk: well under the broker's default 1 MiB message limit.
inline constexpr size_t kCheckpointChunkBytes = 256 * 1024;

// A partition's stored checkpoint. Plain value.
struct StoredCheckpoint {
  uint64_t sequence = 0;   // last stream sequence whose tick the state includes
  std::string bytes;       // the checkpoint file's bytes
  int64_t written_ns = 0;  // when the manifest was written (broker time, ns since epoch)
};

// What a Put did. Plain value.
struct CheckpointPut {
  bool written = false;          // false: the stored sequence was already >= this one
  uint64_t stored_sequence = 0;  // the sequence stored after the call
};

class PartitionCheckpointStore {
 public:
  // Opens the bucket, creating it (history 1, no expiry, file storage) when
  // absent and `create` is true; NotFound when absent and `create` is false.
  static absl::StatusOr<std::unique_ptr<PartitionCheckpointStore>> Open(const NatsConfig& config,
                                                                        const std::string& name,
                                                                        bool create);
  virtual ~PartitionCheckpointStore() = default;

  // The partition's checkpoint; NotFound when none was stored. DataLoss when
  // the chunks do not match the manifest after three attempts.
  // REQUIRES: 0 <= partition < [nats] partitions.
  virtual absl::StatusOr<StoredCheckpoint> Get(int partition) = 0;
  // The manifest only (sequence and time; bytes left empty); NotFound when none.
  virtual absl::StatusOr<StoredCheckpoint> Peek(int partition) = 0;
  // Stores `bytes` as the checkpoint covering the stream up to `sequence`
  // (see above for the forward-only rule). Unavailable when the broker cannot
  // be reached.
  virtual absl::StatusOr<CheckpointPut> Put(int partition, uint64_t sequence,
                                            absl::string_view bytes) = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_PARTITION_CHECKPOINTS_H_
