// `aftershock demo`: the whole product in one process on an embedded default
// (PRODUCT.md C12), with no external service:
//
//   simulator thread --ZeroMQ (loopback)--> engine thread (+ refits, alerts)
//      --ZeroMQ (loopback)--> live table on the main thread
//
// The simulator plays the invented Halvard Sound market (market_sim.h) as
// 1-minute price bars at an accelerated pace, with a volatility regime jump
// for two instruments part-way. The engine starts every symbol on the EWMA
// warm-up; the background refits (EngineServices) bring estimated versions in,
// and the alert rules react to the jumps. After --duration seconds or Ctrl-C
// every thread is stopped and joined and a summary is printed.
//
// `aftershock demo --fit-only` keeps the estimator-against-truth demo: one
// simulated daily series from a known model, fitted and reported.
#include <pthread.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <csignal>
#include <cstdio>
#include <deque>
#include <future>
#include <memory>
#include <nlohmann/json.hpp>
#include <string>
#include <thread>
#include <vector>
#include <zmq.hpp>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "aftershock/alerts.h"
#include "aftershock/engine.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/estimator.h"
#include "aftershock/market_sim.h"
#include "aftershock/model_registry.h"
#include "aftershock/simulate.h"
#include "aftershock/tick_file.h"
#include "aftershock/update_codec.h"
#include "aftershock/wire.h"
#include "aftershock/zmq_transport.h"
#include "app/args.h"
#include "app/cli.h"
#include "app/engine_report.h"
#include "app/fit_report.h"
#include "app/stop_signal.h"
#include "app/watch_table.h"

