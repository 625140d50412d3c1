// `aftershock run` with [checkpoint]: written at shutdown, restored on start,
// counted in /metrics, shown by /health; an unusable file is exit 2 unless
// --fresh.
#include <arpa/inet.h>
#include <netinet/in.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <fstream>
#include <sstream>
#include <string>
#include <thread>

#include "absl/strings/str_cat.h"
#include "nlohmann/json.hpp"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RunCli;

int FreePort() {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  socklen_t len = sizeof(a);
  if (bind(fd, reinterpret_cast<sockaddr*>(&a), sizeof(a)) != 0 ||
      getsockname(fd, reinterpret_cast<sockaddr*>(&a), &len) != 0) {
    close(fd);
    return -1;
  }
  close(fd);
  return ntohs(a.sin_port);
}

// The JSON body of an HTTP response ({} when there is none).
nlohmann::json HealthBody(const std::string& response) {
  const size_t body = response.find("\r\n\r\n");
  if (body == std::string::npos) return nlohmann::json::object();
  return nlohmann::json::parse(response.substr(body + 4), nullptr, /*allow_exceptions=*/false);
}

std::string Slurp(const std::string& path) {
  std::ifstream in(path);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

// Starts `aftershock run`, waits for it to run, reads /metrics and /health
// (each when non-null), stops it with SIGTERM; returns its standard error and
// exit code.
std::pair<std::string, int> RunUntilTerm(const std::string& cfg, const std::string& err_path,
                                         int http_port, bool fresh, std::string* metrics,
                                         std::string* health = nullptr) {
  const pid_t pid = fork();
  REQUIRE(pid >= 0);
  if (pid == 0) {
    FILE* f = std::freopen(err_path.c_str(), "w", stderr);
    (void)f;
    if (fresh) {
      execl(AFTERSHOCK_CLI, AFTERSHOCK_CLI, "run", "--config", cfg.c_str(), "--fresh", nullptr);
    } else {
      execl(AFTERSHOCK_CLI, AFTERSHOCK_CLI, "run", "--config", cfg.c_str(), nullptr);
    }
    _exit(127);
  }
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(20);
  std::string err;
  int status = 0;
  pid_t w = 0;
  while (err.find("running:") == std::string::npos && std::chrono::steady_clock::now() < deadline) {
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
    err = Slurp(err_path);
    if ((w = waitpid(pid, &status, WNOHANG)) == pid) break;  // exited early
  }
  if (w != pid) {
    if (err.find("running:") != std::string::npos && metrics != nullptr) {
      *metrics = testing::HttpGet(http_port, "/metrics");
    }
    if (err.find("running:") != std::string::npos && health != nullptr) {
      *health = testing::HttpGet(http_port, "/health");
    }
    kill(pid, SIGTERM);
    while ((w = waitpid(pid, &status, WNOHANG)) == 0 &&
           std::chrono::steady_clock::now() < deadline) {
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    if (w == 0) {
      kill(pid, SIGKILL);
      waitpid(pid, &status, 0);
    }
  }
  return {Slurp(err_path), WIFEXITED(status) ? WEXITSTATUS(status) : -1};
}

TEST_CASE("run writes a checkpoint at shutdown, restores it on start, refuses a corrupt one",
          "[app][run][checkpoint]") {
  const std::string dir = testing::ScratchDir("run_checkpoint");
  const int http_port = FreePort();
  REQUIRE(http_port > 0);
  const std::string state = dir + "/state.ckpt";
  std::remove(state.c_str());
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      absl::StrCat("[feed]\nendpoints = [\"tcp://127.0.0.1:1\"]\n[publish]\nendpoint = "
                   "\"tcp://127.0.0.1:*\"\n[http]\nendpoint = \"127.0.0.1:",
                   http_port, "\"\n[checkpoint]\npath = \"", state, "\"\nevery_seconds = 1\n"));
  std::string metrics, health1;
  auto [err1, code1] = RunUntilTerm(cfg, dir + "/err1.txt", http_port, false, &metrics, &health1);
  INFO(err1);
  CHECK(code1 == 0);
  CHECK(err1.find("no checkpoint at " + state + " yet; starting fresh") != std::string::npos);
  CHECK(err1.find("aftershock run: checkpoint " + state + " written (") != std::string::npos);
  CHECK(metrics.find("# TYPE aftershock_checkpoint_writes_total counter") != std::string::npos);
  CHECK(metrics.find("aftershock_checkpoint_failures_total 0\n") != std::string::npos);
  // /health: a fresh start restored nothing.
  INFO(health1);
  const nlohmann::json h1 = HealthBody(health1);
  CHECK(h1.at("restored").is_null());
  CHECK(h1.at("checkpoint").at("file") == state);
  CHECK(h1.at("checkpoint").at("failures") == 0);

  std::string health2;
  auto [err2, code2] = RunUntilTerm(cfg, dir + "/err2.txt", http_port, false, nullptr, &health2);
  INFO(err2);
  CHECK(code2 == 0);
  CHECK(err2.find("aftershock run: restored 0 symbols from " + state + ", written ") !=
        std::string::npos);
  // /health names the restore: the file, its symbols and the age of its state
  // (written at the first run's shutdown, so >= 0 and well under the test's
  // 20 s deadline).
  INFO(health2);
  const nlohmann::json h2 = HealthBody(health2);
  REQUIRE(h2.at("restored").is_object());
  CHECK(h2.at("restored").at("symbols") == 0);
  CHECK(h2.at("restored").at("file") == state);
  CHECK(h2.at("restored").at("age_seconds").get<double>() >= 0.0);
  CHECK(h2.at("restored").at("age_seconds").get<double>() < 60.0);

  // A corrupt file: exit 2 naming the problem, unless --fresh.
  std::string bytes = testing::ReadFileOrDie(state);
  REQUIRE(bytes.size() > 100);
  bytes[84] ^= 0x01;  // inside the first section's payload
  testing::WriteFile(state, bytes);
  auto [err3, code3] = RunUntilTerm(cfg, dir + "/err3.txt", http_port, false, nullptr);
  INFO(err3);
  CHECK(code3 == 2);
  CHECK(err3.find("checksum mismatch") != std::string::npos);
  CHECK(err3.find("--fresh starts without it") != std::string::npos);
  auto [err4, code4] = RunUntilTerm(cfg, dir + "/err4.txt", http_port, true, nullptr);
  INFO(err4);
  CHECK(code4 == 0);
  CHECK(err4.find("restored") == std::string::npos);
  // The fresh run's shutdown checkpoint replaced the corrupt file.
  const auto check = RunCli({"run", "--config", cfg, "--check"});
  CHECK(check.exit_code == 0);
  auto [err5, code5] = RunUntilTerm(cfg, dir + "/err5.txt", http_port, false, nullptr);
  INFO(err5);
  CHECK(code5 == 0);
  CHECK(err5.find("restored 0 symbols") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
