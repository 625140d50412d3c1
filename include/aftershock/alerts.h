// Alert rules engine (PRODUCT.md C7): turns per-bar updates, model lifecycle
// events and feed events into Alert records with a severity, a per-symbol and
// per-kind cool-down, deduplication, and counters for the metrics endpoint.
//
// Rules (thresholds are AlertOptions fields):
//   shock        |z| >= shock_info_z / shock_z / shock_critical_z -> info / warn /
//                critical (two-sided; value = z, threshold = the highest tier crossed).
//   regime       the RegimeDetector (regime_detector.h) enters its high regime
//                (warn) or low regime (info): its evidence (nats) that the variance
//                is regime_scale (1 / regime_scale) times the model's forecast reached
//                regime_enter_evidence; value = that evidence, threshold =
//                regime_enter_evidence. The detector reads the standardized residual
//                z, which with intraday seasonality is already deseasonalized.
//   regime_clear the regime ends (info): the evidence that the variance is back to
//                the forecast reached regime_exit_evidence; value = that evidence,
//                threshold = regime_exit_evidence.
//   persistence  a model swapped in has persistence >= persistence_threshold (warn).
//   model        refit failed the quality gate refit_failures times in a row (warn);
//                a passing refit after such a streak (info); EWMA fallback engaged
//                (critical) / cleared (info).
//   feed         stale: a symbol's silence inside the session reached its
//                threshold (warn); ticks_resumed: data arrived after a stale
//                alert (info); reject_burst rejected ticks within
//                reject_window_seconds (warn). See "Stale feed" below.
//
// Cool-down and deduplication, exactly:
//   * Shock: after an emitted shock alert at bar b (time t), a shock at a later bar
//     of equal or lower severity is suppressed while it is within cooldown_bars
//     bars (bar index <= b + cooldown_bars) or within cooldown_seconds (t' - t <
//     cooldown_seconds) of it; a strictly higher severity is always emitted and
//     restarts the cool-down. cooldown_bars = cooldown_seconds = 0 emits every breach.
//   * Regime: the hysteresis is the deduplication (one entry per regime). An entry
//     less than cooldown_bars bars after the symbol's last emitted regime or
//     regime_clear alert is suppressed, and then so is the clear that ends it.
//   * Persistence, model and feed alerts fire on transitions into a condition;
//     while the condition persists a repeated trigger (another near-integrated
//     swap, another failed refit in the same streak, fallback engaged again, a
//     second reject burst within reject_window_seconds of the last alert) is
//     suppressed and counted. A stale symbol is reported once until a tick arrives.
//   * Bars flagged first-bar never alert and do not enter the regime statistics.
//     Bars flagged stale (their return spans whole silent bar intervals,
//     bar_update.h) and bars closed by the clock are ordinary bars here. Bars
//     flagged warm-up update the regime statistics, but their shock and regime
//     alerts are withheld unless alert_during_warmup.
//   Every alert a rule produced but did not send (cool-down, repeat, warm-up) is
//   counted as suppressed under the kind and severity it would have had. Repeated
//   stale checks of one stale episode are not alerts and are not counted.
//
// Stale feed (CheckStale, driven by the clock; it reads the symbol's latest tick
// arrival and tick count from FeedCheck, so it does not depend on bar closes):
//   * silence = now - max(latest tick, FeedCheck::count_from_ns): time before
//     the count_from instant (the session open, or later) never counts, so
//     nights, weekends and holidays between sessions are not silence.
//   * threshold = max(stale_seconds, stale_gap_multiple x typical gap), where
//     the typical gap is the symbol's mean in-session gap between ticks,
//     learned from the ticks seen at each check: k new ticks over the elapsed
//     in-session time are k gaps of their mean. It is the plain mean of all
//     gaps while that weighs new gaps more (the first ~72), then an
//     exponentially weighted mean (half-life kTickGapHalflifeTicks ticks). A
//     silence that raised a stale alert is left out once a gap has been
//     learned (an outage is not the normal rate); before that it is the first
//     sample, so a name sparser than stale_seconds raises at most one stale
//     alert before its rate is known.
//   * Outside the session nothing fires and nothing is learned. A symbol that
//     never ticked is never stale (there is no rate or reference to judge by).
//   * One stale alert per episode (value = the silence at the check, s); the
//     first check that sees new data ends it with ticks_resumed (value = the
//     silence up to the latest tick seen, exact to one clock period).
//
// Thread-safety: not thread-safe. One AlertEngine is used from the ingest thread
// only; its options are immutable after Create. SymbolAlertState is owned by the
// caller (stored next to the symbol's FilterState) and passed in on every call.
// Hot path: OnBar, OnRejectedTick and CheckStale do not allocate, lock or
// perform I/O beyond what the AlertSink does.
#ifndef AFTERSHOCK_ALERTS_H_
#define AFTERSHOCK_ALERTS_H_

