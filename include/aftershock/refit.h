// RefitCoordinator: background re-estimation and hot swap for the
// single-threaded ingest loop (PRODUCT.md C5).
//
// Per closed bar of a symbol the ingest thread runs its FilterStep with
// model(id), then calls OnBar(id, t_ns, r, &state), which
//   1. pushes r into the symbol's rolling window (no allocation);
//   2. applies the symbol's refit job when it has reached the stream (see
//      "Hand-off"): on a pass the new version is swapped in and *state is
//      re-run under it; on a failure the model in force stays, the failure is
//      counted, and max_failures in a row engage the EWMA fallback;
//   3. asks the scheduler whether a refit is due and, if so, takes a free
//      preallocated job slot for it, copies the window into a job buffer and
//      queues it (at most one job per symbol; a due point meeting a pending
//      job is coalesced into it; no free slot: dropped, counted, retried at
//      the next due point). In live mode the copy and the queueing wait for
//      SubmitDeferred, called between input batches, or for the symbol's next
//      OnBar, whichever comes first; the job's inputs are the same.
//
// Job buffers (the window copies). A job needs its copy of the window from
// the hand-off to the end of the worker's run, not until it is applied (at
// the symbol's next bar, a minute later on one-minute bars). In live mode
// SubmitDeferred copies only into a free buffer (256 per worker, at most
// queue_capacity, allocated and touched by Create), so the copies keep a
// little ahead of the workers instead of all at once; and it takes back the
// buffer of a job the workers finished while its symbol's window is still
// the one copied: until it is applied, the window is the job's inputs, as it
// was before the copy. A job still waiting for its copy, or holding it in the
// window, when its symbol's window is about to change gets a buffer first
// (a new one when none is free, allocated on the ingest thread; a buffer that
// comes back while more than the base number exist is freed there).
// So slots cost a few hundred bytes each and buffers 8 * window bytes (12
// with seasonality) each, however many slots there are.
// The next bar then uses the (possibly new) model(id).
//
// Hand-off (see src/refit/job_pool.h for the memory orders): the ingest thread
// and the workers exchange job-slot indices; a worker publishes its result with
// a release store of the slot's done flag, and the ingest thread checks that
// flag with an acquire load (wait-free) when the symbol's bar closes, which is
// the bar boundary at which a version may change. A job scheduled at bar n is
// applied at the first bar >= n + apply_lag_bars at which it is done (live
// mode), or exactly at bar n + apply_lag_bars, waiting for it there if needed
// (replay mode; the only place the ingest thread ever waits). The gate, the
// holdout scores, the compiled FilterModel and the re-run variance state are
// all computed by the worker (the holdout compares the candidate with the
// model in force when the job was scheduled, the EWMA included during warm-up
// and fallback), so applying costs the ingest thread a pointer
// swap, a state copy and apply_lag_bars AdvanceState calls. In a
// universe-wide bar close every symbol applies a job: what the ingest thread
// touches per application is cold memory, so each line of it counts
// (bench/scale_bench's longest burst; DEVELOPERS.md "Applying refits in a
// universe-wide bar close").
//
// Variance state after a swap: the worker starts a FilterState at the new
// model's unconditional variance and runs AdvanceState over the last
// min(window, kSwapTailBars) returns of the job's window; the ingest thread then
// advances it over the returns that arrived since the job was scheduled. 500
// bars: the starting value's weight in sigma2 decays like beta^k (at most
// persistence^k), below 1e-22 at k = 500 for beta = 0.9 and below 1e-2 for beta
// = 0.99, so the state is the model's own conditional variance given the recent
// past, independent of the presample rule, at a cost bounded independently of
// `window`. The same tail warms the holdout scores.
//
// Group models (options.group_models): a symbol that has no passed fit of its
// own (too few bars for min_bars, e.g. an idle name) and is not in fallback
// takes the latest passed model of its group (AddSymbol's `group`): the same
// variance equation and law (alpha, beta, gamma, nu), zero mean, and omega
// re-levelled so that the unconditional variance is the symbol's own (the
// variance of its window once it holds kPooledLevelBars returns, else its
// current next variance). The state is re-run over the window's tail; updates
// carry kFlagPooled; the version is the symbol's next number; OnBar reports it
// with `pooled` and a record of outcome kPooled. A newer group model replaces
// it after every_bars more bars of the symbol (min_bars when every_bars is 0);
// the symbol's own first passed fit replaces it for good. Adoption happens at
// the symbol's own bars and reads only what earlier bars applied, so a replay
// stays deterministic. It allocates (one ModelVersion and its record), once
// per adoption, never on a quiet bar.
// Seasonality (options.seasonal): the window keeps each return's
// bar-of-session tag (seasonal_profile.h). The worker re-estimates the
// symbol's profile from the job's window (shrunk toward the coordinator's pool
// of the symbols' own estimates, snapshot taken at submission), fits the model
// on the returns the filter would consume under it (SeasonalInput: r / s(k)),
// scores the holdout in raw-return units (the log-likelihood of r / s minus
// sum log s, so candidate and model in force are compared on the same data
// whatever their profiles) and runs the swap tail on the same series. The
// profile travels in the ModelVersion and is swapped with it; the catch-up
// over the returns since the job applies SeasonalInput with it too. Each
// applied job's own estimate (its factors in single precision,
// SeasonalContribution) is added to the pool (ingest thread).
//
// Versions: immutable ModelVersion objects shared by std::shared_ptr<const>;
// version 0 is the EWMA warm-up/fallback model (shared by all symbols);
// estimated versions count 1, 2, ... per symbol. Only the ingest thread reads
// or replaces a symbol's current pointer; a replaced version is handed to the
// workers (Retire) and released by shared_ptr on a worker.
//
// Allocation: none per bar. Per applied refit the ingest thread moves the
// worker-built record and its formatted numbers into last_record() /
// last_record_json(); the record, numbers and versions they replace are
// released by a worker at its next job (Retire), not on the ingest thread.
// Workers allocate freely (fits, records).
//
// Thread-safety: every method except stats() is for the ingest thread only;
// stats() may be called from any thread (relaxed counters). The Refitter is
// called from the worker threads.
#ifndef AFTERSHOCK_REFIT_H_
#define AFTERSHOCK_REFIT_H_

