#include "aftershock/engine_services.h"

#include <algorithm>
#include <cstdio>
#include <limits>
#include <vector>

#include "absl/container/flat_hash_map.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "absl/types/span.h"
#include "aftershock/pipeline_refitter.h"

namespace aftershock {
namespace {

RefitOptions ToRefitOptions(const EngineConfig& config, const ServiceOptions& so) {
  const RefitConfig& c = config.refit;
  RefitOptions o;
  o.every_bars = c.every_bars;
  o.every_seconds = c.every_seconds;
  o.window = c.window;
  o.min_bars = c.min_bars;
  o.workers = so.workers > 0 ? so.workers : c.workers;
  o.reidentify_every = c.reidentify_every;
  o.max_persistence = c.max_persistence;
  o.holdout_bars = c.holdout_bars;
  o.holdout_margin = c.holdout_margin;
  o.max_failures = c.max_failures;
  o.apply_lag_bars = c.apply_lag_bars;
  o.jitter_fraction = c.jitter_fraction;
  o.queue_capacity = c.queue_capacity;
  o.diagnostics_level = c.diagnostics_level;
  o.ewma_lambda = config.warmup.ewma_lambda;
  // Version 1 is the configured [model.params] when there is one.
  o.first_version = config.model.has_params ? 2 : 1;
  o.mode = so.mode;
  // With [model.params] a symbol without its own fit keeps the configured model.
  o.group_models = c.group_models && !config.model.has_params;
  if (config.SeasonalityActive()) {
    o.seasonal = true;
    o.seasonal_options = config.seasonality.ToOptions(config.bars);
  }
  return o;
}

class Services;

// Publishes alerts on a.<symbol>, to the alerts file and to the listener.
class PublishingSink : public AlertSink {
 public:
  explicit PublishingSink(Services* s) : services_(s) {}
  void Emit(const Alert& alert) override;
  int index = -1;  // symbol index of the alert being emitted (-1 feed-wide)

 private:
  Services* services_;
};

// The services' captured state (state_capture.h).
class ServicesCapture : public StateCapture {
 public:
  struct SymbolRecord {
    Symbol symbol;  // copied when the record is created
    SymbolAlertState alerts;
    bool fallback = false;
    RollingWindow seasonal_window;  // mirror; seasonality without refits only
  };

  // `windows`: the symbols keep tagged windows (seasonality without refits).
  ServicesCapture(bool windows, std::unique_ptr<StateCapture> refit)
      : windows(windows), refit(std::move(refit)) {}

  void Encode(StateWriter* w) const override {
    // Per symbol about 100 bytes here and, with refits, 100 plus 8 a held
    // return in the coordinator's part.
    w->Reserve(feed.size() + pool.size() + symbols.size() * 256);
    w->Append(feed.data());
    w->U64(symbols.size());
    for (const SymbolRecord& p : symbols) {
      w->Bytes(p.symbol.view());
      SaveSymbolAlertState(p.alerts, w);
      w->Bool(p.fallback);
      if (windows) p.seasonal_window.SaveState(w);
    }
    w->Append(pool.data());
    if (refit != nullptr) {
      // Length-prefixed: the length is patched in once the state is written.
      const size_t at = w->size();
      w->U64(0);
      refit->Encode(w);
      w->PatchU64(at, w->size() - at - sizeof(uint64_t));
    }
  }

  bool Restorable() const override { return refit == nullptr || refit->Restorable(); }
  uint64_t copied_bytes() const override {
    return StateCapture::copied_bytes() + (refit != nullptr ? refit->copied_bytes() : 0);
  }

  const bool windows;
  // Switches, marks and the alert engines' state, as SaveState lays them out.
  StateWriter feed;
  StateWriter pool;                   // the seasonal pool's state (seasonality without refits)
  std::vector<SymbolRecord> symbols;  // by core index
  const std::unique_ptr<StateCapture> refit;  // the coordinator's; null without refits
};

class Services : public EngineServices, public BarObserver, public MetricsSource {
 public:
  Services(IngestCore* core, const EngineConfig& config, const ServiceOptions& options)
      : core_(core), config_(config), options_(options), sink_(this) {}
  ~Services() override {
    if (alerts_file_ != nullptr) std::fclose(alerts_file_);
  }