#include <cstdint>
#include <limits>
#include <memory>
#include <string>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/bar_update.h"
#include "aftershock/regime_detector.h"
#include "aftershock/state_codec.h"

namespace aftershock {

enum class AlertKind : uint8_t { kShock, kRegime, kRegimeClear, kPersistence, kModel, kFeed };
inline constexpr int kNumAlertKinds = 6;
// "shock", "regime", "regime_clear", "persistence", "model", "feed".
absl::string_view AlertKindName(AlertKind k);

enum class Severity : uint8_t { kInfo, kWarn, kCritical };
inline constexpr int kNumSeverities = 3;
// "info", "warn", "critical".
absl::string_view SeverityName(Severity s);

// The specific rule behind an alert (finer than the kind; the JSON "rule" key).
enum class AlertRule : uint8_t {
  kShock,            // kind shock
  kRegimeHigh,       // kind regime / regime_clear, high-volatility regime
  kRegimeLow,        // kind regime / regime_clear, low-volatility regime
  kNearIntegrated,   // kind persistence
  kGateFailed,       // kind model: refit_failures failed gates in a row
  kGateRecovered,    // kind model: a refit passed after an alerted streak
  kFallbackEngaged,  // kind model
  kFallbackCleared,  // kind model
  kStale,            // kind feed: in-session silence reached the stale threshold
  kTicksResumed,     // kind feed: data arrived after a stale alert
  kRejectBurst,      // kind feed: many rejected ticks
  kInstability,      // kind model: the instability statistic of [tracking] reached its threshold
};
// "shock", "regime_high", "regime_low", "near_integrated", "gate_failed",
// "gate_recovered", "fallback_engaged", "fallback_cleared", "stale",
// "ticks_resumed", "reject_burst", "instability".
absl::string_view AlertRuleName(AlertRule r);

// Symbol of feed-wide alerts (reject bursts): '_' is not allowed in instrument
// symbols, so it never collides with one.
inline constexpr absl::string_view kFeedSymbol = "_feed";

// Capacity of Alert::message, terminating NUL included; longer text is cut.
inline constexpr int kMaxAlertMessage = 256;

// One alert. Fixed-size value type (no heap), safe to copy between threads.
struct Alert {
  Symbol symbol;
  int64_t t_ns = 0;  // event time, ns since the Unix epoch (bar end, or the clock)
  AlertKind kind = AlertKind::kShock;
  AlertRule rule = AlertRule::kShock;
  Severity severity = Severity::kInfo;
  double value = 0;      // the measured quantity (z, ratio, persistence, count, seconds)
  double threshold = 0;  // the threshold it was compared with (same units)
  uint32_t ver = 0;      // model version the alert refers to (0 when none)
  char message[kMaxAlertMessage] = {};  // one plain sentence, NUL-terminated
  uint16_t message_size = 0;            // strlen(message)