namespace aftershock::app {
namespace {

using SteadyClock = std::chrono::steady_clock;

constexpr char kCaution[] =
    "Caution: these figures are statistical estimates from invented data, not advice. Models\n"
    "fail in crises and their parameters carry estimation error; any use for trading or risk\n"
    "limits must follow your firm's model-risk policy and the regulation that applies to you.\n";

// The simulated bar length and the bars per year it implies (252 days of 6.5 h).
constexpr int64_t kBarIntervalNs = 60LL * 1000 * 1000 * 1000;
constexpr char kSessionStart[] = "2026-03-02T09:30:00Z";
// Refit window and holdout of the embedded configuration (bars).
constexpr int kWindowBars = 600;
constexpr int kHoldoutBars = 50;
// How long the simulator waits for the engine's subscription before it starts anyway.
constexpr auto kSubscribeWait = std::chrono::seconds(5);
// Alert and model-event lines kept under the live table.
constexpr size_t kEventLines = 8;

int Fail(const absl::Status& s, int code) { return ReportFailure("demo", s, code); }

int Usage(const std::string& message) { return Fail(absl::InvalidArgumentError(message), 2); }

void Write(const std::string& s) {
  std::fwrite(s.data(), 1, s.size(), stdout);
  std::fflush(stdout);
}

// ---- --fit-only: the estimator against known truth ----------------------------------

int FitOnlyDemo(long long bars, long long seed) {
  auto spec = MakeModelSpec("constant", {}, "gjr", {1, 1, 1}, "student");
  auto truth = ModelParams::FromNamed(*spec, {{"mu", 0.03},
                                              {"omega", 0.02},
                                              {"alpha_1", 0.04},
                                              {"gamma_1", 0.08},
                                              {"beta_1", 0.9},
                                              {"nu", 7.0}});
  SimulationOptions so;
  so.n = static_cast<int>(bars);
  so.seed = static_cast<uint64_t>(seed);
  auto sim = Simulate(*truth, so);
  if (!sim.ok()) return Fail(sim.status(), 1);
  auto fit = FitModel(*spec, sim->returns);
  if (!fit.ok()) return Fail(fit.status(), 1);
  std::printf(
      "Simulated %lld daily returns (per cent) of the invented instrument KESTREL.NRG\n"
      "from %s with known parameters, then estimated them back.\n\n",
      bars, spec->Label().c_str());
  std::fputs(FitResultText(*fit, "simulated KESTREL.NRG").c_str(), stdout);
  std::printf("\n  %-10s %12s %12s %10s\n", "parameter", "truth", "estimate", "z-score");
  for (size_t i = 0; i < fit->names.size(); ++i) {
    const double se = fit->std_errors[i];
    std::printf(
        "  %-10s %12.6g %12.6g %10s\n", fit->names[i].c_str(), truth->values[i],
        fit->params.values[i],
        se > 0 ? absl::StrFormat("%.2f", (fit->params.values[i] - truth->values[i]) / se).c_str()
               : "n/a");
  }
  return fit->converged ? 0 : 1;
}

// ---- The embedded configuration ---------------------------------------------------------

// The engine configuration of the live demo. The feed endpoint is replaced by
// the simulator's bound endpoint at start; the publisher binds a free
// loopback port.
std::string DemoConfigToml(int refit_every, int min_bars) {
  return absl::StrCat(
      "# aftershock demo: the embedded engine configuration.\n"
      "# The demo binds its simulator on a free loopback port and points [feed] there.\n"
      "[feed]\n"
      "endpoints = [\"tcp://127.0.0.1:*\"]\n"
      "encoding = \"json\"\n\n"
      "[publish]\n"
      "endpoint = \"tcp://127.0.0.1:*\"\n"
      "encoding = \"json\"\n\n"
      "[bars]\n"
      "# The simulator sends one price tick per instrument per 1-minute bar.\n"
      "interval = \"0s\"\n\n"
      "[model]\n"
      "# No [model.params]: every symbol starts on the EWMA warm-up (version 0)\n"
      "# until its first refit passes the gate.\n"
      "mean = \"constant\"\n"
      "variance = \"garch\"\n"
      "shock_lags = 1\n"
      "variance_lags = 1\n"
      "innovations = \"student\"\n\n"
      "[warmup]\n"
      "ewma_lambda = 0.94\n\n"
      "[outputs]\n"
      "# 252 days of 6.5 hours of 1-minute bars, as the simulator uses.\n"
      "periods_per_year = ",
      PeriodsPerYearForInterval(kBarIntervalNs),
      "\n"
      "target_vol_ann = 0.10\n\n"
      "[refit]\n"
      "every_bars = ",
      refit_every,
      "\n"
      "window = ",
      kWindowBars,
      "\n"
      "min_bars = ",
      min_bars,
      "\n"
      "holdout_bars = ",
      kHoldoutBars,
      "\n"
      "workers = 1\n"
      "reidentify_every = 5\n\n"
      "[alerts]\n"
      "# Defaults: shock |z| >= 4 (critical >= 6), regime evidence 10 / 6 nats.\n\n"
      "[http]\n"
      "enabled = false\n");
}

// ---- Scenario ----------------------------------------------------------------------------

// A variance regime jump of one instrument (MarketSim regime change).
struct RegimeJump {
  size_t instrument = 0;
  int64_t bar = 0;
  double mult = 1;
};

// Two jumps: the third instrument's variance x6 at 45 % of the run, the
// eighth's x4 at 65 % (for unbounded runs: after 12 s and 18 s). Fewer
// instruments: the jumps go to the last one(s).
std::vector<RegimeJump> ScenarioJumps(size_t instruments, int64_t planned_bars, double rate) {
  const bool bounded = planned_bars > 0;
  const int64_t first = bounded ? planned_bars * 45 / 100 : std::llround(12 * rate);
  const int64_t second = bounded ? planned_bars * 65 / 100 : std::llround(18 * rate);
  std::vector<RegimeJump> out;
  out.push_back({std::min<size_t>(2, instruments - 1), std::max<int64_t>(1, first), 6.0});
  const size_t b = std::min<size_t>(7, instruments - 1);
  if (b != out[0].instrument) out.push_back({b, std::max<int64_t>(1, second), 4.0});
  return out;
}

// ---- Threads -------------------------------------------------------------------------------

// Blocks SIGINT/SIGTERM in the calling thread while alive, so threads started
// meanwhile (engine, simulator, refit workers, ZeroMQ I/O) inherit the block
// and the signal is always delivered to the main thread, whose poll then
// returns early. Unblock() (or destruction) restores the previous mask.
class SignalBlock {
 public:
  SignalBlock() {
    sigset_t set;
    sigemptyset(&set);
    sigaddset(&set, SIGINT);
    sigaddset(&set, SIGTERM);
    pthread_sigmask(SIG_BLOCK, &set, &old_);
  }
  ~SignalBlock() { Unblock(); }
  void Unblock() {
    if (blocked_) pthread_sigmask(SIG_SETMASK, &old_, nullptr);
    blocked_ = false;
  }