#include <atomic>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "absl/container/flat_hash_map.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "absl/types/span.h"
#include "aftershock/model_registry.h"
#include "aftershock/online_filter.h"
#include "aftershock/quality_gate.h"
#include "aftershock/refit_options.h"
#include "aftershock/refit_scheduler.h"
#include "aftershock/refitter.h"
#include "aftershock/rolling_window.h"
#include "aftershock/state_capture.h"
#include "aftershock/state_codec.h"

namespace aftershock {

namespace refit_internal {
class JobPool;
class RetireQueue;
}

// Returns over which a swapped-in model's variance state is re-run.
inline constexpr int kSwapTailBars = 500;
// Returns a symbol's window needs before a group model takes its level from them.
inline constexpr int kPooledLevelBars = 20;

// The group model for one symbol: `donor`'s variance equation and law with a
// zero mean, omega set so that the unconditional variance is `level` (> 0).
// InvalidArgument for an EWMA donor or a non-positive level.
absl::StatusOr<ModelParams> PooledParams(const ModelParams& donor, double level);

// Log-likelihood of `model` on the last `holdout` returns of `window`, its state
// warmed over up to kSwapTailBars returns before them (from the unconditional
// variance; EWMA from the mean square of the warm-up returns).
// REQUIRES: 0 < holdout < window.size().
double ScoreHoldout(const FilterModel& model, absl::Span<const double> window, int holdout);

// Counters of the coordinator (monotone except the gauges in_flight, queued,
// running).
struct RefitStats {
  uint64_t due = 0;           // due points reached
  uint64_t submitted = 0;     // jobs queued
  uint64_t coalesced = 0;     // due points merged into a pending job
  uint64_t dropped = 0;       // due points with no free job slot
  uint64_t swapped = 0;       // versions swapped in
  uint64_t rejected = 0;      // jobs that failed the gate or whose refitter failed
  uint64_t refit_errors = 0;  // of which the refitter returned an error
  uint64_t fallbacks = 0;     // times the EWMA fallback was engaged
  uint64_t replay_waits = 0;  // replay applications that had to wait for the worker
  uint64_t pooled = 0;        // group models adopted
  int in_flight = 0;          // jobs holding a slot (queued, running or awaiting apply)
  int queued = 0;             // jobs not yet picked up by a worker
  int running = 0;            // jobs a worker is running
  int job_buffers = 0;        // job buffers that exist now (see "Job buffers")
};

// What OnBar did.
struct RefitBarResult {
  bool applied = false;    // a job reached the stream: last_record() is new
  bool swapped = false;    // ... and its version is now in force
  bool scheduled = false;  // a new job was queued at this bar
  bool pooled = false;     // the group model was adopted: last_record() is new (kPooled)
  // *state was rewritten (a swap, the fallback engaging, a group model): the
  // caller writes it back. Otherwise OnBar left *state as it was.
  bool state_replaced = false;
};

class RefitCoordinator {
 public:
  // Job buffers Create makes per worker (see "Job buffers").
  static constexpr int kJobBuffersPerWorker = 256;
  // InvalidArgument for bad options (Validate's message), bad output options
  // or a null refitter. Starts options.workers threads and preallocates
  // queue_capacity job slots and min(queue_capacity, kJobBuffersPerWorker *
  // workers) job buffers of `window` doubles (and tags) each (see "Job
  // buffers").
  static absl::StatusOr<std::unique_ptr<RefitCoordinator>> Create(
      const RefitOptions& options, const OutputOptions& outputs,
      std::unique_ptr<Refitter> refitter);
  // Stops the workers after their current job; pending jobs are discarded.
  ~RefitCoordinator();
  RefitCoordinator(const RefitCoordinator&) = delete;
  RefitCoordinator& operator=(const RefitCoordinator&) = delete;

