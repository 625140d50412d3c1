// End-to-end engine benchmark (PRODUCT.md P3, P4, P6), one run, one table:
//   * raw ZeroMQ pass-through: feed PUB -> forwarder (SUB->PUB, no processing)
//     -> consumer SUB, the same single-tick messages the engine gets; raw and
//     the engine's one-tick-a-message rows run in 3 alternated rounds, and a
//     share of raw is the median of the rounds' ratios (the latency rows
//     likewise, with the overhead over raw a median of differences); in each
//     round also a raw forwarder that sends bodies of the engine's update
//     size (what the larger message alone costs ZeroMQ), and every such row
//     prints the process's CPU time and context switches per tick;
//   * engine throughput: feed PUB -> Engine (SUB, ingest core, PUB) -> consumer
//     SUB, one tick per message and batched frames (updates are always one
//     message each), and its ingest alone (updates encoded, then discarded);
//   * tick-in -> update-out latency at a fixed offered rate (default 100k
//     ticks/s): the tick's t is CLOCK_REALTIME at send, the consumer subtracts
//     it from CLOCK_REALTIME at receipt (both hops of loopback TCP included);
//   * replay speed: the ingest core alone on pre-parsed ticks, output encoded
//     and handed to a discarding sink, one core; and the full CSV path.
// Binary encoding carries the targets; JSON is reported beside it.
//   * outbound update batches ([publish] update_topics = "batch",
//     update_batch.h): the engine end to end with one tick per message and
//     with batched frames, its updates counted inside the batches on b.u;
//   * the low-latency mode ([feed] busy_poll_us): the latency rows again with
//     the engine's ingest thread busy-polling its SUB socket, beside a raw
//     forwarder that busy-polls too, with the process's CPU use (cores)
//     during each latency run;
//   * (--checkpoint-latency, alone) tick->update latency for 10,000 symbols
//     with refit services, with and without checkpoints every second.
//   * (--checkpoint-cost, alone) the checkpoint's ingest-thread capture
//     (live, refilled in place, against a whole capture), serialize and write
//     times and size for 1,000 and 10,000 symbols, apart from the feed.
// Usage: engine_bench [--quick] [--replay-only] [--latency-only]
//        | --checkpoint-latency [symbols [slice [rounds]]] | --checkpoint-cost | --help
// (kUsage below; an unknown flag is an error).
#include <sys/prctl.h>
#include <sys/resource.h>
#include <time.h>

#include <algorithm>
#include <atomic>
#include <charconv>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <future>
#include <string>
#include <thread>
#include <vector>
#include <zmq.hpp>

#include "absl/strings/str_cat.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/checkpointer.h"
#include "aftershock/engine.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/tick_file.h"
#include "aftershock/update_batch.h"
#include "aftershock/update_codec.h"
#include "aftershock/wire.h"
#include "aftershock/zmq_transport.h"