  absl::Status Init() {
    auto alerts = AlertEngine::Create(config_.alerts.ToAlertOptions());
    if (!alerts.ok()) {
      return absl::InvalidArgumentError(absl::StrCat("[alerts] ", alerts.status().message()));
    }
    alerts_ = *std::move(alerts);
    for (const AlertGroupConfig& g : config_.alert_groups) {
      auto e = AlertEngine::Create(g.alerts.ToAlertOptions());
      if (!e.ok()) {
        return absl::InvalidArgumentError(
            absl::StrCat("[alerts.groups.", g.name, "] ", e.status().message()));
      }
      group_alerts_.push_back(*std::move(e));
    }
    if (config_.refit.every_bars > 0 || config_.refit.every_seconds > 0) {
      PipelineRefitterOptions ro;
      ro.identify.presample = config_.model.presample;
      // Candidates the gate would refuse for their persistence are not chosen.
      ro.identify.max_persistence = config_.refit.max_persistence;
      ro.fit.presample = config_.model.presample;
      auto coord =
          RefitCoordinator::Create(ToRefitOptions(config_, options_),
                                   config_.outputs.ToOutputOptions(), PipelineRefitter::Create(ro));
      if (!coord.ok()) {
        return absl::InvalidArgumentError(absl::StrCat("[refit] ", coord.status().message()));
      }
      refit_ = *std::move(coord);
    }
    seasonal_ = core_->seasonality_active();
    if (seasonal_ && !refit_) pool_ = std::make_unique<SeasonalPool>(core_->seasonal_options());
    if (!options_.alerts_path.empty()) {
      alerts_file_ = std::fopen(options_.alerts_path.c_str(), "w");
      if (alerts_file_ == nullptr) {
        return absl::NotFoundError(
            absl::StrCat("cannot create the alerts file '", options_.alerts_path, "'"));
      }
    }
    json_.reserve(1024);
    // Stored models (--initial-models): compiled once here, so a record the
    // filter refuses is an error before any input, naming the symbol.
    const OutputOptions outputs = config_.outputs.ToOutputOptions();
    for (const StoredModel& m : options_.initial_models) {
      auto model = FilterModel::Create(m.params, outputs, m.version);
      if (!model.ok()) {
        return absl::InvalidArgumentError(
            absl::StrCat("initial model of symbol ", m.symbol,
                         m.line > 0 ? absl::StrCat(" (line ", m.line, ")") : "", ": ",
                         model.status().message()));
      }
      auto v = std::make_shared<ModelVersion>();
      v->version = m.version;
      v->model = *std::move(model);
      v->std_errors = m.std_errors;
      v->loglik = m.loglik;
      v->fitted_bar = std::max<int64_t>(m.scheduled_bar, 0);
      initial_[m.symbol] = std::move(v);
    }
    return absl::OkStatus();
  }

  // ---- EngineServices ----
  bool refit_enabled() const override { return refit_ != nullptr; }
  RefitStats refit_stats() const override { return refit_ ? refit_->stats() : RefitStats{}; }
  size_t refit_bytes_per_symbol() const override {
    return refit_ ? refit_->MemoryBytesPerSymbol() : 0;
  }
  ModelVersionPtr model_version(int index) const override {
    if (!refit_ || index < 0 || index >= static_cast<int>(symbols_.size()) ||
        symbols_[index].refit_id < 0) {
      return nullptr;
    }
    return refit_->current(static_cast<uint32_t>(symbols_[index].refit_id));
  }
  uint64_t instability_alerts(int index) const override {
    if (index < 0 || index >= static_cast<int>(symbols_.size())) return 0;
    return symbols_[index].instability_alerts;
  }
  const AlertCounters& alert_counters() const override {
    combined_ = alerts_->counters();
    for (const auto& g : group_alerts_) {
      const AlertCounters& c = g->counters();
      for (int k = 0; k < kNumAlertKinds; ++k) {
        for (int v = 0; v < kNumSeverities; ++v) {
          combined_.emitted[k][v] += c.emitted[k][v];
          combined_.suppressed[k][v] += c.suppressed[k][v];
        }
      }
    }
    return combined_;
  }
  absl::Status Flush() override {
    if (alerts_file_ != nullptr && std::fflush(alerts_file_) != 0) {
      return absl::InternalError(
          absl::StrCat("cannot write the alerts file '", options_.alerts_path, "'"));
    }
    return absl::OkStatus();
  }

  // ---- Checkpoints ----
  void SaveState(StateWriter* w) const override {
    ServicesCapture c(seasonal_ && !refit_, refit_ ? refit_->NewStateCapture() : nullptr);
    CaptureState(&c);
    c.Encode(w);
  }

  std::unique_ptr<StateCapture> NewStateCapture() const override {
    auto c = std::make_unique<ServicesCapture>(seasonal_ && !refit_,
                                               refit_ ? refit_->NewStateCapture() : nullptr);
    c->symbols.reserve(symbols_.capacity());
    return c;
  }

  void CaptureState(StateCapture* capture) const override {
    CaptureSymbols(capture, 0, static_cast<int>(symbols_.size()));
    CaptureFeedWide(capture);
  }

