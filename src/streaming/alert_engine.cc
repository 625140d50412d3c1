#include <algorithm>
#include <cmath>
#include <cstdarg>
#include <cstdio>
#include <limits>

#include "absl/strings/str_cat.h"
#include "aftershock/alerts.h"

namespace aftershock {
namespace {

constexpr double kNsPerSecond = 1e9;

static_assert(sizeof(SymbolAlertState) <= 128, "per-symbol alert state must stay small (P5)");

int SymLen(const Symbol& s) { return static_cast<int>(s.size); }

// Formats into alert->message; never writes past the buffer, records the size.
__attribute__((format(printf, 2, 3))) void Format(Alert* a, const char* fmt, ...) {
  va_list args;
  va_start(args, fmt);
  const int n = std::vsnprintf(a->message, sizeof(a->message), fmt, args);
  va_end(args);
  const int cap = static_cast<int>(sizeof(a->message)) - 1;
  a->message_size = static_cast<uint16_t>(n < 0 ? 0 : std::min(n, cap));
}

// Reason text: cut to a length that leaves room for the rest of the sentence.
constexpr int kMaxReason = 120;
int ReasonLen(absl::string_view r) {
  return static_cast<int>(std::min<size_t>(r.size(), kMaxReason));
}

void AppendJsonString(absl::string_view s, std::string* out) {
  static constexpr char kHex[] = "0123456789abcdef";
  out->push_back('"');
  for (char c : s) {
    const unsigned char u = static_cast<unsigned char>(c);
    if (c == '"' || c == '\\') {
      out->push_back('\\');
      out->push_back(c);
    } else if (u < 0x20) {
      const char esc[6] = {'\\', 'u', '0', '0', kHex[u >> 4], kHex[u & 15]};
      out->append(esc, 6);
    } else {
      out->push_back(c);
    }
  }
  out->push_back('"');
}

void AppendJsonNumber(double v, std::string* out) {
  if (!std::isfinite(v)) {
    out->append("null");
    return;
  }
  char buf[32];
  const int n = std::snprintf(buf, sizeof(buf), "%.10g", v);
  out->append(buf, static_cast<size_t>(n));
}

}  // namespace

absl::string_view AlertKindName(AlertKind k) {
  switch (k) {
    case AlertKind::kShock:
      return "shock";
    case AlertKind::kRegime:
      return "regime";
    case AlertKind::kRegimeClear:
      return "regime_clear";
    case AlertKind::kPersistence:
      return "persistence";
    case AlertKind::kModel:
      return "model";
    case AlertKind::kFeed:
      return "feed";
  }
  return "unknown";
}

absl::string_view SeverityName(Severity s) {
  switch (s) {
    case Severity::kInfo:
      return "info";
    case Severity::kWarn:
      return "warn";
    case Severity::kCritical:
      return "critical";
  }
  return "unknown";
}

absl::string_view AlertRuleName(AlertRule r) {
  switch (r) {
    case AlertRule::kShock:
      return "shock";
    case AlertRule::kRegimeHigh:
      return "regime_high";
    case AlertRule::kRegimeLow:
      return "regime_low";
    case AlertRule::kNearIntegrated:
      return "near_integrated";
    case AlertRule::kGateFailed:
      return "gate_failed";
    case AlertRule::kGateRecovered:
      return "gate_recovered";
    case AlertRule::kFallbackEngaged:
      return "fallback_engaged";
    case AlertRule::kFallbackCleared:
      return "fallback_cleared";
    case AlertRule::kStale:
      return "stale";
    case AlertRule::kTicksResumed:
      return "ticks_resumed";
    case AlertRule::kInstability:
      return "instability";
    case AlertRule::kRejectBurst:
      return "reject_burst";
  }
  return "unknown";
}

void EncodeAlertJson(const Alert& a, std::string* out) {
  out->clear();
  out->append("{\"s\":");
  AppendJsonString(a.symbol.view(), out);
  char buf[32];
  const int n = std::snprintf(buf, sizeof(buf), "%lld", static_cast<long long>(a.t_ns));
  out->append(",\"t\":");
  out->append(buf, static_cast<size_t>(n));
  out->append(",\"kind\":");
  AppendJsonString(AlertKindName(a.kind), out);
  out->append(",\"rule\":");
  AppendJsonString(AlertRuleName(a.rule), out);
  out->append(",\"severity\":");
  AppendJsonString(SeverityName(a.severity), out);
  out->append(",\"value\":");
  AppendJsonNumber(a.value, out);
  out->append(",\"threshold\":");
  AppendJsonNumber(a.threshold, out);
  const int m = std::snprintf(buf, sizeof(buf), "%u", static_cast<unsigned>(a.ver));
  out->append(",\"ver\":");
  out->append(buf, static_cast<size_t>(m));
  out->append(",\"message\":");
  AppendJsonString(a.message_view(), out);
  out->push_back('}');
}

uint64_t AlertCounters::TotalEmitted() const {
  uint64_t t = 0;
  for (const auto& row : emitted)
    for (uint64_t v : row) t += v;
  return t;
}

uint64_t AlertCounters::TotalSuppressed() const {
  uint64_t t = 0;
  for (const auto& row : suppressed)
    for (uint64_t v : row) t += v;
  return t;
}

absl::StatusOr<std::unique_ptr<AlertEngine>> AlertEngine::Create(const AlertOptions& o) {
  auto finite = [](double v) { return std::isfinite(v); };
  if (!finite(o.shock_z) || !(o.shock_z > 0)) {
    return absl::InvalidArgumentError(
        absl::StrCat("shock_z must be a positive number, got ", o.shock_z));
  }
  if (!finite(o.shock_critical_z) || !(o.shock_critical_z >= o.shock_z)) {
    return absl::InvalidArgumentError(absl::StrCat("shock_critical_z (", o.shock_critical_z,
                                                   ") must be >= shock_z (", o.shock_z, ")"));
  }
  if (!finite(o.shock_info_z) || o.shock_info_z < 0 ||
      (o.shock_info_z > 0 && !(o.shock_info_z < o.shock_z))) {
    return absl::InvalidArgumentError(absl::StrCat(
        "shock_info_z must be 0 (off) or in (0, shock_z = ", o.shock_z, "), got ", o.shock_info_z));
  }
  if (o.cooldown_bars < 0) {
    return absl::InvalidArgumentError(
        absl::StrCat("cooldown_bars must be >= 0, got ", o.cooldown_bars));
  }
  if (!finite(o.cooldown_seconds) || o.cooldown_seconds < 0 || o.cooldown_seconds > 1e9) {
    return absl::InvalidArgumentError(
        absl::StrCat("cooldown_seconds must be in [0, 1e9], got ", o.cooldown_seconds));
  }
  if (!finite(o.persistence_threshold) || !(o.persistence_threshold > 0) ||
      !(o.persistence_threshold < 1)) {
    return absl::InvalidArgumentError(
        absl::StrCat("persistence_threshold must be in (0, 1), got ", o.persistence_threshold));
  }
  if (o.refit_failures < 1) {
    return absl::InvalidArgumentError(
        absl::StrCat("refit_failures must be >= 1, got ", o.refit_failures));
  }
  if (!finite(o.stale_seconds) || !(o.stale_seconds > 0)) {
    return absl::InvalidArgumentError(
        absl::StrCat("stale_seconds must be a positive number, got ", o.stale_seconds));
  }
  if (!finite(o.stale_gap_multiple) || o.stale_gap_multiple < 0 || o.stale_gap_multiple > 1e6) {
    return absl::InvalidArgumentError(absl::StrCat(
        "stale_gap_multiple must be in [0, 1e6] (0 = off), got ", o.stale_gap_multiple));
  }
  if (o.reject_burst < 1) {
    return absl::InvalidArgumentError(
        absl::StrCat("reject_burst must be >= 1, got ", o.reject_burst));
  }
  // The bucket width must be at least 1 ns.
  if (!finite(o.reject_window_seconds) ||
      !(o.reject_window_seconds * kNsPerSecond >= kRejectBuckets) ||
      o.reject_window_seconds > 1e9) {
    return absl::InvalidArgumentError(absl::StrCat(
        "reject_window_seconds must be in [6e-8, 1e9] seconds, got ", o.reject_window_seconds));
  }
  RegimeOptions ro;
  ro.scale = o.regime_scale;
  ro.enter = o.regime_enter_evidence;
  ro.exit = o.regime_exit_evidence;
  ro.tail_nu = o.regime_tail_nu;
  ro.warmup_bars = o.regime_warmup_bars;
  auto det = RegimeDetector::Create(ro);
  if (!det.ok()) return det.status();
  return std::unique_ptr<AlertEngine>(new AlertEngine(o, *det));
}

AlertEngine::AlertEngine(const AlertOptions& options, const RegimeDetector& detector)
    : options_(options),
      detector_(detector),
      cooldown_ns_(static_cast<int64_t>(std::llround(options.cooldown_seconds * kNsPerSecond))),
      bucket_ns_(std::max<int64_t>(
          1, static_cast<int64_t>(options.reject_window_seconds * kNsPerSecond / kRejectBuckets))) {
}

void AlertEngine::Count(AlertKind kind, Severity severity, bool emitted) {
  auto& table = emitted ? counters_.emitted : counters_.suppressed;
  ++table[static_cast<int>(kind)][static_cast<int>(severity)];
}

void AlertEngine::Send(Alert* a, AlertSink* sink) {
  Count(a->kind, a->severity, true);
  sink->Emit(*a);
}

void AlertEngine::OnBar(const BarUpdate& bar, SymbolAlertState* st, AlertSink* sink) {
  const int64_t idx = st->bars++;
  // Stale bars (silent intervals before them) and clock-closed bars are ordinary.
  if (bar.flags & kFlagFirstBar) return;
  const bool withheld = (bar.flags & kFlagWarmup) && !options_.alert_during_warmup;

  const RegimeEvent ev = detector_.Update(bar.z, &st->regime);
  if (ev != RegimeEvent::kNone) {
    const bool high = ev == RegimeEvent::kEnterHigh || ev == RegimeEvent::kClearHigh;
    const bool entry = ev == RegimeEvent::kEnterHigh || ev == RegimeEvent::kEnterLow;
    const AlertKind kind = entry ? AlertKind::kRegime : AlertKind::kRegimeClear;
    const Severity sev = entry && high ? Severity::kWarn : Severity::kInfo;
    bool send;
    if (entry) {
      const bool cooling = st->regime_alert_bar >= 0 && options_.cooldown_bars > 0 &&
                           idx - st->regime_alert_bar < options_.cooldown_bars;
      send = !withheld && !cooling;
      st->regime_published = send;
    } else {
      send = st->regime_published;
      st->regime_published = false;
    }
    if (!send) {
      Count(kind, sev, false);
    } else {
      Alert* a = &scratch_;
      a->symbol = bar.symbol;
      a->t_ns = bar.t_ns;
      a->kind = kind;
      a->rule = high ? AlertRule::kRegimeHigh : AlertRule::kRegimeLow;
      a->severity = sev;
      // The version of the model whose forecasts the evidence compares against
      // (the alert is reused: a field not set here would be the last alert's).
      a->ver = bar.ver;
      const RegimeState& rs = st->regime;
      const char* name = bar.symbol.data;
      const int len = SymLen(bar.symbol);
      switch (ev) {
        case RegimeEvent::kEnterHigh:
          a->value = rs.up;
          a->threshold = options_.regime_enter_evidence;
          Format(a,
                 "%.*s: volatility regime up, over the last %lld bars squared moves averaged %.2f "
                 "times the model's variance forecast (evidence %.1f, enters at %g); expect wider "
                 "ranges than "
                 "forecast and review position sizes.",
                 len, name, static_cast<long long>(rs.up_bars), rs.up_ratio(), a->value,
                 a->threshold);
          break;
        case RegimeEvent::kEnterLow:
          a->value = rs.down;
          a->threshold = options_.regime_enter_evidence;
          Format(a,
                 "%.*s: volatility regime down, over the last %lld bars squared moves averaged "
                 "%.2f times the model's variance forecast (evidence %.1f, enters at %g); limits "
                 "set on the forecast may "
                 "be loose, review them if it lasts.",
                 len, name, static_cast<long long>(rs.down_bars), rs.down_ratio(), a->value,
                 a->threshold);
          break;
        case RegimeEvent::kClearHigh:
        case RegimeEvent::kClearLow:
          a->value = rs.back;
          a->threshold = options_.regime_exit_evidence;
          Format(a,
                 "%.*s: %s-volatility regime ended, moves are back in line with the model's "
                 "variance forecast (evidence %.1f, clears at %g); no action needed.",
                 len, name, ev == RegimeEvent::kClearHigh ? "high" : "low", a->value, a->threshold);
          break;
        case RegimeEvent::kNone:
          break;
      }
      st->regime_alert_bar = idx;
      Send(a, sink);
    }
  }

  // Shock rule.
  const double az = std::fabs(bar.z);
  if (!std::isfinite(az)) return;
  Severity sev;
  double thr;
  if (az >= options_.shock_critical_z) {
    sev = Severity::kCritical;
    thr = options_.shock_critical_z;
  } else if (az >= options_.shock_z) {
    sev = Severity::kWarn;
    thr = options_.shock_z;
  } else if (options_.shock_info_z > 0 && az >= options_.shock_info_z) {
    sev = Severity::kInfo;
    thr = options_.shock_info_z;
  } else {
    return;
  }
  const bool cooling =
      st->shock_bar >= 0 &&
      ((options_.cooldown_bars > 0 && idx - st->shock_bar <= options_.cooldown_bars) ||
       (cooldown_ns_ > 0 && bar.t_ns - st->shock_t_ns < cooldown_ns_));
  if (withheld || (cooling && sev <= st->shock_severity)) {
    Count(AlertKind::kShock, sev, false);
    return;
  }
  Alert* a = &scratch_;
  a->symbol = bar.symbol;
  a->t_ns = bar.t_ns;
  a->kind = AlertKind::kShock;
  a->rule = AlertRule::kShock;
  a->severity = sev;
  a->value = bar.z;
  a->threshold = thr;
  a->ver = bar.ver;
  Format(a,
         "%.*s: return shock of %.1f standard deviations (%s at %g); check news and position "
         "limits.",
         SymLen(bar.symbol), bar.symbol.data, bar.z, SeverityName(sev).data(), thr);
  st->shock_bar = idx;
  st->shock_t_ns = bar.t_ns;
  st->shock_severity = sev;
  Send(a, sink);
}

void AlertEngine::OnModelSwap(const Symbol& symbol, int64_t t_ns, uint32_t version,
                              double persistence, SymbolAlertState* st, AlertSink* sink) {
  if (!std::isfinite(persistence)) return;
  if (persistence < options_.persistence_threshold) {
    st->near_integrated = false;
    return;
  }
  if (st->near_integrated) {
    Count(AlertKind::kPersistence, Severity::kWarn, false);
    return;
  }
  st->near_integrated = true;
  Alert* a = &scratch_;
  a->symbol = symbol;
  a->t_ns = t_ns;
  a->kind = AlertKind::kPersistence;
  a->rule = AlertRule::kNearIntegrated;
  a->severity = Severity::kWarn;
  a->value = persistence;
  a->threshold = options_.persistence_threshold;
  a->ver = version;
  Format(a,
         "%.*s: model version %u has persistence %.4f (warn at %g), so shocks fade very slowly; "
         "treat long-horizon forecasts with caution.",
         SymLen(symbol), symbol.data, static_cast<unsigned>(version), persistence,
         options_.persistence_threshold);
  Send(a, sink);
}

void AlertEngine::OnRefitOutcome(const Symbol& symbol, int64_t t_ns, const GateEvent& o,
                                 SymbolAlertState* st, AlertSink* sink) {
  Alert* a = &scratch_;
  a->symbol = symbol;
  a->t_ns = t_ns;
  a->kind = AlertKind::kModel;
  a->ver = 0;
  a->threshold = options_.refit_failures;
  if (o.passed) {
    if (!st->gate_alerted) return;
    a->rule = AlertRule::kGateRecovered;
    a->severity = Severity::kInfo;
    a->value = st->gate_failures;
    Format(a, "%.*s: refit passed the quality gate again after %d failures; no action needed.",
           SymLen(symbol), symbol.data, st->gate_failures);
    st->gate_alerted = false;
    st->gate_failures = 0;
    Send(a, sink);
    return;
  }
  st->gate_failures = o.consecutive_failures;
  if (o.consecutive_failures < options_.refit_failures) return;
  if (st->gate_alerted) {
    Count(AlertKind::kModel, Severity::kWarn, false);
    return;
  }
  st->gate_alerted = true;
  a->rule = AlertRule::kGateFailed;
  a->severity = Severity::kWarn;
  a->value = o.consecutive_failures;
  const absl::string_view reason = o.reason.empty() ? "no reason given" : o.reason;
  Format(a,
         "%.*s: refit failed the quality gate %d times in a row (last: %.*s); the current model "
         "stays in use, review the fit report.",
         SymLen(symbol), symbol.data, o.consecutive_failures, ReasonLen(reason), reason.data());
  Send(a, sink);
}

void AlertEngine::OnInstability(const Symbol& symbol, int64_t t_ns, uint32_t version,
                                double statistic, double threshold, AlertSink* sink) {
  Alert* a = &scratch_;
  a->symbol = symbol;
  a->t_ns = t_ns;
  a->kind = AlertKind::kModel;
  a->rule = AlertRule::kInstability;
  a->severity = Severity::kWarn;
  a->ver = version;
  a->value = statistic;
  a->threshold = threshold;
  Format(a,
         "%.*s: parameter instability statistic %.1f reached %.1f: model v%u no longer fits the "
         "recent bars (tracked parameters on m.%.*s); the next refit should replace it.",
         SymLen(symbol), symbol.data, statistic, threshold, static_cast<unsigned>(version),
         SymLen(symbol), symbol.data);
  Send(a, sink);
}

void AlertEngine::OnFallback(const Symbol& symbol, int64_t t_ns, bool engaged, uint32_t version,
                             absl::string_view reason, SymbolAlertState* st, AlertSink* sink) {
  if (engaged == st->fallback) {
    // Engaged again while engaged is a repeat; cleared while not engaged is a no-op.
    if (engaged) Count(AlertKind::kModel, Severity::kCritical, false);
    return;
  }
  st->fallback = engaged;
  Alert* a = &scratch_;
  a->symbol = symbol;
  a->t_ns = t_ns;
  a->kind = AlertKind::kModel;
  a->ver = version;
  a->value = engaged ? 1 : 0;
  a->threshold = 1;
  if (engaged) {
    a->rule = AlertRule::kFallbackEngaged;
    a->severity = Severity::kCritical;
    const absl::string_view r = reason.empty() ? "no reason given" : reason;
    Format(a,
           "%.*s: EWMA fallback engaged (%.*s); forecasts are rough until a refit passes, reduce "
           "reliance on them.",
           SymLen(symbol), symbol.data, ReasonLen(r), r.data());
  } else {
    a->rule = AlertRule::kFallbackCleared;
    a->severity = Severity::kInfo;
    Format(a, "%.*s: EWMA fallback cleared, model version %u is in use again; no action needed.",
           SymLen(symbol), symbol.data, static_cast<unsigned>(version));
  }
  Send(a, sink);
}

double AlertEngine::StaleThresholdSeconds(const SymbolAlertState& st) const {
  return std::max(options_.stale_seconds, options_.stale_gap_multiple * st.tick_gap_s);
}

int64_t AlertEngine::StaleDueNs(const SymbolAlertState& st, int64_t count_from_ns) const {
  constexpr int64_t kNever = std::numeric_limits<int64_t>::max();
  if (st.last_tick_ns == 0 || st.stale_alerted) return kNever;
  const int64_t since = std::max(st.last_tick_ns, count_from_ns);
  // CheckStale fires when double(now - since) / 1e9 >= threshold. The
  // roundings here and there stay below 2 us for any int64 clock (half an ulp
  // of 2^63 ns is 1 us), inside the margin, so no earlier time passes the test.
  constexpr double kMarginNs = 4000;
  const double after_ns = StaleThresholdSeconds(st) * kNsPerSecond - kMarginNs;
  if (!(after_ns > 0)) return since;
  const double due = static_cast<double>(since) + after_ns;
  if (due >= 9223372036854775808.0) return kNever;  // 2^63: no int64 clock gets there
  return static_cast<int64_t>(due);
}

void AlertEngine::CheckStale(const Symbol& symbol, const FeedCheck& f, SymbolAlertState* st,
                             AlertSink* sink) {
  if (f.last_tick_ns != 0 && f.last_tick_ns != st->last_tick_ns) {
    // Data arrived since the previous check: learn the rate, end an episode.
    const int64_t prev = st->last_tick_ns;
    const uint64_t k = f.ticks > st->ticks_seen ? f.ticks - st->ticks_seen : 1;
    // The in-session span the k new gaps cover; unknown for the first tick
    // ever when all time counts (no session start to measure from).
    const int64_t from = std::max(prev, f.count_from_ns);
    const bool measurable = f.in_session &&
                            (prev != 0 || f.count_from_ns != std::numeric_limits<int64_t>::min()) &&
                            f.last_tick_ns > from && options_.stale_gap_multiple > 0;
    if (measurable && (!st->stale_alerted || st->gap_samples == 0)) {
      const double kd = static_cast<double>(k);
      const double mean_gap = static_cast<double>(f.last_tick_ns - from) / kNsPerSecond / kd;
      // k gaps of the batch mean: the plain mean of all gaps so far while it
      // weighs the new ones more, then exponential weights (half-life in ticks).
      const double w = std::max(kd / (static_cast<double>(st->gap_samples) + kd),
                                1.0 - std::exp2(-kd / kTickGapHalflifeTicks));
      st->tick_gap_s += w * (mean_gap - st->tick_gap_s);
      const uint64_t n = st->gap_samples + k;
      st->gap_samples = static_cast<uint32_t>(std::min<uint64_t>(n, UINT32_MAX));
    }
    st->last_tick_ns = f.last_tick_ns;
    st->ticks_seen = f.ticks;
    if (st->stale_alerted) {
      st->stale_alerted = false;
      Alert* a = &scratch_;
      a->symbol = symbol;
      a->t_ns = f.now_ns;
      a->kind = AlertKind::kFeed;
      a->rule = AlertRule::kTicksResumed;
      a->severity = Severity::kInfo;
      a->value = static_cast<double>(std::max<int64_t>(0, f.last_tick_ns - st->stale_since_ns)) /
                 kNsPerSecond;
      a->threshold = StaleThresholdSeconds(*st);
      a->ver = 0;
      if (f.count_from_ns > st->stale_since_ns) {
        // The silence went on past the end of its session.
        Format(a,
               "%.*s: ticks resumed; silent since an earlier session (%.0f s ago, closed hours "
               "included); no action needed.",
               SymLen(symbol), symbol.data, a->value);
      } else {
        Format(a, "%.*s: ticks resumed after %.0f s without data; no action needed.",
               SymLen(symbol), symbol.data, a->value);
      }
      Send(a, sink);
    }
  }
  if (st->last_tick_ns == 0 || !f.in_session || st->stale_alerted) return;
  const int64_t since = std::max(st->last_tick_ns, f.count_from_ns);
  const double silence = static_cast<double>(f.now_ns - since) / kNsPerSecond;
  const double threshold = StaleThresholdSeconds(*st);
  if (!(silence >= threshold)) return;
  st->stale_alerted = true;
  st->stale_since_ns = since;
  Alert* a = &scratch_;
  a->symbol = symbol;
  a->t_ns = f.now_ns;
  a->kind = AlertKind::kFeed;
  a->rule = AlertRule::kStale;
  a->severity = Severity::kWarn;
  a->value = silence;
  a->threshold = threshold;
  a->ver = 0;
  if (threshold > options_.stale_seconds) {
    Format(a,
           "%.*s: no tick for %.0f s inside the session (stale after %.0f s, %g times its "
           "typical gap of %.1f s); check the feed for this symbol.",
           SymLen(symbol), symbol.data, silence, threshold, options_.stale_gap_multiple,
           st->tick_gap_s);
  } else {
    Format(a,
           "%.*s: no tick for %.0f s inside the session (stale after %g s); check the feed for "
           "this symbol.",
           SymLen(symbol), symbol.data, silence, options_.stale_seconds);
  }
  Send(a, sink);
}

void AlertEngine::OnRejectedTick(int64_t now_ns, AlertSink* sink) {
  const int64_t b = now_ns / bucket_ns_;
  if (b > reject_bucket_) {
    const int64_t steps = b - reject_bucket_;
    if (steps >= kRejectBuckets) {
      std::fill(std::begin(reject_counts_), std::end(reject_counts_), 0);
      reject_window_ = 0;
    } else {
      for (int64_t i = 1; i <= steps; ++i) {
        uint64_t& slot = reject_counts_[(reject_bucket_ + i) % kRejectBuckets];
        reject_window_ -= slot;
        slot = 0;
      }
    }
    reject_bucket_ = b;
  }
  // A late timestamp (b < reject_bucket_) is counted in the newest bucket.
  ++reject_counts_[reject_bucket_ % kRejectBuckets];
  ++reject_window_;
  if (reject_window_ < static_cast<uint64_t>(options_.reject_burst)) {
    reject_over_ = false;
    return;
  }
  if (reject_over_) return;  // the same burst
  reject_over_ = true;
  const int64_t window_ns = bucket_ns_ * kRejectBuckets;
  if (reject_alerted_ && now_ns - reject_alert_ns_ < window_ns) {
    Count(AlertKind::kFeed, Severity::kWarn, false);
    return;
  }
  reject_alerted_ = true;
  reject_alert_ns_ = now_ns;
  Alert* a = &scratch_;
  a->symbol.assign(kFeedSymbol);
  a->t_ns = now_ns;
  a->kind = AlertKind::kFeed;
  a->rule = AlertRule::kRejectBurst;
  a->severity = Severity::kWarn;
  a->value = static_cast<double>(reject_window_);
  a->threshold = static_cast<double>(options_.reject_burst);
  a->ver = 0;
  Format(a,
         "feed: %llu rejected ticks within %g s (warn at %lld); check the publisher's message "
         "format and the rejection counters by reason.",
         static_cast<unsigned long long>(reject_window_), options_.reject_window_seconds,
         static_cast<long long>(options_.reject_burst));
  Send(a, sink);
}

}  // namespace aftershock

