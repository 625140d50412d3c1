#include "aftershock/zmq_transport.h"

#include <zmq.h>

#include <cerrno>
#include <cstring>
#include <utility>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "aftershock/update_batch.h"

namespace aftershock {

struct ZmqTransport::Impl {
  void* ctx = nullptr;
  ~Impl() {
    if (ctx != nullptr) zmq_ctx_term(ctx);  // waits for lingering sockets
  }
};

namespace {

absl::Status ZmqError(absl::string_view what) {
  return absl::UnavailableError(absl::StrCat(what, ": ", zmq_strerror(zmq_errno())));
}

// SUB socket as a TickSource. Frames are received into two reusable zmq_msg_t
// (no per-message allocation on our side; libzmq's own buffers are its own).
class ZmqSubscriberSource : public TickSource {
 public:
  ZmqSubscriberSource(std::shared_ptr<ZmqTransport::Impl> ctx, void* socket)
      : ctx_(std::move(ctx)), socket_(socket) {
    zmq_msg_init(&topic_);
    zmq_msg_init(&body_);
    size_t len = sizeof(fd_);
    zmq_getsockopt(socket_, ZMQ_FD, &fd_, &len);
  }
  ~ZmqSubscriberSource() override {
    zmq_msg_close(&topic_);
    zmq_msg_close(&body_);
    int linger = 0;
    zmq_setsockopt(socket_, ZMQ_LINGER, &linger, sizeof(linger));
    zmq_close(socket_);
  }

  int Pump(TickConsumer* consumer, int max_messages) override {
    int n = 0;
    while (n < max_messages) {
      if (zmq_msg_recv(&topic_, socket_, ZMQ_DONTWAIT) < 0) break;  // EAGAIN: drained
      ++n;
      if (!zmq_msg_more(&topic_)) {
        consumer->OnMalformedMessage();
        continue;
      }
      zmq_msg_recv(&body_, socket_, 0);  // parts of a message arrive together
      if (zmq_msg_more(&body_)) {
        // Three or more frames: drain the rest and reject the message once.
        while (zmq_msg_more(&body_)) zmq_msg_recv(&body_, socket_, 0);
        consumer->OnMalformedMessage();
        continue;
      }
      consumer->OnMessage(
          absl::string_view(static_cast<const char*>(zmq_msg_data(&topic_)), zmq_msg_size(&topic_)),
          absl::string_view(static_cast<const char*>(zmq_msg_data(&body_)), zmq_msg_size(&body_)));
    }
    return n;
  }

  int ReadinessFd() const override { return fd_; }

  bool MaybePending() override {
    int events = 0;
    size_t len = sizeof(events);
    if (zmq_getsockopt(socket_, ZMQ_EVENTS, &events, &len) != 0) return false;
    return (events & ZMQ_POLLIN) != 0;
  }

 private:
  std::shared_ptr<ZmqTransport::Impl> ctx_;
  void* socket_;
  int fd_ = -1;
  zmq_msg_t topic_;
  zmq_msg_t body_;
};

class ZmqPublisherSink : public UpdateSink {
 public:
  ZmqPublisherSink(std::shared_ptr<ZmqTransport::Impl> ctx, void* socket, std::string endpoint,
                   int linger_ms)
      : ctx_(std::move(ctx)), socket_(socket), endpoint_(std::move(endpoint)) {
    zmq_setsockopt(socket_, ZMQ_LINGER, &linger_ms, sizeof(linger_ms));
  }
  ~ZmqPublisherSink() override { zmq_close(socket_); }

  bool Send(absl::string_view topic, absl::string_view body) override {
    if (zmq_send(socket_, topic.data(), topic.size(), ZMQ_SNDMORE | ZMQ_DONTWAIT) < 0) {
      return false;
    }
    // The first part was queued, so the message is admitted as a whole: the
    // last part cannot hit the high-water mark.
    return zmq_send(socket_, body.data(), body.size(), ZMQ_DONTWAIT) >= 0;
  }

  std::string BoundEndpoint() const override { return endpoint_; }

