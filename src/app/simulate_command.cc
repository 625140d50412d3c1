// `aftershock simulate`: a synthetic market of invented instruments (PRODUCT.md
// C12), written to a tick CSV for replay or published on a ZeroMQ socket at a
// given rate for the live engine.
#include <toml++/toml.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <map>
#include <optional>
#include <string>
#include <thread>
#include <vector>
#include <zmq.hpp>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "absl/strings/strip.h"
#include "absl/time/time.h"
#include "aftershock/engine_config.h"
#include "aftershock/jetstream_publisher.h"
#include "aftershock/market_sim.h"
#include "aftershock/renames.h"
#include "aftershock/tick_file.h"
#include "aftershock/wire.h"
#include "app/args.h"
#include "app/cli.h"
#include "app/stop_signal.h"
#include "io/shortest_double.h"

namespace aftershock::app {
namespace {

using Clock = std::chrono::steady_clock;

int Fail(const absl::Status& s, int code) { return ReportFailure("simulate", s, code); }

// One --regime item: [SYMBOL@]BAR:MULT[:SHAPE]; an empty symbol means every instrument.
struct RegimeItem {
  std::string symbol;
  VarianceRegimeChange change;
};

absl::Status ParseRegimeList(absl::string_view text, std::vector<RegimeItem>* out) {
  for (absl::string_view part : absl::StrSplit(text, ',', absl::SkipWhitespace())) {
    part = absl::StripAsciiWhitespace(part);
    RegimeItem item;
    absl::string_view rest = part;
    if (auto at = rest.find('@'); at != absl::string_view::npos) {
      item.symbol = std::string(rest.substr(0, at));
      rest = rest.substr(at + 1);
    }
    // BAR:MULT[:SHAPE]; SHAPE is omega (default: the unconditional variance
    // moves, the conditional one follows) or step (every bar from BAR on has
    // MULT times its variance at once).
    std::vector<absl::string_view> fields = absl::StrSplit(rest, ':');
    int64_t bar = 0;
    double mult = 0;
    if (fields.size() < 2 || fields.size() > 3 || !absl::SimpleAtoi(fields[0], &bar) ||
        !absl::SimpleAtod(fields[1], &mult)) {
      return absl::InvalidArgumentError(absl::StrCat(
          "--regime: expected [SYMBOL@]BAR:MULT[:omega|:step] such as 200:4, 200:3:step or "
          "BRANDR.NRG@200:4, got '",
          part, "'"));
    }
    if (bar < 0 || !(std::isfinite(mult) && mult > 0)) {
      return absl::InvalidArgumentError(
          absl::StrCat("--regime: BAR must be >= 0 and MULT a number > 0, got '", part, "'"));
    }
    VarianceChangeShape shape = VarianceChangeShape::kOmega;
    if (fields.size() == 3) {
      if (fields[2] == "step") {
        shape = VarianceChangeShape::kStep;
      } else if (fields[2] != "omega") {
        return absl::InvalidArgumentError(absl::StrCat(
            "--regime: shape must be omega or step, got '", fields[2], "' in '", part, "'"));
      }
    }
    item.change = {bar, mult, shape};
    out->push_back(std::move(item));
  }
  return absl::OkStatus();
}

// Reads a universe file (TOML, see the help text) into profiles and regimes.
absl::Status LoadUniverseFile(const std::string& path, std::vector<InstrumentProfile>* profiles,
                              std::vector<RegimeItem>* regimes) {
  toml::table doc;
  try {
    doc = toml::parse_file(path);
  } catch (const toml::parse_error& e) {
    const auto& src = e.source();
    return absl::InvalidArgumentError(
        absl::StrCat(path, ":", src.begin.line, ": ", std::string(e.description())));
  } catch (const std::exception& e) {
    return absl::InvalidArgumentError(absl::StrCat(path, ": ", e.what()));
  }
  for (auto&& [key, node] : doc) {
    if (key.str() != "instrument") {
      return absl::InvalidArgumentError(absl::StrCat(path, ":", key.source().begin.line,
                                                     ": unknown key '", std::string(key.str()),
                                                     "' (the file holds [[instrument]] tables)"));
    }
  }
  const toml::array* list = doc["instrument"].as_array();
  if (list == nullptr || list->empty()) {
    return absl::InvalidArgumentError(absl::StrCat(path, ": no [[instrument]] tables"));
  }
  for (const toml::node& n : *list) {
    const toml::table* t = n.as_table();
    const auto line = n.source().begin.line;
    auto where = [&](absl::string_view field) {
      return absl::StrCat(path, ":", line, ": instrument ", field);
    };
    if (t == nullptr) return absl::InvalidArgumentError(where("must be a table"));
    InstrumentProfile p;
    for (auto&& [key, entry] : *t) {
      const std::string k(key.str());
      const toml::node& value = entry;  // lambdas cannot capture structured bindings (C++17)
      auto number = [&](double* dst) -> absl::Status {
        if (auto v = value.value<double>(); v.has_value()) {
          *dst = *v;
          return absl::OkStatus();
        }
        return absl::InvalidArgumentError(where(absl::StrCat(k, ": expected a number")));
      };
      absl::Status s;
      if (k == "symbol" || k == "description" || k == "model") {
        auto v = value.value<std::string>();
        if (!v) return absl::InvalidArgumentError(where(absl::StrCat(k, ": expected a string")));
        if (k == "symbol") p.symbol = *v;
        if (k == "description") p.description = *v;
        if (k == "model") {
          if (*v == "garch") {
            p.family = VarianceKind::kGarch;
          } else if (*v == "gjr") {
            p.family = VarianceKind::kGjr;
          } else if (*v == "flat") {
            p.family = VarianceKind::kConstant;
          } else {
            const std::string hint = RenameHint(RenameKind::kValue, "simulate --model", *v);
            return absl::InvalidArgumentError(
                where("model: expected \"garch\", \"gjr\" or \"flat\", got \"" + *v + "\"" +
                      (hint.empty() ? "" : "; " + hint)));
          }
        }
      } else if (k == "price") {
        s = number(&p.start_price);
      } else if (k == "vol") {
        s = number(&p.vol_ann);
      } else if (k == "drift") {
        s = number(&p.drift_ann);
      } else if (k == "persistence") {
        s = number(&p.persistence);
      } else if (k == "alpha") {
        s = number(&p.alpha);
      } else if (k == "gamma") {
        s = number(&p.gamma);
      } else if (k == "nu") {
        s = number(&p.nu);
      } else if (k == "regimes") {
        const toml::array* a = value.as_array();
        if (a == nullptr) {
          return absl::InvalidArgumentError(where("regimes: expected an array of \"BAR:MULT[:omega|:step]\""));
        }
        for (const toml::node& r : *a) {
          auto v = r.value<std::string>();
          if (!v || v->find('@') != std::string::npos) {
            return absl::InvalidArgumentError(where("regimes: expected strings \"BAR:MULT[:omega|:step]\""));
          }
          std::vector<RegimeItem> items;
          if (auto rs = ParseRegimeList(*v, &items); !rs.ok()) {
            return absl::InvalidArgumentError(where(rs.message()));
          }
          for (auto& it : items) it.symbol = p.symbol.empty() ? "\x01" : p.symbol;
          regimes->insert(regimes->end(), items.begin(), items.end());
        }
      } else {
        return absl::InvalidArgumentError(where(absl::StrCat(
            "has unknown key '", k,
            "' (keys: symbol description model price vol drift persistence alpha gamma nu "
            "regimes)")));
      }
      if (!s.ok()) return s;
    }
    if (p.symbol.empty()) return absl::InvalidArgumentError(where("needs a symbol"));
    for (auto& r : *regimes) {
      if (r.symbol == "\x01") r.symbol = p.symbol;
    }
    profiles->push_back(std::move(p));
  }
  return absl::OkStatus();
}

// "HH:MM-HH:MM" (local time; end may be 24:00) -> session window.
absl::Status ParseSessionOption(absl::string_view text, SessionWindow* w) {
  const auto clock = ParseClockMinutes;  // the same clock times as [bars] session
  const auto dash = text.find('-');
  int a = 0, b = 0;
  if (dash == absl::string_view::npos || !clock(text.substr(0, dash), false, &a) ||
      !clock(text.substr(dash + 1), true, &b) || b == 0 || a == b % 1440) {
    return absl::InvalidArgumentError(absl::StrCat(
        "--session: expected local times HH:MM-HH:MM such as 08:00-16:30 (start != end; end may "
        "be 24:00), got '",
        text, "'"));
  }
  w->enabled = true;
  w->start_minute = a;
  w->end_minute = b;
  return absl::OkStatus();
}

std::string FormatTime(int64_t t_ns, bool iso) {
  if (!iso) return absl::StrCat(t_ns);
  return absl::FormatTime("%Y-%m-%dT%H:%M:%E*SZ", absl::FromUnixNanos(t_ns), absl::UTCTimeZone());
}

// Prints a progress line at most once a second.
class Progress {
 public:
  Progress(bool enabled, int64_t total) : enabled_(enabled), total_(total) {}
  void Update(int64_t done) {
    if (!enabled_) return;
    const auto now = Clock::now();
    if (now < next_) return;
    next_ = now + std::chrono::seconds(1);
    const double secs = std::chrono::duration<double>(now - start_).count();
    std::fprintf(stderr, "aftershock simulate: %lld/%lld ticks (%.1f%%), %.0f ticks/s\n",
                 static_cast<long long>(done), static_cast<long long>(total_),
                 100.0 * static_cast<double>(done) / static_cast<double>(total_),
                 secs > 0 ? static_cast<double>(done) / secs : 0.0);
  }
  double Elapsed() const { return std::chrono::duration<double>(Clock::now() - start_).count(); }

