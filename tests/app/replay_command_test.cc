// `aftershock replay` and `aftershock run` command behaviour (the built binary).
#include <arpa/inet.h>
#include <netinet/in.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <thread>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "aftershock/update_codec.h"
#include "streaming/engine_test_util.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RunCli;
constexpr int64_t kT0 = 1772443800000000000;

std::string ReturnCsv(const std::vector<std::string>& syms, int n,
                      std::vector<std::vector<double>>* rets) {
  std::string csv = "symbol,time,return\n";
  for (size_t s = 0; s < syms.size(); ++s) rets->push_back(testing::TestReturns(n, 70 + s));
  for (int i = 0; i < n; ++i) {
    for (size_t s = 0; s < syms.size(); ++s) {
      char buf[64];
      std::snprintf(buf, sizeof(buf), "%.17g", (*rets)[s][i]);
      absl::StrAppend(&csv, syms[s], ",", kT0 + int64_t{i} * 1000000000, ",", buf, "\n");
    }
  }
  return csv;
}

std::vector<std::string> Lines(const std::string& text) {
  std::vector<std::string> out = absl::StrSplit(text, '\n', absl::SkipEmpty());
  return out;
}

TEST_CASE("replay: one update line per CSV row, equal to the offline filter", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_rows");
  const std::vector<std::string> syms = {"QUAIL.A", "RAVEN.B"};
  std::vector<std::vector<double>> rets;
  const std::string input = testing::WriteFile(dir + "/ticks.csv", ReturnCsv(syms, 500, &rets));
  const std::string cfg = testing::WriteFile(dir + "/c.toml", testing::kFixedModelToml);
  const auto r =
      RunCli({"replay", "--config", cfg, "--input", input, "--output", dir + "/u.jsonl"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  // The summary line: bars, rejects, seconds and bars/s.
  CHECK(r.err.find("replay: 1000 ticks, 1000 bars, 1000 updates, 0 rejects, 2 symbols") !=
        std::string::npos);
  CHECK(r.err.find(" bars/s") != std::string::npos);
  const auto lines = Lines(testing::ReadFileOrDie(dir + "/u.jsonl"));
  REQUIRE(lines.size() == 1000);
  const EngineConfig config = testing::ParseConfigOrDie(testing::kFixedModelToml);
  auto model = FilterModel::Create(config.model.params, testing::OutputsOf(config), 1);
  REQUIRE(model.ok());
  // Reference: offline FilterSeries (online_filter.h) of the same model.
  const auto ref = FilterSeries(*model, 0.0, rets[1]);
  int k = 0;
  for (const auto& line : lines) {
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(line, &u).ok());
    if (u.symbol.view() != "RAVEN.B") continue;
    CHECK(testing::RelDiff(u.var, ref[k].var) < 1e-12);
    CHECK(testing::RelDiff(u.z, ref[k].z) < 1e-12);
    ++k;
  }
  CHECK(k == 500);
}

TEST_CASE("replay output is byte-identical on repeated runs (time bars, prices)", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_repeat");
  // Irregular price ticks for three symbols, 1 s bars: exercises aggregation,
  // clock closes by event time and the warm-up EWMA (no [model.params]).
  std::string csv = "symbol,time,price\n";
  std::mt19937_64 rng(5);
  std::uniform_int_distribution<int> gap(1, 900);
  std::normal_distribution<double> step(0, 0.001);
  double p[3] = {100, 50, 20};
  int64_t t = kT0;
  for (int i = 0; i < 6000; ++i) {
    t += int64_t{gap(rng)} * 1000000;
    const int s = i % 3 == 0 ? 0 : (i % 7 == 0 ? 2 : 1);
    p[s] *= std::exp(step(rng));
    char buf[64];
    std::snprintf(buf, sizeof(buf), "%.10f", p[s]);
    absl::StrAppend(&csv, s == 0 ? "SWIFT.C" : (s == 1 ? "TERN.D" : "URIA.E"), ",", t, ",", buf,
                    "\n");
  }
  const std::string input = testing::WriteFile(dir + "/ticks.csv", csv);
  const std::string cfg = testing::WriteFile(dir + "/c.toml", "[bars]\ninterval = \"1s\"\n");
  const auto a =
      RunCli({"replay", "--config", cfg, "--input", input, "--output", dir + "/a.jsonl"});
  const auto b =
      RunCli({"replay", "--config", cfg, "--input", input, "--output", dir + "/b.jsonl"});
  INFO(a.err << b.err);
  REQUIRE(a.exit_code == 0);
  REQUIRE(b.exit_code == 0);
  const std::string ta = testing::ReadFileOrDie(dir + "/a.jsonl");
  CHECK(ta.size() > 10000);
  CHECK(ta == testing::ReadFileOrDie(dir + "/b.jsonl"));
  // Warm-up flags on every update; bars after one-second intervals in which
  // their symbol had no tick are flagged stale.
  const auto lines = Lines(ta);
  int stale = 0;
  for (const auto& line : lines) {
    BarUpdate u;
    REQUIRE(DecodeUpdateJson(line, &u).ok());
    CHECK((u.flags & kFlagWarmup) != 0);
    stale += (u.flags & kFlagStale) != 0;
  }
  CHECK(stale > 0);
}

TEST_CASE("replay and run: clear errors, exit 2", "[app][replay]") {
  const std::string dir = testing::ScratchDir("replay_errors");
  const std::string good = testing::WriteFile(dir + "/good.toml", "[bars]\ninterval = \"0s\"\n");
  const std::string bad = testing::WriteFile(dir + "/bad.toml", "[bars]\ninterval = \"abc\"\n");
  const std::string input = testing::WriteFile(dir + "/t.csv", "symbol,time,return\nA.B,1,0.1\n");

  auto r = RunCli({"replay", "--config", dir + "/missing.toml", "--input", input, "--output",
                   dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("missing.toml") != std::string::npos);
  r = RunCli({"replay", "--config", bad, "--input", input, "--output", dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("bad.toml:2: [bars] interval") != std::string::npos);
  r = RunCli(
      {"replay", "--config", good, "--input", dir + "/none.csv", "--output", dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("none.csv") != std::string::npos);
  const std::string junk = testing::WriteFile(dir + "/junk.csv", "symbol,time,return\nx\ny\n");
  r = RunCli({"replay", "--config", good, "--input", junk, "--output", dir + "/o.jsonl"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("junk.csv") != std::string::npos);
  r = RunCli({"replay", "--config", good});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("--input") != std::string::npos);

  r = RunCli({"run", "--config", good, "--check"});
  CHECK(r.exit_code == 0);
  CHECK(r.out.find("configuration OK") != std::string::npos);
  r = RunCli({"run", "--config", bad, "--check"});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("bad.toml:2: [bars] interval") != std::string::npos);
  r = RunCli({"run", "--help"});
  CHECK(r.exit_code == 0);
  CHECK(r.out.find("--check") != std::string::npos);
}

int FreePort() {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = 0;
  socklen_t len = sizeof(a);
  if (bind(fd, reinterpret_cast<sockaddr*>(&a), sizeof(a)) != 0 ||
      getsockname(fd, reinterpret_cast<sockaddr*>(&a), &len) != 0) {
    close(fd);
    return -1;
  }
  close(fd);
  return ntohs(a.sin_port);
}

// A minimal HTTP/1.1 GET over loopback; returns the whole response.
std::string HttpGet(int port, const std::string& path) {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = htons(static_cast<uint16_t>(port));
  if (connect(fd, reinterpret_cast<sockaddr*>(&a), sizeof(a)) != 0) {
    close(fd);
    return "";
  }
  const std::string req = "GET " + path + " HTTP/1.1\r\nHost: 127.0.0.1\r\n\r\n";
  (void)!write(fd, req.data(), req.size());
  std::string out;
  char buf[4096];
  ssize_t n;
  while ((n = read(fd, buf, sizeof(buf))) > 0) out.append(buf, static_cast<size_t>(n));
  close(fd);
  return out;
}

TEST_CASE("SIGTERM on `aftershock run`: flushes and exits 0; health and metrics", "[app][run]") {
  const std::string dir = testing::ScratchDir("run_sigterm");
  const int http_port = FreePort();
  REQUIRE(http_port > 0);
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      absl::StrCat("[feed]\nendpoints = [\"tcp://127.0.0.1:1\"]\n[publish]\nendpoint = "
                   "\"tcp://127.0.0.1:*\"\n[http]\nendpoint = \"127.0.0.1:",
                   http_port, "\"\n"));
  const std::string err_path = dir + "/err.txt";
  const pid_t pid = fork();
  REQUIRE(pid >= 0);
  if (pid == 0) {
    FILE* f = std::freopen(err_path.c_str(), "w", stderr);
    (void)f;
    execl(AFTERSHOCK_CLI, AFTERSHOCK_CLI, "run", "--config", cfg.c_str(), nullptr);
    _exit(127);
  }
  // Wait for the line printed from inside the event loop (handlers installed).
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(10);
  std::string err;
  while (err.find("running:") == std::string::npos && std::chrono::steady_clock::now() < deadline) {
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
    std::ifstream in(err_path);
    std::stringstream ss;
    ss << in.rdbuf();
    err = ss.str();
  }
  REQUIRE(err.find("running:") != std::string::npos);
  CHECK(err.find(absl::StrCat("http 127.0.0.1:", http_port)) != std::string::npos);
  // Prometheus text exposition format 0.0.4: HELP/TYPE lines, labelled counters.
  const std::string metrics = HttpGet(http_port, "/metrics");
  CHECK(metrics.rfind("HTTP/1.1 200 OK", 0) == 0);
  CHECK(metrics.find("text/plain; version=0.0.4") != std::string::npos);
  CHECK(metrics.find(
            "# TYPE aftershock_updates_out_total counter\naftershock_updates_out_total 0\n") !=
        std::string::npos);
  CHECK(metrics.find("aftershock_rejects_total{reason=\"symbol_limit\"} 0\n") != std::string::npos);
  const std::string health = HttpGet(http_port, "/health");
  CHECK(health.rfind("HTTP/1.1 200 OK", 0) == 0);
  CHECK(health.find("{\"status\":\"ok\",\"symbols\":0") != std::string::npos);
  CHECK(HttpGet(http_port, "/other").rfind("HTTP/1.1 404", 0) == 0);
  kill(pid, SIGTERM);
  int status = 0;
  pid_t w = 0;
  while ((w = waitpid(pid, &status, WNOHANG)) == 0 && std::chrono::steady_clock::now() < deadline) {
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  if (w == 0) kill(pid, SIGKILL);
  REQUIRE(w == pid);
  REQUIRE(WIFEXITED(status));
  CHECK(WEXITSTATUS(status) == 0);
  std::ifstream in(err_path);
  std::stringstream ss;
  ss << in.rdbuf();
  CHECK(ss.str().find("aftershock run: stopped; 0 messages") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