  // Registers a symbol (allocates its window; not a per-bar call) in `group`
  // (any small number; symbols with the same number share group models; 0 for
  // "all symbols"). Returns its dense id (0, 1, ...). InvalidArgument for an
  // empty or over-long symbol or a group >= kMaxRefitGroups, AlreadyExists for
  // a registered one.
  static constexpr uint32_t kMaxRefitGroups = 4096;
  absl::StatusOr<uint32_t> AddSymbol(absl::string_view symbol, uint32_t group = 0);
  // Id of a registered symbol, or -1.
  int64_t Find(absl::string_view symbol) const;
  size_t num_symbols() const { return symbols_.size(); }

  // The model in force for symbol `id`. REQUIRES: id registered.
  const FilterModel& model(uint32_t id) const { return symbols_[id].current->model; }
  const ModelVersionPtr& current(uint32_t id) const { return symbols_[id].current; }
  // kFlagWarmup before the first swap, kFlagFallback while the fallback is in
  // force, kFlagPooled while a group model stands in, else 0 (OR it into the
  // BarUpdate's flags).
  uint32_t flags(uint32_t id) const;
  int consecutive_failures(uint32_t id) const { return symbols_[id].failures; }
  const RollingWindow& window(uint32_t id) const { return symbols_[id].window; }

  // Per closed bar, after the FilterStep of this bar with model(id) on *state.
  // May replace *state (on a swap or when the fallback engages; then
  // state_replaced is set and every field of *state is written). Of the state
  // given, only state->var.next_variance is ever read, so a caller may fill
  // just that field and write *state back only when state_replaced
  // (EngineServices does: gathering the whole state cost every bar cache
  // misses in a universe-wide close).
  // REQUIRES: id registered; r finite; *state belongs to this symbol.
  // tag: the return's bar-of-session tag (read only with options.seasonal).
  RefitBarResult OnBar(uint32_t id, int64_t t_ns, double r, FilterState* state, int32_t tag = 0);
  // A return the filter skipped (an opening return without an overnight
  // multiplier, IngestCore::OnSkippedReturn): kept in the window (tagged) so
  // the next profile can estimate the multiplier. No scheduling.
  // REQUIRES: id registered.
  void RecordSkipped(uint32_t id, double r, int32_t tag);

