// `aftershock run` survives SIGKILL: a live engine fed price ticks over ZeroMQ,
// aggregated to one-second bars, with refits on and [checkpoint] every_seconds
// = 0.5 (each snapshot in slices of one symbol: [checkpoint] slice_symbols =
// 1, so a kill may also fall between two slices), is killed with SIGKILL at
// pseudo-random moments (kKills times) and
// restarted on the same checkpoint file each time. Checked:
//   * every restart starts (the "running:" line) and the final SIGTERM stop
//     exits 0;
//   * after every kill the checkpoint file (when one was written) reads back
//     (ReadCheckpointFile: magic, checksums, length) and restores in-process;
//   * each restart's log line and /health report the checkpoint's symbols;
//   * a symbol on a fitted model in the checkpoint publishes its first update
//     after the restart on a fitted model (ver >= the saved version, no
//     warmup flag);
//   * the variance is continuous across a restart: the first update after the
//     restart carries exactly the var_next of the last update published
//     before the snapshot (same model version), and lies within kVarFactor of
//     the last update published before the kill (see kVarFactor);
//   * no message ever published (updates, alerts, models) holds a non-finite
//     number or fails to parse as JSON.
// Deterministic inputs: the price paths come from fixed-seed GARCH(1,1)
// simulations and the kill moments from a fixed-seed generator; only the
// wall-clock interleaving varies between runs, which the checks allow for.
// Loopback only; bounded in time (about 30 s: 21 runs of 0.7-1.8 s).
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <atomic>
#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <iterator>
#include <map>
#include <mutex>
#include <random>
#include <sstream>
#include <string>
#include <thread>
#include <vector>
#include <zmq.hpp>
#include <zmq_addon.hpp>

#include "absl/strings/str_cat.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/clock.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/model_params.h"
#include "aftershock/update_sink.h"
#include "nlohmann/json.hpp"
#include "support/test_support.h"

