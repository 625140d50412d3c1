// Checkpointer: periodic crash-consistent checkpoints of a live engine
// (PRODUCT.md C10, §6; engine_checkpoint.h for what a checkpoint holds).
//
// On the ingest thread, at a clock tick (BarObserver::OnClock: between
// batches, at a bar boundary), when `every_seconds` of wall clock have passed
// since the last snapshot, the engine's state is captured (in one pause, or
// with `slice_symbols` in slices of that many symbols, one slice per gap
// between batches, BarObserver::OnBatchEnd or OnClock, at least
// `slice_spacing_seconds` apart) into the
// checkpointer's EngineCapture (engine_checkpoint.h, state_capture.h: the
// only part that costs the ingest thread anything; it copies the flat
// per-symbol values and the returns pushed since the previous capture,
// holds the models in force by pointer, and allocates only for symbols and
// refit jobs new since then) and handed to a background writer thread, which
// encodes it, builds the file (checksums) and writes it crash-consistently
// (WriteFileAtomically). One write at a time: a snapshot due while a write is
// in flight is skipped and counted. WriteNow() (shutdown) waits for the write
// in flight, then captures and writes synchronously.
//
// Metrics (MetricsSource): aftershock_checkpoint_writes_total,
// _failures_total, _skipped_total, _last_size_bytes, _last_write_seconds
// (encode, checksums and disk) and _age_seconds (since the last successful
// write's snapshot; -1 before one), _last_capture_seconds (the longest pause
// the last snapshot cost the ingest thread), _last_capture_slices (the
// pauses it was taken in), _last_capture_cpu_seconds and
// _last_capture_bytes (the ingest thread's CPU time and bytes copied for it,
// all slices) and _last_writer_cpu_seconds (the writer's CPU time for the
// last file: encode, checksums, write, fsyncs).
// /health (MetricsSource::AppendHealthJson) adds
//   "restored":{"symbols":N,"age_seconds":X,"file":"..."} (null: a fresh start)
//   "checkpoint":{"file":"...","writes":N,"failures":N,"age_seconds":X}
// where checkpoint.age_seconds is the age of the state in the last file
// written (null before the first) and restored.age_seconds the age of the
// restored file's state when it was read.
//
// Thread-safety: OnClock, WriteNow, SetRestored, AppendPrometheus and
// AppendHealthJson on the ingest thread (or before the engine runs / after it
// stopped); stats() and last_error() from any thread. The capture is handed
// between the ingest thread and the writer under a mutex with a "busy" token
// (checkpointer.cc): whoever holds the token is the only thread touching the
// capture. The core and the services must outlive the checkpointer; the
// destructor waits for the write in flight and joins the writer.
#ifndef AFTERSHOCK_CHECKPOINTER_H_
#define AFTERSHOCK_CHECKPOINTER_H_

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <thread>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/clock.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"

