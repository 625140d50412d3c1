// `aftershock watch`: a live terminal view of the engine's update stream
// (PRODUCT.md C12). Subscribes to the `u.` topics of a publisher, decodes JSON
// or binary updates (told apart by the binary magic byte) and shows them.
#include <unistd.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>
#include <zmq.hpp>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "aftershock/update_codec.h"
#include "aftershock/zmq_transport.h"
#include "app/args.h"
#include "app/cli.h"
#include "app/stop_signal.h"
#include "app/watch_table.h"

namespace aftershock::app {
namespace {

using Clock = std::chrono::steady_clock;

int Fail(const absl::Status& s, int code) {
  std::fprintf(stderr, "aftershock watch: %s\n", std::string(s.message()).c_str());
  return code;
}

void Write(const std::string& s) {
  std::fwrite(s.data(), 1, s.size(), stdout);
  std::fflush(stdout);
}

}  // namespace

int WatchCommand(int argc, char** argv) {
  ArgParser args(
      "aftershock watch",
      "Show the engine's per-bar updates live: subscribe to the `u.<symbol>` topics of a\n"
      "publisher (`aftershock run` binds tcp://127.0.0.1:7302 by default) and display, per\n"
      "symbol, the bar time, last return, standardized shock z, annualized volatility,\n"
      "next-bar volatility sqrt(var_next), next-bar VaR and ES at the first risk level,\n"
      "sizing scale, model version, volatility regime and flags. JSON and binary bodies are\n"
      "recognized automatically. The regime comes from the `a.<symbol>` regime alerts\n"
      "(high / low until the regime's end is announced; '-' for none seen).\n\n"
      "On a terminal the table is redrawn in place (at most every --refresh-ms, rows sorted\n"
      "by symbol; |z| >= --z-alert is shown inverted (SGR 7) and marked '!'). When standard\n"
      "output is not a terminal (a pipe or file), or with --mode lines, it prints one line\n"
      "per update instead:\n"
      "  2026-03-02T09:31:00Z BRANDR.NRG r=-0.000412 z=-0.54 vol_ann=0.3012 "
      "vol_next=0.000961 var99=0.00231 es99=0.00265 scale=0.332 ver=2 flags=-\n"
      "with ' !' appended when |z| >= --z-alert.\n\n"
      "--once collects updates until --count of them arrived (or --timeout passed), prints\n"
      "the table once without terminal control codes and exits. Ctrl-C exits cleanly.\n"
      "Values are statistical estimates, not advice.");
  args.AddOption("endpoint", "ENDPOINT", "publisher to connect to", "tcp://127.0.0.1:7302");
  args.AddOption("duration", "SECONDS", "stop after this long; 0 = until Ctrl-C", "0");
  args.AddOption("symbols", "A,B", "only these symbols (comma list; default all)");
  args.AddFlag("once", "print one table after --count updates (or --timeout) and exit");
  args.AddOption("count", "N", "with --once: updates to collect", "1");
  args.AddOption("timeout", "SECONDS", "with --once: give up waiting after this long", "10");
  args.AddOption("mode", "MODE", "auto (table on a terminal, else lines) | table | lines", "auto");
  args.AddOption("refresh-ms", "MS", "minimum time between table redraws (>= 100)", "100");
  args.AddOption("z-alert", "K", "mark updates with |z| >= K", "3");
  if (auto s = args.Parse(argc, argv); !s.ok()) return Fail(s, 2);
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  auto duration = args.GetDouble("duration");
  auto timeout = args.GetDouble("timeout");
  auto count = args.GetInt("count");
  auto refresh = args.GetInt("refresh-ms");
  auto z_alert = args.GetDouble("z-alert");
  if (!duration.ok() || *duration < 0)
    return Fail(absl::InvalidArgumentError("--duration must be seconds >= 0"), 2);
  if (!timeout.ok() || !(*timeout > 0)) {
    return Fail(absl::InvalidArgumentError("--timeout must be seconds > 0"), 2);
  }
  if (!count.ok() || *count < 1) {
    return Fail(absl::InvalidArgumentError("--count must be an integer >= 1"), 2);
  }
  if (!refresh.ok() || *refresh < 100) {
    return Fail(absl::InvalidArgumentError("--refresh-ms must be an integer >= 100"), 2);
  }
  if (!z_alert.ok() || !(*z_alert > 0)) {
    return Fail(absl::InvalidArgumentError("--z-alert must be a number > 0"), 2);
  }
  const std::string mode = args.Get("mode");
  if (mode != "auto" && mode != "table" && mode != "lines") {
    return Fail(absl::InvalidArgumentError("--mode must be auto, table or lines"), 2);
  }
  const bool once = args.Flag("once");
  const bool table_mode = mode == "table" || (mode == "auto" && isatty(STDOUT_FILENO));

  WatchTableOptions wo;
  wo.z_alert = *z_alert;
  for (absl::string_view s : absl::StrSplit(args.Get("symbols"), ',', absl::SkipWhitespace())) {
    wo.symbols.emplace_back(s);
  }
  WatchTable table(wo);

  // Installed before the socket connects: a caller that saw the subscription
  // arrive may interrupt at once.
  ScopedStopHandler stop_handler;
  zmq::context_t ctx(1);
  zmq::socket_t sock(ctx, zmq::socket_type::sub);
  if (absl::Status c = CheckEndpoint(args.Get("endpoint")); !c.ok()) {
    return Fail(absl::InvalidArgumentError(absl::StrCat("--endpoint: ", c.message())), 2);
  }
  try {
    sock.set(zmq::sockopt::linger, 0);
    if (wo.symbols.empty()) {
      sock.set(zmq::sockopt::subscribe, "u.");
      sock.set(zmq::sockopt::subscribe, "a.");
    } else {
      for (const auto& s : wo.symbols) {
        sock.set(zmq::sockopt::subscribe, "u." + s);
        sock.set(zmq::sockopt::subscribe, "a." + s);
      }
    }
    sock.connect(args.Get("endpoint"));
  } catch (const zmq::error_t& e) {
    return Fail(absl::InvalidArgumentError(
                    absl::StrCat("cannot connect to ", args.Get("endpoint"), ": ", e.what())),
                2);
  }

  const auto start = Clock::now();
  const double limit_s = once ? *timeout : *duration;
  const auto deadline =
      start + std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(limit_s));
  const auto refresh_every = std::chrono::milliseconds(*refresh);
  auto next_draw = start;
  bool dirty = table_mode && !once;
  uint64_t bad = 0;
  BarUpdate u;
  // Clear once and hide the cursor; redraws then go home and overwrite in place.
  if (table_mode && !once) Write("\x1b[2J\x1b[?25l");
  while (!StopRequested()) {
    const auto now = Clock::now();
    if (limit_s > 0 && now >= deadline) break;
    if (once && table.updates() >= static_cast<uint64_t>(*count)) break;
    if (dirty && now >= next_draw) {
      Write(table.Render(true));
      dirty = false;
      next_draw = now + refresh_every;
    }
    auto wait = std::chrono::milliseconds(100);
    if (dirty) {
      wait = std::min(wait, std::chrono::duration_cast<std::chrono::milliseconds>(next_draw - now));
    }
    zmq::pollitem_t item{sock.handle(), 0, ZMQ_POLLIN, 0};
    try {
      zmq::poll(&item, 1, std::max(wait, std::chrono::milliseconds(1)));
    } catch (const zmq::error_t&) {
      continue;  // EINTR: the loop condition sees the stop flag
    }
    if (!(item.revents & ZMQ_POLLIN)) continue;
    // Drain what is queued, so a fast stream never backs up behind the display.
    for (int i = 0; i < 10000; ++i) {
      std::vector<zmq::message_t> frames;
      zmq::message_t m;
      bool more = true;
      bool got = false;
      try {
        while (more) {
          if (!sock.recv(m, frames.empty() ? zmq::recv_flags::dontwait : zmq::recv_flags::none)) {
            break;
          }
          got = true;
          more = m.more();
          frames.push_back(std::move(m));
        }
      } catch (const zmq::error_t&) {
        break;
      }
      if (!got) break;
      if (frames.size() != 2) {
        ++bad;
        continue;
      }
      const absl::string_view body(static_cast<const char*>(frames[1].data()), frames[1].size());
      const absl::string_view topic(static_cast<const char*>(frames[0].data()), frames[0].size());
      if (absl::StartsWith(topic, "a.")) {
        // An alert: only the regime state is shown; anything unreadable is skipped.
        const nlohmann::json a = nlohmann::json::parse(body.begin(), body.end(), nullptr,
                                                       /*allow_exceptions=*/false);
        if (a.is_object() && a.contains("kind") && a["kind"].is_string() && a.contains("rule") &&
            a["rule"].is_string() &&
            table.ApplyAlert(std::string(topic.substr(2)), a["kind"].get<std::string>(),
                             a["rule"].get<std::string>())) {
          dirty = dirty || (table_mode && !once);
        }
        continue;
      }
      const bool binary = !body.empty() && static_cast<uint8_t>(body[0]) == kUpdateMagic;
      const absl::Status s = binary ? DecodeUpdateBinary(body, &u) : DecodeUpdateJson(body, &u);
      if (!s.ok()) {
        if (bad++ == 0) {
          std::fprintf(stderr, "aftershock watch: undecodable update (%s); counting further ones\n",
                       std::string(s.message()).c_str());
        }
        continue;
      }
      if (!table.Apply(u)) continue;
      if (once) {
        if (table.updates() >= static_cast<uint64_t>(*count)) break;
      } else if (table_mode) {
        dirty = true;
      } else {
        Write(table.FormatLine(u) + "\n");
      }
    }
  }
  if (once) {
    if (table.updates() == 0) {
      std::fprintf(stderr, "aftershock watch: no update from %s within %g s\n",
                   args.Get("endpoint").c_str(), *timeout);
      return 1;
    }
    Write(table.Render(false));
  } else if (table_mode) {
    Write(table.Render(true) + "\x1b[?25h");  // final state, cursor shown again
  }
  std::fprintf(stderr, "aftershock watch: %llu updates, %zu symbols, %llu undecodable messages\n",
               static_cast<unsigned long long>(table.updates()), table.size(),
               static_cast<unsigned long long>(bad));
  return 0;
}

}  // namespace aftershock::app
