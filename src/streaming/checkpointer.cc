#include "aftershock/checkpointer.h"

#include <chrono>
#include <cmath>
#include <utility>

#include "absl/strings/str_cat.h"
#include "aftershock/checkpoint_file.h"

namespace aftershock {
namespace {

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

absl::StatusOr<std::unique_ptr<Checkpointer>> Checkpointer::Create(
    const CheckpointerOptions& options, const EngineConfig& config, const IngestCore* core,
    const EngineServices* services, Clock* clock) {
  if (options.path.empty()) return absl::InvalidArgumentError("[checkpoint] path is empty");
  if (!(options.every_seconds >= 0) || !std::isfinite(options.every_seconds)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "[checkpoint] every_seconds must be a finite number >= 0, got ", options.every_seconds));
  }
  return std::unique_ptr<Checkpointer>(
      new Checkpointer(options, config, core, services, clock));
}

Checkpointer::Checkpointer(const CheckpointerOptions& options, const EngineConfig& config,
                           const IngestCore* core, const EngineServices* services, Clock* clock)
    : options_(options),
      config_(config),
      core_(core),
      services_(services),
      clock_(clock),
      period_ns_(static_cast<int64_t>(options.every_seconds * 1e9)) {
  next_due_ns_ = period_ns_ > 0 ? clock_->NowNs() + period_ns_ : 0;
  writer_ = std::thread([this] { WriterLoop(); });
}

Checkpointer::~Checkpointer() {
  {
    std::lock_guard<std::mutex> lock(mu_);
    stop_ = true;
  }
  cv_.notify_all();
  writer_.join();
}

void Checkpointer::OnClock(IngestCore* /*core*/, int64_t /*now_ns*/) {
  if (period_ns_ <= 0) return;
  const int64_t now = clock_->NowNs();
  if (now < next_due_ns_) return;
  next_due_ns_ = now + period_ns_;
  {
    std::lock_guard<std::mutex> lock(mu_);
    if (busy_) {
      ++stats_.skipped;  // one write at a time: the next period tries again
      return;
    }
    busy_ = true;
  }
  // The capture is the only cost on the ingest thread: it encodes the state
  // into memory; the checksums and the disk are the writer's.
  const auto t0 = std::chrono::steady_clock::now();
  EngineSnapshot snap = CaptureEngineState(*core_, services_, now);
  const double capture =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  {
    std::lock_guard<std::mutex> lock(mu_);
    queued_ = std::move(snap);
    stats_.last_capture_seconds = capture;
  }
  cv_.notify_all();
}

void Checkpointer::WriterLoop() {
  for (;;) {
    EngineSnapshot snap;
    {
      std::unique_lock<std::mutex> lock(mu_);
      cv_.wait(lock, [this] { return stop_ || queued_.has_value(); });
      if (!queued_.has_value()) return;  // stopping, nothing left to write
      snap = std::move(*queued_);
      queued_.reset();
    }
    (void)Write(snap);
    {
      std::lock_guard<std::mutex> lock(mu_);
      busy_ = false;
    }
    cv_.notify_all();
  }
}

absl::Status Checkpointer::Write(const EngineSnapshot& snap) {
  const auto t0 = std::chrono::steady_clock::now();
  absl::StatusOr<std::string> bytes = SerializeEngineSnapshot(snap, config_);
  absl::Status st = bytes.ok() ? WriteFileAtomically(options_.path, *bytes) : bytes.status();
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  std::lock_guard<std::mutex> lock(mu_);
  if (st.ok()) {
    ++stats_.writes;
    stats_.last_bytes = bytes->size();
    stats_.last_write_seconds = seconds;
    stats_.last_snapshot_ns = snap.created_ns;
  } else {
    ++stats_.failures;
    last_error_ = std::string(st.message());
  }
  return st;
}

absl::Status Checkpointer::WriteNow() {
  {
    std::unique_lock<std::mutex> lock(mu_);
    cv_.wait(lock, [this] { return !busy_; });
    busy_ = true;
  }
  const absl::Status st = Write(CaptureEngineState(*core_, services_, clock_->NowNs()));
  {
    std::lock_guard<std::mutex> lock(mu_);
    busy_ = false;
  }
  cv_.notify_all();
  return st;
}

CheckpointStats Checkpointer::stats() const {
  std::lock_guard<std::mutex> lock(mu_);
  return stats_;
}

std::string Checkpointer::last_error() const {
  std::lock_guard<std::mutex> lock(mu_);
  return last_error_;
}

void Checkpointer::AppendPrometheus(std::string* o) const {
  const CheckpointStats s = stats();
  const double age =
      s.last_snapshot_ns > 0 ? static_cast<double>(clock_->NowNs() - s.last_snapshot_ns) / 1e9
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
      "\n# HELP aftershock_checkpoint_last_capture_seconds Ingest-thread time of the last "
      "snapshot.\n# TYPE aftershock_checkpoint_last_capture_seconds gauge\n"
      "aftershock_checkpoint_last_capture_seconds ",
      s.last_capture_seconds,
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