 private:
  bool enabled_;
  int64_t total_;
  Clock::time_point start_ = Clock::now();
  Clock::time_point next_ = Clock::now() + std::chrono::seconds(1);
};

int WriteCsv(MarketSim& sim, const std::string& path, Tick::Kind field, bool iso, bool quiet) {
  std::ofstream file;
  const bool to_stdout = path == "-";
  if (!to_stdout) {
    file.open(path, std::ios::binary | std::ios::trunc);
    if (!file) return Fail(absl::NotFoundError(absl::StrCat("cannot write ", path)), 1);
  }
  std::string buf = field == Tick::kPrice ? "symbol,time,price\n" : "symbol,time,return\n";
  Progress progress(!quiet, sim.total_ticks());
  Tick tick;
  bool stopped = false;
  auto flush = [&] {
    if (to_stdout) {
      std::fwrite(buf.data(), 1, buf.size(), stdout);
    } else {
      file.write(buf.data(), static_cast<std::streamsize>(buf.size()));
    }
    buf.clear();
  };
  while (sim.Next(field, &tick)) {
    absl::StrAppend(&buf, tick.symbol.view(), ",", FormatTime(tick.t_ns, iso), ",");
    internal::AppendShortestDouble(&buf, tick.value);
    buf.push_back('\n');
    if (buf.size() > (1 << 16)) {
      flush();
      progress.Update(sim.ticks_emitted());
      if (StopRequested()) {
        stopped = true;
        break;
      }
    }
  }
  flush();
  if (to_stdout) std::fflush(stdout);
  if (!to_stdout) {
    file.close();
    if (!file) return Fail(absl::DataLossError(absl::StrCat("error writing ", path)), 1);
  }
  std::fprintf(stderr, "aftershock simulate: %s %lld ticks (%zu symbols) to %s in %.2f s\n",
               stopped ? "interrupted; wrote" : "wrote",
               static_cast<long long>(sim.ticks_emitted()), sim.instruments().size(),
               to_stdout ? "standard output" : path.c_str(), progress.Elapsed());
  return stopped ? 130 : 0;
}

struct PublishOptions {
  std::string endpoint;
  double rate = 1000;  // ticks per second; 0 = unpaced
  WireEncoding encoding = WireEncoding::kJson;
  int batch = 1;
  int64_t wait_subscribers_ms = 0;
  int linger_ms = 2000;
  int high_water_mark = 100000;
  bool quiet = false;
  int64_t ack_timeout_ms = 2000;  // --nats: an attempt unacknowledged this long is resent
  int64_t give_up_ms = 60000;     // --nats: a tick unacknowledged this long fails the run
};

// Sleeps until `deadline` in slices so Ctrl-C is noticed; false when stopped.
bool SleepUntil(Clock::time_point deadline) {
  while (!StopRequested()) {
    const auto now = Clock::now();
    if (now >= deadline) return true;
    std::this_thread::sleep_for(
        std::min<Clock::duration>(deadline - now, std::chrono::milliseconds(100)));
  }
  return false;
}

int Publish(MarketSim& sim, Tick::Kind field, const PublishOptions& o) {
  zmq::context_t ctx(1);
  // XPUB behaves as PUB for sending, and also delivers subscription messages,
  // which is how --wait-subscribers sees the first subscriber arrive.
  zmq::socket_t sock(ctx, zmq::socket_type::xpub);
  try {
    sock.set(zmq::sockopt::sndhwm, o.high_water_mark);
    sock.set(zmq::sockopt::linger, o.linger_ms);
    sock.bind(o.endpoint);
  } catch (const zmq::error_t& e) {
    return Fail(absl::UnavailableError(absl::StrCat("cannot bind ", o.endpoint, ": ", e.what())),
                1);
  }
  const std::string bound = sock.get(zmq::sockopt::last_endpoint);
  if (!o.quiet) {
    std::fprintf(stderr, "aftershock simulate: publishing %lld ticks on %s (%s, %s)\n",
                 static_cast<long long>(sim.total_ticks()), bound.c_str(),
                 std::string(WireEncodingName(o.encoding)).c_str(),
                 o.batch > 1 ? absl::StrCat("batches of ", o.batch).c_str() : "one tick a message");
  }
  if (o.wait_subscribers_ms > 0) {
    const auto deadline = Clock::now() + std::chrono::milliseconds(o.wait_subscribers_ms);
    bool got = false;
    while (!got && !StopRequested() && Clock::now() < deadline) {
      zmq::pollitem_t item{sock.handle(), 0, ZMQ_POLLIN, 0};
      const auto left =
          std::chrono::duration_cast<std::chrono::milliseconds>(deadline - Clock::now());
      try {
        zmq::poll(&item, 1, std::chrono::milliseconds(std::min<int64_t>(100, left.count() + 1)));
      } catch (const zmq::error_t&) {
        continue;  // EINTR: the loop condition sees the stop flag
      }
      if (item.revents & ZMQ_POLLIN) {
        zmq::message_t m;
        if (sock.recv(m, zmq::recv_flags::dontwait) && m.size() > 0 &&
            static_cast<const uint8_t*>(m.data())[0] == 1) {
          got = true;  // a subscribe (not unsubscribe) message
        }
      }
    }
    if (!got && !StopRequested()) {
      std::fprintf(stderr, "aftershock simulate: no subscriber within %lld ms; publishing anyway\n",
                   static_cast<long long>(o.wait_subscribers_ms));
    }
  }
  Progress progress(!o.quiet, sim.total_ticks());
  std::vector<Tick> batch(static_cast<size_t>(o.batch));
  std::string body;
  int64_t messages = 0, sent_ticks = 0, dropped = 0;
  const auto t0 = Clock::now();
  bool stopped = StopRequested();
  while (!stopped) {
    size_t n = 0;
    while (n < batch.size() && sim.Next(field, &batch[n])) ++n;
    if (n == 0) break;
    if (o.rate > 0) {
      // The message holding ticks [k, k+n) leaves when its last tick is due:
      // every due time is computed from t0, so rounding never accumulates.
      const double k_last = static_cast<double>(sent_ticks + static_cast<int64_t>(n) - 1);
      const auto due = t0 + std::chrono::nanoseconds(std::llround(k_last * 1e9 / o.rate));
      if (!SleepUntil(due)) {
        stopped = true;
        break;
      }
    }
    const bool single = o.batch == 1;
    if (o.encoding == WireEncoding::kJson) {
      single ? EncodeTickJson(batch[0], &body)
             : EncodeBatchJson(absl::MakeConstSpan(batch.data(), n), &body);
    } else {
      single ? EncodeTickBinary(batch[0], &body)
             : EncodeBatchBinary(absl::MakeConstSpan(batch.data(), n), &body);
    }
    const absl::string_view topic = single ? batch[0].symbol.view() : absl::string_view("*");
    try {
      sock.send(zmq::buffer(topic.data(), topic.size()), zmq::send_flags::sndmore);
      // PUB never blocks: above the high-water mark ZeroMQ drops the message.
      sock.send(zmq::buffer(body), zmq::send_flags::none);
    } catch (const zmq::error_t& e) {
      if (e.num() == EINTR) {
        stopped = StopRequested();
        ++dropped;
        continue;
      }
      return Fail(absl::UnavailableError(absl::StrCat("send failed: ", e.what())), 1);
    }
    ++messages;
    sent_ticks += static_cast<int64_t>(n);
    progress.Update(sent_ticks);
    stopped = StopRequested();
  }
  const double secs = progress.Elapsed();
  std::fprintf(stderr,
               "aftershock simulate: %s %lld ticks in %lld messages (%zu symbols) to %s in "
               "%.2f s (%.0f ticks/s)%s\n",
               stopped ? "interrupted; published" : "published", static_cast<long long>(sent_ticks),
               static_cast<long long>(messages), sim.instruments().size(), bound.c_str(), secs,
               secs > 0 ? static_cast<double>(sent_ticks) / secs : 0.0,
               dropped > 0 ? absl::StrCat(", ", dropped, " interrupted sends").c_str() : "");
  sock.close();  // waits up to the linger time for queued messages
  ctx.close();
  return stopped ? 130 : 0;
}

// Publishes every tick into the JetStream stream of the [nats] section of an
// engine configuration, one message per tick on <subject>.<symbol token>.
int PublishNats(MarketSim& sim, Tick::Kind field, const NatsConfig& nats, const PublishOptions& o) {
  JetStreamPublisherOptions jo;
  jo.encoding = o.encoding;
  jo.ack_timeout_ms = o.ack_timeout_ms;
  jo.give_up_ms = o.give_up_ms;
  jo.stop_requested = [] { return StopRequested(); };
  auto pub = JetStreamTickPublisher::Connect(nats, jo);
  if (!pub.ok()) return Fail(pub.status(), 1);
  if (!o.quiet) {
    std::fprintf(stderr,
                 "aftershock simulate: publishing %lld ticks to JetStream stream %s at %s on "
                 "%s.<symbol> (%s)\n",
                 static_cast<long long>(sim.total_ticks()), nats.stream.c_str(),
                 nats.servers.front().c_str(), nats.subject.c_str(),
                 std::string(WireEncodingName(o.encoding)).c_str());
  }
  Progress progress(!o.quiet, sim.total_ticks());
  Tick tick;
  int64_t sent = 0;
  const auto t0 = Clock::now();
  bool stopped = StopRequested();
  absl::Status failed;
  while (!stopped && sim.Next(field, &tick)) {
    if (o.rate > 0) {
      const auto due =
          t0 + std::chrono::nanoseconds(std::llround(static_cast<double>(sent) * 1e9 / o.rate));
      if (!SleepUntil(due)) {
        stopped = true;
        break;
      }
    }
    if (failed = (*pub)->Publish(tick); !failed.ok()) {
      stopped = absl::IsCancelled(failed);
      break;
    }
    ++sent;
    progress.Update(sent);
    stopped = StopRequested();
  }
  // Every tick acknowledged (stored) before the count is reported; failed
  // ticks are resent until the give-up time.
  if (failed.ok()) failed = (*pub)->Flush(o.give_up_ms + o.ack_timeout_ms);
  if (absl::IsCancelled(failed)) stopped = true;
  const double secs = progress.Elapsed();
  const JetStreamPublisherStats st = (*pub)->stats();
  std::fprintf(
      stderr,
      "aftershock simulate: %s %lld ticks (%zu symbols) to JetStream stream %s in "
      "%.2f s (%.0f ticks/s); %llu acknowledged, %llu failed attempts, %llu resent, "
      "%llu already stored\n",
      stopped ? "interrupted; published" : "published", static_cast<long long>(sent),
      sim.instruments().size(), nats.stream.c_str(), secs,
      secs > 0 ? static_cast<double>(sent) / secs : 0.0, static_cast<unsigned long long>(st.acked),
      static_cast<unsigned long long>(st.failed), static_cast<unsigned long long>(st.resent),
      static_cast<unsigned long long>(st.duplicates));
  if (!failed.ok() && !absl::IsCancelled(failed)) return Fail(failed, 1);
  return stopped ? 130 : 0;
}

void PrintUniverse(const std::vector<MarketInstrument>& insts,
                   const std::vector<InstrumentProfile>& profiles, double ppy) {
  std::printf("%-14s %-10s %10s %8s %7s %5s  %s\n", "symbol", "model", "price", "vol_ann",
              "persist", "nu", "description");
  for (size_t i = 0; i < insts.size(); ++i) {
    const ModelParams& m = insts[i].params;
    std::printf("%-14s %-10s %10.4f %8.3f %7.4f %5.1f  %s\n", insts[i].symbol.c_str(),
                std::string(VarianceKindName(m.spec.variance)).c_str(), insts[i].start_price,
                std::sqrt(m.UnconditionalVariance() * ppy), m.Persistence(), m.nu(),
                profiles[i].description.c_str());
  }
  std::printf(
      "\nper-bar parameters use %.0f bars per year; outputs of models fitted to this\n"
      "data are statistical estimates, not advice\n",
      ppy);
}

}  // namespace

int SimulateCommand(int argc, char** argv) {
  ArgParser args(
      "aftershock simulate",
      "Simulate a synthetic market of invented instruments (the Halvard Sound desk: energy,\n"
      "metals, crops, freight, carbon and currency) and write it as a tick CSV for\n"
      "`aftershock replay`, or publish it on a ZeroMQ socket for `aftershock run`.\n\n"
      "Each instrument follows its own GARCH(1,1) or GJR-GARCH(1,1) model with Student-t\n"
      "shocks and a constant\n"
      "mean; its per-bar parameters come from an annualized volatility, a persistence and\n"
      "shock loadings (`--list` shows them). Prices are the start price times the exponential\n"
      "of the cumulated log returns; bar i is stamped start + i * interval, one tick per\n"
      "instrument per bar. The same --seed gives the same data; an instrument's path depends\n"
      "only on the seed and its symbol. Returns are fractions (0.001 = 0.1 %); give the\n"
      "engine the bars per year that --list prints (periods_per_year) so annualized\n"
      "figures match (the engine's periods_per_year = \"auto\" gives the same number when\n"
      "its [bars] interval and session are those given here).\n\n"
      "Sessions: --session 08:00-16:30 --utc-offset 60 produces ticks only inside that\n"
      "local-time session (the engine's [bars] session = { start = \"08:00\", end = \"16:30\",\n"
      "timezone_offset_minutes = 60 }). A session has ceil(length / interval) bars (the last\n"
      "one ends at the close); after it the bar clock jumps to the next session's open, over\n"
      "the night and over weekends (no session opens on a local Saturday or Sunday unless\n"
      "--every-day). Bar 0 is the first bar at or after --start; without --start the run\n"
      "begins at the open of Monday 2026-03-02 (local). --sessions N simulates N whole\n"
      "sessions (N * bars per session bars) instead of --bars. The first return of every\n"
      "session but the first carries an overnight move: a normal draw with the variance of\n"
      "--overnight-variance bars at the conditional variance (a price feed's bar builder\n"
      "skips that return; a return feed carries it in its first tick of the session).\n"
      "With a session, --periods-per-year auto is 252 * bars per session.\n\n"
      "Intraday profile: --intraday-shape u multiplies each bar's return by s(k), k the bar\n"
      "of the session (0..K-1), with x = (2k + 1) / K - 1 and\n"
      "  s(k)^2 = (1 + A x^2) / (1 + A (K^2 - 1) / (3 K^2)),  A = --intraday-amplitude,\n"
      "so the session mean of s^2 is 1 (the day's variance is unchanged), and the open and\n"
      "close bars have about 1 + A times the variance of the midday bars. The GARCH\n"
      "recursion runs on the unscaled returns. flat (the default) is s = 1.\n\n"
      "Ticks per bar: --ticks-per-bar N > 1 gives each instrument N ticks at uniformly\n"
      "random times inside each bar (prices on a Brownian bridge of the bar's variance); the\n"
      "bar's last tick carries its close, so a [bars] interval equal to --interval recovers\n"
      "the simulated returns exactly. Ticks are written in time order. With N = 1 (default)\n"
      "the tick is stamped at the bar start.\n\n"
      "Regimes: --regime [SYMBOL@]BAR:MULT[:SHAPE] multiplies the variance by MULT from\n"
      "output bar BAR on (0-based; relative to the base level, not cumulative). SHAPE omega\n"
      "(default) multiplies the unconditional variance (omega), which the conditional variance\n"
      "reaches gradually; step multiplies every bar's variance from BAR on at once (a jump).\n"
      "Without SYMBOL@ it applies to every instrument. Repeat the option or give a comma list:\n"
      "  --regime 200:4,300:1   --regime BRANDR.NRG@120:3:step\n\n"
      "Universe file (--universe FILE, TOML), one table per instrument:\n"
      "  [[instrument]]\n"
      "  symbol = \"OSTRA.NRG\"      # required\n"
      "  description = \"...\"       # optional\n"
      "  model = \"gjr\"             # garch | gjr | flat                [garch]\n"
      "  price = 80.0              # start price                         [100]\n"
      "  vol = 0.30                # annualized volatility, fraction     [0.20]\n"
      "  drift = 0.0               # annualized log drift, fraction      [0]\n"
      "  persistence = 0.97        # alpha + gamma/2 + beta               [0.97]\n"
      "  alpha = 0.05              # ARCH loading                         [0.05]\n"
      "  gamma = 0.04              # asymmetry loading (gjr)              [0]\n"
      "  nu = 6.0                  # Student-t degrees of freedom (> 2)   [6]\n"
      "  regimes = [\"200:4\"]       # regime changes of this instrument    []\n\n"
      "Publishing: one two-frame message [symbol][body] per tick, or with --batch N > 1\n"
      "[\"*\"][array of N ticks] (include/aftershock/wire.h). Pacing follows a monotonic clock\n"
      "(each message leaves at t0 + k / rate), so there is no drift over long runs. ZeroMQ\n"
      "drops what a subscriber misses before it connects (slow joiner): --wait-subscribers MS\n"
      "holds the first message until a subscription arrives or MS ms pass. Ctrl-C stops\n"
      "cleanly with the final count (exit code 130).\n"
      "--nats CONFIG publishes into NATS JetStream instead: one tick a message on\n"
      "<[nats] subject>.<symbol token>, the server's partition() mapping choosing the\n"
      "partition; every tick is acknowledged by JetStream before the final count. A tick\n"
      "whose attempt fails (e.g. the stream's leader died with the acknowledgement) is\n"
      "resent with the same message id, which the stream's duplicate window deduplicates;\n"
      "a symbol's next tick waits for the acknowledgement of its previous one, so the\n"
      "order per symbol holds. A tick unacknowledged --give-up seconds after its first\n"
      "send ends the run with an error (exit code 1).\n\n"
      "Examples:\n"
      "  aftershock simulate --output ticks.csv --bars 390 --regime 200:4\n"
      "  aftershock simulate --publish tcp://127.0.0.1:7301 --rate 200 --bars 100000\n"
      "  aftershock simulate --output day.csv --session 08:00-16:30 --utc-offset 60 \\\n"
      "      --sessions 6 --intraday-shape u --ticks-per-bar 4");
  args.AddOption("symbols", "N",
                 "number of instruments from the built-in universe (beyond 12, "
                 "numbered variants)",
                 "12");
  args.AddOption("universe", "FILE", "TOML file of instruments (replaces the built-in universe)");
  args.AddOption("model", "KIND",
                 "variance family for every instrument: mixed (each its own) | garch | gjr | "
                 "flat (no clustering); gjr on a symmetric profile keeps the persistence "
                 "with alpha/2 and gamma = alpha",
                 "mixed");
  args.AddOption("bars", "N", "bars per instrument", "390");
  args.AddOption("seed", "N", "master random seed", "1");
  args.AddOption("burn-in", "N", "bars simulated and discarded before bar 0", "500");
  args.AddOption("start", "TIME", "time of bar 0 (ISO-8601 UTC or ns since the epoch)",
                 "2026-03-02T09:30:00Z");
  args.AddOption("interval", "DURATION", "bar spacing: integer and unit ns|us|ms|s|m|h", "1m");
  args.AddOption("periods-per-year", "X",
                 "bars per year that convert the annualized volatilities (auto: 252 days of "
                 "6.5 h, i.e. 98280 for 1m bars, at least 252; with --session 252 * bars per "
                 "session)",
                 "auto");
  args.AddOption("session", "HH:MM-HH:MM",
                 "trading session in local time; ticks only inside, the clock jumps over "
                 "nights and weekends");
  args.AddOption("utc-offset", "MINUTES", "local time of --session = UTC + MINUTES", "0");
  args.AddFlag("every-day", "with --session: sessions on Saturdays and Sundays too");
  args.AddOption("sessions", "N", "with --session: simulate N whole sessions (replaces --bars)");
  args.AddOption("overnight-variance", "BARS",
                 "with --session: variance of the overnight move, in bars of the conditional "
                 "variance; 0 = none",
                 "100");
  args.AddOption("intraday-shape", "SHAPE",
                 "intraday volatility profile over the session: flat | u (needs --session)",
                 "flat");
  args.AddOption("intraday-amplitude", "A",
                 "amplitude of the u shape: open/close variance about 1 + A times midday's", "2");
  args.AddOption("ticks-per-bar", "N",
                 "ticks per instrument and bar, at random times inside the bar (1 = one tick at "
                 "the bar start)",
                 "1");
  args.AddOption("regime", "SPEC",
                 "variance regime change(s) [SYMBOL@]BAR:MULT[:omega|:step][,...]; "
                 "repeatable");
  args.AddOption("output", "FILE", "write a tick CSV (symbol,time,price|return); '-' = stdout");
  args.AddOption("field", "KIND", "CSV/feed value: price | return (log return)", "price");
  args.AddOption("time-format", "FMT", "CSV time column: iso | ns", "iso");
  args.AddOption("publish", "ENDPOINT",
                 "bind a ZeroMQ PUB socket here and publish the ticks "
                 "(e.g. tcp://127.0.0.1:7301)");
  args.AddOption("nats", "CONFIG",
                 "publish the ticks to NATS JetStream per the [nats] section of this engine "
                 "configuration (one tick a message on <subject>.<symbol token>; README "
                 "\"Scale-out\")");
  args.AddOption("ack-timeout", "MS",
                 "with --nats: an attempt not acknowledged by JetStream within MS ms is resent",
                 "2000");
  args.AddOption("give-up", "SECONDS",
                 "with --nats: fail when a tick is still unacknowledged SECONDS after its first "
                 "send (plus --ack-timeout, at most the stream's duplicate window)",
                 "60");
  args.AddOption("rate", "TICKS_PER_S", "publishing rate in ticks per second; 0 = unpaced", "1000");
  args.AddOption("encoding", "ENC", "wire encoding: json | binary", "json");
  args.AddOption("batch", "N", "ticks per message; > 1 sends batches with topic '*'", "1");
  args.AddOption("wait-subscribers", "MS",
                 "wait up to MS ms for the first subscriber before publishing (0 = no wait)", "0");
  args.AddOption("linger", "MS", "time allowed at exit to deliver queued messages", "2000");
  args.AddOption("high-water-mark", "N", "messages queued per subscriber before ZeroMQ drops",
                 "100000");
  args.AddFlag("list", "print the instruments and their models, then exit");
  args.AddFlag("quiet", "no progress lines (the final count line is still printed)");
  if (auto s = args.Parse(argc, argv); !s.ok()) return Fail(s, 2);
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }

