// `aftershock run` with [feed] source = "nats" as real processes against a
// real nats-server -js: two instances split the partitions; after `kill -9`
// of one, the other takes its partitions over within the lease time plus 5 s
// and replays them (every published tick is taken once by the survivor);
// SIGTERM releases the leases at once. `simulate --nats` publishes the ticks
// and `cluster status --json` is the observer.
//
// The two fault tests (kill -9 mid-stream, rolling restart) use 24 invented
// instruments x 500 one-minute bars (12,000 ticks) published at 2,000 and
// 1,500 ticks/s; AFTERSHOCK_TEST_SYMBOLS, AFTERSHOCK_TEST_BARS and
// AFTERSHOCK_TEST_RATE (ticks/s, both tests) override the sizes, e.g. 50 x
// 5,000 for the scale-out issue's full size (README "Scale-out"). The faults'
// moments keep their place in the feed and the wait for the last updates
// grows with the tick count. The ctest runs the default size only.
#include <fcntl.h>
#include <nats/nats.h>
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <map>
#include <mutex>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>
#include <thread>
#include <utility>
#include <vector>

#include "support/engine_cluster.h"
#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::Owners;
using testing::RunProcess;
using testing::Status;
using testing::UpdateKey;
using testing::WaitFor;

TEST_CASE("run on JetStream: kill -9 of one instance, takeover, clean release") {
  testing::SkipUnlessNatsServer();
  const std::string dir = testing::ScratchDir("run_nats");
  testing::NatsServer server(dir);
  const double lease = 2;
  const int http_port = testing::FreeLoopbackPort();  // eng-a's /metrics and /health
  auto config = [&](const std::string& name, const std::string& http) {
    return testing::WriteFile(dir + "/" + name + ".toml",
                              "[feed]\nsource = \"nats\"\n[nats]\nservers = [\"" + server.url() +
                                  "\"]\nlease_seconds = 2\ninstance = \"" + name +
                                  "\"\n[publish]\nendpoint = \"tcp://127.0.0.1:*\"\n[http]\n" +
                                  http + "\n[bars]\ninterval = \"1m\"\n[refit]\nevery_bars = 0\n");
  };
  const std::string ca =
      config("eng-a", "endpoint = \"127.0.0.1:" + std::to_string(http_port) + "\"");
  const std::string cb = config("eng-b", "enabled = false");

  // 4 invented instruments x 50 one-minute bars, one tick a bar.
  const testing::CommandResult sim = testing::RunCli(
      {"simulate", "--nats", ca, "--symbols", "4", "--bars", "50", "--rate", "0", "--quiet"});
  INFO(sim.err);
  REQUIRE(sim.exit_code == 0);
  CHECK(sim.err.find("published 200 ticks") != std::string::npos);

  RunProcess a(ca, dir + "/a.err");
  REQUIRE(WaitFor(
              ca, [](const nlohmann::json& s) { return Owners(s)["eng-a"] == 12; }, 10) >= 0);
  RunProcess b(cb, dir + "/b.err");
  REQUIRE(WaitFor(
              ca,
              [](const nlohmann::json& s) {
                auto o = Owners(s);
                return o["eng-a"] == 6 && o["eng-b"] == 6;
              },
              10) >= 0);

  // kill -9: no release. The survivor holds all 12 within lease + 5 s.
  CHECK(b.Signal(SIGKILL) == 128 + SIGKILL);
  const double takeover = WaitFor(
      ca, [](const nlohmann::json& s) { return Owners(s)["eng-a"] == 12; }, lease + 5);
  std::printf("takeover after kill -9 observed in %.2f s (lease %.0f s)\n", takeover, lease);
  REQUIRE(takeover >= 0);
  auto s = Status(ca);
  CHECK(s["instances"] == nlohmann::json::array({"eng-a"}));

  // Let A read the taken-over partitions; its figures show the takeover.
  std::this_thread::sleep_for(std::chrono::milliseconds(1500));
  const std::string metrics = testing::HttpGet(http_port, "/metrics");
  INFO(metrics);
  CHECK(metrics.find("\naftershock_nats_partitions_owned 12\n") != std::string::npos);
  CHECK(metrics.find("\naftershock_nats_takeovers_total 6\n") != std::string::npos);
  CHECK(metrics.find("\naftershock_nats_replay_lag_messages 0\n") != std::string::npos);
  CHECK(metrics.find("\naftershock_nats_messages_total 200\n") != std::string::npos);
  CHECK(metrics.find("\naftershock_nats_lease_renewals_total 0\n") == std::string::npos);
  const std::string health = testing::HttpGet(http_port, "/health");
  INFO(health);
  CHECK(
      health.find("\"nats\":{\"instance\":\"eng-a\",\"partitions\":[0,1,2,3,4,5,6,7,8,9,10,11]") !=
      std::string::npos);
  CHECK(health.find("\"takeovers\":6") != std::string::npos);
  CHECK(a.Signal(SIGTERM) == 0);
  const std::string err = testing::ReadFileOrDie(a.err_path);
  INFO(err);
  CHECK(err.find("took over partition(s)") != std::string::npos);
  // A read its own partitions and B's from their first message: all 200 ticks once.
  CHECK(err.find("stopped; 200 messages, 200 ticks") != std::string::npos);
  // Released on SIGTERM: every partition free at once, no live instance.
  s = Status(ca);
  CHECK(s["instances"].empty());
  CHECK(Owners(s)[""] == 12);
  // A's final checkpoints: the partitions that had ticks have one covering
  // their last sequence (200 ticks in the stream), the others none.
  int with_checkpoint = 0;
  for (const auto& p : s["partitions"]) {
    const uint64_t seq = p["checkpoint_sequence"].get<uint64_t>();
    const double age = p["checkpoint_age_s"].get<double>();
    if (seq > 0) {
      ++with_checkpoint;
      CHECK(seq <= 200);
      CHECK(age >= 0);
    } else {
      CHECK(age == -1);
    }
  }
  CHECK(with_checkpoint >= 1);
}