namespace aftershock {
namespace {

constexpr int64_t kT0 = 1772443800000000000;
constexpr int kSymbols = 100;

int64_t RealNs() {
  timespec ts;
  clock_gettime(CLOCK_REALTIME, &ts);
  return int64_t{ts.tv_sec} * 1000000000 + ts.tv_nsec;
}
double Secs(std::chrono::steady_clock::time_point a, std::chrono::steady_clock::time_point b) {
  return std::chrono::duration<double>(b - a).count();
}

std::string Sym(int i) {
  char b[16];
  std::snprintf(b, sizeof(b), "SYM%03d.B", i);
  return b;
}

EngineConfig BenchConfig(WireEncoding enc) {
  EngineConfig c;
  c.feed.encoding = enc;
  c.feed.max_message_bytes = 16 << 20;
  c.publish.encoding = enc;
  c.publish.high_water_mark = 1 << 30;  // no drops: throughput, not shedding, is measured
  c.publish.endpoint = "tcp://127.0.0.1:*";
  auto spec = MakeModelSpec("constant", {}, "garch", {1, 1}, "student");
  auto p = ModelParams::FromNamed(
      *spec, {{"mu", 0.0002}, {"omega", 2e-6}, {"alpha_1", 0.08}, {"beta_1", 0.9}, {"nu", 7}});
  c.model.spec = *spec;
  c.model.has_params = true;
  c.model.params = *p;
  c.http.enabled = false;
  return c;
}

Tick MakeTick(int sym, int64_t t, double r) {
  Tick k;
  k.symbol.assign(Sym(sym));
  k.t_ns = t;
  k.kind = Tick::kReturn;
  k.value = r;
  return k;
}

double Ret(uint64_t i) {  // cheap deterministic pseudo-return
  uint64_t x = i * 0x9E3779B97F4A7C15ull;
  x ^= x >> 29;
  return (static_cast<double>(x % 20001) - 10000.0) * 1e-6;
}

struct Msg {
  std::string topic, body;
};

// Single-tick messages, symbols round-robin, strictly increasing t per symbol.
std::vector<Msg> SingleMessages(int n, WireEncoding enc) {
  std::vector<Msg> out(n);
  for (int i = 0; i < n; ++i) {
    Tick t = MakeTick(i % kSymbols, kT0 + i, Ret(i));
    out[i].topic = std::string(t.symbol.view());
    if (enc == WireEncoding::kBinary)
      EncodeTickBinary(t, &out[i].body);
    else
      EncodeTickJson(t, &out[i].body);
  }
  return out;
}

std::vector<Msg> BatchMessages(int n_ticks, int batch, WireEncoding enc) {
  std::vector<Msg> out;
  std::vector<Tick> ticks;
  for (int i = 0; i < n_ticks; ++i) {
    ticks.push_back(MakeTick(i % kSymbols, kT0 + i, Ret(i)));
    if (static_cast<int>(ticks.size()) == batch || i + 1 == n_ticks) {
      Msg m;
      m.topic = "*";
      if (enc == WireEncoding::kBinary)
        EncodeBatchBinary(ticks, &m.body);
      else
        EncodeBatchJson(ticks, &m.body);
      out.push_back(std::move(m));
      ticks.clear();
    }
  }
  return out;
}

void Send(zmq::socket_t& s, const Msg& m) {
  s.send(zmq::buffer(m.topic), zmq::send_flags::sndmore);
  s.send(zmq::buffer(m.body), zmq::send_flags::none);
}

// Something between the feed PUB and the consumer SUB.
struct Middle {
  virtual ~Middle() = default;
  virtual std::string OutEndpoint() = 0;
  virtual void Stop() = 0;
};

// Its own context (one I/O thread), as the engine has: the same thread
// topology, so the comparison isolates the engine's processing.
// With `spin` it busy-polls its SUB socket (receives with ZMQ_DONTWAIT in a
// loop, never sleeping), the raw counterpart of the engine's [feed]
// busy_poll_us. With `out_bytes` > 0 it sends a body of that many bytes
// instead of the one received: the size of the engine's update, to show what
// the larger outbound message alone costs ZeroMQ.
struct Forwarder : Middle {
  Forwarder(const std::string& feed, bool spin, size_t out_bytes = 0)
      : ctx(1), in(ctx, zmq::socket_type::sub), out(ctx, zmq::socket_type::pub) {
    in.set(zmq::sockopt::rcvhwm, 0);
    in.set(zmq::sockopt::subscribe, "");
    in.connect(feed);
    out.set(zmq::sockopt::sndhwm, 0);
    out.bind("tcp://127.0.0.1:*");
    endpoint = out.get(zmq::sockopt::last_endpoint);
    th = std::thread([this, spin, out_bytes] {
      zmq::message_t a, b;
      const std::string sized(out_bytes, 'u');
      while (!stop.load(std::memory_order_relaxed)) {
        zmq::pollitem_t it{in.handle(), 0, ZMQ_POLLIN, 0};
        if (!spin && zmq::poll(&it, 1, std::chrono::milliseconds(20)) <= 0) continue;
        while (in.recv(a, zmq::recv_flags::dontwait)) {
          if (!in.recv(b)) break;
          out.send(a, zmq::send_flags::sndmore);
          if (out_bytes > 0) {
            out.send(zmq::buffer(sized), zmq::send_flags::none);
          } else {
            out.send(b, zmq::send_flags::none);
          }
        }
      }
    });
  }
  ~Forwarder() override { Stop(); }
  std::string OutEndpoint() override { return endpoint; }
  void Stop() override {
    stop = true;
    if (th.joinable()) th.join();
  }
  zmq::context_t ctx;
  zmq::socket_t in, out;
  std::string endpoint;
  std::atomic<bool> stop{false};
  std::thread th;
};

// The live engine's extras for the checkpoint scenario: refit services (their
// rolling windows are most of a checkpoint) and, with a path, the
// checkpointer, attached as `aftershock run` attaches them.
struct LiveExtras {
  bool services = false;
  std::string checkpoint_path;  // "" = no checkpoints
  double every_seconds = 1;
  int slice_symbols = 0;     // CheckpointerOptions::slice_symbols (0: one pause)
  bool writer_idle = false;  // CheckpointerOptions::writer_idle
  int64_t max_symbols = 10000;
  // [publish] update_topics of the engine (update batches).
  UpdateTopics update_topics = UpdateTopics::kSymbol;
  // [feed] busy_poll_us of the engine; > 0 also makes the raw forwarder spin.
  int64_t busy_poll_us = 0;
};

EngineConfig LiveConfig(const EngineConfig& base, const LiveExtras& x) {
  EngineConfig c = base;
  c.limits.max_symbols = x.max_symbols;
  c.publish.update_topics = x.update_topics;
  c.feed.busy_poll_us = x.busy_poll_us;
  if (x.services) {
    // Refits on (windows and schedules held and checkpointed) but never due
    // during the run, so fits do not compete for the CPU being measured.
    c.refit.every_bars = 1000000000;
    c.refit.window = 200;
    c.refit.min_bars = 150;
  }
  return c;
}

struct EngineMiddle : Middle {
  EngineMiddle(const std::string& feed, WireEncoding enc, const LiveExtras& x = {}) {
    EngineConfig c = LiveConfig(BenchConfig(enc), x);
    c.feed.endpoints = {feed};
    transport = *ZmqTransport::Create(1);
    ZmqSubscriberOptions so;
    so.receive_hwm = 0;
    auto src = transport->Subscribe(c.feed, so);
    auto sink = transport->Publish(c.publish);
    if (!src.ok() || !sink.ok()) {
      std::fprintf(stderr, "engine sockets failed\n");
      std::exit(1);
    }
    engine = *Engine::Create(c, *std::move(src), *std::move(sink), SystemClock());
    if (x.services) {
      ServiceOptions so;
      so.mode = RefitMode::kLive;
      services = *EngineServices::Attach(engine->core(), c, so);
    }
    if (!x.checkpoint_path.empty()) {
      CheckpointerOptions co;
      co.path = x.checkpoint_path;
      co.every_seconds = x.every_seconds;
      co.slice_symbols = x.slice_symbols;
      co.writer_idle = x.writer_idle;
      checkpointer = *Checkpointer::Create(co, c, engine->core(), services.get(), SystemClock());
      engine->core()->AddObserver(checkpointer.get());
    }
    th = std::thread([this] { (void)engine->Run(); });
  }
  ~EngineMiddle() override { Stop(); }
  std::string OutEndpoint() override { return engine->BoundEndpoint(); }
  void Stop() override {
    if (th.joinable()) {
      engine->Stop();
      th.join();
    }
  }
  std::unique_ptr<ZmqTransport> transport;
  std::unique_ptr<Engine> engine;
  std::unique_ptr<EngineServices> services;    // after engine: destroyed first
  std::unique_ptr<Checkpointer> checkpointer;  // after services: destroyed first
  std::thread th;
};

// The update count in a batch's header: binary bytes 2..3, JSON {"n":<count>.
uint64_t BatchCount(const zmq::message_t& m, WireEncoding enc) {
  const char* p = static_cast<const char*>(m.data());
  if (enc == WireEncoding::kBinary) {
    if (m.size() < 4) return 0;
    return static_cast<uint8_t>(p[2]) | (static_cast<uint64_t>(static_cast<uint8_t>(p[3])) << 8);
  }
  uint64_t n = 0;
  if (m.size() > 5) std::from_chars(p + 5, p + m.size(), n);
  return n;
}

struct Rig {
  zmq::context_t ctx{1};
  zmq::socket_t feed{ctx, zmq::socket_type::pub};
  zmq::socket_t sub{ctx, zmq::socket_type::sub};
  std::string feed_ep;
  std::unique_ptr<Middle> mid;

  // out_bytes: the raw forwarder's outbound body size (0: the tick as received).
  Rig(bool engine, WireEncoding enc, const LiveExtras& extras = {}, size_t out_bytes = 0) {
    feed.set(zmq::sockopt::sndhwm, 0);
    feed.bind("tcp://127.0.0.1:*");
    feed_ep = feed.get(zmq::sockopt::last_endpoint);
    if (engine)
      mid = std::make_unique<EngineMiddle>(feed_ep, enc, extras);
    else
      mid = std::make_unique<Forwarder>(feed_ep, extras.busy_poll_us > 0, out_bytes);
    sub.set(zmq::sockopt::rcvhwm, 0);
    sub.set(zmq::sockopt::subscribe, "");
    sub.connect(mid->OutEndpoint());
    // Slow joiner: probes until one comes through.
    Tick p = MakeTick(999, 0, 0.001);
    p.symbol.assign("PROBE");
    Msg m;
    m.topic = "PROBE";
    for (int i = 0;; ++i) {
      p.t_ns = kT0 - 1000000000 + i;
      if (enc == WireEncoding::kBinary)
        EncodeTickBinary(p, &m.body);
      else
        EncodeTickJson(p, &m.body);
      Send(feed, m);
      zmq::pollitem_t it{sub.handle(), 0, ZMQ_POLLIN, 0};
      if (zmq::poll(&it, 1, std::chrono::milliseconds(5)) > 0) break;
      if (i > 4000) {
        std::fprintf(stderr, "subscription never became live\n");
        std::exit(1);
      }
    }
    // Drain whatever probes are still under way.
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
    zmq::message_t a;
    while (sub.recv(a, zmq::recv_flags::dontwait)) {
    }
  }
  ~Rig() { mid->Stop(); }