  // ---- Options -----------------------------------------------------------------
  auto bars = args.GetInt("bars");
  if (!bars.ok()) return Fail(bars.status(), 2);
  auto seed = args.GetInt("seed");
  if (!seed.ok()) return Fail(seed.status(), 2);
  auto burn_in = args.GetInt("burn-in");
  if (!burn_in.ok()) return Fail(burn_in.status(), 2);
  auto start = ParseTickTime(args.Get("start"));
  if (!start.ok())
    return Fail(absl::InvalidArgumentError(absl::StrCat("--start: ", start.status().message())), 2);
  auto interval = ParseDuration(args.Get("interval"));
  if (!interval.ok() || *interval <= 0) {
    return Fail(absl::InvalidArgumentError(absl::StrCat(
                    "--interval: expected a positive duration such as 1m, 5s or 250ms, got '",
                    args.Get("interval"), "'")),
                2);
  }
  SessionWindow session;
  if (args.Has("session")) {
    if (auto s = ParseSessionOption(args.Get("session"), &session); !s.ok()) return Fail(s, 2);
    auto offset = args.GetInt("utc-offset");
    if (!offset.ok() || *offset < -1440 || *offset > 1440) {
      return Fail(absl::InvalidArgumentError("--utc-offset must be minutes in -1440..1440"), 2);
    }
    session.tz_offset_minutes = static_cast<int>(*offset);
    if (*interval > kNanosPerDay) {
      return Fail(absl::InvalidArgumentError("--interval must be at most 24h with --session"), 2);
    }
  } else {
    for (const char* name : {"utc-offset", "sessions", "every-day", "overnight-variance"}) {
      if (args.Has(name)) {
        return Fail(absl::InvalidArgumentError(absl::StrCat("--", name, " needs --session")), 2);
      }
    }
  }
  const int64_t session_bars = session.enabled ? BarsPerSession(session, *interval) : 0;
  if (args.Has("sessions")) {
    if (args.Has("bars")) {
      return Fail(absl::InvalidArgumentError("--sessions and --bars exclude each other"), 2);
    }
    auto n = args.GetInt("sessions");
    if (!n.ok() || *n < 1 || *n > 100000) {
      return Fail(absl::InvalidArgumentError("--sessions must be an integer in 1..100000"), 2);
    }
    *bars = *n * session_bars;
  }
  auto overnight = args.GetDouble("overnight-variance");
  if (!overnight.ok() || !(*overnight >= 0) || !std::isfinite(*overnight)) {
    return Fail(absl::InvalidArgumentError("--overnight-variance must be a number >= 0 (bars)"), 2);
  }
  const std::string shape = args.Get("intraday-shape");
  if (shape != "flat" && shape != "u") {
    return Fail(
        absl::InvalidArgumentError("--intraday-shape must be flat or u, got '" + shape + "'"), 2);
  }
  auto amplitude = args.GetDouble("intraday-amplitude");
  if (!amplitude.ok() || !(*amplitude >= 0) || !std::isfinite(*amplitude)) {
    return Fail(absl::InvalidArgumentError("--intraday-amplitude must be a number >= 0"), 2);
  }
  if (shape == "u" && !session.enabled) {
    return Fail(absl::InvalidArgumentError("--intraday-shape u needs --session"), 2);
  }
  auto ticks_per_bar = args.GetInt("ticks-per-bar");
  if (!ticks_per_bar.ok() || *ticks_per_bar < 1 || *ticks_per_bar > kMaxTicksPerBar) {
    return Fail(absl::InvalidArgumentError(
                    absl::StrCat("--ticks-per-bar must be an integer in 1..", kMaxTicksPerBar)),
                2);
  }
  if (session.enabled && !args.Has("start")) {
    // Local midnight of Monday 2026-03-02: the run opens with that day's session.
    *start = 1772409600LL * kNanosPerSecond -
             static_cast<int64_t>(session.tz_offset_minutes) * kNanosPerMinute;
  }
  double ppy = session.enabled ? 252.0 * static_cast<double>(session_bars)
                               : PeriodsPerYearForInterval(*interval);
  if (args.Get("periods-per-year") != "auto") {
    auto v = args.GetDouble("periods-per-year");
    if (!v.ok() || !(*v > 0)) {
      return Fail(absl::InvalidArgumentError("--periods-per-year must be auto or a number > 0"), 2);
    }
    ppy = *v;
  }
  const std::string field_name = args.Get("field");
  if (field_name != "price" && field_name != "return") {
    return Fail(
        absl::InvalidArgumentError("--field must be price or return, got '" + field_name + "'"), 2);
  }
  const Tick::Kind field = field_name == "price" ? Tick::kPrice : Tick::kReturn;
  const std::string time_format = args.Get("time-format");
  if (time_format != "iso" && time_format != "ns") {
    return Fail(absl::InvalidArgumentError("--time-format must be iso or ns"), 2);
  }
  const std::string model = args.Get("model");
  if (model != "mixed" && model != "garch" && model != "gjr" && model != "flat") {
    const std::string hint = RenameHint(RenameKind::kValue, "simulate --model", model);
    return Fail(absl::InvalidArgumentError("--model must be mixed, garch, gjr or flat, got '" +
                                           model + "'" + (hint.empty() ? "" : "; " + hint)),
                2);
  }