  absl::string_view message_view() const { return absl::string_view(message, message_size); }
};

// Appends the alert as one JSON object (no newline) to *out after clearing it,
// so a reused string keeps its capacity. Keys: s, t (ns), kind, rule, severity,
// value, threshold, ver, message. Non-finite numbers are written as null.
void EncodeAlertJson(const Alert& alert, std::string* out);

// Receiver of emitted alerts (the engine's publisher and JSONL writer; a vector
// in tests). Called synchronously from the AlertEngine's thread; the Alert is
// only valid during the call.
class AlertSink {
 public:
  virtual ~AlertSink() = default;
  virtual void Emit(const Alert& alert) = 0;
};

struct AlertOptions {
  // |z| at or above this raises a warn shock alert. > 0. Default 4.
  double shock_z = 4.0;
  // |z| at or above this raises a critical shock alert. >= shock_z. Default 6.
  double shock_critical_z = 6.0;
  // |z| at or above this raises an info shock alert; 0 disables the tier,
  // otherwise in (0, shock_z). Default 0 (off).
  double shock_info_z = 0.0;
  // Bars after an emitted shock alert during which equal or lower severities
  // are suppressed; also the regime re-entry cool-down. >= 0. Default 20.
  int cooldown_bars = 20;
  // Seconds of the same shock cool-down measured on bar time; 0 = off.
  // In [0, 1e9]. Default 0.
  double cooldown_seconds = 0.0;
  // Variance multiple the regime statistics test for: the high regime tests
  // "variance regime_scale times the model's forecast", the low regime "1 /
  // regime_scale times". > 1. Default 3.
  double regime_scale = 3.0;
  // Evidence (nats, a log-likelihood ratio) that enters a regime. > 0. Default 10.
  double regime_enter_evidence = 10.0;
  // Evidence (nats) that the variance is back to the forecast that ends a
  // regime. > 0. Default 6.
  double regime_exit_evidence = 6.0;
  // Degrees of freedom of the standardized Student t law the regime tests
  // assume for z; 0 = normal law. 0 or in (2, 1000]. Default 5.
  double regime_tail_nu = 5.0;
  // Bars the regime detector absorbs before its statistics start. In [0, 1e9].
  // Default 50.
  int64_t regime_warmup_bars = 50;
  // Persistence of a swapped-in model at or above this is a warn alert. In (0, 1).
  // Default 0.995.
  double persistence_threshold = 0.995;
  // Consecutive failed refit gates that raise a model warn alert. >= 1. Default 3.
  int refit_failures = 3;
  // Seconds without a tick inside the session after which a symbol is stale,
  // at least (the floor of the threshold). > 0. Default 60.
  double stale_seconds = 60.0;
  // A symbol is stale only once its silence also reaches this multiple of its
  // typical in-session gap between ticks (learned per symbol), so a sparse
  // name is judged by its own rate. 0 = fixed stale_seconds. In [0, 1e6].
  // Default 10.
  double stale_gap_multiple = 10.0;
  // Rejected ticks within reject_window_seconds that raise a feed warn alert.
  // >= 1. Default 100.
  int64_t reject_burst = 100;
  // Sliding window of the reject count, seconds; counted in 60 buckets, so the
  // window edge is exact to 1/60 of it. > 0. Default 60.
  double reject_window_seconds = 60.0;
  // Whether bars flagged warm-up may raise shock and regime alerts. Default false.
  bool alert_during_warmup = false;
};

// Emitted and suppressed alerts by kind and severity, for the metrics endpoint.
struct AlertCounters {
  uint64_t emitted[kNumAlertKinds][kNumSeverities] = {};
  uint64_t suppressed[kNumAlertKinds][kNumSeverities] = {};

