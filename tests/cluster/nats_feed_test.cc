// End to end over a real nats-server -js: ticks published through the
// shipped partition() mapping, filtered by engine instances that lease the
// partitions, give exactly the updates of one engine fed the same ticks
// directly (deduplicated by symbol and bar time), also when an instance dies
// mid-stream and another takes its partitions over after the lease expires.
#include "aftershock/nats_feed.h"

#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <map>
#include <random>
#include <set>
#include <string>
#include <thread>
#include <utility>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/clock.h"
#include "aftershock/engine.h"
#include "aftershock/engine_services.h"
#include "aftershock/jetstream_publisher.h"
#include "aftershock/partition_lanes.h"
#include "aftershock/wire.h"
#include "streaming/engine_test_util.h"
#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using Key = std::pair<std::string, int64_t>;  // (symbol, bar time)

// Invented instruments; some names contain '.' and ':'.
const std::vector<std::string> kSymbols = {"QAL.X", "QBR",   "QCE:1", "QDN.Y", "QEM",
                                           "QFO",   "QGR.Z", "QHL",   "QIV",   "QJK-2"};

// Two sessions 09:00-10:00 UTC, two price ticks a minute per symbol, in time
// order across symbols (seeded random walk).
std::vector<Tick> MakeTicks() {
  std::mt19937_64 rng(42);
  std::normal_distribution<double> step(0.0, 0.001);
  std::vector<double> price(kSymbols.size(), 100.0);
  std::vector<Tick> out;
  const int64_t day0 = 1772409600000000000;  // 2026-03-02 00:00 UTC
  for (int day = 0; day < 2; ++day) {
    for (int minute = 0; minute < 60; ++minute) {
      for (int k = 0; k < 2; ++k) {
        for (size_t s = 0; s < kSymbols.size(); ++s) {
          price[s] *= std::exp(step(rng));
          Tick t;
          t.symbol.assign(kSymbols[s]);
          t.t_ns = day0 + day * kNanosPerDay + (9 * 60 + minute) * kNanosPerMinute +
                   (k * 20 + 5 + static_cast<int64_t>(s)) * kNanosPerSecond;
          t.value = price[s];
          out.push_back(t);
        }
      }
    }
  }
  return out;
}

EngineConfig Config(const std::string& url) {
  EngineConfig c = testing::ParseConfigOrDie(
      std::string(testing::kFixedModelToml) +
      "[bars]\ninterval = \"1m\"\nsession = { start = \"09:00\", end = \"10:00\" }\n"
      "[feed]\nsource = \"nats\"\n[nats]\nlease_seconds = 1\nstream = \"FEEDTEST\"\n");
  c.nats.servers = {url};
  return c;
}

// The messages a JSON feed would carry, delivered through OnMessage (the same
// decoding path as the NATS feed), then end of input.
class MessageSource : public TickSource {
 public:
  explicit MessageSource(const std::vector<Tick>& ticks) : ticks_(ticks) {}
  int Pump(TickConsumer* consumer, int max_messages) override {
    if (next_ >= ticks_.size()) return kEndOfInput;
    int n = 0;
    std::string body;
    for (; n < max_messages && next_ < ticks_.size(); ++n, ++next_) {
      EncodeTickJson(ticks_[next_], &body);
      consumer->OnMessage(ticks_[next_].symbol.view(), body);
    }
    return n;
  }

 private:
  const std::vector<Tick>& ticks_;
  size_t next_ = 0;
};

// (symbol, bar time) -> update body, from a sink's u.* messages. Fails the
// test when one key has two different bodies.
void Collect(const testing::CollectingSink& sink, std::map<Key, std::string>* out) {
  for (const auto& m : sink.messages) {
    if (m.topic.rfind("u.", 0) != 0) continue;
    const size_t t = m.body.find("\"t\":");
    REQUIRE(t != std::string::npos);
    const Key key{m.topic.substr(2), std::stoll(m.body.substr(t + 4))};
    auto [it, inserted] = out->emplace(key, m.body);
    INFO(key.first << " " << key.second);
    CHECK(it->second == m.body);  // a duplicate is byte-identical
  }
}

std::map<Key, std::string> Reference(const EngineConfig& config, const std::vector<Tick>& ticks) {
  ManualClock clock(0);
  auto sink = std::make_unique<testing::CollectingSink>();
  testing::CollectingSink* raw = sink.get();
  auto e = Engine::Create(config, std::make_unique<MessageSource>(ticks), std::move(sink), &clock);
  REQUIRE(e.ok());
  // As `aftershock replay` runs it (alert rules and refits attached).
  ServiceOptions so;
  so.mode = RefitMode::kReplay;
  auto services = EngineServices::Attach((*e)->core(), config, so);
  REQUIRE(services.ok());
  REQUIRE((*e)->Run().ok());
  std::map<Key, std::string> out;
  Collect(*raw, &out);
  return out;
}

