// EngineConfig: the engine's whole configuration, parsed from TOML and
// validated (PRODUCT.md C10). Every key has a default; unknown keys, wrong
// types and out-of-range values are errors naming the file, line, section and
// key, e.g.
//   config.toml:12: [bars] interval: expected a duration like "0s", "5s", "1m", got "abc"
// config/default.toml lists every key with its default and meaning.
//
// Thread-safety: plain value type; parse once, then share read-only.
#ifndef AFTERSHOCK_ENGINE_CONFIG_H_
#define AFTERSHOCK_ENGINE_CONFIG_H_

#include <cstdint>
#include <string>
#include <utility>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/alerts.h"
#include "aftershock/bar_builder.h"
#include "aftershock/model_params.h"
#include "aftershock/model_spec.h"
#include "aftershock/online_filter.h"
#include "aftershock/recursive_tracker.h"
#include "aftershock/seasonal_profile.h"
#include "aftershock/wire.h"

namespace aftershock {

// Where [feed] takes ticks from.
enum class FeedSource : uint8_t {
  kZmq = 0,   // "zmq": SUB socket connected to [feed] endpoints (one box)
  kNats = 1,  // "nats": the JetStream stream of [nats], the partitions this instance leases
};
absl::string_view FeedSourceName(FeedSource s);  // "zmq" | "nats"

// [publish] update_topics: the outbound forms of updates (update_batch.h).
enum class UpdateTopics : uint8_t {
  kSymbol = 0,  // "symbol": one message per update on "u.<symbol>"
  kBatch = 1,   // "batch": update batches on "b.u" only
  kBoth = 2,    // "both": both of the above
};
absl::string_view UpdateTopicsName(UpdateTopics t);  // "symbol" | "batch" | "both"

// [feed]: where ticks come from.
struct FeedConfig {
  FeedSource source = FeedSource::kZmq;  // default "zmq"
  // ZeroMQ endpoints the SUB socket connects to; default {"tcp://127.0.0.1:7301"}.
  std::vector<std::string> endpoints = {"tcp://127.0.0.1:7301"};
  WireEncoding encoding = WireEncoding::kJson;         // body encoding; default json
  size_t max_message_bytes = kDefaultMaxMessageBytes;  // larger bodies are rejected; 65536
  std::string curve_server_key;  // publisher's CURVE public key (Z85, 40 chars); "" = no CURVE
  // Low-latency mode (engine.h), microseconds: 0 (default) waits on the SUB
  // socket's descriptor; N > 0 makes the ingest thread poll the socket without
  // sleeping until N us pass without a message, then wait again. Costs one
  // core at 100 % while ticks arrive at least every N us. 0..3,600,000,000.
  int64_t busy_poll_us = 0;
};

// [publish]: where updates go.
struct PublishConfig {
  std::string endpoint = "tcp://127.0.0.1:7302";  // PUB binds here
  WireEncoding encoding = WireEncoding::kJson;    // update encoding; default json
  int64_t high_water_mark = 100000;  // messages queued per subscriber before drops; 100000
  std::string curve_secret_key;      // our CURVE secret key (Z85, 40 chars); "" = no CURVE
  // Per-symbol messages, batches on "b.u", or both (update_batch.h); default symbol.
  UpdateTopics update_topics = UpdateTopics::kSymbol;
  // A batch is sent before its body would pass this many bytes (an update
  // larger than that travels alone). 1024..16 MiB; default 65536.
  int64_t batch_max_bytes = 65536;
  // ... or hold more than this many updates. 1..65535; default 1024.
  int batch_max_updates = 1024;
};

// [nats]: scale-out on NATS JetStream (README "Scale-out"; config/nats-server.conf
// is the matching server configuration). Used by [feed] source = "nats",
// `aftershock simulate --nats` and `aftershock cluster`.
struct NatsConfig {
  // Server URLs the client connects to (any of them; it reconnects to the
  // others); default {"nats://127.0.0.1:4222"}.
  std::vector<std::string> servers = {"nats://127.0.0.1:4222"};
  // JetStream stream holding the ticks ([A-Za-z0-9_-]); created on first use
  // with subjects "<partition_subject>.>"; default "TICKS".
  std::string stream = "TICKS";
  // Producers publish a tick to "<subject>.<symbol token>" (subject_token.h);
  // default "ticks".
  std::string subject = "ticks";
  // The server's partition() mapping rewrites that to
  // "<partition_subject>.<partition>.<symbol token>"; default "ticks-p".
  std::string partition_subject = "ticks-p";
  // Number of partitions; must equal the first argument of partition() in the
  // server configuration. 1..1024; default 12.
  int partitions = 12;
  // A lease not renewed for this long expires and its partition may be taken
  // over, seconds; renewed every third of it. 1..3600; default 10.
  double lease_seconds = 10;
  // This engine's name in the lease bucket ([A-Za-z0-9_-], <= 64 bytes);
  // "" (default) = "<hostname>-<pid>".
  std::string instance;
  // Key-value bucket of the leases ([A-Za-z0-9_-]); created on first use with
  // a TTL of lease_seconds; default "aftershock_leases".
  std::string lease_bucket = "aftershock_leases";
  // When set, every update is also published as a core NATS message on
  // "<updates_subject>.<symbol token>" (same body as on ZeroMQ); "" (default) =
  // ZeroMQ only.
  std::string updates_subject;
  // Key-value bucket of the partitions' checkpoints (partition_checkpoints.h,
  // [A-Za-z0-9_-]); created on first use; default "aftershock_checkpoints".
  std::string checkpoint_bucket = "aftershock_checkpoints";
  // Wall-clock seconds between checkpoints of each held partition (and one
  // when a partition is handed over or the engine stops); 0 = only those.
  // 0..86400; default 30.
  double checkpoint_seconds = 30;
  // true: each partition applies a passed refit exactly apply_lag_bars bars
  // after it was scheduled (the replay hand-off; the ingest thread waits for
  // a late fit), so a partition taken over continues on the models it would
  // have had and its output equals a single-process replay. false: the live
  // hand-off (never waits; the swap bar depends on timing). Default true.
  bool exact_refits = true;
  // Copies JetStream keeps of the tick stream (when an engine creates it) and
  // of the lease and checkpoint buckets (when an engine creates them): 1 on a
  // single server; 3 on a 3-node cluster lets the data survive the loss of a
  // node. Fixed at creation, like the lease TTL. 1..5; default 1.
  int replicas = 1;
  // How long the tick stream drops a message whose Nats-Msg-Id it stored
  // before, seconds, set when an engine or publisher creates the stream. A
  // producer resending a tick whose acknowledgement was lost (simulate
  // --nats) relies on it and checks that its give-up time fits. Fixed at
  // creation. 1..86400; default 120 (JetStream's own default).
  double duplicate_window_seconds = 120;
};

// [bars]: aggregation of ticks into bars.
struct BarsConfig {
  int64_t interval_ns = 0;               // bar length, ns; 0 = one bar per message; default "0s"
  int64_t grace_ns = 200 * 1000 * 1000;  // idle bar closed this long after its end; "200ms"
  int64_t max_lateness_ns = 5 * kNanosPerSecond;  // tolerated reordering; default "5s"
  SessionWindow session;  // optional trading session; default: none (always open)