  uint64_t Emitted(AlertKind k, Severity s) const {
    return emitted[static_cast<int>(k)][static_cast<int>(s)];
  }
  uint64_t Suppressed(AlertKind k, Severity s) const {
    return suppressed[static_cast<int>(k)][static_cast<int>(s)];
  }
  uint64_t TotalEmitted() const;
  uint64_t TotalSuppressed() const;
};

// Half-life, in ticks, of the typical-gap average of the stale rule: long enough
// that one long gap barely moves it, short enough to follow a name whose
// activity changes over days.
inline constexpr double kTickGapHalflifeTicks = 50;

// What the clock knows about one symbol's feed at a stale check.
struct FeedCheck {
  int64_t now_ns = 0;      // the clock, ns since the epoch (the base of last_tick_ns)
  bool in_session = true;  // now_ns lies inside the trading session
  // Silence is counted from no earlier than this instant: the current
  // session's open or later (the engine uses the later of the open and the
  // feed's first tick in the session). Lowest value: every second counts.
  int64_t count_from_ns = std::numeric_limits<int64_t>::min();
  int64_t last_tick_ns = 0;  // arrival (clock ns) of the symbol's latest tick; 0 = none
  uint64_t ticks = 0;        // the symbol's ticks so far (non-decreasing): its rate
};

// Per-symbol rule state, a plain fixed-size value (at most 128 bytes) the engine
// stores next to the symbol's FilterState; ready to use when default-constructed.
struct SymbolAlertState {
  RegimeState regime;  // the detector's statistic and current regime
  int64_t bars = 0;    // bars seen by OnBar (the cool-down clock)
  // Shock cool-down: the last emitted shock.
  int64_t shock_bar = -1;  // bar index of the last emitted shock; -1 none
  int64_t shock_t_ns = 0;
  // Regime: the last emitted regime alert.
  int64_t regime_alert_bar = -1;
  // Feed (CheckStale): what the previous check saw, the learned rate and the
  // current stale episode.
  int64_t last_tick_ns = 0;    // latest tick arrival seen, clock ns; 0 = none yet
  uint64_t ticks_seen = 0;     // the symbol's tick count at that check
  double tick_gap_s = 0;       // typical in-session gap between ticks, s
  int64_t stale_since_ns = 0;  // start of the silence of the current stale alert
  uint32_t gap_samples = 0;    // gaps learned into tick_gap_s (saturates); 0 = none
  int gate_failures = 0;       // model: length of the current failed-gate streak
  Severity shock_severity = Severity::kInfo;
  // Whether the current regime's entry was published (its clear goes out only then).
  bool regime_published = false;
  bool near_integrated = false;  // the current model's persistence is above threshold
  bool gate_alerted = false;     // a gate_failed alert was emitted for this streak
  bool fallback = false;         // EWMA fallback engaged
  bool stale_alerted = false;    // a stale alert was emitted and no data arrived since
};

// The outcome of one refit, as the scheduler reports it.
// Checkpoint encoding of a symbol's alert state (every field, exact bits).
void SaveSymbolAlertState(const SymbolAlertState& state, StateWriter* w);
// Reads what SaveSymbolAlertState wrote; non-finite or negative statistics
// and unknown enum values set the reader's error naming `what`.
SymbolAlertState RestoreSymbolAlertState(StateReader* r, absl::string_view what);

struct GateEvent {
  bool passed = false;           // the fit passed the quality gate and is swapped in
  int consecutive_failures = 0;  // failed gates in a row including this one (0 if passed)
  // Short reason of the failure ("diagnostics failed: Ljung-Box p = 0.002"),
  // copied into the message (cut to fit). Empty when passed.
  absl::string_view reason;
};

// The rules engine. Holds the options, the feed-wide reject window and the counters.
class AlertEngine {
 public:
  // InvalidArgument naming the option when the options are out of range.
  static absl::StatusOr<std::unique_ptr<AlertEngine>> Create(const AlertOptions& options);

  const AlertOptions& options() const { return options_; }
  const RegimeDetector& detector() const { return detector_; }
  const AlertCounters& counters() const { return counters_; }

  // After FilterStep: the shock and regime rules for one bar of bar.symbol.
  // Both read bar.z, the residual standardized by the variance the model
  // forecast for the bar (with seasonality: the seasonal variance, so z is the
  // deseasonalized filter's own). REQUIRES: state is this symbol's; sink non-null.
  void OnBar(const BarUpdate& bar, SymbolAlertState* state, AlertSink* sink);

  // A new model version was swapped in for `symbol` at t_ns (persistence rule).
  // REQUIRES: an estimated model; the EWMA fallback (persistence 1 by
  // construction) is reported through OnFallback instead.
  void OnModelSwap(const Symbol& symbol, int64_t t_ns, uint32_t version, double persistence,
                   SymbolAlertState* state, AlertSink* sink);

