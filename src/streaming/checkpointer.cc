#include "aftershock/checkpointer.h"

#include <sched.h>
#include <sys/resource.h>
#include <sys/syscall.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <utility>

#include "absl/strings/str_cat.h"
#include "aftershock/checkpoint_file.h"
#include "refit/sync.h"

namespace aftershock {
namespace {

// Niceness of the writer thread (Linux): 10 gives it about a tenth of the
// ingest thread's share of a contended core (CFS weights 110 vs 1024).
constexpr int kWriterNice = 10;

// `text` as a JSON string literal (quotes, backslashes and control bytes escaped).
std::string JsonString(absl::string_view text) {
  std::string out = "\"";
  for (const char c : text) {
    const auto u = static_cast<unsigned char>(c);
    if (c == '"' || c == '\\') {
      out.push_back('\\');
      out.push_back(c);
    } else if (u < 0x20) {
      static constexpr char kHex[] = "0123456789abcdef";
      absl::StrAppend(&out, "\\u00", std::string(1, kHex[u >> 4]), std::string(1, kHex[u & 15]));
    } else {
      out.push_back(c);
    }
  }
  out.push_back('"');
  return out;
}

}  // namespace

// The hand-off between the ingest thread and the writer thread.
//
// Protocol (the "busy token"): `busy` is true from the moment a snapshot is
// taken until its file is written. The ingest thread takes the token (busy
// false -> true, under mu) BEFORE it refills the capture, and only then; the
// writer returns it (busy = false, under mu) only AFTER it finished reading
// the capture. So exactly one thread uses Checkpointer::capture_ at a time,
// and the mutex orders the refill before the encoding and the encoding before
// the next refill (each side's accesses happen-before the other's through
// the lock/unlock pairs on mu).
struct Checkpointer::Shared {
  refit_internal::Mutex mu;
  std::condition_variable cv;               // signalled on queued and on busy -> false
  bool queued ABSL_GUARDED_BY(mu) = false;  // a refilled capture waits for the writer
  bool busy ABSL_GUARDED_BY(mu) = false;    // the capture is taken (see above)
  bool stop ABSL_GUARDED_BY(mu) = false;
  CheckpointStats stats ABSL_GUARDED_BY(mu);
  std::string last_error ABSL_GUARDED_BY(mu);
};

absl::StatusOr<std::unique_ptr<Checkpointer>> Checkpointer::Create(
    const CheckpointerOptions& options, const EngineConfig& config, const IngestCore* core,
    const EngineServices* services, Clock* clock) {
  if (options.path.empty()) return absl::InvalidArgumentError("[checkpoint] path is empty");
  if (options.slice_symbols < 0 || !(options.slice_spacing_seconds >= 0) ||
      !std::isfinite(options.slice_spacing_seconds)) {
    return absl::InvalidArgumentError(
        absl::StrCat("checkpoint slices need slice_symbols >= 0 and a finite spacing >= 0, got ",
                     options.slice_symbols, " and ", options.slice_spacing_seconds));
  }
  if (!(options.every_seconds >= 0) || !std::isfinite(options.every_seconds)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "[checkpoint] every_seconds must be a finite number >= 0, got ", options.every_seconds));
  }
  return std::unique_ptr<Checkpointer>(new Checkpointer(options, config, core, services, clock));
}

Checkpointer::Checkpointer(const CheckpointerOptions& options, const EngineConfig& config,
                           const IngestCore* core, const EngineServices* services, Clock* clock)
    : options_(options),
      config_(config),
      clock_(clock),
      period_ns_(static_cast<int64_t>(options.every_seconds * 1e9)),
      slice_spacing_ns_(static_cast<int64_t>(options.slice_spacing_seconds * 1e9)),
      capture_(std::make_unique<EngineCapture>(core, services)),
      shared_(std::make_unique<Shared>()) {
  next_due_ns_ = period_ns_ > 0 ? clock_->NowNs() + period_ns_ : 0;
  // Filled once now (before the engine runs): the records of the symbols
  // already known (e.g. restored) and their windows are allocated and copied
  // here, so the first live snapshot copies only what changed since.
  capture_->Capture(clock_->NowNs());
  writer_ = std::thread([this] { WriterLoop(); });
}

