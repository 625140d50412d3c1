// End to end over TCP loopback: a test PUB feed -> `Engine` (ZeroMQ SUB, ingest
// core, ZeroMQ PUB) -> a test SUB. Every port is ephemeral.
#include "aftershock/engine.h"

#include <catch2/catch.hpp>
#include <chrono>
#include <future>
#include <map>
#include <nlohmann/json.hpp>
#include <thread>
#include <zmq.hpp>

#include "absl/strings/str_cat.h"
#include "aftershock/engine_metrics.h"
#include "aftershock/tick_file.h"
#include "aftershock/update_batch.h"
#include "aftershock/update_codec.h"
#include "aftershock/wire.h"
#include "aftershock/zmq_transport.h"
#include "streaming/engine_test_util.h"
#include "support/test_support.h"

// Under ThreadSanitizer: libzmq is not instrumented, so the hand-over of message
// buffers between its I/O threads and ours (lock-free pipes) is invisible to
// the tool and reported as races inside or right next to libzmq. Those are
// suppressed; races in our own code between our own threads are still caught.
#if defined(__has_feature)
#if __has_feature(thread_sanitizer)
#define AFTERSHOCK_TEST_TSAN 1
#endif
#endif
#if defined(__SANITIZE_THREAD__) || defined(AFTERSHOCK_TEST_TSAN)
extern "C" const char* __tsan_default_suppressions() {
  return "called_from_lib:libzmq.so.5\nrace:libzmq.so.5\n";
}
#endif

namespace aftershock {
namespace {

using testing::RelDiff;
using Ms = std::chrono::milliseconds;
constexpr int64_t kT0 = 1772443800000000000;
constexpr int64_t kSec = 1000000000;

std::string LastEndpoint(zmq::socket_t& s) { return s.get(zmq::sockopt::last_endpoint); }

Tick ReturnTick(const std::string& sym, int64_t t, double r) {
  Tick k;
  k.symbol.assign(sym);
  k.t_ns = t;
  k.kind = Tick::kReturn;
  k.value = r;
  return k;
}

// Counters read on the ingest thread (the documented way from another thread).
EngineCounters Snapshot(Engine* e) {
  std::promise<EngineCounters> p;
  auto f = p.get_future();
  e->Post([&] { p.set_value(e->core()->counters()); });
  return f.get();
}

// The test's side of the wire: a PUB feed, the engine on its own thread, a SUB.
struct Harness {
  explicit Harness(EngineConfig config, int sub_rcvhwm = 0) : config_(std::move(config)) {
    feed.set(zmq::sockopt::sndhwm, 0);
    feed.bind("tcp://127.0.0.1:*");
    config_.feed.endpoints = {LastEndpoint(feed)};
    config_.publish.endpoint = "tcp://127.0.0.1:*";
    auto transport = ZmqTransport::Create(1);
    REQUIRE(transport.ok());
    transport_ = *std::move(transport);
    auto source = transport_->Subscribe(config_.feed);
    REQUIRE(source.ok());
    auto sink = transport_->Publish(config_.publish);
    REQUIRE(sink.ok());
    auto engine = Engine::Create(config_, *std::move(source), *std::move(sink), SystemClock());
    INFO(engine.status().ToString());
    REQUIRE(engine.ok());
    engine_ = *std::move(engine);
    thread_ = std::thread([this] { run_status_ = engine_->Run(); });
    sub.set(zmq::sockopt::rcvhwm, sub_rcvhwm);
    sub.set(zmq::sockopt::subscribe, "u.");
    sub.connect(engine_->BoundEndpoint());
  }
  ~Harness() { Stop(); }
  void Stop() {
    if (thread_.joinable()) {
      engine_->Stop();
      thread_.join();
    }
  }

  void SendTick(const Tick& t) {
    std::string body;
    if (config_.feed.encoding == WireEncoding::kJson) {
      EncodeTickJson(t, &body);
    } else {
      EncodeTickBinary(t, &body);
    }
    feed.send(zmq::buffer(t.symbol.view().data(), t.symbol.size), zmq::send_flags::sndmore);
    feed.send(zmq::buffer(body), zmq::send_flags::none);
  }