// One engine instance on the NATS feed, its loop on a thread.
struct Instance {
  ManualClock clock{0};
  testing::CollectingSink* sink = nullptr;
  NatsFeed* feed = nullptr;
  std::unique_ptr<PartitionLanes> lanes;  // with_lanes only; outlives the engine
  std::unique_ptr<Engine> engine;
  std::thread loop;

  // with_lanes: one engine state per partition, checkpointed into JetStream,
  // wired as Engine::CreateFromConfig does for `aftershock run`.
  Instance(EngineConfig config, const std::string& name, bool release_on_destroy = true,
           bool with_lanes = false) {
    config.nats.instance = name;
    auto s = std::make_unique<testing::CollectingSink>();
    sink = s.get();
    NatsFeedOptions o;
    o.release_on_destroy = release_on_destroy;
    if (with_lanes) {
      auto l = PartitionLanes::Create(config, sink, &clock);
      REQUIRE(l.ok());
      lanes = *std::move(l);
      o.partitions = lanes.get();
    }
    auto f = NatsFeed::Open(config, o);
    REQUIRE(f.ok());
    feed = f->get();
    auto e = Engine::Create(config, *std::move(f), std::move(s), &clock);
    REQUIRE(e.ok());
    engine = *std::move(e);
    if (with_lanes) {
      engine->core()->AddObserver(lanes.get());
      engine->core()->AddObserver(feed);
    }
    loop = std::thread([this] { (void)engine->Run(); });
  }
  // Runs fn on the ingest thread and waits for it.
  void OnLoop(std::function<void()> fn) {
    std::atomic<bool> done{false};
    engine->Post([&] {
      fn();
      done = true;
    });
    while (!done) std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  // Stops the loop; with close_bars the open bars are closed first (as at the
  // end of a replay), without it they are lost (as in a crash).
  void Stop(bool close_bars) {
    if (close_bars) OnLoop([this] { engine->core()->CloseAllOpenBars(); });
    engine->Stop();
    loop.join();
  }
};

// Waits (at most 20 s) until the instances' partitions are a partition of
// 0..11 with the given sizes.
void WaitForShares(const std::vector<Instance*>& all, size_t each) {
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(20);
  while (std::chrono::steady_clock::now() < deadline) {
    std::set<int> seen;
    bool ok = true;
    for (Instance* i : all) {
      const auto p = i->feed->stats().partitions;
      ok = ok && p.size() == each;
      seen.insert(p.begin(), p.end());
    }
    if (ok && seen.size() == 12) return;
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  FAIL("partition shares did not settle");
}

// Waits (at most 20 s) until `n` messages were taken in total and nothing is
// pending, then lets the loops finish the last round.
void WaitForMessages(const std::vector<Instance*>& all, uint64_t n) {
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(20);
  while (std::chrono::steady_clock::now() < deadline) {
    uint64_t got = 0, lag = 0;
    for (Instance* i : all) {
      const NatsFeedStats s = i->feed->stats();
      got += s.messages;
      lag += s.replay_lag;
    }
    if (got >= n && lag == 0) {
      for (Instance* i : all) i->OnLoop([] {});  // the round in progress is done
      return;
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  FAIL("messages were not all consumed");
}

void PublishAll(const EngineConfig& config, const std::vector<Tick>& ticks, size_t begin,
                size_t end) {
  auto pub = JetStreamTickPublisher::Connect(config.nats);
  REQUIRE(pub.ok());
  for (size_t i = begin; i < end; ++i) REQUIRE((*pub)->Publish(ticks[i]).ok());
  REQUIRE((*pub)->Flush(10000).ok());
}

TEST_CASE("two instances share the partitions and together equal one engine") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("nats_feed_share"));
  const EngineConfig config = Config(server.url());
  const std::vector<Tick> ticks = MakeTicks();
  const std::map<Key, std::string> want = Reference(config, ticks);
  // 10 symbols x 2 sessions x 60 bars, less the first bar of each session
  // (it has no return).
  REQUIRE(want.size() == 1180);

  Instance a(config, "eng-a");
  Instance b(config, "eng-b");
  WaitForShares({&a, &b}, 6);
  PublishAll(config, ticks, 0, ticks.size());
  WaitForMessages({&a, &b}, ticks.size());
  a.Stop(true);
  b.Stop(true);

  // Each symbol was filtered by exactly one instance, and nothing twice.
  std::set<std::string> sa, sb;
  for (const auto& m : a.sink->messages) {
    if (m.topic.rfind("u.", 0) == 0) sa.insert(m.topic.substr(2));
  }
  for (const auto& m : b.sink->messages) {
    if (m.topic.rfind("u.", 0) == 0) sb.insert(m.topic.substr(2));
  }
  CHECK(!sa.empty());
  CHECK(!sb.empty());
  for (const std::string& s : sa) CHECK(sb.count(s) == 0);
  CHECK(sa.size() + sb.size() == kSymbols.size());
  CHECK(a.feed->stats().messages + b.feed->stats().messages == ticks.size());

  std::map<Key, std::string> got;
  Collect(*a.sink, &got);
  Collect(*b.sink, &got);
  CHECK(got.size() == want.size());
  CHECK(got == want);
}

TEST_CASE("after an instance dies its partitions are taken over and replayed") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("nats_feed_takeover"));
  const EngineConfig config = Config(server.url());
  const std::vector<Tick> ticks = MakeTicks();
  const std::map<Key, std::string> want = Reference(config, ticks);

