#include "aftershock/nats_update_sink.h"

#include <atomic>
#include <string>
#include <utility>

#include "absl/strings/match.h"
#include "aftershock/subject_token.h"
#include "io/nats_client.h"

namespace aftershock {
namespace {

using nats_internal::NatsSession;

class SinkImpl : public NatsUpdateSink {
 public:
  SinkImpl(const NatsConfig& config, std::unique_ptr<UpdateSink> inner)
      : config_(config), inner_(std::move(inner)) {
    subject_.reserve(config_.updates_subject.size() + 1 + kMaxSymbolTokenBytes);
  }

  absl::Status Init() {
    auto session = NatsSession::Connect(config_, "aftershock-updates");
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
    return absl::OkStatus();
  }

  bool Send(absl::string_view topic, absl::string_view body) override {
    const bool ok = inner_->Send(topic, body);
    if (absl::StartsWith(topic, "u.") && topic.size() > 2) {
      // "<updates_subject>.<token>" built in place (no temporary strings).
      subject_.assign(config_.updates_subject);
      subject_.push_back('.');
      AppendToken(topic.substr(2), &subject_);
      const natsStatus s = natsConnection_Publish(session_->conn(), subject_.c_str(), body.data(),
                                                  static_cast<int>(body.size()));
      if (s != NATS_OK) drops_.fetch_add(1, std::memory_order_relaxed);
    }
    return ok;
  }

  absl::Status Flush() override {
    absl::Status st = inner_->Flush();
    const natsStatus s = natsConnection_FlushTimeout(session_->conn(), 2000);
    if (s != NATS_OK && st.ok()) {
      st = nats_internal::ToStatus(s, "flushing updates to NATS");
    }
    return st;
  }

  std::string BoundEndpoint() const override { return inner_->BoundEndpoint(); }
  void EndRound() override { inner_->EndRound(); }
  const MetricsSource* metrics() const override { return inner_->metrics(); }
  uint64_t nats_drops() const override { return drops_.load(std::memory_order_relaxed); }

 private:
  // EncodeSubjectToken without its return string.
  static void AppendToken(absl::string_view symbol, std::string* out) {
    static constexpr char kHex[] = "0123456789ABCDEF";
    for (char ch : symbol) {
      const unsigned char c = static_cast<unsigned char>(ch);
      const bool plain = (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') ||
                         (c >= '0' && c <= '9') || c == '_' || c == ':' || c == '-';
      if (plain) {
        out->push_back(ch);
      } else {
        out->push_back('~');
        out->push_back(kHex[c >> 4]);
        out->push_back(kHex[c & 15]);
      }
    }
  }

  const NatsConfig config_;
  std::unique_ptr<UpdateSink> inner_;
  std::unique_ptr<NatsSession> session_;
  std::string subject_;  // reused
  std::atomic<uint64_t> drops_{0};
};

}  // namespace

absl::StatusOr<std::unique_ptr<NatsUpdateSink>> NatsUpdateSink::Open(
    const NatsConfig& config, std::unique_ptr<UpdateSink> inner) {
  if (inner == nullptr || config.updates_subject.empty()) {
    return absl::InvalidArgumentError("NatsUpdateSink needs an inner sink and [nats] updates_subject");
  }
  auto sink = std::make_unique<SinkImpl>(config, std::move(inner));
  if (absl::Status s = sink->Init(); !s.ok()) return s;
  return std::unique_ptr<NatsUpdateSink>(std::move(sink));
}

}  // namespace aftershock