  // Counters once the probes still in flight after WaitUntilLive() have arrived
  // (two snapshots 20 ms apart agree), so later deltas count only the test's ticks.
  EngineCounters Settled() {
    EngineCounters a = Snapshot(engine_.get());
    for (int i = 0; i < 500; ++i) {
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
      const EngineCounters b = Snapshot(engine_.get());
      if (b.ticks_in == a.ticks_in && b.updates_out == a.updates_out) return b;
      a = b;
    }
    return a;
  }

  // Slow-joiner handling: probe ticks until one comes back through the whole
  // chain (feed -> engine -> subscriber); both subscriptions are then live.
  int WaitUntilLive() {
    int probes = 0;
    const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(10);
    while (std::chrono::steady_clock::now() < deadline) {
      SendTick(ReturnTick("PROBE", kT0 + probes, 0.001));
      ++probes;
      zmq::pollitem_t item{sub.handle(), 0, ZMQ_POLLIN, 0};
      if (zmq::poll(&item, 1, Ms(5)) > 0) {
        zmq::message_t topic, body;
        REQUIRE(sub.recv(topic).has_value());
        REQUIRE(sub.recv(body).has_value());
        REQUIRE(topic.to_string() == "u.PROBE");
        return probes;
      }
    }
    FAIL("the subscription never became live");
    return probes;
  }

  // Receives until `want` non-probe updates arrived or the timeout passed.
  std::map<std::string, std::vector<std::string>> Receive(size_t want, int timeout_ms = 15000) {
    std::map<std::string, std::vector<std::string>> by_topic;
    size_t got = 0;
    const auto deadline = std::chrono::steady_clock::now() + Ms(timeout_ms);
    while (got < want && std::chrono::steady_clock::now() < deadline) {
      zmq::pollitem_t item{sub.handle(), 0, ZMQ_POLLIN, 0};
      if (zmq::poll(&item, 1, Ms(50)) <= 0) continue;
      zmq::message_t topic, body;
      REQUIRE(sub.recv(topic).has_value());
      REQUIRE(topic.more());
      REQUIRE(sub.recv(body).has_value());
      REQUIRE(!body.more());
      const std::string t = topic.to_string();
      if (t == "u.PROBE") continue;
      by_topic[t].push_back(body.to_string());
      ++got;
    }
    return by_topic;
  }