  // Sends all messages as fast as possible; returns seconds until `expect`
  // messages (single frames pairs) arrived at the consumer, or -1 on timeout.
  // With `batches`, every message is an update batch (update_batch.h) and
  // its updates are counted (the count in its header).
  double Throughput(const std::vector<Msg>& msgs, uint64_t expect, uint64_t* received,
                    bool batches = false, WireEncoding enc = WireEncoding::kBinary) {
    const auto start = std::chrono::steady_clock::now();
    std::thread producer([&] {
      for (const Msg& m : msgs) Send(feed, m);
    });
    uint64_t got = 0;
    zmq::message_t a, b;
    auto last = start;
    while (got < expect) {
      zmq::pollitem_t it{sub.handle(), 0, ZMQ_POLLIN, 0};
      if (zmq::poll(&it, 1, std::chrono::milliseconds(2000)) <= 0) break;  // stalled
      while (sub.recv(a, zmq::recv_flags::dontwait)) {
        (void)sub.recv(b);
        got += batches ? BatchCount(b, enc) : 1;
      }
      last = std::chrono::steady_clock::now();
    }
    producer.join();
    *received = got;
    return Secs(start, last);
  }

  // Offers `rate` ticks/s for `seconds`; returns sorted latencies (ns).
  std::vector<int64_t> Latency(double rate, double seconds, WireEncoding enc, bool engine,
                               int symbols = kSymbols) {
    const int n = static_cast<int>(rate * seconds);
    std::vector<int64_t> lat;
    lat.reserve(n);
    std::atomic<bool> done{false};
    std::thread consumer([&] {
      zmq::message_t a, b;
      while (!done.load()) {
        zmq::pollitem_t it{sub.handle(), 0, ZMQ_POLLIN, 0};
        if (zmq::poll(&it, 1, std::chrono::milliseconds(50)) <= 0) continue;
        while (sub.recv(a, zmq::recv_flags::dontwait)) {
          (void)sub.recv(b);
          const int64_t now = RealNs();
          int64_t t = 0;
          absl::string_view body(static_cast<const char*>(b.data()), b.size());
          if (!engine) {  // forwarded ticks: decode the tick
            Tick tk[1];
            RejectCounters rc;
            absl::string_view topic(static_cast<const char*>(a.data()), a.size());
            if (DecodeTicks(topic, body, enc, 1 << 20, absl::MakeSpan(tk, 1), &rc).n_ticks == 1) {
              t = tk[0].t_ns;
            }
          } else if (enc == WireEncoding::kBinary) {
            // t sits right after the symbol (update_codec.h layout).
            if (body.size() > 11 && body.size() >= 11u + static_cast<uint8_t>(body[2])) {
              std::memcpy(&t, body.data() + 3 + static_cast<uint8_t>(body[2]), 8);
            }
          } else {
            // Only "t" is needed: a full JSON decode in the consumer would make
            // the consumer, not the engine, the bottleneck being measured.
            const size_t k = body.find("\"t\":");
            if (k != absl::string_view::npos) {
              std::from_chars(body.data() + k + 4, body.data() + body.size(), t);
            }
          }
          if (t > 0) lat.push_back(now - t);
        }
      }
    });
    Msg m;
    const auto start = std::chrono::steady_clock::now();
    const double period_ns = 1e9 / rate;
    // Paced by sleeping to each tick's due time (timer slack 1 us) rather than
    // spinning: on a small machine a spinning producer would steal the core
    // the engine needs. A late wake-up sends the overdue ticks back to back.
    prctl(PR_SET_TIMERSLACK, 1000UL, 0, 0, 0);
    for (int i = 0; i < n; ++i) {
      const auto due = start + std::chrono::nanoseconds(static_cast<int64_t>(i * period_ns));
      if (std::chrono::steady_clock::now() < due) std::this_thread::sleep_until(due);
      Tick t = MakeTick(i % symbols, RealNs(), Ret(i));
      m.topic.assign(t.symbol.view().data(), t.symbol.size);
      if (enc == WireEncoding::kBinary)
        EncodeTickBinary(t, &m.body);
      else
        EncodeTickJson(t, &m.body);
      Send(feed, m);
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(300));
    done = true;
    consumer.join();
    // Skip the first 5 % (connection warm-up).
    if (lat.size() > 20) lat.erase(lat.begin(), lat.begin() + lat.size() / 20);
    std::sort(lat.begin(), lat.end());
    return lat;
  }
};

// Feed PUB -> Engine with a discarding sink (no outbound sockets): how fast the
// engine ingests, decodes, filters and encodes, apart from the output fan-out.
double IngestOnlyRate(const std::vector<Msg>& msgs, uint64_t ticks, WireEncoding enc,
                      uint64_t* processed) {
  zmq::context_t ctx(1);
  zmq::socket_t feed(ctx, zmq::socket_type::pub);
  feed.set(zmq::sockopt::sndhwm, 0);
  feed.bind("tcp://127.0.0.1:*");
  EngineConfig c = BenchConfig(enc);
  c.feed.endpoints = {feed.get(zmq::sockopt::last_endpoint)};
  auto transport = *ZmqTransport::Create(1);
  ZmqSubscriberOptions so;
  so.receive_hwm = 0;
  auto src = transport->Subscribe(c.feed, so);
  if (!src.ok()) std::exit(1);
  auto engine = *Engine::Create(c, *std::move(src), std::make_unique<NullSink>(), SystemClock());
  std::thread th([&] { (void)engine->Run(); });
  auto ticks_in = [&] {
    std::promise<uint64_t> p;
    auto f = p.get_future();
    engine->Post([&] { p.set_value(engine->core()->counters().ticks_in); });
    return f.get();
  };
  // Slow joiner: probes until the engine has seen one.
  Tick probe = MakeTick(0, 0, 0.001);
  probe.symbol.assign("PROBE");
  Msg m;
  m.topic = "PROBE";
  for (int i = 0; ticks_in() == 0; ++i) {
    probe.t_ns = kT0 - 1000000000 + i;
    if (enc == WireEncoding::kBinary)
      EncodeTickBinary(probe, &m.body);
    else
      EncodeTickJson(probe, &m.body);
    Send(feed, m);
    std::this_thread::sleep_for(std::chrono::milliseconds(2));
  }
  std::this_thread::sleep_for(std::chrono::milliseconds(50));
  const uint64_t base = ticks_in();
  const auto start = std::chrono::steady_clock::now();
  for (const Msg& msg : msgs) Send(feed, msg);
  uint64_t got = 0;
  auto last = start;
  uint64_t prev = 0;
  while ((got = ticks_in() - base) < ticks) {
    std::this_thread::sleep_for(std::chrono::microseconds(200));
    if (got != prev) {
      prev = got;
      last = std::chrono::steady_clock::now();
    } else if (std::chrono::steady_clock::now() - last > std::chrono::seconds(2)) {
      break;  // stalled
    }
  }
  const auto end = std::chrono::steady_clock::now();
  engine->Stop();
  th.join();
  *processed = got;
  return got / Secs(start, end);
}

// CPU seconds of the whole process (every thread: feed, engine, ZeroMQ I/O,
// consumer), to show what a spinning thread costs.
double ProcessCpuNow() {
  rusage ru;
  getrusage(RUSAGE_SELF, &ru);
  return ru.ru_utime.tv_sec + ru.ru_stime.tv_sec +
         (ru.ru_utime.tv_usec + ru.ru_stime.tv_usec) * 1e-6;
}

// Context switches of the whole process so far (voluntary: a thread waited;
// involuntary: the scheduler took its core).
double ProcessSwitchesNow() {
  rusage ru;
  getrusage(RUSAGE_SELF, &ru);
  return static_cast<double>(ru.ru_nvcsw + ru.ru_nivcsw);
}

// What a throughput run cost the process per message delivered: CPU time of
// every thread (producer, middle, consumer, ZeroMQ I/O threads) and context
// switches. On this 2-core VM the rows are bound by these, not by the
// engine's own work (DEVELOPERS.md, "Benchmarks").
struct RunCost {
  double cpu_us = 0;    // process CPU microseconds per message
  double switches = 0;  // context switches per message
};

// Takes the process's counters at construction; Per(n) is the cost since
// then, per message of n.
class CostMeter {
 public:
  CostMeter() : cpu0_(ProcessCpuNow()), switches0_(ProcessSwitchesNow()) {}
  RunCost Per(double messages) const {
    return {(ProcessCpuNow() - cpu0_) * 1e6 / messages,
            (ProcessSwitchesNow() - switches0_) / messages};
  }