  void CaptureFeedWide(StateCapture* capture) const override {
    ServicesCapture& c = *static_cast<ServicesCapture*>(capture);
    // Feed-wide and small: encoded here into the capture's reused buffer.
    StateWriter& f = c.feed;
    f.Clear();
    f.Bool(refit_ != nullptr);
    f.Bool(seasonal_);
    f.U64(rejects_seen_);
    f.I64(session_open_ns_);
    f.I64(feed_first_ns_);
    f.U64(swap_errors_);
    alerts_->SaveState(&f);
    f.U64(group_alerts_.size());
    for (const auto& g : group_alerts_) g->SaveState(&f);
    c.pool.Clear();
    if (pool_ != nullptr) pool_->SaveState(&c.pool);
    if (refit_ != nullptr) refit_->CaptureFeedWide(c.refit.get());
  }

  void CaptureSymbols(StateCapture* capture, int begin, int end) const override {
    ServicesCapture& c = *static_cast<ServicesCapture*>(capture);
    const size_t old = c.symbols.size();
    if (old < symbols_.size()) {
      c.symbols.resize(symbols_.size());  // symbols only ever join
      for (size_t i = old; i < symbols_.size(); ++i) c.symbols[i].symbol = symbols_[i].symbol;
    }
    for (size_t i = static_cast<size_t>(begin); i < static_cast<size_t>(end); ++i) {
      const PerSymbol& p = symbols_[i];
      ServicesCapture::SymbolRecord& d = c.symbols[i];
      d.alerts = p.alerts;
      d.fallback = p.fallback;
      c.AddCopied(sizeof(d.alerts) + sizeof(d.fallback));
      if (c.windows) c.AddCopied(d.seasonal_window.SyncFrom(p.seasonal_window));
      // The symbol's refit state in the same gap as its alert and core state.
      if (refit_ != nullptr && p.refit_id >= 0) {
        refit_->CaptureSymbol(c.refit.get(), static_cast<uint32_t>(p.refit_id));
      }
    }
  }

  absl::Status RestoreState(absl::string_view payload) override {
    StateReader r(payload);
    const bool had_refit = r.Bool("services refit switch");
    const bool had_seasonal = r.Bool("services seasonality switch");
    if (!r.ok()) return r.status();
    if (had_refit != (refit_ != nullptr) || had_seasonal != seasonal_) {
      return absl::FailedPreconditionError(absl::StrCat(
          "the checkpoint was written with refits ", had_refit ? "on" : "off", " and seasonality ",
          had_seasonal ? "on" : "off", "; the configuration has refits ", refit_ ? "on" : "off",
          " and seasonality ", seasonal_ ? "on" : "off"));
    }
    const uint64_t rejects_seen = r.U64("services rejects seen");
    const int64_t session_open = r.I64("services stale-rule session");
    const int64_t feed_first = r.I64("services stale-rule first tick");
    const uint64_t swap_errors = r.U64("services swap errors");
    // Alert engines: restored into fresh ones, swapped in at the commit.
    auto main_engine = AlertEngine::Create(config_.alerts.ToAlertOptions());
    if (!main_engine.ok()) return main_engine.status();
    (*main_engine)->RestoreState(&r);
    const uint64_t ng = r.Count("services alert groups", 1u << 16);
    std::vector<std::unique_ptr<AlertEngine>> groups;
    for (uint64_t g = 0; g < ng && r.ok(); ++g) {
      // A changed group list keeps the groups' counters only where it matches.
      auto e = AlertEngine::Create(g < group_alerts_.size()
                                       ? config_.alert_groups[g].alerts.ToAlertOptions()
                                       : AlertOptions{});
      if (!e.ok()) return e.status();
      (*e)->RestoreState(&r);
      groups.push_back(*std::move(e));
    }
    const uint64_t n = r.Count("services symbol count", symbols_.size());
    if (r.ok() && n != symbols_.size()) {
      r.Fail("services symbol count",
             absl::StrCat(n, " saved, ", symbols_.size(), " symbols restored in the core"));
    }
    struct Saved {
      SymbolAlertState alerts;
      bool fallback = false;
      RollingWindow window;
    };
    std::vector<Saved> saved(r.ok() ? n : 0);
    for (size_t i = 0; i < saved.size() && r.ok(); ++i) {
      const absl::string_view name = r.Bytes("services symbol name", kMaxSymbolLength);
      if (r.ok() && name != symbols_[i].symbol.view()) {
        r.Fail(absl::StrCat("services symbol ", i),
               absl::StrCat("'", name, "' where the core has '", symbols_[i].symbol.view(), "'"));
      }
      if (!r.ok()) break;
      const std::string what = absl::StrCat("symbol ", name);
      saved[i].alerts = RestoreSymbolAlertState(&r, what);
      saved[i].fallback = r.Bool(what + " fallback");
      if (seasonal_ && !refit_) {
        auto w = RollingWindow::Create(config_.refit.window, /*with_tags=*/true);
        if (!w.ok()) return w.status();
        saved[i].window = *std::move(w);
        saved[i].window.RestoreState(&r, what + " seasonal");
      }
    }
    std::unique_ptr<SeasonalPool> pool;
    if (pool_ != nullptr && r.ok()) {
      pool = std::make_unique<SeasonalPool>(core_->seasonal_options());
      pool->RestoreState(&r);
    }
    absl::string_view refit_payload;
    if (refit_ != nullptr && r.ok()) {
      const uint64_t len = r.Count("refit state length", r.remaining());
      if (r.ok()) refit_payload = payload.substr(r.offset(), len);
      for (uint64_t k = 0; k < len && r.ok(); ++k) r.U8("refit state");  // skip it
    }
    if (absl::Status s = r.Finish("services state"); !s.ok()) return s;
    // The coordinator validates and commits on its own (all or nothing).
    if (refit_ != nullptr) {
      if (absl::Status s = refit_->RestoreState(refit_payload); !s.ok()) return s;
    }
    // Commit.
    rejects_seen_ = rejects_seen;
    session_open_ns_ = session_open;
    feed_first_ns_ = feed_first;
    swap_errors_ = swap_errors;
    stale_count_from_ = kMustCheck;
    // The main engine keeps its place (symbols point at it): copy the state.
    {
      StateWriter tmp;
      (*main_engine)->SaveState(&tmp);
      StateReader back(tmp.data());
      alerts_->RestoreState(&back);
    }
    if (groups.size() == group_alerts_.size()) {
      for (size_t g = 0; g < groups.size(); ++g) {
        StateWriter tmp;
        groups[g]->SaveState(&tmp);
        StateReader back(tmp.data());
        group_alerts_[g]->RestoreState(&back);
      }
    }
    for (size_t i = 0; i < saved.size(); ++i) {
      stale_[i] = StaleWatch{};  // restored alert states: check each next tick
      symbols_[i].alerts = saved[i].alerts;
      symbols_[i].fallback = saved[i].fallback;
      if (seasonal_ && !refit_) symbols_[i].seasonal_window = std::move(saved[i].window);
    }
    if (pool != nullptr) pool_ = std::move(pool);
    // The core and the coordinator share the version object in force.
    if (refit_ != nullptr) {
      for (size_t i = 0; i < symbols_.size(); ++i) {
        if (symbols_[i].refit_id < 0) continue;
        const ModelVersionPtr& now = refit_->current(static_cast<uint32_t>(symbols_[i].refit_id));
        const int index = static_cast<int>(i);
        if (core_->model(index).version() != now->version) continue;  // e.g. [model.params] v1
        if (absl::Status s =
                core_->ShareModel(index, std::shared_ptr<const FilterModel>(now, &now->model));
            !s.ok()) {
          return absl::DataLossError(absl::StrCat(
              "the core's and the refit coordinator's states disagree: ", s.message()));
        }
      }
    }
    return absl::OkStatus();
  }