  Instance a(config, "eng-a");
  auto b = std::make_unique<Instance>(config, "eng-b", /*release_on_destroy=*/false);
  WaitForShares({&a, b.get()}, 6);
  const size_t half = ticks.size() / 2;
  PublishAll(config, ticks, 0, half);
  WaitForMessages({&a, b.get()}, half);

  // B dies: no bar closed, no lease released. Its updates so far stay out
  // there (a consumer deduplicates them).
  b->Stop(false);
  std::map<Key, std::string> got;
  Collect(*b->sink, &got);
  b.reset();
  PublishAll(config, ticks, half, ticks.size());

  // A takes over B's six partitions after the lease time and replays them
  // from the start of the stream, then goes on with the second half.
  WaitForShares({&a}, 12);
  const NatsFeedStats s = a.feed->stats();
  CHECK(s.leases.takeovers == 6);
  // A reads its own partitions once and B's from their first message: every
  // tick exactly once in total.
  WaitForMessages({&a}, ticks.size());
  CHECK(a.feed->stats().messages == ticks.size());
  a.Stop(true);
  Collect(*a.sink, &got);
  CHECK(got.size() == want.size());
  CHECK(got == want);
}

// Without its last bar per symbol: a running engine has not closed those
// (its clock is before their end), a finished replay has.
std::map<Key, std::string> WithoutLastBars(std::map<Key, std::string> m) {
  std::map<std::string, int64_t> last;
  for (const auto& [k, body] : m) last[k.first] = std::max(last[k.first], k.second);
  for (const auto& [symbol, t] : last) m.erase(Key{symbol, t});
  return m;
}

TEST_CASE("with partition lanes a taken-over partition resumes from its checkpoint") {
  testing::SkipUnlessNatsServer();
  testing::NatsServer server(testing::ScratchDir("nats_feed_lanes"));
  EngineConfig config = Config(server.url());
  config.nats.checkpoint_seconds = 0.2;
  const std::vector<Tick> ticks = MakeTicks();
  const std::map<Key, std::string> want = WithoutLastBars(Reference(config, ticks));

  Instance a(config, "eng-a", true, /*with_lanes=*/true);
  auto b = std::make_unique<Instance>(config, "eng-b", /*release_on_destroy=*/false,
                                      /*with_lanes=*/true);
  WaitForShares({&a, b.get()}, 6);
  const size_t half = ticks.size() / 2 + 7;  // mid-minute: bars are open at the cut
  PublishAll(config, ticks, 0, half);
  WaitForMessages({&a, b.get()}, half);
  // Every message B took is in a stored checkpoint: every held partition's
  // stored state was captured (or found current) after B had them all, i.e.
  // its age is below the time since then.
  const auto all_taken = std::chrono::steady_clock::now();
  const auto deadline = all_taken + std::chrono::seconds(20);
  while (true) {
    const NatsFeedStats s = b->feed->stats();
    const double since =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - all_taken).count();
    if (s.checkpoints_written > 0 && s.checkpoint_age_seconds >= 0 &&
        s.checkpoint_age_seconds < since - 0.01) {
      break;
    }
    REQUIRE(std::chrono::steady_clock::now() < deadline);
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  const uint64_t b_messages = b->feed->stats().messages;
  REQUIRE(b_messages > 0);

  // B dies: no final checkpoint, no release, open bars lost with it.
  b->Stop(false);
  std::map<Key, std::string> got;
  Collect(*b->sink, &got);
  b.reset();
  PublishAll(config, ticks, half, ticks.size());

  WaitForShares({&a}, 12);
  const NatsFeedStats s = a.feed->stats();
  CHECK(s.leases.takeovers == 6);
  CHECK(s.restores >= 1);  // B's partitions that had ticks came back from checkpoints
  CHECK(s.restores + s.fresh_starts == 12 + 6);
  // A did not re-read what B's checkpoints cover: every tick was taken once
  // by one of the two.
  WaitForMessages({&a}, ticks.size() - b_messages);
  CHECK(a.feed->stats().messages == ticks.size() - b_messages);
  a.Stop(false);
  Collect(*a.sink, &got);
  CHECK(got.size() == want.size());
  CHECK(got == want);
}

}  // namespace
}  // namespace aftershock