  EngineConfig config_;
  zmq::context_t ctx;
  zmq::socket_t feed{ctx, zmq::socket_type::pub};
  zmq::socket_t sub{ctx, zmq::socket_type::sub};
  std::unique_ptr<ZmqTransport> transport_;
  std::unique_ptr<Engine> engine_;
  std::thread thread_;
  absl::Status run_status_;
};

// Reference: the offline FilterSeries (online_filter.h) of the same model,
// parameters and starting state (unconditional variance), relative 1e-12.
TEST_CASE("end to end over TCP loopback equals the offline filter", "[engine][e2e]") {
  const bool binary = GENERATE(false, true);
  INFO((binary ? "binary" : "json"));
  std::string toml = testing::kFixedModelToml;
  if (binary) toml += "[feed]\nencoding = \"binary\"\n[publish]\nencoding = \"binary\"\n";
  Harness h(testing::ParseConfigOrDie(toml));
  h.WaitUntilLive();
  // Probes lost to the slow joiner never reach the engine: count from here.
  const EngineCounters base = h.Settled();

  const std::vector<std::string> syms = {"ALDER.X", "BIRCH.Y", "CEDAR.Z", "DOGWOOD.W"};
  const int n = 400;
  std::vector<std::vector<double>> rets;
  for (size_t s = 0; s < syms.size(); ++s) rets.push_back(testing::TestReturns(n, 100 + s));
  for (int i = 0; i < n; ++i) {
    if (binary && i % 2 == 1) {
      // Odd bars of every symbol as one batch frame on topic "*".
      std::vector<Tick> batch;
      for (size_t s = 0; s < syms.size(); ++s)
        batch.push_back(ReturnTick(syms[s], kT0 + i * kSec, rets[s][i]));
      std::string body;
      EncodeBatchBinary(batch, &body);
      h.feed.send(zmq::str_buffer("*"), zmq::send_flags::sndmore);
      h.feed.send(zmq::buffer(body), zmq::send_flags::none);
      continue;
    }
    for (size_t s = 0; s < syms.size(); ++s)
      h.SendTick(ReturnTick(syms[s], kT0 + i * kSec, rets[s][i]));
  }
  auto got = h.Receive(syms.size() * n);

  auto model = FilterModel::Create(h.config_.model.params, testing::OutputsOf(h.config_), 1);
  REQUIRE(model.ok());
  const std::vector<std::string> keys = {
      "s",     "t",        "r",       "mu",    "eps",           "var",
      "z",     "var_next", "vol_ann", "var_h", "value_at_risk", "es",
      "scale", "ver",      "flags"};
  for (size_t s = 0; s < syms.size(); ++s) {
    const auto& bodies = got["u." + syms[s]];
    REQUIRE(bodies.size() == static_cast<size_t>(n));
    const auto ref = FilterSeries(*model, 0.0, rets[s]);
    for (int i = 0; i < n; ++i) {
      BarUpdate u;
      if (binary) {
        REQUIRE(DecodeUpdateBinary(bodies[i], &u).ok());
      } else {
        REQUIRE(DecodeUpdateJson(bodies[i], &u).ok());
        const auto j = nlohmann::json::parse(bodies[i]);
        REQUIRE(j.size() == keys.size());
        for (const auto& k : keys) REQUIRE(j.contains(k));
        CHECK(j["s"] == syms[s]);
      }
      CHECK(u.symbol.view() == syms[s]);
      CHECK(u.t_ns == kT0 + i * kSec);
      CHECK(RelDiff(u.var, ref[i].var) < 1e-12);
      CHECK(RelDiff(u.z, ref[i].z) < 1e-12);
      CHECK(RelDiff(u.var_next, ref[i].var_next) < 1e-12);
    }
  }
  const EngineCounters c = Snapshot(h.engine_.get());
  CHECK(c.updates_out - base.updates_out == static_cast<uint64_t>(syms.size() * n));
  CHECK(c.ticks_in - base.ticks_in == static_cast<uint64_t>(syms.size() * n));
  CHECK(c.drops == 0);
  CHECK(c.RejectTotal() == 0);
  h.Stop();
  CHECK(h.run_status_.ok());
}

TEST_CASE("bad input over the wire is counted and the engine keeps publishing", "[engine][e2e]") {
  Harness h(testing::ParseConfigOrDie(testing::kFixedModelToml));
  h.WaitUntilLive();
  const EngineCounters base = h.Settled();
  // one-frame message, three-frame message, malformed JSON, a NaN, a bad symbol
  h.feed.send(zmq::str_buffer("ALONE"), zmq::send_flags::none);
  h.feed.send(zmq::str_buffer("GOOD.A"), zmq::send_flags::sndmore);
  h.feed.send(zmq::str_buffer("{}"), zmq::send_flags::sndmore);
  h.feed.send(zmq::str_buffer("{}"), zmq::send_flags::none);
  h.feed.send(zmq::str_buffer("GOOD.A"), zmq::send_flags::sndmore);
  h.feed.send(zmq::str_buffer("{\"t\":"), zmq::send_flags::none);
  h.feed.send(zmq::str_buffer("GOOD.A"), zmq::send_flags::sndmore);
  h.feed.send(zmq::str_buffer("{\"t\":5,\"r\":Infinity}"), zmq::send_flags::none);
  h.feed.send(zmq::str_buffer("NO GOOD"), zmq::send_flags::sndmore);
  h.feed.send(zmq::str_buffer("{\"t\":5,\"r\":0.1}"), zmq::send_flags::none);
  for (int i = 0; i < 20; ++i)
    h.SendTick(ReturnTick("GOOD.A", kT0 + i * kSec, 0.001 * (i % 3 - 1)));
  auto got = h.Receive(20);
  CHECK(got["u.GOOD.A"].size() == 20);
  const EngineCounters c = Snapshot(h.engine_.get());
  CHECK(c.rejects.Get(RejectReason::kMalformedJson) == 3);  // 1-frame, 3-frame, syntax
  CHECK(c.rejects.Get(RejectReason::kNonFinite) == 1);
  CHECK(c.rejects.Get(RejectReason::kBadSymbol) == 1);
  CHECK(c.updates_out - base.updates_out == 20);
}

TEST_CASE("a subscriber that never reads does not block ingest; drops are counted",
          "[engine][e2e]") {
  EngineConfig config = testing::ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                                                  "[publish]\nhigh_water_mark = 10\n");
  Harness h(config, /*sub_rcvhwm=*/10);
  h.WaitUntilLive();
  const EngineCounters base = h.Settled();
  // From here on the subscriber never reads.
  const int n = 100000;
  const auto start = std::chrono::steady_clock::now();
  for (int i = 0; i < n; ++i)
    h.SendTick(ReturnTick("LARCH.S", kT0 + i, 0.001 * ((i % 5) - 2) + 1e-4));
  EngineCounters c;
  const auto deadline = start + std::chrono::seconds(20);
  do {
    std::this_thread::sleep_for(Ms(20));
    c = Snapshot(h.engine_.get());
  } while (c.ticks_in - base.ticks_in < static_cast<uint64_t>(n) &&
           std::chrono::steady_clock::now() < deadline);
  const double secs =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  INFO("seconds " << secs << " updates_out " << c.updates_out << " drops " << c.drops);
  CHECK(c.ticks_in - base.ticks_in == static_cast<uint64_t>(n));
  CHECK(c.drops > 0);
  CHECK(c.updates_out + c.drops == c.bars);
  CHECK(secs < 20);
}

TEST_CASE("a finite source: Run() returns at its end after closing open bars", "[engine]") {
  EngineConfig config = testing::ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                                                  "[bars]\ninterval = \"1s\"\n");
  std::string csv = "symbol,time,return\n";
  for (int i = 0; i < 50; ++i) {
    csv += absl::StrCat("MAPLE.F,", kT0 + int64_t{i} * 250000000, ",0.001\n");
  }
  auto reader = TickFileReader::FromString(csv, "t.csv");
  REQUIRE(reader.ok());
  auto sink = std::make_unique<testing::CollectingSink>();
  testing::CollectingSink* raw = sink.get();
  ManualClock clock(kT0);
  auto engine = Engine::Create(config, std::make_unique<TickFileSource>(*std::move(reader)),
                               std::move(sink), &clock);
  REQUIRE(engine.ok());
  REQUIRE((*engine)->Run().ok());
  // 50 ticks, 4 per 1 s bar: 13 bars (the last one closed at the end of input).
  CHECK(raw->messages.size() == 13);
  CHECK((*engine)->core()->counters().bars == 13);
  BarUpdate last;
  REQUIRE(DecodeUpdateJson(raw->messages.back().body, &last).ok());
  CHECK(RelDiff(last.r, 0.002) < 1e-12);
  CHECK((last.flags & kFlagStale) == 0);
}