  // ---- MetricsSource ----
  void AppendPrometheus(std::string* o) const override {
    const AlertCounters& c = alert_counters();
    for (int pass = 0; pass < 2; ++pass) {
      const char* name = pass == 0 ? "alerts_total" : "alerts_suppressed_total";
      absl::StrAppend(o, "# HELP aftershock_", name,
                      pass == 0 ? " Alerts emitted" : " Alerts suppressed (cool-down, repeats)",
                      ", by kind and severity.\n# TYPE aftershock_", name, " counter\n");
      for (int k = 0; k < kNumAlertKinds; ++k) {
        for (int v = 0; v < kNumSeverities; ++v) {
          absl::StrAppend(o, "aftershock_", name, "{kind=\"",
                          AlertKindName(static_cast<AlertKind>(k)), "\",severity=\"",
                          SeverityName(static_cast<Severity>(v)), "\"} ",
                          pass == 0 ? c.emitted[k][v] : c.suppressed[k][v], "\n");
        }
      }
    }
    if (!refit_) return;
    const RefitStats r = refit_->stats();
    const std::pair<const char*, uint64_t> counters[] = {{"due", r.due},
                                                         {"submitted", r.submitted},
                                                         {"coalesced", r.coalesced},
                                                         {"dropped", r.dropped},
                                                         {"swapped", r.swapped},
                                                         {"rejected", r.rejected},
                                                         {"errors", r.refit_errors},
                                                         {"fallbacks", r.fallbacks},
                                                         {"pooled", r.pooled}};
    absl::StrAppend(o, "# HELP aftershock_refits_total Refit jobs by outcome.\n",
                    "# TYPE aftershock_refits_total counter\n");
    for (const auto& [what, v] : counters) {
      absl::StrAppend(o, "aftershock_refits_total{outcome=\"", what, "\"} ", v, "\n");
    }
    absl::StrAppend(o, "# HELP aftershock_refit_queue_depth Refit jobs waiting for a worker.\n",
                    "# TYPE aftershock_refit_queue_depth gauge\naftershock_refit_queue_depth ",
                    r.queued, "\n# HELP aftershock_refit_running Refit jobs being fitted.\n",
                    "# TYPE aftershock_refit_running gauge\naftershock_refit_running ", r.running,
                    "\n");
  }

