#include "aftershock/jetstream_publisher.h"

#include <algorithm>
#include <chrono>
#include <cstring>
#include <string>

#include "absl/container/flat_hash_map.h"
#include "absl/strings/str_cat.h"
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
            AckWindowOptions{options_.max_pending, options_.retry_delay_ms, options_.give_up_ms}) {}

  ~PublisherImpl() override {
    // The client's thread may still report into window_: close the session
    // (and with it that thread's use of `this`) first.
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
    // The client's own limit stays above ours: a resend is registered only
    // after the client reported the failed attempt, so it never holds more
    // than max_pending; the margin keeps its stall (and its error) out of play.
    jo.PublishAsync.MaxPending = options_.max_pending * 2;
    jo.PublishAsync.AckHandler = &PublisherImpl::OnAck;
    jo.PublishAsync.AckHandlerClosure = this;
    auto session = NatsSession::Connect(config_, "aftershock-publisher", &jo);
    if (!session.ok()) return session.status();
    session_ = *std::move(session);
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
          " s, less than the publisher's give-up time plus its acknowledgement "
          "timeout (",
          needed_ms / 1000.0,
          " s): a late resend could store a tick twice; lower the give-up time or create the "
          "stream with a longer duplicate window ([nats] duplicate_window_seconds)"));
    }
    return absl::OkStatus();
  }

  absl::Status Publish(const Tick& tick) override {
    std::string symbol(tick.symbol.view());
    uint64_t& sequence = sequences_[symbol];
    const std::string id = TickMessageId(tick, sequence + 1);
    // Per-symbol order: the symbol's previous tick must be acknowledged first.
    if (absl::Status s = WaitUntil([&] { return window_.CanAdmit(symbol); }, -1); !s.ok()) {
      return s;
    }
    ++sequence;
    subject_ = nats_internal::TickSubject(config_, symbol);
    if (options_.encoding == WireEncoding::kJson) {
      EncodeTickJson(tick, &body_);
    } else {
      EncodeTickBinary(tick, &body_);
    }
    window_.Admit(symbol, id, subject_, body_, NowNs());
    Send(id, subject_, body_);
    ++published_;
    return absl::OkStatus();
  }

  absl::Status Flush(int64_t timeout_ms) override {
    const int64_t deadline = NowNs() + std::max<int64_t>(timeout_ms, 0) * 1000000;
    absl::Status s = WaitUntil([&] { return window_.in_flight() == 0; }, deadline);
    if (absl::IsDeadlineExceeded(s) && window_.in_flight() > 0 &&
        window_.CheckGiveUp(NowNs()).ok()) {
      return absl::DeadlineExceededError(absl::StrCat(window_.in_flight(), " of ", published_,
                                                      " ticks not acknowledged by JetStream after ",
                                                      timeout_ms, " ms"));
    }
    return s;
  }

  JetStreamPublisherStats stats() const override {
    const AckWindowStats w = window_.stats();
    return JetStreamPublisherStats{published_, w.acked, w.failures, w.resends, w.duplicates};
  }

 private:
  // Sends one attempt; a send the client refuses at once counts as a failed
  // attempt (resent after the retry delay).
  void Send(const std::string& id, const std::string& subject, const std::string& body) {
    jsPubOptions po;
    jsPubOptions_Init(&po);
    po.MsgId = id.c_str();
    po.MaxWait = options_.ack_timeout_ms;  // the client reports NATS_TIMEOUT after it
    const natsStatus s = js_PublishAsync(session_->js(), subject.c_str(), body.data(),
                                         static_cast<int>(body.size()), &po);
    if (s != NATS_OK) {
      window_.OnFailure(id, ToStatus(s, absl::StrCat("cannot publish to ", subject)).message(),
                        NowNs());
    }
  }

  // Resends what is due and checks the give-up until `done()` holds, the
  // deadline (ns of NowNs; -1 = none) passes or stop_requested says so.
  template <typename Done>
  absl::Status WaitUntil(Done done, int64_t deadline) {
    while (true) {
      const uint64_t seen = window_.version();
      const int64_t now = NowNs();
      for (const AckWindowResend& r : window_.TakeDue(now)) Send(r.id, r.subject, r.body);
      if (absl::Status s = window_.CheckGiveUp(now); !s.ok()) return s;
      if (done()) return absl::OkStatus();
      if (deadline >= 0 && now >= deadline) {
        return absl::DeadlineExceededError("JetStream acknowledgements missing");
      }
      if (options_.stop_requested && options_.stop_requested()) {
        return absl::CancelledError(absl::StrCat("stopped with ", window_.in_flight(),
                                                 " tick(s) not acknowledged by JetStream"));
      }
      int64_t until = std::min(window_.NextDeadline(), now + 50000000);  // 50 ms slices
      if (deadline >= 0) until = std::min(until, deadline);
      window_.AwaitChange(seen, absl::Nanoseconds(std::max<int64_t>(until - now, 0)));
    }
  }

  // Runs on the client's thread for every acknowledgement, positive or not.
  static void OnAck(jsCtx*, natsMsg* msg, jsPubAck* pa, jsPubAckErr* pae, void* closure) {
    auto* self = static_cast<PublisherImpl*>(closure);
    const char* id = nullptr;
    if (msg != nullptr && natsMsgHeader_Get(msg, "Nats-Msg-Id", &id) == NATS_OK && id != nullptr) {
      if (pa != nullptr) {
        self->window_.OnAck(id, pa->Duplicate);
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
