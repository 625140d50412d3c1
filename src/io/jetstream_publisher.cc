#include "aftershock/jetstream_publisher.h"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cstring>
#include <string>
#include <thread>

#include "absl/container/flat_hash_map.h"
#include "absl/strings/str_cat.h"
#include "absl/synchronization/notification.h"
#include "aftershock/subject_token.h"
#include "io/ack_window.h"
#include "io/nats_client.h"

namespace aftershock {

std::string TickMessageId(const Tick& tick, uint64_t sequence) {
  uint64_t h = 14695981039346656037ull;  // FNV-1a 64 offset basis
  auto mix = [&h](uint64_t v, int bytes) {
    for (int i = 0; i < bytes; ++i) {
      h ^= (v >> (8 * i)) & 0xff;
      h *= 1099511628211ull;  // FNV-1a 64 prime
    }
  };
  uint64_t value_bits = 0;
  static_assert(sizeof(value_bits) == sizeof(tick.value));
  std::memcpy(&value_bits, &tick.value, sizeof(value_bits));
  mix(static_cast<uint64_t>(tick.kind), 1);
  mix(static_cast<uint64_t>(tick.t_ns), 8);
  mix(value_bits, 8);
  std::string hex(16, '0');
  for (int i = 15; i >= 0; --i, h >>= 4) hex[static_cast<size_t>(i)] = "0123456789abcdef"[h & 0xf];
  return absl::StrCat(sequence, ".", hex, ".", EncodeSubjectToken(tick.symbol.view()));
}

namespace {

using nats_internal::NatsSession;
using nats_internal::ToStatus;
using Clock = std::chrono::steady_clock;

int64_t NowNs() {
  return std::chrono::duration_cast<std::chrono::nanoseconds>(Clock::now().time_since_epoch())
      .count();
}

class PublisherImpl : public JetStreamTickPublisher {
 public:
  PublisherImpl(NatsConfig config, JetStreamPublisherOptions options)
      : config_(std::move(config)),
        options_(std::move(options)),
        window_(
            AckWindowOptions{options_.max_pending, options_.retry_delay_ms, options_.give_up_ms},
            [this](const std::string& id, const std::string& subject, const std::string& body) {
              Send(id, subject, body);
            }) {}

  ~PublisherImpl() override {
    // The client's thread reports into window_ and sends from it until the
    // session is closed: no more sends from here on, then close it before
    // the other members go.
    closing_.store(true, std::memory_order_release);
    stop_.Notify();
    if (resender_.joinable()) resender_.join();
    session_.reset();
  }

  absl::Status Init() {
    if (options_.max_pending < 1 || options_.ack_timeout_ms < 1 || options_.retry_delay_ms < 0 ||
        options_.give_up_ms < 1) {
      return absl::InvalidArgumentError(
          "JetStream publisher: max_pending, ack_timeout_ms and give_up_ms must be >= 1, "
          "retry_delay_ms >= 0");
    }
    jsOptions jo;
    jsOptions_Init(&jo);
    // The client's own limit stays above ours (a message is registered with
    // the client only once its previous attempt was reported, and the window
    // holds at most max_pending), so its stall never comes into play: the
    // acknowledgement handler sends the symbol's next tick and must not wait.
    jo.PublishAsync.MaxPending = options_.max_pending * 2 + 16;
    jo.PublishAsync.AckHandler = &PublisherImpl::OnAck;
    jo.PublishAsync.AckHandlerClosure = this;
    auto session = NatsSession::Connect(config_, "aftershock-publisher", &jo);
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
    js_ = session_->js();
    if (options_.create_stream) {
      if (absl::Status s = nats_internal::EnsureTickStream(session_.get(), config_); !s.ok()) {
        return s;
      }
    }
    // A resend may come up to give_up_ms + ack_timeout_ms after the first
    // attempt was stored; the stream must still remember its id by then.
    auto window_ns = nats_internal::TickStreamDuplicateWindow(session_.get(), config_);
    if (!window_ns.ok()) return window_ns.status();
    const int64_t needed_ms = options_.give_up_ms + options_.ack_timeout_ms;
    if (needed_ms * 1000000 > *window_ns) {
      return absl::FailedPreconditionError(absl::StrCat(
          "JetStream stream '", config_.stream, "' drops duplicate ticks for ", *window_ns / 1e9,
          " s, less than the publisher's give-up time plus its acknowledgement timeout (",
          needed_ms / 1000.0,
          " s): a late resend could store a tick twice; lower the give-up time or create the "
          "stream with a longer duplicate window ([nats] duplicate_window_seconds)"));
    }
    resender_ = std::thread([this] { ResendLoop(); });
    return absl::OkStatus();
  }

  absl::Status Publish(const Tick& tick) override {
    if (absl::Status s = window_.CheckGiveUp(NowNs()); !s.ok()) return s;
    while (!window_.HasRoom()) {
      if (absl::Status s = Waited(); !s.ok()) return s;
      window_.AwaitRoom(absl::Milliseconds(50));
    }
    const absl::string_view symbol = tick.symbol.view();
    uint64_t& sequence = sequences_[symbol];
    ++sequence;
    subject_ = nats_internal::TickSubject(config_, symbol);
    if (options_.encoding == WireEncoding::kJson) {
      EncodeTickJson(tick, &body_);
    } else {
      EncodeTickBinary(tick, &body_);
    }
    // Sent now, or after the symbol's previous tick is acknowledged (by the
    // client's thread, OnAck).
    window_.Add(symbol, TickMessageId(tick, sequence), subject_, body_, NowNs());
    ++published_;
    return absl::OkStatus();
  }

