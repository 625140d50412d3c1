// Engine: the live streaming engine (PRODUCT.md C4, C6, C10). An IngestCore
// (ingest_core.h) driven by a Boost.Asio event loop on ONE ingest thread that
// owns all per-symbol state:
//   * the source's readiness descriptor (ZMQ_FD of the SUB socket) waited on
//     with an asio::posix::stream_descriptor; on readiness the loop drains the
//     socket in rounds of `max_messages_per_round` messages, re-checking
//     ZMQ_EVENTS before it waits again (ZMQ_FD is edge-triggered, so waiting
//     while a message is queued would stall);
//   * a steady_timer ticking every `clock_tick` for the clock close of idle
//     bars ([bars] grace) and the observers' OnClock (stale-feed checks); a
//     tick's bar closes run in slices of `clock_slice_bars`, re-posted as
//     loop work so that input rounds run between them (a universe of
//     one-minute bars closing at once, each applying a refit, is close to a
//     second of work); a timer expiring while a tick is still under way
//     starts the next tick when that one ends;
//   * SIGINT/SIGTERM (optional): the handler runs between rounds, so the
//     current batch is finished; then the sink is flushed and Run() returns OK;
//   * the HTTP health/metrics endpoint (optional, Boost.Beast), whose handlers
//     read the counters on this same thread; the clock tick also samples the
//     counters into a RejectWindow, so /health turns "degraded" (HTTP 503)
//     when most inputs of the last minute were rejected.
// Why an event-driven wait and not a busy poll loop by default: the engine
// shares cores with refit workers, and an idle feed must cost no CPU; an epoll
// wake-up is a few microseconds, inside the latency target (P4). A round limit
// keeps timers and signals served under a saturating feed.
// Low-latency mode ([feed] busy_poll_us > 0, for a dedicated core): the
// ingest thread polls the socket without sleeping (ZMQ_DONTWAIT receives in
// slices of 20 us, the loop's timers and posted work served between slices)
// and waits on the descriptor again only after busy_poll_us without a
// message; it saves the thread wake-up per message at the price of one core
// at 100 %.
// After each drain and each clock tick the sink's EndRound() is called (it
// sends update batches, update_batch.h).
//
// Integration: add BarObservers to core() before Run(); use Post() from other
// threads to run code on the ingest thread (e.g. to drain refit results; the
// closure may call core()->SwapModel, which is then at a bar boundary).
//
// Thread-safety: Run() on one thread; Stop() and Post() from any thread;
// everything else on the ingest thread (or before Run / after it returns).
#ifndef AFTERSHOCK_ENGINE_H_
#define AFTERSHOCK_ENGINE_H_

#include <cstdint>
#include <functional>
#include <memory>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_metrics.h"
#include "aftershock/ingest_core.h"
#include "aftershock/tick_source.h"
#include "aftershock/update_sink.h"

