// Tests of `aftershock simulate` (src/app/simulate_command.cc). Sources of the
// checks: the tick CSV reader TickFileReader (aftershock/tick_file.h) and the
// wire decoder DecodeTicks (aftershock/wire.h) read what the command writes;
// the library generator MarketSim (aftershock/market_sim.h) gives the expected
// values; the regime check uses the unconditional-variance ratio implied by
// multiplying omega (Bollerslev 1986).
#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <map>
#include <set>
#include <sstream>
#include <thread>
#include <zmq.hpp>

#include "aftershock/bar_builder.h"
#include "aftershock/market_sim.h"
#include "aftershock/tick_file.h"
#include "aftershock/wire.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::RunCli;
using testing::ScratchDir;

std::vector<Tick> ReadTicks(const std::string& path) {
  // Some runs below start the clock at 0 ns, which is no plausible date: the
  // reader is told the unit (the simulator writes ns).
  TickFileOptions options;
  options.stop_at_first_error = true;
  options.time_unit = TimeUnit::kNanos;
  auto reader = TickFileReader::Open(path, options);
  REQUIRE(reader.ok());
  std::vector<Tick> out;
  Tick t;
  while ((*reader)->Next(&t)) out.push_back(t);
  INFO((*reader)->status().message());
  REQUIRE((*reader)->status().ok());
  CHECK((*reader)->bad_lines() == 0);
  return out;
}

// A TCP port on loopback that was free a moment ago (bind to port 0, read, close).
std::string FreeEndpoint() {
  zmq::context_t ctx(1);
  zmq::socket_t s(ctx, zmq::socket_type::pub);
  s.set(zmq::sockopt::linger, 0);
  s.bind("tcp://127.0.0.1:*");
  std::string ep = s.get(zmq::sockopt::last_endpoint);
  s.close();
  return ep;
}

TEST_CASE("simulate writes a tick CSV that the replay reader parses") {
  const std::string dir = ScratchDir("simulate_csv");
  const std::string path = dir + "/ticks.csv";
  auto r = RunCli({"simulate", "--symbols", "3", "--bars", "5", "--seed", "9", "--start",
                   "2026-03-02T09:30:00Z", "--interval", "1m", "--output", path});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.err.find("wrote 15 ticks (3 symbols) to " + path) != std::string::npos);
  auto ticks = ReadTicks(path);
  REQUIRE(ticks.size() == 15);
  const int64_t t0 = *ParseTickTime("2026-03-02T09:30:00Z");
  std::map<std::string, int> per_symbol;
  for (size_t i = 0; i < ticks.size(); ++i) {
    CHECK(ticks[i].kind == Tick::kPrice);
    CHECK(ticks[i].value > 0);
    CHECK(ticks[i].t_ns == t0 + static_cast<int64_t>(i / 3) * 60 * 1000000000LL);
    ++per_symbol[std::string(ticks[i].symbol.view())];
  }
  CHECK(per_symbol ==
        std::map<std::string, int>{{"BRANDR.NRG", 5}, {"SKJOLD.GAS", 5}, {"VARDE.PWR", 5}});
  // The ISO time is written as given.
  const std::string text = testing::ReadFileOrDie(path);
  CHECK(text.rfind("symbol,time,price\nBRANDR.NRG,2026-03-02T09:30:00Z,", 0) == 0);
}

