#include "aftershock/refit.h"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <utility>

#include "absl/strings/str_cat.h"
#include "aftershock/bar_update.h"
#include "aftershock/innovations.h"
#include "refit/job_pool.h"
#include "refit/retire_queue.h"

namespace aftershock {

// A job's copy of the window (see refit.h, "Job buffers"): capacity reserved
// for `window` returns (and tags with seasonality) and touched when made.
// Owned like the slot it is handed to (job_pool.h), else by the ingest thread.
struct RefitCoordinator::JobBuffer {
  std::vector<double> returns;
  std::vector<int32_t> tags;  // seasonal: the returns' tags
};

// One preallocated job. Input fields are written by the ingest thread before
// Submit; output fields by the worker before its done flag (job_pool.h).
struct RefitCoordinator::JobSlot {
  // ---- input ----
  uint32_t symbol_id = 0;
  std::string symbol;           // capacity reserved for kMaxSymbolLength
  std::unique_ptr<JobBuffer> buffer;  // the window copy, from the hand-off (see JobInputs)
  uint32_t generation = 0;      // jobs this slot has taken (ReclaimBuffers)
  SeasonalProfilePtr prior;     // seasonal: the pool's snapshot (may be null)
  ModelVersionPtr in_force;     // scored on the holdout
  ModelVersionPtr estimated;    // warm start (may be null)
  bool reidentify = false;
  uint64_t seed = 0;
  int64_t fit_index = 0;
  int64_t bar = 0;       // returns seen when scheduled
  uint32_t version = 0;  // number the candidate gets if it passes
  std::chrono::steady_clock::time_point submitted;  // RefitRecord::queue_seconds
  bool priority = false;  // lane of the pool
  // ---- output ----
  bool passed = false;
  bool refit_error = false;
  ModelVersionPtr candidate;  // set when passed
  // Seasonal: what the estimate adds to the pool when the job is applied
  // (SeasonalPool::Add); the worker allocates it and the ingest thread retires
  // it then (a slot keeping the whole estimate held about 6 KB per slot ever
  // used; the job keeps 2 KB of single-precision factors for 510 buckets).
  std::shared_ptr<const SeasonalContribution> contribution;
  FilterState tail_state;     // candidate's state at the end of `returns`
  RefitRecord record;
  RefitRecordJson record_json;  // `record`'s numbers (Prepare), on the worker
};

namespace {

// Rebuilds of the pooled seasonal prior a universe-wide close makes at most
// (Submit; SeasonalPool::Snapshot).
constexpr uint64_t kPriorRebuildsPerSweep = 64;

double MeanSquare(absl::Span<const double> x) {
  if (x.empty()) return 0;
  double s = 0;
  for (double v : x) s += v * v;
  return s / static_cast<double>(x.size());
}

// State of `model` at the end of `w`, started over its last `tail` returns.
void RunTail(const FilterModel& model, absl::Span<const double> w, int tail, FilterState* st) {
  const size_t n = w.size();
  const size_t start = n - std::min(n, static_cast<size_t>(tail));
  double v0 = 0;  // the unconditional variance
  if (model.is_ewma()) v0 = MeanSquare(w.subspan(start, std::min<size_t>(100, n - start)));
  if (model.is_ewma() && !(v0 > 0)) v0 = 1e-12;
  InitFilterState(model, v0, st);
  for (size_t i = start; i < n; ++i) AdvanceState(model, st, w[i]);
}

// The series the filter consumes under `profile` (SeasonalInput). The
// profile's 1/s(k) are computed once into *inv (scratch), not per return.
void SeasonalSeries(const SeasonalProfile* profile, absl::Span<const double> r,
                    absl::Span<const int32_t> tags, std::vector<double>* x,
                    std::vector<double>* inv) {
  if (profile != nullptr) profile->InvScales(inv);
  const double* table = profile != nullptr ? inv->data() : nullptr;
  x->clear();
  for (size_t i = 0; i < r.size(); ++i) {
    double v;
    if (SeasonalInput(profile, r[i], tags[i], &v, table)) x->push_back(v);
  }
}

// The sum of log s (SeasonalLogScale) over the last n entries of that series,
// oldest first: the holdout's Jacobian term. Only the tail is summed, so the
// worker takes n logarithms, not one per return of the window (two series of
// 2,000 per seasonal refit were about a tenth of its time).
double TailLogScale(const SeasonalProfile* profile, absl::Span<const int32_t> tags, int n) {
  auto consumed = [&](int32_t tag) {
    double unused;
    return SeasonalInput(profile, 0.0, tag, &unused);
  };
  size_t i = tags.size();
  for (int taken = 0; i > 0 && taken < n;) {
    --i;
    if (consumed(tags[i])) ++taken;
  }
  double s = 0;
  for (; i < tags.size(); ++i) {
    if (consumed(tags[i])) s += SeasonalLogScale(profile, tags[i]);
  }
  return s;
}

}  // namespace

absl::StatusOr<ModelParams> PooledParams(const ModelParams& donor, double level) {
  const ModelSpec& d = donor.spec;
  if (d.variance == VarianceKind::kEwma) {
    return absl::InvalidArgumentError("an EWMA model cannot be a group model");
  }
  if (!(level > 0) || !std::isfinite(level)) {
    return absl::InvalidArgumentError(absl::StrCat("group model level must be > 0, got ", level));
  }
  if (donor.values.size() != static_cast<size_t>(d.NumParams())) {
    return absl::InvalidArgumentError("group model donor has the wrong number of parameters");
  }
  ModelSpec s = d;
  s.mean = MeanKind::kZero;
  s.ar_order = 0;
  s.ma_order = 0;
  ModelParams out{
      s, std::vector<double>(donor.values.begin() + d.VarianceOffset(), donor.values.end())};
  // values[0] is omega in every variance family but EWMA: set the level.
  out.values[0] =
      d.variance == VarianceKind::kConstant ? level : level * (1.0 - donor.Persistence());
  if (auto st = out.CheckConstraints(); !st.ok()) return st;
  return out;
}

double ScoreHoldout(const FilterModel& model, absl::Span<const double> w, int holdout) {
  const size_t n = w.size();
  const size_t h = static_cast<size_t>(holdout);
  FilterState st;
  RunTail(model, w.first(n - h), kSwapTailBars, &st);
  auto law = InnovationLaw::FromParams(model.params());
  if (!law.ok()) return -std::numeric_limits<double>::infinity();
  double ll = 0;
  for (size_t i = n - h; i < n; ++i) {
    const double var = st.var.next_variance;
    const double eps = w[i] - st.mu_next;
    ll += var > 0 ? law->LogLikelihood(eps, var) : -std::numeric_limits<double>::infinity();
    AdvanceState(model, &st, w[i]);
  }
  return ll;
}

absl::StatusOr<std::unique_ptr<RefitCoordinator>> RefitCoordinator::Create(
    const RefitOptions& options, const OutputOptions& outputs, std::unique_ptr<Refitter> refitter) {
  if (auto s = options.Validate(); !s.ok()) return s;
  if (!refitter) return absl::InvalidArgumentError("a refitter is required");
  auto ewma = FilterModel::Ewma(options.ewma_lambda, outputs, 0);
  if (!ewma.ok()) return ewma.status();
  auto v = std::make_shared<ModelVersion>();
  v->version = 0;
  v->model = *std::move(ewma);
  return std::unique_ptr<RefitCoordinator>(
      new RefitCoordinator(options, outputs, std::move(refitter), std::move(v)));
}

RefitCoordinator::RefitCoordinator(const RefitOptions& options, const OutputOptions& outputs,
                                   std::unique_ptr<Refitter> refitter, ModelVersionPtr ewma)
    : options_(options),
      outputs_(outputs),
      scheduler_(options),
      refitter_(std::move(refitter)),
      ewma_(std::move(ewma)),
      base_buffers_(std::min(options.queue_capacity, kJobBuffersPerWorker * options.workers)),
      seasonal_pool_(options.seasonal_options) {
  const int cap = options_.queue_capacity;
  jobs_.reserve(static_cast<size_t>(cap));
  free_slots_.reserve(static_cast<size_t>(cap));
  for (int i = 0; i < cap; ++i) {
    auto j = std::make_unique<JobSlot>();
    j->symbol.reserve(kMaxSymbolLength);
    jobs_.push_back(std::move(j));
  }
  handed_.resize(static_cast<size_t>(cap));
  // The buffers the copies may run ahead of the workers by: a quiet feed's
  // clock tick (at most 100 ms apart) copies up to 256 (EngineServices), about
  // what one worker runs in that time.
  free_buffers_.reserve(static_cast<size_t>(base_buffers_));
  for (int i = 0; i < base_buffers_; ++i) free_buffers_.push_back(NewBuffer());
  deferred_next_.assign(static_cast<size_t>(cap), -1);
  deferred_prev_.assign(static_cast<size_t>(cap), -1);
  // Slot 0 is handed out first.
  for (int i = cap - 1; i >= 0; --i) free_slots_.push_back(static_cast<uint32_t>(i));
  // Room for what about 200 applications replace (up to five shared objects
  // and one record each) between two hand-overs; a worker takes a batch at
  // each job it starts (about 0.4 ms), during which a universe-wide close
  // applies about 40. More grows a bin once.
  retire_ = std::make_unique<refit_internal::RetireQueue>(1024, 256);
  pool_ = std::make_unique<refit_internal::JobPool>(options_.workers, cap,
                                                    [this](uint32_t s) { Process(s); });
}

RefitCoordinator::~RefitCoordinator() { pool_.reset(); }

absl::StatusOr<uint32_t> RefitCoordinator::AddSymbol(absl::string_view symbol, uint32_t group) {
  if (group >= kMaxRefitGroups) {
    return absl::InvalidArgumentError(
        absl::StrCat("group must be below ", kMaxRefitGroups, ", got ", group));
  }
  if (symbol.empty() || symbol.size() > static_cast<size_t>(kMaxSymbolLength)) {
    return absl::InvalidArgumentError(
        absl::StrCat("symbol must have 1..", kMaxSymbolLength, " bytes, got ", symbol.size()));
  }
  if (index_.contains(symbol)) {
    return absl::AlreadyExistsError(absl::StrCat("symbol ", symbol, " is already registered"));
  }
  auto w = RollingWindow::Create(options_.window, options_.seasonal);
  if (!w.ok()) return w.status();
  SymbolSlot s;
  s.name = std::string(symbol);
  s.window = *std::move(w);
  scheduler_.InitSymbol(symbol, &s.schedule);
  s.current = ewma_;
  s.group = group;
  if (groups_.size() <= group) groups_.resize(group + 1);
  const uint32_t id = static_cast<uint32_t>(symbols_.size());
  s.last_version = options_.first_version > 0 ? options_.first_version - 1 : 0;
  symbols_.push_back(std::move(s));
  index_.emplace(std::string(symbol), id);
  return id;
}

int64_t RefitCoordinator::Find(absl::string_view symbol) const {
  auto it = index_.find(symbol);
  return it == index_.end() ? -1 : static_cast<int64_t>(it->second);
}

uint32_t RefitCoordinator::flags(uint32_t id) const {
  const SymbolSlot& s = symbols_[id];
  if (s.fallback) return kFlagFallback;
  if (s.current->version == 0) return kFlagWarmup;
  if (s.pooled) return kFlagPooled;
  return 0;
}

absl::Status RefitCoordinator::Seed(uint32_t id, ModelVersionPtr version) {
  if (id >= symbols_.size()) {
    return absl::InvalidArgumentError(absl::StrCat("Seed: no symbol with id ", id));
  }
  if (version == nullptr || version->version < 1 || version->model.is_ewma()) {
    return absl::InvalidArgumentError("Seed: needs an estimated model with a version >= 1");
  }
  SymbolSlot& s = symbols_[id];
  if (s.window.total() != 0 || s.pending >= 0 || s.fits != 0) {
    return absl::FailedPreconditionError(
        absl::StrCat("Seed: symbol ", s.name, " has already seen returns"));
  }
  s.current = version;
  s.last_estimated = std::move(version);
  s.last_version = s.current->version;
  // The stored model counts as the symbol's first fit: the next refit is a
  // warm-started re-estimation, not the identification of a first fit.
  s.fits = 1;
  return absl::OkStatus();
}

void RefitCoordinator::RecordSkipped(uint32_t id, double r, int32_t tag) {
  SubmitBeforePush(&symbols_[id], /*applies_next=*/false);
  symbols_[id].window.Push(r, tag);
}

RefitBarResult RefitCoordinator::OnBar(uint32_t id, int64_t t_ns, double r, FilterState* state,
                                       int32_t tag) {
  RefitBarResult res;
  SymbolSlot& sym = symbols_[id];
  // A job still waiting for its copy takes the window as it was at its due point.
  SubmitBeforePush(&sym, /*applies_next=*/true);
  sym.window.Push(r, tag);
  const int64_t bars = sym.window.total();
  if (sym.pending >= 0) {
    const uint32_t slot = static_cast<uint32_t>(sym.pending);
    if (bars >= sym.apply_bar) {
      bool done = pool_->IsDone(slot);
      if (!done && options_.mode == RefitMode::kReplay) {
        counters_.replay_waits.fetch_add(1, std::memory_order_relaxed);
        pool_->WaitDone(slot);
        done = true;
      }
      if (done) {
        Apply(&sym, slot, t_ns, state);
        res.applied = true;
        res.swapped = last_record_.outcome == RefitOutcome::kSwapped;
        res.state_replaced = last_record_.outcome != RefitOutcome::kRejected;
      }
    }
  }
  if (!res.applied && options_.group_models && !sym.last_estimated && !sym.fallback) {
    res.pooled = MaybeAdoptGroupModel(&sym, t_ns, state);
    res.state_replaced = res.pooled;
  }
  if (scheduler_.OnBar(&sym.schedule, bars, t_ns)) {
    counters_.due.fetch_add(1, std::memory_order_relaxed);
    if (sym.pending >= 0) {
      counters_.coalesced.fetch_add(1, std::memory_order_relaxed);
    } else if (free_slots_.empty()) {
      counters_.dropped.fetch_add(1, std::memory_order_relaxed);
    } else {
      Submit(id, &sym);
      res.scheduled = true;
    }
  }
  return res;
}

bool RefitCoordinator::MaybeAdoptGroupModel(SymbolSlot* sym, int64_t t_ns, FilterState* state) {
  const GroupState& g = groups_[sym->group];
  if (g.seq == 0 || g.seq == sym->pooled_seq) return false;
  const int64_t bars = sym->window.total();
  const int64_t refresh = options_.every_bars > 0 ? options_.every_bars : options_.min_bars;
  if (sym->pooled_seq != 0 && bars - sym->pooled_bar < refresh) return false;
  // With seasonality the donor's profile comes along (the symbol has none of
  // its own yet), and the level and the re-run use the returns as the filter
  // consumes them under it (SeasonalInput).
  const SeasonalProfilePtr& profile = g.latest->profile;
  if (options_.seasonal && profile != nullptr) profile->InvScales(&inv_scales_);
  const double* inv = options_.seasonal && profile != nullptr ? inv_scales_.data() : nullptr;
  const auto input = [&](int i, double* x) {
    *x = sym->window.at(i);
    return !options_.seasonal || SeasonalInput(profile.get(), *x, sym->window.tag_at(i), x, inv);
  };
  // The symbol's own level: its window's variance, or its current forecast.
  const int n = sym->window.size();
  double level = state->var.next_variance;
  if (n >= kPooledLevelBars) {
    double s = 0, ss = 0, x = 0;
    int m = 0;
    for (int i = 0; i < n; ++i) {
      if (input(i, &x)) {
        s += x;
        ++m;
      }
    }
    const double mean = m > 0 ? s / m : 0.0;
    for (int i = 0; i < n; ++i) {
      if (input(i, &x)) ss += (x - mean) * (x - mean);
    }
    if (m > 1 && ss > 0) level = ss / (m - 1);
  }
  absl::StatusOr<ModelParams> p = PooledParams(g.latest->model.params(), level);
  if (!p.ok()) return false;
  const uint32_t version = sym->last_version + 1;
  absl::StatusOr<FilterModel> fm = FilterModel::Create(*p, outputs_, version);
  if (!fm.ok()) return false;
  auto v = std::make_shared<ModelVersion>();
  v->version = version;
  v->model = *std::move(fm);
  v->fitted_bar = bars;
  v->profile = profile;
  retire_->Retire(std::move(sym->current));
  sym->current = std::move(v);
  sym->last_version = version;
  sym->pooled = true;
  sym->pooled_seq = g.seq;
  sym->pooled_bar = bars;
  const FilterModel& m = sym->current->model;
  const int tail = std::min(n, kSwapTailBars);
  InitFilterState(m, 0, state);
  for (int i = n - tail; i < n; ++i) {
    double x = 0;
    if (input(i, &x)) AdvanceState(m, state, x);
  }

  RefitRecord rec;
  rec.symbol = sym->name;
  rec.outcome = RefitOutcome::kPooled;
  rec.version = version;
  rec.scheduled_bar = bars;
  rec.applied_bar = bars;
  rec.t_ns = t_ns;
  rec.spec = p->spec.Label();
  rec.names = p->spec.ParamNames();
  rec.values = p->values;
  rec.converged = true;
  rec.note = absl::StrCat("group model: the dynamics of ", g.donor, " version ", g.latest->version,
                          " at this symbol's variance ", level, " (",
                          n >= kPooledLevelBars ? "its window" : "its current forecast", ")");
  rec.consecutive_failures = sym->failures;
  retire_->Retire(std::move(last_record_));
  last_record_ = std::move(rec);
  last_record_json_.Prepare(last_record_);
  retire_->HandOver();
  counters_.pooled.fetch_add(1, std::memory_order_relaxed);
  return true;
}

void RefitCoordinator::Submit(uint32_t id, SymbolSlot* sym) {
  const uint32_t slot = free_slots_.back();
  free_slots_.pop_back();
  JobSlot& j = *jobs_[slot];
  // The slot freed by this bar's Apply is the one taken here (free_slots_ is
  // last in, first out): it has the name already, and copying it again cost a
  // cache miss on the name's buffer per due symbol in a universe-wide close.
  if (j.symbol.empty() || j.symbol_id != id) {
    j.symbol_id = id;
    j.symbol.assign(sym->name);
  }
  if (options_.seasonal) {
    // Rebuilt (allocating) only when jobs were applied since the last
    // snapshot: after every one in a universe of fewer than
    // 2 * kPriorRebuildsPerSweep symbols, else after symbols / 64 of them, so
    // a universe-wide close rebuilds it about 64 times instead of once per
    // job (scale_bench --session, 10,000 instruments: the rebuilds stalled
    // the ingest thread, p99 43.8 ms in the first 2 s of a minute). The
    // count and the snapshot are in the checkpoint (SeasonalPool::SaveState).
    const uint64_t refresh = std::max<uint64_t>(1, symbols_.size() / kPriorRebuildsPerSweep);
    j.prior =
        options_.seasonal_options.prior_sessions > 0 ? seasonal_pool_.Snapshot(refresh) : nullptr;
  }
  j.in_force = sym->current;
  j.estimated = sym->last_estimated;
  j.fit_index = sym->fits++;
  // The full identification runs on the first fit, every reidentify_every
  // refits, and after a failed gate (the current specification was refused).
  j.reidentify = !sym->last_estimated || sym->failures > 0 ||
                 (options_.reidentify_every > 0 && j.fit_index % options_.reidentify_every == 0);
  j.seed =
      StableSymbolHash(sym->name) ^ (static_cast<uint64_t>(j.fit_index) * 0x9E3779B97F4A7C15ull);
  ++j.generation;
  j.bar = sym->window.total();
  j.version = sym->last_version + 1;
  sym->pending = static_cast<int32_t>(slot);
  sym->apply_bar = j.bar + options_.apply_lag_bars;
  j.submitted = std::chrono::steady_clock::now();
  j.priority = !sym->last_estimated || sym->failures > 0 || sym->fallback;
  counters_.submitted.fetch_add(1, std::memory_order_relaxed);
  counters_.in_flight.fetch_add(1, std::memory_order_relaxed);
  if (options_.mode == RefitMode::kLive) {
    // The copy of the window waits for a gap between input batches
    // (SubmitDeferred), so a universe falling due at one bar close does not
    // copy every window inside that close. Every slot is pending at most once.
    sym->inputs = JobInputs::kDeferred;
    DeferredPushBack(slot);
    return;
  }
  CopyAndSubmit(sym, slot);
}

void RefitCoordinator::CopyAndSubmit(SymbolSlot* sym, uint32_t slot) {
  JobSlot& j = *jobs_[slot];
  CopyInputs(sym, &j);
  // Where ReclaimBuffers looks; a full ring forgets its oldest entry (that
  // job keeps its buffer until it is applied).
  const size_t cap = handed_.size();
  if (handed_size_ == cap) {
    handed_head_ = handed_head_ + 1 == cap ? 0 : handed_head_ + 1;
    --handed_size_;
  }
  size_t tail = handed_head_ + handed_size_;
  if (tail >= cap) tail -= cap;
  handed_[tail] = {slot, j.generation};
  ++handed_size_;
  pool_->Submit(slot, j.priority);
}

std::unique_ptr<RefitCoordinator::JobBuffer> RefitCoordinator::NewBuffer() {
  auto b = std::make_unique<JobBuffer>();
  // Written once (resize, then clear: the capacity stays) so that the pages
  // are resident before the first copy: otherwise a first copy takes its page
  // faults on the ingest thread, about 20 µs per 2,000-bar buffer (measured
  // with bench/scale_bench when every slot had its own: 185 ms for 9,500
  // first submissions at one bar close).
  b->returns.resize(static_cast<size_t>(options_.window));
  b->returns.clear();
  if (options_.seasonal) {
    b->tags.resize(static_cast<size_t>(options_.window));
    b->tags.clear();
  }
  buffer_count_.store(buffer_count_.load(std::memory_order_relaxed) + 1, std::memory_order_relaxed);
  return b;
}

std::unique_ptr<RefitCoordinator::JobBuffer> RefitCoordinator::TakeBuffer() {
  if (free_buffers_.empty()) return NewBuffer();
  std::unique_ptr<JobBuffer> b = std::move(free_buffers_.back());
  free_buffers_.pop_back();
  return b;
}

void RefitCoordinator::ReleaseBuffer(std::unique_ptr<JobBuffer> b) {
  const int count = buffer_count_.load(std::memory_order_relaxed);
  if (count <= base_buffers_) {
    free_buffers_.push_back(std::move(b));  // capacity reserved: no allocation
    return;
  }
  // More exist than the base (made by NewBuffer on this thread, so freed into
  // its own arena): a burst of forced copies (a universe whose next bars came
  // before its jobs were copied) does not keep a buffer per symbol for good.
  // (Freeing only when base_buffers_ were free already kept them: the gaps
  // take free buffers as fast as they come back, so the free list is rarely
  // full while jobs wait.)
  b.reset();
  buffer_count_.store(buffer_count_.load(std::memory_order_relaxed) - 1, std::memory_order_relaxed);
}

void RefitCoordinator::ReclaimBuffers() {
  while (handed_size_ > 0) {
    const auto [slot, generation] = handed_[handed_head_];
    JobSlot& j = *jobs_[slot];
    // Skip what no longer holds this job's buffer: the slot was applied (and
    // maybe reused), or the job got its buffer back since.
    const bool current = j.generation == generation && j.buffer != nullptr;
    if (current && !pool_->IsDone(slot)) break;  // finished in order, mostly
    if (current) {
      // Done: the worker's reads of the buffer happened before (acquire).
      SymbolSlot& sym = symbols_[j.symbol_id];
      if (sym.pending == static_cast<int32_t>(slot) && sym.window.total() == j.bar) {
        // The window is still the copy's: it holds the inputs until the job is
        // applied or the window is about to change (SubmitBeforePush).
        ReleaseBuffer(std::move(j.buffer));
        sym.inputs = JobInputs::kInWindow;
      }
    }
    handed_head_ = handed_head_ + 1 == handed_.size() ? 0 : handed_head_ + 1;
    --handed_size_;
  }
}

int RefitCoordinator::SubmitDeferred(int max_jobs) {
  ReclaimBuffers();
  int n = 0;
  while (n < max_jobs && deferred_head_ >= 0 && !free_buffers_.empty()) {
    const uint32_t slot = static_cast<uint32_t>(deferred_head_);
    DeferredUnlink(slot);
    CopyAndSubmit(&symbols_[jobs_[slot]->symbol_id], slot);
    ++n;
  }
  return n;
}

void RefitCoordinator::SubmitBeforePush(SymbolSlot* sym, bool applies_next) {
  // The state lives in the symbol's slot, which the bar touches anyway: a
  // storm keeps every symbol pending, and reading the job slot here instead
  // cost every bar a cache line (and a page) of its own (refit_bench
  // BM_IngestLatency).
  if (sym->inputs == JobInputs::kInBuffer) return;
  const uint32_t slot = static_cast<uint32_t>(sym->pending);
  if (sym->inputs == JobInputs::kDeferred) {
    DeferredUnlink(slot);
    CopyAndSubmit(sym, slot);
    return;
  }
  // kInWindow: the job is done. OnBar applies it right after this push when
  // it is due by then, and nothing reads its inputs after that; otherwise
  // they go back into a buffer before the window moves.
  if (applies_next && sym->window.total() + 1 >= sym->apply_bar) return;
  CopyInputs(sym, jobs_[slot].get());
}

void RefitCoordinator::CopyInputs(SymbolSlot* sym, JobSlot* j) {
  j->buffer = TakeBuffer();
  sym->window.CopyTo(&j->buffer->returns);  // capacity reserved: no allocation
  if (options_.seasonal) sym->window.CopyTagsTo(&j->buffer->tags);
  sym->inputs = JobInputs::kInBuffer;
}

void RefitCoordinator::DeferredPushBack(uint32_t slot) {
  const int32_t s = static_cast<int32_t>(slot);
  deferred_prev_[slot] = deferred_tail_;
  deferred_next_[slot] = -1;
  if (deferred_tail_ >= 0) {
    deferred_next_[static_cast<size_t>(deferred_tail_)] = s;
  } else {
    deferred_head_ = s;
  }
  deferred_tail_ = s;
  deferred_count_.fetch_add(1, std::memory_order_relaxed);
}

void RefitCoordinator::DeferredUnlink(uint32_t slot) {
  const int32_t prev = deferred_prev_[slot], next = deferred_next_[slot];
  if (prev >= 0) {
    deferred_next_[static_cast<size_t>(prev)] = next;
  } else {
    deferred_head_ = next;
  }
  if (next >= 0) {
    deferred_prev_[static_cast<size_t>(next)] = prev;
  } else {
    deferred_tail_ = prev;
  }
  deferred_count_.fetch_sub(1, std::memory_order_relaxed);
}

void RefitCoordinator::Process(uint32_t slot) {
  // First what the ingest thread retired since a worker last took it.
  retire_->Release();
  JobSlot& j = *jobs_[slot];
  const auto t0 = std::chrono::steady_clock::now();
  const std::vector<double>& returns = j.buffer->returns;
  const std::vector<int32_t>& tags = j.buffer->tags;
  // Seasonality: estimate the profile, then fit on what the filter consumes.
  std::vector<double> x, x_old, inv;
  SeasonalProfilePtr profile;
  absl::Span<const double> series = returns;
  j.contribution.reset();
  if (options_.seasonal) {
    auto est = EstimateSeasonalProfile(returns, tags, options_.seasonal_options, j.prior.get());
    if (est.ok()) {
      profile = est->profile;
      // Kept until applied, for the pool; the rest of the estimate (its
      // counts and double-precision own factors) is freed here.
      j.contribution = std::make_shared<const SeasonalContribution>(PoolContribution(*est));
    }
    SeasonalSeries(profile.get(), returns, tags, &x, &inv);
    SeasonalSeries(j.in_force->profile.get(), returns, tags, &x_old, &inv);
    series = x;
  }
  RefitRequest req;
  req.symbol_id = j.symbol_id;
  req.returns = series;
  req.current = j.estimated ? &j.estimated->model.params() : nullptr;
  req.reidentify = j.reidentify;
  req.seed = j.seed;
  req.fit_index = j.fit_index;
  req.bar = j.bar;
  absl::StatusOr<RefitCandidate> cand = refitter_->Fit(req);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();

  RefitRecord rec;
  rec.symbol = j.symbol;
  rec.scheduled_bar = j.bar;
  rec.fit_seconds = seconds;
  rec.queue_seconds = std::chrono::duration<double>(t0 - j.submitted).count();
  j.passed = false;
  j.refit_error = false;
  j.candidate.reset();
  if (!cand.ok()) {
    j.refit_error = true;
    rec.reasons.push_back(absl::StrCat("refit error: ", cand.status().message()));
    rec.job_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    j.record_json.Prepare(rec);
    j.record = std::move(rec);
    return;
  }
  const FitResult& fit = cand->fit;
  const ModelParams& p = fit.params;
  rec.spec = p.spec.Label();
  rec.names = p.spec.ParamNames();
  rec.values = p.values;
  rec.std_errors = fit.std_errors;
  rec.robust_std_errors = fit.robust_std_errors;
  rec.loglik = fit.loglik;
  rec.bic = fit.bic;
  rec.nobs = fit.nobs;
  rec.converged = fit.converged;
  rec.note = cand->note;

  GateInput gi;
  gi.params = &p;
  gi.converged = fit.converged;
  gi.diagnostics = cand->diagnostics;
  // Compile only what passes the constraint check (FilterModel::Create checks it).
  absl::StatusOr<FilterModel> fm =
      absl::FailedPreconditionError("candidate parameters are not finite or break the constraints");
  bool finite = p.values.size() == static_cast<size_t>(p.spec.NumParams());
  for (double v : p.values) finite = finite && std::isfinite(v);
  if (finite && p.CheckConstraints().ok()) fm = FilterModel::Create(p, outputs_, j.version);
  const int hb = options_.holdout_bars;
  if (fm.ok() && hb > 0 && static_cast<int>(series.size()) > hb &&
      (!options_.seasonal || static_cast<int>(x_old.size()) > hb)) {
    HoldoutScore hs;
    hs.bars = hb;
    if (options_.seasonal) {
      // Raw-return units: density of r = s x is f(x) / s.
      hs.candidate_loglik = ScoreHoldout(*fm, x, hb) - TailLogScale(profile.get(), tags, hb);
      hs.current_loglik = ScoreHoldout(j.in_force->model, x_old, hb) -
                          TailLogScale(j.in_force->profile.get(), tags, hb);
    } else {
      hs.candidate_loglik = ScoreHoldout(*fm, returns, hb);
      hs.current_loglik = ScoreHoldout(j.in_force->model, returns, hb);
    }
    gi.holdout = hs;
  }
  GateOutcome gate = EvaluateQualityGate(gi, options_);
  if (gate.passed && !fm.ok()) {
    gate.passed = false;
    gate.reasons.push_back(absl::StrCat("filter: ", fm.status().message()));
  }
  rec.reasons = std::move(gate.reasons);
  if (gate.passed) {
    auto v = std::make_shared<ModelVersion>();
    v->version = j.version;
    v->model = *std::move(fm);
    v->std_errors = fit.std_errors;
    v->loglik = fit.loglik;
    v->fitted_bar = j.bar;
    v->profile = profile;
    RunTail(v->model, series, kSwapTailBars, &j.tail_state);
    j.candidate = std::move(v);
    j.passed = true;
  }
  rec.job_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  // Formatting the record's numbers here, not where it is applied, takes
  // most of the record's encoding off the ingest thread (refit_bench
  // BM_EngineApply).
  j.record_json.Prepare(rec);
  j.record = std::move(rec);
}

void RefitCoordinator::Apply(SymbolSlot* sym, uint32_t slot, int64_t t_ns, FilterState* state) {
  JobSlot& j = *jobs_[slot];
  const int64_t bars = sym->window.total();
  if (options_.seasonal && j.contribution != nullptr) seasonal_pool_.Add(*j.contribution);
  // What this replaces goes to the workers to release (RetireQueue): the
  // versions, the record and its numbers were allocated by a worker.
  if (j.passed) {
    retire_->Retire(std::move(sym->current));
    retire_->Retire(std::move(sym->last_estimated));
    sym->current = std::move(j.candidate);
    sym->last_estimated = sym->current;
    sym->last_version = sym->current->version;
    sym->failures = 0;
    sym->fallback = false;
    sym->pooled = false;
    GroupState& g = groups_[sym->group];
    retire_->Retire(std::move(g.latest));
    g.latest = sym->current;
    g.donor = sym->name;
    ++g.seq;
    const FilterModel& m = sym->current->model;
    const SeasonalProfile* prof = sym->current->profile.get();
    // One window entry as the filter consumes it under the new version.
    auto advance = [&](int back) {
      double x = sym->window.back(back);
      if (options_.seasonal && !SeasonalInput(prof, x, sym->window.tag_back(back), &x)) return;
      AdvanceState(m, state, x);
    };
    // The worker's state ends at the job's window; catch up on the returns
    // that arrived since (normally apply_lag_bars of them).
    const int64_t since = bars - j.bar;
    if (since <= sym->window.size() && since <= kSwapTailBars) {
      *state = j.tail_state;
      for (int64_t i = since - 1; i >= 0; --i) advance(static_cast<int>(i));
    } else {
      // A very late job (live mode): re-run over the current window's tail.
      const int n = sym->window.size();
      const int tail = std::min(n, kSwapTailBars);
      InitFilterState(m, 0, state);
      for (int i = tail - 1; i >= 0; --i) advance(i);
    }
    j.record.outcome = RefitOutcome::kSwapped;
    counters_.swapped.fetch_add(1, std::memory_order_relaxed);
  } else {
    ++sym->failures;
    counters_.rejected.fetch_add(1, std::memory_order_relaxed);
    if (j.refit_error) counters_.refit_errors.fetch_add(1, std::memory_order_relaxed);
    j.record.outcome = RefitOutcome::kRejected;
    if (sym->failures >= options_.max_failures && !sym->fallback) {
      sym->fallback = true;
      sym->pooled = false;
      retire_->Retire(std::move(sym->current));
      sym->current = ewma_;
      // Continue from the variance in force, so the stream does not jump.
      double v = state->var.next_variance;
      if (!(v > 0) || !std::isfinite(v)) {
        double ss = 0;
        for (int i = 0; i < sym->window.size(); ++i) ss += sym->window.at(i) * sym->window.at(i);
        v = std::max(1e-12, ss / std::max(1, sym->window.size()));
      }
      InitFilterState(ewma_->model, v, state);
      j.record.outcome = RefitOutcome::kFallback;
      counters_.fallbacks.fetch_add(1, std::memory_order_relaxed);
    }
  }
  j.record.version = sym->current->version;
  j.record.applied_bar = bars;
  j.record.t_ns = t_ns;
  j.record.consecutive_failures = sym->failures;
  j.record.fallback = sym->fallback;
  // Moved, not swapped: a swap would leave the replaced record's buffers in
  // the slot, held by every queued job until a worker takes it (scale_bench,
  // 10,000 instruments: 0.5 KiB more per symbol at the end). The replaced
  // ones are moved out first, so these moves free nothing here.
  retire_->Retire(std::move(last_record_));
  retire_->Retire(std::move(last_record_json_));
  last_record_ = std::move(j.record);
  last_record_json_ = std::move(j.record_json);
  retire_->Retire(std::move(j.in_force));
  retire_->Retire(std::move(j.estimated));
  retire_->Retire(std::move(j.candidate));
  retire_->Retire(std::move(j.prior));
  retire_->Retire(std::move(j.contribution));
  retire_->HandOver();
  if (j.buffer != nullptr) ReleaseBuffer(std::move(j.buffer));
  sym->inputs = JobInputs::kInBuffer;
  pool_->Recycle(slot);
  free_slots_.push_back(slot);
  sym->pending = -1;
  counters_.in_flight.fetch_sub(1, std::memory_order_relaxed);
}

void RefitCoordinator::Retire(std::shared_ptr<const void> object) {
  retire_->Retire(std::move(object));
  retire_->HandOver();
}

size_t RefitCoordinator::retired_pending() const { return retire_->pending(); }

RefitStats RefitCoordinator::stats() const {
  RefitStats s;
  s.due = counters_.due.load(std::memory_order_relaxed);
  s.submitted = counters_.submitted.load(std::memory_order_relaxed);
  s.coalesced = counters_.coalesced.load(std::memory_order_relaxed);
  s.dropped = counters_.dropped.load(std::memory_order_relaxed);
  s.swapped = counters_.swapped.load(std::memory_order_relaxed);
  s.rejected = counters_.rejected.load(std::memory_order_relaxed);
  s.refit_errors = counters_.refit_errors.load(std::memory_order_relaxed);
  s.fallbacks = counters_.fallbacks.load(std::memory_order_relaxed);
  s.replay_waits = counters_.replay_waits.load(std::memory_order_relaxed);
  s.pooled = counters_.pooled.load(std::memory_order_relaxed);
  s.in_flight = counters_.in_flight.load(std::memory_order_relaxed);
  s.queued = pool_->queued() + deferred_count_.load(std::memory_order_relaxed);
  s.running = pool_->running();
  s.job_buffers = buffer_count_.load(std::memory_order_relaxed);
  return s;
}

size_t RefitCoordinator::MemoryBytesPerSymbol() const {
  // An estimated version: the struct, its parameter vector and std errors
  // (at most 2 * 32 doubles for the largest spec in practice), and the
  // shared_ptr control block.
  const size_t version = sizeof(ModelVersion) + 2 * 32 * sizeof(double) + 32;
  // Seasonal: the window's 16-bit tags and one profile (a double a bucket).
  const size_t seasonal =
      options_.seasonal
          ? static_cast<size_t>(options_.window) * sizeof(uint16_t) + sizeof(SeasonalProfile) +
                static_cast<size_t>(options_.seasonal_options.buckets) * sizeof(double)
          : 0;
  return sizeof(SymbolSlot) + static_cast<size_t>(options_.window) * sizeof(double) + version +
         seasonal +
         // hash-map entry: key string, id and control byte
         sizeof(std::string) + sizeof(uint32_t) + 1 + kMaxSymbolLength;
}

}  // namespace aftershock