namespace aftershock {

struct EngineOptions {
  // Period of the clock tick (bar closes, observers' OnClock), ns. 0 = derived:
  // grace / 2 clamped to [1 ms, 100 ms] with time bars, 100 ms otherwise.
  int64_t clock_tick_ns = 0;
  // Messages handled per readiness round before timers and signals get a turn.
  int max_messages_per_round = 4096;
  // A clock tick's bar closes are spread over turns of the event loop
  // (IngestCore::StartClock/ContinueClock), input rounds in between: each
  // turn closes at most this many bars (about 8 µs each with a refit applied
  // at the close, 0.5 µs without) and visits at most clock_slice_symbols
  // symbols. 0 = the whole tick in one turn. Default 4: a slice of closes
  // that each apply a refit takes about 0.03 ms, the most it adds to a tick
  // arriving meanwhile. scale_bench, 100,000 instruments, one worker: ingest
  // p99 489 us with 64, 149-205 us with 16 (371 us for the ticks due in a
  // minute's first 2 s, where the closes apply the refits), 82-113 us with 4
  // (217 us in the first 2 s; with 2 window copies per input batch instead
  // of 8); 62-81 us without refits.
  int clock_slice_bars = 4;
  // Symbols visited per turn of a clock tick (see clock_slice_bars); >= 1.
  // Passing a symbol with nothing due reads 8 bytes (about 1 ns). Default 4096.
  int clock_slice_symbols = 4096;
  // Handle SIGINT and SIGTERM (stop gracefully). Off for engines inside tests.
  bool handle_signals = false;
  // Serve GET /health and GET /metrics (Prometheus text) at [http] endpoint
  // on the engine's loop when [http] enabled. Off by default here;
  // CreateFromConfig turns it on.
  bool serve_http = false;
};

class MetricsHttpServer;
class PartitionLanes;

class Engine {
 public:
  // Takes ownership of source and sink; `clock` must outlive the engine
  // (SystemClock() for live use). InvalidArgument for a bad model/outputs config.
  // REQUIRES: source, sink, clock non-null.
  static absl::StatusOr<std::unique_ptr<Engine>> Create(const EngineConfig& config,
                                                        std::unique_ptr<TickSource> source,
                                                        std::unique_ptr<UpdateSink> sink,
                                                        Clock* clock,
                                                        const EngineOptions& options = {});
  // Live engine from the config alone: ZeroMQ SUB per [feed] (or, with [feed]
  // source = "nats", the NatsFeed of [nats] with one engine state per held
  // partition (partition_lanes.h; the engine's own core then takes no ticks),
  // whose figures join /metrics and /health), ZeroMQ PUB per [publish] (plus a NATS copy of the
  // updates with [nats] updates_subject), the system clock, signal handling on.
  static absl::StatusOr<std::unique_ptr<Engine>> CreateFromConfig(const EngineConfig& config);
  ~Engine();

  // Runs the event loop until Stop(), a signal, or the end of a finite source
  // (then open time bars are closed). Call it once.
  // Flushes the sink before returning. Returns the sink's flush error or the
  // source's error, else OK.
  absl::Status Run();
  // Asks Run() to return after the current round. Thread-safe; idempotent.
  void Stop();
  // Runs fn on the ingest thread as soon as the current round ends. Thread-safe.
  void Post(std::function<void()> fn);

  IngestCore* core() { return core_.get(); }
  UpdateSink* sink() { return sink_.get(); }
  // The partition lanes of the NATS feed (CreateFromConfig with [feed]
  // source = "nats"), else null.
  const PartitionLanes* lanes() const { return lanes_.get(); }
  std::string BoundEndpoint() const { return sink_->BoundEndpoint(); }
  // True once Run() has entered its loop (tests wait on it).
  bool running() const;
  // The bound HTTP endpoint ("127.0.0.1:7310"), "" when not serving.
  std::string HttpEndpoint() const;
  // What GET /health answers now (ingest thread, or before Run / after it returns).
  HealthStatus Health() const;

  struct Loop;

 private:
  Engine() = default;
  EngineConfig config_;
  EngineOptions options_;
  Clock* clock_ = nullptr;
  std::unique_ptr<TickSource> source_;
  std::unique_ptr<UpdateSink> sink_;
  std::unique_ptr<IngestCore> core_;
  // [feed] source = "nats": the partition lanes (partition_lanes.h) the feed
  // delivers to; destroyed before the core and the sink they use.
  std::shared_ptr<PartitionLanes> lanes_;
  std::unique_ptr<Loop> loop_;
  std::unique_ptr<RejectWindow> reject_window_;  // ingest thread; before http_ (outlives it)
  std::unique_ptr<MetricsHttpServer> http_;      // after loop_: destroyed before it
  std::shared_ptr<void> transport_;  // keeps the ZeroMQ context of CreateFromConfig alive
};

}  // namespace aftershock

#endif  // AFTERSHOCK_ENGINE_H_