namespace aftershock {
namespace {

using SteadyClock = std::chrono::steady_clock;

// Kills; the whole test takes about 30 s on the 2-core machine.
constexpr int kKills = 20;
constexpr int kSymbols = 4;
// Ticks per bar and symbol, and wall time between two batches (one tick per
// symbol): the 4 ticks of a one-second bar in 40 ms of wall clock, i.e. event
// time runs 25x faster than the wall clock (25 bars a second), so models get
// fitted within the first few runs.
constexpr int kTicksPerBar = 4;
constexpr auto kBatchEvery = std::chrono::milliseconds(10);
// Event time starts in the future (2030-01-01T00:00Z), so bars are closed by
// their next tick, never by the wall clock ([bars] grace), whatever the pace.
constexpr int64_t kT0 = 1893456000LL * kNanosPerSecond;
// Bound on var(first update after a restart) / var(last update before the
// kill), both ways. The first update after a restart carries the variance
// forecast of the snapshot (checked exactly), so the ratio is how far the
// killed run's variance moved after its last snapshot: at most 0.5 s of wall
// clock, about 13 bars. For a GARCH(1,1) near the simulated one (alpha 0.08,
// beta 0.88) that is at least beta^13 = 0.19 of it downward (ratio 5.3) and,
// upward, a 4-sigma bar adds alpha * 16 = 1.3 times the variance (ratio 2.3).
// 10 covers both with room for fitted parameters off the simulated ones; a
// restore that lost the state (a warm-up restart, a zeroed filter) also fails
// the exact var_next check.
constexpr double kVarFactor = 10.0;

const char* const kNames[kSymbols] = {"OSPREY.A", "MERLIN.B", "KESTREL.C", "HOBBY.D"};

std::string Slurp(const std::string& path) {
  std::ifstream in(path);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

// Every number in `j` is finite (nlohmann parses NaN/Infinity tokens as errors
// already; this also covers huge values that overflowed to inf in a writer).
bool AllFinite(const nlohmann::json& j) {
  if (j.is_number_float()) return std::isfinite(j.get<double>());
  if (j.is_object() || j.is_array()) {
    for (const auto& v : j) {
      if (!AllFinite(v)) return false;
    }
  }
  return true;
}

// One update as the test saw it.
struct Seen {
  int run = 0;
  double var = 0, var_next = 0;
  uint32_t ver = 0;
  bool warmup = false;
};

// What a checkpoint holds for one symbol (restored in-process).
struct Saved {
  uint64_t updates = 0;  // updates published up to the snapshot
  uint32_t version = 0;
  bool fitted = false;  // own or group model in force (no warmup, no fallback)
  bool pooled = false;  // the group model stands in
};

// The feed: an XPUB bound on loopback, sending a batch of one price tick per
// symbol every kBatchEvery while not paused, and counting subscriptions.
class Feed {
 public:
  explicit Feed(zmq::context_t* ctx) : sock_(*ctx, zmq::socket_type::xpub) {
    sock_.set(zmq::sockopt::linger, 0);
    sock_.set(zmq::sockopt::xpub_verbose, 1);  // every (re)subscription reaches us
    sock_.bind("tcp://127.0.0.1:*");
    endpoint_ = sock_.get(zmq::sockopt::last_endpoint);
    ModelParams p;
    p.spec.mean = MeanKind::kZero;
    p.spec.variance = VarianceKind::kGarch;
    p.spec.arch_order = 1;
    p.spec.garch_order = 1;
    p.spec.innovations = Innovations::kNormal;
    p.values = {4e-6, 0.08, 0.88};  // long-run variance 1e-4 a bar
    for (int s = 0; s < kSymbols; ++s) {
      returns_[s] = testing::SimulatedReturns(p, 4000, 101 + s);
      price_[s] = 20.0 + 10.0 * s;
      open_[s] = price_[s];
    }
  }
  ~Feed() { Stop(); }
  const std::string& endpoint() const { return endpoint_; }
  void Start() {
    thread_ = std::thread([this] { Loop(); });
  }
  void Stop() {
    stop_.store(true);
    if (thread_.joinable()) thread_.join();
  }
  void set_paused(bool p) { paused_.store(p); }
  int subscriptions() const { return subscriptions_.load(); }
  int64_t ticks_sent() const { return ticks_.load(); }

 private:
  void Loop() {
    std::mt19937_64 rng(5);
    std::normal_distribution<double> noise(0.0, 0.002);
    auto next = SteadyClock::now();
    while (!stop_.load()) {
      zmq::message_t m;
      while (sock_.recv(m, zmq::recv_flags::dontwait)) {
        if (m.size() > 0 && static_cast<const char*>(m.data())[0] == 1) ++subscriptions_;
      }
      if (paused_.load()) {
        std::this_thread::sleep_for(std::chrono::milliseconds(1));
        next = SteadyClock::now();
        continue;
      }
      std::this_thread::sleep_until(next);
      next += kBatchEvery;
      // Tick j of bar b at b s + 100 + 250 j ms; the bar's last tick carries
      // its simulated close, the others wander around the open.
      const int64_t b = n_ / kTicksPerBar;
      const int j = static_cast<int>(n_ % kTicksPerBar);
      if (b >= static_cast<int64_t>(returns_[0].size())) continue;  // out of data
      const int64_t t = kT0 + b * kNanosPerSecond + (100 + 250 * j) * 1000000LL;
      nlohmann::json batch = nlohmann::json::array();
      for (int s = 0; s < kSymbols; ++s) {
        double p;
        if (j == kTicksPerBar - 1) {
          price_[s] = open_[s] * std::exp(returns_[s][static_cast<size_t>(b)]);
          open_[s] = price_[s];
          p = price_[s];
        } else {
          p = open_[s] * std::exp(noise(rng));
        }
        batch.push_back({{"s", kNames[s]}, {"t", t}, {"p", p}});
      }
      const std::string body = batch.dump();
      sock_.send(zmq::buffer(std::string("*")), zmq::send_flags::sndmore);
      sock_.send(zmq::buffer(body), zmq::send_flags::none);
      ticks_ += kSymbols;
      ++n_;
    }
  }

  zmq::socket_t sock_;
  std::string endpoint_;
  std::vector<double> returns_[kSymbols];
  double price_[kSymbols];
  double open_[kSymbols];
  int64_t n_ = 0;  // ticks sent per symbol
  std::atomic<bool> stop_{false};
  std::atomic<bool> paused_{true};
  std::atomic<int> subscriptions_{0};
  std::atomic<int64_t> ticks_{0};
  std::thread thread_;
};

// The engine's output: a SUB on every topic, collecting messages with the
// run they belong to (set by the test between runs, when no engine runs).
class Listener {
 public:
  Listener(zmq::context_t* ctx, const std::string& endpoint) : sock_(*ctx, zmq::socket_type::sub) {
    sock_.set(zmq::sockopt::linger, 0);
    sock_.set(zmq::sockopt::reconnect_ivl, 10);
    sock_.set(zmq::sockopt::rcvtimeo, 20);
    sock_.set(zmq::sockopt::subscribe, "");
    zmq_socket_monitor(sock_.handle(), "inproc://kill-test-monitor", ZMQ_EVENT_HANDSHAKE_SUCCEEDED);
    monitor_ = zmq::socket_t(*ctx, zmq::socket_type::pair);
    monitor_.set(zmq::sockopt::rcvtimeo, 0);
    monitor_.connect("inproc://kill-test-monitor");
    sock_.connect(endpoint);
    thread_ = std::thread([this] { Loop(); });
  }
  ~Listener() {
    stop_.store(true);
    thread_.join();
  }
  void set_run(int run) { run_.store(run); }
  int handshakes() const { return handshakes_.load(); }
  // Wall time since the last message (for draining after a kill).
  double quiet_seconds() const {
    return std::chrono::duration<double>(
               SteadyClock::now() - SteadyClock::time_point(SteadyClock::duration(last_ns_.load())))
        .count();
  }
  struct Message {
    int run;
    std::string topic, body;
  };
  std::vector<Message> Take() {
    std::lock_guard<std::mutex> lock(mu_);
    std::vector<Message> out;
    out.swap(messages_);
    return out;
  }

 private:
  void Loop() {
    last_ns_.store(SteadyClock::now().time_since_epoch().count());
    while (!stop_.load()) {
      zmq::message_t ev;
      while (monitor_.recv(ev, zmq::recv_flags::dontwait)) {
        if (ev.more()) {
          zmq::message_t addr;
          (void)monitor_.recv(addr);
        }
        ++handshakes_;
      }
      std::vector<zmq::message_t> parts;
      if (!zmq::recv_multipart(sock_, std::back_inserter(parts))) continue;
      last_ns_.store(SteadyClock::now().time_since_epoch().count());
      if (parts.size() != 2) continue;
      std::lock_guard<std::mutex> lock(mu_);
      messages_.push_back({run_.load(), parts[0].to_string(), parts[1].to_string()});
    }
  }

  zmq::socket_t sock_;
  zmq::socket_t monitor_;
  std::atomic<bool> stop_{false};
  std::atomic<int> run_{0};
  std::atomic<int> handshakes_{0};
  std::atomic<int64_t> last_ns_{0};
  std::mutex mu_;
  std::vector<Message> messages_;
  std::thread thread_;
};

// Restores `cp` into an in-process core + services and reads what each symbol
// holds.
std::map<std::string, Saved> Inspect(const Checkpoint& cp, const EngineConfig& config) {
  NullSink sink;
  ManualClock clock;
  auto core = IngestCore::Create(config, &sink, &clock);
  REQUIRE(core.ok());
  ServiceOptions so;
  so.mode = RefitMode::kReplay;
  auto services = EngineServices::Attach(core->get(), config, so);
  REQUIRE(services.ok());
  const absl::Status s = RestoreEngineState(cp, config, core->get(), services->get());
  INFO(s.ToString());
  REQUIRE(s.ok());
  std::map<std::string, Saved> out;
  for (int i = 0; i < (*core)->num_symbols(); ++i) {
    Saved v;
    v.updates = (*core)->symbol_updates(i);
    v.version = (*core)->model(i).version();
    const uint32_t f = (*core)->status_flags(i);
    v.fitted = (f & (kFlagWarmup | kFlagFallback)) == 0 && v.version > 0;
    v.pooled = (f & kFlagPooled) != 0;
    out[std::string((*core)->symbol(i))] = v;
  }
  return out;
}

// The integer metric `name` of the engine serving /metrics on `http_port`
// (-1 when unreadable).
int Metric(int http_port, const std::string& name) {
  const std::string m = testing::HttpGet(http_port, "/metrics");
  const std::string key = "\n" + name + " ";
  const size_t at = m.find(key);
  if (at == std::string::npos) return -1;
  return std::atoi(m.c_str() + at + key.size());
}
int CheckpointWrites(int http_port) {
  return Metric(http_port, "aftershock_checkpoint_writes_total");
}

// Waits (up to 20 s) for `pred`, sleeping 5 ms between tries.
template <typename Pred>
bool WaitFor(Pred pred) {
  const auto deadline = SteadyClock::now() + std::chrono::seconds(20);
  while (!pred()) {
    if (SteadyClock::now() > deadline) return false;
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  return true;
}

TEST_CASE("run survives SIGKILL: restarts resume fitted models, the variance continues",
          "[app][run][checkpoint][kill]") {
  const std::string dir = testing::ScratchDir("run_kill");
  const std::string state = dir + "/state.ckpt";
  zmq::context_t ctx(1);
  Feed feed(&ctx);
  int pub_port = 0, http_port = 0;
  {
    // Two free loopback ports for the engine (publish, http): bind, read, close.
    zmq::socket_t probe(ctx, zmq::socket_type::pub);
    probe.set(zmq::sockopt::linger, 0);
    probe.bind("tcp://127.0.0.1:*");
    pub_port = std::stoi(probe.get(zmq::sockopt::last_endpoint).substr(16));
    zmq::socket_t probe2(ctx, zmq::socket_type::pub);
    probe2.set(zmq::sockopt::linger, 0);
    probe2.bind("tcp://127.0.0.1:*");
    http_port = std::stoi(probe2.get(zmq::sockopt::last_endpoint).substr(16));
  }
  const std::string cfg = testing::WriteFile(
      dir + "/c.toml",
      absl::StrCat("[feed]\nendpoints = [\"", feed.endpoint(),
                   "\"]\n[publish]\nendpoint = \"tcp://127.0.0.1:", pub_port,
                   "\"\n[http]\nendpoint = \"127.0.0.1:", http_port,
                   "\"\n[bars]\ninterval = \"1s\"\n"
                   "[model]\nmean = \"zero\"\nvariance = \"garch\"\ninnovations = \"gaussian\"\n"
                   "[warmup]\nstart_bars = 5\n"
                   "[refit]\nevery_bars = 25\nwindow = 300\nmin_bars = 100\nholdout_bars = 20\n"
                   "reidentify_every = 0\njitter_fraction = 0\n"
                   "[checkpoint]\npath = \"",
                   state, "\"\nevery_seconds = 0.5\nslice_symbols = 1\n"));
  absl::StatusOr<EngineConfig> config = LoadEngineConfigFile(cfg);
  REQUIRE(config.ok());
  std::remove(state.c_str());
  Listener listener(&ctx, absl::StrCat("tcp://127.0.0.1:", pub_port));
  feed.Start();

  std::mt19937_64 rng(20261202);
  std::uniform_int_distribution<int> run_ms(700, 1800);
  // Per symbol: updates by the engine's per-symbol sequence number (a restart
  // continues the restored count, so a rewound update is overwritten).
  std::map<std::string, std::map<uint64_t, Seen>> history;
  std::map<std::string, uint64_t> next_seq;  // of the run being collected
  std::map<std::string, Saved> saved;        // the checkpoint the next run restores
  std::map<std::string, Seen> last_before_kill;
  int messages = 0, updates = 0, bad_json = 0, non_finite = 0, slow_runs = 0;
  int most_slices = 0;  // aftershock_checkpoint_last_capture_slices, the most seen
  int restarts_with_state = 0, restarts_on_fitted = 0, fitted_resumed = 0, exact_var = 0;
  double worst_ratio = 1.0;

  // Files the collected messages of run `run` under `next_seq`; checks the
  // first update of each symbol in a restarted run.
  auto collect = [&](int run) {
    for (const Listener::Message& m : listener.Take()) {
      ++messages;
      const nlohmann::json j = nlohmann::json::parse(m.body, nullptr, false);
      if (j.is_discarded()) {
        ++bad_json;
        UNSCOPED_INFO("unparsable message on " << m.topic << ": " << m.body);
        continue;
      }
      if (!AllFinite(j)) {
        ++non_finite;
        UNSCOPED_INFO("non-finite number on " << m.topic << ": " << m.body);
      }
      if (m.topic.rfind("u.", 0) != 0) continue;
      ++updates;
      const std::string sym = m.topic.substr(2);
      Seen u;
      u.run = m.run;
      u.var = j.at("var").get<double>();
      u.var_next = j.at("var_next").get<double>();
      u.ver = j.at("ver").get<uint32_t>();
      for (const auto& f : j.at("flags")) u.warmup |= f == "warmup";
      const uint64_t seq = next_seq[sym]++;
      const auto sv_it = saved.find(sym);
      if (m.run == run && sv_it != saved.end() && sv_it->second.updates > 0 &&
          seq == sv_it->second.updates) {
        // The first update of a restarted run.
        INFO("run " << run << " symbol " << sym << " seq " << seq << ": " << m.body);
        const Saved& sv = sv_it->second;
        if (sv.fitted) {
          CHECK_FALSE(u.warmup);
          CHECK(u.ver >= sv.version);
          ++fitted_resumed;
        }
        // The last update before the snapshot: this update continues it.
        auto it = history[sym].find(seq - 1);
        REQUIRE(it != history[sym].end());
        if (it->second.ver == u.ver) {
          CHECK(u.var == it->second.var_next);
          ++exact_var;
        }
        auto lk = last_before_kill.find(sym);
        if (sv.fitted && lk != last_before_kill.end()) {
          const double ratio = u.var / lk->second.var;
          worst_ratio = std::max(worst_ratio, std::max(ratio, 1.0 / ratio));
          CHECK(ratio <= kVarFactor);
          CHECK(ratio >= 1.0 / kVarFactor);
        }
      }
      history[sym][seq] = u;
    }
  };

  for (int run = 0; run <= kKills; ++run) {
    const bool last = run == kKills;
    INFO("run " << run);
    // Each run starts counting where its checkpoint left each symbol.
    next_seq.clear();
    for (const auto& [sym, sv] : saved) next_seq[sym] = sv.updates;
    listener.set_run(run);
    const int subs_before = feed.subscriptions();
    const int shakes_before = listener.handshakes();
    const std::string err_path = absl::StrCat(dir, "/err", run, ".txt");
    const pid_t pid = fork();
    REQUIRE(pid >= 0);
    if (pid == 0) {
      FILE* f = std::freopen(err_path.c_str(), "w", stderr);
      (void)f;
      execl(AFTERSHOCK_CLI, AFTERSHOCK_CLI, "run", "--config", cfg.c_str(), nullptr);
      _exit(127);
    }
    int status = 0;
    bool exited = false;
    const bool running = WaitFor([&] {
      if (waitpid(pid, &status, WNOHANG) == pid) exited = true;
      return exited || Slurp(err_path).find("running:") != std::string::npos;
    });
    const std::string err = Slurp(err_path);
    INFO(err);
    REQUIRE(running);
    REQUIRE_FALSE(exited);
    if (saved.empty()) {
      CHECK(err.find("restored") == std::string::npos);
    } else {
      ++restarts_with_state;
      int fitted = 0, own = 0;  // the log line counts group models apart
      for (const auto& [sym, sv] : saved) {
        fitted += sv.fitted;
        own += sv.fitted && !sv.pooled;
      }
      if (fitted > 0) ++restarts_on_fitted;
      CHECK(err.find(absl::StrCat("restored ", saved.size(), " symbols from ", state)) !=
            std::string::npos);
      CHECK(err.find(absl::StrCat(": ", own, " on fitted models")) != std::string::npos);
      const std::string health = testing::HttpGet(http_port, "/health");
      INFO(health);
      const size_t body = health.find("\r\n\r\n");
      REQUIRE(body != std::string::npos);
      nlohmann::json h = nlohmann::json::parse(health.substr(body + 4), nullptr, false);
      REQUIRE(h.is_object());
      REQUIRE(h["restored"].is_object());
      CHECK(h["restored"]["symbols"] == saved.size());
      CHECK(h["restored"]["file"] == state);
    }
    // Feed only once the engine subscribed to the feed and our subscriber is
    // connected to the engine (then its subscription is on its way: 100 ms).
    REQUIRE(WaitFor([&] {
      return feed.subscriptions() > subs_before && listener.handshakes() > shakes_before;
    }));
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
    feed.set_paused(false);
    std::this_thread::sleep_for(std::chrono::milliseconds(last ? 1000 : run_ms(rng)));
    // Progress needs a checkpoint written while fed: on a disk whose fsync is
    // slow (CI), the 0.5 s cadence can lag the run, and a run killed before its
    // second write would resume where it started and the universe would never
    // reach min_bars. Wait for two writes of this process (the first may hold
    // the state from before feeding), then kill at once: the kill still lands
    // at an arbitrary point of the next snapshot or write.
    if (!last) {
      const bool wrote = WaitFor([&] { return CheckpointWrites(http_port) >= 2; });
      slow_runs += !wrote;
      // The snapshots were taken one symbol a slice.
      most_slices =
          std::max(most_slices, Metric(http_port, "aftershock_checkpoint_last_capture_slices"));
    }
    kill(pid, last ? SIGTERM : SIGKILL);
    waitpid(pid, &status, 0);
    feed.set_paused(true);
    if (last) {
      INFO(Slurp(err_path));
      REQUIRE(WIFEXITED(status));
      CHECK(WEXITSTATUS(status) == 0);
    } else {
      REQUIRE(WIFSIGNALED(status));
      CHECK(WTERMSIG(status) == SIGKILL);
    }
    // Drain what the dead engine sent, then file it under this run.
    REQUIRE(WaitFor([&] { return listener.quiet_seconds() > 0.15; }));
    collect(run);
    last_before_kill.clear();
    for (const auto& [sym, seqs] : history) {
      auto it = seqs.find(next_seq[sym] - 1);
      if (next_seq[sym] > 0 && it != seqs.end()) last_before_kill[sym] = it->second;
    }
    // The file is never corrupt: it reads (every checksum) and restores.
    absl::StatusOr<Checkpoint> cp = ReadCheckpointFile(state);
    if (absl::IsNotFound(cp.status())) {
      CHECK(saved.empty());  // killed before its first write: nothing to lose yet
      continue;
    }
    INFO(cp.status().ToString());
    REQUIRE(cp.ok());
    saved = Inspect(*cp, *config);
  }
  INFO(messages << " messages, " << updates << " updates, " << restarts_with_state
                << " restarts with state, " << restarts_on_fitted << " on fitted models, "
                << fitted_resumed << " fitted symbols resumed, " << exact_var
                << " exact variance continuations, worst var ratio " << worst_ratio << ", "
                << slow_runs << " runs without two checkpoint writes in 20 s");
  WARN(messages << " messages, " << updates << " updates, " << restarts_with_state
                << " restarts with state, " << restarts_on_fitted << " on fitted models, "
                << fitted_resumed << " fitted symbols resumed, " << exact_var
                << " exact variance continuations, worst var ratio " << worst_ratio << ", "
                << slow_runs << " runs without two checkpoint writes in 20 s");
  CHECK(most_slices == kSymbols);
  CHECK(bad_json == 0);
  CHECK(non_finite == 0);
  // Not vacuous: most restarts had state, many on fitted models, and the
  // continuity checks ran.
  CHECK(restarts_with_state >= kKills - 2);
  CHECK(restarts_on_fitted >= kKills / 2);
  CHECK(fitted_resumed >= kKills);
  CHECK(exact_var >= kKills);
  // The fitted models move the variance (a constant-variance fit would make
  // the continuity check trivial).
  CHECK(worst_ratio > 1.0);
}

}  // namespace
}  // namespace aftershock