// A source that hands over a fixed list of message bodies, then idles.
class ScriptedSource : public TickSource {
 public:
  explicit ScriptedSource(std::vector<std::string> bodies) : bodies_(std::move(bodies)) {}
  int Pump(TickConsumer* consumer, int max_messages) override {
    int n = 0;
    while (n < max_messages && next_ < bodies_.size()) {
      consumer->OnMessage("LARCH.K", bodies_[next_++]);
      ++n;
    }
    if (n == 0) std::this_thread::sleep_for(Ms(1));  // idle: the loop re-posts us
    return n;
  }

 private:
  std::vector<std::string> bodies_;
  size_t next_ = 0;
};

// Ticks of many symbols in two rounds: one return each in second 0, then,
// once the engine's clock tick (at second 2.5, all bars due) has begun, one
// message per Pump in reverse symbol order, so input arrives between the
// tick's slices. Notes how many messages it handed over during a tick.
class TwoRoundSource : public TickSource {
 public:
  TwoRoundSource(int symbols, ManualClock* clock) : symbols_(symbols), clock_(clock) {}
  void set_core(const IngestCore* core) { core_ = core; }
  int Pump(TickConsumer* consumer, int max_messages) override {
    if (first_ < symbols_) {
      int n = 0;
      for (; n < max_messages && first_ < symbols_; ++n, ++first_)
        Send(consumer, first_, kT0 + 1000);
      if (first_ == symbols_) clock_->Set(kT0 + int64_t{2500} * 1000 * 1000);
      return n;
    }
    if (core_->counters().bars_clock_closed == 0) {  // the timer's tick has not begun
      std::this_thread::sleep_for(Ms(1));
      return 0;
    }
    if (second_ == symbols_) return kEndOfInput;
    during_tick += core_->clock_under_way();
    Send(consumer, symbols_ - 1 - second_++, kT0 + 2 * kNanosPerSecond + 1000);
    return 1;
  }
  int during_tick = 0;

