#include "aftershock/update_batch.h"

#include <algorithm>
#include <charconv>
#include <cstring>
#include <utility>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

// Room in front of the records for the longest header: binary 4 bytes, JSON
// {"n":65535,"u":[ (16 bytes).
constexpr size_t kHeaderRoom = 16;
constexpr size_t kBinaryHeader = 4;
constexpr absl::string_view kJsonHead = "{\"n\":";
constexpr absl::string_view kJsonMid = ",\"u\":[";
constexpr absl::string_view kJsonTail = "]}";
// The most bytes a batch adds around its records (JSON: the longest header
// and the tail), so that a full batch's body stays within batch_max_bytes.
constexpr size_t kBinaryOverhead = kBinaryHeader;
constexpr size_t kJsonOverhead = kHeaderRoom + 2;

bool IsUpdateTopic(absl::string_view topic) {
  return topic.size() > 2 && topic[0] == 'u' && topic[1] == '.';
}

}  // namespace

BatchingSink::BatchingSink(const PublishConfig& publish, std::unique_ptr<UpdateSink> inner)
    : inner_(std::move(inner)),
      binary_(publish.encoding == WireEncoding::kBinary),
      both_(publish.update_topics == UpdateTopics::kBoth),
      max_bytes_(static_cast<size_t>(publish.batch_max_bytes)),
      max_updates_(publish.batch_max_updates) {
  // The records of a full batch plus room for one oversize update; later
  // batches reuse the capacity (no allocation in steady state).
  buffer_.reserve(kHeaderRoom + std::min<size_t>(max_bytes_, size_t{1} << 20) + 4096);
  buffer_.resize(kHeaderRoom);
}

bool BatchingSink::Send(absl::string_view topic, absl::string_view body) {
  if (!IsUpdateTopic(topic)) return inner_->Send(topic, body);
  bool ok = true;
  if (both_) ok = inner_->Send(topic, body);
  if (binary_ && body.size() > 0xFFFF) {
    // Cannot be framed (an encoded update is at most a few hundred bytes).
    ++stats_.dropped_updates;
    return false;
  }
  const size_t overhead = binary_ ? kBinaryOverhead : kJsonOverhead;
  auto record_size = [&] { return binary_ ? 2 + body.size() : body.size() + (count_ > 0 ? 1 : 0); };
  if (count_ > 0 && (count_ >= max_updates_ ||
                     overhead + (buffer_.size() - kHeaderRoom) + record_size() > max_bytes_)) {
    SendBatch();
  }
  if (binary_) {
    const uint16_t n = static_cast<uint16_t>(body.size());
    buffer_.push_back(static_cast<char>(n & 0xFF));
    buffer_.push_back(static_cast<char>(n >> 8));
  } else if (count_ > 0) {
    buffer_.push_back(',');
  }
  buffer_.append(body.data(), body.size());
  ++count_;
  return ok;
}

void BatchingSink::SendBatch() {
  if (count_ == 0) return;
  size_t start;
  if (binary_) {
    start = kHeaderRoom - kBinaryHeader;
    buffer_[start] = static_cast<char>(kUpdateBatchMagic);
    buffer_[start + 1] = static_cast<char>(kUpdateBatchVersion);
    buffer_[start + 2] = static_cast<char>(count_ & 0xFF);
    buffer_[start + 3] = static_cast<char>((count_ >> 8) & 0xFF);
  } else {
    char digits[8];
    const auto r = std::to_chars(digits, digits + sizeof(digits), count_);
    const size_t nd = static_cast<size_t>(r.ptr - digits);
    const size_t head = kJsonHead.size() + nd + kJsonMid.size();
    start = kHeaderRoom - head;
    char* p = &buffer_[start];
    std::memcpy(p, kJsonHead.data(), kJsonHead.size());
    std::memcpy(p + kJsonHead.size(), digits, nd);
    std::memcpy(p + kJsonHead.size() + nd, kJsonMid.data(), kJsonMid.size());
    buffer_.append(kJsonTail.data(), kJsonTail.size());
  }
  const bool sent = inner_->Send(kUpdateBatchTopic, absl::string_view(buffer_).substr(start));
  if (sent) {
    ++stats_.batches;
    stats_.batched_updates += static_cast<uint64_t>(count_);
  } else {
    ++stats_.batch_drops;
    stats_.dropped_updates += static_cast<uint64_t>(count_);
  }
  buffer_.resize(kHeaderRoom);
  count_ = 0;
}

void BatchingSink::EndRound() {
  SendBatch();
  inner_->EndRound();
}

absl::Status BatchingSink::Flush() {
  EndRound();
  return inner_->Flush();
}