 private:
  double cpu0_, switches0_;
};

// The cost as the rows print it, after the rate.
std::string CostText(const RunCost& c) {
  char text[96];
  std::snprintf(text, sizeof(text), "  [process CPU %.2f us, %.2f context switches a tick]",
                c.cpu_us, c.switches);
  return text;
}

double CpuNow() {
  timespec ts;
  clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
  return ts.tv_sec + ts.tv_nsec * 1e-9;
}

// Alternated rounds of the rows compared with raw ZeroMQ: the one-tick-a-
// message rows (raw, engine, engine with update batches) and the latency rows
// of each mode (raw, engine).
constexpr int kShareRounds = 3;

// The median of v (the mean of the middle two for an even count). REQUIRES:
// v not empty.
double Median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  const size_t n = v.size();
  return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

// Each round's value rounded to an integer, joined by " / " (a row's brackets).
std::string Rounds(const std::vector<double>& v) {
  std::string out;
  for (double x : v) absl::StrAppend(&out, out.empty() ? "" : " / ", std::lround(x));
  return out;
}

double Pct(const std::vector<int64_t>& v, double q) {
  if (v.empty()) return -1;
  return v[std::min(v.size() - 1, static_cast<size_t>(q * v.size()))] / 1000.0;
}

// Rates per wall second and per second of this thread's CPU time (the
// machine may be shared; CPU time is what "one core" means).
struct Rate {
  double wall = 0, cpu = 0;
};

// Counts the update bodies an ingest core hands it.
class SizeSink : public UpdateSink {
 public:
  bool Send(absl::string_view topic, absl::string_view body) override {
    bytes_ += body.size();
    ++messages_;
    return true;
  }
  size_t MeanBytes() const { return messages_ == 0 ? 0 : bytes_ / messages_; }