namespace aftershock {

void SaveSymbolAlertState(const SymbolAlertState& s, StateWriter* w) {
  w->F64(s.regime.up);
  w->F64(s.regime.down);
  w->F64(s.regime.back);
  w->F64(s.regime.up_sum_z2);
  w->F64(s.regime.down_sum_z2);
  w->I32(s.regime.up_bars);
  w->I32(s.regime.down_bars);
  w->I32(s.regime.bars);
  w->U8(static_cast<uint8_t>(static_cast<int8_t>(s.regime.direction)));
  w->I64(s.bars);
  w->I64(s.shock_bar);
  w->I64(s.shock_t_ns);
  w->I64(s.regime_alert_bar);
  w->I64(s.last_tick_ns);
  w->U64(s.ticks_seen);
  w->F64(s.tick_gap_s);
  w->I64(s.stale_since_ns);
  w->U32(s.gap_samples);
  w->I32(s.gate_failures);
  w->U8(static_cast<uint8_t>(s.shock_severity));
  w->Bool(s.regime_published);
  w->Bool(s.near_integrated);
  w->Bool(s.gate_alerted);
  w->Bool(s.fallback);
  w->Bool(s.stale_alerted);
}

SymbolAlertState RestoreSymbolAlertState(StateReader* r, absl::string_view what) {
  SymbolAlertState s;
  const std::string f = absl::StrCat(what, " alert state");
  bool runs_ok = true;
  for (double* e : {&s.regime.up, &s.regime.down, &s.regime.back}) {
    *e = r->F64(f);
    runs_ok = runs_ok && *e >= 0 && std::isfinite(*e);
  }
  for (float* sum : {&s.regime.up_sum_z2, &s.regime.down_sum_z2}) {
    const double v = r->F64(f);
    runs_ok = runs_ok && v >= 0 && v <= std::numeric_limits<float>::max();
    *sum = runs_ok ? static_cast<float>(v) : 0.0f;
  }
  for (int32_t* n : {&s.regime.up_bars, &s.regime.down_bars}) {
    *n = r->I32(f);
    runs_ok = runs_ok && *n >= 0;
  }
  s.regime.bars = r->I32(f);
  const int8_t dir = static_cast<int8_t>(r->U8(f));
  s.bars = r->I64(f);
  s.shock_bar = r->I64(f);
  s.shock_t_ns = r->I64(f);
  s.regime_alert_bar = r->I64(f);
  s.last_tick_ns = r->I64(f);
  s.ticks_seen = r->U64(f);
  s.tick_gap_s = r->F64(f);
  s.stale_since_ns = r->I64(f);
  s.gap_samples = r->U32(f);
  s.gate_failures = r->I32(f);
  const uint8_t sev = r->U8(f);
  s.regime_published = r->Bool(f);
  s.near_integrated = r->Bool(f);
  s.gate_alerted = r->Bool(f);
  s.fallback = r->Bool(f);
  s.stale_alerted = r->Bool(f);
  if (!r->ok()) return s;
  if (dir < -1 || dir > 1 || sev >= kNumSeverities) {
    r->Fail(f, "unknown regime direction or severity");
  } else if (!runs_ok || s.regime.bars < 0 || !(s.tick_gap_s >= 0) ||
             !std::isfinite(s.tick_gap_s) || s.gate_failures < 0) {
    r->Fail(f, "a non-finite or negative statistic");
  }
  s.regime.direction = static_cast<RegimeDirection>(dir);
  s.shock_severity = static_cast<Severity>(sev);
  return s;
}

void AlertEngine::SaveState(StateWriter* w) const {
  for (int k = 0; k < kNumAlertKinds; ++k) {
    for (int v = 0; v < kNumSeverities; ++v) {
      w->U64(counters_.emitted[k][v]);
      w->U64(counters_.suppressed[k][v]);
    }
  }
  w->I64(bucket_ns_);
  w->I64(reject_bucket_);
  for (uint64_t c : reject_counts_) w->U64(c);
  w->U64(reject_window_);
  w->Bool(reject_over_);
  w->Bool(reject_alerted_);
  w->I64(reject_alert_ns_);
}

void AlertEngine::RestoreState(StateReader* r) {
  AlertCounters c;
  for (int k = 0; k < kNumAlertKinds; ++k) {
    for (int v = 0; v < kNumSeverities; ++v) {
      c.emitted[k][v] = r->U64("alert counters");
      c.suppressed[k][v] = r->U64("alert counters");
    }
  }
  const int64_t bucket_ns = r->I64("reject window bucket");
  const int64_t bucket = r->I64("reject window bucket");
  uint64_t counts[kRejectBuckets];
  uint64_t sum = 0;
  for (uint64_t& n : counts) {
    n = r->U64("reject window counts");
    sum += n;
  }
  const uint64_t window = r->U64("reject window count");
  const bool over = r->Bool("reject window state");
  const bool alerted = r->Bool("reject window state");
  const int64_t alert_ns = r->I64("reject window state");
  if (!r->ok()) return;
  if (sum != window) {
    r->Fail("reject window count", "differs from the sum of its buckets");
    return;
  }
  counters_ = c;
  if (bucket_ns != bucket_ns_) return;  // another window length: start empty
  reject_bucket_ = bucket;
  std::copy(counts, counts + kRejectBuckets, reject_counts_);
  reject_window_ = window;
  reject_over_ = over;
  reject_alerted_ = alerted;
  reject_alert_ns_ = alert_ns;
}

}  // namespace aftershock
