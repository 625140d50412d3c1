// EngineServices: the background re-estimation (refit.h) and the alert rules
// (alerts.h) attached to an IngestCore as one BarObserver, configured from the
// [refit] and [alerts] sections. `aftershock run`, `replay` and `demo` attach it
// the same way, so the live engine and a replay behave identically.
//
// Per bar of a symbol (ingest thread, after its update is computed):
//   1. the alert rules see the update (shock, regime) and emit on "a.<symbol>",
//      to the optional alerts file (JSON Lines) and to the listener;
//   2. the refit coordinator takes the return (window, schedule, hand-off);
//      when a job reaches the stream its record goes out on "m.<symbol>" and
//      to the listener, the model/persistence/fallback alerts fire, and a new
//      version (or the EWMA fallback) is swapped into the core with the
//      coordinator's re-run variance state, so the next bar uses it.
// Seasonality ([seasonality] on, seasonal_profile.h): each return enters the
// window with its bar-of-session tag (IngestCore::SeasonalTagOf). With refits
// the coordinator re-estimates the profile with each job and the swap carries
// it (the EWMA fallback keeps the profile in force). Without refits a tagged
// window of [refit] window bars is kept per symbol and the profile is
// re-estimated from it at the first return of each session (complete sessions
// only), shrunk toward the pool of the symbols' estimates, and set on the core
// for the next bar. Opening returns the core skipped (OnSkippedReturn) enter
// the window too.
// Per clock tick: stale-symbol checks (alerts.h, "Stale feed"), reading each
// symbol's latest arrival and tick count from the core; with a session the
// silence counts from the later of the session's open and the feed's first
// tick in it (any symbol), so closed hours and sessions in which nothing
// ticked (weekends, holidays) are never silence; then the burst of rejected
// ticks.
//
// Refits are enabled when [refit] every_bars or every_seconds is non-zero. In
// replay mode a refit scheduled at bar n is applied exactly at n +
// apply_lag_bars, so outputs do not depend on thread timing or worker counts
// (the records' fit_seconds, a wall time, is written as 0 in replay).
// Candidates come from PipelineRefitter: the identification pipeline on the
// first fit, every reidentify_every refits and after a failed gate; a
// warm-started re-estimation of the current model otherwise.
//
// Thread-safety: everything on the ingest thread, except that the refit
// workers run in the background (see refit.h).
#ifndef AFTERSHOCK_ENGINE_SERVICES_H_
#define AFTERSHOCK_ENGINE_SERVICES_H_

#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "aftershock/alerts.h"
#include "aftershock/engine_config.h"
#include "aftershock/ingest_core.h"
#include "aftershock/model_registry.h"
#include "aftershock/model_store.h"
#include "aftershock/refit.h"
#include "aftershock/state_capture.h"
#include "aftershock/state_codec.h"

namespace aftershock {

// Receives what the services publish (replay reports, the demo's summary).
// Called on the ingest thread.
class ServiceListener {
 public:
  virtual ~ServiceListener() = default;
  // `index` is the core's symbol index, or -1 for feed-wide alerts.
  virtual void OnAlert(int index, const Alert& alert) {}
  virtual void OnRefitRecord(int index, const RefitRecord& record) {}
};

struct ServiceOptions {
  // Live: a finished refit is applied at the first bar boundary after
  // apply_lag_bars. Replay: exactly at apply_lag_bars (waits if needed).
  RefitMode mode = RefitMode::kLive;
  // Alerts also go to this JSON Lines file ("" = none). Truncated at start.
  std::string alerts_path;
  // Optional observer of alerts and refit records (not owned).
  ServiceListener* listener = nullptr;
  // Overrides [refit] workers when > 0.
  int workers = 0;
  // Stored models (model_store.h; --initial-models): each listed symbol starts
  // on its model, at the model's unconditional variance, with its version and
  // no warm-up flag, instead of the EWMA warm-up (or [model.params], which
  // keeps applying to the symbols not listed); with refits on it is seeded
  // into the coordinator (RefitCoordinator::Seed). Leave empty when the state
  // is restored from a checkpoint (a restore wins). Default: none.
  std::vector<StoredModel> initial_models;
  // The stale-feed check on each clock tick calls AlertEngine::CheckStale
  // for every symbol when true. When false (default) it calls it only for the
  // symbols that got a message since their last check or whose earliest
  // possible stale time (AlertEngine::StaleDueNs) has come: the same alerts
  // and state, reading 24 bytes a symbol instead of the symbols' alert state.
  // True is for tests and benchmarks that compare the two.
  bool stale_check_every_symbol = false;
};

class EngineServices {
 public:
  // Builds the alert engine and (when enabled) the refit coordinator and adds
  // the observer to `core`. InvalidArgument for option values the components
  // refuse (with the config key in the message); NotFound if the alerts file
  // cannot be created. REQUIRES: core outlives the services; no input fed yet.
  static absl::StatusOr<std::unique_ptr<EngineServices>> Attach(IngestCore* core,
                                                                const EngineConfig& config,
                                                                const ServiceOptions& options);
  virtual ~EngineServices() = default;