  // ---- BarObserver ----
  void OnNewSymbol(IngestCore* core, int index, absl::string_view symbol) override {
    if (static_cast<int>(symbols_.size()) <= index) symbols_.resize(index + 1);
    if (static_cast<int>(stale_.size()) <= index) stale_.resize(index + 1);
    stale_[index] = StaleWatch{};
    PerSymbol& p = symbols_[index];
    p.symbol.assign(symbol);
    p.alerts_engine = alerts_.get();
    uint32_t group = 0;  // group models: the [alerts.groups.*] group, else all symbols
    for (size_t g = 0; g < config_.alert_groups.size(); ++g) {
      if (config_.alert_groups[g].Matches(symbol)) {
        p.alerts_engine = group_alerts_[g].get();
        group = static_cast<uint32_t>(g + 1);
        break;
      }
    }
    if (refit_) {
      auto id = refit_->AddSymbol(symbol, group);
      p.refit_id = id.ok() ? static_cast<int64_t>(*id) : -1;
    } else if (seasonal_) {
      auto w = RollingWindow::Create(config_.refit.window, /*with_tags=*/true);
      if (w.ok()) p.seasonal_window = *std::move(w);
    }
    // A stored model starts the symbol instead of the warm-up (never during a
    // restore: the command passes no initial models then).
    if (initial_.empty()) return;
    auto it = initial_.find(symbol);
    if (it == initial_.end()) return;
    const ModelVersionPtr& v = it->second;
    if (refit_ && p.refit_id >= 0 && !refit_->Seed(static_cast<uint32_t>(p.refit_id), v).ok()) {
      ++swap_errors_;
      return;
    }
    ModelSwap swap;
    swap.model = std::shared_ptr<const FilterModel>(v, &v->model);
    swap.start = ModelSwap::Start::kRestart;  // at the model's unconditional variance
    swap.status_flags = 0;
    if (!core->SwapModel(index, swap).ok()) ++swap_errors_;
  }

  // ---- Seasonality without refits: the profile is re-estimated from the
  // symbol's own tagged window at each session start (the first return of a
  // new session, before it is recorded), i.e. from complete sessions, off the
  // per-bar path; it applies from the next bar on.
  void RecordSeasonal(IngestCore* core, int index, double r, int32_t tag) {
    PerSymbol& p = symbols_[index];
    RollingWindow& w = p.seasonal_window;
    if (w.capacity() == 0) return;
    const bool after_opening = w.size() > 0 && (w.tag_back(0) & kSeasonalTagOvernight);
    if ((tag & kSeasonalTagSessionStart) && w.size() > 0 && !after_opening) {
      w.CopyTo(&seasonal_r_);
      w.CopyTagsTo(&seasonal_tags_);
      const SeasonalOptions& so = core->seasonal_options();
      SeasonalProfilePtr prior = so.prior_sessions > 0 ? pool_->Snapshot() : nullptr;
      auto est = EstimateSeasonalProfile(seasonal_r_, seasonal_tags_, so, prior.get());
      if (est.ok()) {
        pool_->Add(*est);
        if (est->profile != nullptr) {
          if (!core->SetSeasonalProfile(index, est->profile).ok()) ++swap_errors_;
        }
      }
    }
    w.Push(r, tag);
  }

  void OnSkippedReturn(IngestCore* core, int index, const ClosedBar& bar, double r) override {
    const int32_t tag = core->SeasonalTagOf(bar, bar.flags);
    PerSymbol& p = symbols_[index];
    if (refit_ && p.refit_id >= 0) {
      refit_->RecordSkipped(static_cast<uint32_t>(p.refit_id), r, tag);
    } else if (seasonal_) {
      RecordSeasonal(core, index, r, tag);
    }
  }