// Simulated market shared by the fault tests: 24 invented instruments x 500
// one-minute bars, one tick a bar (the wall clock closes each bar after its
// tick, in the cluster and in the replay alike), published at `rate` ticks/s,
// unless the environment overrides them (see the top).
testing::TestMarket Market(double rate) { return testing::MarketFromEnv(24, 500, rate); }
constexpr int kSeed = 5;

std::map<UpdateKey, std::string> ReplayReference(const std::string& dir, const std::string& config,
                                                 const testing::TestMarket& market) {
  return testing::ReplayReference(dir, config, market.args(kSeed));
}

// The `simulate --nats` command publishing `market` with `config`.
std::vector<std::string> FeedCommand(const std::string& config, const testing::TestMarket& market) {
  std::vector<std::string> sim = {"simulate", "--nats", config, "--quiet"};
  for (const std::vector<std::string>& more : {market.rate_args(), market.args(kSeed)})
    sim.insert(sim.end(), more.begin(), more.end());
  std::printf("%d instruments x %d bars = %lld ticks at %g ticks/s, about %.1f s of feed\n",
              market.symbols, market.bars, static_cast<long long>(market.ticks()), market.rate,
              market.feed_seconds());
  return sim;
}

// 240 s for the last updates at the default size; 1 s per 500 ticks when that
// is more.
double UpdatesLimit(const testing::TestMarket& market) {
  return std::max(240.0, static_cast<double>(market.ticks()) / 500);
}

// `fraction` of the feed's duration.
std::chrono::milliseconds IntoFeed(const testing::TestMarket& market, double fraction) {
  return std::chrono::milliseconds(std::llround(market.feed_seconds() * fraction * 1000));
}

std::string FaultConfig(const std::string& dir, const std::string& url, const std::string& name) {
  return testing::FaultConfig(dir, {url}, name);
}

using testing::AwaitUpdates;
using testing::CatchUpLines;
using testing::CompareWithReplay;
using testing::UpdateCollector;

