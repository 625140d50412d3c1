#include "aftershock/engine.h"

#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <boost/asio/io_context.hpp>
#include <boost/asio/posix/stream_descriptor.hpp>
#include <boost/asio/post.hpp>
#include <boost/asio/signal_set.hpp>
#include <boost/asio/steady_timer.hpp>
#include <chrono>
#include <csignal>
#include <limits>
#include <utility>

#include "aftershock/engine_metrics.h"
#include "aftershock/nats_feed.h"
#include "aftershock/nats_update_sink.h"
#include "aftershock/partition_lanes.h"
#include "aftershock/zmq_transport.h"
#include "streaming/metrics_http.h"

namespace aftershock {

namespace asio = boost::asio;

struct Engine::Loop {
  asio::io_context io{1};
  std::unique_ptr<asio::posix::stream_descriptor> readiness;
  std::unique_ptr<asio::steady_timer> timer;
  std::unique_ptr<asio::signal_set> signals;
  std::atomic<bool> running{false};
  std::atomic<bool> stop_requested{false};
  bool source_ended = false;
};

absl::StatusOr<std::unique_ptr<Engine>> Engine::Create(const EngineConfig& config,
                                                       std::unique_ptr<TickSource> source,
                                                       std::unique_ptr<UpdateSink> sink,
                                                       Clock* clock, const EngineOptions& options) {
  auto core = IngestCore::Create(config, sink.get(), clock);
  if (!core.ok()) return core.status();
  std::unique_ptr<Engine> e(new Engine());
  e->config_ = config;
  e->options_ = options;
  if (e->options_.max_messages_per_round < 1) e->options_.max_messages_per_round = 1;
  if (e->options_.clock_tick_ns <= 0) {
    constexpr int64_t kMs = 1000000;
    e->options_.clock_tick_ns = config.bars.interval_ns > 0
                                    ? std::clamp<int64_t>(config.bars.grace_ns / 2, kMs, 100 * kMs)
                                    : 100 * kMs;
  }
  e->clock_ = clock;
  e->source_ = std::move(source);
  e->sink_ = std::move(sink);
  e->core_ = *std::move(core);
  // A sink with metrics of its own (update batches) joins /metrics.
  if (const MetricsSource* m = e->sink_->metrics()) e->core_->AddMetricsSource(m);
  e->loop_ = std::make_unique<Loop>();
  // The window starts empty-handed: its first sample is the zero counters now.
  e->reject_window_ = std::make_unique<RejectWindow>();
  e->reject_window_->Sample(e->core_->counters(), clock->NowNs());
  if (options.serve_http && config.http.enabled) {
    IngestCore* core_ptr = e->core_.get();
    RejectWindow* window = e->reject_window_.get();
    auto http = MetricsHttpServer::Start(
        &e->loop_->io, config.http.endpoint,
        [core_ptr, window, clock] { return CheckHealth(*core_ptr, *window, clock->NowNs()); },
        [core_ptr] { return FormatPrometheusMetrics(*core_ptr); });
    if (!http.ok()) return http.status();
    e->http_ = *std::move(http);
  }
  return e;
}

absl::StatusOr<std::unique_ptr<Engine>> Engine::CreateFromConfig(const EngineConfig& config) {
  auto transport = ZmqTransport::Create(1);
  if (!transport.ok()) return transport.status();
  // The sink first: a publish endpoint that cannot be bound fails before the
  // NATS feed claims any partition.
  auto sink = (*transport)->Publish(config.publish);
  if (!sink.ok()) return sink.status();
  if (!config.nats.updates_subject.empty()) {  // a NATS copy of the updates
    auto tee = NatsUpdateSink::Open(config.nats, *std::move(sink));
    if (!tee.ok()) return tee.status();
    sink = std::unique_ptr<UpdateSink>(*std::move(tee));
  }
  absl::StatusOr<std::unique_ptr<TickSource>> source;
  const MetricsSource* source_metrics = nullptr;
  NatsFeed* nats_feed = nullptr;
  std::shared_ptr<PartitionLanes> lanes;
  if (config.feed.source == FeedSource::kNats) {
    // One engine state per held partition (partition_lanes.h), checkpointed
    // into JetStream and handed over with its partition.
    auto l = PartitionLanes::Create(config, sink->get(), SystemClock());
    if (!l.ok()) return l.status();
    lanes = *std::move(l);
    NatsFeedOptions fo;
    fo.partitions = lanes.get();
    auto feed = NatsFeed::Open(config, fo);
    if (!feed.ok()) return feed.status();
    source_metrics = feed->get();
    nats_feed = feed->get();
    source = std::unique_ptr<TickSource>(*std::move(feed));
  } else {
    source = (*transport)->Subscribe(config.feed);
  }
  if (!source.ok()) return source.status();
  EngineOptions options;
  options.handle_signals = true;
  options.serve_http = true;
  auto engine = Create(config, *std::move(source), *std::move(sink), SystemClock(), options);
  if (!engine.ok()) return engine.status();
  // The feed outlives the core's use of it: both belong to the engine, and
  // the core (destroyed first) only reads it from the ingest thread.
  if (source_metrics != nullptr) (*engine)->core()->AddMetricsSource(source_metrics);
  if (lanes != nullptr) {
    // Lanes first: the clock closes their bars before the feed checkpoints.
    (*engine)->core()->AddObserver(lanes.get());
    (*engine)->core()->AddObserver(nats_feed);
    (*engine)->core()->AddMetricsSource(lanes.get());
    (*engine)->lanes_ = std::move(lanes);
  }
  (*engine)->transport_ = std::shared_ptr<ZmqTransport>(std::move(*transport));
  return engine;
}

Engine::~Engine() {
  http_.reset();
  if (loop_ && loop_->readiness) loop_->readiness->release();  // the fd belongs to ZeroMQ
}

bool Engine::running() const { return loop_->running.load(); }

HealthStatus Engine::Health() const {
  return CheckHealth(*core_, *reject_window_, clock_->NowNs());
}

std::string Engine::HttpEndpoint() const { return http_ ? http_->endpoint() : ""; }

void Engine::Stop() {
  loop_->stop_requested.store(true);
  asio::post(loop_->io, [this] { loop_->io.stop(); });
}

void Engine::Post(std::function<void()> fn) { asio::post(loop_->io, std::move(fn)); }

absl::Status Engine::Run() {
  Loop& L = *loop_;
  L.io.restart();
  const int round = options_.max_messages_per_round;

  // Readiness: drain up to `round` messages; if the round was full or
  // ZMQ_EVENTS still reports input, continue via post() (timers and signals
  // get their turn in between), else wait for the next edge. Each drain ends
  // a round of input for the sink (update batches are sent).
  //
  // Low-latency mode ([feed] busy_poll_us > 0): instead of waiting for the
  // edge, the drain keeps polling the socket (Pump: zmq_msg_recv with
  // ZMQ_DONTWAIT) for slices of kSpinSlice, re-posting itself between slices
  // so timers, signals and Post()ed work run (the loop's own poll of its
  // descriptors, a non-blocking epoll_wait, then comes at most once a
  // slice); only when busy_poll_us passed without a message does it wait on
  // the descriptor again. Costs one core at 100 % while ticks arrive.
  const int fd = source_->ReadinessFd();
  using SteadyClock = std::chrono::steady_clock;
  const auto spin_window = std::chrono::microseconds(config_.feed.busy_poll_us);
  const bool spin = config_.feed.busy_poll_us > 0 && fd >= 0;
  constexpr auto kSpinSlice = std::chrono::microseconds(20);
  SteadyClock::time_point last_input = SteadyClock::now();
  std::function<void()> arm;
  // One drain of up to `round` messages; false at the end of the input (the
  // loop is then stopped).
  auto pump = [&](int* n) {
    *n = source_->Pump(core_.get(), round);
    if (*n != TickSource::kEndOfInput) return true;
    L.source_ended = true;
    L.io.stop();
    return false;
  };
  std::function<void()> drain = [&] {
    if (L.stop_requested.load()) return;
    int n = 0;
    if (!pump(&n)) return;
    sink_->EndRound();
    if (spin) {
      auto now = SteadyClock::now();
      if (n > 0) last_input = now;
      const auto slice_end = now + kSpinSlice;
      while (n < round && now < slice_end && !L.stop_requested.load(std::memory_order_relaxed)) {
        if (!pump(&n)) return;
        now = SteadyClock::now();
        if (n > 0) {
          sink_->EndRound();
          last_input = now;
        }
      }
      if (now - last_input < spin_window) {
        asio::post(L.io, drain);
        return;
      }
    }
    if (n >= round || fd < 0 || source_->MaybePending()) {
      asio::post(L.io, drain);
    } else {
      arm();
    }
  };
  arm = [&] {
    L.readiness->async_wait(asio::posix::descriptor_base::wait_read,
                            [&](const boost::system::error_code& ec) {
                              if (!ec) drain();
                            });
  };

  if (fd >= 0) {
    if (!L.readiness) L.readiness = std::make_unique<asio::posix::stream_descriptor>(L.io, fd);
    // Input may already be queued (the edge may have passed before we waited).
    asio::post(L.io, drain);
  } else {
    asio::post(L.io, drain);  // always-ready source: drain() re-posts itself
  }

  L.timer = std::make_unique<asio::steady_timer>(L.io);
  const auto period = std::chrono::nanoseconds(options_.clock_tick_ns);
  // A clock tick's bar closes, a slice per turn of the loop (posted work runs
  // in order with the drains, so queued input gets a round between slices;
  // clock_slice_bars = 0: one unbounded slice, the whole tick). A timer that
  // expires during a tick is remembered, not stacked: the next tick starts
  // when this one ends, at the time it starts.
  constexpr int kWhole = std::numeric_limits<int>::max();
  const bool sliced = options_.clock_slice_bars > 0;
  const int slice_bars = sliced ? options_.clock_slice_bars : kWhole;
  const int slice_symbols = sliced ? std::max(1, options_.clock_slice_symbols) : kWhole;
  bool tick_missed = false;
  std::function<void()> sweep = [&] {
    if (L.stop_requested.load()) return;
    const bool more = core_->ContinueClock(slice_bars, slice_symbols);
    sink_->EndRound();  // the updates of bars the clock closed
    if (more) {
      asio::post(L.io, sweep);
    } else if (tick_missed) {
      tick_missed = false;
      core_->StartClock(clock_->NowNs());
      asio::post(L.io, sweep);
    }
  };
  std::function<void()> schedule = [&] {
    L.timer->expires_after(period);
    L.timer->async_wait([&](const boost::system::error_code& ec) {
      if (ec) return;
      const int64_t now = clock_->NowNs();
      if (core_->clock_under_way()) {
        tick_missed = true;
      } else {
        core_->StartClock(now);
        sweep();
      }
      reject_window_->Sample(core_->counters(), now);
      schedule();
    });
  };
  schedule();

  if (options_.handle_signals) {
    L.signals = std::make_unique<asio::signal_set>(L.io, SIGINT, SIGTERM);
    L.signals->async_wait([&](const boost::system::error_code& ec, int) {
      if (!ec) {
        L.stop_requested.store(true);
        L.io.stop();
      }
    });
  }

  L.running.store(true);
  if (!L.stop_requested.load()) L.io.run();
  L.running.store(false);
  L.stop_requested.store(true);  // Run() runs once; pending drains become no-ops

  // Leave no handler referring to this frame's closures.
  if (L.readiness) L.readiness->cancel();
  L.timer->cancel();
  if (L.signals) L.signals->cancel();
  if (http_) http_->Close();
  L.io.restart();
  L.io.poll();
  L.signals.reset();
  L.timer.reset();

  // A clock tick the loop left under way ends here (its observers' OnClock
  // included), as if it had run whole.
  core_->FinishClock();
  if (L.source_ended) core_->CloseAllOpenBars();
  source_->OnStopped();
  absl::Status flushed = sink_->Flush();
  if (!flushed.ok()) return flushed;
  return source_->status();
}

}  // namespace aftershock