  // ---- Universe ------------------------------------------------------------------
  std::vector<InstrumentProfile> profiles;
  std::vector<RegimeItem> regimes;
  if (args.Has("universe")) {
    if (args.Has("symbols")) {
      return Fail(absl::InvalidArgumentError("--symbols and --universe exclude each other"), 2);
    }
    if (auto s = LoadUniverseFile(args.Get("universe"), &profiles, &regimes); !s.ok()) {
      return Fail(s, 2);
    }
  } else {
    auto n = args.GetInt("symbols");
    if (!n.ok()) return Fail(n.status(), 2);
    if (*n < 1 || *n > kMaxMarketInstruments) {
      return Fail(absl::InvalidArgumentError(absl::StrCat("--symbols must be in 1..",
                                                          kMaxMarketInstruments, ", got ", *n)),
                  2);
    }
    auto p = DefaultInstruments(static_cast<int>(*n));
    if (!p.ok()) return Fail(p.status(), 2);
    profiles = std::move(*p);
  }
  for (const auto& spec : args.GetAll("regime")) {
    if (auto s = ParseRegimeList(spec, &regimes); !s.ok()) return Fail(s, 2);
  }
  std::vector<MarketInstrument> insts;
  std::map<std::string, size_t> index;
  for (const auto& p : profiles) {
    VarianceKind family = p.family;
    if (model == "garch") family = VarianceKind::kGarch;
    if (model == "gjr") family = VarianceKind::kGjr;
    if (model == "flat") family = VarianceKind::kConstant;
    InstrumentProfile q = p;
    if (family == VarianceKind::kGjr && q.gamma == 0 && p.family != VarianceKind::kGjr) {
      // A symmetric profile forced to GJR: move half of alpha into the asymmetry.
      q.gamma = q.alpha;
      q.alpha *= 0.5;
    }
    auto params = InstrumentModel(q, family, ppy);
    if (!params.ok()) return Fail(params.status(), 2);
    index[p.symbol] = insts.size();
    insts.push_back(MarketInstrument{p.symbol, p.start_price, *params, {}});
  }
  for (const auto& r : regimes) {
    if (r.symbol.empty()) {
      for (auto& inst : insts) inst.regimes.push_back(r.change);
    } else if (auto it = index.find(r.symbol); it != index.end()) {
      insts[it->second].regimes.push_back(r.change);
    } else {
      return Fail(absl::InvalidArgumentError("--regime: unknown symbol '" + r.symbol + "'"), 2);
    }
  }
  for (auto& inst : insts) {
    std::stable_sort(
        inst.regimes.begin(), inst.regimes.end(),
        [](const VarianceRegimeChange& a, const VarianceRegimeChange& b) { return a.bar < b.bar; });
  }
  if (args.Flag("list")) {
    PrintUniverse(insts, profiles, ppy);
    return 0;
  }

