#include "support/nats_server.h"

#include <arpa/inet.h>
#include <nats/nats.h>
#include <netinet/in.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <thread>
#include <vector>

#include "support/test_support.h"

namespace aftershock::testing {
namespace {

bool IsExecutable(const std::string& p) { return access(p.c_str(), X_OK) == 0; }

}  // namespace

int FreeLoopbackPort() {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  REQUIRE(fd >= 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = 0;
  REQUIRE(bind(fd, reinterpret_cast<sockaddr*>(&a), sizeof(a)) == 0);
  socklen_t len = sizeof(a);
  REQUIRE(getsockname(fd, reinterpret_cast<sockaddr*>(&a), &len) == 0);
  close(fd);
  return ntohs(a.sin_port);
}

namespace {

bool Accepts(int port) {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  if (fd < 0) return false;
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = htons(static_cast<uint16_t>(port));
  const bool ok = connect(fd, reinterpret_cast<sockaddr*>(&a), sizeof(a)) == 0;
  close(fd);
  return ok;
}

}  // namespace

std::string NatsServerBinary() {
  if (IsExecutable("/usr/sbin/nats-server")) return "/usr/sbin/nats-server";
  if (const char* path = std::getenv("PATH")) {
    std::stringstream ss(path);
    std::string dir;
    while (std::getline(ss, dir, ':')) {
      const std::string p = dir + "/nats-server";
      if (!dir.empty() && IsExecutable(p)) return p;
    }
  }
  return "";
}

void SkipUnlessNatsServer() {
  if (!NatsServerBinary().empty()) return;
  std::printf(
      "SKIP: nats-server not found (/usr/sbin or PATH); install Debian's nats-server "
      "(tools/dev does) to run the JetStream tests\n");
  std::fflush(stdout);
  std::_Exit(77);
}

NatsServer::NatsServer(const std::string& dir, const std::string& config) {
  Start(dir, config, {}, 0);
}

NatsServer::NatsServer(const std::string& dir, const NatsClusterNode& node,
                       const std::string& config) {
  std::string routes;
  for (int p : node.route_ports) {
    routes +=
        (routes.empty() ? "" : ",") + std::string("nats-route://127.0.0.1:") + std::to_string(p);
  }
  Start(dir, config,
        {"--server_name", node.server_name, "--cluster_name", node.cluster_name, "--cluster",
         "nats://127.0.0.1:" + std::to_string(node.cluster_port), "--routes", routes},
        node.client_port);
}

void NatsServer::Start(const std::string& dir, const std::string& config,
                       const std::vector<std::string>& extra_args, int fixed_port) {
  const std::string bin = NatsServerBinary();
  REQUIRE(!bin.empty());
  const std::string store = dir + "/store";
  mkdir(store.c_str(), 0755);
  // The shipped file verbatim except its store_dir line (the server refuses
  // -sd next to a configured store_dir), which points into `dir`.
  std::string text = ReadFileOrDie(
      config.empty() ? std::string(AFTERSHOCK_SOURCE_DIR) + "/config/nats-server.conf" : config);
  std::string conf_text;
  std::stringstream lines(text);
  std::string line;
  while (std::getline(lines, line)) {
    if (line.find("store_dir:") != std::string::npos && line.find('#') == std::string::npos) {
      line = "  store_dir: \"" + store + "\"";
    }
    conf_text += line + "\n";
  }
  const std::string conf = WriteFile(dir + "/nats-server.conf", conf_text);
  const std::string log = dir + "/nats-server.log";
  // A port taken between FreeLoopbackPort and the server's bind is retried.
  // A fixed port (a cluster node's) is tried once.
  for (int attempt = 0; attempt < (fixed_port > 0 ? 1 : 3) && pid_ < 0; ++attempt) {
    port_ = fixed_port > 0 ? fixed_port : FreeLoopbackPort();
    const std::string port = std::to_string(port_);
    std::vector<std::string> args = {bin,  "-c", conf,  "-a", "127.0.0.1",
                                     "-p", port, "-js", "-l", log};
    args.insert(args.end(), extra_args.begin(), extra_args.end());
    const pid_t pid = fork();
    REQUIRE(pid >= 0);
    if (pid == 0) {
      std::vector<char*> argv;
      for (std::string& a : args) argv.push_back(a.data());
      argv.push_back(nullptr);
      execv(argv[0], argv.data());
      std::_Exit(127);
    }
    for (int i = 0; i < 200; ++i) {  // 200 x 50 ms = 10 s at most
      if (Accepts(port_)) {
        pid_ = pid;
        break;
      }
      int status = 0;
      if (waitpid(pid, &status, WNOHANG) == pid) break;  // exited: retry on another port
      std::this_thread::sleep_for(std::chrono::milliseconds(50));
    }
    if (pid_ < 0) {
      kill(pid, SIGKILL);
      waitpid(pid, nullptr, 0);
    }
  }
  INFO("nats-server log: " << log);
  REQUIRE(pid_ > 0);
}

NatsServer::~NatsServer() {
  if (pid_ <= 0) return;
  kill(pid_, SIGCONT);  // a paused server handles no SIGTERM
  kill(pid_, SIGTERM);
  waitpid(pid_, nullptr, 0);
}

namespace {

// True when every thread of `pid` is in the stopped state ('T', or 't' when
// traced). The state is the field after the parenthesised command name.
bool AllThreadsStopped(pid_t pid) {
  std::error_code ec;
  const std::filesystem::path tasks = "/proc/" + std::to_string(pid) + "/task";
  bool any = false;
  for (const auto& entry : std::filesystem::directory_iterator(tasks, ec)) {
    std::ifstream in(entry.path() / "stat");
    std::string line;
    if (!std::getline(in, line)) continue;  // the thread ended meanwhile
    const auto close = line.rfind(')');
    if (close == std::string::npos || close + 2 >= line.size()) return false;
    const char state = line[close + 2];
    if (state != 'T' && state != 't') return false;
    any = true;
  }
  return !ec && any;
}

}  // namespace

void NatsServer::Pause() {
  REQUIRE(kill(pid_, SIGSTOP) == 0);
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(5);
  while (!AllThreadsStopped(pid_)) {
    if (std::chrono::steady_clock::now() > deadline) {
      FAIL("nats-server " << pid_ << " did not stop within 5 s of SIGSTOP");
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  }
}

void NatsServer::Stop(int sig) {
  if (pid_ <= 0) return;
  kill(pid_, sig);
  waitpid(pid_, nullptr, 0);
  pid_ = -1;
}

std::string NatsServer::url() const { return "nats://127.0.0.1:" + std::to_string(port_); }

NatsCluster::NatsCluster(const std::string& dir, int nodes) {
  std::vector<int> client(static_cast<size_t>(nodes)), cluster(static_cast<size_t>(nodes));
  for (int i = 0; i < nodes; ++i) {
    client[static_cast<size_t>(i)] = FreeLoopbackPort();
    cluster[static_cast<size_t>(i)] = FreeLoopbackPort();
  }
  for (int i = 0; i < nodes; ++i) {
    NatsClusterNode n;
    n.server_name = "n" + std::to_string(i + 1);
    n.cluster_name = "aftershock-test";
    n.client_port = client[static_cast<size_t>(i)];
    n.cluster_port = cluster[static_cast<size_t>(i)];
    for (int j = 0; j < nodes; ++j) {
      if (j != i) n.route_ports.push_back(cluster[static_cast<size_t>(j)]);
    }
    const std::string node_dir = dir + "/" + n.server_name;
    mkdir(node_dir.c_str(), 0755);
    nodes_.push_back(std::make_unique<NatsServer>(node_dir, n));
  }
}

std::vector<std::string> NatsCluster::urls() const {
  std::vector<std::string> out;
  for (const auto& n : nodes_) out.push_back(n->url());
  return out;
}

double NatsCluster::AwaitJetStream(double limit_s, int except) {
  const auto t0 = std::chrono::steady_clock::now();
  for (int i = 0; i < static_cast<int>(nodes_.size()); ++i) {
    if (i == except) continue;
    while (true) {
      natsConnection* conn = nullptr;
      bool ready = false;
      if (natsConnection_ConnectTo(&conn, nodes_[static_cast<size_t>(i)]->url().c_str()) ==
          NATS_OK) {
        jsCtx* js = nullptr;
        jsOptions jo;
        jsOptions_Init(&jo);
        jo.Wait = 1000;
        if (natsConnection_JetStream(&js, conn, &jo) == NATS_OK) {
          jsAccountInfo* info = nullptr;
          ready = js_GetAccountInfo(&info, js, nullptr, nullptr) == NATS_OK;
          if (info != nullptr) jsAccountInfo_Destroy(info);
          jsCtx_Destroy(js);
        }
        natsConnection_Destroy(conn);
      }
      if (ready) break;
      const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
      if (s > limit_s) return -1;
      std::this_thread::sleep_for(std::chrono::milliseconds(200));
    }
  }
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

}  // namespace aftershock::testing