namespace aftershock {
namespace {

constexpr uint32_t kNullVersion = 0xFFFFFFFFu;  // reference to no version
constexpr uint32_t kEwmaVersionRef = 0;        // reference to the shared EWMA (version 0)
constexpr uint64_t kMaxSavedVersions = uint64_t{1} << 26;

// A pending refit job's inputs as a checkpoint holds them: filled from a job
// slot by the capture, read back by the restore and handed to a job slot.
struct SavedJob {
  int64_t apply_bar = 0;  // the symbol's, not the slot's
  std::vector<double> returns;
  std::vector<int32_t> tags;
  SeasonalProfilePtr prior;
  ModelVersionPtr in_force, estimated;
  bool reidentify = false;
  uint64_t seed = 0;
  int64_t fit_index = -1;
  int64_t bar = 0;
  uint32_t version = 0;
};

// Copies the inputs both a SavedJob and a job slot hold (the same names), the
// window copy aside.
template <typename From, typename To>
void CopyJobInputs(const From& from, To* to) {
  to->prior = from.prior;
  to->in_force = from.in_force;
  to->estimated = from.estimated;
  to->reidentify = from.reidentify;
  to->seed = from.seed;
  to->fit_index = from.fit_index;
  to->bar = from.bar;
  to->version = from.version;
}

}  // namespace

// The coordinator's captured state (state_capture.h).
struct RefitSymbolCapture {
  std::string name;  // copied when the record is created
  uint32_t group = 0;
  RollingWindow window;  // mirror of the live window (SyncFrom)
  ScheduleState schedule;
  ModelVersionPtr current, last_estimated;  // re-pointed only when changed
  uint32_t last_version = 0;
  int32_t failures = 0;
  bool fallback = false;
  int64_t fits = 0;
  bool pooled = false;
  uint64_t pooled_seq = 0;
  int64_t pooled_bar = 0;
  // The pending job's inputs (immutable while it is pending), copied when the
  // job first appears (job.fit_index differs).
  bool has_job = false;
  SavedJob job;
};

struct RefitGroupCapture {
  ModelVersionPtr latest;
  std::string donor;
  uint64_t seq = 0;
};

class RefitCapture : public StateCapture {
 public:
  // `job_slots`: the coordinator's job slots ([refit] queue_capacity).
  RefitCapture(bool seasonal, ModelVersionPtr ewma, size_t job_slots)
      : seasonal_(seasonal), ewma_(std::move(ewma)), job_slots_(job_slots) {}

