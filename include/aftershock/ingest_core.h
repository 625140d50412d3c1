// IngestCore: the engine's single-threaded heart (PRODUCT.md §3):
//   message -> decode/validate -> bar builder -> FilterStep -> outputs
//   -> bar observers -> encode -> UpdateSink.
// It owns every per-symbol state and has no sockets, timers or threads, so it
// is tested and replayed directly; Engine (engine.h) wraps it in an event loop.
//
// Bars and updates:
//   * [bars] interval "0s": every accepted tick is a bar; else time bars
//     (bar_builder.h). Open bars are closed by OnClock(now) once their end plus
//     [bars] grace has passed (counted in bars_clock_closed); such a bar had
//     ticks and is a normal bar. An update carries `stale` only when its
//     return spans at least one whole bar interval of the same session
//     without a tick of the symbol (the builder's kFlagStale); it is
//     informational and every alert rule treats the bar like any other.
//   * A bar without a return (a price symbol's first bar, the first bar of a
//     session) publishes NOTHING; its flags (gap) are carried into the symbol's
//     next update.
//   * Price bars give log returns as fractions; with [outputs] return_units =
//     "percent" they are multiplied by 100 (return ticks are used as given).
//   * With [model.params]: every symbol starts on FilterModel::Create(params),
//     version 1, at the model's unconditional variance.
//     Without: every symbol starts on the warm-up FilterModel::Ewma([warmup]
//     ewma_lambda), version 0, flag `warmup` on each update. Its variance
//     starts from the symbol's first [warmup] start_bars (m) returns: at
//     (1.4826 * median |r|)^2 over them (their mean square when half or more
//     are 0; all 0: collect m more), then AdvanceState over the m returns.
//     Those m bars publish nothing and reach no observer (their flags carry
//     to the first update); the next bar is the first update, its z measured
//     against m bars of history, so one tiny or huge early return cannot make
//     it extreme. m = 1 keeps the plain rule: the first non-zero return starts
//     the variance at r^2 and is filtered from there (zero returns before it
//     publish nothing). A swapped-in model ends the collection.
//   * The first ([warmup] min_bars - 1) filtered bars of a symbol carry the
//     flag `first_bar` (their z rests on no history; consumers ignore it).
//   * Intraday seasonality ([seasonality], seasonal_profile.h): while a symbol
//     has a profile (SetSeasonalProfile, or ModelSwap::profile), the filter runs
//     on r / s(k), k = the bar's session_bar, and the update is put back in
//     return units by SeasonalizeUpdate (var = s(k)^2 h, var_next, var_h, VaR,
//     ES, scale and vol_ann from the factors of the bars ahead), flag
//     `seasonal`. Without a profile the raw return is filtered, no flag. With
//     opening_return = "scaled" the first return of a session (flag gap) is
//     divided by the square root of the profile's overnight multiplier; with no
//     such multiplier yet it publishes nothing (observers see it through
//     OnSkippedReturn, so it enters the history the multiplier is estimated from).
//   * An update that fails to encode (a non-finite value) is never published;
//     it is counted as non_finite_output.
//   * New symbols beyond [limits] max_symbols are rejected as symbol_limit. A
//     symbol gets its slot with its first decoded tick, even if the bar
//     builder then rejects that tick.
//
// Integration points (all called on the ingest thread, the only thread that
// may touch the core; none may block):
//   * BarObserver::OnNewSymbol / OnBar / OnClock: per-bar hook called after
//     each update is computed and before it is published, with the symbol's
//     index (stable for the core's lifetime); it may change update->flags.
//     Observers run in the order they were added. Bars closed by one clock
//     tick are handled in chunks of 64: all are prepared and their filters
//     stepped (one FilterBank::StepBatch, filter_bank.h), then OnBar and the
//     publication run per bar in index order; so OnBar may change its own
//     symbol's model or state, not another symbol's of the same clock tick.
//   * SwapModel(index, ModelSwap): replaces a symbol's model between bars
//     (call it from OnBar, OnClock or any other ingest-thread code: the core
//     is always at a bar boundary then), optionally re-running the state over
//     recent returns.
//   * extra(index, slot) / set_extra(): kMaxSymbolExtras owned per-symbol
//     slots of observer state (e.g. alert state, rolling window).
//   * PublishSymbolMessage(kAlert|kModel, index, body): extra outbound
//     messages on topics "a.<symbol>" / "m.<symbol>", counted separately.
//   * OnClock(now): the clock tick (bar closes, then observers' OnClock, e.g.
//     stale-feed checks reading last_arrival_ns() and symbol_ticks()).
//
// Hot path: after a symbol's first message nothing allocates (buffers are
// reused; the symbol map and slot vector are reserved up front).
//
// Thread-safety: not thread-safe; one thread owns the core.
#ifndef AFTERSHOCK_INGEST_CORE_H_
#define AFTERSHOCK_INGEST_CORE_H_