  BarOptions ToBarOptions() const { return BarOptions{interval_ns, max_lateness_ns, session}; }
  // Bar options of the engine: ToBarOptions plus the opening return of
  // [seasonality] (EngineConfig::ToBarOptions).
};

// Length of one trading session, ns (24 h when the session is disabled; a
// session over midnight counts end + 24 h - start).
int64_t SessionLengthNs(const SessionWindow& session);
// Bars in one session: ceil(SessionLengthNs / interval_ns) (a last, shorter
// bar clipped at the close counts). REQUIRES: interval_ns > 0.
int64_t BarsPerSession(const SessionWindow& session, int64_t interval_ns);
// periods_per_year = "auto": 252 trading days times the bars of one day,
// i.e. 252 * BarsPerSession(session, interval) (a day of 24 h without a
// session); interval 0 (one bar per tick) gives 252, each bar taken as a day.
// 1m bars: 128520 for an 08:00-16:30 session, 98280 for 6.5 h, 362880 for 24 h.
double AutoPeriodsPerYear(const BarsConfig& bars);

// [model] and [model.params]: the model every symbol starts with.
struct ModelConfig {
  ModelSpec spec;  // default constant mean, GARCH(1,1), Student-t innovations
  Presample presample = Presample::kMeanSquare;  // presample rule; default "mean-square"
  // Initial parameters from [model.params], validated against spec;
  // has_params == false means start in EWMA warm-up until the first fit.
  bool has_params = false;
  ModelParams params;
};

// [warmup]: the EWMA used before a model has been fitted.
struct WarmupConfig {
  double ewma_lambda = 0.94;  // decay of the warm-up EWMA, in (0,1); default 0.94
  int min_bars = 2;           // bars before z is published without the first-bar flag; 2
  // Returns of a symbol collected before its warm-up EWMA starts, at the
  // robust variance (1.4826 * median |r|)^2 of those returns; they publish
  // nothing. 1 = start at the square of the first non-zero return. 1..kMax;
  // default 10.
  int start_bars = 10;
};
// Largest [warmup] start_bars (the per-symbol buffer is this many doubles at most).
inline constexpr int kMaxWarmupStartBars = 64;

enum class ReturnUnits { kFraction, kPercent };
absl::string_view ReturnUnitsName(ReturnUnits u);  // "fraction" | "percent"

// [outputs]: what each update carries.
struct OutputsConfig {
  std::vector<int> horizons = {1, 5, 20};           // bars ahead for var_h; <= kMaxHorizons entries
  std::vector<double> risk_levels = {0.99, 0.975};  // VaR/ES levels in (0.5,1); <= 4
  // Bars per year for annualization, > 0. Always the value in use: with
  // periods_per_year_auto it is AutoPeriodsPerYear([bars]), set by
  // ParseEngineConfig (code that builds a config by hand and changes [bars]
  // calls ResolveAutoSettings). Default auto (252 for the default "0s" bars).
  double periods_per_year = 252;
  bool periods_per_year_auto = true;  // "auto" in the file (the default); false: a number
  ReturnUnits return_units = ReturnUnits::kFraction;  // units of the feed's returns
  // Target annualized volatility for the sizing scale, in the same units as
  // the annualized returns (0.10 = 10 % for fractions; 10 for per cent).
  double target_vol_ann = 0.10;
  double scale_cap = 3.0;  // upper bound of the sizing scale; default 3