  void Encode(StateWriter* w) const override;
  // Pending jobs captured at different gaps can outnumber the slots a restore
  // re-submits them into (one symbol's job captured before it completed,
  // another's after it was submitted).
  bool Restorable() const override { return pending_jobs <= job_slots_; }

  size_t pending_jobs = 0;  // records with has_job (kept by CaptureSymbol)
  uint64_t counters[10] = {};
  StateWriter pool;  // the seasonal pool's SaveState (feed-wide, small)
  std::vector<RefitGroupCapture> groups;
  std::vector<RefitSymbolCapture> symbols;  // by id

 private:
  const bool seasonal_;
  const ModelVersionPtr ewma_;
  const size_t job_slots_;
};

void RefitCapture::Encode(StateWriter* w) const {
  for (uint64_t v : counters) w->U64(v);
  // The version table: each referenced version once; reference 0 is the
  // shared EWMA, 1.. the table's entries, kNullVersion none.
  std::vector<const ModelVersion*> table;
  absl::flat_hash_map<const ModelVersion*, uint32_t> ref;
  auto add = [&](const ModelVersionPtr& v) {
    if (v == nullptr || v == ewma_ || ref.contains(v.get())) return;
    table.push_back(v.get());
    ref.emplace(v.get(), static_cast<uint32_t>(table.size()));
  };
  for (const RefitSymbolCapture& s : symbols) {
    add(s.current);
    add(s.last_estimated);
    if (s.has_job) {
      add(s.job.in_force);
      add(s.job.estimated);
    }
  }
  for (const RefitGroupCapture& g : groups) add(g.latest);
  auto ref_of = [&](const ModelVersionPtr& v) {
    if (v == nullptr) return kNullVersion;
    if (v == ewma_) return kEwmaVersionRef;
    return ref.at(v.get());
  };
  w->U64(table.size());
  for (const ModelVersion* v : table) {
    w->U32(v->version);
    SaveModelParams(v->model.params(), w);
    w->U64(v->std_errors.size());
    for (double e : v->std_errors) w->F64(e);
    w->F64(v->loglik);
    w->I64(v->fitted_bar);
    if (seasonal_) SaveSeasonalProfile(v->profile.get(), w);
  }
  if (seasonal_) w->Append(pool.data());
  w->U64(groups.size());
  for (const RefitGroupCapture& g : groups) {
    w->U32(ref_of(g.latest));
    w->Bytes(g.donor);
    w->U64(g.seq);
  }
  w->U64(symbols.size());
  for (const RefitSymbolCapture& s : symbols) {
    w->Bytes(s.name);
    w->U32(s.group);
    s.window.SaveState(w);
    w->I64(s.schedule.next_due_bar);
    w->I64(s.schedule.next_due_ns);
    w->I64(s.schedule.phase_ns);
    w->I32(s.schedule.phase_bars);
    w->Bool(s.schedule.armed);
    w->U32(ref_of(s.current));
    w->U32(ref_of(s.last_estimated));
    w->U32(s.last_version);
    w->I32(s.failures);
    w->Bool(s.fallback);
    w->I64(s.fits);
    w->Bool(s.pooled);
    w->U64(s.pooled_seq);
    w->I64(s.pooled_bar);
    w->Bool(s.has_job);
    if (!s.has_job) continue;
    const SavedJob& j = s.job;
    w->I64(j.apply_bar);
    w->U64(j.returns.size());
    for (double r : j.returns) w->F64(r);
    if (seasonal_) {
      w->U64(j.tags.size());
      for (int32_t t : j.tags) w->I32(t);
      SaveSeasonalProfile(j.prior.get(), w);
    }
    w->U32(ref_of(j.in_force));
    w->U32(ref_of(j.estimated));
    w->Bool(j.reidentify);
    w->U64(j.seed);
    w->I64(j.fit_index);
    w->I64(j.bar);
    w->U32(j.version);
  }
}

void RefitCoordinator::SaveState(StateWriter* w) const {
  RefitCapture c(options_.seasonal, ewma_, jobs_.size());
  CaptureState(&c);
  c.Encode(w);
}

std::unique_ptr<StateCapture> RefitCoordinator::NewStateCapture() const {
  return std::make_unique<RefitCapture>(options_.seasonal, ewma_, jobs_.size());
}

void RefitCoordinator::CaptureState(StateCapture* capture) const {
  for (uint32_t id = 0; id < symbols_.size(); ++id) CaptureSymbol(capture, id);
  CaptureFeedWide(capture);
}

void RefitCoordinator::CaptureFeedWide(StateCapture* capture) const {
  RefitCapture& c = *static_cast<RefitCapture*>(capture);
  const Counters& k = counters_;
  int i = 0;
  for (const std::atomic<uint64_t>* v :
       {&k.due, &k.submitted, &k.coalesced, &k.dropped, &k.swapped, &k.rejected, &k.refit_errors,
        &k.fallbacks, &k.replay_waits, &k.pooled}) {
    c.counters[i++] = v->load(std::memory_order_relaxed);
  }
  if (options_.seasonal) {
    c.pool.Clear();
    seasonal_pool_.SaveState(&c.pool);
  }
  c.groups.resize(groups_.size());
  for (size_t g = 0; g < groups_.size(); ++g) {
    if (c.groups[g].latest.get() != groups_[g].latest.get()) c.groups[g].latest = groups_[g].latest;
    c.groups[g].donor = groups_[g].donor;  // keeps its capacity
    c.groups[g].seq = groups_[g].seq;
  }
}

void RefitCoordinator::CaptureSymbol(StateCapture* capture, uint32_t id) const {
  RefitCapture& c = *static_cast<RefitCapture*>(capture);
  const size_t old = c.symbols.size();
  if (old < symbols_.size()) {
    c.symbols.resize(symbols_.size());  // symbols only ever join
    for (size_t k = old; k < symbols_.size(); ++k) c.symbols[k].name = symbols_[k].name;
  }
  const SymbolSlot& s = symbols_[id];
  RefitSymbolCapture& d = c.symbols[id];
  d.group = s.group;
  c.AddCopied(d.window.SyncFrom(s.window));
  d.schedule = s.schedule;
  if (d.current.get() != s.current.get()) d.current = s.current;
  if (d.last_estimated.get() != s.last_estimated.get()) d.last_estimated = s.last_estimated;
  d.last_version = s.last_version;
  d.failures = s.failures;
  d.fallback = s.fallback;
  d.fits = s.fits;
  d.pooled = s.pooled;
  d.pooled_seq = s.pooled_seq;
  d.pooled_bar = s.pooled_bar;
  // The flat values above (the version pointers compared, re-pointed rarely).
  c.AddCopied(sizeof(d.group) + sizeof(d.schedule) + sizeof(d.last_version) + sizeof(d.failures) +
              sizeof(d.fallback) + sizeof(d.fits) + sizeof(d.pooled) + sizeof(d.pooled_seq) +
              sizeof(d.pooled_bar));
  const bool has_job = s.pending >= 0;
  if (has_job != d.has_job) {
    if (has_job) {
      ++c.pending_jobs;
    } else {
      --c.pending_jobs;
    }
  }
  d.has_job = has_job;
  if (!has_job) return;
  // Inputs only: the worker does not write them while the job runs.
  const JobSlot& j = *jobs_[s.pending];
  d.job.apply_bar = s.apply_bar;
  if (d.job.fit_index == j.fit_index) return;  // the same job as last time
  CopyJobInputs(j, &d.job);
  if (s.inputs != JobInputs::kInBuffer) {
    // Not copied yet, or finished with its buffer taken back: its window is
    // the symbol's own, unchanged since the due point (OnBar and
    // RecordSkipped copy it first when it is about to change).
    s.window.CopyTo(&d.job.returns);
    if (options_.seasonal) s.window.CopyTagsTo(&d.job.tags);
  } else {
    // assign keeps the capture's capacity from an earlier job.
    d.job.returns.assign(j.buffer->returns.begin(), j.buffer->returns.end());
    d.job.tags.assign(j.buffer->tags.begin(), j.buffer->tags.end());
  }
  c.AddCopied(sizeof(SavedJob) + d.job.returns.size() * sizeof(double) +
              d.job.tags.size() * sizeof(int32_t));
}

absl::Status RefitCoordinator::RestoreState(absl::string_view payload) {
  for (const SymbolSlot& s : symbols_) {
    if (s.window.total() != 0 || s.pending >= 0) {
      return absl::FailedPreconditionError("refit RestoreState needs a coordinator without bars");
    }
  }
  StateReader r(payload);
  uint64_t counters[10];
  for (uint64_t& v : counters) v = r.U64("refit counters");
  const uint64_t nv = r.Count("refit version count", kMaxSavedVersions);
  if (!r.ok()) return r.status();
  std::vector<ModelVersionPtr> table;
  table.reserve(nv + 1);
  table.push_back(ewma_);
  for (uint64_t i = 0; i < nv && r.ok(); ++i) {
    const std::string what = absl::StrCat("refit version entry ", i);
    auto v = std::make_shared<ModelVersion>();
    v->version = r.U32(what);
    const ModelParams p = RestoreModelParams(&r, what);
    const uint64_t ne = r.Count(what + " std errors", static_cast<uint64_t>(p.values.size()));
    v->std_errors.resize(ne);
    for (double& e : v->std_errors) e = r.F64(what + " std errors");
    v->loglik = r.F64(what + " loglik");
    v->fitted_bar = r.I64(what + " fitted bar");
    if (options_.seasonal) {
      v->profile = RestoreSeasonalProfile(&r, options_.seasonal_options, what + " profile");
    }
    if (!r.ok()) break;
    absl::StatusOr<FilterModel> fm = FilterModel::Create(p, outputs_, v->version);
    if (!fm.ok()) {
      r.Fail(what, fm.status().message());
      break;
    }
    v->model = *std::move(fm);
    table.push_back(std::move(v));
  }
  auto deref = [&](absl::string_view what) -> ModelVersionPtr {
    const uint32_t k = r.U32(what);
    if (!r.ok() || k == kNullVersion) return nullptr;
    if (k >= table.size()) {
      r.Fail(what, absl::StrCat("version reference ", k, " beyond the ", table.size(), " saved"));
      return nullptr;
    }
    return table[k];
  };
  SeasonalPool pool(options_.seasonal_options);
  if (options_.seasonal && r.ok()) pool.RestoreState(&r);
  const uint64_t ng = r.Count("refit group count", kMaxRefitGroups);
  std::vector<GroupState> groups(r.ok() ? ng : 0);
  for (uint64_t g = 0; g < groups.size() && r.ok(); ++g) {
    const std::string what = absl::StrCat("refit group ", g);
    groups[g].latest = deref(what + " latest version");
    groups[g].donor = std::string(r.Bytes(what + " donor", kMaxSymbolLength));
    groups[g].seq = r.U64(what + " sequence");
    if (r.ok() && (groups[g].latest == nullptr) != (groups[g].seq == 0)) {
      r.Fail(what, "a sequence without a version (or the reverse)");
    }
  }
  const uint64_t ns = r.Count("refit symbol count", symbols_.size());
  if (r.ok() && ns != symbols_.size()) {
    r.Fail("refit symbol count",
           absl::StrCat(ns, " saved, ", symbols_.size(), " symbols restored in the core"));
  }
  struct Pending {
    uint32_t id = 0;  // symbol
    SavedJob job;
  };
  std::vector<SymbolSlot> slots(r.ok() ? ns : 0);
  std::vector<Pending> pending;
  for (uint32_t id = 0; id < slots.size() && r.ok(); ++id) {
    const SymbolSlot& live = symbols_[id];
    SymbolSlot& s = slots[id];
    const absl::string_view name = r.Bytes("refit symbol name", kMaxSymbolLength);
    const uint32_t group = r.U32("refit symbol group");
    if (!r.ok()) break;
    const std::string what = absl::StrCat("refit symbol ", name);
    if (name != live.name) {
      r.Fail(what, absl::StrCat("saved in position ", id, " where the core has ", live.name));
      break;
    }
    if (group != live.group || group >= groups.size()) {
      r.Fail(what + " group",
             absl::StrCat("saved in group ", group, ", now in group ", live.group,
                          ": [alerts.groups] membership changed and group models depend on it"));
      break;
    }
    s.name = live.name;
    s.group = group;
    auto window = RollingWindow::Create(options_.window, options_.seasonal);
    if (!window.ok()) return window.status();
    s.window = *std::move(window);
    s.window.RestoreState(&r, what);
    s.schedule.next_due_bar = r.I64(what + " schedule");
    s.schedule.next_due_ns = r.I64(what + " schedule");
    s.schedule.phase_ns = r.I64(what + " schedule");
    s.schedule.phase_bars = r.I32(what + " schedule");
    s.schedule.armed = r.Bool(what + " schedule");
    s.current = deref(what + " current version");
    s.last_estimated = deref(what + " last estimated version");
    s.last_version = r.U32(what + " last version");
    s.failures = r.I32(what + " failures");
    s.fallback = r.Bool(what + " fallback");
    s.fits = r.I64(what + " fits");
    s.pooled = r.Bool(what + " pooled");
    s.pooled_seq = r.U64(what + " pooled sequence");
    s.pooled_bar = r.I64(what + " pooled bar");
    const bool has_job = r.Bool(what + " pending job");
    if (!r.ok()) break;
    if (s.current == nullptr || s.failures < 0 || s.fits < 0) {
      r.Fail(what, "no current version, or a negative failure or fit count");
      break;
    }
    if (!has_job) continue;
    if (pending.size() >= jobs_.size()) {
      r.Fail(what + " pending job", "more pending jobs than [refit] queue_capacity");
      break;
    }
    Pending p;
    p.id = id;
    SavedJob& j = p.job;
    j.apply_bar = r.I64(what + " apply bar");
    const uint64_t nr = r.Count(what + " job window", static_cast<uint64_t>(options_.window));
    j.returns.resize(r.ok() ? nr : 0);
    for (double& x : j.returns) x = r.FiniteF64(what + " job window");
    if (options_.seasonal) {
      const uint64_t nt = r.Count(what + " job tags", static_cast<uint64_t>(options_.window));
      if (r.ok() && nt != nr) r.Fail(what + " job tags", "not one tag per return");
      j.tags.resize(r.ok() ? nt : 0);
      for (int32_t& t : j.tags) t = r.I32(what + " job tags");
      if (r.ok()) {
        j.prior = RestoreSeasonalProfile(&r, options_.seasonal_options, what + " job prior");
      }
    }
    j.in_force = deref(what + " job version in force");
    j.estimated = deref(what + " job warm start");
    j.reidentify = r.Bool(what + " job");
    j.seed = r.U64(what + " job");
    j.fit_index = r.I64(what + " job");
    j.bar = r.I64(what + " job");
    j.version = r.U32(what + " job");
    if (r.ok() && j.in_force == nullptr) r.Fail(what + " job", "no version in force");
    if (r.ok() && (j.bar > s.window.total() || j.apply_bar < j.bar)) {
      r.Fail(what + " job", "scheduled after the window's end or applied before it was scheduled");
    }
    if (!r.ok()) break;
    pending.push_back(std::move(p));
  }
  if (absl::Status st = r.Finish("refit state"); !st.ok()) return st;
  for (const SymbolSlot& s : slots) {
    if (s.group >= groups.size()) {
      return absl::DataLossError(absl::StrCat("refit symbol ", s.name, ": no saved group ",
                                              s.group));
    }
  }

  // Commit: nothing below can fail.
  std::atomic<uint64_t>* dst[] = {&counters_.due,      &counters_.submitted, &counters_.coalesced,
                                  &counters_.dropped,  &counters_.swapped,   &counters_.rejected,
                                  &counters_.refit_errors, &counters_.fallbacks,
                                  &counters_.replay_waits, &counters_.pooled};
  for (int i = 0; i < 10; ++i) dst[i]->store(counters[i], std::memory_order_relaxed);
  if (options_.seasonal) seasonal_pool_ = std::move(pool);
  groups_ = std::move(groups);
  for (uint32_t id = 0; id < slots.size(); ++id) symbols_[id] = std::move(slots[id]);
  for (const Pending& p : pending) {
    SymbolSlot& sym = symbols_[p.id];
    const uint32_t slot = free_slots_.back();
    free_slots_.pop_back();
    JobSlot& j = *jobs_[slot];
    j.symbol_id = p.id;
    j.symbol.assign(sym.name);
    CopyJobInputs(p.job, &j);
    ++j.generation;
    // The saved inputs are the job's: in a buffer (the window may have moved
    // on since the due point).
    j.buffer = TakeBuffer();
    j.buffer->returns.assign(p.job.returns.begin(), p.job.returns.end());  // capacity reserved
    j.buffer->tags.assign(p.job.tags.begin(), p.job.tags.end());
    sym.pending = static_cast<int32_t>(slot);
    sym.apply_bar = p.job.apply_bar;
    // As in Submit (none of these changes while a job is pending).
    j.priority = !sym.last_estimated || sym.failures > 0 || sym.fallback;
    sym.inputs = JobInputs::kInBuffer;
    counters_.in_flight.fetch_add(1, std::memory_order_relaxed);
    j.submitted = std::chrono::steady_clock::now();
    pool_->Submit(slot, j.priority);
  }
  return absl::OkStatus();
}

}  // namespace aftershock