 private:
  void Send(TickConsumer* consumer, int s, int64_t t) {
    Tick k;
    k.symbol.assign(absl::StrCat("WREN", s, ".K"));
    k.t_ns = t;
    k.kind = Tick::kReturn;
    k.value = 0.001 * (1 + s % 7);
    body_.clear();
    EncodeTickJson(k, &body_);
    consumer->OnMessage(k.symbol.view(), body_);
  }
  const int symbols_;
  ManualClock* clock_;
  const IngestCore* core_ = nullptr;
  int first_ = 0, second_ = 0;
  std::string body_;
};

TEST_CASE("a clock tick in slices: input between slices, every symbol's updates unchanged",
          "[engine][clock]") {
  EngineConfig config = testing::ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                                                  "[bars]\ninterval = \"1s\"\n");
  constexpr int kSymbols = 2000;
  const auto run = [&](int slice_bars, int* during_tick) {
    ManualClock clock(kT0);
    auto source = std::make_unique<TwoRoundSource>(kSymbols, &clock);
    TwoRoundSource* src = source.get();
    auto sink = std::make_unique<testing::CollectingSink>();
    testing::CollectingSink* raw = sink.get();
    EngineOptions eo;
    eo.clock_tick_ns = 1000 * 1000;
    eo.clock_slice_bars = slice_bars;
    eo.clock_slice_symbols = 64;
    auto engine = Engine::Create(config, std::move(source), std::move(sink), &clock, eo);
    REQUIRE(engine.ok());
    src->set_core((*engine)->core());
    REQUIRE((*engine)->Run().ok());
    CHECK_FALSE((*engine)->core()->clock_under_way());
    // Second 0's bars closed by the clock; second 2's at the end of input.
    CHECK((*engine)->core()->counters().bars_clock_closed == kSymbols);
    CHECK((*engine)->core()->counters().bars == 2 * kSymbols);
    *during_tick = src->during_tick;
    std::map<std::string, std::vector<std::string>> by_topic;
    for (const auto& m : raw->messages) by_topic[m.topic].push_back(m.body);
    return by_topic;
  };
  int whole_during = -1, sliced_during = -1;
  const auto whole = run(0, &whole_during);
  const auto sliced = run(8, &sliced_during);
  CHECK(whole_during == 0);
  // 2,000 bars in slices of 8: the tick spans many Pump calls.
  CHECK(sliced_during > 50);
  REQUIRE(whole.size() == static_cast<size_t>(kSymbols));
  CHECK(whole == sliced);
  for (const auto& [topic, bodies] : whole) REQUIRE(bodies.size() == 2);
}

