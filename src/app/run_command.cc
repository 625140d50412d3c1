// `aftershock run`: the live engine (ZeroMQ in, ZeroMQ out) until SIGINT/SIGTERM.
#include <cstdio>
#include <memory>
#include <optional>
#include <string>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/checkpointer.h"
#include "aftershock/config_check.h"
#include "aftershock/engine.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/model_store.h"
#include "aftershock/partition_lanes.h"
#include "app/args.h"
#include "app/cli.h"
#include "app/engine_report.h"

namespace aftershock::app {
namespace {

int Fail(const absl::Status& s, int code) { return ReportFailure("run", s, code); }

}  // namespace

int RunCommand(int argc, char** argv) {
  ArgParser args(
      "aftershock run",
      "Run the streaming engine: subscribe to the tick feeds of [feed] (or, with [feed]\n"
      "source = \"nats\", pull the JetStream partitions this instance leases; README\n"
      "\"Scale-out\"), aggregate bars per\n"
      "[bars], filter every symbol's conditional variance and publish one update per bar\n"
      "and symbol on topic u.<symbol> at the [publish] endpoint (see the README for the\n"
      "wire format). Bad input is counted by reason and dropped, never fatal.\n"
      "SIGINT or SIGTERM finishes the current batch, flushes and exits 0.\n"
      "With [checkpoint] path the state of every symbol is written there every\n"
      "[checkpoint] every_seconds (in the background) and at shutdown, and restored on\n"
      "start when the file exists; --fresh starts without it. A file that cannot be used\n"
      "(corrupt, truncated, other format or configuration) is an error (exit 2).\n"
      "--initial-models FILE starts each symbol listed in a model file on its last swapped\n"
      "model and version instead of the EWMA warm-up (a restored checkpoint wins).\n"
      "Outputs are statistical estimates, not advice.\n\n"
      "Example:\n  aftershock run --config config/default.toml");
  args.AddOption("config", "FILE", "engine configuration (TOML; see config/default.toml)", "",
                 true);
  args.AddFlag("check",
               "validate the configuration, print a summary and warnings about settings that "
               "contradict each other, then exit (0 ok, 2 bad)");
  args.AddOption("alerts", "FILE", "also write alerts as JSON Lines (they are published on a.*)");
  args.AddOption("initial-models", "FILE",
                 "start the symbols of a model file (as `replay --models` writes it) on their "
                 "models instead of the warm-up; not used when a checkpoint is restored");
  args.AddFlag("fresh", "ignore an existing [checkpoint] file: start every symbol afresh "
                        "(the file is overwritten by the next checkpoint)");
  if (auto s = args.Parse(argc, argv); !s.ok()) return Fail(s, 2);
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  auto config = LoadEngineConfigFile(args.Get("config"));
  if (!config.ok()) return Fail(config.status(), 2);
  const std::string model =
      config->model.has_params
          ? "fixed [model.params], version 1"
          : absl::StrCat("EWMA warm-up (lambda ", config->warmup.ewma_lambda, "), version 0");
  const std::string feed_from =
      config->feed.source == FeedSource::kNats
          ? absl::StrCat("JetStream stream ", config->nats.stream, " at ",
                         absl::StrJoin(config->nats.servers, ","), ", leased partitions of ",
                         config->nats.partitions, " (instance ",
                         config->nats.instance.empty() ? "hostname-pid" : config->nats.instance,
                         ", lease ", config->nats.lease_seconds, " s)")
          : absl::StrJoin(config->feed.endpoints, ",");
  const std::string plan = absl::StrCat(
      "feed ", feed_from, " (", WireEncodingName(config->feed.encoding),
      config->feed.busy_poll_us > 0 ? absl::StrCat(", busy-polling: one core at 100 % within ",
                                                   config->feed.busy_poll_us, " us of a message")
                                    : "",
      ") -> bars ", FormatDuration(config->bars.interval_ns), " (",
      config->outputs.periods_per_year, " a year",
      config->outputs.periods_per_year_auto ? ", auto" : "", ") -> ", model, " -> publish ",
      config->publish.endpoint, " (", WireEncodingName(config->publish.encoding),
      config->publish.update_topics == UpdateTopics::kBatch  ? ", update batches on b.u only"
      : config->publish.update_topics == UpdateTopics::kBoth ? ", u.<symbol> and batches on b.u"
                                                             : "",
      ")",
      config->refit.every_bars > 0 || config->refit.every_seconds > 0
          ? absl::StrCat("; refits every ", config->refit.every_bars, " bars / ",
                         config->refit.every_seconds, " s on ", config->refit.workers, " worker(s)")
          : "; refits off");
  const std::vector<std::string> warnings = ConfigWarnings(*config);
  if (args.Flag("check")) {
    std::printf("%s: configuration OK\n%s\n", args.Get("config").c_str(), plan.c_str());
    for (const std::string& w : warnings) std::printf("warning: %s\n", w.c_str());
    return 0;
  }
  for (const std::string& w : warnings) {
    std::fprintf(stderr, "aftershock run: warning: %s\n", w.c_str());
  }
  auto engine = Engine::CreateFromConfig(*config);
  if (!engine.ok()) return Fail(engine.status(), 2);
  ServiceOptions so;
  so.mode = RefitMode::kLive;
  so.alerts_path = args.Get("alerts");
  // With the NATS feed every partition is checkpointed into JetStream by the
  // feed ([nats] checkpoint_bucket); the [checkpoint] file is not used.
  const bool nats = config->feed.source == FeedSource::kNats;
  if (nats && !config->checkpoint.path.empty()) {
    std::fprintf(stderr,
                 "aftershock run: note: with [feed] source = \"nats\" the partitions "
                 "are checkpointed into the [nats] checkpoint_bucket; [checkpoint] path "
                 "is not used\n");
  }
  const std::string cp_path = nats ? std::string() : config->checkpoint.path;
  // Read before the services are attached: a restore wins over --initial-models.
  absl::StatusOr<Checkpoint> cp = absl::NotFoundError("no checkpoint");
  if (!cp_path.empty() && !args.Flag("fresh")) cp = ReadCheckpointFile(cp_path);
  if (args.Has("initial-models")) {
    if (cp.ok()) {
      std::fprintf(stderr, "aftershock run: note: the checkpoint %s restores every symbol's "
                           "model; --initial-models is not used\n", cp_path.c_str());
    } else {
      const std::string path = args.Get("initial-models");
      auto models = LoadInitialModels(path, config->outputs.ToOutputOptions());
      if (!models.ok()) return Fail(models.status(), 2);
      std::fprintf(stderr, "aftershock run: %zu symbols start on the models of %s\n",
                   models->size(), path.c_str());
      so.initial_models = *std::move(models);
    }
  }
  auto services = EngineServices::Attach((*engine)->core(), *config, so);
  if (!services.ok()) return Fail(services.status(), 2);
  std::unique_ptr<Checkpointer> checkpointer;
  if (!cp_path.empty()) {
    std::optional<CheckpointRestore> restored;
    if (!args.Flag("fresh")) {
      if (cp.ok()) {
        if (absl::Status s =
                RestoreEngineState(*cp, *config, (*engine)->core(), services->get());
            !s.ok()) {
          return Fail(absl::Status(s.code(), absl::StrCat("cannot restore from '", cp_path, "': ",
                                                          s.message(),
                                                          " (--fresh starts without it)")),
                      2);
        }
        const IngestCore& core = *(*engine)->core();
        int fitted = 0, warmup = 0, other = 0;
        for (int i = 0; i < core.num_symbols(); ++i) {
          const uint32_t f = core.status_flags(i);
          if (f & kFlagWarmup) {
            ++warmup;
          } else if (f & (kFlagFallback | kFlagPooled)) {
            ++other;
          } else {
            ++fitted;
          }
        }
        const double age =
            static_cast<double>(SystemClock()->NowNs() - cp->header().created_ns) / 1e9;
        std::fprintf(stderr,
                     "aftershock run: restored %d symbols from %s, written %.0f s ago: %d on "
                     "fitted models, %d on the warm-up, %d on the fallback or a group model; "
                     "%d refit jobs re-submitted\n",
                     core.num_symbols(), cp_path.c_str(), age, fitted, warmup, other,
                     (*services)->refit_stats().in_flight);
        restored = CheckpointRestore{core.num_symbols(), age, cp_path};
      } else if (absl::IsNotFound(cp.status())) {
        std::fprintf(stderr, "aftershock run: no checkpoint at %s yet; starting fresh\n",
                     cp_path.c_str());
      } else {
        return Fail(absl::Status(cp.status().code(),
                                 absl::StrCat(cp.status().message(),
                                              " (--fresh starts without it)")),
                    2);
      }
    }
    CheckpointerOptions co;
    co.path = cp_path;
    co.every_seconds = config->checkpoint.every_seconds;
    co.slice_symbols = config->checkpoint.slice_symbols;
    auto c = Checkpointer::Create(co, *config, (*engine)->core(), services->get(), SystemClock());
    if (!c.ok()) return Fail(c.status(), 2);
    checkpointer = *std::move(c);
    if (restored.has_value()) checkpointer->SetRestored(*restored);
    (*engine)->core()->AddObserver(checkpointer.get());
    (*engine)->core()->AddMetricsSource(checkpointer.get());
  }
  // Printed from inside the loop, so a reader of this line knows that the
  // signal handlers are installed and ingest is live.
  Engine* e = engine->get();
  e->Post([e, plan] {
    const std::string http = e->HttpEndpoint();
    std::fprintf(stderr, "aftershock run: running: %s; bound %s; http %s\n", plan.c_str(),
                 e->BoundEndpoint().c_str(), http.empty() ? "off" : http.c_str());
    std::fflush(stderr);
  });
  absl::Status st = (*engine)->Run();
  if (absl::Status fs = (*services)->Flush(); st.ok() && !fs.ok()) st = fs;
  if (checkpointer != nullptr) {
    // The state at shutdown (after the write in flight, if any).
    const absl::Status cs = checkpointer->WriteNow();
    const CheckpointStats cst = checkpointer->stats();
    if (cs.ok()) {
      std::fprintf(stderr,
                   "aftershock run: checkpoint %s written (%llu bytes, %.3f s); %llu written, "
                   "%llu failed, %llu skipped\n",
                   cp_path.c_str(), static_cast<unsigned long long>(cst.last_bytes),
                   cst.last_write_seconds, static_cast<unsigned long long>(cst.writes),
                   static_cast<unsigned long long>(cst.failures),
                   static_cast<unsigned long long>(cst.skipped));
    } else if (st.ok()) {
      st = cs;
    }
  }
  // With the NATS feed the ticks went to the partition lanes.
  const EngineCounters c = (*engine)->lanes() != nullptr ? (*engine)->lanes()->TotalCounters()
                                                         : (*engine)->core()->counters();
  std::fprintf(stderr,
               "aftershock run: stopped; %llu messages, %llu ticks, %llu bars, %llu updates, "
               "%llu drops, %s, %llu symbols; %s\n",
               static_cast<unsigned long long>(c.messages_in),
               static_cast<unsigned long long>(c.ticks_in), static_cast<unsigned long long>(c.bars),
               static_cast<unsigned long long>(c.updates_out),
               static_cast<unsigned long long>(c.drops), RejectSummary(c).c_str(),
               static_cast<unsigned long long>(c.symbols), ServicesSummary(**services).c_str());
  std::fputs(TrackingSummary(*(*engine)->core(), **services).c_str(), stderr);
  if (!st.ok()) return Fail(st, 1);
  return 0;
}

}  // namespace aftershock::app