#include <cstdint>
#include <limits>
#include <memory>
#include <string>
#include <vector>

#include "absl/container/flat_hash_map.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "absl/types/span.h"
#include "aftershock/bar_builder.h"
#include "aftershock/bar_update.h"
#include "aftershock/clock.h"
#include "aftershock/engine_config.h"
#include "aftershock/filter_bank.h"
#include "aftershock/online_filter.h"
#include "aftershock/recursive_tracker.h"
#include "aftershock/seasonal_profile.h"
#include "aftershock/state_capture.h"
#include "aftershock/state_codec.h"
#include "aftershock/tick_source.h"
#include "aftershock/update_sink.h"
#include "aftershock/wire.h"

namespace aftershock {

class IngestCore;

// Engine-wide counters. Plain value, owned by the ingest thread; read it there
// (or after the engine stopped), e.g. from a handler on the engine's loop.
struct EngineCounters {
  uint64_t messages_in = 0;        // inbound messages (any outcome)
  uint64_t ticks_in = 0;           // ticks decoded (good ones, before the bar builder)
  uint64_t ticks_accepted = 0;     // ticks the bar builder accepted
  uint64_t bars = 0;               // bars closed (with or without a return)
  uint64_t bars_clock_closed = 0;  // of which closed by the clock (informational)
  uint64_t updates_out = 0;        // updates handed to the sink successfully
  uint64_t drops = 0;              // updates the sink refused (subscriber queue full)
  uint64_t non_finite_output = 0;  // updates not published: a non-finite value
  uint64_t extra_out = 0;          // a./m. messages sent
  uint64_t extra_drops = 0;        // a./m. messages the sink refused
  uint64_t model_swaps = 0;        // SwapModel calls applied
  uint64_t symbols = 0;            // symbols known
  RejectCounters rejects;          // inbound rejections by reason (wire.h)
  uint64_t RejectTotal() const { return rejects.Total(); }
};

// Observer-owned per-symbol state kept in the core's slot (see extra()).
class SymbolExtra {
 public:
  virtual ~SymbolExtra() = default;
};
inline constexpr int kMaxSymbolExtras = 4;

// More metrics for the HTTP endpoint (e.g. alert and refit counters), appended
// in Prometheus text format after the core's own. Called on the ingest thread.
class MetricsSource {
 public:
  virtual ~MetricsSource() = default;
  virtual void AppendPrometheus(std::string* out) const = 0;
  // More members of the /health JSON object, each written as `,"key":value`
  // (the leading comma included), appended after the core's own members. The
  // default adds none.
  virtual void AppendHealthJson(std::string* /*out*/) const {}
};

// Per-bar hook. Implementations belong to one core and are called on its
// thread. They may call the core's SwapModel / PublishSymbolMessage / extra().
class BarObserver {
 public:
  virtual ~BarObserver() = default;
  // A symbol got its index (first accepted message); create extra state here.
  virtual void OnNewSymbol(IngestCore* /*core*/, int /*index*/, absl::string_view /*symbol*/) {}
  // After the update for a bar is computed, before it is published. `bar` is
  // the closed bar (return in the filter's units is update->r). May OR flags
  // into update->flags; must not change the numbers.
  virtual void OnBar(IngestCore* core, int index, const ClosedBar& bar, BarUpdate* update) = 0;
  // A bar whose return the filter did not consume (an opening return without
  // an estimated overnight multiplier, see above); r in the filter's units.
  virtual void OnSkippedReturn(IngestCore* /*core*/, int /*index*/, const ClosedBar& /*bar*/,
                               double /*r*/) {}
  // On every clock tick, after idle bars were closed.
  virtual void OnClock(IngestCore* /*core*/, int64_t /*now_ns*/) {}
  // After each inbound message (OnMessage: a batch of ticks; also a
  // malformed one) was handled: between batches, as at OnClock, but at the
  // message rate, so work here must be small or rare (e.g. a slice of a
  // checkpoint capture, checkpointer.h). Not called for OnTick (files).
  virtual void OnBatchEnd(IngestCore* /*core*/) {}
};

// A model replacement for one symbol (IngestCore::SwapModel).
struct ModelSwap {
  enum class Start : uint8_t {
    kKeepState,  // continue from the symbol's current lags and next variance
    kRestart,    // InitFilterState(model, initial_variance)
    kRerun,      // kRestart, then AdvanceState over `rerun_returns` (oldest first)
  };
  std::shared_ptr<const FilterModel> model;  // REQUIRED, created (Create/Ewma)
  Start start = Start::kRerun;
  // Starting variance for kRestart/kRerun; <= 0: the model's unconditional
  // variance (an EWMA model has none: then it must be > 0).
  double initial_variance = 0;
  // Returns to re-run (kRerun); only read during the call.
  absl::Span<const double> rerun_returns;
  // Status flags the symbol's updates carry from now on: kFlagWarmup,
  // kFlagFallback and/or kFlagPooled (others are ignored).
  uint32_t status_flags = 0;
  // When set, the symbol's seasonal profile becomes `profile` (null = none),
  // so a model fitted on deseasonalized returns arrives with its profile.
  bool replace_profile = false;
  std::shared_ptr<const SeasonalProfile> profile;
};

// What a SwapModel replaced, handed back instead of released in the call, so
// the caller chooses the thread that drops it (EngineServices passes a refit's
// to RefitCoordinator::Retire: the model was allocated by a refit worker).
struct ReplacedModel {
  std::shared_ptr<const FilterModel> model;  // the symbol's model before the swap
  // Its profile before the swap, when the swap replaced the profile.
  std::shared_ptr<const SeasonalProfile> profile;
};

class IngestCore : public TickConsumer {
 public:
  enum class TopicKind : char { kUpdate = 'u', kAlert = 'a', kModel = 'm' };