  // The outcome of a refit of `symbol` (model rule: gate failures).
  void OnRefitOutcome(const Symbol& symbol, int64_t t_ns, const GateEvent& outcome,
                      SymbolAlertState* state, AlertSink* sink);

  // The EWMA fallback was engaged (engaged = true) or cleared by model `version`.
  // `reason` is copied into the engaged message (cut to fit).
  void OnFallback(const Symbol& symbol, int64_t t_ns, bool engaged, uint32_t version,
                  absl::string_view reason, SymbolAlertState* state, AlertSink* sink);

  // The parameter-instability statistic of recursive tracking
  // (recursive_tracker.h) reached `threshold` for model `version` (the caller
  // keeps the hysteresis): a warn model alert, rule instability.
  void OnInstability(const Symbol& symbol, int64_t t_ns, uint32_t version, double statistic,
                     double threshold, AlertSink* sink);

  // A tick was rejected at now_ns (any symbol, any reason): reject-burst rule.
  // REQUIRES: now_ns non-decreasing across calls.
  void OnRejectedTick(int64_t now_ns, AlertSink* sink);

  // Clock-driven feed check of one symbol (the stale rule above): learns the
  // tick rate from the ticks seen since the previous check, ends a stale
  // episode when data arrived (ticks_resumed), raises stale when the
  // in-session silence reached the threshold.
  // REQUIRES: checks of one symbol in non-decreasing now_ns.
  void CheckStale(const Symbol& symbol, const FeedCheck& feed, SymbolAlertState* state,
                  AlertSink* sink);
  // The stale threshold of a symbol in its current state, seconds.
  double StaleThresholdSeconds(const SymbolAlertState& state) const;
  // What lets a caller skip checks that cannot do anything: a CheckStale of
  // `state` whose feed.last_tick_ns is 0 or equals state.last_tick_ns (no new
  // data), with feed.count_from_ns >= `count_from_ns`, neither changes the
  // state nor sends anything when feed.now_ns is earlier than the returned
  // clock time, ns (or when feed.in_session is false). Earlier than the exact
  // instant by at most a few microseconds, never later; INT64_MAX when no
  // silence can raise an alert (no tick seen yet, or the episode was alerted).
  int64_t StaleDueNs(const SymbolAlertState& state, int64_t count_from_ns) const;

  // Checkpoint encoding of the engine's own state: its counters and the
  // feed-wide reject window (buckets, burst and alert marks).
  void SaveState(StateWriter* w) const;
  // Restores what SaveState wrote (REQUIRES: a fresh engine). The counters
  // always; the reject window only when reject_window_seconds is unchanged
  // (its buckets would mean other times), else the window starts empty.
  // Malformed input sets the reader's error; discard the engine then.
  void RestoreState(StateReader* r);

 private:
  static constexpr int kRejectBuckets = 60;

  AlertEngine(const AlertOptions& options, const RegimeDetector& detector);
  void Count(AlertKind kind, Severity severity, bool emitted);
  void Send(Alert* alert, AlertSink* sink);
  void OnRegimeEvent(const BarUpdate& bar, RegimeEvent ev, SymbolAlertState* state,
                     AlertSink* sink);

  AlertOptions options_;
  RegimeDetector detector_;
  AlertCounters counters_;
  int64_t cooldown_ns_ = 0;
  int64_t bucket_ns_ = 0;      // reject_window_seconds / kRejectBuckets
  int64_t reject_bucket_ = 0;  // index (now / bucket_ns_) of the newest bucket
  uint64_t reject_counts_[kRejectBuckets] = {};
  uint64_t reject_window_ = 0;   // sum of reject_counts_
  bool reject_over_ = false;     // the window count is at or above reject_burst
  bool reject_alerted_ = false;  // a burst alert was emitted (at reject_alert_ns_)
  int64_t reject_alert_ns_ = 0;
  Alert scratch_;  // reused alert record (no allocation per event)
};

}  // namespace aftershock

#endif  // AFTERSHOCK_ALERTS_H_