  // The filter's view of these settings.
  OutputOptions ToOutputOptions() const {
    OutputOptions o;
    o.horizons = horizons;
    o.risk_levels = risk_levels;
    o.periods_per_year = periods_per_year;
    o.target_vol_ann = target_vol_ann;
    o.scale_cap = scale_cap;
    return o;
  }
};

// [limits]
struct LimitsConfig {
  int64_t max_symbols = 10000;  // new symbols beyond this are rejected (symbol_limit)
};

// [refit]: background re-estimation (PRODUCT.md C5).
struct RefitConfig {
  // Refit a symbol every N bars; 0 = off. Default 100: about a quarter of a
  // 6.5 h session of 1-minute bars, so models follow the day at a few ms each.
  int64_t every_bars = 100;
  double every_seconds = 0;         // and/or every T seconds of wall clock; 0 = off
  int window = 2000;                // rolling window of returns, bars; default 2000
  // Bars needed before the first fit (<= window, > holdout_bars). Default 200:
  // 40 bars per parameter of a GARCH(1,1)-t, and a first model within the
  // first session of 1-minute bars (390-510 bars a day).
  int min_bars = 200;
  int workers = 1;                  // worker threads; default 1
  int reidentify_every = 10;        // run the full identification every k-th refit; 0 = never
  double max_persistence = 0.9995;  // gate: fits above this persistence are refused
  int holdout_bars = 100;           // recent bars used to compare new vs current model
  double holdout_margin = 0.05;     // nats per bar the new model may be worse by
  int max_failures = 3;             // consecutive failed fits before the EWMA fallback
  int apply_lag_bars = 1;           // a passed fit is swapped in this many bars later (replay)
  double jitter_fraction = 0.1;     // spreads schedules: +-fraction of the period
  int queue_capacity = 1024;        // pending refit jobs; beyond it a job is skipped
  double diagnostics_level = 0.01;  // significance level of the diagnostic gate tests
  // A symbol without a passed fit of its own takes its group's latest passed
  // model (dynamics only, at its own variance level), flagged `pooled`, until
  // its own fit passes. Group: its [alerts.groups.*] group, else all symbols.
  // Not used with [model.params]. Default true.
  bool group_models = true;
};

// [seasonality]: intraday time-of-day volatility profile (PRODUCT.md C9;
// seasonal_profile.h for the method).
enum class SeasonalSwitch { kAuto, kOn, kOff };
enum class OpeningReturn { kSkip, kScaled };
absl::string_view OpeningReturnName(OpeningReturn o);  // "skip" | "scaled"

struct SeasonalityConfig {
  // "auto" (default): on when [bars] has a session and interval > 0; true: on
  // (needs interval > 0; without a session the profile spans the local day);
  // false: off.
  SeasonalSwitch enabled = SeasonalSwitch::kAuto;
  SeasonalMethod method = SeasonalMethod::kLocalLinear;  // "local-linear" | "fourier"
  // Sessions of a symbol's own history before its own profile is used; 3.
  int min_sessions = 3;
  // local-linear: kernel bandwidth in bars; fourier: the order; 0 = automatic
  // (K/40 bars, at least 1.5; order 4). Default 0.
  double smoothing = 0;
  // Weight, in sessions, of the pooled profile a symbol's own one is shrunk
  // toward; 0 = no pooling. Default 5.
  double prior_sessions = 5;
  // The first return of a session, which spans the night: "skip" (default; the
  // first bar of a session has no return) or "scaled" (log(first close /
  // previous session's last close), filtered divided by the square root of its
  // own estimated variance multiplier; skipped until one is estimated).
  // "scaled" needs seasonality on.
  OpeningReturn opening_return = OpeningReturn::kSkip;

