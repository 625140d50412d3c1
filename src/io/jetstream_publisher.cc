#include "aftershock/jetstream_publisher.h"

#include <atomic>
#include <string>

#include "absl/strings/str_cat.h"
#include "io/nats_client.h"

namespace aftershock {
namespace {

using nats_internal::NatsSession;
using nats_internal::ToStatus;

class PublisherImpl : public JetStreamTickPublisher {
 public:
  PublisherImpl(NatsConfig config, JetStreamPublisherOptions options)
      : config_(std::move(config)), options_(options) {}

  absl::Status Init() {
    jsOptions jo;
    jsOptions_Init(&jo);
    jo.PublishAsync.MaxPending = options_.max_pending;
    jo.PublishAsync.ErrHandler = &PublisherImpl::OnError;
    jo.PublishAsync.ErrHandlerClosure = this;
    auto session = NatsSession::Connect(config_, "aftershock-publisher", &jo);
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
    if (options_.create_stream) return nats_internal::EnsureTickStream(session_.get(), config_);
    return absl::OkStatus();
  }

  absl::Status Publish(const Tick& tick) override {
    subject_ = nats_internal::TickSubject(config_, tick.symbol.view());
    if (options_.encoding == WireEncoding::kJson) {
      EncodeTickJson(tick, &body_);
    } else {
      EncodeTickBinary(tick, &body_);
    }
    const natsStatus s = js_PublishAsync(session_->js(), subject_.c_str(), body_.data(),
                                         static_cast<int>(body_.size()), nullptr);
    if (s != NATS_OK) return ToStatus(s, absl::StrCat("cannot publish to ", subject_));
    ++published_;
    return absl::OkStatus();
  }

  absl::Status Flush(int64_t timeout_ms) override {
    jsPubOptions po;
    jsPubOptions_Init(&po);
    po.MaxWait = timeout_ms;
    const natsStatus s = js_PublishAsyncComplete(session_->js(), &po);
    if (s == NATS_TIMEOUT) {
      return absl::DeadlineExceededError(
          absl::StrCat("JetStream acknowledgements missing after ", timeout_ms, " ms"));
    }
    if (s != NATS_OK) return ToStatus(s, "waiting for JetStream acknowledgements");
    if (const uint64_t f = failed_.load(); f > 0) {
      return absl::InternalError(absl::StrCat(f, " of ", published_,
                                              " published ticks were not stored by JetStream"));
    }
    return absl::OkStatus();
  }

  JetStreamPublisherStats stats() const override {
    return JetStreamPublisherStats{published_, failed_.load()};
  }

 private:
  // Runs on the client's thread for every negative or missing acknowledgement.
  static void OnError(jsCtx*, jsPubAckErr*, void* closure) {
    static_cast<PublisherImpl*>(closure)->failed_.fetch_add(1);
  }

  const NatsConfig config_;
  const JetStreamPublisherOptions options_;
  std::unique_ptr<NatsSession> session_;
  std::string subject_, body_;  // reused buffers
  uint64_t published_ = 0;
  std::atomic<uint64_t> failed_{0};
};

}  // namespace

absl::StatusOr<std::unique_ptr<JetStreamTickPublisher>> JetStreamTickPublisher::Connect(
    const NatsConfig& config, const JetStreamPublisherOptions& options) {
  auto p = std::make_unique<PublisherImpl>(config, options);
  if (absl::Status s = p->Init(); !s.ok()) return s;
  return std::unique_ptr<JetStreamTickPublisher>(std::move(p));
}

}  // namespace aftershock