  // Validates what the core uses from the config (filter model and output
  // options). `sink` and `clock` must outlive the core.
  // REQUIRES: sink != nullptr, clock != nullptr.
  static absl::StatusOr<std::unique_ptr<IngestCore>> Create(const EngineConfig& config,
                                                            UpdateSink* sink, Clock* clock);

  // Adds a per-bar hook (not owned; must outlive the core). Add before input.
  void AddObserver(BarObserver* observer) { observers_.push_back(observer); }
  // Adds a metrics source (not owned; must outlive the core).
  void AddMetricsSource(const MetricsSource* source) { metrics_sources_.push_back(source); }
  const std::vector<const MetricsSource*>& metrics_sources() const { return metrics_sources_; }

  // TickConsumer: the input paths.
  void OnMessage(absl::string_view topic, absl::string_view body) override;
  void OnMalformedMessage() override;
  void OnTick(const Tick& tick) override;

  // Clock tick: closes every open bar whose end + grace <= now_ns, then calls
  // the observers' OnClock. Replay calls it with event time. Equivalent to
  // StartClock(now_ns) and ContinueClock until it returns false.
  void OnClock(int64_t now_ns);
  // A clock tick spread over gaps between input batches, so that a bar close
  // where a whole universe falls due (one-minute bars, refits applied at the
  // close) does not hold back the ticks queued behind it. StartClock(now_ns)
  // begins a tick (finishing one still under way first, at its own time);
  // each ContinueClock(max_bars, max_symbols) visits the next symbols in index
  // order, closing their due bars, until max_bars bars were closed or
  // max_symbols symbols visited; after the last symbol it calls the
  // observers' OnClock and returns false (true: the tick is still under way).
  // Meanwhile a tick of a symbol the clock has not reached yet first closes
  // that symbol's due bar at now_ns (HandleTick), and symbols that join are
  // not the tick's; so every symbol's bars, updates and observer calls are
  // exactly those of OnClock(now_ns) followed by the same input, and only the
  // interleaving of different symbols' messages differs. The observers'
  // OnClock (stale-feed checks, checkpoints) sees the input handled during
  // the tick. REQUIRES: max_bars >= 1, max_symbols >= 1.
  void StartClock(int64_t now_ns);
  bool ContinueClock(int max_bars, int max_symbols);
  // Runs a clock tick under way to its end (no-op when none is).
  void FinishClock();
  // True between StartClock and the ContinueClock that returned false.
  bool clock_under_way() const { return sweep_.active; }
  // Closes every open bar regardless of time (end of a replay); a clock tick
  // under way is finished first.
  void CloseAllOpenBars();
  // Flushes the sink.
  absl::Status Flush() { return sink_->Flush(); }