  // Whether seasonality is on for these bars.
  bool Active(const BarsConfig& bars) const {
    if (enabled == SeasonalSwitch::kOff || bars.interval_ns <= 0) return false;
    return enabled == SeasonalSwitch::kOn || bars.session.enabled;
  }
  // Bars per session K for these bars (the local day without a session).
  // REQUIRES: bars.interval_ns > 0.
  static int64_t BarsPerSession(const BarsConfig& bars);
  // The estimator's options. REQUIRES: Active(bars).
  SeasonalOptions ToOptions(const BarsConfig& bars) const;
};

// [alerts]: alert rule thresholds (PRODUCT.md C7), one key per AlertOptions
// field (alerts.h has each field's meaning, unit and range; the defaults here
// equal AlertOptions' own, which a test checks).
struct AlertsConfig {
  double shock_z = 4.0;                  // |z| at or above this raises a warn shock alert
  double shock_critical_z = 6.0;         // |z| at or above this is critical; >= shock_z
  double shock_info_z = 0.0;             // info tier; 0 = off, else in (0, shock_z)
  int cooldown_bars = 20;                // bars of shock cool-down and regime re-entry cool-down
  double cooldown_seconds = 0.0;         // seconds of shock cool-down on bar time; 0 = off
  double regime_scale = 3.0;             // variance multiple the regime tests look for; > 1
  double regime_enter_evidence = 10.0;   // nats of evidence that enter a regime; > 0
  double regime_exit_evidence = 6.0;     // nats of evidence that end a regime; > 0
  double regime_tail_nu = 5.0;           // t law of z the regime tests assume; 0 = normal, > 2
  int64_t regime_warmup_bars = 50;       // bars before the regime statistics start
  double persistence_threshold = 0.995;  // near-integrated persistence alert
  int refit_failures = 3;                // failed gates in a row that raise a model alert
  double stale_seconds = 60;             // floor of the stale threshold, seconds in session
  double stale_gap_multiple = 10;        // stale also needs this x the typical gap; 0 = off
  int64_t reject_burst = 100;            // rejected ticks within the window: feed alert
  double reject_window_seconds = 60;     // sliding window of the reject count, seconds
  bool alert_during_warmup = false;      // warm-up bars may raise shock and regime alerts