  // Recursive tracking ([tracking]): the instability alert and, every
  // report_every_bars bars after a re-anchor, a tracking record on m.<symbol>
  // (outcome "tracking"): tracked coefficients, the refit model's, their drift.
  void OnTracking(IngestCore* core, int index, const BarUpdate& u) {
    const RecursiveTracker& t = core->tracker(index);
    auto& p = symbols_[index];
    if (!t.active()) return;
    const TrackingConfig& tc = core->config().tracking;
    const uint32_t version = core->model(index).version();
    if (core->TakeInstabilityAlert(index)) {
      ++p.instability_alerts;
      sink_.index = index;
      p.alerts_engine->OnInstability(p.symbol, u.t_ns, version, t.instability(), tc.alert_threshold,
                                     &sink_);
    }
    if (tc.report_every_bars <= 0 || t.bars_since_anchor() % tc.report_every_bars != 0) return;
    // Fixed-size formatting: no allocation once json_ has grown.
    static constexpr const char* kNames[] = {"omega", "alpha_1", "gamma_1", "beta_1"};
    char buf[1536];
    int n = std::snprintf(
        buf, sizeof(buf),
        "{\"symbol\":\"%.*s\",\"outcome\":\"tracking\",\"mode\":\"%s\",\"version\":%u,"
        "\"t_ns\":%lld,\"variance\":\"%s\",\"bars_since_refit\":%lld,\"stepping\":%s,\"estimates\":"
        "[",
        static_cast<int>(p.symbol.view().size()), p.symbol.view().data(),
        core->tracking_mode(index) == TrackingMode::kDrive ? "drive" : "track", version,
        static_cast<long long>(u.t_ns), t.gjr() ? "GJR-GARCH(1,1)" : "GARCH(1,1)",
        static_cast<long long>(t.bars_since_anchor()), t.stepping() ? "true" : "false");
    int name = 0;
    for (int i = 0; i < t.num_params() && n > 0 && n < static_cast<int>(sizeof(buf)); ++i) {
      if (!t.gjr() && name == 2) ++name;  // no gamma_1
      const double v = t.coefficient(i), a = t.anchor_coefficient(i);
      n += std::snprintf(buf + n, sizeof(buf) - n,
                         "%s{\"name\":\"%s\",\"value\":%.17g,\"refit\":%.17g,\"drift\":%.17g}",
                         i ? "," : "", kNames[name++], v, a, v - a);
    }
    if (n > 0 && n < static_cast<int>(sizeof(buf))) {
      n += std::snprintf(buf + n, sizeof(buf) - n,
                         "],\"persistence\":%.17g,\"level_ratio\":%.17g,\"instability\":%.17g,"
                         "\"resets\":%llu}",
                         t.persistence(), t.level_ratio(), t.instability(),
                         static_cast<unsigned long long>(t.resets()));
    }
    if (n <= 0 || n >= static_cast<int>(sizeof(buf))) return;
    json_.assign(buf, static_cast<size_t>(n));
    core->PublishSymbolMessage(IngestCore::TopicKind::kModel, index, json_);
  }

  void OnBar(IngestCore* core, int index, const ClosedBar& bar, BarUpdate* update) override {
    PerSymbol& p = symbols_[index];
    sink_.index = index;
    AlertEngine* alerts = p.alerts_engine;
    const int32_t tag = seasonal_ ? core->SeasonalTagOf(bar, update->flags) : 0;
    alerts->OnBar(*update, &p.alerts, &sink_);
    if (core->tracking_mode(index) != TrackingMode::kOff) OnTracking(core, index, *update);
    if (seasonal_ && !refit_) RecordSeasonal(core, index, update->r, tag);
    if (!refit_ || p.refit_id < 0) return;
    const uint32_t id = static_cast<uint32_t>(p.refit_id);
    // A raw pointer: copying the shared_ptr would cost two atomic operations a bar.
    const ModelVersion* before = refit_->current(id).get();
    // The coordinator re-runs the state when it swaps (applied or pooled),
    // written back then. It reads only the next variance of the state given
    // (refit.h), so only that is fetched: gathering the whole state from the
    // bank cost every bar of a universe-wide close its cold lines.
    FilterState& state = state_scratch_;
    state.var.next_variance = core->next_variance(index);
    const RefitBarResult res = refit_->OnBar(id, update->t_ns, update->r, &state, tag);
    if (!res.applied && !res.pooled) return;
    if (res.state_replaced) core->set_filter_state(index, state);
    const RefitRecord* rec_ptr = &refit_->last_record();
    if (options_.mode == RefitMode::kReplay) {
      // Wall time is the one field a replay cannot reproduce: 0 keeps the
      // model records byte-identical across runs (refits are rare; a copy).
      replay_record_ = *rec_ptr;
      replay_record_.fit_seconds = 0;
      replay_record_.queue_seconds = 0;
      replay_record_.job_seconds = 0;
      rec_ptr = &replay_record_;
    }
    const RefitRecord& rec = *rec_ptr;
    // The worker formatted the record's numbers; the rest is written here
    // (reusing the buffer: no allocation).
    refit_->last_record_json().Finish(rec, &json_);
    core->PublishSymbolMessage(IngestCore::TopicKind::kModel, index, json_);
    if (options_.listener != nullptr) options_.listener->OnRefitRecord(index, rec);
    const ModelVersionPtr& now = refit_->current(id);
    if (now.get() != before) {
      ModelSwap swap;
      swap.model = std::shared_ptr<const FilterModel>(now, &now->model);
      swap.start = ModelSwap::Start::kKeepState;  // already re-run by the coordinator
      swap.status_flags = refit_->flags(id);
      // The profile the model was fitted with comes along; the EWMA fallback
      // (version 0) keeps the profile in force.
      swap.replace_profile = seasonal_ && now->version != 0;
      swap.profile = now->profile;
      // Cannot fail: the model is created and the state given; counted if it did.
      // What it replaces was a worker's (or the shared EWMA): a worker
      // releases it (RefitCoordinator::Retire).
      ReplacedModel replaced;
      if (!core->SwapModel(index, swap, &replaced).ok()) ++swap_errors_;
      refit_->Retire(std::move(replaced.model));
      refit_->Retire(std::move(replaced.profile));
    }
    if (res.pooled) return;  // a group model stands in: no gate event
    // Model-health and persistence alerts.
    reason_ = absl::StrJoin(rec.reasons, "; ");
    GateEvent ev;
    ev.passed = rec.outcome == RefitOutcome::kSwapped;
    ev.consecutive_failures = rec.consecutive_failures;
    ev.reason = reason_;
    alerts->OnRefitOutcome(p.symbol, update->t_ns, ev, &p.alerts, &sink_);
    if (rec.fallback != p.fallback) {
      alerts->OnFallback(p.symbol, update->t_ns, rec.fallback, rec.version, reason_, &p.alerts,
                         &sink_);
      p.fallback = rec.fallback;
    }
    if (rec.outcome == RefitOutcome::kSwapped && now.get() != before) {
      alerts->OnModelSwap(p.symbol, update->t_ns, rec.version, now->model.params().Persistence(),
                          &p.alerts, &sink_);
    }
  }