  // ---- Integration points (ingest thread only) ----
  // REQUIRES: 0 <= index < num_symbols(); swap.model created. InvalidArgument
  // otherwise (the symbol keeps its model). With `replaced`, the model (and a
  // replaced profile) the symbol had are moved into *replaced (which is
  // overwritten) rather than released here.
  absl::Status SwapModel(int index, const ModelSwap& swap, ReplacedModel* replaced = nullptr);
  // Replaces the symbol's seasonal profile (null = none) from the next bar on;
  // the filter state is kept (profiles are normalized to mean s^2 = 1, so the
  // deseasonalized variance level stays comparable). Ignored (OK) while
  // seasonality is off. REQUIRES: 0 <= index < num_symbols(); the profile's
  // buckets equal the bars per session (InvalidArgument otherwise).
  absl::Status SetSeasonalProfile(int index, std::shared_ptr<const SeasonalProfile> profile);
  // The tag (seasonal_profile.h) of a closed bar with a return: its
  // session_bar, the session-start mark from `update_flags` (kFlagGap) and the
  // overnight mark for an opening return.
  int32_t SeasonalTagOf(const ClosedBar& bar, uint32_t update_flags) const;
  bool seasonality_active() const { return seasonal_; }
  const SeasonalOptions& seasonal_options() const { return seasonal_options_; }
  // Observer state of a symbol (nullptr until set). Slots are assigned by
  // convention between observers (e.g. 0 alerts, 1 refit window).
  // REQUIRES: 0 <= index < num_symbols(), 0 <= slot < kMaxSymbolExtras.
  SymbolExtra* extra(int index, int slot) const { return slots_[index].extra[slot].get(); }
  // Takes ownership. REQUIRES: as extra().
  void set_extra(int index, int slot, std::unique_ptr<SymbolExtra> state) {
    slots_[index].extra[slot] = std::move(state);
  }
  // Sends body on "<kind>.<symbol>" (kAlert "a.", kModel "m."); counted in
  // extra_out, or extra_drops when the sink refused it (then false).
  // REQUIRES: 0 <= index < num_symbols().
  bool PublishSymbolMessage(TopicKind kind, int index, absl::string_view body);
  // Sends body on "<kind>.<name>" for a name that is not a symbol (feed-wide
  // alerts use "a._feed"); counted like PublishSymbolMessage.
  bool PublishNamedMessage(TopicKind kind, absl::string_view name, absl::string_view body);

