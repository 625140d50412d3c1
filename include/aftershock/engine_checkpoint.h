// Engine checkpoints: the whole per-symbol state of an IngestCore and its
// EngineServices (refit coordinator included) in one checkpoint file
// (checkpoint_file.h), and the configuration check of a restore (PRODUCT.md
// C10, §6).
//
// Sections:
//   "CONF"  the canonical text of each state-relevant configuration section
//           (StateRelevantConfig), so a refused restore names what changed
//   "CORE"  IngestCore::SaveState
//   "SERV"  EngineServices::SaveState (absent when no services are attached)
//   others  the caller's (e.g. the replay driver's clock sweep, "DRIV")
// The header's configuration fingerprint is Fingerprint64 of the "CONF"
// payload.
//
// What enters the fingerprint: every setting that changes what the saved
// state means or how it is laid out ([bars]; [model] spec, presample and
// params; [warmup]; [outputs] horizons, risk levels and return units;
// [refit] on/off, schedule, window, min_bars, apply lag, jitter and group
// models; [seasonality] as resolved for the bars). Everything else (alert
// thresholds, [refit] gate thresholds, reidentify_every, workers, queue
// capacity, [outputs] annualization and sizing, endpoints, limits) may change
// between the save and the restore: the state stays usable and the new values
// apply from the next bar.
//
// Writing is split so that a live engine never waits for the disk:
//   * replay and tools: CaptureEngineState (the core's thread: encodes the
//     whole state) and SerializeEngineSnapshot + WriteFileAtomically (any
//     thread);
//   * a live engine (checkpointer.h): an EngineCapture kept from one
//     checkpoint to the next. EngineCapture::Capture on the ingest thread
//     copies only what the components' captures need (state_capture.h: flat
//     per-symbol values, pointers to immutable models, the returns pushed
//     since the previous capture); EngineCapture::Serialize encodes and
//     builds the file on the writer thread. The file is byte for byte the one
//     CaptureEngineState + SerializeEngineSnapshot would give at the same
//     point (tests/streaming/engine_checkpoint_test.cc checks it).
//
// Thread-safety: CaptureEngineState, EngineCapture::Capture and
// RestoreEngineState on the core's thread; EngineCapture::Serialize on any
// one thread while no Capture into the same EngineCapture runs; the others
// are pure functions of their arguments.
#ifndef AFTERSHOCK_ENGINE_CHECKPOINT_H_
#define AFTERSHOCK_ENGINE_CHECKPOINT_H_

#include <cstdint>
#include <memory>
#include <string>
#include <utility>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/state_capture.h"

namespace aftershock {

inline constexpr uint32_t kConfigSectionTag = SectionTag("CONF");
inline constexpr uint32_t kCoreSectionTag = SectionTag("CORE");
inline constexpr uint32_t kServicesSectionTag = SectionTag("SERV");
// The engine version written into checkpoints (at most 15 bytes).
inline constexpr char kCheckpointEngineVersion[] = "aftershock 0.1";

// One state-relevant configuration section: its name (e.g. "[bars]") and a
// canonical text (one "key = value" line per setting, numbers with 17
// significant digits), equal for configurations that mean the same state.
struct ConfigStateSection {
  std::string name;
  std::string text;
};
std::vector<ConfigStateSection> StateRelevantConfig(const EngineConfig& config);
// Fingerprint64 of the encoded StateRelevantConfig (the "CONF" payload).
uint64_t ConfigFingerprint(const EngineConfig& config);

// The engine's state encoded on the ingest thread, ready to be serialized
// anywhere. Plain value.
struct EngineSnapshot {
  std::string core;      // IngestCore::SaveState
  std::string services;  // EngineServices::SaveState; empty when none attached
  bool has_services = false;
  uint64_t symbols = 0;
  int64_t created_ns = 0;  // wall clock at the capture, ns since the epoch
  std::vector<std::pair<uint32_t, std::string>> extra;  // the caller's sections
};

// Encodes the state of `core` and `services` (may be null). Ingest thread,
// between bars.
EngineSnapshot CaptureEngineState(const IngestCore& core, const EngineServices* services,
                                  int64_t created_ns);
// The checkpoint file's bytes for a snapshot under `config`.
absl::StatusOr<std::string> SerializeEngineSnapshot(const EngineSnapshot& snapshot,
                                                    const EngineConfig& config);

// A live engine's state captured for a checkpoint, refilled in place at each
// checkpoint (state_capture.h), so that a capture costs the ingest thread a
// copy of the flat per-symbol values and the returns pushed since the
// previous capture, not an encoding of every window. Owns the components'
// captures, which hold shared references to the immutable models and
// profiles in force at the capture.
class EngineCapture {
 public:
  // REQUIRES: core non-null; services may be null (no "SERV" section); both
  // outlive the capture and are the ones it is always captured from.
  EngineCapture(const IngestCore* core, const EngineServices* services);
  EngineCapture(const EngineCapture&) = delete;
  EngineCapture& operator=(const EngineCapture&) = delete;