  // Live refits: the jobs due at earlier bar closes get their window copies
  // here, between input batches, a few per gap (about 4 µs each for a
  // 2,000-bar window not in cache), so that ticks queued behind a bar close
  // where a whole universe fell due do not wait for every copy. Two per batch
  // (8 before): with a slice of closes, what a tick waits for in a
  // universe-wide close (scale_bench: ingest p99 82-113 us with 2 and slices
  // of 4 bars, 149-205 us with 8 and slices of 16). At 20,000 ticks/s the 100,000
  // copies still take about 2 s of a minute; the clock tick's 256 drain a quiet
  // feed.
  static constexpr int kDeferredPerBatch = 2;
  static constexpr int kDeferredPerClock = 256;
  void OnBatchEnd(IngestCore*) override {
    if (refit_) refit_->SubmitDeferred(kDeferredPerBatch);
  }

  void OnClock(IngestCore* core, int64_t now_ns) override {
    if (refit_) refit_->SubmitDeferred(kDeferredPerClock);
    FeedCheck feed;
    feed.now_ns = now_ns;
    feed.in_session = InSession(config_.bars.session, now_ns);
    feed.count_from_ns = StaleCountFrom(core, now_ns, feed.in_session);
    // A symbol's check can only do something when a message arrived since its
    // last check or its due time came (StaleDueNs, valid while count_from
    // does not fall); the others are skipped without touching their lines.
    const bool every = options_.stale_check_every_symbol || feed.count_from_ns < stale_count_from_;
    stale_count_from_ = feed.count_from_ns;
    const absl::Span<const int64_t> arrivals = core->last_arrivals();
    for (size_t i = 0; i < symbols_.size(); ++i) {
      StaleWatch& w = stale_[i];
      if (!every && arrivals[i] == w.seen_arrival_ns && !(feed.in_session && now_ns >= w.due_ns)) {
        continue;
      }
      PerSymbol& p = symbols_[i];
      sink_.index = static_cast<int>(i);
      feed.last_tick_ns = arrivals[i];
      feed.ticks = core->symbol_ticks(static_cast<int>(i));
      p.alerts_engine->CheckStale(p.symbol, feed, &p.alerts, &sink_);
      w.seen_arrival_ns = p.alerts.last_tick_ns;
      w.due_ns = p.alerts_engine->StaleDueNs(p.alerts, feed.count_from_ns);
    }
    // Rejected ticks since the last tick of the clock feed the burst rule.
    const uint64_t total = core->counters().RejectTotal();
    uint64_t fresh = total - rejects_seen_;
    rejects_seen_ = total;
    const uint64_t cap = static_cast<uint64_t>(config_.alerts.reject_burst) + 1;
    if (fresh > cap) fresh = cap;  // the rule only needs to see the burst cross
    sink_.index = -1;
    for (uint64_t k = 0; k < fresh; ++k) alerts_->OnRejectedTick(now_ns, &sink_);
  }