 private:
  sigset_t old_;
  bool blocked_ = true;
};

// What the simulator thread reports (written there, read anywhere).
struct SimProgress {
  std::atomic<int64_t> ticks{0};       // ticks handed to the socket
  std::atomic<int64_t> bars{0};        // bars fully published
  std::atomic<int64_t> send_fails{0};  // ticks the socket refused (queue full)
  std::atomic<bool> subscribed{false};
  std::atomic<bool> finished{false};  // thread done (all bars, stop, or error)
  std::string error;                  // set before `finished` when the thread failed
};

// The simulator thread: waits for the engine's subscription on the XPUB
// socket, then publishes every instrument's tick of bar k at t0 + k / rate.
void SimulatorLoop(MarketSim* sim, zmq::socket_t* sock, double bars_per_second,
                   const std::atomic<bool>* stop, SimProgress* progress) {
  try {
    const auto wait_end = SteadyClock::now() + kSubscribeWait;
    while (!stop->load() && SteadyClock::now() < wait_end) {
      zmq::pollitem_t item{sock->handle(), 0, ZMQ_POLLIN, 0};
      zmq::poll(&item, 1, std::chrono::milliseconds(50));
      if (!(item.revents & ZMQ_POLLIN)) continue;
      zmq::message_t m;
      if (sock->recv(m, zmq::recv_flags::dontwait) && m.size() > 0 &&
          static_cast<const uint8_t*>(m.data())[0] == 1) {
        progress->subscribed.store(true);  // a subscribe (not unsubscribe) message
        break;
      }
    }
    const size_t per_bar = sim->instruments().size();
    const auto t0 = SteadyClock::now();
    Tick tick;
    std::string body;
    int64_t bar = 0;
    bool more = true;
    while (more && !stop->load()) {
      const auto due = t0 + std::chrono::nanoseconds(
                                std::llround(static_cast<double>(bar) * 1e9 / bars_per_second));
      while (!stop->load() && SteadyClock::now() < due) {
        std::this_thread::sleep_for(std::min<SteadyClock::duration>(due - SteadyClock::now(),
                                                                    std::chrono::milliseconds(50)));
      }
      if (stop->load()) break;
      for (size_t i = 0; i < per_bar; ++i) {
        if (!sim->Next(Tick::kPrice, &tick)) {
          more = false;
          break;
        }
        EncodeTickJson(tick, &body);
        const absl::string_view topic = tick.symbol.view();
        // XPUB never blocks: at the high-water mark the send fails and is counted.
        if (sock->send(zmq::buffer(topic.data(), topic.size()),
                       zmq::send_flags::sndmore | zmq::send_flags::dontwait) &&
            sock->send(zmq::buffer(body), zmq::send_flags::dontwait)) {
          progress->ticks.fetch_add(1);
        } else {
          progress->send_fails.fetch_add(1);
        }
      }
      if (more) progress->bars.store(++bar);
    }
  } catch (const zmq::error_t& e) {
    progress->error = absl::StrCat("simulator: ", e.what());
  }
  progress->finished.store(true);
}

// Counts what the services report, per core symbol index (ingest thread; read
// after the engine thread was joined).
class DemoListener : public ServiceListener {
 public:
  struct Counts {
    uint64_t alerts[kNumAlertKinds] = {};
    uint64_t swapped = 0;
    uint64_t rejected = 0;  // failed gates, fallbacks included
  };

  void OnAlert(int index, const Alert& alert) override {
    ++At(index).alerts[static_cast<int>(alert.kind)];
  }
  void OnRefitRecord(int index, const RefitRecord& record) override {
    Counts& c = At(index);
    if (record.outcome == RefitOutcome::kSwapped) {
      ++c.swapped;
    } else if (record.outcome != RefitOutcome::kPooled) {
      ++c.rejected;
    }
  }
  // Counts of a symbol index (zeros when nothing was reported), or of the
  // feed-wide alerts for index -1.
  const Counts& Get(int index) const {
    static const Counts kNone;
    if (index < 0) return feed_;
    return static_cast<size_t>(index) < per_symbol_.size() ? per_symbol_[index] : kNone;
  }

 private:
  Counts& At(int index) {
    if (index < 0) return feed_;
    if (static_cast<size_t>(index) >= per_symbol_.size()) per_symbol_.resize(index + 1);
    return per_symbol_[index];
  }
  std::vector<Counts> per_symbol_;
  Counts feed_;
};

// "shock 2, regime 1" or "-".
std::string AlertList(const uint64_t (&alerts)[kNumAlertKinds]) {
  std::vector<std::string> parts;
  for (int k = 0; k < kNumAlertKinds; ++k) {
    if (alerts[k] > 0) {
      parts.push_back(absl::StrCat(AlertKindName(static_cast<AlertKind>(k)), " ", alerts[k]));
    }
  }
  return parts.empty() ? "-" : absl::StrJoin(parts, ", ");
}

// ---- The live view ---------------------------------------------------------------------

// The main thread's subscriber: updates go into the WatchTable; alerts (a.*)
// and model events (m.*) are counted and kept as short lines.
class LiveView {
 public:
  LiveView(bool table_mode, std::string title)
      : table_mode_(table_mode), title_(std::move(title)) {}