  virtual bool refit_enabled() const = 0;
  // Refit counters (zero when disabled). Any thread.
  virtual RefitStats refit_stats() const = 0;
  // The refit coordinator's own accounting of the bytes it holds per symbol
  // (RefitCoordinator::MemoryBytesPerSymbol: window, bookkeeping, one
  // version; job slots excluded); 0 when refits are off. Any thread.
  virtual size_t refit_bytes_per_symbol() const = 0;
  // Alert counters by kind and severity. Ingest thread.
  virtual const AlertCounters& alert_counters() const = 0;
  // The refit coordinator's version in force for the core's symbol `index`
  // (fit details: std errors, log-likelihood, fitted bar), or null when refits
  // are off or the index is unknown. Ingest thread.
  virtual ModelVersionPtr model_version(int index) const = 0;
  // Instability alerts ([tracking] alert_threshold) raised for the core's
  // symbol `index` since these services were attached (not checkpointed); 0
  // for an unknown index. Ingest thread (or after the engine stopped).
  virtual uint64_t instability_alerts(int index) const = 0;
  // Flushes the alerts file. Ingest thread (or after the engine stopped).
  virtual absl::Status Flush() = 0;

  // ---- Checkpoints (engine_checkpoint.h) ----
  // Appends the services' state: per symbol (core index order) its alert
  // state (regime detector, cool-downs, stale-feed rule), fallback flag and,
  // with seasonality but no refits, its tagged window; the seasonal pool; the
  // alert engines' own state (counters, the feed-wide reject window); the
  // rejected-tick mark and the stale rule's session / first-tick marks; and
  // the refit coordinator's state (RefitCoordinator::SaveState) when refits
  // are on. Ingest thread, between bars. Equivalent to CaptureState into a
  // fresh NewStateCapture(), then its Encode.
  virtual void SaveState(StateWriter* w) const = 0;
  // Live checkpoints (state_capture.h): an empty capture of the services'
  // state (the coordinator's capture inside it).
  virtual std::unique_ptr<StateCapture> NewStateCapture() const = 0;
  // Brings `capture` up to the services' state now: per symbol the alert
  // state and fallback are copied and a tagged window's mirror follows with
  // the new returns; the alert engines' and the pool's small feed-wide
  // state is encoded into the capture's reused buffers; then the
  // coordinator's CaptureState. Allocates only for new symbols and new refit
  // jobs. Ingest thread, between bars. REQUIRES: capture from these services'
  // NewStateCapture, not being encoded concurrently. Equivalent to
  // CaptureSymbols(capture, 0, n) then CaptureFeedWide(capture), n the core's
  // symbol count.
  virtual void CaptureState(StateCapture* capture) const = 0;
  // The capture spread over gaps (IngestCore::CaptureSymbols): CaptureSymbols
  // brings the per-symbol state of the core's symbols [begin, end) up to now
  // (alert state, fallback, tagged window, and the coordinator's per-symbol
  // state: window, schedule, versions, pending job); CaptureFeedWide the
  // feed-wide state (alert engines, marks, pool, the coordinator's counters,
  // pool and groups). Same thread and REQUIREs as CaptureState;
  // 0 <= begin <= end <= the core's symbol count.
  virtual void CaptureSymbols(StateCapture* capture, int begin, int end) const = 0;
  virtual void CaptureFeedWide(StateCapture* capture) const = 0;
  // Restores what SaveState wrote. REQUIRES: fresh services attached to a
  // core whose state was just restored (IngestCore::RestoreState, which
  // registers the symbols here in order), nothing fed yet. Validates
  // everything before committing (on error nothing here changed; discard the
  // core and the services); then points the core's model of every symbol on
  // a fitted version at the coordinator's version object
  // (IngestCore::ShareModel). A refit on/off mismatch is FailedPrecondition.
  virtual absl::Status RestoreState(absl::string_view payload) = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_ENGINE_SERVICES_H_