  // ---- Checkpoints (engine_checkpoint.h) ----
  // Appends the core's whole state: counters, last clock and per symbol (in
  // index order) its name, bar builder state (open bar included), filter
  // state, the model in force (parameters and version; the output options
  // come from the configuration), seasonal profile, status and carried flags,
  // warm-up start buffer and counters. Observer extras are not included (their
  // owners save them). Ingest thread, between bars. Equivalent to
  // CaptureState into a fresh NewStateCapture(), then its Encode.
  void SaveState(StateWriter* w) const;
  // Live checkpoints (state_capture.h): an empty capture of this core's state
  // (storage reserved for the core's reserved symbol slots, address space only).
  std::unique_ptr<StateCapture> NewStateCapture() const;
  // Brings `capture` up to the core's state now; its Encode then writes what
  // SaveState would write now. Per symbol it copies the flat values (bar
  // builder, filter state, flags, warm-up returns held, counters) and
  // re-points the model and profile only where they changed; the name is
  // copied once. Allocates only for symbols new since the previous capture.
  // Ingest thread, between bars. REQUIRES: capture from this core's
  // NewStateCapture, not being encoded concurrently. Equivalent to
  // CaptureSymbols(capture, 0, num_symbols()) then CaptureCoreWide(capture).
  void CaptureState(StateCapture* capture) const;
  // A capture spread over several gaps between batches (state_capture.h):
  // CaptureSymbols brings the records of symbols [begin, end) up to their
  // state now (each symbol's record is then that symbol's whole state at this
  // gap; records are created for symbols new since the last call, named but
  // not filled); CaptureCoreWide copies the core-wide values (counters, last
  // clock). A capture is complete, and its Encode meaningful, once every
  // symbol's record was filled since the symbol joined and CaptureCoreWide
  // ran after the last of them. Same thread and REQUIREs as CaptureState;
  // 0 <= begin <= end <= num_symbols().
  void CaptureSymbols(StateCapture* capture, int begin, int end) const;
  void CaptureCoreWide(StateCapture* capture) const;
  // Restores what SaveState wrote. REQUIRES: a freshly created core with no
  // symbols, built from a configuration with the same state-relevant settings
  // (the checkpoint's fingerprint checks that), observers already added. Every
  // value is validated (counts against [limits] and [warmup], finite filter
  // state, parameters passing CheckConstraints, profiles of the session's
  // bucket count) BEFORE anything is committed: on error the core is
  // unchanged and the DataLoss/FailedPrecondition status names the symbol
  // and field. On success each symbol gets its saved index in order and the
  // observers' OnNewSymbol is called for each, as for a new symbol.
  absl::Status RestoreState(absl::string_view payload);
  // Makes a symbol's model pointer `model` (e.g. the refit coordinator's
  // version object) after a restore, so the core and its owner share one
  // object. REQUIRES: 0 <= index < num_symbols(); *model has the same version
  // and bit-identical parameters as the symbol's model (InvalidArgument
  // otherwise, the model unchanged).
  absl::Status ShareModel(int index, std::shared_ptr<const FilterModel> model);

  // ---- Inspection ----
  const EngineCounters& counters() const { return counters_; }
  int num_symbols() const { return static_cast<int>(slots_.size()); }
  int FindSymbol(absl::string_view symbol) const;  // index or -1
  absl::string_view symbol(int index) const { return slots_[index].symbol.view(); }
  const FilterModel& model(int index) const { return *slots_[index].model; }
  const SeasonalProfile* seasonal_profile(int index) const { return slots_[index].profile.get(); }
  // The symbol's filter state, gathered from the core's FilterBank
  // (filter_bank.h: one packed row per symbol).
  FilterState filter_state(int index) const { return bank_.Get(index); }
  // Its next variance alone (filter_state(index).var.next_variance, without
  // gathering the rest).
  double next_variance(int index) const { return bank_.next_variance(index); }
  // Recursive tracking of a symbol ([tracking]; inactive unless the mode is
  // track or drive and the model in force is supported).
  TrackingMode tracking_mode(int index) const { return slots_[index].tracking; }
  const RecursiveTracker& tracker(int index) const { return slots_[index].tracker; }
  // Instability-alert hysteresis of a symbol: an alert fires when the
  // statistic reaches [tracking] alert_threshold while armed; it re-arms below
  // half the threshold and on each re-anchor. Returns true when an alert is due
  // now (and disarms). Ingest thread (EngineServices::OnBar).
  bool TakeInstabilityAlert(int index);
  // For an observer that advances or replaces the state itself (the refit
  // coordinator re-runs it on a swap), then swaps the model with kKeepState.
  // Ingest thread, between bars only (OnBar/OnClock).
  void set_filter_state(int index, const FilterState& state) { bank_.Set(index, state); }
  uint32_t status_flags(int index) const { return slots_[index].status_flags; }
  uint64_t symbol_bars(int index) const { return slots_[index].bars; }          // bars closed
  uint64_t symbol_updates(int index) const { return slots_[index].updates; }    // published
  uint64_t symbol_ticks(int index) const { return slots_[index].ticks; }        // accepted
  int64_t last_tick_ns(int index) const { return slots_[index].last_tick_ns; }  // event time
  // Wall clock (Clock::NowNs) of the last message carrying this symbol.
  int64_t last_arrival_ns(int index) const { return arrivals_[index]; }
  // last_arrival_ns of every symbol, by index, contiguous (a clock-driven
  // check of a whole universe reads it without touching the symbols' slots).
  // Valid until the next call that adds a symbol. Ingest thread.
  absl::Span<const int64_t> last_arrivals() const { return arrivals_; }
  const EngineConfig& config() const { return config_; }
  int64_t last_clock_ns() const { return last_clock_ns_; }