  // Handles one [topic][body] message.
  void OnMessage(absl::string_view topic, absl::string_view body) {
    if (topic.size() < 2 || topic[1] != '.') return;
    if (topic[0] == 'u') {
      const bool binary = !body.empty() && static_cast<uint8_t>(body[0]) == kUpdateMagic;
      const absl::Status s = binary ? DecodeUpdateBinary(body, &u_) : DecodeUpdateJson(body, &u_);
      if (!s.ok()) {
        ++undecodable_;
        return;
      }
      table_.Apply(u_);
      if (!table_mode_) Write(table_.FormatLine(u_) + "\n");
      dirty_ = true;
    } else if (topic[0] == 'a') {
      ++alerts_;
      const nlohmann::json a = nlohmann::json::parse(body.begin(), body.end(), nullptr,
                                                     /*allow_exceptions=*/false);
      if (a.is_object() && a.contains("kind") && a["kind"].is_string() && a.contains("rule") &&
          a["rule"].is_string()) {
        dirty_ = table_.ApplyAlert(std::string(topic.substr(2)), a["kind"].get<std::string>(),
                                   a["rule"].get<std::string>()) ||
                 dirty_;
      }
      Event(AlertLine(topic.substr(2), body));
    } else if (topic[0] == 'm') {
      ++model_events_;
      Event(ModelLine(topic.substr(2), body));
    }
  }

  // Redraws the table (table mode) when something changed, at most every 100 ms.
  void MaybeDraw(const std::string& status, bool force) {
    if (!table_mode_ || (!dirty_ && !force)) return;
    const auto now = SteadyClock::now();
    if (!force && now < next_draw_) return;
    next_draw_ = now + std::chrono::milliseconds(100);
    dirty_ = false;
    std::string screen = table_.Render(true);
    constexpr absl::string_view kHome = "\x1b[H";
    if (absl::string_view(screen).substr(0, kHome.size()) == kHome) screen.erase(0, kHome.size());
    std::string out = absl::StrCat(kHome, title_, "\x1b[K\n", status, "\x1b[K\n", screen);
    absl::StrAppend(&out, "alerts ", alerts_, ", model events ", model_events_,
                    events_.empty() ? "" : "; latest:", "\x1b[K\n");
    for (const std::string& e : events_) absl::StrAppend(&out, "  ", e, "\x1b[K\n");
    absl::StrAppend(&out, "\x1b[J");
    Write(out);
  }

  bool table_mode() const { return table_mode_; }
  uint64_t updates() const { return table_.updates(); }
  uint64_t alerts() const { return alerts_; }
  uint64_t model_events() const { return model_events_; }
  uint64_t undecodable() const { return undecodable_; }

 private:
  void Event(std::string line) {
    if (!table_mode_) {
      Write(line + "\n");
      return;
    }
    events_.push_back(std::move(line));
    while (events_.size() > kEventLines) events_.pop_front();
    dirty_ = true;
  }

  // "alert BRANDR.NRG shock/warn: <message>"
  std::string AlertLine(absl::string_view symbol, absl::string_view body) {
    try {
      const nlohmann::json j = nlohmann::json::parse(body.begin(), body.end());
      return absl::StrCat("alert ", symbol, " ", j.value("kind", std::string("?")), "/",
                          j.value("severity", std::string("?")), ": ",
                          j.value("message", std::string()));
    } catch (const std::exception&) {
      ++undecodable_;
      return absl::StrCat("alert ", symbol, " (undecodable body)");
    }
  }

  // "model BRANDR.NRG swapped v2 const/GARCH(1,1)/student" (or rejected: reasons)
  std::string ModelLine(absl::string_view symbol, absl::string_view body) {
    try {
      const nlohmann::json j = nlohmann::json::parse(body.begin(), body.end());
      std::string line =
          absl::StrCat("model ", symbol, " ", j.value("outcome", std::string("?")), " v",
                       j.value("version", 0u), " ", j.value("spec", std::string()));
      if (j.contains("gate") && j["gate"].contains("reasons") && j["gate"]["reasons"].is_array() &&
          !j["gate"]["reasons"].empty()) {
        std::vector<std::string> reasons;
        for (const auto& r : j["gate"]["reasons"]) {
          if (r.is_string()) reasons.push_back(r.get<std::string>());
        }
        absl::StrAppend(&line, " (", absl::StrJoin(reasons, "; "), ")");
      }
      return line;
    } catch (const std::exception&) {
      ++undecodable_;
      return absl::StrCat("model ", symbol, " (undecodable body)");
    }
  }

