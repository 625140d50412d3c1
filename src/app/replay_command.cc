// `aftershock replay`: a tick CSV through the same ingest core, as fast as
// possible, deterministically, to JSON Lines.
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <filesystem>
#include <memory>
#include <string>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/time/clock.h"
#include "absl/time/time.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/config_check.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/model_store.h"
#include "aftershock/tick_file.h"
#include "aftershock/update_csv.h"
#include "aftershock/update_sink.h"
#include "app/args.h"
#include "app/cli.h"
#include "app/engine_report.h"
#include "app/replay_recorder.h"

namespace aftershock::app {
namespace {

int Fail(const absl::Status& s, int code) { return ReportFailure("replay", s, code); }

// The replay driver's own state in a checkpoint: the event-time clock sweep
// (when the next OnClock is due), so a resumed replay ticks the clock exactly
// where the whole replay would have.
constexpr uint32_t kDriverSectionTag = SectionTag("DRIV");

}  // namespace

int ReplayCommand(int argc, char** argv) {
  ArgParser args(
      "aftershock replay",
      "Replay a tick CSV (columns symbol,time and price or return; see the README)\n"
      "through the same ingest core as `aftershock run`, as fast as possible, and write\n"
      "one update JSON object a line. The run is deterministic: the clock is the ticks'\n"
      "event time, so idle time bars close exactly as they would live. With [bars]\n"
      "interval \"0s\" each CSV row is a bar. Open bars are closed at the end of the input.\n"
      "[publish] encoding is ignored (the output is always JSON, or CSV with --csv).\n\n"
      "--checkpoint FILE writes the engine's whole state at the end of the input (open bars\n"
      "stay open: the end-of-input close is skipped) and --resume FILE starts from such a\n"
      "file, so replaying a file in parts gives the same output as replaying it whole. A\n"
      "checkpoint written under other state-relevant settings is refused (exit 2).\n\n"
      "Refits ([refit] every_bars / every_seconds) and alerts ([alerts]) run exactly as in\n"
      "`aftershock run`; a refit scheduled at bar n is applied at bar n + apply_lag_bars\n"
      "whatever the worker timing, so the output is byte-identical across runs and worker\n"
      "counts. Model records (the m.<symbol> messages) go to --models and alerts (the\n"
      "a.<symbol> messages) to --alerts, one JSON object a line.\n\n"
      "The run ends with warnings (on standard error, also with --quiet) about settings that\n"
      "contradict each other or the input: annualization against the bar interval, min_bars\n"
      "longer than the input or a session, refits off, a feed encoding no producer uses,\n"
      "most ticks rejected, no symbol with a fitted model (see `aftershock run --check`).\n\n"
      "--initial-models FILE starts each symbol listed in a model file (e.g. yesterday's\n"
      "--models output, or `aftershock models export`) on its last swapped model, with its\n"
      "version, instead of the EWMA warm-up; refits continue from it. Other symbols start as\n"
      "usual ([model.params] or the warm-up). With --resume the checkpoint wins and the file\n"
      "is not read.\n\n"
      "--report writes a self-contained HTML evaluation (forecast losses, VaR backtests,\n"
      "alerts, parameter history, charts); --summary-json the same statistics as JSON;\n"
      "--exceptions every VaR exception as CSV. --csv FILE writes the updates as compact CSV\n"
      "(one header line, one row per update; alone or beside --output). Without --output\n"
      "and --csv the updates are not written.\n\n"
      "Example:\n  aftershock replay --config config/default.toml --input ticks.csv "
      "--output updates.jsonl --report report.html");
  args.AddOption("config", "FILE", "engine configuration (TOML)", "", true);
  args.AddOption("input", "FILE", "tick CSV to replay", "", true);
  args.AddOption("output", "FILE",
                 "JSON Lines output of the updates ('-' = standard output); may be left out "
                 "when another output (--csv, --report, --summary-json, --exceptions, "
                 "--models, --alerts, --checkpoint) is asked for");
  args.AddOption("csv", "FILE",
                 "write the updates as CSV too ('-' = standard output): symbol, time, r, mu, "
                 "eps, var, z, var_next, vol_ann, var_h_<h>, value_at_risk_<level>, "
                 "es_<level>, scale, ver, flags");
  args.AddOption("alerts", "FILE", "write alerts as JSON Lines");
  args.AddOption("models", "FILE", "write model records (refit outcomes, swaps) as JSON Lines");
  args.AddOption("report", "FILE", "write the HTML evaluation report");
  args.AddOption("summary-json", "FILE", "write the evaluation statistics as JSON");
  args.AddOption("exceptions", "FILE",
                 "write every VaR exception (symbol, time, bar, return, limit, level) as CSV");
  args.AddOption("title", "TEXT", "report title", "Replay evaluation");
  args.AddOption("workers", "N", "refit worker threads (overrides [refit] workers)");
  args.AddOption("time-unit", "UNIT",
                 "unit of numeric times: auto (from their magnitude), s, ms, us or ns", "auto");
  args.AddOption("columns", "OURS=THEIRS,...",
                 "the file's names for our columns, e.g. time=ts,price=last "
                 "(ours: symbol, time, price, return, bid, ask, rv, size)");
  args.AddOption("checkpoint", "FILE",
                 "write the state at the end of the input (open bars are not closed)");
  args.AddOption("resume", "FILE", "start from the state in a checkpoint written by --checkpoint");
  args.AddOption("initial-models", "FILE",
                 "start the symbols of a model file (as --models writes it; the last swapped "
                 "record of each symbol) on their models instead of the warm-up");
  args.AddFlag("quiet", "no progress and no summary on standard error");
  if (auto s = args.Parse(argc, argv); !s.ok()) return Fail(s, 2);
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  auto config = LoadEngineConfigFile(args.Get("config"));
  if (!config.ok()) return Fail(config.status(), 2);
  config->publish.encoding = WireEncoding::kJson;
  TickFileOptions tick_options;
  auto unit = ParseTimeUnit(args.Get("time-unit"));
  if (!unit.ok()) {
    return Fail(absl::InvalidArgumentError(absl::StrCat("--", unit.status().message())), 2);
  }
  tick_options.time_unit = *unit;
  auto columns = ParseColumnNames(args.Get("columns"));
  if (!columns.ok()) {
    return Fail(absl::InvalidArgumentError(absl::StrCat("--", columns.status().message())), 2);
  }
  tick_options.column_names = *std::move(columns);
  auto reader = TickFileReader::Open(args.Get("input"), tick_options);
  if (!reader.ok()) return Fail(reader.status(), 2);
  if (!(*reader)->ignored_columns().empty() && !args.Has("quiet")) {
    std::fprintf(stderr, "note: ignoring the columns %s of %s\n",
                 absl::StrJoin((*reader)->ignored_columns(), ", ").c_str(),
                 args.Get("input").c_str());
  }
  if (!args.Has("output")) {
    bool other = false;
    for (const char* o :
         {"csv", "report", "summary-json", "exceptions", "models", "alerts", "checkpoint"}) {
      other = other || args.Has(o);
    }
    if (!other) {
      return Fail(absl::InvalidArgumentError(
                      "give --output for the updates, or at least one of --csv, --report, "
                      "--summary-json, --exceptions, --models, --alerts, --checkpoint"),
                  2);
    }
  }
  if (args.Has("csv") && args.Has("output") && args.Get("csv") == "-" &&
      args.Get("output") == "-") {
    return Fail(
        absl::InvalidArgumentError("--output and --csv cannot both be standard output ('-')"), 2);
  }
  // Without --output the updates are computed and dropped.
  std::unique_ptr<JsonLinesSink> json_sink;
  if (args.Has("output") || !args.Has("csv")) {
    auto sink = JsonLinesSink::Open(args.Has("output") ? args.Get("output") : "/dev/null");
    if (!sink.ok()) return Fail(sink.status(), 2);
    json_sink = *std::move(sink);
  }
  // With --csv the core publishes the binary form, which the CSV sink decodes
  // once and writes as a row and (for --output) as the same JSON line.
  std::unique_ptr<UpdateCsvSink> csv_sink;
  if (args.Has("csv")) {
    config->publish.encoding = WireEncoding::kBinary;
    auto sink = UpdateCsvSink::Open(
        args.Get("csv"), UpdateCsvHeader(config->outputs.horizons, config->outputs.risk_levels),
        args.Has("output") ? json_sink.get() : nullptr);
    if (!sink.ok()) return Fail(sink.status(), 2);
    csv_sink = *std::move(sink);
  }
  UpdateSink* sink = csv_sink ? static_cast<UpdateSink*>(csv_sink.get()) : json_sink.get();
  ManualClock clock;
  auto core = IngestCore::Create(*config, sink, &clock);
  if (!core.ok()) return Fail(core.status(), 2);
  const bool evaluate = args.Has("report") || args.Has("summary-json") || args.Has("exceptions");
  ReplayRecorder recorder(*config, evaluate);
  if (evaluate) (*core)->AddObserver(&recorder);
  if (args.Has("models")) {
    if (auto s = recorder.OpenModelsFile(args.Get("models")); !s.ok()) return Fail(s, 2);
  }
  ServiceOptions so;
  so.mode = RefitMode::kReplay;
  so.alerts_path = args.Get("alerts");
  so.listener = &recorder;
  if (args.Has("workers")) {
    auto w = args.GetInt("workers");
    if (!w.ok() || *w < 1 || *w > 64) {
      return Fail(absl::InvalidArgumentError("--workers must be an integer in 1..64"), 2);
    }
    so.workers = static_cast<int>(*w);
  }
  if (args.Has("initial-models")) {
    if (args.Has("resume")) {
      if (!args.Flag("quiet")) {
        std::fprintf(stderr, "replay: note: --resume restores every symbol's model; "
                             "--initial-models is not used\n");
      }
    } else {
      const std::string path = args.Get("initial-models");
      auto models = LoadInitialModels(path, config->outputs.ToOutputOptions());
      if (!models.ok()) return Fail(models.status(), 2);
      so.initial_models = *std::move(models);
    }
  }
  auto services = EngineServices::Attach(core->get(), *config, so);
  if (!services.ok()) return Fail(services.status(), 2);
  int64_t next_sweep = -1;
  if (args.Has("resume")) {
    const std::string path = args.Get("resume");
    auto fail = [&](const absl::Status& st) {
      return Fail(absl::Status(st.code(), absl::StrCat("cannot resume from '", path, "': ",
                                                       st.message())),
                  2);
    };
    absl::StatusOr<Checkpoint> cp = ReadCheckpointFile(path);
    if (!cp.ok()) return fail(cp.status());
    if (absl::Status st = RestoreEngineState(*cp, *config, core->get(), services->get());
        !st.ok()) {
      return fail(st);
    }
    absl::StatusOr<absl::string_view> driver = cp->Find(kDriverSectionTag);
    if (!driver.ok()) return fail(driver.status());
    StateReader r(*driver);
    next_sweep = r.I64("replay clock sweep");
    if (absl::Status st = r.Finish("replay driver state"); !st.ok()) return fail(st);
    if (!args.Flag("quiet")) {
      std::fprintf(stderr, "replay: resumed %d symbols from %s (%d refit jobs re-submitted)\n",
                   (*core)->num_symbols(), path.c_str(), (*services)->refit_stats().in_flight);
    }
  }

  const bool quiet = args.Flag("quiet");
  // Progress: redrawn in place on a terminal (every 0.2 s), a line every 5 s
  // when standard error is a pipe or a file, with the share of the input read
  // and the time left at the rate so far when the input's size is known.
  const bool tty = isatty(STDERR_FILENO);
  const bool progress = !quiet;
  const auto progress_every = std::chrono::milliseconds(tty ? 200 : 5000);
  int64_t input_bytes = 0;
  {
    std::error_code ec;
    const auto size = std::filesystem::file_size(args.Get("input"), ec);
    if (!ec && size > 0) input_bytes = static_cast<int64_t>(size);
  }
  const auto start = std::chrono::steady_clock::now();
  auto last_progress = start;
  bool progress_shown = false;
  const int64_t interval = config->bars.interval_ns;
  const int64_t sweep = std::clamp<int64_t>(config->bars.grace_ns / 2, 1000000, 100000000);
  Tick tick;
  uint64_t n = 0;
  int64_t first_tick_ns = -1, last_tick_ns = 0;
  while ((*reader)->Next(&tick)) {
    if (first_tick_ns < 0) first_tick_ns = tick.t_ns;
    last_tick_ns = std::max(last_tick_ns, tick.t_ns);
    if (interval > 0) {
      // Event-time clock: sweep idle bars at the cadence the live engine would.
      if (next_sweep < 0) next_sweep = tick.t_ns + sweep;
      if (tick.t_ns >= next_sweep) {
        clock.Set(tick.t_ns);
        (*core)->OnClock(tick.t_ns);
        next_sweep = tick.t_ns + sweep;
      }
    }
    (*core)->OnTick(tick);
    if (progress && (++n & 0x3FFF) == 0) {
      const auto now = std::chrono::steady_clock::now();
      if (now - last_progress > progress_every) {
        last_progress = now;
        const double s = std::chrono::duration<double>(now - start).count();
        const auto& c = (*core)->counters();
        std::string share;
        if (input_bytes > 0) {
          const double f =
              std::min(1.0, static_cast<double>((*reader)->bytes_read()) / input_bytes);
          share = absl::StrFormat("%.0f %% of the input, ", 100 * f);
          if (f > 0) {
            absl::StrAppend(&share, absl::StrFormat("about %.0f s left, ", s * (1 - f) / f));
          }
        }
        std::fprintf(stderr, "%sreplay: %sline %lld, %llu bars, %.1f s, %.0f bars/s%s",
                     tty ? "\r" : "", share.c_str(),
                     static_cast<long long>((*reader)->line_number()),
                     static_cast<unsigned long long>(c.bars), s, c.bars / std::max(s, 1e-9),
                     tty ? "   " : "\n");
        progress_shown = true;
      }
    }
  }
  if (progress_shown && tty) std::fputs("\r\033[K", stderr);
  const absl::Status read_status = (*reader)->status();
  if (!read_status.ok()) return Fail(read_status, 2);
  if (args.Has("checkpoint")) {
    // The state at the end of the input, open bars included (not closed: a
    // resumed replay continues them).
    EngineSnapshot snap = CaptureEngineState(**core, services->get(),
                                             absl::ToUnixNanos(absl::Now()));
    StateWriter w;
    w.I64(next_sweep);
    snap.extra.emplace_back(kDriverSectionTag, w.Release());
    absl::StatusOr<std::string> bytes = SerializeEngineSnapshot(snap, *config);
    if (!bytes.ok()) return Fail(bytes.status(), 1);
    if (absl::Status s = WriteFileAtomically(args.Get("checkpoint"), *bytes); !s.ok()) {
      return Fail(s, 1);
    }
  } else {
    (*core)->CloseAllOpenBars();
  }
  if (absl::Status s = (*core)->Flush(); !s.ok()) return Fail(s, 1);
  if (absl::Status s = (*services)->Flush(); !s.ok()) return Fail(s, 1);
  if (absl::Status s = recorder.CloseModelsFile(); !s.ok()) return Fail(s, 1);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  if (evaluate) {
    recorder.Finish(**core);
    if (args.Has("summary-json")) {
      nlohmann::json j = recorder.SummaryJson(EvaluationOptions{});
      j["input"] = args.Get("input");
      j["bars"] = (*core)->counters().bars;
      j["seconds"] = seconds;
      j["bar_interval"] = config->bars.interval_ns == 0 ? std::string("0s (one bar per tick)")
                                                        : FormatDuration(config->bars.interval_ns);
      FILE* f = std::fopen(args.Get("summary-json").c_str(), "w");
      if (f == nullptr) {
        return Fail(absl::NotFoundError("cannot create '" + args.Get("summary-json") + "'"), 1);
      }
      const std::string text = j.dump(2) + "\n";
      const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size();
      if (std::fclose(f) != 0 || !ok) {
        return Fail(absl::InternalError("cannot write '" + args.Get("summary-json") + "'"), 1);
      }
    }
    if (args.Has("exceptions")) {
      if (absl::Status s = recorder.WriteExceptionsCsv(args.Get("exceptions"), EvaluationOptions{});
          !s.ok()) {
        return Fail(s, 1);
      }
    }
    if (args.Has("report")) {
      ReportRunInfo run;
      run.title = args.Get("title");
      run.input_file = args.Get("input");
      run.bar_interval = config->bars.interval_ns == 0 ? std::string("0s (one bar per tick)")
                                                       : FormatDuration(config->bars.interval_ns);
      run.config_summary = FormatEngineConfig(*config);
      run.generated_at = absl::FormatTime("%Y-%m-%d %H:%M UTC", absl::Now(), absl::UTCTimeZone());
      run.engine_version = "aftershock 0.1.0";
      run.replay_speed = (*core)->counters().bars / std::max(seconds, 1e-9);
      if (absl::Status s = recorder.WriteReport(args.Get("report"), run); !s.ok()) {
        return Fail(s, 1);
      }
    }
  }
  std::vector<std::string> warnings;
  {
    const IngestCore& core_ref = **core;
    RunFacts facts;
    facts.present = true;
    facts.from_file = true;
    facts.ticks_accepted = core_ref.counters().ticks_accepted;
    facts.rejects = core_ref.counters().rejects;
    facts.symbols = static_cast<uint64_t>(core_ref.num_symbols());
    for (int i = 0; i < core_ref.num_symbols(); ++i) {
      facts.max_symbol_bars = std::max(facts.max_symbol_bars, core_ref.symbol_bars(i));
      const FilterModel& m = core_ref.model(i);
      if (!m.is_ewma() && m.version() >= 1) ++facts.symbols_fitted;
    }
    facts.first_tick_ns = std::max<int64_t>(first_tick_ns, 0);
    facts.last_tick_ns = last_tick_ns;
    warnings = ConfigWarnings(*config, facts);
  }
  if (!quiet) {
    const EngineCounters& c = (*core)->counters();
    std::string bad;
    if ((*reader)->bad_lines() > 0) {
      bad = absl::StrFormat("; %d bad lines skipped, first: %s", (*reader)->bad_lines(),
                            (*reader)->errors().empty() ? "" : (*reader)->errors().front());
    }
    std::fprintf(stderr,
                 "replay: %llu ticks, %llu bars, %llu updates, %s, %llu symbols, %.3f s, "
                 "%.0f bars/s%s; %s\n",
                 static_cast<unsigned long long>(c.ticks_in),
                 static_cast<unsigned long long>(c.bars),
                 static_cast<unsigned long long>(c.updates_out), RejectSummary(c).c_str(),
                 static_cast<unsigned long long>(c.symbols), seconds,
                 c.bars / std::max(seconds, 1e-9), bad.c_str(),
                 ServicesSummary(**services).c_str());
    std::fputs(TrackingSummary(**core, **services).c_str(), stderr);
  }
  // Printed even with --quiet: a run that cannot have done its job must say so.
  for (const std::string& w : warnings) std::fprintf(stderr, "replay: warning: %s\n", w.c_str());
  return 0;
}

}  // namespace aftershock::app
