// Helpers of the cluster tests that run `aftershock run` instances as real
// processes against nats-server: the process handle, the `cluster status`
// observer, the collector of the updates published on NATS and the
// comparison of those updates with a single-process `aftershock replay`.
//
// Thread-safety: one test thread uses these, except UpdateCollector, whose
// bodies() may be called while its own thread collects.
#ifndef AFTERSHOCK_TESTS_SUPPORT_ENGINE_CLUSTER_H_
#define AFTERSHOCK_TESTS_SUPPORT_ENGINE_CLUSTER_H_

#include <nats/nats.h>
#include <sys/types.h>

#include <atomic>
#include <chrono>
#include <cstdint>
#include <map>
#include <memory>
#include <mutex>
#include <nlohmann/json.hpp>
#include <string>
#include <thread>
#include <utility>
#include <vector>
#include <zmq.hpp>

namespace aftershock::testing {

// A background `aftershock run` (or another command), stderr to a file
// (appended, so a restarted instance keeps one log), stdout to /dev/null.
// SIGKILLed and waited for on destruction when still running.
struct RunProcess {
  pid_t pid = -1;
  std::string err_path;
  RunProcess(const std::string& config, const std::string& err);
  RunProcess(const std::vector<std::string>& args, const std::string& err);
  ~RunProcess();
  RunProcess(const RunProcess&) = delete;
  RunProcess& operator=(const RunProcess&) = delete;
  // Waits for the exit; its status (or 128 + signal).
  int Wait();
  // Sends `sig` and returns the exit status (or 128 + signal).
  int Signal(int sig);
};

// `aftershock cluster status --config <config> --json`; an empty object while
// the lease bucket does not exist yet.
nlohmann::json Status(const std::string& config);

// The same without failing the test: false (and `out` untouched) when the
// command fails, e.g. while a replicated bucket still elects its leader.
bool TryStatus(const std::string& config, nlohmann::json* out);

// Partitions per owner ("" = free) in a status object.
std::map<std::string, int> Owners(const nlohmann::json& s);

// Polls the status until `pred` holds; seconds it took, or -1 after `limit_s`.
// `tolerate_errors`: a failing status command counts as "not yet" instead of
// failing the test.
template <typename Pred>
double WaitFor(const std::string& config, Pred pred, double limit_s, bool tolerate_errors = false) {
  const auto t0 = std::chrono::steady_clock::now();
  while (true) {
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    nlohmann::json status;
    if (!tolerate_errors) {
      status = Status(config);
    } else if (!TryStatus(config, &status)) {
      status = nlohmann::json::object();
    }
    if (pred(status)) return s;
    if (s > limit_s) return -1;
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
  }
}

// Every update published on "<subject>.>" (core NATS), collected on a thread
// with the steady-clock time it arrived.
class UpdateCollector {
 public:
  // `urls`: comma-separated server URLs (the client fails over between them).
  UpdateCollector(const std::string& urls, const std::string& subject);
  // The same from the engines' ZeroMQ publishers instead: one SUB socket
  // connected to every endpoint in `endpoints`, keeping the bodies of the
  // update topics ("u.<symbol>").
  explicit UpdateCollector(const std::vector<std::string>& endpoints);
  ~UpdateCollector();
  UpdateCollector(const UpdateCollector&) = delete;
  UpdateCollector& operator=(const UpdateCollector&) = delete;

  std::vector<std::string> bodies();
  // Arrival times of the bodies, same order.
  std::vector<std::chrono::steady_clock::time_point> arrivals();

 private:
  void Add(std::string body);

  natsConnection* conn_ = nullptr;
  natsSubscription* sub_ = nullptr;
  std::unique_ptr<zmq::context_t> zmq_context_;  // ZeroMQ mode only
  std::atomic<bool> stop_{false};
  std::thread thread_;
  std::mutex mu_;
  std::vector<std::string> bodies_;
  std::vector<std::chrono::steady_clock::time_point> arrivals_;
};

using UpdateKey = std::pair<std::string, int64_t>;  // (symbol, bar time)

// Gaps in the collected updates after `since`, seconds: the longest between
// two consecutive updates of any instruments (the first gap counted from
// `since`), and the longest of one instrument ending after `since` (from its
// last update before it to its next: the time until every instrument's
// updates flow again). `instruments` = instruments updated after `since`.
struct UpdatePauses {
  double longest = 0;
  double instrument = 0;
  size_t instruments = 0;
};
UpdatePauses PausesAfter(UpdateCollector* collector, std::chrono::steady_clock::time_point since);

// Deduplicates update bodies by (symbol, bar time); counts keys whose copies
// differ in `*conflicts`.
std::map<UpdateKey, std::string> Dedup(const std::vector<std::string>& bodies, int* conflicts);

// The endpoint an `aftershock run` bound for its updates, read from the
// "bound <endpoint>;" part of its start line in `err_path` (waits at most 30 s
// for it; fails the test without it).
std::string BoundEndpoint(const std::string& err_path);

// The "caught up" lines of an instance's log (replay speed after a start),
// those with 0 messages left out.
std::vector<std::string> CatchUpLines(const std::string& err);

// Writes <dir>/<name>.toml, the engine configuration of the fault tests:
// [feed] source = "nats" on `servers`, lease `lease_seconds` (2 s unless
// given), refits on with the exact hand-off, checkpoints every half second,
// updates also on NATS subject "upd"; `nats_extra` is appended to the [nats]
// section. Returns the path.
std::string FaultConfig(const std::string& dir, const std::vector<std::string>& servers,
                        const std::string& name, const std::string& nats_extra = "",
                        double lease_seconds = 2);

// The simulated market and feed of a fault test: `symbols` invented
// instruments x `bars` one-minute bars, one tick a bar, published at `rate`
// ticks/s. MarketFromEnv takes the test's defaults unless the environment
// overrides them: AFTERSHOCK_TEST_SYMBOLS, AFTERSHOCK_TEST_BARS (positive
// integers) and AFTERSHOCK_TEST_RATE (ticks/s, > 0), e.g. 50 x 5,000 for the
// scale-out issue's full size (README "Scale-out"); a malformed value fails
// the test.
struct TestMarket {
  int symbols = 0;
  int bars = 0;
  double rate = 0;  // ticks per second, > 0
  int64_t ticks() const { return static_cast<int64_t>(symbols) * bars; }
  // Seconds the paced feed takes.
  double feed_seconds() const { return static_cast<double>(ticks()) / rate; }
  // `--symbols N --bars N --seed seed` for `aftershock simulate`.
  std::vector<std::string> args(int seed) const;
  // `--rate R` for `aftershock simulate`.
  std::vector<std::string> rate_args() const;
};
TestMarket MarketFromEnv(int symbols, int bars, double rate);

// The single-process reference: `aftershock simulate <market>` to a CSV, then
// `aftershock replay --config <config>` of it; the updates by key.
std::map<UpdateKey, std::string> ReplayReference(const std::string& dir, const std::string& config,
                                                 const std::vector<std::string>& market);

// Waits (at most `limit_s`) until the deduplicated updates number `n`.
std::map<UpdateKey, std::string> AwaitUpdates(UpdateCollector* c, size_t n, double limit_s,
                                              int* conflicts);

// CHECKs that `got` has exactly the keys of `want`, with byte-identical bodies.
void CompareWithReplay(const std::map<UpdateKey, std::string>& got,
                       const std::map<UpdateKey, std::string>& want);

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_SUPPORT_ENGINE_CLUSTER_H_