  bool table_mode_;
  std::string title_;
  WatchTable table_;
  BarUpdate u_;
  std::deque<std::string> events_;
  uint64_t alerts_ = 0;
  uint64_t model_events_ = 0;
  uint64_t undecodable_ = 0;
  bool dirty_ = true;
  SteadyClock::time_point next_draw_ = SteadyClock::now();
};

// Receives every queued message (non-blocking) into the view.
void Drain(zmq::socket_t& sock, LiveView* view) {
  for (int i = 0; i < 100000; ++i) {
    zmq::message_t topic, body;
    if (!sock.recv(topic, zmq::recv_flags::dontwait)) return;
    if (!topic.more()) continue;  // a one-frame message: not ours
    if (!sock.recv(body, zmq::recv_flags::none)) return;
    while (body.more()) {  // extra frames: skip the rest of the message
      zmq::message_t rest;
      if (!sock.recv(rest, zmq::recv_flags::none) || !rest.more()) break;
    }
    view->OnMessage(absl::string_view(static_cast<const char*>(topic.data()), topic.size()),
                    absl::string_view(static_cast<const char*>(body.data()), body.size()));
  }
}

// ---- The live demo -----------------------------------------------------------------------

struct LiveOptions {
  double duration_s = 30;  // 0 = until Ctrl-C
  double rate = 20;        // bars per second per instrument
  int symbols = 12;
  uint64_t seed = 7;
  std::string mode = "auto";
  int refit_every = 100;
  int min_bars = 200;
};

int LiveDemo(const LiveOptions& o) {
  // ---- Configuration and scenario ----
  auto config =
      ParseEngineConfig(DemoConfigToml(o.refit_every, o.min_bars), "embedded demo config");
  if (!config.ok()) return Fail(config.status(), 2);
  const double ppy = config->outputs.periods_per_year;
  auto profiles = DefaultInstruments(o.symbols);
  if (!profiles.ok()) return Fail(profiles.status(), 2);
  const int64_t planned_bars =
      o.duration_s > 0 ? std::max<int64_t>(1, std::llround(o.duration_s * o.rate)) : 0;
  const std::vector<RegimeJump> jumps = ScenarioJumps(profiles->size(), planned_bars, o.rate);
  std::vector<MarketInstrument> insts;
  for (const InstrumentProfile& p : *profiles) {
    auto params = InstrumentModel(p, p.family, ppy);
    if (!params.ok()) return Fail(params.status(), 1);
    insts.push_back(MarketInstrument{p.symbol, p.start_price, *params, {}});
  }
  std::vector<std::string> scenario;
  for (const RegimeJump& j : jumps) {
    insts[j.instrument].regimes.push_back({j.bar, j.mult});
    scenario.push_back(absl::StrFormat("%s variance x%g from bar %d (~%.1f s)",
                                       insts[j.instrument].symbol, j.mult, j.bar,
                                       static_cast<double>(j.bar) / o.rate));
  }
  MarketSimOptions so;
  // An unbounded run needs no end: the generator's memory does not grow with bars.
  so.bars = planned_bars > 0 ? planned_bars : (int64_t{1} << 50);
  so.seed = o.seed;
  so.start_ns = *ParseTickTime(kSessionStart);
  so.interval_ns = kBarIntervalNs;
  auto sim = MarketSim::Create(std::move(insts), so);
  if (!sim.ok()) return Fail(sim.status(), 1);
  const size_t n = (*sim)->instruments().size();

  const bool table_mode = o.mode == "table" || (o.mode == "auto" && isatty(STDOUT_FILENO));
  ScopedStopHandler stop_handler;
  SignalBlock signal_block;

  // ---- Sockets, engine, services ----
  zmq::context_t ctx(1);
  zmq::socket_t feed(ctx, zmq::socket_type::xpub);
  zmq::socket_t view_sock(ctx, zmq::socket_type::sub);
  std::string feed_endpoint;
  try {
    feed.set(zmq::sockopt::linger, 0);
    feed.set(zmq::sockopt::sndhwm, 100000);
    feed.bind("tcp://127.0.0.1:*");
    feed_endpoint = feed.get(zmq::sockopt::last_endpoint);
  } catch (const zmq::error_t& e) {
    return Fail(absl::UnavailableError(absl::StrCat("cannot bind the simulator: ", e.what())), 1);
  }
  config->feed.endpoints = {feed_endpoint};

  auto transport = ZmqTransport::Create(1);
  if (!transport.ok()) return Fail(transport.status(), 1);
  auto source = (*transport)->Subscribe(config->feed);
  if (!source.ok()) return Fail(source.status(), 1);
  ZmqPublisherOptions po;
  po.linger_ms = 0;
  auto sink = (*transport)->Publish(config->publish, po);
  if (!sink.ok()) return Fail(sink.status(), 1);
  auto engine = Engine::Create(*config, std::move(*source), std::move(*sink), SystemClock());
  if (!engine.ok()) return Fail(engine.status(), 1);
  Engine* e = engine->get();
  DemoListener listener;
  ServiceOptions svc_options;
  svc_options.mode = RefitMode::kLive;
  svc_options.listener = &listener;
  auto services = EngineServices::Attach(e->core(), *config, svc_options);
  if (!services.ok()) return Fail(services.status(), 1);
  const std::string updates_endpoint = e->BoundEndpoint();
  try {
    view_sock.set(zmq::sockopt::linger, 0);
    view_sock.set(zmq::sockopt::rcvhwm, 0);
    for (const char* prefix : {"u.", "a.", "m."}) view_sock.set(zmq::sockopt::subscribe, prefix);
    view_sock.connect(updates_endpoint);
  } catch (const zmq::error_t& err) {
    return Fail(absl::UnavailableError(
                    absl::StrCat("cannot subscribe to ", updates_endpoint, ": ", err.what())),
                1);
  }

  const std::string title = absl::StrFormat(
      "aftershock demo: Halvard Sound simulated market, %d invented instruments, 1-minute bars "
      "at %g bars/s each",
      n, o.rate);
  const std::string plan = absl::StrCat(
      title, " (", static_cast<double>(n) * o.rate,
      " ticks/s)\n  scenario: ", absl::StrJoin(scenario, "; "),
      "\n  engine: ", config->model.spec.Label(),
      ", EWMA warm-up until a refit passes the gate (every ", o.refit_every,
      " bars on a window of ", kWindowBars, ", the first after ", o.min_bars,
      " bars)\n  wiring: simulator ", feed_endpoint, " -> engine -> updates ", updates_endpoint,
      "\n  runs ",
      o.duration_s > 0 ? absl::StrCat(o.duration_s, " s") : std::string("until Ctrl-C"),
      "; Ctrl-C ends it early\n");
  if (!table_mode) Write(plan);

  // ---- Threads ----
  std::atomic<bool> stop_sim{false};
  SimProgress progress;
  absl::Status engine_status;
  std::thread engine_thread([e, &engine_status] { engine_status = e->Run(); });
  std::thread sim_thread(SimulatorLoop, sim->get(), &feed, o.rate, &stop_sim, &progress);
  signal_block.Unblock();  // from here SIGINT/SIGTERM reach this thread only

  // ---- Live view ----
  LiveView view(table_mode, title);
  if (table_mode) Write("\x1b[2J\x1b[?25l");  // clear once, hide the cursor
  const auto start = SteadyClock::now();
  const auto deadline =
      start + std::chrono::duration_cast<SteadyClock::duration>(
                  std::chrono::duration<double>(o.duration_s > 0 ? o.duration_s : 0));
  auto status_line = [&] {
    const double secs = std::chrono::duration<double>(SteadyClock::now() - start).count();
    return absl::StrFormat(
        "%.1f s%s, %d ticks published, %d updates received%s", secs,
        o.duration_s > 0 ? absl::StrFormat(" of %g s", o.duration_s) : std::string(),
        progress.ticks.load(), view.updates(),
        progress.subscribed.load() ? "" : " (waiting for the engine to subscribe)");
  };
  bool interrupted = false;
  while (true) {
    if (StopRequested()) {
      interrupted = true;
      break;
    }
    if (o.duration_s > 0 && SteadyClock::now() >= deadline) break;
    if (progress.finished.load() && !progress.error.empty()) break;
    zmq::pollitem_t item{view_sock.handle(), 0, ZMQ_POLLIN, 0};
    try {
      zmq::poll(&item, 1, std::chrono::milliseconds(50));
      if (item.revents & ZMQ_POLLIN) Drain(view_sock, &view);
    } catch (const zmq::error_t&) {
      continue;  // EINTR: the loop sees the stop flag
    }
    view.MaybeDraw(status_line(), false);
  }

  // ---- Shutdown: simulator first, then let the engine take what was sent ----
  stop_sim.store(true);
  sim_thread.join();
  const uint64_t published = static_cast<uint64_t>(progress.ticks.load());
  const auto drain_end = SteadyClock::now() + std::chrono::seconds(2);
  while (SteadyClock::now() < drain_end) {
    auto seen = std::make_shared<std::promise<uint64_t>>();
    auto fut = seen->get_future();
    e->Post([seen, e] { seen->set_value(e->core()->counters().messages_in); });
    if (fut.wait_for(std::chrono::milliseconds(500)) == std::future_status::ready &&
        fut.get() >= published) {
      break;
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  e->Stop();
  engine_thread.join();
  // The updates of the last ticks are on the wire already; give them a moment.
  const auto tail_end = SteadyClock::now() + std::chrono::milliseconds(200);
  while (SteadyClock::now() < tail_end) {
    zmq::pollitem_t item{view_sock.handle(), 0, ZMQ_POLLIN, 0};
    try {
      zmq::poll(&item, 1, std::chrono::milliseconds(20));
      if (item.revents & ZMQ_POLLIN) Drain(view_sock, &view);
    } catch (const zmq::error_t&) {
      break;
    }
  }
  view_sock.close();
  feed.close();
  const double elapsed = std::chrono::duration<double>(SteadyClock::now() - start).count();
  if (table_mode) {
    view.MaybeDraw(status_line(), true);
    Write("\x1b[?25h\n");  // cursor shown again
  }
  const absl::Status flushed = (*services)->Flush();
  const RefitStats refits = (*services)->refit_stats();
  const AlertCounters& alert_counts = (*services)->alert_counters();

  // ---- Summary (the engine thread has ended: the core is ours to read) ----
  const IngestCore& core = *e->core();
  const EngineCounters& c = core.counters();
  std::string out = absl::StrFormat("\nSummary after %.1f s%s: %d instruments, %g bars/s each\n",
                                    elapsed, interrupted ? " (interrupted)" : "", n, o.rate);
  absl::StrAppend(
      &out, absl::StrFormat("%-14s %6s %7s %4s  %-38s %8s %7s  %s\n", "symbol", "bars", "updates",
                            "ver", "current model", "vol_ann", "refits", "alerts"));
  for (int i = 0; i < core.num_symbols(); ++i) {
    const FilterModel& m = core.model(i);
    const uint32_t flags = core.status_flags(i);
    std::string label = m.params().spec.Label();
    if (m.is_ewma()) label = (flags & kFlagFallback) ? "EWMA fallback" : "EWMA warm-up";
    const DemoListener::Counts& lc = listener.Get(i);
    absl::StrAppend(&out,
                    absl::StrFormat("%-14s %6d %7d %4d  %-38s %8.4f %3d/%-3d  %s\n", core.symbol(i),
                                    core.symbol_bars(i), core.symbol_updates(i), m.version(), label,
                                    core.filter_state(i).sd_next * std::sqrt(ppy), lc.swapped,
                                    lc.rejected, AlertList(lc.alerts)));
  }
  uint64_t by_kind[kNumAlertKinds] = {};
  uint64_t alerts_total = 0;
  for (int k = 0; k < kNumAlertKinds; ++k) {
    for (int s = 0; s < kNumSeverities; ++s) by_kind[k] += alert_counts.emitted[k][s];
    alerts_total += by_kind[k];
  }
  absl::StrAppend(
      &out,
      absl::StrFormat(
          "totals: %d ticks published, %d received, %d bars, %d updates (%d dropped), %s;\n"
          "        refits %d swapped, %d rejected (%d fallbacks, %d still running or queued);\n"
          "        %d alerts (%s)%s; the live view saw %d updates, %d alerts, %d model events\n",
          published, c.ticks_in, c.bars, c.updates_out, c.drops, RejectSummary(c), refits.swapped,
          refits.rejected, refits.fallbacks, refits.in_flight, alerts_total, AlertList(by_kind),
          listener.Get(-1).alerts[static_cast<int>(AlertKind::kFeed)] > 0 ? ", feed-wide included"
                                                                          : "",
          view.updates(), view.alerts(), view.model_events()));
  absl::StrAppend(&out, "\n", kCaution);
  Write(out);

  services->reset();  // before the engine: the services need its core
  engine->reset();
  if (!progress.error.empty()) return Fail(absl::UnavailableError(progress.error), 1);
  if (!engine_status.ok()) return Fail(engine_status, 1);
  if (!flushed.ok()) return Fail(flushed, 1);
  return 0;
}

}  // namespace

int DemoCommand(int argc, char** argv) {
  ArgParser args(
      "aftershock demo",
      "Run the whole engine in one process on an embedded default, with no external service:\n"
      "a simulated market of invented instruments (the Halvard Sound desk: energy, metals,\n"
      "crops, freight, carbon and currency) is published over loopback ZeroMQ to the engine,\n"
      "which filters every symbol, refits the models in the background and raises alerts;\n"
      "its updates are shown live (a table redrawn in place on a terminal, one line per\n"
      "update otherwise). Two instruments get a volatility regime jump part-way, so the\n"
      "alerts and refits have something to react to. After --duration seconds or Ctrl-C a\n"
      "summary per instrument follows (bars, model version and kind, annualized volatility,\n"
      "refits, alerts) with the totals.\n\n"
      "Symbols start on the EWMA warm-up (model version 0); a refit that passes the quality\n"
      "gate swaps in an estimated version 1, 2, ... --print-config shows the configuration.\n\n"
      "--fit-only runs the estimator against known truth instead: a daily series simulated\n"
      "from a GJR-GARCH(1,1) Student-t model (--bars, --seed), fitted and reported next to\n"
      "the true parameters.\n\n"
      "Outputs are statistical estimates, not advice.");
  args.AddOption("duration", "SECONDS", "how long to run; 0 = until Ctrl-C", "30");
  args.AddOption("rate", "BARS_PER_S", "bars per second published for each instrument", "20");
  args.AddOption("symbols", "N", "instruments from the built-in universe (1..100)", "12");
  args.AddOption("seed", "N", "simulation seed", "7");
  args.AddOption("mode", "MODE", "auto (table on a terminal, else lines) | table | lines", "auto");
  args.AddOption("refit-every", "N", "demo tuning: refit each symbol every N bars (1..100000)",
                 "100");
  args.AddOption("min-bars", "N",
                 absl::StrCat("demo tuning: bars before a symbol's first fit (", kHoldoutBars + 1,
                              "..", kWindowBars, ")"),
                 "200");
  args.AddFlag("print-config", "print the embedded engine configuration (TOML) and exit");
  args.AddFlag("fit-only", "simulate one daily series from a known model, fit it and compare");
  args.AddOption("bars", "N", "with --fit-only: number of simulated bars", "3000");
  if (auto s = args.Parse(argc, argv); !s.ok()) return Fail(s, 2);
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  auto seed = args.GetInt("seed");
  if (!seed.ok() || *seed < 0) return Usage("--seed must be an integer >= 0");
  if (args.Flag("fit-only")) {
    for (const char* live : {"duration", "rate", "symbols", "mode", "refit-every", "min-bars"}) {
      if (args.Has(live)) return Usage(absl::StrCat("--", live, " does not apply to --fit-only"));
    }
    auto bars = args.GetInt("bars");
    if (!bars.ok() || *bars < 100 || *bars > 10000000) {
      return Usage("--bars must be an integer in 100..10000000");
    }
    return FitOnlyDemo(*bars, *seed);
  }
  if (args.Has("bars")) return Usage("--bars applies to --fit-only only");

  LiveOptions o;
  o.seed = static_cast<uint64_t>(*seed);
  auto duration = args.GetDouble("duration");
  if (!duration.ok() || !(*duration >= 0) || *duration > 86400) {
    return Usage("--duration must be seconds in 0..86400 (0 = until Ctrl-C)");
  }
  o.duration_s = *duration;
  auto symbols = args.GetInt("symbols");
  if (!symbols.ok() || *symbols < 1 || *symbols > 100) {
    return Usage("--symbols must be an integer in 1..100");
  }
  o.symbols = static_cast<int>(*symbols);
  auto rate = args.GetDouble("rate");
  if (!rate.ok() || !(*rate > 0) || *rate * static_cast<double>(o.symbols) > 100000) {
    return Usage("--rate must be bars per second > 0, at most 100000 ticks/s over all symbols");
  }
  o.rate = *rate;
  o.mode = args.Get("mode");
  if (o.mode != "auto" && o.mode != "table" && o.mode != "lines") {
    return Usage("--mode must be auto, table or lines, got '" + o.mode + "'");
  }
  auto every = args.GetInt("refit-every");
  if (!every.ok() || *every < 1 || *every > 100000) {
    return Usage("--refit-every must be an integer in 1..100000");
  }
  o.refit_every = static_cast<int>(*every);
  auto min_bars = args.GetInt("min-bars");
  if (!min_bars.ok() || *min_bars <= kHoldoutBars || *min_bars > kWindowBars) {
    return Usage(
        absl::StrCat("--min-bars must be an integer in ", kHoldoutBars + 1, "..", kWindowBars));
  }
  o.min_bars = static_cast<int>(*min_bars);
  if (args.Flag("print-config")) {
    std::fputs(DemoConfigToml(o.refit_every, o.min_bars).c_str(), stdout);
    return 0;
  }
  return LiveDemo(o);
}

}  // namespace aftershock::app
