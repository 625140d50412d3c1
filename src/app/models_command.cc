// `aftershock models`: list, show and export the models in a checkpoint or a
// model file (model_store.h), for audit and for the next start
// (--initial-models).
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <map>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/time/time.h"
#include "aftershock/bar_update.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/clock.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/model_store.h"
#include "aftershock/update_sink.h"
#include "app/args.h"
#include "app/cli.h"
#include "app/engine_report.h"

namespace aftershock::app {
namespace {

constexpr char kCheckpointMagic[] = "AFSHSNAP";

int Fail(const absl::Status& s) { return ReportFailure("models", s, 2); }

// The models a file holds, and what kind of file it was.
struct Loaded {
  bool checkpoint = false;
  std::vector<StoredModel> models;
  // A checkpoint's tracked symbols ([tracking] track or drive): the tracker
  // state it holds, by symbol.
  std::map<std::string, TrackedParameters> tracking;
};

// The models in force in a checkpoint: the engine state is restored (with
// every check of a restore) into a core and services built from `config`,
// then read symbol by symbol (with the tracked parameters into *tracking).
absl::StatusOr<std::vector<StoredModel>> CheckpointModels(
    const std::string& path, const std::string& config_path,
    std::map<std::string, TrackedParameters>* tracking) {
  if (config_path.empty()) {
    return absl::InvalidArgumentError(
        absl::StrCat("'", path, "' is a checkpoint: give --config, the configuration it was "
                                "written under"));
  }
  auto config = LoadEngineConfigFile(config_path);
  if (!config.ok()) return config.status();
  absl::StatusOr<Checkpoint> cp = ReadCheckpointFile(path);
  if (!cp.ok()) return cp.status();
  NullSink sink;
  ManualClock clock;
  auto core = IngestCore::Create(*config, &sink, &clock);
  if (!core.ok()) return core.status();
  ServiceOptions so;
  so.mode = RefitMode::kReplay;
  so.workers = 1;
  auto services = EngineServices::Attach(core->get(), *config, so);
  if (!services.ok()) return services.status();
  if (absl::Status s = RestoreEngineState(*cp, *config, core->get(), services->get()); !s.ok()) {
    return absl::Status(s.code(), absl::StrCat("cannot read '", path, "': ", s.message()));
  }
  const IngestCore& c = **core;
  std::vector<StoredModel> out;
  for (int i = 0; i < c.num_symbols(); ++i) {
    StoredModel m;
    m.symbol = std::string(c.symbol(i));
    m.version = c.model(i).version();
    m.params = c.model(i).params();
    const uint32_t f = c.status_flags(i);
    m.status = (f & kFlagFallback) ? "fallback"
               : (f & kFlagWarmup) ? "warmup"
               : (f & kFlagPooled) ? "pooled"
                                   : "fitted";
    ModelVersionPtr v = (*services)->model_version(i);
    if (v != nullptr && v->version == m.version && !v->model.is_ewma()) {
      m.std_errors = v->std_errors;
      m.loglik = v->loglik;
      m.scheduled_bar = v->fitted_bar;
    }
    if (std::optional<TrackedParameters> t = TrackedParametersOf(c, i)) {
      (*tracking)[m.symbol] = *std::move(t);
    }
    out.push_back(std::move(m));
  }
  std::sort(out.begin(), out.end(),
            [](const StoredModel& a, const StoredModel& b) { return a.symbol < b.symbol; });
  return out;
}

absl::StatusOr<Loaded> Load(const std::string& path, const std::string& config_path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return absl::NotFoundError(absl::StrCat("cannot open '", path, "'"));
  char magic[8] = {};
  in.read(magic, sizeof(magic));
  Loaded out;
  out.checkpoint = in.gcount() == 8 && std::string(magic, 8) == kCheckpointMagic;
  in.close();
  if (out.checkpoint) {
    auto models = CheckpointModels(path, config_path, &out.tracking);
    if (!models.ok()) return models.status();
    out.models = *std::move(models);
  } else {
    auto models = ReadModelRecordsFile(path);
    if (!models.ok()) return models.status();
    out.models = *std::move(models);
  }
  return out;
}

nlohmann::json Num(double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(); }

double LongRunVolatility(const ModelParams& p) {
  const double v = p.UnconditionalVariance();
  return v > 0 && std::isfinite(v) ? std::sqrt(v) : std::numeric_limits<double>::infinity();
}

std::string FormatTime(int64_t t_ns) {
  if (t_ns == 0) return "-";
  return absl::FormatTime("%Y-%m-%d %H:%M:%SZ", absl::FromUnixNanos(t_ns), absl::UTCTimeZone());
}

nlohmann::json ModelJson(const StoredModel& m, const TrackedParameters* tracking) {
  nlohmann::json j;
  j["symbol"] = m.symbol;
  j["version"] = m.version;
  j["status"] = m.status;
  j["spec"] = m.params.spec.Label();
  j["persistence"] = Num(m.params.Persistence());
  j["half_life_bars"] = Num(VarianceHalfLifeBars(m.params));
  j["long_run_volatility"] = Num(LongRunVolatility(m.params));
  j["fitted_bar"] = m.scheduled_bar >= 0 ? nlohmann::json(m.scheduled_bar) : nlohmann::json();
  j["applied_bar"] = m.applied_bar >= 0 ? nlohmann::json(m.applied_bar) : nlohmann::json();
  j["t_ns"] = m.t_ns != 0 ? nlohmann::json(m.t_ns) : nlohmann::json();
  j["log_likelihood"] = Num(m.loglik);
  nlohmann::json params = nlohmann::json::array();
  const std::vector<std::string> names = m.params.spec.ParamNames();
  for (size_t i = 0; i < names.size(); ++i) {
    params.push_back(
        {{"name", names[i]},
         {"value", Num(m.params.values[i])},
         {"se_hessian", i < m.std_errors.size() ? Num(m.std_errors[i]) : nlohmann::json()}});
  }
  j["estimates"] = std::move(params);
  if (tracking != nullptr) j["tracking"] = TrackedParametersJson(*tracking);
  return j;
}

std::string OrDash(double x, const char* fmt) {
  if (!std::isfinite(x)) return "-";
  char buf[64];
  std::snprintf(buf, sizeof(buf), fmt, x);
  return buf;
}

const TrackedParameters* TrackingOf(const Loaded& loaded, const std::string& symbol) {
  auto it = loaded.tracking.find(symbol);
  return it == loaded.tracking.end() ? nullptr : &it->second;
}

// With tracked symbols, four more columns: the tracking mode, the tracked
// persistence, the tracked level (unconditional variance over the refit
// model's) and the instability statistic.
std::string ListText(const Loaded& loaded) {
  const bool tracked = !loaded.tracking.empty();
  std::string out = absl::StrFormat("%-12s %7s %-8s %-38s %11s %11s %12s %10s %-20s", "SYMBOL",
                                    "VERSION", "STATUS", "MODEL", "PERSISTENCE", "HALF-LIFE",
                                    "LONG-RUN VOL", "FITTED BAR", "IN FORCE SINCE");
  if (tracked) {
    absl::StrAppendFormat(&out, " %-8s %12s %7s %11s", "TRACKING", "TRACKED PERS", "LEVEL",
                          "INSTABILITY");
  }
  out += "\n";
  for (const StoredModel& m : loaded.models) {
    absl::StrAppendFormat(
        &out, "%-12s %7u %-8s %-38s %11s %11s %12s %10s %-20s", m.symbol, m.version, m.status,
        m.params.spec.Label(), OrDash(m.params.Persistence(), "%.4f"),
        OrDash(VarianceHalfLifeBars(m.params), "%.1f"), OrDash(LongRunVolatility(m.params), "%.4g"),
        m.scheduled_bar >= 0 ? absl::StrCat(m.scheduled_bar) : "-", FormatTime(m.t_ns));
    if (const TrackedParameters* t = TrackingOf(loaded, m.symbol)) {
      absl::StrAppendFormat(&out, " %-8s %12s %7s %11s", t->mode, OrDash(t->persistence, "%.4f"),
                            OrDash(t->level_ratio, "x%.3f"), OrDash(t->instability, "%.2f"));
    } else if (tracked) {
      absl::StrAppendFormat(&out, " %-8s %12s %7s %11s", "-", "-", "-", "-");
    }
    out += "\n";
  }
  absl::StrAppend(&out, loaded.models.size(),
                  " models. Half-life in bars; long-run volatility per bar, in the units of the "
                  "model's returns.");
  if (tracked) {
    absl::StrAppend(&out, " ", loaded.tracking.size(),
                    " tracked ([tracking]): TRACKED PERS and LEVEL (unconditional variance over "
                    "the refit model's) of the tracked parameters; `show` lists them.");
  }
  out += "\n";
  return out;
}

std::string ShowText(const StoredModel& m, const TrackedParameters* t) {
  std::string out;
  absl::StrAppendFormat(&out, "symbol          %s\nversion         %u\nstatus          %s\n",
                        m.symbol, m.version, m.status);
  absl::StrAppendFormat(&out, "model           %s\npersistence     %s\nhalf-life       %s bars\n",
                        m.params.spec.Label(), OrDash(m.params.Persistence(), "%.6f"),
                        OrDash(VarianceHalfLifeBars(m.params), "%.2f"));
  absl::StrAppendFormat(&out, "long-run vol    %s per bar\nlog-likelihood  %s\n",
                        OrDash(LongRunVolatility(m.params), "%.6g"), OrDash(m.loglik, "%.6f"));
  absl::StrAppendFormat(&out, "fitted bar      %s\napplied bar     %s\nin force since  %s\n",
                        m.scheduled_bar >= 0 ? absl::StrCat(m.scheduled_bar) : "-",
                        m.applied_bar >= 0 ? absl::StrCat(m.applied_bar) : "-",
                        FormatTime(m.t_ns));
  absl::StrAppendFormat(&out, "\n%-10s %16s %14s\n", "PARAMETER", "VALUE", "STD ERROR");
  const std::vector<std::string> names = m.params.spec.ParamNames();
  for (size_t i = 0; i < names.size(); ++i) {
    absl::StrAppendFormat(&out, "%-10s %16.9g %14s\n", names[i], m.params.values[i],
                          i < m.std_errors.size() ? OrDash(m.std_errors[i], "%.4g") : "-");
  }
  if (t == nullptr) return out;
  absl::StrAppendFormat(&out, "\ntracking        %s %s, %d bars since the refit%s\n", t->mode,
                        t->variance, t->bars_since_refit, t->stepping ? "" : " (burn-in)");
  absl::StrAppendFormat(&out, "persistence     %s tracked, %s refit\n",
                        OrDash(t->persistence, "%.6f"), OrDash(t->refit_persistence, "%.6f"));
  absl::StrAppendFormat(&out,
                        "level           x%s (tracked unconditional variance over the "
                        "refit model's)\n",
                        OrDash(t->level_ratio, "%.4f"));
  absl::StrAppendFormat(&out, "instability     %s (resets %u)\n", OrDash(t->instability, "%.3f"),
                        t->resets);
  absl::StrAppendFormat(&out, "\n%-10s %16s %16s %14s %9s\n", "TRACKED", "VALUE", "REFIT", "DRIFT",
                        "DRIFT %");
  for (size_t i = 0; i < t->names.size(); ++i) {
    absl::StrAppendFormat(
        &out, "%-10s %16.9g %16.9g %+14.4g %9s\n", t->names[i], t->values[i], t->refit[i],
        t->drift(i),
        t->refit[i] > 0 ? OrDash(100.0 * t->drift(i) / t->refit[i], "%+.2f") : std::string("-"));
  }
  return out;
}

constexpr char kSummary[] =
    "List, show or export the fitted models of a checkpoint or a model file.\n\n"
    "  aftershock models list FILE [--format text|json] [--config CONFIG]\n"
    "  aftershock models show FILE SYMBOL [--format text|json] [--config CONFIG]\n"
    "  aftershock models export FILE --output MODELS.jsonl [--config CONFIG]\n\n"
    "FILE is either a checkpoint (recognized by its first bytes; written by `run` with\n"
    "[checkpoint] or `replay --checkpoint`), read with every check of a restore under\n"
    "--config, the configuration it was written under, and listing the model in force of\n"
    "every symbol (status fitted, warmup, fallback or pooled); or a model file (JSON Lines\n"
    "as `replay --models` writes them), listing the last swapped model of each symbol.\n"
    "`list` prints one line per symbol: version, status, model, persistence, half-life of\n"
    "a variance shock in bars, long-run volatility per bar (square root of the\n"
    "unconditional variance, in the units of the model's returns), the bar count at which\n"
    "it was fitted and when it went into force (UTC; '-' where the file does not say).\n"
    "`show` prints every parameter with its standard error. With [tracking] on, a\n"
    "checkpoint also holds each tracked symbol's recursive tracker: `list` adds its mode,\n"
    "tracked persistence, level and instability statistic, `show` the tracked omega,\n"
    "alpha_1, [gamma_1,] beta_1 beside the refit model's and their drift (JSON: the\n"
    "\"tracking\" object, in the keys of the m. tracking records). `export` writes one model\n"
    "record a line for the symbols on a fitted model (warm-up, fallback and group models\n"
    "are skipped), the format `--initial-models` of `run` and `replay` reads.\n"
    "Errors (unreadable or corrupt file, unknown symbol) exit 2.\n\n"
    "Example:\n  aftershock models list state.ckpt --config config/default.toml";

}  // namespace

int ModelsCommand(int argc, char** argv) {
  ArgParser args("aftershock models", kSummary);
  args.AddOption("format", "FORMAT", "text or json (list, show)", "text");
  args.AddOption("config", "FILE", "the configuration a checkpoint was written under");
  args.AddOption("output", "FILE", "export: the model file to write");
  std::vector<std::string> positional;
  int first = 0;
  while (first < argc && argv[first][0] != '-') positional.emplace_back(argv[first++]);
  if (auto s = args.Parse(argc, argv, first); !s.ok()) return Fail(s);
  if (args.HelpRequested() || (argc > 0 && positional.empty() &&
                               (std::string(argv[0]) == "--help" || std::string(argv[0]) == "-h"))) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  if (positional.empty()) {
    return Fail(absl::InvalidArgumentError("give a subcommand: list, show or export"));
  }
  const std::string& sub = positional[0];
  const size_t want = sub == "show" ? 3 : 2;
  if (sub != "list" && sub != "show" && sub != "export") {
    return Fail(absl::InvalidArgumentError(
        absl::StrCat("unknown subcommand '", sub, "' (list, show or export)")));
  }
  if (positional.size() != want) {
    return Fail(absl::InvalidArgumentError(
        sub == "show" ? "usage: aftershock models show FILE SYMBOL"
                      : absl::StrCat("usage: aftershock models ", sub, " FILE")));
  }
  const std::string format = args.Get("format");
  if (format != "text" && format != "json") {
    return Fail(absl::InvalidArgumentError("--format must be text or json"));
  }
  if (sub == "export" && !args.Has("output")) {
    return Fail(absl::InvalidArgumentError("export needs --output FILE"));
  }
  absl::StatusOr<Loaded> loaded = Load(positional[1], args.Get("config"));
  if (!loaded.ok()) return Fail(loaded.status());
  const std::vector<StoredModel>& models = loaded->models;
  if (sub == "list") {
    if (format == "json") {
      nlohmann::json j;
      j["file"] = positional[1];
      j["kind"] = loaded->checkpoint ? "checkpoint" : "model file";
      j["models"] = nlohmann::json::array();
      for (const StoredModel& m : models) {
        j["models"].push_back(ModelJson(m, TrackingOf(*loaded, m.symbol)));
      }
      std::printf("%s\n", j.dump(2).c_str());
    } else {
      std::fputs(ListText(*loaded).c_str(), stdout);
    }
    return 0;
  }
  if (sub == "show") {
    for (const StoredModel& m : models) {
      if (m.symbol != positional[2]) continue;
      if (format == "json") {
        std::printf("%s\n", ModelJson(m, TrackingOf(*loaded, m.symbol)).dump(2).c_str());
      } else {
        std::fputs(ShowText(m, TrackingOf(*loaded, m.symbol)).c_str(), stdout);
      }
      return 0;
    }
    return Fail(absl::NotFoundError(
        absl::StrCat("no model of symbol '", positional[2], "' in '", positional[1], "'")));
  }
  // export
  std::string text;
  size_t written = 0;
  for (const StoredModel& m : models) {
    if (m.status != "fitted" || m.version < 1 || m.params.spec.variance == VarianceKind::kEwma) {
      continue;
    }
    absl::StrAppend(&text, EncodeRefitRecordJson(ToRefitRecord(m)), "\n");
    ++written;
  }
  const std::string out_path = args.Get("output");
  FILE* f = std::fopen(out_path.c_str(), "w");
  if (f == nullptr) return Fail(absl::NotFoundError(absl::StrCat("cannot create '", out_path, "'")));
  const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size();
  if (std::fclose(f) != 0 || !ok) {
    return ReportFailure("models", absl::InternalError(absl::StrCat("cannot write '", out_path, "'")),
                         1);
  }
  std::fprintf(stderr, "models: wrote %zu models to %s (%zu symbols not on a fitted model skipped)\n",
               written, out_path.c_str(), models.size() - written);
  return 0;
}

}  // namespace aftershock::app