  // The rules engine's view of these settings.
  AlertOptions ToAlertOptions() const {
    AlertOptions o;
    o.shock_z = shock_z;
    o.shock_critical_z = shock_critical_z;
    o.shock_info_z = shock_info_z;
    o.cooldown_bars = cooldown_bars;
    o.cooldown_seconds = cooldown_seconds;
    o.regime_scale = regime_scale;
    o.regime_enter_evidence = regime_enter_evidence;
    o.regime_exit_evidence = regime_exit_evidence;
    o.regime_tail_nu = regime_tail_nu;
    o.regime_warmup_bars = regime_warmup_bars;
    o.persistence_threshold = persistence_threshold;
    o.refit_failures = refit_failures;
    o.stale_seconds = stale_seconds;
    o.stale_gap_multiple = stale_gap_multiple;
    o.reject_burst = reject_burst;
    o.reject_window_seconds = reject_window_seconds;
    o.alert_during_warmup = alert_during_warmup;
    return o;
  }
};

// [alerts.groups.<name>]: other alert thresholds for a group of symbols. A
// symbol uses the first group (in file order) whose `symbols` list matches it
// (an exact symbol, or a prefix ending in '*'); other symbols use [alerts].
struct AlertGroupConfig {
  std::string name;                  // the table name
  std::vector<std::string> symbols;  // exact symbols or "PREFIX*"; at least one
  AlertsConfig alerts;               // [alerts] with this group's keys applied over it
  // True when `symbol` matches one of the patterns.
  bool Matches(absl::string_view symbol) const;
};

// [tracking]: recursive parameter tracking between refits
// (recursive_tracker.h). Applies to symbols whose model in force is a zero or
// constant mean GARCH(1,1) or GJR(1,1,1); other models are not tracked.
enum class TrackingMode {
  kOff,    // no tracking (the refit model alone)
  kTrack,  // track and publish the tracked parameters; the filter keeps the refit model
  kDrive,  // the filter uses the tracked parameters between refits; each refit re-anchors
};
absl::string_view TrackingModeName(TrackingMode m);  // "off" | "track" | "drive"

// [tracking.groups.<name>]: another mode for a group of symbols. A symbol uses
// the first group (in file order) whose `symbols` list matches it (an exact
// symbol, or a prefix ending in '*'); other symbols use [tracking] mode.
struct TrackingGroupConfig {
  std::string name;                  // the table name
  std::vector<std::string> symbols;  // exact symbols or "PREFIX*"; at least one
  TrackingMode mode = TrackingMode::kOff;
  bool Matches(absl::string_view symbol) const;
};

struct TrackingConfig {
  TrackingMode mode = TrackingMode::kOff;  // default "off"
  TrackerOptions tracker;  // forgetting, burn_in_bars, max_step, ... (recursive_tracker.h)
  // Instability statistic level that raises a `model` alert (the statistic is
  // about chi-square with 3 (GARCH) or 4 (GJR) degrees of freedom while the
  // model fits); 0 = no alerts. Default 20 (README "Parameter tracking": about
  // 1 false alarm per 25,000 bars on stable simulated series).
  double alert_threshold = 20;
  // Bars between `m.` tracking records of a tracked symbol; 0 = none. Default 100.
  int64_t report_every_bars = 100;
  std::vector<TrackingGroupConfig> groups;  // [tracking.groups.*], file order
  // The mode of `symbol` (its group's, else `mode`).
  TrackingMode ModeFor(absl::string_view symbol) const;
  // Whether any symbol can be tracked.
  bool AnyOn() const;
};

// [http]: health and metrics endpoint.
struct HttpConfig {
  std::string endpoint = "127.0.0.1:7310";  // host:port to bind; loopback by default
  bool enabled = true;
};

// [checkpoint]
struct CheckpointConfig {
  std::string path;           // checkpoint file; "" = no checkpoints
  double every_seconds = 60;  // period; 0 = only at shutdown
  // Symbols captured per gap between input batches (CheckpointerOptions::
  // slice_symbols); 0 = every symbol in one pause. Default 500.
  int slice_symbols = 500;
};

enum class LogLevel { kDebug, kInfo, kWarn, kError };
absl::string_view LogLevelName(LogLevel l);  // "debug" | "info" | "warn" | "error"

// [log]
struct LogConfig {
  LogLevel level = LogLevel::kInfo;
};

struct EngineConfig {
  EngineConfig();  // defaults as documented per field

