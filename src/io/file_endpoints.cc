// File-backed TickSource and UpdateSink, and the system clock.
#include <time.h>

#include <cerrno>
#include <cstring>
#include <utility>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "aftershock/clock.h"
#include "aftershock/tick_source.h"
#include "aftershock/update_sink.h"

namespace aftershock {
namespace {

class RealtimeClock : public Clock {
 public:
  int64_t NowNs() override {
    timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    return static_cast<int64_t>(ts.tv_sec) * 1000000000 + ts.tv_nsec;
  }
};

constexpr size_t kSinkBufferBytes = 1 << 20;

}  // namespace

Clock* SystemClock() {
  static Clock* const clock = new RealtimeClock();
  return clock;
}

// ---- TickFileSource ----------------------------------------------------------

absl::StatusOr<std::unique_ptr<TickFileSource>> TickFileSource::Open(
    const std::string& path, const TickFileOptions& options) {
  auto reader = TickFileReader::Open(path, options);
  if (!reader.ok()) return reader.status();
  return std::make_unique<TickFileSource>(*std::move(reader));
}

TickFileSource::TickFileSource(std::unique_ptr<TickFileReader> reader)
    : reader_(std::move(reader)) {}

int TickFileSource::Pump(TickConsumer* consumer, int max_messages) {
  int n = 0;
  while (n < max_messages) {
    if (!reader_->Next(&tick_)) return n > 0 ? n : kEndOfInput;
    consumer->OnTick(tick_);
    ++n;
  }
  return n;
}

// ---- JsonLinesSink -----------------------------------------------------------

absl::StatusOr<std::unique_ptr<JsonLinesSink>> JsonLinesSink::Open(const std::string& path,
                                                                   std::string topic_prefix) {
  if (path == "-") {
    return std::unique_ptr<JsonLinesSink>(
        new JsonLinesSink(stdout, false, "standard output", std::move(topic_prefix)));
  }
  std::FILE* f = std::fopen(path.c_str(), "wb");
  if (f == nullptr) {
    return absl::NotFoundError(
        absl::StrCat("cannot open '", path, "' for writing: ", std::strerror(errno)));
  }
  return std::unique_ptr<JsonLinesSink>(new JsonLinesSink(f, true, path, std::move(topic_prefix)));
}

JsonLinesSink::JsonLinesSink(std::FILE* f, bool owned, std::string path, std::string prefix)
    : file_(f), owned_(owned), path_(std::move(path)), prefix_(std::move(prefix)) {
  buffer_.reserve(kSinkBufferBytes + 4096);
}

JsonLinesSink::~JsonLinesSink() {
  Flush().IgnoreError();
  if (owned_) std::fclose(file_);
}

bool JsonLinesSink::Send(absl::string_view topic, absl::string_view body) {
  if (!absl::StartsWith(topic, prefix_)) return true;
  buffer_.append(body.data(), body.size());
  buffer_.push_back('\n');
  ++lines_;
  if (buffer_.size() >= kSinkBufferBytes) {
    if (std::fwrite(buffer_.data(), 1, buffer_.size(), file_) != buffer_.size()) failed_ = true;
    buffer_.clear();
  }
  return true;
}

absl::Status JsonLinesSink::Flush() {
  if (!buffer_.empty()) {
    if (std::fwrite(buffer_.data(), 1, buffer_.size(), file_) != buffer_.size()) failed_ = true;
    buffer_.clear();
  }
  if (std::fflush(file_) != 0) failed_ = true;
  if (failed_) return absl::DataLossError(absl::StrCat("write to '", path_, "' failed"));
  return absl::OkStatus();
}

}  // namespace aftershock