 private:
  struct Slot {
    Symbol symbol;
    BarState bars_state;
    // The clock tick (ClockSweep::id) that last visited the symbol: a symbol
    // is visited once per tick, by the sweep or by its own tick first.
    uint64_t clock_sweep = 0;
    // The filter state is lane `index` of bank_; `model` is the lane's model.
    std::shared_ptr<const FilterModel> model;
    std::shared_ptr<const SeasonalProfile> profile;  // null: no seasonal adjustment
    uint32_t status_flags = 0;                       // kFlagWarmup / kFlagFallback / kFlagPooled
    uint32_t pending_flags = 0;                      // flags of unpublished bars, carried forward
    bool filter_ready = false;                       // filter state initialized
    // Warm-up start: the first returns, [warmup] start_bars of them (null when
    // start_bars is 1; allocated with the slot), and how many are held.
    std::unique_ptr<double[]> start_returns;
    int num_start_returns = 0;
    uint64_t bars = 0;
    uint64_t filtered = 0;
    uint64_t updates = 0;
    uint64_t ticks = 0;
    int64_t last_tick_ns = 0;
    std::unique_ptr<SymbolExtra> extra[kMaxSymbolExtras];
    // ---- Recursive tracking ([tracking], recursive_tracker.h) ----
    TrackingMode tracking = TrackingMode::kOff;  // the symbol's mode (group or [tracking])
    bool need_anchor = false;       // re-anchor the tracker on the model in force next bar
    bool instability_armed = true;  // the instability alert may fire (hysteresis)
    RecursiveTracker tracker;
    // kDrive: the model in force with the tracked coefficients (allocated with
    // the slot, parameter room reserved, so re-anchoring copies without allocating).
    std::unique_ptr<FilterModel> driven;
  };

  // A closed bar between its close and its publication: PrepareBar fills it,
  // the filter steps it, FinishBar publishes it.
  struct PendingBar {
    int index = 0;
    ClosedBar bar;
    double r = 0;      // the filter's input (deseasonalized when `adjust`)
    double r_raw = 0;  // the return in the filter's units, before seasonality
    uint32_t flags = 0;
    int32_t tag = 0;                          // seasonal tag
    bool adjust = false;                      // seasonalize the update
    bool absurd = false;                      // |r| >= 1e100: the state was saved in before_[saved]
    const FilterModel* model = nullptr;       // the symbol's model in force
    const FilterModel* step_model = nullptr;  // the model stepped (drive: retuned)
    int saved = 0;                            // entry of before_ (set before PrepareBar)
    int out = 0;                              // entry of updates_ (set before the step)
  };
  // Bars closed by one clock tick are handled in chunks of this many: every
  // bar of a chunk is prepared, then filtered (FilterBank::StepBatch), then
  // published in index order.
  static constexpr int kBarChunk = 64;
  // close_at_ of a symbol with no open bar.
  static constexpr int64_t kNoBarToClose = std::numeric_limits<int64_t>::max();

