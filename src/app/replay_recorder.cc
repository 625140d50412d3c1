#include "app/replay_recorder.h"

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <limits>
#include <map>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "app/engine_report.h"
#include "app/fit_report.h"

namespace aftershock::app {

ReplayRecorder::~ReplayRecorder() {
  if (models_ != nullptr) std::fclose(models_);
}

absl::Status ReplayRecorder::OpenModelsFile(const std::string& path) {
  models_ = std::fopen(path.c_str(), "w");
  if (models_ == nullptr) return absl::NotFoundError("cannot create '" + path + "'");
  models_path_ = path;
  return absl::OkStatus();
}

absl::Status ReplayRecorder::CloseModelsFile() {
  if (models_ == nullptr) return absl::OkStatus();
  const int rc = std::fclose(models_);
  models_ = nullptr;
  if (rc != 0) return absl::InternalError("cannot write '" + models_path_ + "'");
  return absl::OkStatus();
}

void ReplayRecorder::OnNewSymbol(IngestCore* core, int index, absl::string_view symbol) {
  if (static_cast<int>(histories_.size()) <= index) {
    histories_.resize(index + 1);
    regime_start_.resize(index + 1, -1);
    regime_dir_.resize(index + 1, 0);
    instability_alerts_.resize(index + 1, 0);
  }
  histories_[index].symbol = std::string(symbol);
}

void ReplayRecorder::OnBar(IngestCore* core, int index, const ClosedBar& bar,
                           BarUpdate* update) {
  // No realized-variance column reaches the bar builder: rv stays absent.
  SymbolHistory& h = histories_[index];
  if (AppendBarUpdate(*update, std::numeric_limits<double>::quiet_NaN(), &h).ok()) {
    h.session_bar.push_back(bar.session_bar);
  }
}

void ReplayRecorder::OnAlert(int index, const Alert& alert) {
  if (index < 0 || !collect_) return;  // feed-wide alerts have no symbol page
  SymbolHistory& h = histories_[index];
  AlertRecord rec;
  rec.t_ns = alert.t_ns;
  rec.kind = std::string(AlertKindName(alert.kind));
  rec.severity = std::string(SeverityName(alert.severity));
  rec.value = alert.value;
  rec.message = std::string(alert.message_view());
  h.alerts.push_back(std::move(rec));
  if (alert.rule == AlertRule::kInstability) ++instability_alerts_[index];
  const int dir = alert.rule == AlertRule::kRegimeLow ? -1 : 1;
  if (alert.kind == AlertKind::kRegime) {
    regime_start_[index] = alert.t_ns;
    regime_dir_[index] = dir;
  } else if (alert.kind == AlertKind::kRegimeClear && regime_start_[index] >= 0) {
    h.regimes.push_back(RegimePeriod{regime_start_[index], alert.t_ns, regime_dir_[index]});
    regime_start_[index] = -1;
  }
}

void ReplayRecorder::OnRefitRecord(int index, const RefitRecord& r) {
  if (models_ != nullptr) {
    const std::string line = EncodeRefitRecordJson(r);
    std::fwrite(line.data(), 1, line.size(), models_);
    std::fputc('\n', models_);
  }
  if (!collect_) return;
  ModelSwapRecord rec;
  rec.t_ns = r.t_ns;
  rec.version = r.version;
  rec.model = r.spec;
  rec.param_names = r.names;
  rec.values = r.values;
  rec.std_errors = r.std_errors;
  rec.loglik = r.loglik;
  // A group model (kPooled) is in force too; its note says where it came from.
  rec.accepted = r.outcome == RefitOutcome::kSwapped || r.outcome == RefitOutcome::kPooled;
  for (size_t i = 0; i < r.reasons.size(); ++i) {
    rec.gate_reason += (i ? "; " : "") + r.reasons[i];
  }
  if (!rec.accepted && rec.gate_reason.empty()) rec.gate_reason = r.note;
  histories_[index].swaps.push_back(std::move(rec));
}

void ReplayRecorder::Finish(const IngestCore& core) {
  for (size_t i = 0; i < histories_.size(); ++i) {
    SymbolHistory& h = histories_[i];
    if (regime_start_[i] >= 0 && !h.t_ns.empty()) {
      h.regimes.push_back(RegimePeriod{regime_start_[i], h.t_ns.back(), regime_dir_[i]});
      regime_start_[i] = -1;
    }
    auto law = InnovationLaw::FromParams(core.model(static_cast<int>(i)).params());
    if (law.ok()) h.law = *law;
    const SeasonalProfile* prof = core.seasonal_profile(static_cast<int>(i));
    h.seasonal_factors = prof != nullptr ? prof->factors() : std::vector<double>{};
    h.tracking = TrackedParametersOf(core, static_cast<int>(i));
    if (h.tracking) h.tracking->instability_alerts = instability_alerts_[i];
  }
}

namespace {

nlohmann::json LossJson(const ForecastLoss& l) {
  return {{"target", l.target},
          {"n", l.n},
          {"qlike", JsonNumber(l.qlike)},
          {"qlike_normalized", JsonNumber(l.qlike_normalized)},
          {"qlike_normalized_bars", l.n_normalized},
          {"mse", JsonNumber(l.mse)},
          {"mincer_zarnowitz",
           {{"intercept", JsonNumber(l.mz.intercept)},
            {"slope", JsonNumber(l.mz.slope)},
            {"r_squared", JsonNumber(l.mz.r_squared)},
            {"intercept_se", JsonNumber(l.mz.intercept_se)},
            {"slope_se", JsonNumber(l.mz.slope_se)},
            {"intercept_se_robust", JsonNumber(l.mz.intercept_se_robust)},
            {"slope_se_robust", JsonNumber(l.mz.slope_se_robust)}}}};
}

nlohmann::json PitJson(const PitTest& t) {
  return {{"bars", t.n},
          {"counts", t.counts},
          {"chi_square", JsonNumber(t.chi2)},
          {"chi_square_dof", t.chi2_dof},
          {"chi_square_p", JsonNumber(t.chi2_p)},
          {"ks_distance", JsonNumber(t.ks_d)},
          {"ks_p", JsonNumber(t.ks_p)}};
}

nlohmann::json TimeOfDayJson(const SymbolHistory& h, const TimeOfDay& tod) {
  nlohmann::json segs = nlohmann::json::array();
  for (const TimeOfDaySegment& g : tod.segments) {
    nlohmann::json exc = nlohmann::json::object();
    for (size_t k = 0; k < h.risk_levels.size() && k < g.exceptions.size(); ++k) {
      exc[absl::StrFormat("%g", h.risk_levels[k])] = {
          {"exceptions", g.exceptions[k]},
          {"eligible", g.eligible[k]},
          {"expected", JsonNumber((1.0 - h.risk_levels[k]) * static_cast<double>(g.eligible[k]))}};
    }
    segs.push_back({{"first_bar", g.first_bar},
                    {"last_bar", g.last_bar},
                    {"bars", g.bars},
                    {"mean_z2", JsonNumber(g.mean_z2)},
                    {"profile_s2", JsonNumber(g.profile_s2)},
                    {"by_level", exc}});
  }
  return {{"session_bars", tod.session_bars},
          {"profile", tod.profile},
          {"deseasonalized_only", tod.deseasonalized_only},
          {"segments", segs}};
}

nlohmann::json RefitsJson(const SymbolHistory& h, const SymbolEvaluation& ev) {
  nlohmann::json reasons = nlohmann::json::object();
  for (const auto& [reason, count] : ev.swaps.reject_reasons) reasons[reason] = count;
  nlohmann::json records = nlohmann::json::array();
  for (const ModelSwapRecord& s : h.swaps) {
    nlohmann::json est = nlohmann::json::object(), se = nlohmann::json::object();  // se: Hessian
    for (size_t k = 0; k < s.param_names.size() && k < s.values.size(); ++k) {
      est[s.param_names[k]] = JsonNumber(s.values[k]);
      if (k < s.std_errors.size()) se[s.param_names[k]] = JsonNumber(s.std_errors[k]);
    }
    records.push_back({{"t_ns", s.t_ns},
                       {"model", s.model},
                       {"swapped", s.accepted},
                       {"version", s.version},
                       {"log_likelihood", JsonNumber(s.loglik)},
                       {"estimates", est},
                       {"se_hessian", se},
                       {"gate", s.gate_reason}});
  }
  return {{"records", ev.swaps.attempts},  {"swapped", ev.swaps.accepted},
          {"rejected", ev.swaps.rejected}, {"last_version", ev.swaps.last_version},
          {"reject_reasons", reasons},     {"history", records}};
}

}  // namespace

absl::Status ReplayRecorder::WriteExceptionsCsv(const std::string& path,
                                                const EvaluationOptions& options) const {
  std::string text = "symbol,time,bar,return,limit,level\n";
  for (const SymbolHistory& h : histories_) {
    auto ev = EvaluateSymbol(h, options);
    if (!ev.ok()) continue;  // the summary and the report name the failure
    absl::StrAppend(&text, VarExceptionsCsv(h, *ev, /*header=*/false));
  }
  std::FILE* f = std::fopen(path.c_str(), "w");
  if (f == nullptr) {
    return absl::NotFoundError(absl::StrCat("cannot create '", path, "': ", std::strerror(errno)));
  }
  const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size();
  if (std::fclose(f) != 0 || !ok) {
    return absl::InternalError(absl::StrCat("cannot write '", path, "'"));
  }
  return absl::OkStatus();
}

nlohmann::json ReplayRecorder::SummaryJson(const EvaluationOptions& options) const {
  nlohmann::json out;
  nlohmann::json symbols = nlohmann::json::array();
  for (const SymbolHistory& h : histories_) {
    auto ev = EvaluateSymbol(h, options);
    if (!ev.ok()) {
      symbols.push_back({{"symbol", h.symbol}, {"error", std::string(ev.status().message())}});
      continue;
    }
    nlohmann::json levels = nlohmann::json::array();
    for (const LevelBacktest& b : ev->levels) {
      const ExceptionTests& t = b.tests;
      const TrafficLight& tl = b.traffic_light;
      levels.push_back(
          {{"level", b.level},
           {"bars", t.n},
           {"exceptions", t.exceptions},
           {"expected_exceptions", JsonNumber(t.tail_prob * static_cast<double>(t.n))},
           {"rate", JsonNumber(t.rate)},
           {"kupiec_lr", JsonNumber(t.lr_pof)},
           {"kupiec_p", JsonNumber(t.p_pof)},
           {"transitions", {{"n00", t.n00}, {"n01", t.n01}, {"n10", t.n10}, {"n11", t.n11}}},
           {"christoffersen_lr", JsonNumber(t.lr_ind)},
           {"christoffersen_p", JsonNumber(t.p_ind)},
           {"conditional_coverage_lr", JsonNumber(t.lr_cc)},
           {"conditional_coverage_p", JsonNumber(t.p_cc)},
           {"zone", ZoneName(tl.zone)},
           {"zone_basis", ZoneBasisName(tl.basis)},
           {"zone_window_bars", tl.window},
           {"zone_window_days", tl.window_days},
           {"zone_window_exceptions", tl.window_exceptions},
           {"zone_yellow_from", tl.yellow_from},
           {"zone_red_from", tl.red_from},
           {"zone_windows", tl.n_windows},
           {"share_green", JsonNumber(tl.share_green)},
           {"share_yellow", JsonNumber(tl.share_yellow)},
           {"share_red", JsonNumber(tl.share_red)},
           {"es_ratio", JsonNumber(b.es_ratio)},
           {"es_n", b.es_n}});
    }
    nlohmann::json alerts = nlohmann::json::array();
    for (const AlertCount& a : ev->alerts) {
      alerts.push_back({{"kind", a.kind}, {"severity", a.severity}, {"count", a.count}});
    }
    nlohmann::json s = {{"symbol", ev->symbol},
                        {"bars", ev->bars},
                        {"evaluated", ev->evaluated},
                        {"warmup_bars", ev->warmup_bars},
                        {"fallback_bars", ev->fallback_bars},
                        {"vs_r2", LossJson(ev->vs_r2)},
                        {"var_backtests", levels},
                        {"z",
                         {{"mean", JsonNumber(ev->z.mean)},
                          {"variance", JsonNumber(ev->z.variance)},
                          {"skewness", JsonNumber(ev->z.skewness)},
                          {"excess_kurtosis", JsonNumber(ev->z.excess_kurtosis)},
                          {"max_abs", JsonNumber(ev->z.max_abs)}}},
                        {"pit", PitJson(ev->pit)},
                        {"alerts", alerts},
                        {"alerts_total", ev->alerts_total},
                        {"refits", RefitsJson(h, *ev)},
                        {"warnings", ev->warnings}};
    if (!ev->time_of_day.segments.empty()) s["time_of_day"] = TimeOfDayJson(h, ev->time_of_day);
    if (ev->vs_rv) s["vs_rv"] = LossJson(*ev->vs_rv);
    // The risk view of the report's overview: limits in force for the next
    // bar, the variance forecast, the regime and the model at the end.
    nlohmann::json next = nlohmann::json::object();
    for (size_t k = 0; k < h.risk_levels.size(); ++k) {
      const bool have = k < h.var_risk_next.size() && !h.var_risk_next[k].empty() &&
                        k < h.es_next.size() && !h.es_next[k].empty();
      next[absl::StrFormat("%g", h.risk_levels[k])] = {
          {"value_at_risk", have ? JsonNumber(h.var_risk_next[k].back()) : nlohmann::json()},
          {"es", have ? JsonNumber(h.es_next[k].back()) : nlohmann::json()}};
    }
    s["next_bar"] = next;
    s["var_next"] = h.var_next.empty() ? nlohmann::json() : JsonNumber(h.var_next.back());
    // The overview's "vol now": per bar, and annualized when the report is.
    const double vol = h.var_next.empty() ? NAN : std::sqrt(h.var_next.back());
    s["vol_next_per_bar"] = JsonNumber(vol);
    if (config_.outputs.periods_per_year > 0) {
      s["vol_next_annualized"] = JsonNumber(vol * std::sqrt(config_.outputs.periods_per_year));
    }
    s["innovation_law"] = h.law.kind() == Innovations::kStudentT
                              ? nlohmann::json{{"law", "student"}, {"nu", JsonNumber(h.law.nu())}}
                              : nlohmann::json{{"law", "gaussian"}};
    std::string regime = "none";
    if (!h.regimes.empty() && !h.t_ns.empty() && h.regimes.back().end_ns >= h.t_ns.back()) {
      regime = h.regimes.back().direction > 0 ? "high" : "low";
    }
    s["regime_at_end"] = regime;
    std::string model = "no fitted model";
    for (auto it = h.swaps.rbegin(); it != h.swaps.rend(); ++it) {
      if (it->accepted) {
        model = it->model;
        break;
      }
    }
    s["model_at_end"] = model;
    s["version_at_end"] = h.ver.empty() ? 0u : h.ver.back();  // the report's "last model version"
    if (h.tracking) s["tracking"] = TrackedParametersJson(*h.tracking);
    if (!h.t_ns.empty()) {
      s["first_bar_ns"] = h.t_ns.front();
      s["last_bar_ns"] = h.t_ns.back();
    }
    symbols.push_back(std::move(s));
  }
  // The report header: data period and the model mix at the end.
  int64_t first = 0, last = 0;
  std::map<std::string, int> mix;
  for (const SymbolHistory& h : histories_) {
    if (!h.t_ns.empty()) {
      first = first == 0 ? h.t_ns.front() : std::min(first, h.t_ns.front());
      last = std::max(last, h.t_ns.back());
    }
    std::string model = "no fitted model";
    for (auto it = h.swaps.rbegin(); it != h.swaps.rend(); ++it) {
      if (it->accepted) {
        model = it->model;
        break;
      }
    }
    ++mix[model];
  }
  if (last > 0) {
    out["first_bar_ns"] = first;
    out["last_bar_ns"] = last;
  }
  out["models_at_end"] = mix;
  out["zone_rule"] = {{"source",
                       "Basel Committee on Banking Supervision (1996), supervisory framework for "
                       "the use of backtesting in conjunction with the internal models approach"},
                      {"level", options.traffic_light_level},
                      {"window_bars", options.traffic_light_window},
                      {"window_days", options.zone_window_days},
                      {"yellow_from", options.yellow_from},
                      {"red_from", options.red_from},
                      {"yellow_probability", options.zone_yellow_probability},
                      {"red_probability", options.zone_red_probability}};
  out["symbols"] = std::move(symbols);
  out["caution"] =
      "Statistical estimates, not advice; follow your model-risk policy and applicable "
      "regulation.";
  return out;
}

absl::Status ReplayRecorder::WriteReport(const std::string& path, const ReportRunInfo& run) const {
  ReportInput in;
  in.run = run;
  in.symbols = histories_;
  in.options.periods_per_year = config_.outputs.periods_per_year;
  if (!config_.outputs.risk_levels.empty()) {
    bool has99 = false;
    for (double l : config_.outputs.risk_levels) has99 = has99 || std::fabs(l - 0.99) < 1e-12;
    in.options.var_level = has99 ? 0.99 : config_.outputs.risk_levels.front();
  }
  return WriteHtmlReport(in, path);
}

}  // namespace aftershock::app
