#include "support/engine_cluster.h"

#include <fcntl.h>
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <iterator>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>
#include <zmq_addon.hpp>

#include "support/test_support.h"

namespace aftershock::testing {
namespace {

int ExitCode(int status) {
  return WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
}

UpdateKey KeyOf(const std::string& body) {
  const nlohmann::json j = nlohmann::json::parse(body);
  return {j["s"].get<std::string>(), j["t"].get<int64_t>()};
}

}  // namespace

RunProcess::RunProcess(const std::string& config, const std::string& err)
    : RunProcess(std::vector<std::string>{"run", "--config", config}, err) {}

RunProcess::RunProcess(const std::vector<std::string>& args, const std::string& err)
    : err_path(err) {
  pid = fork();
  REQUIRE(pid >= 0);
  if (pid == 0) {
    const int fd = open(err.c_str(), O_WRONLY | O_CREAT | O_APPEND, 0644);
    dup2(fd, 2);
    const int null = open("/dev/null", O_WRONLY);
    dup2(null, 1);
    std::vector<char*> argv;
    argv.push_back(const_cast<char*>(AFTERSHOCK_CLI));
    for (const std::string& a : args) argv.push_back(const_cast<char*>(a.c_str()));
    argv.push_back(nullptr);
    execv(AFTERSHOCK_CLI, argv.data());
    _exit(127);
  }
}

RunProcess::~RunProcess() {
  if (pid > 0) Signal(SIGKILL);
}

int RunProcess::Wait() {
  int status = 0;
  waitpid(pid, &status, 0);
  pid = -1;
  return ExitCode(status);
}

int RunProcess::Signal(int sig) {
  kill(pid, sig);
  return Wait();
}

nlohmann::json Status(const std::string& config) {
  const CommandResult r = RunCli({"cluster", "status", "--config", config, "--json"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  if (r.out.rfind("{", 0) != 0) return nlohmann::json::object();  // no bucket yet
  return nlohmann::json::parse(r.out);
}

bool TryStatus(const std::string& config, nlohmann::json* out) {
  const CommandResult r = RunCli({"cluster", "status", "--config", config, "--json"});
  if (r.exit_code != 0) return false;
  *out = r.out.rfind("{", 0) == 0 ? nlohmann::json::parse(r.out) : nlohmann::json::object();
  return true;
}

std::map<std::string, int> Owners(const nlohmann::json& s) {
  std::map<std::string, int> out;
  if (!s.contains("partitions")) return out;
  for (const auto& p : s["partitions"]) out[p["owner"].get<std::string>()]++;
  return out;
}

UpdateCollector::UpdateCollector(const std::string& urls, const std::string& subject) {
  REQUIRE(natsConnection_ConnectTo(&conn_, urls.c_str()) == NATS_OK);
  REQUIRE(natsConnection_SubscribeSync(&sub_, conn_, (subject + ".>").c_str()) == NATS_OK);
  natsSubscription_SetPendingLimits(sub_, -1, -1);  // never a slow consumer
  REQUIRE(natsConnection_Flush(conn_) == NATS_OK);
  thread_ = std::thread([this] {
    while (!stop_) {
      natsMsg* m = nullptr;
      if (natsSubscription_NextMsg(&m, sub_, 100) != NATS_OK) continue;
      std::string body(natsMsg_GetData(m), static_cast<size_t>(natsMsg_GetDataLength(m)));
      natsMsg_Destroy(m);
      Add(std::move(body));
    }
  });
}

UpdateCollector::UpdateCollector(const std::vector<std::string>& endpoints)
    : zmq_context_(std::make_unique<zmq::context_t>()) {
  auto sock = std::make_shared<zmq::socket_t>(*zmq_context_, zmq::socket_type::sub);
  sock->set(zmq::sockopt::linger, 0);
  sock->set(zmq::sockopt::rcvtimeo, 100);
  sock->set(zmq::sockopt::rcvhwm, 0);  // never drop: the test reads everything
  sock->set(zmq::sockopt::subscribe, "u.");
  for (const std::string& e : endpoints) sock->connect(e);
  thread_ = std::thread([this, sock] {
    while (!stop_) {
      std::vector<zmq::message_t> parts;
      if (!zmq::recv_multipart(*sock, std::back_inserter(parts))) continue;
      if (parts.size() == 2) Add(parts[1].to_string());
    }
    sock->close();
  });
}

void UpdateCollector::Add(std::string body) {
  const auto now = std::chrono::steady_clock::now();
  std::lock_guard<std::mutex> l(mu_);
  bodies_.push_back(std::move(body));
  arrivals_.push_back(now);
}

UpdateCollector::~UpdateCollector() {
  stop_ = true;
  thread_.join();
  if (sub_ != nullptr) natsSubscription_Destroy(sub_);
  if (conn_ != nullptr) natsConnection_Destroy(conn_);
}

std::string BoundEndpoint(const std::string& err_path) {
  for (int i = 0; i < 300; ++i) {  // 300 x 100 ms
    std::ifstream in(err_path);
    std::stringstream ss;
    ss << in.rdbuf();
    const std::string text = ss.str();
    const size_t b = text.find("; bound ");
    if (b != std::string::npos) {
      const size_t e = text.find(';', b + 8);
      if (e != std::string::npos) return text.substr(b + 8, e - b - 8);
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
  }
  FAIL("no bound endpoint in " << err_path);
  return "";
}

std::vector<std::string> UpdateCollector::bodies() {
  std::lock_guard<std::mutex> l(mu_);
  return bodies_;
}

std::vector<std::chrono::steady_clock::time_point> UpdateCollector::arrivals() {
  std::lock_guard<std::mutex> l(mu_);
  return arrivals_;
}

std::map<UpdateKey, std::string> Dedup(const std::vector<std::string>& bodies, int* conflicts) {
  std::map<UpdateKey, std::string> out;
  for (const std::string& b : bodies) {
    auto [it, inserted] = out.emplace(KeyOf(b), b);
    if (!inserted && it->second != b) ++*conflicts;
  }
  return out;
}

std::vector<std::string> CatchUpLines(const std::string& err) {
  std::vector<std::string> out;
  std::istringstream in(err);
  for (std::string line; std::getline(in, line);) {
    if (line.find("caught up") != std::string::npos &&
        line.find(" 0 messages") == std::string::npos) {
      out.push_back(line);
    }
  }
  return out;
}

std::string FaultConfig(const std::string& dir, const std::vector<std::string>& servers,
                        const std::string& name, const std::string& nats_extra,
                        double lease_seconds) {
  std::string list;
  for (const std::string& url : servers) list += (list.empty() ? "\"" : ", \"") + url + "\"";
  char lease[64];
  std::snprintf(lease, sizeof(lease), "%g", lease_seconds);
  return WriteFile(
      dir + "/" + name + ".toml",
      "[feed]\nsource = \"nats\"\n[nats]\nservers = [" + list + "]\nlease_seconds = " + lease +
          "\ncheckpoint_seconds = 0.5\nupdates_subject = \"upd\"\n"
          "instance = \"" +
          name + "\"\n" + nats_extra +
          "[publish]\nendpoint = \"tcp://127.0.0.1:*\"\n"
          "[http]\nenabled = false\n[bars]\ninterval = \"1m\"\n"
          "[refit]\nevery_bars = 100\nwindow = 300\nmin_bars = 120\nreidentify_every = 0\n"
          "holdout_bars = 20\napply_lag_bars = 5\nworkers = 1\n"
          // Group models pool across symbols, and a partition's lane knows
          // its own symbols only (a config warning says so).
          "group_models = false\n");
}

UpdatePauses PausesAfter(UpdateCollector* collector, std::chrono::steady_clock::time_point since) {
  const std::vector<std::string> bodies = collector->bodies();
  const std::vector<std::chrono::steady_clock::time_point> arrivals = collector->arrivals();
  auto secs = [](auto d) { return std::chrono::duration<double>(d).count(); };
  UpdatePauses out;
  std::map<std::string, std::chrono::steady_clock::time_point> last;
  std::map<std::string, int> after;  // updates after `since` per instrument
  auto previous = since;
  for (size_t i = 0; i < bodies.size() && i < arrivals.size(); ++i) {
    const std::string symbol = nlohmann::json::parse(bodies[i])["s"].get<std::string>();
    if (arrivals[i] >= since) {
      out.longest = std::max(out.longest, secs(arrivals[i] - previous));
      previous = arrivals[i];
      if (last.count(symbol))
        out.instrument = std::max(out.instrument, secs(arrivals[i] - last[symbol]));
      ++after[symbol];
    }
    last[symbol] = arrivals[i];
  }
  out.instruments = after.size();
  return out;
}

namespace {

// A positive number from environment variable `name`, or `fallback` when it
// is unset or empty; a malformed or non-positive value fails the test.
double PositiveFromEnv(const char* name, double fallback, bool integer) {
  const char* v = std::getenv(name);
  if (v == nullptr || *v == '\0') return fallback;
  char* end = nullptr;
  const double x = std::strtod(v, &end);
  INFO(name << "=" << v);
  REQUIRE(*end == '\0');
  REQUIRE(x > 0);
  if (integer) REQUIRE(x == std::floor(x));
  return x;
}

std::string Number(double x) {
  std::ostringstream o;
  o.precision(17);
  o << x;
  return o.str();
}

}  // namespace

TestMarket MarketFromEnv(int symbols, int bars, double rate) {
  TestMarket m;
  m.symbols = static_cast<int>(PositiveFromEnv("AFTERSHOCK_TEST_SYMBOLS", symbols, true));
  m.bars = static_cast<int>(PositiveFromEnv("AFTERSHOCK_TEST_BARS", bars, true));
  m.rate = PositiveFromEnv("AFTERSHOCK_TEST_RATE", rate, false);
  return m;
}

std::vector<std::string> TestMarket::args(int seed) const {
  return {"--symbols", std::to_string(symbols), "--bars", std::to_string(bars),
          "--seed",    std::to_string(seed)};
}

std::vector<std::string> TestMarket::rate_args() const { return {"--rate", Number(rate)}; }

std::map<UpdateKey, std::string> ReplayReference(const std::string& dir, const std::string& config,
                                                 const std::vector<std::string>& market) {
  std::vector<std::string> sim = {"simulate",      "--output", dir + "/ticks.csv",
                                  "--time-format", "ns",       "--quiet"};
  sim.insert(sim.end(), market.begin(), market.end());
  CommandResult r = RunCli(sim);
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  r = RunCli({"replay", "--config", config, "--input", dir + "/ticks.csv", "--output",
              dir + "/replay.jsonl", "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  std::vector<std::string> lines;
  std::ifstream in(dir + "/replay.jsonl");
  for (std::string line; std::getline(in, line);) lines.push_back(line);
  int conflicts = 0;
  std::map<UpdateKey, std::string> want = Dedup(lines, &conflicts);
  REQUIRE(conflicts == 0);
  REQUIRE(want.size() == lines.size());
  return want;
}

std::map<UpdateKey, std::string> AwaitUpdates(UpdateCollector* c, size_t n, double limit_s,
                                              int* conflicts) {
  const auto t0 = std::chrono::steady_clock::now();
  while (true) {
    *conflicts = 0;
    std::map<UpdateKey, std::string> got = Dedup(c->bodies(), conflicts);
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    if (got.size() >= n || s > limit_s) return got;
    std::this_thread::sleep_for(std::chrono::milliseconds(250));
  }
}

void CompareWithReplay(const std::map<UpdateKey, std::string>& got,
                       const std::map<UpdateKey, std::string>& want) {
  int missing = 0, different = 0, extra = 0;
  for (const auto& [k, body] : want) {
    auto it = got.find(k);
    if (it == got.end()) {
      ++missing;
    } else if (it->second != body) {
      if (different < 3) {
        std::printf("differs:\n  got  %s\n  want %s\n", it->second.c_str(), body.c_str());
      }
      ++different;
    }
  }
  for (const auto& [k, body] : got) extra += want.count(k) == 0;
  CHECK(missing == 0);
  CHECK(different == 0);
  CHECK(extra == 0);
}

}  // namespace aftershock::testing