  FeedConfig feed;
  NatsConfig nats;
  PublishConfig publish;
  BarsConfig bars;
  ModelConfig model;
  WarmupConfig warmup;
  OutputsConfig outputs;
  LimitsConfig limits;
  RefitConfig refit;
  SeasonalityConfig seasonality;
  AlertsConfig alerts;
  std::vector<AlertGroupConfig> alert_groups;  // [alerts.groups.*], file order
  TrackingConfig tracking;
  HttpConfig http;
  CheckpointConfig checkpoint;
  LogConfig log;

  // [bars] with [seasonality] opening_return applied.
  BarOptions ToBarOptions() const;
  // Seasonality on (SeasonalityConfig::Active).
  bool SeasonalityActive() const { return seasonality.Active(bars); }
};

// Parses and validates a TOML document. `source_name` prefixes messages
// ("config.toml:12: ..."). Never throws.
absl::StatusOr<EngineConfig> ParseEngineConfig(absl::string_view toml_text,
                                               absl::string_view source_name);

// Re-derives the "auto" settings (periods_per_year) from the rest of the
// configuration; ParseEngineConfig calls it. REQUIRES: config != nullptr.
void ResolveAutoSettings(EngineConfig* config);

// Reads and parses a file; NotFound if it cannot be read.
absl::StatusOr<EngineConfig> LoadEngineConfigFile(const std::string& path);

// Writes the configuration as TOML with every key, such that
// ParseEngineConfig(FormatEngineConfig(c)) yields the same configuration.
std::string FormatEngineConfig(const EngineConfig& config);

// Parses a duration: a non-negative integer followed by ns, us, ms, s, m or h
// ("0s", "500ms", "5s", "1m", "1h"). Returns ns.
absl::StatusOr<int64_t> ParseDuration(absl::string_view text);
// Parses a local clock time "HH:MM" into minutes after midnight; "24:00" only
// when allow_24 (a session end). False when malformed or out of range.
bool ParseClockMinutes(absl::string_view text, bool allow_24, int* minutes);
// Shortest exact form of a duration in the largest whole unit ("90s", "1m").
std::string FormatDuration(int64_t ns);

}  // namespace aftershock

#endif  // AFTERSHOCK_ENGINE_CONFIG_H_