  // Live mode: a due refit takes its job slot and its other inputs at the bar
  // close, but the copy of the window into the slot and the hand-off to the
  // workers wait for this call (or for the symbol's next OnBar /
  // RecordSkipped, which first copy the unchanged window), so a universe that
  // falls due at one bar close does not copy every window inside that close.
  // Copies and submits up to `max_jobs` waiting jobs, oldest first, as long as
  // a job buffer is free (after taking back those of finished jobs, see "Job
  // buffers"); returns how many. Call it between input batches
  // (EngineServices does, after each inbound message and at each clock
  // tick). Replay mode copies at the due point: nothing waits. Ingest thread;
  // no allocation.
  int SubmitDeferred(int max_jobs);

  // Starts symbol `id` on a stored model (model_store.h, --initial-models)
  // instead of the EWMA warm-up: `version` becomes the version in force (flags
  // 0) and the warm start and specification of the next refit; it counts as
  // the symbol's first fit (the next refit is a warm-started re-estimation; a
  // re-identification comes every reidentify_every refits from it, or after a
  // failed gate), and later versions number after version->version. The schedule is unchanged (the first refit
  // is still due at min_bars). The caller swaps the same model into the core
  // (IngestCore::SwapModel). Not a per-bar call; deterministic.
  // REQUIRES: id registered, no return seen for it, no job pending;
  // version->version >= 1 and an estimated (non-EWMA) model. InvalidArgument
  // or FailedPrecondition otherwise (nothing changed).
  absl::Status Seed(uint32_t id, ModelVersionPtr version);

  // The record of the latest applied job (valid until the next OnBar that
  // applies one).
  const RefitRecord& last_record() const { return last_record_; }
  // Its numbers, formatted by the worker that made it (a group model's by
  // the ingest thread): last_record_json().Finish(last_record(), &out) writes
  // EncodeRefitRecordJson(last_record()) formatting no estimate (a copy of
  // the record with its timings zeroed may be given instead). Same validity.
  const RefitRecordJson& last_record_json() const { return last_record_json_; }

  // Hands `object` to the workers to release (the next job a worker takes
  // does) instead of dropping it here: EngineServices gives the model a swap
  // replaced in the core. Apply does the same with the record and versions it
  // replaces. The reason is the allocator: releasing a block a worker
  // allocated took the worker's malloc arena lock on this thread
  // (src/refit/retire_queue.h). A null pointer is ignored. Ingest thread; no
  // allocation once the queue has grown.
  void Retire(std::shared_ptr<const void> object);
  // Objects retired on this thread and not yet handed to the workers (tests).
  size_t retired_pending() const;

  RefitStats stats() const;

  // ---- Checkpoints (engine_checkpoint.h) ----
  // Appends the coordinator's whole state: its counters; every model version
  // it references (current, last estimated, group donors, pending jobs'
  // inputs), each once (parameters, version, std errors, log-likelihood,
  // fitted bar, profile); the seasonal pool; per group the latest donor
  // version, donor and sequence; per symbol (in id order) the rolling window
  // and tags, schedule phase, current / last estimated versions, version
  // counter, failures, fallback, fits, group-model state, and a PENDING job's
  // inputs (window and tags copy, pool snapshot, version in force and warm
  // start, reidentify decision, seed, fit index, scheduled and apply bars,
  // version number). Ingest thread; the workers may be running (only inputs
  // they do not write are read). Equivalent to CaptureState into a fresh
  // NewStateCapture(), then its Encode.
  void SaveState(StateWriter* w) const;
  // Live checkpoints (state_capture.h): an empty capture of this
  // coordinator's state.
  std::unique_ptr<StateCapture> NewStateCapture() const;
  // Brings `capture` up to the coordinator's state now; its Encode then writes
  // what SaveState would write now (the version table is built by Encode).
  // Per symbol: the window mirror follows with the returns pushed since the
  // previous capture (RollingWindow::SyncFrom), the schedule and counters are
  // copied, versions are held by pointer (re-pointed only when changed), and
  // a pending job's inputs are copied once per job (its fit index tells a new
  // job). Allocates only for new symbols and new jobs. Ingest thread, the
  // same as SaveState. REQUIRES: capture from this coordinator's
  // NewStateCapture, not being encoded concurrently. Equivalent to
  // CaptureSymbol for every id, then CaptureFeedWide.
  void CaptureState(StateCapture* capture) const;
  // The capture spread over gaps (EngineServices::CaptureSymbols): one
  // symbol's state (window, schedule, versions, pending job) now, and the
  // feed-wide state (counters, seasonal pool, groups) now. Same thread and
  // REQUIREs as CaptureState; id registered.
  void CaptureSymbol(StateCapture* capture, uint32_t id) const;
  void CaptureFeedWide(StateCapture* capture) const;
  // Restores what SaveState wrote and re-submits the pending jobs with their
  // saved inputs, so each produces the same result as the saved one would
  // have (replay applies it at the same bar). REQUIRES: a fresh coordinator
  // with the same options, the same symbols added in the same order and
  // groups (AddSymbol), and no bar seen yet. Everything is validated (counts
  // against the window and queue capacity, parameters passing
  // CheckConstraints, finite values, profiles of the session's bucket count,
  // version references) before anything is committed: on error nothing
  // changed and the DataLoss / FailedPrecondition status names the symbol and
  // field.
  absl::Status RestoreState(absl::string_view payload);