TEST_CASE("simulate return CSV equals the library generator exactly") {
  const std::string dir = ScratchDir("simulate_returns");
  const std::string path = dir + "/r.csv";
  auto r = RunCli({"simulate", "--symbols", "2", "--bars", "30", "--seed", "5", "--field", "return",
                   "--time-format", "ns", "--interval", "5s", "--start", "0", "--output", path,
                   "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  auto ticks = ReadTicks(path);
  REQUIRE(ticks.size() == 60);
  // Expected: MarketSim with the CLI's mapping (mixed families, 252 * 23400 / 5 bars a year).
  auto profiles = DefaultInstruments(2);
  std::vector<MarketInstrument> insts;
  for (const auto& p : *profiles) {
    insts.push_back({p.symbol,
                     p.start_price,
                     *InstrumentModel(p, p.family, PeriodsPerYearForInterval(5000000000LL)),
                     {}});
  }
  MarketSimOptions o;
  o.bars = 30;
  o.seed = 5;
  o.start_ns = 0;
  o.interval_ns = 5000000000LL;
  auto sim = MarketSim::Create(insts, o);
  REQUIRE(sim.ok());
  Tick want;
  for (const Tick& got : ticks) {
    REQUIRE((*sim)->Next(Tick::kReturn, &want));
    CHECK(got.symbol.view() == want.symbol.view());
    CHECK(got.t_ns == want.t_ns);
    CHECK(got.kind == Tick::kReturn);
    CHECK(got.value == want.value);  // shortest round-trip formatting: exact
  }
}

TEST_CASE("simulate is deterministic by seed") {
  auto run = [](const std::string& seed) {
    auto r = RunCli({"simulate", "--bars", "20", "--seed", seed, "--output", "-", "--quiet"});
    REQUIRE(r.exit_code == 0);
    return r.out;
  };
  const std::string a = run("3"), b = run("3"), c = run("4");
  CHECK(a == b);
  CHECK(a != c);
  CHECK(std::count(a.begin(), a.end(), '\n') == 1 + 20 * 12);  // header + 12 symbols x 20
}

TEST_CASE("simulate --regime raises the sample variance of the chosen symbol") {
  const std::string dir = ScratchDir("simulate_regime");
  const std::string path = dir + "/r.csv";
  auto r = RunCli({"simulate", "--symbols", "2", "--bars", "20000", "--seed", "2", "--field",
                   "return", "--regime", "SKJOLD.GAS@10000:4", "--output", path, "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  std::map<std::string, std::vector<double>> by;
  for (const Tick& t : ReadTicks(path)) by[std::string(t.symbol.view())].push_back(t.value);
  auto var = [](const std::vector<double>& x, size_t a, size_t b) {
    double s = 0, s2 = 0;
    for (size_t i = a; i < b; ++i) s += x[i];
    const double m = s / static_cast<double>(b - a);
    for (size_t i = a; i < b; ++i) s2 += (x[i] - m) * (x[i] - m);
    return s2 / static_cast<double>(b - a - 1);
  };
  const auto& g = by["SKJOLD.GAS"];
  const auto& b = by["BRANDR.NRG"];
  REQUIRE(g.size() == 20000);
  // Expected ratio 4 (omega x 4 => unconditional variance x 4); 200 bars of adjustment skipped.
  CHECK(var(g, 10200, 20000) / var(g, 0, 10000) == Approx(4.0).epsilon(0.25));
  CHECK(var(b, 10200, 20000) / var(b, 0, 10000) == Approx(1.0).epsilon(0.25));
}

TEST_CASE("simulate --regime :step jumps at once, :omega moves gradually") {
  const std::string dir = ScratchDir("simulate_regime_shape");
  auto series = [&](const std::string& name, const std::string& regime) {
    const std::string path = dir + "/" + name + ".csv";
    std::vector<std::string> argv = {"simulate", "--symbols", "1", "--bars", "3000", "--seed",
                                     "5",        "--field",   "return", "--output", path,
                                     "--quiet"};
    if (!regime.empty()) {
      argv.push_back("--regime");
      argv.push_back(regime);
    }
    auto r = RunCli(argv);
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    std::vector<double> x;
    for (const Tick& t : ReadTicks(path)) x.push_back(t.value);
    REQUIRE(x.size() == 3000);
    return x;
  };
  auto mean_square = [](const std::vector<double>& x, size_t a, size_t b) {
    double s = 0;
    for (size_t i = a; i < b; ++i) s += x[i] * x[i];
    return s / static_cast<double>(b - a);
  };
  const auto base = series("base", "");
  const auto step = series("step", "2000:3:step");
  const auto omega = series("omega", "2000:3:omega");
  // Same draws: before the change the three series agree exactly.
  for (size_t i = 0; i < 2000; ++i) {
    REQUIRE(step[i] == base[i]);
    REQUIRE(omega[i] == base[i]);
  }
  // The step scales the process by sqrt(3) from bar 2000 on (simulate.h), so the
  // first 30 bars after it already carry about 3 times the base's mean square
  // (not exactly 3: the mean equation's intercept is not scaled); the omega shape
  // has barely moved by then.
  const double step_ratio = mean_square(step, 2000, 2030) / mean_square(base, 2000, 2030);
  const double omega_ratio = mean_square(omega, 2000, 2030) / mean_square(base, 2000, 2030);
  CHECK(step_ratio == Approx(3.0).epsilon(0.1));
  CHECK(omega_ratio < 2.0);
  CHECK(omega_ratio > 1.0);
  auto bad = RunCli({"simulate", "--output", "-", "--regime", "200:3:ramp"});
  CHECK(bad.exit_code == 2);
  CHECK(bad.err.find("--regime: shape must be omega or step, got 'ramp'") != std::string::npos);
}

TEST_CASE("simulate reads a TOML universe file") {
  const std::string dir = ScratchDir("simulate_universe");
  const std::string spec = testing::WriteFile(dir + "/u.toml",
                                              "[[instrument]]\n"
                                              "symbol = \"OSTRA.NRG\"\n"
                                              "model = \"gjr\"\n"
                                              "price = 80.0\n"
                                              "vol = 0.3\n"
                                              "alpha = 0.04\n"
                                              "gamma = 0.05\n"
                                              "regimes = [\"3:9\"]\n"
                                              "[[instrument]]\n"
                                              "symbol = \"PELL.FX\"\n"
                                              "price = 1.25\n");
  auto r = RunCli({"simulate", "--universe", spec, "--bars", "4", "--output", "-", "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  auto reader = TickFileReader::FromString(r.out, "out");
  REQUIRE(reader.ok());
  std::set<std::string> syms;
  Tick t;
  int n = 0;
  while ((*reader)->Next(&t)) {
    syms.insert(std::string(t.symbol.view()));
    ++n;
  }
  CHECK(n == 8);
  CHECK(syms == std::set<std::string>{"OSTRA.NRG", "PELL.FX"});
  auto list = RunCli({"simulate", "--universe", spec, "--list"});
  CHECK(list.exit_code == 0);
  CHECK(list.out.find("OSTRA.NRG      gjr           80.0000    0.300") != std::string::npos);

  testing::WriteFile(dir + "/bad.toml", "[[instrument]]\nsymbol = \"A.B\"\nvolatility = 2\n");
  auto bad = RunCli({"simulate", "--universe", dir + "/bad.toml", "--output", "-"});
  CHECK(bad.exit_code == 2);
  CHECK(bad.err.find("bad.toml:1: instrument has unknown key 'volatility'") != std::string::npos);
}

TEST_CASE("simulate reports bad usage with a clear message") {
  auto both = RunCli({"simulate", "--output", "-", "--publish", "tcp://127.0.0.1:1"});
  CHECK(both.exit_code == 2);
  CHECK(both.err ==
        "aftershock simulate: give exactly one of --output FILE, --publish ENDPOINT and --nats "
        "CONFIG (or --list)\n");
  auto nats_batch = RunCli({"simulate", "--nats", std::string(AFTERSHOCK_SOURCE_DIR) +
                            "/config/default.toml", "--batch", "4"});
  CHECK(nats_batch.exit_code == 2);
  CHECK(nats_batch.err.find("--nats sends one tick a message") != std::string::npos);
  auto regime = RunCli({"simulate", "--output", "-", "--regime", "200x4"});
  CHECK(regime.exit_code == 2);
  CHECK(regime.err.find("--regime: expected [SYMBOL@]BAR:MULT") != std::string::npos);
  auto unknown = RunCli({"simulate", "--output", "-", "--regime", "NOPE.X@1:2"});
  CHECK(unknown.err == "aftershock simulate: --regime: unknown symbol 'NOPE.X'\n");
  auto late = RunCli({"simulate", "--output", "-", "--bars", "10", "--regime", "10:2"});
  CHECK(late.exit_code == 2);
  CHECK(late.err.find("regime bar must be in [0, 10), got 10") != std::string::npos);
  auto many = RunCli({"simulate", "--output", "-", "--symbols", "99999999999"});
  CHECK(many.exit_code == 2);
  CHECK(many.err == "aftershock simulate: --symbols must be in 1..10000, got 99999999999\n");
  auto shape = RunCli({"simulate", "--output", "-", "--intraday-shape", "u"});
  CHECK(shape.exit_code == 2);
  CHECK(shape.err == "aftershock simulate: --intraday-shape u needs --session\n");
  auto session = RunCli({"simulate", "--output", "-", "--session", "16:30-08:00x"});
  CHECK(session.exit_code == 2);
  CHECK(session.err.find("--session: expected local times HH:MM-HH:MM") != std::string::npos);
  auto sessions = RunCli({"simulate", "--output", "-", "--sessions", "2"});
  CHECK(sessions.err == "aftershock simulate: --sessions needs --session\n");
  auto tpb = RunCli({"simulate", "--output", "-", "--ticks-per-bar", "0"});
  CHECK(tpb.err == "aftershock simulate: --ticks-per-bar must be an integer in 1..1000\n");
  auto help = RunCli({"simulate", "--help"});
  CHECK(help.exit_code == 0);
  for (const char* opt : {"--symbols", "--universe", "--model", "--regime", "--publish", "--rate",
                          "--encoding", "--batch", "--wait-subscribers", "--field", "--session",
                          "--utc-offset", "--sessions", "--every-day", "--overnight-variance",
                          "--intraday-shape", "--intraday-amplitude", "--ticks-per-bar"}) {
    CHECK(help.out.find(opt) != std::string::npos);
  }
}

TEST_CASE("simulate --session: whole sessions in local time, U shape, several ticks a bar") {
  const std::string dir = ScratchDir("simulate_session");
  const std::string path = dir + "/s.csv";
  auto r = RunCli({"simulate", "--symbols", "2", "--session", "08:00-16:30", "--utc-offset", "60",
                   "--sessions", "3", "--intraday-shape", "u", "--ticks-per-bar", "3", "--output",
                   path, "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  // 510 one-minute bars a session, 3 sessions, 2 symbols, 3 ticks a bar.
  CHECK(r.err.find("wrote 9180 ticks (2 symbols)") != std::string::npos);
  auto ticks = ReadTicks(path);
  REQUIRE(ticks.size() == 9180);
  SessionWindow w;
  w.enabled = true;
  w.start_minute = 480;
  w.end_minute = 990;
  w.tz_offset_minutes = 60;
  // Monday 2026-03-02 08:00 local (07:00Z) is the first session's open
  // (calendar checked with Python's datetime).
  const int64_t open = *ParseTickTime("2026-03-02T07:00:00Z");
  std::set<int64_t> days;
  for (size_t i = 0; i < ticks.size(); ++i) {
    CHECK(InSession(w, ticks[i].t_ns));
    CHECK(ticks[i].t_ns >= open);
    if (i > 0) CHECK(ticks[i].t_ns >= ticks[i - 1].t_ns);
    days.insert((ticks[i].t_ns - open) / (24 * 3600 * 1000000000LL));
  }
  CHECK(days == std::set<int64_t>{0, 1, 2});
  // The first bar's ticks lie inside [07:00, 07:01)Z.
  CHECK(ticks[0].t_ns < open + 60 * 1000000000LL);
  // --list prints the bars per year used for the session: 252 * 510.
  auto list = RunCli({"simulate", "--session", "08:00-16:30", "--list"});
  CHECK(list.out.find("per-bar parameters use 128520 bars per year") != std::string::npos);
}

// Receives ticks on a SUB socket (connected BEFORE the publisher starts: the
// publisher waits for the subscription, which is how the slow joiner is avoided).
void CheckPublished(const std::vector<std::string>& extra, int expect_messages) {
  const std::string ep = FreeEndpoint();
  zmq::context_t ctx(1);
  zmq::socket_t sub(ctx, zmq::socket_type::sub);
  sub.set(zmq::sockopt::linger, 0);
  sub.set(zmq::sockopt::subscribe, "");
  sub.set(zmq::sockopt::rcvtimeo, 10000);
  sub.connect(ep);

  std::vector<std::string> args = {"simulate", "--symbols", "3",  "--bars",
                                   "4",        "--seed",    "21", "--publish",
                                   ep,         "--rate",    "0",  "--wait-subscribers",
                                   "10000"};
  args.insert(args.end(), extra.begin(), extra.end());
  testing::CommandResult pub;
  std::thread runner([&] { pub = RunCli(args); });
  const bool binary = std::find(extra.begin(), extra.end(), "binary") != extra.end();
  std::vector<Tick> got;
  int messages = 0;
  RejectCounters rejects;
  std::vector<Tick> buf(kMaxBatchTicks);
  while (got.size() < 12) {
    zmq::message_t topic, body;
    if (!sub.recv(topic)) break;  // timeout
    REQUIRE(topic.more());
    REQUIRE(sub.recv(body));
    ++messages;
    auto res = DecodeTicks(absl::string_view(topic.data<char>(), topic.size()),
                           absl::string_view(body.data<char>(), body.size()),
                           binary ? WireEncoding::kBinary : WireEncoding::kJson,
                           kDefaultMaxMessageBytes, absl::MakeSpan(buf), &rejects);
    for (int i = 0; i < res.n_ticks; ++i) got.push_back(buf[static_cast<size_t>(i)]);
  }
  runner.join();
  INFO(pub.err);
  CHECK(pub.exit_code == 0);
  CHECK(rejects.Total() == 0);
  CHECK(messages == expect_messages);
  CHECK(pub.err.find("published 12 ticks in " + std::to_string(expect_messages) + " messages") !=
        std::string::npos);
  // Same data as the CSV of the same run.
  auto csv = RunCli({"simulate", "--symbols", "3", "--bars", "4", "--seed", "21", "--time-format",
                     "ns", "--output", "-", "--quiet"});
  auto reader = TickFileReader::FromString(csv.out, "csv");
  REQUIRE(reader.ok());
  REQUIRE(got.size() == 12);
  Tick want;
  for (const Tick& t : got) {
    REQUIRE((*reader)->Next(&want));
    CHECK(t.symbol.view() == want.symbol.view());
    CHECK(t.t_ns == want.t_ns);
    CHECK(t.value == want.value);
  }
}

TEST_CASE("simulate --publish: one JSON tick per message reaches a subscriber") {
  CheckPublished({"--encoding", "json"}, 12);
}

TEST_CASE("simulate --publish: binary batches with topic *") {
  CheckPublished({"--encoding", "binary", "--batch", "5"}, 3);  // 5 + 5 + 2 ticks
}

TEST_CASE("simulate --publish paces by the clock and stops cleanly on SIGINT") {
  // 40 ticks at 200 ticks/s: the last one is due 39 / 200 = 0.195 s after the first.
  auto paced = RunCli({"simulate", "--symbols", "2", "--bars", "20", "--publish", FreeEndpoint(),
                       "--rate", "200", "--linger", "0"});
  REQUIRE(paced.exit_code == 0);
  REQUIRE(paced.err.find("published 40 ticks in 40 messages") != std::string::npos);
  const auto secs_at = paced.err.find("to tcp://");
  REQUIRE(secs_at != std::string::npos);
  const auto in_at = paced.err.find(" in ", secs_at);
  const double secs = std::stod(paced.err.substr(in_at + 4));
  CHECK(secs >= 0.19);

  // SIGINT after 2 s (a slow start still has its handler by then) of a long run: clean stop, final count line, exit code 130.
  auto stopped = testing::RunCommand({"/usr/bin/timeout", "--preserve-status", "-s", "INT", "2",
                                      AFTERSHOCK_CLI, "simulate", "--bars", "100000", "--publish",
                                      FreeEndpoint(), "--rate", "100", "--linger", "0"});
  INFO(stopped.err);
  CHECK(stopped.exit_code == 130);
  CHECK(stopped.err.find("aftershock simulate: interrupted; published ") != std::string::npos);
}

}  // namespace
}  // namespace aftershock

namespace aftershock {
namespace {

// Parses the lines of tests/python/statsmodels_arch_effects.py.
struct ArchEffects {
  int n = 0;
  double lb_p = 0, lm_p = 0, kurtosis = 0;
};
std::map<std::string, ArchEffects> ArchEffectsOf(const std::string& csv) {
  auto py = testing::RunPython("statsmodels_arch_effects.py", {}, csv);
  INFO(py.err);
  REQUIRE(py.exit_code == 0);
  std::map<std::string, ArchEffects> out;
  std::istringstream in(py.out);
  std::string sym;
  ArchEffects a;
  while (in >> sym >> a.n >> a.lb_p >> a.lm_p >> a.kurtosis) out[sym] = a;
  return out;
}

TEST_CASE("simulated GARCH instruments show ARCH effects; --model flat does not") {
  // Source: statsmodels acorr_ljungbox (squares, lag 10) and het_arch (10 lags),
  // run live on the command's output; scipy.stats.kurtosis for the t tails.
  auto garch = RunCli({"simulate", "--symbols", "3", "--bars", "5000", "--seed", "4", "--field",
                       "return", "--output", "-", "--quiet"});
  REQUIRE(garch.exit_code == 0);
  auto flat = RunCli({"simulate", "--symbols", "3", "--bars", "5000", "--seed", "4", "--field",
                      "return", "--model", "flat", "--output", "-", "--quiet"});
  REQUIRE(flat.exit_code == 0);
  auto g = ArchEffectsOf(garch.out);
  auto f = ArchEffectsOf(flat.out);
  REQUIRE(g.size() == 3);
  REQUIRE(f.size() == 3);
  for (const auto& [sym, a] : g) {
    INFO(sym);
    CHECK(a.n == 5000);
    CHECK(a.lb_p < 1e-6);  // volatility clustering is unmistakable at 5000 bars
    CHECK(a.lm_p < 1e-6);
    // No clustering in the flat variant (fixed seed: deterministic).
    CHECK(f[sym].lb_p > 0.01);
    CHECK(f[sym].lm_p > 0.01);
    // Student-t shocks (nu 4.5..6): clearly positive excess kurtosis even without
    // clustering (a normal gives 0 +- 0.07 at n = 5000).
    CHECK(f[sym].kurtosis > 1.0);
  }
}

}  // namespace
}  // namespace aftershock