namespace aftershock {

struct CheckpointerOptions {
  // The checkpoint file (REQUIRED, non-empty); "<path>.tmp" is the temporary.
  std::string path;
  // Wall-clock seconds between snapshots; 0 = only WriteNow(). Default 60.
  double every_seconds = 60;
  // Symbols captured per gap between batches: a periodic snapshot is taken
  // in slices of this many symbols (EngineCapture::CaptureSlice), so the
  // longest pause it costs the ingest thread is about one slice's copy, and
  // the file holds each symbol at its own gap. 0 = the whole engine in one
  // pause (a consistent cut across the symbols). WriteNow always captures
  // in one pause. Default 0.
  int slice_symbols = 0;
  // Least wall-clock time between two slices of one snapshot, s, so that the
  // input queued during a slice is handled before the next. Default 0.005.
  double slice_spacing_seconds = 0.005;
  // Scheduling of the writer thread (Linux; elsewhere it has no effect).
  // false: niceness 10 (about a tenth of a contended core). true: the idle
  // class (SCHED_IDLE), which runs only on a core nothing else wants; on a
  // host saturated for longer than a period, snapshots then wait and are
  // counted as skipped. Default false: side by side on the shared 2-core
  // development host (engine_bench --checkpoint-latency) the idle class did
  // not lower the ingest p99 (README, "Checkpoints").
  bool writer_idle = false;
};

// What the engine restored from at start (for /health). Plain value.
struct CheckpointRestore {
  int symbols = 0;         // symbols restored
  double age_seconds = 0;  // age of the file's state when it was read, s
  std::string file;        // the file read
};

// Counters of the checkpoints written. Plain value.
struct CheckpointStats {
  uint64_t writes = 0;                    // files written successfully
  uint64_t failures = 0;                  // writes that failed (the old file stays)
  uint64_t skipped = 0;                   // snapshots due while a write was in flight
  uint64_t last_bytes = 0;                // size of the last file written
  double last_write_seconds = 0;          // serialize + write time of the last file
  double last_capture_seconds = 0;        // longest ingest-thread pause of the last snapshot, s
  double last_capture_total_seconds = 0;  // all its pauses together, s
  uint64_t last_capture_slices = 0;       // its pauses (1: captured at once)
  // The last snapshot's costs in CPU time and bytes (unlike the wall times
  // above, they do not grow with the host's other load; the writer's are
  // those of the last file written).
  double last_capture_cpu_seconds = 0;      // ingest-thread CPU, all its slices, s
  double last_capture_max_cpu_seconds = 0;  // ingest-thread CPU of its longest slice, s
  uint64_t last_capture_bytes = 0;          // bytes it copied on the ingest thread
  double last_encode_seconds = 0;           // writer: encode + checksums (wall), s
  double last_encode_cpu_seconds = 0;       // writer: encode + checksums (CPU), s
  double last_file_write_seconds = 0;       // writer: write() into the temporary (wall), s
  double last_sync_seconds = 0;             // writer: fsyncs and rename (wall), s
  double last_write_cpu_seconds = 0;        // writer: the file's write and syncs (CPU), s
  // Sums over the snapshots written (their mean is the cost per checkpoint).
  double capture_cpu_seconds_total = 0;   // ingest-thread CPU, s
  uint64_t capture_bytes_total = 0;       // bytes copied on the ingest thread
  double writer_cpu_seconds_total = 0;    // writer CPU: encode, checksums, write, syncs, s
  uint64_t slice_fallbacks = 0;           // snapshots in slices that had to capture at once
  int64_t last_snapshot_ns = 0;           // clock time of the last written snapshot; 0 none
};

class Checkpointer : public BarObserver, public MetricsSource {
 public:
  // Fills the capture once (the symbols known now, e.g. restored) and starts
  // the writer thread (at a low priority on Linux, `writer_idle`: it yields
  // the CPU to ingest).
  // InvalidArgument for an empty path, a negative or non-finite period, a
  // negative slice_symbols or a negative or non-finite slice spacing.
  // REQUIRES: core, clock non-null; services may be null; called on the
  // core's thread before the engine runs (or between batches).
  static absl::StatusOr<std::unique_ptr<Checkpointer>> Create(const CheckpointerOptions& options,
                                                              const EngineConfig& config,
                                                              const IngestCore* core,
                                                              const EngineServices* services,
                                                              Clock* clock);
  ~Checkpointer() override;
  Checkpointer(const Checkpointer&) = delete;
  Checkpointer& operator=(const Checkpointer&) = delete;

  // BarObserver.
  void OnBar(IngestCore*, int, const ClosedBar&, BarUpdate*) override {}
  void OnClock(IngestCore* core, int64_t now_ns) override;
  void OnBatchEnd(IngestCore* core) override;

  // Waits for the write in flight, then snapshots and writes now (shutdown).
  // The write's error, if any.
  absl::Status WriteNow();

  // Records the restore this engine started from, shown by /health (without
  // it /health says "restored":null). Before the engine runs, or on the
  // ingest thread.
  void SetRestored(const CheckpointRestore& restored) { restored_ = restored; }

  CheckpointStats stats() const;
  // The error of the last failed write ("" none).
  std::string last_error() const;

  // MetricsSource.
  void AppendPrometheus(std::string* out) const override;
  void AppendHealthJson(std::string* out) const override;

 private:
  struct Shared;  // the state shared with the writer thread (checkpointer.cc)

  Checkpointer(const CheckpointerOptions& options, const EngineConfig& config,
               const IngestCore* core, const EngineServices* services, Clock* clock);
  void WriterLoop();
  // Encodes the capture and writes the file; updates the stats. Called by the
  // holder of the busy token (the writer, or WriteNow).
  absl::Status Write();

  // ---- constant after construction ----
  const CheckpointerOptions options_;
  const EngineConfig config_;
  Clock* const clock_;
  const int64_t period_ns_;
  const int64_t slice_spacing_ns_;
  // The capture, refilled at each snapshot. Not guarded by a mutex: used only
  // by the holder of Shared::busy (see checkpointer.cc).
  const std::unique_ptr<EngineCapture> capture_;
  std::string file_;  // the file's bytes, reused; likewise the token holder's only
  const std::unique_ptr<Shared> shared_;
  // Captures the next slice of a snapshot in slices; hands the capture to
  // the writer once it is complete. Ingest thread, holding the token.
  void CaptureNextSlice();
  // Hands the complete capture to the writer with its pause statistics.
  void Queue();

  // ---- ingest thread ----
  int64_t next_due_ns_ = 0;
  // The snapshot being captured in slices (capture_->slicing()).
  int64_t last_slice_ns_ = 0;       // clock time of its last slice
  double slice_max_seconds_ = 0;    // its longest pause so far
  double slice_total_seconds_ = 0;  // its pauses so far
  double slice_max_cpu_seconds_ = 0;    // its longest slice's thread CPU time so far
  double slice_total_cpu_seconds_ = 0;  // its slices' thread CPU time so far
  uint64_t slices_ = 0;             // its slices so far
  std::optional<CheckpointRestore> restored_;
  // ---- the writer (last: started after everything above) ----
  std::thread writer_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_CHECKPOINTER_H_
