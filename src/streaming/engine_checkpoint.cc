#include "aftershock/engine_checkpoint.h"

#include <algorithm>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_join.h"
#include "absl/strings/str_split.h"
#include "aftershock/state_codec.h"

namespace aftershock {
namespace {

std::string Num(double v) { return absl::StrFormat("%.17g", v); }

void Line(std::string* out, absl::string_view key, absl::string_view value) {
  absl::StrAppend(out, key, " = ", value, "\n");
}

std::string EncodeConfigSections(const std::vector<ConfigStateSection>& sections) {
  StateWriter w;
  w.U64(sections.size());
  for (const ConfigStateSection& s : sections) {
    w.Bytes(s.name);
    w.Bytes(s.text);
  }
  return w.Release();
}

// The first line where two canonical texts differ, as "was X, now Y".
std::string FirstDifference(absl::string_view was, absl::string_view now) {
  std::vector<absl::string_view> a = absl::StrSplit(was, '\n', absl::SkipEmpty());
  std::vector<absl::string_view> b = absl::StrSplit(now, '\n', absl::SkipEmpty());
  for (size_t i = 0; i < std::max(a.size(), b.size()); ++i) {
    absl::string_view x = i < a.size() ? a[i] : "(nothing)";
    absl::string_view y = i < b.size() ? b[i] : "(nothing)";
    if (x != y) return absl::StrCat("was '", x, "', now '", y, "'");
  }
  return "";
}

// The header of an engine checkpoint whose "CONF" payload is `conf`.
CheckpointHeader SnapshotHeader(absl::string_view conf, uint64_t symbols, int64_t created_ns) {
  CheckpointHeader h;
  h.engine_version = kCheckpointEngineVersion;
  h.config_fingerprint = Fingerprint64(conf);
  h.symbol_count = symbols;
  h.created_ns = created_ns;
  return h;
}

}  // namespace

std::vector<ConfigStateSection> StateRelevantConfig(const EngineConfig& c) {
  std::vector<ConfigStateSection> out;
  {
    std::string t;
    Line(&t, "interval_ns", absl::StrCat(c.bars.interval_ns));
    Line(&t, "grace_ns", absl::StrCat(c.bars.grace_ns));
    Line(&t, "max_lateness_ns", absl::StrCat(c.bars.max_lateness_ns));
    const SessionWindow& s = c.bars.session;
    Line(&t, "session", s.enabled ? absl::StrCat(s.start_minute, "..", s.end_minute, " tz ",
                                                 s.tz_offset_minutes)
                                   : "none");
    out.push_back({"[bars]", std::move(t)});
  }
  {
    std::string t;
    Line(&t, "spec", c.model.spec.Label());
    Line(&t, "presample", PresampleName(c.model.presample));
    if (c.model.has_params) {
      const std::vector<std::string> names = c.model.params.spec.ParamNames();
      for (size_t i = 0; i < names.size() && i < c.model.params.values.size(); ++i) {
        Line(&t, absl::StrCat("params.", names[i]), Num(c.model.params.values[i]));
      }
    } else {
      Line(&t, "params", "none");
    }
    out.push_back({"[model]", std::move(t)});
  }
  {
    std::string t;
    Line(&t, "ewma_lambda", Num(c.warmup.ewma_lambda));
    Line(&t, "min_bars", absl::StrCat(c.warmup.min_bars));
    Line(&t, "start_bars", absl::StrCat(c.warmup.start_bars));
    out.push_back({"[warmup]", std::move(t)});
  }
  {
    std::string t;
    Line(&t, "horizons", absl::StrJoin(c.outputs.horizons, ","));
    std::vector<std::string> levels;
    for (double v : c.outputs.risk_levels) levels.push_back(Num(v));
    Line(&t, "risk_levels", absl::StrJoin(levels, ","));
    Line(&t, "return_units", ReturnUnitsName(c.outputs.return_units));
    out.push_back({"[outputs]", std::move(t)});
  }
  {
    std::string t;
    const RefitConfig& r = c.refit;
    const bool on = r.every_bars > 0 || r.every_seconds > 0;
    Line(&t, "enabled", on ? "true" : "false");
    Line(&t, "window", absl::StrCat(r.window));
    if (on) {
      Line(&t, "every_bars", absl::StrCat(r.every_bars));
      Line(&t, "every_seconds", Num(r.every_seconds));
      Line(&t, "min_bars", absl::StrCat(r.min_bars));
      Line(&t, "apply_lag_bars", absl::StrCat(r.apply_lag_bars));
      Line(&t, "jitter_fraction", Num(r.jitter_fraction));
      Line(&t, "group_models", r.group_models ? "true" : "false");
    }
    out.push_back({"[refit]", std::move(t)});
  }
  {
    std::string t;
    const SeasonalityConfig& s = c.seasonality;
    const bool on = c.SeasonalityActive();
    Line(&t, "active", on ? "true" : "false");
    if (on) {
      Line(&t, "method", SeasonalMethodName(s.method));
      Line(&t, "min_sessions", absl::StrCat(s.min_sessions));
      Line(&t, "smoothing", Num(s.smoothing));
      Line(&t, "prior_sessions", Num(s.prior_sessions));
      Line(&t, "opening_return", OpeningReturnName(s.opening_return));
    }
    out.push_back({"[seasonality]", std::move(t)});
  }
  {
    // The tracker's state evolves under these settings.
    std::string t;
    const TrackingConfig& k = c.tracking;
    Line(&t, "mode", TrackingModeName(k.mode));
    if (k.AnyOn()) {
      const TrackerOptions& o = k.tracker;
      Line(&t, "forgetting", Num(o.forgetting));
      Line(&t, "burn_in_bars", absl::StrCat(o.burn_in_bars));
      Line(&t, "max_step", Num(o.max_step));
      Line(&t, "max_persistence", Num(o.max_persistence));
      Line(&t, "max_level_ratio", Num(o.max_level_ratio));
      Line(&t, "ridge", Num(o.ridge));
      Line(&t, "stability_decay", Num(o.stability_decay));
      Line(&t, "alert_threshold", Num(k.alert_threshold));
      for (const TrackingGroupConfig& g : k.groups) {
        Line(&t, absl::StrCat("groups.", g.name), absl::StrCat(absl::StrJoin(g.symbols, ","),
                                                               " ", TrackingModeName(g.mode)));
      }
    }
    out.push_back({"[tracking]", std::move(t)});
  }
  return out;
}

uint64_t ConfigFingerprint(const EngineConfig& config) {
  return Fingerprint64(EncodeConfigSections(StateRelevantConfig(config)));
}

EngineSnapshot CaptureEngineState(const IngestCore& core, const EngineServices* services,
                                  int64_t created_ns) {
  EngineSnapshot s;
  StateWriter w;
  core.SaveState(&w);
  s.core = w.Release();
  if (services != nullptr) {
    StateWriter sw;
    services->SaveState(&sw);
    s.services = sw.Release();
    s.has_services = true;
  }
  s.symbols = static_cast<uint64_t>(core.num_symbols());
  s.created_ns = created_ns;
  return s;
}

absl::StatusOr<std::string> SerializeEngineSnapshot(const EngineSnapshot& snapshot,
                                                    const EngineConfig& config) {
  const std::string conf = EncodeConfigSections(StateRelevantConfig(config));
  const CheckpointHeader h = SnapshotHeader(conf, snapshot.symbols, snapshot.created_ns);
  std::vector<std::pair<uint32_t, absl::string_view>> sections;
  sections.emplace_back(kConfigSectionTag, conf);
  sections.emplace_back(kCoreSectionTag, snapshot.core);
  if (snapshot.has_services) sections.emplace_back(kServicesSectionTag, snapshot.services);
  for (const auto& [tag, payload] : snapshot.extra) sections.emplace_back(tag, payload);
  return SerializeCheckpoint(h, sections);
}

EngineCapture::EngineCapture(const IngestCore* core, const EngineServices* services)
    : core_(core),
      services_(services),
      core_capture_(core->NewStateCapture()),
      services_capture_(services != nullptr ? services->NewStateCapture() : nullptr) {}

uint64_t EngineCapture::CopiedTotal() const {
  return core_capture_->copied_bytes() +
         (services_capture_ != nullptr ? services_capture_->copied_bytes() : 0);
}

void EngineCapture::Capture(int64_t created_ns) {
  copied_at_start_ = CopiedTotal();
  CaptureAll(created_ns);
}

void EngineCapture::CaptureAll(int64_t created_ns) {
  core_->CaptureState(core_capture_.get());
  if (services_ != nullptr) services_->CaptureState(services_capture_.get());
  symbols_ = static_cast<uint64_t>(core_->num_symbols());
  created_ns_ = created_ns;
  slicing_ = false;
}

void EngineCapture::BeginSlices(int64_t created_ns) {
  copied_at_start_ = CopiedTotal();
  slicing_ = true;
  slice_next_ = 0;
  slice_end_ = core_->num_symbols();
  created_ns_ = created_ns;
}

bool EngineCapture::CaptureSlice(int max_symbols) {
  if (!slicing_) return true;
  const int n = core_->num_symbols();
  const int step = std::max(max_symbols, 1);
  // The last slice also takes the symbols that joined since BeginSlices.
  const int end = slice_end_ - slice_next_ > step ? slice_next_ + step : n;
  core_->CaptureSymbols(core_capture_.get(), slice_next_, end);
  if (services_ != nullptr) services_->CaptureSymbols(services_capture_.get(), slice_next_, end);
  slice_next_ = end;
  if (end < n) return false;
  core_->CaptureCoreWide(core_capture_.get());
  if (services_ != nullptr) services_->CaptureFeedWide(services_capture_.get());
  if (!core_capture_->Restorable() ||
      (services_capture_ != nullptr && !services_capture_->Restorable())) {
    ++slice_fallbacks_;
    CaptureAll(created_ns_);  // the slices' copies count as well
  }
  symbols_ = static_cast<uint64_t>(n);
  slicing_ = false;
  return true;
}

absl::Status EngineCapture::Serialize(const EngineConfig& config, std::string* file) {
  if (slicing_) {
    return absl::FailedPreconditionError("the capture in slices is not complete");
  }
  // The sections are encoded straight into the file's buffer: no payload
  // buffer of their own, no second copy of the ~1.7 KB a symbol.
  const std::string conf = EncodeConfigSections(StateRelevantConfig(config));
  std::vector<SectionEncoder> sections;
  sections.push_back({kConfigSectionTag, [&conf](StateWriter* w) { w->Append(conf); }});
  sections.push_back({kCoreSectionTag, [this](StateWriter* w) { core_capture_->Encode(w); }});
  if (services_capture_ != nullptr) {
    sections.push_back(
        {kServicesSectionTag, [this](StateWriter* w) { services_capture_->Encode(w); }});
  }
  return SerializeCheckpointEncoded(SnapshotHeader(conf, symbols_, created_ns_), sections, file);
}

absl::Status CheckCheckpointConfig(const Checkpoint& checkpoint, const EngineConfig& config) {
  const std::vector<ConfigStateSection> now = StateRelevantConfig(config);
  const std::string conf = EncodeConfigSections(now);
  if (checkpoint.header().config_fingerprint == Fingerprint64(conf)) return absl::OkStatus();
  absl::StatusOr<absl::string_view> saved = checkpoint.Find(kConfigSectionTag);
  if (!saved.ok()) return saved.status();
  StateReader r(*saved);
  const uint64_t n = r.Count("configuration section count", 64);
  std::vector<std::string> problems;
  for (uint64_t i = 0; i < n && r.ok(); ++i) {
    const absl::string_view name = r.Bytes("configuration section name", 64);
    const absl::string_view text = r.Bytes("configuration section text", 1 << 20);
    if (!r.ok()) break;
    bool found = false;
    for (const ConfigStateSection& s : now) {
      if (s.name != name) continue;
      found = true;
      if (s.text != text) problems.push_back(absl::StrCat(name, " (", FirstDifference(text, s.text), ")"));
    }
    if (!found) problems.push_back(absl::StrCat(name, " (unknown to this build)"));
  }
  if (absl::Status s = r.Finish("configuration sections"); !s.ok()) return s;
  if (problems.empty()) {
    problems.push_back("the fingerprint differs although every section matches");
  }
  return absl::FailedPreconditionError(absl::StrCat(
      "the checkpoint was written under another configuration: ", absl::StrJoin(problems, "; "),
      ". The saved state does not fit these settings; start fresh or restore the settings"));
}

absl::Status RestoreEngineState(const Checkpoint& checkpoint, const EngineConfig& config,
                                IngestCore* core, EngineServices* services) {
  if (absl::Status s = CheckCheckpointConfig(checkpoint, config); !s.ok()) return s;
  absl::StatusOr<absl::string_view> c = checkpoint.Find(kCoreSectionTag);
  if (!c.ok()) return c.status();
  if (absl::Status s = core->RestoreState(*c); !s.ok()) return s;
  if (static_cast<uint64_t>(core->num_symbols()) != checkpoint.header().symbol_count) {
    return absl::DataLossError(absl::StrCat("the header counts ", checkpoint.header().symbol_count,
                                            " symbols, the core state holds ",
                                            core->num_symbols()));
  }
  absl::StatusOr<absl::string_view> sv = checkpoint.Find(kServicesSectionTag);
  if (services == nullptr) return absl::OkStatus();
  if (!sv.ok()) return sv.status();
  return services->RestoreState(*sv);
}

}  // namespace aftershock