TEST_CASE("GET /health answers 503 degraded when most inputs are rejected", "[engine][http]") {
  // A producer of JSON ticks against a feed configured for binary frames.
  EngineConfig config = testing::ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                                                  "[feed]\nencoding = \"binary\"\n");
  config.http.endpoint = "127.0.0.1:0";  // any free port (the file format wants 1..65535)
  auto run_with = [&](bool producer_binary) {
    std::vector<std::string> bodies;
    for (int i = 0; i < 50; ++i) {
      std::string body;
      const Tick t = ReturnTick("LARCH.K", kT0 + i * kSec, 0.001);
      producer_binary ? EncodeTickBinary(t, &body) : EncodeTickJson(t, &body);
      bodies.push_back(body);
    }
    EngineOptions o;
    o.serve_http = true;
    ManualClock clock(kT0);
    auto engine = Engine::Create(config, std::make_unique<ScriptedSource>(bodies),
                                 std::make_unique<testing::CollectingSink>(), &clock, o);
    REQUIRE(engine.ok());
    Engine* e = engine->get();
    std::thread runner([e] { (void)e->Run(); });
    const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(10);
    while (std::chrono::steady_clock::now() < deadline && Snapshot(e).messages_in < bodies.size()) {
      std::this_thread::sleep_for(Ms(5));
    }
    const std::string endpoint = e->HttpEndpoint();
    const int port = std::stoi(endpoint.substr(endpoint.rfind(':') + 1));
    const std::string response = testing::HttpGet(port, "/health");
    e->Stop();
    runner.join();
    return response;
  };
  const std::string bad = run_with(false);
  INFO(bad);
  CHECK(bad.rfind("HTTP/1.1 503 Service Unavailable", 0) == 0);
  CHECK(bad.find("{\"status\":\"degraded\",\"symbols\":0,\"updates\":0,\"rejects\":50,"
                 "\"recent_inputs\":50,\"recent_rejects\":50,\"reason\":\"100% of inputs "
                 "rejected in the last minute (50 of 50; most malformed_binary 50)\"}") !=
        std::string::npos);
  const std::string good = run_with(true);
  INFO(good);
  CHECK(good.rfind("HTTP/1.1 200 OK", 0) == 0);
  CHECK(good.find("{\"status\":\"ok\",\"symbols\":1,\"updates\":50,\"rejects\":0,"
                  "\"recent_inputs\":50,\"recent_rejects\":0}") != std::string::npos);
}