  // Bytes held per symbol: its bookkeeping, its window and one estimated
  // ModelVersion (the shared EWMA version and the job slots are not per symbol).
  size_t MemoryBytesPerSymbol() const;

 private:
  // Where a pending job's window copy is.
  enum class JobInputs : uint8_t {
    kInBuffer,  // in its job buffer (or no job pending)
    kDeferred,  // live mode: not copied or handed to the workers yet
    kInWindow,  // finished, buffer taken back: the window, unchanged since the due point
  };
  struct SymbolSlot {
    std::string name;
    RollingWindow window;
    ScheduleState schedule;
    ModelVersionPtr current;         // in force (the shared EWMA when none/fallback)
    ModelVersionPtr last_estimated;  // warm start and spec of the next refit; may be null
    uint32_t last_version = 0;       // highest version number issued
    int32_t pending = -1;            // job slot in flight, or -1
    int64_t apply_bar = 0;           // bars at which the pending job may apply (kept here
                                     // so quiet bars touch only this symbol's memory)
    int failures = 0;                // consecutive failed jobs
    bool fallback = false;
    // Where the pending job's inputs are (see "Job buffers").
    JobInputs inputs = JobInputs::kInBuffer;
    int64_t fits = 0;  // jobs submitted
    uint32_t group = 0;
    bool pooled = false;      // current is a group model
    uint64_t pooled_seq = 0;  // the group's sequence number adopted (0: none)
    int64_t pooled_bar = 0;   // bars at that adoption
  };
  // The latest passed model of a group (ingest thread only).
  struct GroupState {
    ModelVersionPtr latest;  // null until a member's fit passes
    std::string donor;       // its symbol
    uint64_t seq = 0;        // passes so far
  };
  struct JobSlot;
  struct JobBuffer;

  RefitCoordinator(const RefitOptions& options, const OutputOptions& outputs,
                   std::unique_ptr<Refitter> refitter, ModelVersionPtr ewma);
  void Process(uint32_t slot);  // worker side
  void Apply(SymbolSlot* sym, uint32_t slot, int64_t t_ns, FilterState* state);
  void Submit(uint32_t id, SymbolSlot* sym);
  // Copies the symbol's window into a buffer for the pending job's slot and
  // hands it to the pool (live mode's deferred half of Submit).
  void CopyAndSubmit(SymbolSlot* sym, uint32_t slot);
  // Before the symbol's window changes: hands over its job if still deferred;
  // gives a finished job whose inputs are the window its copy back, unless
  // `applies_next` (OnBar: the job applies right after the push when due by
  // then).
  void SubmitBeforePush(SymbolSlot* sym, bool applies_next);
  // Copies the symbol's window (unchanged since its pending job's due point)
  // into a buffer for that job, j.
  void CopyInputs(SymbolSlot* sym, JobSlot* j);
  // A free job buffer; a new one (NewBuffer) when none is.
  std::unique_ptr<JobBuffer> TakeBuffer();
  // Allocates a job buffer, touching its pages (so that a first copy into it
  // takes no page faults).
  std::unique_ptr<JobBuffer> NewBuffer();
  // Keeps a buffer no job needs any more among the free ones, or frees it
  // when more than base_buffers_ exist.
  void ReleaseBuffer(std::unique_ptr<JobBuffer> b);
  // Takes back the buffers of finished jobs whose windows are unchanged, in
  // the order they were handed out (stops at the first unfinished one).
  void ReclaimBuffers();
  void DeferredPushBack(uint32_t slot);
  void DeferredUnlink(uint32_t slot);
  // Adopts the group model when due (see "Group models"); true if it did.
  bool MaybeAdoptGroupModel(SymbolSlot* sym, int64_t t_ns, FilterState* state);