Checkpointer::~Checkpointer() {
  {
    refit_internal::MutexLock lock(&shared_->mu);
    shared_->stop = true;
  }
  shared_->cv.notify_all();
  writer_.join();
}

void Checkpointer::OnClock(IngestCore* /*core*/, int64_t /*now_ns*/) {
  if (capture_->slicing()) {
    OnBatchEnd(nullptr);  // a clock tick is a gap as well (an idle feed)
    return;
  }
  if (period_ns_ <= 0) return;
  const int64_t now = clock_->NowNs();
  if (now < next_due_ns_) return;
  next_due_ns_ = now + period_ns_;
  {
    refit_internal::MutexLock lock(&shared_->mu);
    if (shared_->busy) {
      ++shared_->stats.skipped;  // one write at a time: the next period tries again
      return;
    }
    shared_->busy = true;  // the token: the capture is ours until the writer returns it
  }
  // The capture is the only cost on the ingest thread: it copies what changed
  // since the previous snapshot; the encoding, the checksums and the disk are
  // the writer's.
  slice_max_seconds_ = 0;
  slice_total_seconds_ = 0;
  slice_max_cpu_seconds_ = 0;
  slice_total_cpu_seconds_ = 0;
  slices_ = 0;
  if (options_.slice_symbols > 0) {
    capture_->BeginSlices(now);
    CaptureNextSlice();
    return;
  }
  const double cpu0 = ThreadCpuSeconds();
  const auto t0 = std::chrono::steady_clock::now();
  capture_->Capture(now);
  slice_max_seconds_ = slice_total_seconds_ =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  slice_max_cpu_seconds_ = slice_total_cpu_seconds_ = ThreadCpuSeconds() - cpu0;
  slices_ = 1;
  Queue();
}

void Checkpointer::OnBatchEnd(IngestCore* /*core*/) {
  if (!capture_->slicing()) return;  // the common case: one load and a branch
  if (clock_->NowNs() - last_slice_ns_ < slice_spacing_ns_) return;
  CaptureNextSlice();
}

void Checkpointer::CaptureNextSlice() {
  const double cpu0 = ThreadCpuSeconds();
  const auto t0 = std::chrono::steady_clock::now();
  const bool done = capture_->CaptureSlice(options_.slice_symbols);
  const double pause = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  const double cpu = ThreadCpuSeconds() - cpu0;
  last_slice_ns_ = clock_->NowNs();
  slice_max_seconds_ = std::max(slice_max_seconds_, pause);
  slice_total_seconds_ += pause;
  slice_max_cpu_seconds_ = std::max(slice_max_cpu_seconds_, cpu);
  slice_total_cpu_seconds_ += cpu;
  ++slices_;
  if (done) Queue();
}

void Checkpointer::Queue() {
  {
    refit_internal::MutexLock lock(&shared_->mu);
    shared_->queued = true;
    shared_->stats.last_capture_seconds = slice_max_seconds_;
    shared_->stats.last_capture_total_seconds = slice_total_seconds_;
    shared_->stats.last_capture_slices = slices_;
    shared_->stats.last_capture_cpu_seconds = slice_total_cpu_seconds_;
    shared_->stats.last_capture_max_cpu_seconds = slice_max_cpu_seconds_;
    shared_->stats.last_capture_bytes = capture_->copied_bytes();
    shared_->stats.slice_fallbacks = capture_->slice_fallbacks();
  }
  shared_->cv.notify_all();
}