 private:
  size_t bytes_ = 0;
  size_t messages_ = 0;
};

// The mean size of the update the engine publishes for the benchmark's ticks
// (one per tick; the rows' configuration), in bytes.
size_t UpdateBytes(WireEncoding enc) {
  SizeSink sink;
  ManualClock clock;
  auto core = *IngestCore::Create(BenchConfig(enc), &sink, &clock);
  for (int i = 0; i < 5000; ++i) core->OnTick(MakeTick(i % kSymbols, kT0 + i, Ret(i)));
  return sink.MeanBytes();
}

Rate ReplayCoreRate(WireEncoding enc, int n, uint64_t* bars) {
  EngineConfig c = BenchConfig(enc);
  NullSink sink;
  ManualClock clock;
  auto core = *IngestCore::Create(c, &sink, &clock);
  std::vector<Tick> ticks(n);
  for (int i = 0; i < n; ++i) ticks[i] = MakeTick(i % kSymbols, kT0 + i, Ret(i));
  for (int i = 0; i < 1000; ++i) core->OnTick(ticks[i]);
  const double c0 = CpuNow();
  const auto a = std::chrono::steady_clock::now();
  for (int i = 1000; i < n; ++i) core->OnTick(ticks[i]);
  const auto b = std::chrono::steady_clock::now();
  const double c1 = CpuNow();
  *bars = core->counters().bars;
  return {(n - 1000) / Secs(a, b), (n - 1000) / (c1 - c0)};
}

Rate ReplayCsvRate(int n) {
  std::string csv = "symbol,time,return\n";
  csv.reserve(static_cast<size_t>(n) * 40);
  char buf[64];
  for (int i = 0; i < n; ++i) {
    std::snprintf(buf, sizeof(buf), "%s,%lld,%.6f\n", Sym(i % kSymbols).c_str(),
                  static_cast<long long>(kT0 + i), Ret(i));
    csv += buf;
  }
  auto reader = *TickFileReader::FromString(std::move(csv), "bench.csv");
  EngineConfig c = BenchConfig(WireEncoding::kJson);
  NullSink sink;
  ManualClock clock;
  auto core = *IngestCore::Create(c, &sink, &clock);
  Tick t;
  const double c0 = CpuNow();
  const auto a = std::chrono::steady_clock::now();
  while (reader->Next(&t)) core->OnTick(t);
  const auto b = std::chrono::steady_clock::now();
  const double c1 = CpuNow();
  return {core->counters().bars / Secs(a, b), core->counters().bars / (c1 - c0)};
}

// Ingest latency with and without periodic checkpoints (issue: p99 with
// checkpoints every second for 10,000 symbols <= 1.5x without). The engine
// runs with refit services (windows of 100 returns per symbol after a
// pre-fill); the checkpointer captures on the ingest thread every
// `every_seconds` and writes in the background. Four settings: without
// checkpoints, with each snapshot captured in one pause, with snapshots
// captured in slices of `slice_symbols` symbols (these two with the writer
// at niceness 10, the default), and in slices with the writer in the idle
// scheduling class (CheckpointerOptions::writer_idle) instead. On a shared machine the p99
// of one run drifts with whatever else runs (on a 2-core VM it moved 6x
// between back-to-back runs without checkpoints), so the settings run in
// `rounds` rounds, each in a rotated order (a drift then hits every setting
// alike), and the ratio is given per round, as the median of the rounds and
// on the pooled samples of all rounds.
void CheckpointLatency(int symbols, double rate, double seconds, double every_seconds,
                       int slice_symbols, int rounds) {
  const WireEncoding enc = WireEncoding::kBinary;
  const std::string path =
      (std::filesystem::temp_directory_path() / "aftershock_engine_bench.ckpt").string();
  constexpr int kSettings = 4;
  std::vector<int64_t> pooled[kSettings];
  // Per setting, over the rounds: the checkpoint costs that do not depend on
  // the host's load (CheckpointStats' CPU times and bytes).
  struct Proxies {
    uint64_t writes = 0, capture_bytes = 0, file_bytes = 0;
    double capture_cpu = 0, writer_cpu = 0, max_slice_cpu = 0;
    double encode_cpu_last = 0, write_cpu_last = 0, sync_last = 0;  // summed over runs
    int runs = 0;
  } proxies[kSettings];
  std::vector<double> round_ratio[kSettings];  // [1..]: per-round p99 ratio to [0]
  auto p99_of = [](const std::vector<int64_t>& v) -> int64_t {
    return v.empty() ? -1 : v[std::min(v.size() - 1, v.size() * 99 / 100)];
  };
  auto mode_name = [&](int with) {
    return with == 0   ? std::string("no checkpoints")
           : with == 1 ? std::string("checkpoints, one pause")
           : with == 2 ? absl::StrCat("checkpoints, slices of ", slice_symbols)
                       : absl::StrCat("checkpoints, slices of ", slice_symbols, ", idle writer");
  };
  for (int r = 0; r < rounds; ++r) {
    int64_t p99[kSettings] = {-1, -1, -1, -1};
    for (int k = 0; k < kSettings; ++k) {
      const int with = (k + r) % kSettings;
      LiveExtras x;
      x.services = true;
      x.max_symbols = symbols + 1;  // the rig's probe symbol too
      if (with) x.checkpoint_path = path;
      x.every_seconds = every_seconds;
      x.slice_symbols = with >= 2 ? slice_symbols : 0;
      x.writer_idle = with == 3;
      Rig rig(true, enc, x);
      // Pre-fill: 100 returns per symbol in batches (the warm-up's first 10
      // per symbol publish nothing).
      const int per_symbol = 100;
      std::vector<Msg> fill;
      std::vector<Tick> ticks;
      for (int b = 0; b < per_symbol; ++b) {
        for (int i = 0; i < symbols; ++i) {
          ticks.push_back(MakeTick(i, kT0 + b, Ret(static_cast<uint64_t>(b) * symbols + i)));
          if (ticks.size() == 256) {
            Msg m;
            m.topic = "*";
            EncodeBatchBinary(ticks, &m.body);
            fill.push_back(std::move(m));
            ticks.clear();
          }
        }
      }
      if (!ticks.empty()) {
        Msg m;
        m.topic = "*";
        EncodeBatchBinary(ticks, &m.body);
        fill.push_back(std::move(m));
      }
      uint64_t got = 0;
      const uint64_t expect = static_cast<uint64_t>(symbols) * (per_symbol - 10);
      rig.Throughput(fill, expect, &got);
      if (got < expect)
        std::printf("  (pre-fill incomplete: %llu of %llu updates)\n",
                    static_cast<unsigned long long>(got), static_cast<unsigned long long>(expect));
      // Drain the pre-fill's output (alerts count as messages above, so
      // updates may still be under way): 500 ms without a message.
      {
        zmq::message_t m;
        auto quiet = std::chrono::steady_clock::now();
        while (std::chrono::steady_clock::now() - quiet < std::chrono::milliseconds(500)) {
          zmq::pollitem_t it{rig.sub.handle(), 0, ZMQ_POLLIN, 0};
          if (zmq::poll(&it, 1, std::chrono::milliseconds(50)) <= 0) continue;
          while (rig.sub.recv(m, zmq::recv_flags::dontwait)) {
          }
          quiet = std::chrono::steady_clock::now();
        }
      }
      auto lat = rig.Latency(rate, seconds, enc, true, symbols);
      auto* mid = static_cast<EngineMiddle*>(rig.mid.get());
      std::string extra = "no checkpoints";
      if (mid->checkpointer != nullptr) {
        const CheckpointStats st = mid->checkpointer->stats();
        extra = absl::StrCat("every ", every_seconds, " s: ", st.writes, " written, ", st.skipped,
                             " skipped, ", st.last_bytes, " bytes, longest pause ",
                             st.last_capture_seconds * 1e3, " ms of ", st.last_capture_slices, " (",
                             st.last_capture_total_seconds * 1e3, " ms in all), write ",
                             st.last_write_seconds * 1e3, " ms");
        // The host-independent proxies (CPU time, bytes), summed per setting.
        Proxies& q = proxies[with];
        q.writes += st.writes;
        q.capture_cpu += st.capture_cpu_seconds_total;
        q.capture_bytes += st.capture_bytes_total;
        q.writer_cpu += st.writer_cpu_seconds_total;
        q.max_slice_cpu = std::max(q.max_slice_cpu, st.last_capture_max_cpu_seconds);
        q.encode_cpu_last += st.last_encode_cpu_seconds;
        q.write_cpu_last += st.last_write_cpu_seconds;
        q.sync_last += st.last_sync_seconds;
        q.file_bytes = st.last_bytes;
        ++q.runs;
      }
      std::printf(
          "%-60s %11.0f/s %10.1f %10.1f %10.1f  (%zu samples; %s)\n",
          absl::StrCat("round ", r + 1, ": ", symbols, " symbols, ", mode_name(with)).c_str(), rate,
          Pct(lat, 0.5), Pct(lat, 0.99), Pct(lat, 0.999), lat.size(), extra.c_str());
      std::fflush(stdout);
      p99[with] = p99_of(lat);
      pooled[with].insert(pooled[with].end(), lat.begin(), lat.end());
    }
    for (int w = 1; w < kSettings; ++w) {
      const double q = p99[0] > 0 ? static_cast<double>(p99[w]) / p99[0] : -1.0;
      round_ratio[w].push_back(q);
    }
    std::printf(
        "round %d: p99 with / without checkpoints: one pause %.2f, slices %.2f, slices with "
        "an idle writer %.2f\n",
        r + 1, round_ratio[1].back(), round_ratio[2].back(), round_ratio[3].back());
  }
  std::remove(path.c_str());
  for (int with = 0; with < kSettings; ++with) {
    std::sort(pooled[with].begin(), pooled[with].end());
    std::printf("%-60s %11.0f/s %10.1f %10.1f %10.1f  (%zu samples)\n",
                absl::StrCat("all rounds: ", symbols, " symbols, ", mode_name(with)).c_str(), rate,
                Pct(pooled[with], 0.5), Pct(pooled[with], 0.99), Pct(pooled[with], 0.999),
                pooled[with].size());
  }
  auto median = [](std::vector<double> v) {
    std::sort(v.begin(), v.end());
    const size_t n = v.size();
    return n == 0 ? -1.0 : n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
  };
  auto within = [](const std::vector<double>& v) {
    return std::count_if(v.begin(), v.end(), [](double q) { return q > 0 && q <= 1.5; });
  };
  const int64_t base = p99_of(pooled[0]);
  for (int w = 1; w < kSettings; ++w) {
    std::printf(
        "p99 with / without checkpoints, %s: pooled %.2f, median of %d rounds %.2f, "
        "%ld of %d rounds <= 1.5\n",
        mode_name(w).c_str(), base > 0 ? static_cast<double>(p99_of(pooled[w])) / base : -1.0,
        rounds, median(round_ratio[w]), static_cast<long>(within(round_ratio[w])), rounds);
  }
  for (int w = 1; w < kSettings; ++w) {
    const Proxies& q = proxies[w];
    if (q.writes == 0 || q.runs == 0) continue;
    const double n = static_cast<double>(q.writes);
    std::printf(
        "per checkpoint, %s: ingest-thread CPU %.3f ms (longest slice %.3f ms CPU), copied on "
        "the ingest thread %.2f MB; writer CPU %.2f ms (last files: encode %.2f ms, write + "
        "syncs %.2f ms CPU, syncs %.2f ms wall); file %.2f MB; %llu checkpoints\n",
        mode_name(w).c_str(), q.capture_cpu / n * 1e3, q.max_slice_cpu * 1e3,
        static_cast<double>(q.capture_bytes) / n / 1e6, q.writer_cpu / n * 1e3,
        q.encode_cpu_last / q.runs * 1e3, q.write_cpu_last / q.runs * 1e3,
        q.sync_last / q.runs * 1e3, static_cast<double>(q.file_bytes) / 1e6,
        static_cast<unsigned long long>(q.writes));
  }
  std::printf("target: p99 with checkpoints every second <= 1.5x without\n");
}

// The checkpoint's cost apart from the feed (no sockets, a manual clock): a
// core with refit services (as CheckpointLatency) holding `per_symbol`
// returns per symbol; then `rounds` rounds of one tick (one bar) per symbol,
// each followed by a checkpoint as a live engine takes it (EngineCapture,
// refilled in place: the ingest thread's pause) and, for comparison, by a
// whole capture (CaptureEngineState, the encoding of everything). Prints
// the medians (max) of: the ingest thread's capture time, its CPU time
// (CLOCK_THREAD_CPUTIME_ID) and the bytes it copied (EngineCapture::
// copied_bytes), the same in slices of 500 symbols (the longest slice), and
// the writer's serialize (encode + checksums) and write (temp file, fsyncs,
// rename) times, wall and CPU; then what the file's bytes are made of. The
// live, sliced and whole files are compared byte for byte. CPU times and
// bytes do not depend on what else the host runs: they are the figures to
// compare designs by.
void CheckpointCost(int symbols, int per_symbol, int rounds) {
  LiveExtras x;
  x.services = true;
  x.max_symbols = symbols;
  const EngineConfig c = LiveConfig(BenchConfig(WireEncoding::kBinary), x);
  NullSink sink;
  ManualClock clock(kT0);
  auto core = *IngestCore::Create(c, &sink, &clock);
  ServiceOptions so;
  so.mode = RefitMode::kLive;
  auto services = *EngineServices::Attach(core.get(), c, so);
  int64_t t = kT0;
  uint64_t i = 0;
  auto round = [&] {
    ++t;
    for (int k = 0; k < symbols; ++k) core->OnTick(MakeTick(k, t, Ret(i++)));
  };
  for (int k = 0; k < per_symbol; ++k) round();
  EngineCapture live(core.get(), services.get());
  EngineCapture sliced(core.get(), services.get());  // in slices of 500 symbols
  // Both filled once, as the checkpointer does when it starts.
  live.Capture(t);
  sliced.Capture(t);
  std::string sliced_file;
  std::vector<double> live_cpu_ms;  // the thread's CPU time (without preemptions)
  std::vector<double> live_ms, whole_ms, serialize_ms, write_ms, slice_ms, slice_cpu_ms;
  std::vector<double> live_mb, slice_mb, serialize_cpu_ms, write_cpu_ms, sync_ms;
  size_t bytes = 0;
  bool same = true;
  std::string file;  // reused, as the checkpointer does
  const std::string path =
      (std::filesystem::temp_directory_path() / "aftershock_engine_bench_cost.ckpt").string();
  for (int k = 0; k < rounds; ++k) {
    round();
    const auto a = std::chrono::steady_clock::now();
    const double cpu0 = CpuNow();
    live.Capture(t);
    live_cpu_ms.push_back((CpuNow() - cpu0) * 1e3);
    const auto b = std::chrono::steady_clock::now();
    live_mb.push_back(static_cast<double>(live.copied_bytes()) / 1e6);
    const double cpu1 = CpuNow();
    (void)live.Serialize(c, &file);
    serialize_cpu_ms.push_back((CpuNow() - cpu1) * 1e3);
    const auto d = std::chrono::steady_clock::now();
    WriteTimings wt;
    (void)WriteFileAtomically(path, file, &wt);
    write_cpu_ms.push_back(wt.cpu_seconds * 1e3);
    sync_ms.push_back(wt.sync_seconds * 1e3);
    const auto e = std::chrono::steady_clock::now();
    const EngineSnapshot snap = CaptureEngineState(*core, services.get(), t);
    const auto f = std::chrono::steady_clock::now();
    same = same && *SerializeEngineSnapshot(snap, c) == file;
    // The same state in slices (no input between them here): the longest pause.
    sliced.BeginSlices(t);
    double longest = 0, longest_cpu = 0;
    for (bool done = false; !done;) {
      const auto g = std::chrono::steady_clock::now();
      const double cpu0 = CpuNow();
      done = sliced.CaptureSlice(500);
      longest_cpu = std::max(longest_cpu, (CpuNow() - cpu0) * 1e3);
      longest = std::max(longest, Secs(g, std::chrono::steady_clock::now()) * 1e3);
    }
    slice_ms.push_back(longest);
    slice_cpu_ms.push_back(longest_cpu);
    slice_mb.push_back(static_cast<double>(sliced.copied_bytes()) / 1e6);
    (void)sliced.Serialize(c, &sliced_file);
    same = same && sliced_file == file;
    live_ms.push_back(Secs(a, b) * 1e3);
    serialize_ms.push_back(Secs(b, d) * 1e3);
    write_ms.push_back(Secs(d, e) * 1e3);
    whole_ms.push_back(Secs(e, f) * 1e3);
    bytes = file.size();
  }
  std::remove(path.c_str());
  for (auto* v : {&live_ms, &whole_ms, &serialize_ms, &write_ms, &slice_ms, &live_cpu_ms,
                  &slice_cpu_ms, &live_mb, &slice_mb, &serialize_cpu_ms, &write_cpu_ms, &sync_ms}) {
    std::sort(v->begin(), v->end());
  }
  auto med = [](const std::vector<double>& v) { return v[v.size() / 2]; };
  std::printf(
      "%6d symbols x %3d returns: %9zu bytes; ingest-thread capture: live %6.2f ms (max %6.2f; "
      "CPU %6.2f), longest slice of 500 %6.3f ms (max %6.3f; CPU %6.3f), whole %6.2f ms (max "
      "%6.2f); writer: serialize %6.1f ms, write %6.1f ms; files %s\n",
      symbols, per_symbol, bytes, med(live_ms), live_ms.back(), med(live_cpu_ms), med(slice_ms),
      slice_ms.back(), med(slice_cpu_ms), med(whole_ms), whole_ms.back(), med(serialize_ms),
      med(write_ms), same ? "identical" : "DIFFER");
  std::printf(
      "%6d symbols, per checkpoint: ingest thread CPU %6.3f ms, copied %6.3f MB (in slices: %6.3f "
      "MB); writer CPU: serialize %6.2f ms, write + syncs %6.2f ms (syncs %6.2f ms wall)\n",
      symbols, med(live_cpu_ms), med(live_mb), med(slice_mb), med(serialize_cpu_ms),
      med(write_cpu_ms), med(sync_ms));
  // What the bytes are: the sections, and in the services' section the refit
  // windows (each 17 bytes of size, total and tag flag, then 8 a held return).
  auto cp = ParseCheckpoint(file);
  if (cp.ok()) {
    const double n = static_cast<double>(symbols);
    const size_t core_bytes = cp->Find(kCoreSectionTag)->size();
    const size_t serv_bytes = cp->Find(kServicesSectionTag)->size();
    const int held = std::min(per_symbol + rounds, c.refit.window);
    const double window_bytes = 17.0 + 8.0 * held;
    std::printf(
        "%6d symbols, bytes a symbol: %.0f in all; core %.0f (filter state %zu, bar state 94); "
        "services %.0f (refit window of %d returns %.0f)\n",
        symbols, static_cast<double>(bytes) / n, core_bytes / n, sizeof(FilterState),
        serv_bytes / n, held, window_bytes);
  }
}

}  // namespace
}  // namespace aftershock