// [publish] update_topics = "both": the batches on b.u carry exactly the
// per-symbol updates (the same bytes, in the same order, none missing),
// within batch_max_updates; "batch" alone sends no per-symbol message.
TEST_CASE("update batches on b.u equal the per-symbol updates", "[engine][e2e][batch]") {
  const bool binary = GENERATE(false, true);
  const WireEncoding enc = binary ? WireEncoding::kBinary : WireEncoding::kJson;
  INFO((binary ? "binary" : "json"));
  std::string toml = testing::kFixedModelToml;
  if (binary) toml += "[feed]\nencoding = \"binary\"\n";
  toml += absl::StrCat("[publish]\nencoding = \"", binary ? "binary" : "json",
                       "\"\nupdate_topics = \"both\"\nbatch_max_updates = 7\n");
  Harness h(testing::ParseConfigOrDie(toml));
  h.sub.set(zmq::sockopt::subscribe, std::string(kUpdateBatchTopic));
  h.WaitUntilLive();
  // Both subscriptions live: probe until a batch comes back too.
  bool batch_live = false;
  for (int i = 0; i < 2000 && !batch_live; ++i) {
    h.SendTick(ReturnTick("PROBE", kT0 + 100000 + i, 0.001));
    zmq::pollitem_t item{h.sub.handle(), 0, ZMQ_POLLIN, 0};
    while (zmq::poll(&item, 1, Ms(5)) > 0) {
      zmq::message_t topic, body;
      REQUIRE(h.sub.recv(topic).has_value());
      REQUIRE(h.sub.recv(body).has_value());
      batch_live = batch_live || topic.to_string() == kUpdateBatchTopic;
    }
  }
  REQUIRE(batch_live);
  const EngineCounters base = h.Settled();

  const std::vector<std::string> syms = {"ALDER.X", "BIRCH.Y", "CEDAR.Z", "DOGWOOD.W", "ELM.V"};
  const int n = 200;
  std::vector<std::vector<double>> rets;
  for (size_t s = 0; s < syms.size(); ++s) rets.push_back(testing::TestReturns(n, 300 + s));
  for (int i = 0; i < n; ++i) {
    if (i % 2 == 1) {  // odd bars: all symbols in one "*" message (5 updates in one round)
      std::vector<Tick> batch;
      for (size_t s = 0; s < syms.size(); ++s)
        batch.push_back(ReturnTick(syms[s], kT0 + i * kSec, rets[s][i]));
      std::string body;
      binary ? EncodeBatchBinary(batch, &body) : EncodeBatchJson(batch, &body);
      h.feed.send(zmq::str_buffer("*"), zmq::send_flags::sndmore);
      h.feed.send(zmq::buffer(body), zmq::send_flags::none);
      continue;
    }
    for (size_t s = 0; s < syms.size(); ++s)
      h.SendTick(ReturnTick(syms[s], kT0 + i * kSec, rets[s][i]));
  }
  const size_t want = syms.size() * n;
  std::vector<std::string> singles, batched;
  std::vector<size_t> batch_sizes;
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(20);
  while ((singles.size() < want || batched.size() < want) &&
         std::chrono::steady_clock::now() < deadline) {
    zmq::pollitem_t item{h.sub.handle(), 0, ZMQ_POLLIN, 0};
    if (zmq::poll(&item, 1, Ms(50)) <= 0) continue;
    zmq::message_t topic, body;
    REQUIRE(h.sub.recv(topic).has_value());
    REQUIRE(h.sub.recv(body).has_value());
    const std::string t = topic.to_string();
    if (t == kUpdateBatchTopic) {
      std::vector<absl::string_view> recs;
      const std::string b = body.to_string();
      const absl::Status st = SplitUpdateBatch(b, enc, &recs);
      INFO(st.ToString());
      REQUIRE(st.ok());
      batch_sizes.push_back(recs.size());
      for (absl::string_view r : recs) {
        BarUpdate u;
        REQUIRE((binary ? DecodeUpdateBinary(r, &u) : DecodeUpdateJson(r, &u)).ok());
        if (u.symbol.view() != "PROBE") batched.emplace_back(r);
      }
    } else if (t != "u.PROBE") {
      singles.push_back(body.to_string());
    }
  }
  REQUIRE(singles.size() == want);
  REQUIRE(batched.size() == want);
  CHECK(batched == singles);  // same values (bytes), same order, nothing missing
  size_t largest = 0;
  for (size_t k : batch_sizes) {
    CHECK(k >= 1);
    CHECK(k <= 7);
    largest = std::max(largest, k);
  }
  CHECK(largest >= 3);  // a "*" message's 5 updates share a round: at most two batches
  // Every symbol's updates in bar order.
  std::map<std::string, int64_t> last_t;
  for (const std::string& r : batched) {
    BarUpdate u;
    REQUIRE((binary ? DecodeUpdateBinary(r, &u) : DecodeUpdateJson(r, &u)).ok());
    const std::string sym(u.symbol.view());
    CHECK(u.t_ns > last_t[sym]);
    last_t[sym] = u.t_ns;
  }
  CHECK(last_t.size() == syms.size());
  std::promise<std::string> metrics;
  auto f = metrics.get_future();
  h.engine_->Post([&] { metrics.set_value(FormatPrometheusMetrics(*h.engine_->core())); });
  const std::string m = f.get();
  CHECK(m.find("aftershock_update_batches_total ") != std::string::npos);
  CHECK(m.find("aftershock_update_batch_drops_total 0\n") != std::string::npos);
  const EngineCounters c = Snapshot(h.engine_.get());
  CHECK(c.updates_out - base.updates_out == want);
  CHECK(c.drops == 0);
  h.Stop();
  CHECK(h.run_status_.ok());
}