  absl::Status Flush(int64_t timeout_ms) override {
    const auto deadline =
        Clock::now() + std::chrono::milliseconds(std::max<int64_t>(timeout_ms, 0));
    while (window_.pending() > 0) {
      if (absl::Status s = Waited(); !s.ok()) return s;
      if (Clock::now() >= deadline) {
        return absl::DeadlineExceededError(absl::StrCat(window_.pending(), " of ", published_,
                                                        " ticks not acknowledged by JetStream "
                                                        "after ",
                                                        timeout_ms, " ms"));
      }
      window_.AwaitEmpty(absl::Milliseconds(50));
    }
    return window_.CheckGiveUp(NowNs());
  }

  JetStreamPublisherStats stats() const override {
    const AckWindowStats w = window_.stats();
    return JetStreamPublisherStats{published_, w.acked, w.failures, w.resends, w.duplicates};
  }

 private:
  // Between two waits: the give-up and the stop request.
  absl::Status Waited() {
    if (absl::Status s = window_.CheckGiveUp(NowNs()); !s.ok()) return s;
    if (options_.stop_requested && options_.stop_requested()) {
      return absl::CancelledError(absl::StrCat("stopped with ", window_.pending(),
                                               " tick(s) not acknowledged by JetStream"));
    }
    return absl::OkStatus();
  }

  // Sends one attempt (from the producer, the client's or the resend
  // thread); a send the client refuses at once counts as a failed attempt.
  void Send(const std::string& id, const std::string& subject, const std::string& body) {
    if (closing_.load(std::memory_order_acquire)) return;
    jsPubOptions po;
    jsPubOptions_Init(&po);
    po.MsgId = id.c_str();
    po.MaxWait = options_.ack_timeout_ms;  // the client reports NATS_TIMEOUT after it
    const natsStatus s =
        js_PublishAsync(js_, subject.c_str(), body.data(), static_cast<int>(body.size()), &po);
    if (s != NATS_OK) {
      window_.OnFailure(id, ToStatus(s, absl::StrCat("cannot publish to ", subject)).message(),
                        NowNs());
    }
  }

  // Resends failed attempts when due, whatever the producer is doing (it may
  // be pacing, or done and waiting in Flush).
  void ResendLoop() {
    while (!stop_.HasBeenNotified()) {
      const int64_t now = NowNs();
      window_.ResendDue(now);
      // A failure reported meanwhile is seen within 20 ms.
      const int64_t wait = std::clamp<int64_t>(window_.NextResend() - now, 1000000, 20000000);
      stop_.WaitForNotificationWithTimeout(absl::Nanoseconds(wait));
    }
  }

  // Runs on the client's thread for every acknowledgement, positive or not.
  static void OnAck(jsCtx*, natsMsg* msg, jsPubAck* pa, jsPubAckErr* pae, void* closure) {
    auto* self = static_cast<PublisherImpl*>(closure);
    const char* id = nullptr;
    if (msg != nullptr && natsMsgHeader_Get(msg, "Nats-Msg-Id", &id) == NATS_OK && id != nullptr) {
      if (pa != nullptr) {
        self->window_.OnAck(id, pa->Duplicate, NowNs());  // may send the symbol's next tick
      } else if (pae != nullptr) {
        std::string error = pae->ErrText != nullptr && pae->ErrText[0] != '\0'
                                ? pae->ErrText
                                : natsStatus_GetText(pae->Err);
        if (pae->ErrCode != 0) {
          absl::StrAppend(&error, " (JetStream error ", static_cast<int>(pae->ErrCode), ")");
        }
        self->window_.OnFailure(id, error, NowNs());
      }
    }
    natsMsg_Destroy(msg);  // the handler owns the message (nats.h, jsPubAckHandler)
  }

  const NatsConfig config_;
  const JetStreamPublisherOptions options_;
  AckWindow window_;
  std::unique_ptr<NatsSession> session_;
  jsCtx* js_ = nullptr;               // session_'s context, read by every thread that sends
  std::atomic<bool> closing_{false};  // set by the destructor: sends stop
  absl::Notification stop_;           // ends ResendLoop
  std::thread resender_;
  absl::flat_hash_map<std::string, uint64_t> sequences_;  // ticks published per symbol
  std::string subject_, body_;                            // reused buffers
  uint64_t published_ = 0;
};

}  // namespace

absl::StatusOr<std::unique_ptr<JetStreamTickPublisher>> JetStreamTickPublisher::Connect(
    const NatsConfig& config, const JetStreamPublisherOptions& options) {
  auto p = std::make_unique<PublisherImpl>(config, options);
  if (absl::Status s = p->Init(); !s.ok()) return s;
  return std::unique_ptr<JetStreamTickPublisher>(std::move(p));
}

}  // namespace aftershock