namespace {

constexpr const char* kUsage =
    "usage: engine_bench [--quick] [--replay-only] [--latency-only]\n"
    "       engine_bench --checkpoint-latency [symbols [slice [rounds]]]\n"
    "       engine_bench --checkpoint-cost\n"
    "       engine_bench --help\n"
    "\n"
    "Without flags: the whole table (raw ZeroMQ pass-through, the engine end to end with one\n"
    "tick per message, with update batches and with batched ticks, its ingest alone, latency\n"
    "at 100k ticks/s waiting and busy-polling, replay), binary and JSON. Raw and the\n"
    "one-tick-a-message engine rows, and raw and engine latency in each mode, run in 3\n"
    "alternated rounds (medians; a share of raw or an overhead over raw is the median of the\n"
    "rounds' own ratios or differences, each round's in brackets), with a raw forwarder that\n"
    "sends bodies of the update's size, and each such row's process CPU time and context\n"
    "switches per tick.\n"
    "  --quick               shorter runs (fewer messages, 1 s of latency per row)\n"
    "  --replay-only         only the replay rows\n"
    "  --latency-only        only the latency rows\n"
    "  --checkpoint-latency  alone: latency for 10,000 symbols (or `symbols`) with refit\n"
    "                        services, without and with checkpoints every second (whole\n"
    "                        and in slices of 500 symbols, or `slice`), in 3 rotated\n"
    "                        rounds (or `rounds`)\n"
    "  --checkpoint-cost     alone: the checkpoint's capture, serialize and write times\n"
    "  --help                this text\n";

}  // namespace