  // ---- constant after construction ----
  const RefitOptions options_;
  const OutputOptions outputs_;
  const RefitScheduler scheduler_;
  const std::unique_ptr<Refitter> refitter_;  // called from workers only
  const ModelVersionPtr ewma_;                // version 0, shared
  // Job buffers made at start and kept free at most: min(queue_capacity,
  // kJobBuffersPerWorker * workers).
  const int base_buffers_;

  // ---- ingest thread only ----
  SeasonalPool seasonal_pool_;  // pooled prior of the profiles (options.seasonal)
  std::vector<double> inv_scales_;  // scratch: a profile's 1/s(k) (MaybeAdoptGroupModel)
  std::vector<SymbolSlot> symbols_;
  std::vector<GroupState> groups_;  // indexed by AddSymbol's group
  absl::flat_hash_map<std::string, uint32_t> index_;
  std::vector<uint32_t> free_slots_;  // free job slots (capacity preallocated)
  // The free job buffers (the others belong to jobs), at most base_buffers_.
  std::vector<std::unique_ptr<JobBuffer>> free_buffers_;
  // The slots given a buffer by CopyAndSubmit, in that order, with the slot's
  // generation then (a slot reused since is skipped): where ReclaimBuffers
  // looks. A ring of queue_capacity entries; full, its oldest is dropped (that
  // job keeps its buffer until it is applied).
  std::vector<std::pair<uint32_t, uint32_t>> handed_;
  size_t handed_head_ = 0, handed_size_ = 0;
  // Live mode: the slots of jobs waiting for SubmitDeferred, oldest first, as
  // a doubly linked list over the slot indices (-1 ends it), so OnBar can take
  // one out of the middle in O(1). A slot is pending at most once.
  std::vector<int32_t> deferred_next_, deferred_prev_;
  int32_t deferred_head_ = -1, deferred_tail_ = -1;
  RefitRecord last_record_;
  RefitRecordJson last_record_json_;
  // Job slots: owned by the ingest thread or by one worker at a time, following
  // the protocol of job_pool.h (never both).
  std::vector<std::unique_ptr<JobSlot>> jobs_;

  // ---- counters: written by the ingest thread, read anywhere (relaxed) ----
  struct Counters {
    std::atomic<uint64_t> due{0}, submitted{0}, coalesced{0}, dropped{0}, swapped{0}, rejected{0},
        refit_errors{0}, fallbacks{0}, replay_waits{0}, pooled{0};
    std::atomic<int> in_flight{0};
  };
  // Jobs not yet handed to the workers (live mode), counted in stats().queued.
  // Written by the ingest thread, read anywhere (relaxed).
  std::atomic<int> deferred_count_{0};
  // Job buffers that exist (free or a job's), for stats(). Written by the
  // ingest thread (relaxed).
  std::atomic<int> buffer_count_{0};
  Counters counters_;

  // What the ingest thread replaced, for the workers to release (Retire).
  // Declared before pool_: the workers (which take from it) stop first.
  std::unique_ptr<refit_internal::RetireQueue> retire_;

  // Last: destroyed first, so the workers stop before the slots go away.
  std::unique_ptr<refit_internal::JobPool> pool_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_REFIT_H_