TEST_CASE("kill -9 of one of three instances mid-stream: the updates equal a replay") {
  testing::SkipUnlessNatsServer();
  const std::string dir = testing::ScratchDir("run_nats_kill");
  testing::NatsServer server(dir);
  const std::string ca = FaultConfig(dir, server.url(), "eng-a");
  const std::string cb = FaultConfig(dir, server.url(), "eng-b");
  const std::string cc = FaultConfig(dir, server.url(), "eng-c");
  const testing::TestMarket market = Market(2000);
  const std::map<UpdateKey, std::string> want = ReplayReference(dir, ca, market);
  // A bar's update needs its tick and a fitted model: over 10,000 of 12,000 by default.
  REQUIRE(want.size() * 6 > static_cast<size_t>(market.ticks()) * 5);

  UpdateCollector collector(server.url(), "upd");
  RunProcess a(ca, dir + "/a.err");
  RunProcess b(cb, dir + "/b.err");
  RunProcess c(cc, dir + "/c.err");
  REQUIRE(WaitFor(
              ca,
              [](const nlohmann::json& s) {
                auto o = Owners(s);
                return o["eng-a"] == 4 && o["eng-b"] == 4 && o["eng-c"] == 4;
              },
              30) >= 0);
  // By default 12,000 ticks at 2,000 a second: about 6 s of feed; B dies 5/12
  // into it (2.5 s).
  RunProcess feed(FeedCommand(ca, market), dir + "/sim.err");
  std::this_thread::sleep_for(IntoFeed(market, 5.0 / 12));
  const auto killed = std::chrono::steady_clock::now();
  CHECK(b.Signal(SIGKILL) == 128 + SIGKILL);
  const double takeover = WaitFor(
      ca,
      [](const nlohmann::json& s) {
        auto o = Owners(s);
        return o["eng-a"] == 6 && o["eng-c"] == 6;
      },
      2 + 5 + 10);  // lease + 5 s, plus slack for `cluster status` on a loaded machine
  std::printf(
      "kill -9 mid-stream: partitions owned by the survivors %.2f s after the kill "
      "(lease 2 s)\n",
      takeover);
  CHECK(takeover >= 0);
  CHECK(feed.Wait() == 0);

  int conflicts = 0;
  const std::map<UpdateKey, std::string> got =
      AwaitUpdates(&collector, want.size(), UpdatesLimit(market), &conflicts);
  CHECK(conflicts == 0);  // every duplicate is byte-identical
  CompareWithReplay(got, want);
  const testing::UpdatePauses pauses = testing::PausesAfter(&collector, killed);
  std::printf(
      "kill -9 mid-stream: longest pause in the updates after it %.2f s; longest pause of one "
      "instrument's updates %.2f s (lease 2 s)\n",
      pauses.longest, pauses.instrument);
  CHECK(a.Signal(SIGTERM) == 0);
  CHECK(c.Signal(SIGTERM) == 0);
  const std::string ea = testing::ReadFileOrDie(a.err_path);
  const std::string ec = testing::ReadFileOrDie(c.err_path);
  INFO(ea);
  INFO(ec);
  CHECK((ea + ec).find("took over partition(s)") != std::string::npos);
  CHECK((ea + ec).find("restoring its checkpoint") != std::string::npos);
  for (const std::string& line : CatchUpLines(ea + ec)) std::printf("%s\n", line.c_str());
  std::printf("updates: %zu published (with duplicates), %zu distinct, replay %zu\n",
              collector.bodies().size(), got.size(), want.size());
}

TEST_CASE("rolling restart of three instances: the updates equal a replay") {
  testing::SkipUnlessNatsServer();
  const std::string dir = testing::ScratchDir("run_nats_rolling");
  testing::NatsServer server(dir);
  const std::vector<std::string> names = {"eng-a", "eng-b", "eng-c"};
  std::vector<std::string> configs;
  for (const std::string& n : names) configs.push_back(FaultConfig(dir, server.url(), n));
  const testing::TestMarket market = Market(1500);
  const std::map<UpdateKey, std::string> want = ReplayReference(dir, configs[0], market);

  UpdateCollector collector(server.url(), "upd");
  std::vector<std::unique_ptr<RunProcess>> engines;
  for (size_t i = 0; i < names.size(); ++i) {
    engines.push_back(std::make_unique<RunProcess>(configs[i], dir + "/" + names[i] + ".err"));
  }
  auto balanced = [](const nlohmann::json& s) {
    auto o = Owners(s);
    return o["eng-a"] == 4 && o["eng-b"] == 4 && o["eng-c"] == 4;
  };
  REQUIRE(WaitFor(configs[0], balanced, 30) >= 0);
  // By default about 8 s of feed; each instance in turn stops (SIGTERM: final
  // checkpoints, leases released) and starts again while ticks flow, one every
  // 3/16 of the feed (1.5 s).
  RunProcess feed(FeedCommand(configs[0], market), dir + "/sim.err");
  const auto feeding = std::chrono::steady_clock::now();
  for (size_t i = 0; i < names.size(); ++i) {
    std::this_thread::sleep_for(IntoFeed(market, 3.0 / 16));
    CHECK(engines[i]->Signal(SIGTERM) == 0);
    engines[i] = std::make_unique<RunProcess>(configs[i], dir + "/" + names[i] + ".err");
  }
  CHECK(feed.Wait() == 0);
  int conflicts = 0;
  const std::map<UpdateKey, std::string> got =
      AwaitUpdates(&collector, want.size(), UpdatesLimit(market), &conflicts);
  CHECK(conflicts == 0);
  CompareWithReplay(got, want);
  const testing::UpdatePauses pauses = testing::PausesAfter(&collector, feeding);
  std::printf(
      "rolling restart: longest pause in the updates %.2f s; longest pause of one instrument's "
      "updates %.2f s (lease 2 s)\n",
      pauses.longest, pauses.instrument);
  CHECK(WaitFor(configs[0], balanced, 30) >= 0);
  std::string logs;
  for (size_t i = 0; i < names.size(); ++i) {
    CHECK(engines[i]->Signal(SIGTERM) == 0);
    logs += testing::ReadFileOrDie(dir + "/" + names[i] + ".err");
  }
  INFO(logs);
  CHECK(logs.find("checkpoint(s) stored at shutdown") != std::string::npos);
  CHECK(logs.find("restoring its checkpoint") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