  // ---- Sink ------------------------------------------------------------------------
  if (static_cast<int>(args.Has("output")) + static_cast<int>(args.Has("publish")) +
          static_cast<int>(args.Has("nats")) !=
      1) {
    return Fail(absl::InvalidArgumentError("give exactly one of --output FILE, --publish "
                                           "ENDPOINT and --nats CONFIG (or --list)"),
                2);
  }
  std::optional<NatsConfig> nats;
  if (args.Has("nats")) {
    auto engine_config = LoadEngineConfigFile(args.Get("nats"));
    if (!engine_config.ok()) return Fail(engine_config.status(), 2);
    nats = engine_config->nats;
    if (args.Get("batch") != "1") {
      return Fail(absl::InvalidArgumentError(
                      "--nats sends one tick a message (the subject names the symbol); "
                      "--batch is for --publish"),
                  2);
    }
  }
  PublishOptions po;
  if (args.Has("publish") || args.Has("nats")) {
    po.endpoint = args.Has("publish") ? args.Get("publish") : "";
    auto rate = args.GetDouble("rate");
    if (!rate.ok() || *rate < 0) {
      return Fail(absl::InvalidArgumentError("--rate must be a number >= 0 (ticks per second)"), 2);
    }
    po.rate = *rate;
    const std::string enc = args.Get("encoding");
    if (enc != "json" && enc != "binary") {
      return Fail(
          absl::InvalidArgumentError("--encoding must be json or binary, got '" + enc + "'"), 2);
    }
    po.encoding = enc == "json" ? WireEncoding::kJson : WireEncoding::kBinary;
    auto batch = args.GetInt("batch");
    if (!batch.ok() || *batch < 1 || *batch > kMaxBatchTicks) {
      return Fail(absl::InvalidArgumentError(
                      absl::StrCat("--batch must be an integer in 1..", kMaxBatchTicks)),
                  2);
    }
    po.batch = static_cast<int>(*batch);
    auto wait = args.GetInt("wait-subscribers");
    auto linger = args.GetInt("linger");
    auto hwm = args.GetInt("high-water-mark");
    if (!wait.ok() || *wait < 0 || !linger.ok() || *linger < 0 || *linger > 3600000 || !hwm.ok() ||
        *hwm < 1 || *hwm > 100000000) {
      return Fail(
          absl::InvalidArgumentError("--wait-subscribers and --linger need milliseconds >= 0, "
                                     "--high-water-mark an integer in 1..100000000"),
          2);
    }
    po.wait_subscribers_ms = *wait;
    po.linger_ms = static_cast<int>(*linger);
    po.high_water_mark = static_cast<int>(*hwm);
    po.quiet = args.Flag("quiet");
    auto ack_timeout = args.GetInt("ack-timeout");
    auto give_up = args.GetDouble("give-up");
    if (!ack_timeout.ok() || *ack_timeout < 1 || *ack_timeout > 600000 || !give_up.ok() ||
        !(*give_up >= 0.001 && *give_up <= 86400)) {
      return Fail(absl::InvalidArgumentError("--ack-timeout needs milliseconds in 1..600000, "
                                             "--give-up seconds in 0.001..86400"),
                  2);
    }
    po.ack_timeout_ms = *ack_timeout;
    po.give_up_ms = std::llround(*give_up * 1000);
  }

  MarketSimOptions so;
  so.bars = *bars;
  so.seed = static_cast<uint64_t>(*seed);
  so.burn_in = *burn_in;
  so.start_ns = *start;
  so.interval_ns = *interval;
  so.session = session;
  so.skip_weekends = !args.Flag("every-day");
  so.overnight_bars = session.enabled ? *overnight : 0.0;
  so.intraday_amplitude = shape == "u" ? *amplitude : 0.0;
  so.ticks_per_bar = static_cast<int>(*ticks_per_bar);
  auto sim = MarketSim::Create(std::move(insts), so);
  if (!sim.ok()) return Fail(sim.status(), 2);

  ScopedStopHandler stop_handler;
  if (args.Has("output")) {
    return WriteCsv(**sim, args.Get("output"), field, time_format == "iso", args.Flag("quiet"));
  }
  if (nats.has_value()) return PublishNats(**sim, field, *nats, po);
  return Publish(**sim, field, po);
}

}  // namespace aftershock::app