TEST_CASE("update_topics = \"batch\": no per-symbol messages, every update batched",
          "[engine][e2e][batch]") {
  Harness h(testing::ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                                      "[publish]\nupdate_topics = \"batch\"\n"));
  h.sub.set(zmq::sockopt::subscribe, std::string(kUpdateBatchTopic));
  // Probes until a batch with a probe comes back (no u. topic exists now).
  bool live = false;
  for (int i = 0; i < 2000 && !live; ++i) {
    h.SendTick(ReturnTick("PROBE", kT0 + i, 0.001));
    zmq::pollitem_t item{h.sub.handle(), 0, ZMQ_POLLIN, 0};
    while (zmq::poll(&item, 1, Ms(5)) > 0) {
      zmq::message_t topic, body;
      REQUIRE(h.sub.recv(topic).has_value());
      REQUIRE(h.sub.recv(body).has_value());
      REQUIRE(topic.to_string() == kUpdateBatchTopic);
      live = true;
    }
  }
  REQUIRE(live);
  const EngineCounters base = h.Settled();
  for (int i = 0; i < 300; ++i)
    h.SendTick(ReturnTick("HAZEL.T", kT0 + i * kSec, 1e-3 * (i % 7 - 3)));
  size_t got = 0;
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(20);
  while (got < 300 && std::chrono::steady_clock::now() < deadline) {
    zmq::pollitem_t item{h.sub.handle(), 0, ZMQ_POLLIN, 0};
    if (zmq::poll(&item, 1, Ms(50)) <= 0) continue;
    zmq::message_t topic, body;
    REQUIRE(h.sub.recv(topic).has_value());
    REQUIRE(h.sub.recv(body).has_value());
    REQUIRE(topic.to_string() == kUpdateBatchTopic);
    std::vector<absl::string_view> recs;
    const std::string b = body.to_string();
    REQUIRE(SplitUpdateBatch(b, WireEncoding::kJson, &recs).ok());
    for (absl::string_view r : recs) got += r.find("\"s\":\"HAZEL.T\"") != absl::string_view::npos;
  }
  CHECK(got == 300);
  CHECK(Snapshot(h.engine_.get()).updates_out - base.updates_out == 300);
}

// [feed] busy_poll_us: the ingest thread polls without sleeping; the updates
// are the offline filter's, posted work (Snapshot) and Stop() are served.
TEST_CASE("low-latency mode: busy polling publishes the same updates", "[engine][e2e][spin]") {
  Harness h(testing::ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                                      "[feed]\nbusy_poll_us = 200000\n"));
  h.WaitUntilLive();
  const EngineCounters base = h.Settled();
  const std::vector<double> rets = testing::TestReturns(300, 77);
  for (int i = 0; i < 300; ++i) {
    h.SendTick(ReturnTick("ROWAN.S", kT0 + i * kSec, rets[i]));
    // Gaps longer than busy_poll_us now and then: the loop falls back to
    // waiting on the descriptor and is woken again.
    if (i % 100 == 50) std::this_thread::sleep_for(Ms(300));
  }
  auto got = h.Receive(300);
  const auto& bodies = got["u.ROWAN.S"];
  REQUIRE(bodies.size() == 300);
  auto model = FilterModel::Create(h.config_.model.params, testing::OutputsOf(h.config_), 1);
  REQUIRE(model.ok());
  const auto ref = FilterSeries(*model, 0.0, rets);
  for (int i = 0; i < 300; ++i) {
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(bodies[i], &u).ok());
    CHECK(u.t_ns == kT0 + i * kSec);
    CHECK(RelDiff(u.z, ref[i].z) < 1e-12);
    CHECK(RelDiff(u.var_next, ref[i].var_next) < 1e-12);
  }
  CHECK(Snapshot(h.engine_.get()).updates_out - base.updates_out == 300);
  const auto t0 = std::chrono::steady_clock::now();
  h.Stop();
  CHECK(h.run_status_.ok());
  CHECK(std::chrono::steady_clock::now() - t0 < std::chrono::seconds(5));
}

}  // namespace
}  // namespace aftershock