int main(int argc, char** argv) {
  using namespace aftershock;
  bool quick = false, replay_only = false, latency_only = false;
  for (int i = 1; i < argc; ++i) {
    if (std::strcmp(argv[i], "--help") == 0 || std::strcmp(argv[i], "-h") == 0) {
      std::fputs(kUsage, stdout);
      return 0;
    }
    if (std::strcmp(argv[i], "--checkpoint-latency") == 0) {
      // Only the checkpoint scenario: 10,000 symbols (or the count given
      // next), 50k ticks/s for 6 s (6 checkpoints), with and without.
      // Slices of 500 symbols (or the count given after the symbols), in 3
      // rounds (or the count given after the slice).
      const int symbols = i + 1 < argc ? std::atoi(argv[i + 1]) : 10000;
      const int slice = i + 2 < argc ? std::atoi(argv[i + 2]) : 500;
      const int rounds = i + 3 < argc ? std::atoi(argv[i + 3]) : 3;
      std::printf("%-60s %14s %10s %10s %10s\n", "scenario", "rate", "p50 us", "p99 us",
                  "p99.9 us");
      CheckpointLatency(symbols > 0 ? symbols : 10000, 50000, 6.0, 1.0, slice > 0 ? slice : 500,
                        rounds > 0 ? rounds : 3);
      return 0;
    }
    if (std::strcmp(argv[i], "--checkpoint-cost") == 0) {
      CheckpointCost(1000, 250, 9);
      CheckpointCost(10000, 100, 9);
      return 0;
    }
    if (std::strcmp(argv[i], "--quick") == 0) {
      quick = true;
    } else if (std::strcmp(argv[i], "--replay-only") == 0) {
      replay_only = true;
    } else if (std::strcmp(argv[i], "--latency-only") == 0) {
      latency_only = true;
    } else {
      std::fprintf(stderr, "engine_bench: unknown argument '%s'\n%s", argv[i], kUsage);
      return 2;
    }
  }
  const int n_single = quick ? 200000 : 1000000;
  const int n_batch_ticks = quick ? 500000 : 3000000;
  const int batch = 256;
  const double lat_seconds = quick ? 1.0 : 3.0;
  const double rate = 100000;
  std::printf(
      "aftershock engine benchmark (%s); %d symbols, const/GARCH(1,1)/student with all "
      "outputs\n",
      quick ? "quick" : "full", kSymbols);
  std::printf("machine: %u hardware threads (shared with other work; numbers are noisy)\n\n",
              std::thread::hardware_concurrency());
  std::printf("%-44s %14s %10s %10s %10s\n", "scenario", "rate", "p50 us", "p99 us", "p99.9 us");
  {
    double load[3] = {0, 0, 0};
    if (getloadavg(load, 3) == 3)
      std::printf("(load average at start %.2f %.2f %.2f)\n", load[0], load[1], load[2]);
  }

  for (WireEncoding enc : {WireEncoding::kBinary, WireEncoding::kJson}) {
    if (replay_only) break;
    const char* en = enc == WireEncoding::kBinary ? "binary" : "json";
    const auto single = SingleMessages(n_single, enc);
    if (!latency_only) {
      // Raw pass-through, the engine, and the engine with update batches, in
      // kShareRounds alternated rounds: on a shared machine the load drifts
      // within seconds, and one raw run against one engine run taken moments
      // later swung the share by tens of points between invocations. Each row
      // prints the median of its rates; a share is the median of the rounds'
      // own ratios (each round's runs back to back), with every round's share
      // in brackets.
      std::vector<double> raw, eng, bat, eng_share, bat_share, sized, eng_sized_share;
      // Per row: process CPU us and context switches per tick, one per round
      // (raw, engine, engine with update batches, raw with update-sized out).
      std::vector<double> cpu[4], sw[4];
      const size_t update_bytes = UpdateBytes(enc);
      bool short_raw = false, short_eng = false, short_bat = false;
      // Runs one throughput row and records its cost per tick offered.
      auto run = [&](int row, Rig& rig, bool batches) {
        uint64_t got = 0;
        const CostMeter meter;
        const double s = rig.Throughput(single, single.size(), &got, batches, enc);
        const RunCost c = meter.Per(static_cast<double>(single.size()));
        cpu[row].push_back(c.cpu_us);
        sw[row].push_back(c.switches);
        return std::make_pair(got / s, got < single.size());
      };
      for (int k = 0; k < kShareRounds; ++k) {
        {
          Rig rig(false, enc);
          const auto [rate, incomplete] = run(0, rig, false);
          raw.push_back(rate);
          short_raw |= incomplete;
        }
        {
          Rig rig(true, enc);
          const auto [rate, incomplete] = run(1, rig, false);
          eng.push_back(rate);
          short_eng |= incomplete;
        }
        {
          // The same messages; updates leave in batches on b.u (update_batch.h).
          LiveExtras x;
          x.update_topics = UpdateTopics::kBatch;
          Rig rig(true, enc, x);
          const auto [rate, incomplete] = run(2, rig, true);
          bat.push_back(rate);
          short_bat |= incomplete;
        }
        {
          // Raw again, sending bodies of the engine's update size: a larger
          // message costs ZeroMQ and the loopback TCP stack more per message,
          // so the size alone costs throughput.
          Rig rig(false, enc, {}, update_bytes);
          const auto [rate, incomplete] = run(3, rig, false);
          sized.push_back(rate);
          short_raw |= incomplete;
        }
        eng_share.push_back(100.0 * eng.back() / raw.back());
        bat_share.push_back(100.0 * bat.back() / raw.back());
        eng_sized_share.push_back(100.0 * eng.back() / sized.back());
      }
      auto cost = [&](int row) { return CostText({Median(cpu[row]), Median(sw[row])}); };
      std::printf("%-44s %11.0f/s %10s %10s %10s  (median of %d rounds)%s%s\n",
                  absl::StrCat("raw ZeroMQ pass-through, 1 tick/msg (", en, ")").c_str(),
                  Median(raw), "", "", "", kShareRounds, cost(0).c_str(),
                  short_raw ? "  (incomplete)" : "");
      std::printf("%-44s %11.0f/s %10s %10s %10s  = %.0f %% of raw (rounds %s %%)%s%s\n",
                  absl::StrCat("engine, 1 tick/msg (", en, ")").c_str(), Median(eng), "", "", "",
                  Median(eng_share), Rounds(eng_share).c_str(), cost(1).c_str(),
                  short_eng ? "  (incomplete)" : "");
      std::printf("%-44s %11.0f/s %10s %10s %10s  = %.0f %% of raw (updates/s; rounds %s %%)%s%s\n",
                  absl::StrCat("engine, 1 tick/msg, batched updates (", en, ")").c_str(),
                  Median(bat), "", "", "", Median(bat_share), Rounds(bat_share).c_str(),
                  cost(2).c_str(), short_bat ? "  (incomplete)" : "");
      std::printf(
          "%-44s %11.0f/s %10s %10s %10s  (%zu-byte bodies out; the engine is %.0f %% of it, "
          "rounds %s %%)%s\n",
          absl::StrCat("raw ZeroMQ, update-sized out (", en, ")").c_str(), Median(sized), "", "",
          "", update_bytes, Median(eng_sized_share), Rounds(eng_sized_share).c_str(),
          cost(3).c_str());
    }
    if (!latency_only) {
      const auto batches = BatchMessages(n_batch_ticks, batch, enc);
      Rig rig(true, enc);
      uint64_t got = 0;
      const double s = rig.Throughput(batches, n_batch_ticks, &got);
      std::printf("%-44s %11.0f/s %10s %10s %10s%s\n",
                  absl::StrCat("engine, batches of ", batch, " (", en, ") ticks").c_str(), got / s,
                  "", "", "", got < static_cast<uint64_t>(n_batch_ticks) ? "  (incomplete)" : "");
    }
    if (!latency_only) {
      // Batched both ways: the configuration for a consumer that wants
      // throughput (batched frames in, update batches on b.u out).
      const auto batches = BatchMessages(n_batch_ticks, batch, enc);
      LiveExtras x;
      x.update_topics = UpdateTopics::kBatch;
      Rig rig(true, enc, x);
      uint64_t got = 0;
      const double s = rig.Throughput(batches, n_batch_ticks, &got, /*batches=*/true, enc);
      std::printf("%-44s %11.0f/s %10s %10s %10s%s\n",
                  absl::StrCat("engine, batches of ", batch, " (", en, "), batched updates")
                      .c_str(),
                  got / s, "", "", "",
                  got < static_cast<uint64_t>(n_batch_ticks) ? "  (incomplete)" : "");
    }
    if (!latency_only) {
      uint64_t got = 0;
      const CostMeter meter;
      const double r1 = IngestOnlyRate(single, single.size(), enc, &got);
      std::printf("%-44s %11.0f/s%s%s\n",
                  absl::StrCat("engine ingest only, 1 tick/msg (", en, ")").c_str(), r1,
                  CostText(meter.Per(static_cast<double>(single.size()))).c_str(),
                  got < single.size() ? "  (incomplete)" : "");
      const auto batches = BatchMessages(n_batch_ticks, batch, enc);
      const double r2 = IngestOnlyRate(batches, n_batch_ticks, enc, &got);
      std::printf("%-44s %11.0f/s%s\n",
                  absl::StrCat("engine ingest only, batches of ", batch, " (", en, ")").c_str(), r2,
                  got < static_cast<uint64_t>(n_batch_ticks) ? "  (incomplete)" : "");
    }
    // Waiting on the descriptor, then busy-polling ([feed] busy_poll_us, and
    // a raw forwarder that spins likewise): raw and engine side by side in
    // each mode, in kShareRounds alternated rounds (as the shares above: one
    // pair of runs had the p99 overhead swing by 120 us between invocations).
    // The raw and engine rows print the median over the rounds of each
    // percentile and of the process's CPU use (cores); the overhead row the
    // median of the rounds' own differences, with every round's p99 one.
    for (bool spin : {false, true}) {
      std::vector<double> p50[2], p99[2], p999[2], cores[2], d50, d99;
      size_t samples[2] = {0, 0};
      for (int k = 0; k < kShareRounds; ++k) {
        for (bool engine : {false, true}) {
          LiveExtras x;
          x.busy_poll_us = spin ? 1000000 : 0;
          Rig rig(engine, enc, x);
          const double cpu0 = ProcessCpuNow();
          const auto w0 = std::chrono::steady_clock::now();
          const auto lat = rig.Latency(rate, lat_seconds, enc, engine);
          cores[engine].push_back((ProcessCpuNow() - cpu0) /
                                  Secs(w0, std::chrono::steady_clock::now()));
          p50[engine].push_back(Pct(lat, 0.5));
          p99[engine].push_back(Pct(lat, 0.99));
          p999[engine].push_back(Pct(lat, 0.999));
          samples[engine] += lat.size();
        }
        d50.push_back(p50[1].back() - p50[0].back());
        d99.push_back(p99[1].back() - p99[0].back());
      }
      for (bool engine : {false, true}) {
        const char* what =
            engine ? (spin ? "engine latency, busy-poll" : "engine latency tick->update")
                   : (spin ? "raw latency, busy-poll forwarder" : "raw latency tick->tick");
        std::printf(
            "%-44s %11.0f/s %10.1f %10.1f %10.1f  (%zu samples in %d rounds, medians; CPU %.2f "
            "cores)\n",
            absl::StrCat(what, " (", en, ")").c_str(), rate, Median(p50[engine]),
            Median(p99[engine]), Median(p999[engine]), samples[engine], kShareRounds,
            Median(cores[engine]));
      }
      std::printf("%-44s %14s %+10.1f %+10.1f  (rounds' p99: %s us)\n",
                  absl::StrCat("  engine over raw, ", spin ? "busy-poll" : "waiting", " (", en, ")")
                      .c_str(),
                  "", Median(d50), Median(d99), Rounds(d99).c_str());
    }
  }
  {
    uint64_t bars = 0;
    const int n = quick ? 1000000 : 5000000;
    auto row = [](const char* name, Rate r) {
      std::printf("%-44s %11.0f/s %10s %10s %10s  (%.0f bars per CPU-second)\n", name, r.wall, "",
                  "", "", r.cpu);
    };
    row("replay core, pre-parsed ticks, binary encode",
        ReplayCoreRate(WireEncoding::kBinary, n, &bars));
    row("replay core, pre-parsed ticks, JSON encode",
        ReplayCoreRate(WireEncoding::kJson, n, &bars));
    row("replay CSV parse + core + JSON encode", ReplayCsvRate(quick ? 500000 : 2000000));
  }
  {
    double load[3] = {0, 0, 0};
    if (getloadavg(load, 3) == 3)
      std::printf("(load average at end %.2f %.2f %.2f)\n", load[0], load[1], load[2]);
  }
  std::printf(
      "\ntargets: engine >= 80 %% of raw (binary, 1 tick/msg); batched >= 5,000,000 "
      "ticks/s;\n         latency p50 <= 15 us, p99 <= 60 us at 100k ticks/s; replay "
      ">= 5,000,000 bars/s\n");
  return 0;
}