void BatchingSink::AppendPrometheus(std::string* o) const {
  auto metric = [o](const char* name, const char* help, uint64_t v) {
    absl::StrAppend(o, "# HELP ", name, " ", help, "\n# TYPE ", name, " counter\n", name, " ", v,
                    "\n");
  };
  metric("aftershock_update_batches_total", "Update batch messages sent on b.u.", stats_.batches);
  metric("aftershock_update_batch_drops_total",
         "Update batch messages dropped at a full subscriber queue.", stats_.batch_drops);
  metric("aftershock_update_batch_dropped_updates_total", "Updates inside dropped update batches.",
         stats_.dropped_updates);
}

std::unique_ptr<UpdateSink> MaybeBatchUpdates(const PublishConfig& publish,
                                              std::unique_ptr<UpdateSink> sink) {
  if (publish.update_topics == UpdateTopics::kSymbol) return sink;
  return std::make_unique<BatchingSink>(publish, std::move(sink));
}

namespace {

absl::Status Malformed(absl::string_view why) {
  return absl::InvalidArgumentError(absl::StrCat("malformed update batch: ", why));
}

absl::Status SplitBinary(absl::string_view b, std::vector<absl::string_view>* out) {
  if (b.size() < kBinaryHeader) return Malformed("shorter than its header");
  if (static_cast<uint8_t>(b[0]) != kUpdateBatchMagic) return Malformed("bad magic");
  if (static_cast<uint8_t>(b[1]) != kUpdateBatchVersion) return Malformed("unknown version");
  const int count = static_cast<uint8_t>(b[2]) | (static_cast<uint8_t>(b[3]) << 8);
  if (count == 0) return Malformed("no records");
  size_t at = kBinaryHeader;
  for (int i = 0; i < count; ++i) {
    if (b.size() - at < 2) return Malformed("truncated record size");
    const size_t n = static_cast<uint8_t>(b[at]) | (static_cast<uint8_t>(b[at + 1]) << 8);
    at += 2;
    if (n == 0 || b.size() - at < n) return Malformed("truncated record");
    out->push_back(b.substr(at, n));
    at += n;
  }
  if (at != b.size()) return Malformed("bytes after the last record");
  return absl::OkStatus();
}

// The end of the JSON object starting at b[at] ('{'): one past its '}', or
// npos. Strings (with escapes) are skipped, so braces inside them do not count.
size_t ObjectEnd(absl::string_view b, size_t at) {
  int depth = 0;
  bool in_string = false;
  for (size_t i = at; i < b.size(); ++i) {
    const char ch = b[i];
    if (in_string) {
      if (ch == '\\') {
        ++i;
      } else if (ch == '"') {
        in_string = false;
      }
      continue;
    }
    if (ch == '"') {
      in_string = true;
    } else if (ch == '{') {
      ++depth;
    } else if (ch == '}') {
      if (--depth == 0) return i + 1;
    }
  }
  return absl::string_view::npos;
}

absl::Status SplitJson(absl::string_view b, std::vector<absl::string_view>* out) {
  if (!absl::StartsWith(b, kJsonHead)) return Malformed("expected {\"n\":");
  size_t at = kJsonHead.size();
  int count = 0;
  const auto r = std::from_chars(b.data() + at, b.data() + b.size(), count);
  if (r.ec != std::errc() || count < 1 || count > 0xFFFF) return Malformed("bad count n");
  at = static_cast<size_t>(r.ptr - b.data());
  if (b.substr(at, kJsonMid.size()) != kJsonMid) return Malformed("expected ,\"u\":[");
  at += kJsonMid.size();
  for (int i = 0; i < count; ++i) {
    if (i > 0) {
      if (at >= b.size() || b[at] != ',') return Malformed("expected , between records");
      ++at;
    }
    if (at >= b.size() || b[at] != '{') return Malformed("expected a record object");
    const size_t end = ObjectEnd(b, at);
    if (end == absl::string_view::npos) return Malformed("unterminated record");
    out->push_back(b.substr(at, end - at));
    at = end;
  }
  if (b.substr(at) != kJsonTail)
    return Malformed("n differs from the records, or no ]} at the end");
  return absl::OkStatus();
}

}  // namespace

absl::Status SplitUpdateBatch(absl::string_view body, WireEncoding encoding,
                              std::vector<absl::string_view>* records) {
  records->clear();
  absl::Status s =
      encoding == WireEncoding::kBinary ? SplitBinary(body, records) : SplitJson(body, records);
  if (!s.ok()) records->clear();
  return s;
}

}  // namespace aftershock