  // Start of the stale rule's silence count (FeedCheck::count_from_ns). With a
  // session: the later of the session's open and the feed's first tick in it
  // (any symbol), so a session with no tick at all (a weekend, a holiday)
  // counts no silence; outside the session nothing counts (now). Without a
  // session every second counts. The feed's first tick is taken as the
  // earliest latest-arrival of the symbols at the first check that sees one,
  // exact to one clock period.
  int64_t StaleCountFrom(const IngestCore* core, int64_t now_ns, bool in_session) {
    if (!config_.bars.session.enabled) return std::numeric_limits<int64_t>::min();
    if (!in_session) return now_ns;
    const int64_t open = SessionOpenNs(config_.bars.session, now_ns);
    if (open != session_open_ns_) {
      session_open_ns_ = open;
      feed_first_ns_ = -1;
    }
    if (feed_first_ns_ < 0) {
      for (const int64_t t : core->last_arrivals()) {
        if (t >= open && (feed_first_ns_ < 0 || t < feed_first_ns_)) feed_first_ns_ = t;
      }
    }
    return feed_first_ns_ < 0 ? now_ns : std::max(open, feed_first_ns_);
  }

  void Publish(int index, const Alert& alert) {
    EncodeAlertJson(alert, &alert_json_);
    if (index >= 0) {
      core_->PublishSymbolMessage(IngestCore::TopicKind::kAlert, index, alert_json_);
    } else {
      core_->PublishNamedMessage(IngestCore::TopicKind::kAlert, alert.symbol.view(), alert_json_);
    }
    if (alerts_file_ != nullptr) {
      std::fwrite(alert_json_.data(), 1, alert_json_.size(), alerts_file_);
      std::fputc('\n', alerts_file_);
    }
    if (options_.listener != nullptr) options_.listener->OnAlert(index, alert);
  }

 private:
  struct PerSymbol {
    Symbol symbol;
    SymbolAlertState alerts;
    AlertEngine* alerts_engine = nullptr;  // [alerts] or the symbol's group
    int64_t refit_id = -1;
    bool fallback = false;
    RollingWindow seasonal_window;    // seasonality without refits: tagged returns
    uint64_t instability_alerts = 0;  // raised since attach (instability_alerts())
  };

  IngestCore* const core_;
  const EngineConfig config_;
  const ServiceOptions options_;
  std::unique_ptr<AlertEngine> alerts_;                     // [alerts]; also the feed-wide rules
  std::vector<std::unique_ptr<AlertEngine>> group_alerts_;  // per [alerts.groups.*]
  mutable AlertCounters combined_;
  std::unique_ptr<RefitCoordinator> refit_;
  PublishingSink sink_;
  std::FILE* alerts_file_ = nullptr;
  std::vector<PerSymbol> symbols_;  // by core index
  // The stale check's skip test per symbol (OnClock), by core index: the
  // latest arrival its last check saw (SymbolAlertState::last_tick_ns) and
  // the earliest time a check without new data could alert (StaleDueNs with
  // the count_from of that check). kMustCheck: check at the next tick.
  static constexpr int64_t kMustCheck = std::numeric_limits<int64_t>::min();
  struct StaleWatch {
    int64_t seen_arrival_ns = kMustCheck;
    int64_t due_ns = kMustCheck;
  };
  std::vector<StaleWatch> stale_;
  int64_t stale_count_from_ = kMustCheck;  // FeedCheck::count_from_ns of the last check
  uint64_t rejects_seen_ = 0;
  int64_t session_open_ns_ = std::numeric_limits<int64_t>::min();  // of the last check
  int64_t feed_first_ns_ = -1;  // first tick of any symbol in that session; -1 none yet
  uint64_t swap_errors_ = 0;
  // Stored models by symbol (ServiceOptions::initial_models), compiled.
  absl::flat_hash_map<std::string, ModelVersionPtr> initial_;
  bool seasonal_ = false;
  std::unique_ptr<SeasonalPool> pool_;  // seasonality without refits
  std::vector<double> seasonal_r_;      // estimation buffers (session starts only)
  std::vector<int32_t> seasonal_tags_;
  RefitRecord replay_record_;
  std::string json_, alert_json_, reason_;
  FilterState state_scratch_;  // the refit coordinator's copy of a symbol's state
};

void PublishingSink::Emit(const Alert& alert) { services_->Publish(index, alert); }

}  // namespace

absl::StatusOr<std::unique_ptr<EngineServices>> EngineServices::Attach(
    IngestCore* core, const EngineConfig& config, const ServiceOptions& options) {
  auto s = std::make_unique<Services>(core, config, options);
  if (auto st = s->Init(); !st.ok()) return st;
  core->AddObserver(s.get());
  core->AddMetricsSource(s.get());
  return std::unique_ptr<EngineServices>(std::move(s));
}

}  // namespace aftershock