  IngestCore(const EngineConfig& config, UpdateSink* sink, Clock* clock,
             std::shared_ptr<const FilterModel> initial_model);
  int IndexFor(absl::string_view symbol);  // -1 at the symbol limit (counted)
  void HandleTick(const Tick& tick, int64_t arrival_ns);
  // One bar closed by a tick: prepared, stepped and published.
  void HandleBar(int index, const ClosedBar& bar);
  // pending_[0..n): bars closed together (a clock tick); batch-stepped.
  void HandleBars(int n);
  // pending_[*n].bar was just closed for `index`: records it and handles the
  // chunk when full (*n back to 0).
  void QueueClosedBar(int index, int* n);
  // The clock tick under way visits `index` (from the sweep, or first from the
  // symbol's own tick): marks it visited and closes its bar into *bar when due
  // at the tick's time (true). REQUIRES: sweep_.active, index < sweep_.end,
  // not yet visited.
  bool VisitForClock(int index, ClosedBar* bar);
  // HandleBar up to the filter step; false when the bar publishes nothing.
  // REQUIRES: p->index, p->bar and p->saved set.
  bool PrepareBar(PendingBar* p);
  // After the step into updates_[p.out]: checks, seasonality, observers, send.
  void FinishBar(const PendingBar& p);
  // Tracking on the bar's filter input x; returns the model the filter steps
  // with (the slot's, or in drive mode the retuned copy).
  const FilterModel* TrackBar(int index, double x);
  // Refreshes close_at_[index] from the slot's bar state (after any change).
  void NoteBarState(int index);
  // Sets up a slot's tracking mode (and its drive-mode model) for `symbol`.
  void InitTracking(Slot* slot, absl::string_view symbol);
  bool SendOn(TopicKind kind, absl::string_view symbol, absl::string_view body);

  EngineConfig config_;
  BarOptions bar_options_;
  UpdateSink* sink_;
  Clock* clock_;
  std::shared_ptr<const FilterModel> initial_model_;
  uint32_t initial_flags_ = 0;
  double price_return_scale_ = 1.0;
  bool encode_binary_ = false;
  bool seasonal_ = false;        // [seasonality] active
  bool opening_scaled_ = false;  // opening_return = "scaled"
  SeasonalOptions seasonal_options_;
  std::vector<BarObserver*> observers_;
  std::vector<const MetricsSource*> metrics_sources_;
  absl::flat_hash_map<std::string, int> index_;
  std::vector<Slot> slots_;
  // Each slot's last arrival (last_arrival_ns), kept apart from the slots so
  // that a check of every symbol reads 8 bytes a symbol; same indices.
  std::vector<int64_t> arrivals_;
  // Each slot's earliest clock time at which CloseIfDue closes its open bar
  // (bar end + grace), kNoBarToClose when no bar is open; same indices. Kept
  // with every change of a bar state (NoteBarState) so that a clock tick
  // passes over the symbols with nothing due without reading their slots.
  std::vector<int64_t> close_at_;
  FilterBank bank_;          // every symbol's filter state; lane = index
  std::vector<Tick> ticks_;  // decode buffer, kMaxBatchTicks
  // Per chunk of bars (kBarChunk each): the bars, the updates, the state of an
  // absurd bar's symbol before its step, and the batch step's lanes/returns.
  std::vector<PendingBar> pending_;
  std::vector<BarUpdate> updates_;
  std::vector<FilterState> before_;
  std::vector<int> batch_lanes_;
  std::vector<double> batch_returns_;
  std::string body_;
  std::string topic_;
  EngineCounters counters_;
  int64_t last_clock_ns_ = 0;
  // The clock tick under way (StartClock/ContinueClock): its time, the next
  // symbol to visit and the end of its symbols, and its number (Slot::clock_sweep).
  struct ClockSweep {
    bool active = false;
    int64_t now_ns = 0;
    int next = 0;
    int end = 0;
    uint64_t id = 0;
  };
  ClockSweep sweep_;
  double start_scratch_[kMaxWarmupStartBars];  // median of the warm-up start returns
};

}  // namespace aftershock

#endif  // AFTERSHOCK_INGEST_CORE_H_