void Checkpointer::WriterLoop() {
#ifdef __linux__
  // The writer yields the CPU to the ingest thread: encoding and checksumming
  // a checkpoint of 10,000 symbols takes tens of ms of CPU each period, and on
  // a machine with few cores that time would otherwise be taken from ingest.
  // Linux applies both settings to the calling thread alone; neither needs a
  // privilege. Failure only leaves the default priority.
  const auto tid = static_cast<pid_t>(::syscall(SYS_gettid));
  bool idle = false;
  if (options_.writer_idle) {
    sched_param sp{};
    sp.sched_priority = 0;
    idle = sched_setscheduler(tid, SCHED_IDLE, &sp) == 0;
  }
  if (!idle) (void)setpriority(PRIO_PROCESS, static_cast<id_t>(tid), kWriterNice);
#endif
  for (;;) {
    {
      refit_internal::MutexLock lock(&shared_->mu);
      while (!shared_->stop && !shared_->queued) shared_->mu.Wait(&shared_->cv);
      if (!shared_->queued) return;  // stopping, nothing left to write
      shared_->queued = false;
    }
    (void)Write();  // we hold the token: the capture is ours
    {
      refit_internal::MutexLock lock(&shared_->mu);
      shared_->busy = false;  // the token goes back: the ingest thread may refill
    }
    shared_->cv.notify_all();
  }
}

absl::Status Checkpointer::Write() {
  const double cpu0 = ThreadCpuSeconds();
  const auto t0 = std::chrono::steady_clock::now();
  absl::Status st = capture_->Serialize(config_, &file_);
  const double encode_cpu = ThreadCpuSeconds() - cpu0;
  const double encode =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  WriteTimings wt;
  if (st.ok()) st = WriteFileAtomically(options_.path, file_, &wt);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  refit_internal::MutexLock lock(&shared_->mu);
  if (st.ok()) {
    CheckpointStats& s = shared_->stats;
    ++s.writes;
    s.last_bytes = file_.size();
    s.last_write_seconds = seconds;
    s.last_encode_seconds = encode;
    s.last_encode_cpu_seconds = encode_cpu;
    s.last_file_write_seconds = wt.write_seconds;
    s.last_sync_seconds = wt.sync_seconds;
    s.last_write_cpu_seconds = wt.cpu_seconds;
    s.capture_cpu_seconds_total += s.last_capture_cpu_seconds;
    s.capture_bytes_total += s.last_capture_bytes;
    s.writer_cpu_seconds_total += encode_cpu + wt.cpu_seconds;
    s.last_snapshot_ns = capture_->created_ns();
  } else {
    ++shared_->stats.failures;
    shared_->last_error = std::string(st.message());
  }
  return st;
}

absl::Status Checkpointer::WriteNow() {
  {
    refit_internal::MutexLock lock(&shared_->mu);
    // A snapshot being captured in slices holds the token already (this
    // thread's): it is abandoned for the capture at once below.
    if (!capture_->slicing()) {
      while (shared_->busy) shared_->mu.Wait(&shared_->cv);
      shared_->busy = true;
    }
  }
  const double cpu0 = ThreadCpuSeconds();
  const auto t0 = std::chrono::steady_clock::now();
  capture_->Capture(clock_->NowNs());
  const double capture =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  const double cpu = ThreadCpuSeconds() - cpu0;
  {
    refit_internal::MutexLock lock(&shared_->mu);
    shared_->stats.last_capture_seconds = capture;
    shared_->stats.last_capture_total_seconds = capture;
    shared_->stats.last_capture_slices = 1;
    shared_->stats.last_capture_cpu_seconds = cpu;
    shared_->stats.last_capture_max_cpu_seconds = cpu;
    shared_->stats.last_capture_bytes = capture_->copied_bytes();
  }
  const absl::Status st = Write();
  {
    refit_internal::MutexLock lock(&shared_->mu);
    shared_->busy = false;
  }
  shared_->cv.notify_all();
  return st;
}

CheckpointStats Checkpointer::stats() const {
  refit_internal::MutexLock lock(&shared_->mu);
  return shared_->stats;
}

std::string Checkpointer::last_error() const {
  refit_internal::MutexLock lock(&shared_->mu);
  return shared_->last_error;
}

