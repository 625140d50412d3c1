// `aftershock run` with [feed] source = "nats" as real processes against a
// real nats-server -js: two instances split the partitions; after `kill -9`
// of one, the other takes its partitions over within the lease time plus 5 s
// and replays them (every published tick is taken once by the survivor);
// SIGTERM releases the leases at once. `simulate --nats` publishes the ticks
// and `cluster status --json` is the observer.
#include <fcntl.h>
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <cstdio>
#include <nlohmann/json.hpp>
#include <string>
#include <thread>
#include <vector>

#include "support/nats_server.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

// A background `aftershock run`, stderr to a file.
struct RunProcess {
  pid_t pid = -1;
  std::string err_path;
  RunProcess(const std::string& config, const std::string& err) : err_path(err) {
    pid = fork();
    REQUIRE(pid >= 0);
    if (pid == 0) {
      const int fd = open(err.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
      dup2(fd, 2);
      const int null = open("/dev/null", O_WRONLY);
      dup2(null, 1);
      execl(AFTERSHOCK_CLI, AFTERSHOCK_CLI, "run", "--config", config.c_str(),
            static_cast<char*>(nullptr));
      _exit(127);
    }
  }
  // Sends `sig` and returns the exit status (or 128 + signal).
  int Signal(int sig) {
    kill(pid, sig);
    int status = 0;
    waitpid(pid, &status, 0);
    pid = -1;
    return WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  }
  ~RunProcess() {
    if (pid > 0) Signal(SIGKILL);
  }
};

nlohmann::json Status(const std::string& config) {
  const testing::CommandResult r =
      testing::RunCli({"cluster", "status", "--config", config, "--json"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  if (r.out.rfind("{", 0) != 0) return nlohmann::json::object();  // no bucket yet
  return nlohmann::json::parse(r.out);
}

// Partitions per owner ("" = free) in a status object.
std::map<std::string, int> Owners(const nlohmann::json& s) {
  std::map<std::string, int> out;
  if (!s.contains("partitions")) return out;
  for (const auto& p : s["partitions"]) out[p["owner"].get<std::string>()]++;
  return out;
}

// Polls the status until `pred` holds; seconds it took, or -1 after `limit_s`.
template <typename Pred>
double WaitFor(const std::string& config, Pred pred, double limit_s) {
  const auto t0 = std::chrono::steady_clock::now();
  while (true) {
    const double s =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    if (pred(Status(config))) return s;
    if (s > limit_s) return -1;
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
  }
}

TEST_CASE("run on JetStream: kill -9 of one instance, takeover, clean release") {
  testing::SkipUnlessNatsServer();
  const std::string dir = testing::ScratchDir("run_nats");
  testing::NatsServer server(dir);
  const double lease = 2;
  const int http_port = testing::FreeLoopbackPort();  // eng-a's /metrics and /health
  auto config = [&](const std::string& name, const std::string& http) {
    return testing::WriteFile(
        dir + "/" + name + ".toml",
        "[feed]\nsource = \"nats\"\n[nats]\nservers = [\"" + server.url() +
            "\"]\nlease_seconds = 2\ninstance = \"" + name +
            "\"\n[publish]\nendpoint = \"tcp://127.0.0.1:*\"\n[http]\n" + http +
            "\n[bars]\ninterval = \"1m\"\n[refit]\nevery_bars = 0\n");
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
  REQUIRE(WaitFor(ca, [](const nlohmann::json& s) { return Owners(s)["eng-a"] == 12; }, 10) >= 0);
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
  const double takeover =
      WaitFor(ca, [](const nlohmann::json& s) { return Owners(s)["eng-a"] == 12; }, lease + 5);
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
  CHECK(health.find("\"nats\":{\"instance\":\"eng-a\",\"partitions\":[0,1,2,3,4,5,6,7,8,9,10,11]") !=
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
}

}  // namespace
}  // namespace aftershock