  // Brings the capture up to the engine's state now, in one pause: a
  // consistent cut (every symbol and the feed-wide state at this gap), as
  // replay's --checkpoint and a caller that needs one input position (e.g. a
  // stream sequence) require. `created_ns` is the wall clock stamped in the
  // header. Ingest thread, between batches. Abandons a capture in slices.
  void Capture(int64_t created_ns);

  // A capture spread over several gaps between batches, so that the ingest
  // thread pauses for a slice of the symbols at a time instead of all of
  // them (a live engine's periodic checkpoint: checkpointer.h).
  // BeginSlices plans the symbols known now (`created_ns`, the wall clock at
  // the start, is stamped in the header: the state is at most that old).
  // Each CaptureSlice (one per gap) captures the next `max_symbols` of them
  // (at least 1), each symbol's whole state (core, services, refit
  // coordinator) in that gap; the call that reaches the last one also
  // captures the symbols that joined meanwhile and the feed-wide state
  // (engine counters, alert engines, pools, refit counters and groups) and
  // returns true: the capture is complete and Serialize may run. The file
  // then holds each symbol exactly as it was at its own gap (its tick count
  // and last tick time say how far its input goes), not one cut across the
  // symbols. Should the parts not be restorable together
  // (StateCapture::Restorable), the completing call captures everything
  // again at once (one whole pause; rare). Ingest thread, between batches.
  // REQUIRES (CaptureSlice): BeginSlices since the last completion.
  void BeginSlices(int64_t created_ns);
  bool CaptureSlice(int max_symbols);
  // A capture in slices was begun and is not complete yet.
  bool slicing() const { return slicing_; }
  // The completing CaptureSlice had to capture everything at once (count).
  uint64_t slice_fallbacks() const { return slice_fallbacks_; }
  // The checkpoint file's bytes of the last Capture under `config` (the same
  // bytes SerializeEngineSnapshot(CaptureEngineState(...)) gives at that
  // point), written into *file (content replaced, capacity kept);
  // FailedPrecondition while a capture in slices is incomplete. The
  // sections are encoded straight into *file (SerializeCheckpointEncoded),
  // so a periodic writer that keeps *file allocates nothing once the size
  // settled and copies no payload twice.
  // Any one thread, never concurrently with Capture or another Serialize.
  absl::Status Serialize(const EngineConfig& config, std::string* file);

  // Bytes copied out of the live state by the last Capture, or by the
  // slices of the capture in slices so far (StateCapture::copied_bytes):
  // the snapshot's memory traffic on the ingest thread.
  uint64_t copied_bytes() const { return CopiedTotal() - copied_at_start_; }

  uint64_t symbols() const { return symbols_; }       // at the last Capture
  int64_t created_ns() const { return created_ns_; }  // of the last Capture

 private:
  const IngestCore* const core_;
  const EngineServices* const services_;
  const std::unique_ptr<StateCapture> core_capture_;
  const std::unique_ptr<StateCapture> services_capture_;  // null without services
  // Capture without touching the snapshot's start (copied_at_start_).
  void CaptureAll(int64_t created_ns);
  uint64_t CopiedTotal() const;
  uint64_t copied_at_start_ = 0;  // CopiedTotal() when the snapshot began
  uint64_t symbols_ = 0;
  int64_t created_ns_ = 0;
  // Capture in slices: the symbols [0, slice_end_) planned at BeginSlices,
  // captured up to slice_next_.
  bool slicing_ = false;
  int slice_next_ = 0;
  int slice_end_ = 0;
  uint64_t slice_fallbacks_ = 0;
};

// OK when the checkpoint was written under a configuration with the same
// state-relevant settings; FailedPrecondition naming each section that
// differs (and its first differing line) otherwise.
absl::Status CheckCheckpointConfig(const Checkpoint& checkpoint, const EngineConfig& config);

// Restores a checkpoint into a fresh core (no symbols) and fresh services
// attached to it (may be null when the checkpoint has none): the
// configuration check, then IngestCore::RestoreState, then
// EngineServices::RestoreState. On error the core and services are in an
// unspecified state: discard both (never a partial restore in use).
absl::Status RestoreEngineState(const Checkpoint& checkpoint, const EngineConfig& config,
                                IngestCore* core, EngineServices* services);

}  // namespace aftershock

#endif  // AFTERSHOCK_ENGINE_CHECKPOINT_H_