void Checkpointer::AppendPrometheus(std::string* o) const {
  const CheckpointStats s = stats();
  const double age = s.last_snapshot_ns > 0
                         ? static_cast<double>(clock_->NowNs() - s.last_snapshot_ns) / 1e9
                         : -1.0;
  absl::StrAppend(
      o, "# HELP aftershock_checkpoint_writes_total Checkpoint files written.\n",
      "# TYPE aftershock_checkpoint_writes_total counter\naftershock_checkpoint_writes_total ",
      s.writes, "\n# HELP aftershock_checkpoint_failures_total Checkpoint writes that failed.\n",
      "# TYPE aftershock_checkpoint_failures_total counter\naftershock_checkpoint_failures_total ",
      s.failures,
      "\n# HELP aftershock_checkpoint_skipped_total Snapshots skipped: a write was in flight.\n",
      "# TYPE aftershock_checkpoint_skipped_total counter\naftershock_checkpoint_skipped_total ",
      s.skipped, "\n# HELP aftershock_checkpoint_last_size_bytes Size of the last checkpoint.\n",
      "# TYPE aftershock_checkpoint_last_size_bytes gauge\naftershock_checkpoint_last_size_bytes ",
      s.last_bytes,
      "\n# HELP aftershock_checkpoint_last_write_seconds Serialize and write time of the last "
      "checkpoint.\n# TYPE aftershock_checkpoint_last_write_seconds gauge\n"
      "aftershock_checkpoint_last_write_seconds ",
      s.last_write_seconds,
      "\n# HELP aftershock_checkpoint_last_capture_seconds Longest ingest-thread pause of the "
      "last snapshot.\n# TYPE aftershock_checkpoint_last_capture_seconds gauge\n"
      "aftershock_checkpoint_last_capture_seconds ",
      s.last_capture_seconds,
      "\n# HELP aftershock_checkpoint_last_capture_slices Pauses the last snapshot was "
      "captured in.\n# TYPE aftershock_checkpoint_last_capture_slices gauge\n"
      "aftershock_checkpoint_last_capture_slices ",
      s.last_capture_slices,
      "\n# HELP aftershock_checkpoint_last_capture_cpu_seconds Ingest-thread CPU time of the "
      "last snapshot, all its slices.\n# TYPE aftershock_checkpoint_last_capture_cpu_seconds "
      "gauge\naftershock_checkpoint_last_capture_cpu_seconds ",
      s.last_capture_cpu_seconds,
      "\n# HELP aftershock_checkpoint_last_capture_bytes Bytes the last snapshot copied on the "
      "ingest thread.\n# TYPE aftershock_checkpoint_last_capture_bytes gauge\n"
      "aftershock_checkpoint_last_capture_bytes ",
      s.last_capture_bytes,
      "\n# HELP aftershock_checkpoint_last_writer_cpu_seconds Writer CPU time of the last "
      "checkpoint (encode, checksums, write, fsyncs).\n# TYPE "
      "aftershock_checkpoint_last_writer_cpu_seconds gauge\n"
      "aftershock_checkpoint_last_writer_cpu_seconds ",
      s.last_encode_cpu_seconds + s.last_write_cpu_seconds,
      "\n# HELP aftershock_checkpoint_age_seconds Age of the state in the last checkpoint "
      "written (-1: none yet).\n# TYPE aftershock_checkpoint_age_seconds gauge\n"
      "aftershock_checkpoint_age_seconds ",
      age, "\n");
}

void Checkpointer::AppendHealthJson(std::string* o) const {
  if (restored_.has_value()) {
    absl::StrAppend(o, ",\"restored\":{\"symbols\":", restored_->symbols,
                    ",\"age_seconds\":", restored_->age_seconds,
                    ",\"file\":", JsonString(restored_->file), "}");
  } else {
    absl::StrAppend(o, ",\"restored\":null");
  }
  const CheckpointStats s = stats();
  absl::StrAppend(o, ",\"checkpoint\":{\"file\":", JsonString(options_.path),
                  ",\"writes\":", s.writes, ",\"failures\":", s.failures, ",\"age_seconds\":");
  if (s.last_snapshot_ns > 0) {
    absl::StrAppend(o, static_cast<double>(clock_->NowNs() - s.last_snapshot_ns) / 1e9, "}");
  } else {
    absl::StrAppend(o, "null}");
  }
}

}  // namespace aftershock