 private:
  std::shared_ptr<ZmqTransport::Impl> ctx_;
  void* socket_;
  std::string endpoint_;
};

}  // namespace

absl::Status CheckEndpoint(absl::string_view endpoint) {
  for (absl::string_view scheme : {"tcp://", "ipc://", "inproc://"}) {
    if (absl::StartsWith(endpoint, scheme)) {
      if (endpoint.size() > scheme.size()) return absl::OkStatus();
      return absl::InvalidArgumentError(absl::StrCat("endpoint '", endpoint, "' has no address"));
    }
  }
  if (endpoint.find("://") != absl::string_view::npos) {
    return absl::InvalidArgumentError(absl::StrCat(
        "endpoint '", endpoint, "' uses a transport other than tcp://, ipc:// or inproc://"));
  }
  return absl::InvalidArgumentError(absl::StrCat(
      "endpoint '", endpoint, "' names no transport; did you mean 'tcp://", endpoint, "'?"));
}

ZmqTransport::ZmqTransport(std::shared_ptr<Impl> impl) : impl_(std::move(impl)) {}
ZmqTransport::~ZmqTransport() = default;

absl::StatusOr<std::unique_ptr<ZmqTransport>> ZmqTransport::Create(int io_threads) {
  auto impl = std::make_shared<Impl>();
  impl->ctx = zmq_ctx_new();
  if (impl->ctx == nullptr) return ZmqError("cannot create a ZeroMQ context");
  zmq_ctx_set(impl->ctx, ZMQ_IO_THREADS, io_threads < 1 ? 1 : io_threads);
  return std::unique_ptr<ZmqTransport>(new ZmqTransport(std::move(impl)));
}

namespace {

// Closes a socket that failed its set-up (no linger) and returns the error.
absl::Status CloseWithError(void* socket, absl::string_view what) {
  absl::Status st = ZmqError(what);
  int linger = 0;
  zmq_setsockopt(socket, ZMQ_LINGER, &linger, sizeof(linger));
  zmq_close(socket);
  return st;
}

}  // namespace

absl::StatusOr<std::unique_ptr<TickSource>> ZmqTransport::Subscribe(
    const FeedConfig& feed, const ZmqSubscriberOptions& options) {
  void* s = zmq_socket(impl_->ctx, ZMQ_SUB);
  if (s == nullptr) return ZmqError("cannot create the SUB socket");
  auto fail = [s](absl::string_view what) { return CloseWithError(s, what); };
  int hwm = static_cast<int>(options.receive_hwm);
  if (zmq_setsockopt(s, ZMQ_RCVHWM, &hwm, sizeof(hwm)) != 0) return fail("[feed] ZMQ_RCVHWM");
  if (!feed.curve_server_key.empty()) {
    char pub[41], sec[41];
    if (zmq_curve_keypair(pub, sec) != 0) return fail("[feed] CURVE keypair");
    if (zmq_setsockopt(s, ZMQ_CURVE_SERVERKEY, feed.curve_server_key.c_str(), 40) != 0 ||
        zmq_setsockopt(s, ZMQ_CURVE_PUBLICKEY, pub, 40) != 0 ||
        zmq_setsockopt(s, ZMQ_CURVE_SECRETKEY, sec, 40) != 0) {
      return fail("[feed] curve_server_key");
    }
  }
  if (zmq_setsockopt(s, ZMQ_SUBSCRIBE, "", 0) != 0) return fail("[feed] subscribe");
  for (const std::string& ep : feed.endpoints) {
    if (absl::Status c = CheckEndpoint(ep); !c.ok()) {
      zmq_close(s);
      return absl::InvalidArgumentError(absl::StrCat("[feed] ", c.message()));
    }
    if (zmq_connect(s, ep.c_str()) != 0) {
      return fail(absl::StrCat("[feed] cannot connect to '", ep, "'"));
    }
  }
  return std::unique_ptr<TickSource>(new ZmqSubscriberSource(impl_, s));
}

absl::StatusOr<std::unique_ptr<UpdateSink>> ZmqTransport::Publish(
    const PublishConfig& publish, const ZmqPublisherOptions& options) {
  if (absl::Status c = CheckEndpoint(publish.endpoint); !c.ok()) {
    return absl::InvalidArgumentError(absl::StrCat("[publish] ", c.message()));
  }
  void* s = zmq_socket(impl_->ctx, ZMQ_PUB);
  if (s == nullptr) return ZmqError("cannot create the PUB socket");
  auto fail = [s](absl::string_view what) { return CloseWithError(s, what); };
  int hwm = static_cast<int>(publish.high_water_mark);
  if (zmq_setsockopt(s, ZMQ_SNDHWM, &hwm, sizeof(hwm)) != 0) return fail("[publish] ZMQ_SNDHWM");
  int one = 1;
  if (zmq_setsockopt(s, ZMQ_XPUB_NODROP, &one, sizeof(one)) != 0) {
    return fail("[publish] ZMQ_XPUB_NODROP");
  }
  if (!publish.curve_secret_key.empty()) {
    if (zmq_setsockopt(s, ZMQ_CURVE_SERVER, &one, sizeof(one)) != 0 ||
        zmq_setsockopt(s, ZMQ_CURVE_SECRETKEY, publish.curve_secret_key.c_str(), 40) != 0) {
      return fail("[publish] curve_secret_key");
    }
  }
  if (zmq_bind(s, publish.endpoint.c_str()) != 0) {
    return fail(absl::StrCat("[publish] cannot bind '", publish.endpoint, "'"));
  }
  char buf[256];
  size_t len = sizeof(buf);
  std::string bound = publish.endpoint;
  if (zmq_getsockopt(s, ZMQ_LAST_ENDPOINT, buf, &len) == 0 && len > 0) {
    bound.assign(buf, strnlen(buf, len));
  }
  // [publish] update_topics "batch"/"both": update batches on b.u (update_batch.h).
  return MaybeBatchUpdates(publish, std::unique_ptr<UpdateSink>(
                                        new ZmqPublisherSink(impl_, s, bound, options.linger_ms)));
}

}  // namespace aftershock
