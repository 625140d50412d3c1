#include "aftershock/ingest_core.h"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <utility>

#include "absl/strings/str_cat.h"
#include "aftershock/update_codec.h"

namespace aftershock {
namespace {

// Slots reserved up front: max_symbols, capped so that a huge limit does not
// commit gigabytes before a single symbol arrives (beyond it the vector grows,
// which only happens when a new symbol arrives, never per tick).
constexpr int64_t kMaxReservedSlots = 1 << 20;

// Normal-consistency factor of the median absolute value: for r ~ N(0, s^2),
// median |r| = 0.67449 s, and 1 / 0.67449 = 1.4826 (e.g. Huber, Robust
// Statistics, 1981, on the MAD).
constexpr double kMadToSigma = 1.4826;

// Starting variance of the warm-up EWMA from the first returns x (zero-centred:
// returns have a negligible mean at bar frequency): (1.4826 * median |x|)^2,
// which a few huge or tiny returns cannot move; when half or more of x are 0
// (an idle name) the mean square instead. 0 when every x is 0. Reorders
// `scratch` (size >= x.size()); no allocation.
double RobustStartVariance(absl::Span<const double> x, double* scratch) {
  const size_t n = x.size();
  double ss = 0;
  for (size_t i = 0; i < n; ++i) {
    scratch[i] = std::fabs(x[i]);
    ss += x[i] * x[i];
  }
  // Median: the mean of the two middle order statistics for even n.
  const size_t mid = n / 2;
  std::nth_element(scratch, scratch + mid, scratch + n);
  double med = scratch[mid];
  if (n % 2 == 0) med = 0.5 * (med + *std::max_element(scratch, scratch + mid));
  const double s = kMadToSigma * med;
  return s > 0 ? s * s : ss / static_cast<double>(n);
}

}  // namespace

absl::StatusOr<std::unique_ptr<IngestCore>> IngestCore::Create(const EngineConfig& config,
                                                               UpdateSink* sink, Clock* clock) {
  const OutputOptions outputs = config.outputs.ToOutputOptions();
  absl::StatusOr<FilterModel> model =
      config.model.has_params ? FilterModel::Create(config.model.params, outputs, 1)
                              : FilterModel::Ewma(config.warmup.ewma_lambda, outputs, 0);
  if (!model.ok()) {
    return absl::InvalidArgumentError(
        absl::StrCat("cannot build the starting model: ", model.status().message()));
  }
  auto shared = std::make_shared<const FilterModel>(*std::move(model));
  return std::unique_ptr<IngestCore>(new IngestCore(config, sink, clock, std::move(shared)));
}

IngestCore::IngestCore(const EngineConfig& config, UpdateSink* sink, Clock* clock,
                       std::shared_ptr<const FilterModel> initial_model)
    : config_(config),
      bar_options_(config.ToBarOptions()),
      sink_(sink),
      clock_(clock),
      initial_model_(std::move(initial_model)),
      bank_(config.outputs.ToOutputOptions()) {
  initial_flags_ = config.model.has_params ? 0u : static_cast<uint32_t>(kFlagWarmup);
  price_return_scale_ = config.outputs.return_units == ReturnUnits::kPercent ? 100.0 : 1.0;
  encode_binary_ = config.publish.encoding == WireEncoding::kBinary;
  seasonal_ = config.SeasonalityActive();
  opening_scaled_ = seasonal_ && config.seasonality.opening_return == OpeningReturn::kScaled;
  if (seasonal_) seasonal_options_ = config.seasonality.ToOptions(config.bars);
  const int64_t reserve = std::min<int64_t>(config.limits.max_symbols, kMaxReservedSlots);
  slots_.reserve(static_cast<size_t>(reserve));
  arrivals_.reserve(static_cast<size_t>(reserve));
  close_at_.reserve(static_cast<size_t>(reserve));
  bank_.Reserve(static_cast<int>(reserve));
  index_.reserve(static_cast<size_t>(reserve));
  pending_.resize(kBarChunk);
  updates_.resize(kBarChunk);
  before_.resize(kBarChunk);
  batch_lanes_.resize(kBarChunk);
  batch_returns_.resize(kBarChunk);
  ticks_.resize(kMaxBatchTicks);
  body_.reserve(4096);
  topic_.reserve(2 + kMaxSymbolLength);
}

int IngestCore::FindSymbol(absl::string_view symbol) const {
  auto it = index_.find(symbol);
  return it == index_.end() ? -1 : it->second;
}

int IngestCore::IndexFor(absl::string_view symbol) {
  auto it = index_.find(symbol);
  if (it != index_.end()) return it->second;
  if (static_cast<int64_t>(slots_.size()) >= config_.limits.max_symbols) {
    counters_.rejects.Add(RejectReason::kSymbolLimit);
    return -1;
  }
  const int index = static_cast<int>(slots_.size());
  slots_.emplace_back();
  arrivals_.push_back(0);
  close_at_.push_back(kNoBarToClose);
  Slot& slot = slots_.back();
  slot.symbol.assign(symbol);
  slot.model = initial_model_;
  slot.status_flags = initial_flags_;
  if (config_.warmup.start_bars > 1) {
    slot.start_returns = std::make_unique<double[]>(static_cast<size_t>(config_.warmup.start_bars));
  }
  FilterState filter;
  if (!initial_model_->is_ewma()) {
    InitFilterState(*initial_model_, 0.0, &filter);
    slot.filter_ready = true;
  }
  bank_.Add(initial_model_.get(), filter);
  InitTracking(&slot, symbol);
  index_.emplace(std::string(symbol), index);
  counters_.symbols = slots_.size();
  for (BarObserver* o : observers_) o->OnNewSymbol(this, index, symbol);
  return index;
}

void IngestCore::OnMessage(absl::string_view topic, absl::string_view body) {
  ++counters_.messages_in;
  const DecodeResult r =
      DecodeTicks(topic, body, config_.feed.encoding, config_.feed.max_message_bytes,
                  absl::MakeSpan(ticks_), &counters_.rejects);
  if (r.n_ticks > 0) {
    const int64_t arrival = clock_->NowNs();
    counters_.ticks_in += r.n_ticks;
    for (int i = 0; i < r.n_ticks; ++i) HandleTick(ticks_[i], arrival);
  }
  for (BarObserver* o : observers_) o->OnBatchEnd(this);
}

void IngestCore::OnMalformedMessage() {
  ++counters_.messages_in;
  counters_.rejects.Add(config_.feed.encoding == WireEncoding::kBinary
                            ? RejectReason::kMalformedBinary
                            : RejectReason::kMalformedJson);
  for (BarObserver* o : observers_) o->OnBatchEnd(this);
}

void IngestCore::OnTick(const Tick& tick) {
  ++counters_.messages_in;
  ++counters_.ticks_in;
  // Files carry event time only; the "arrival" of a replayed tick is its time.
  HandleTick(tick, tick.t_ns);
}

void IngestCore::HandleTick(const Tick& tick, int64_t arrival_ns) {
  const int index = IndexFor(tick.symbol.view());
  if (index < 0) return;
  Slot& slot = slots_[index];
  // A clock tick under way that has not reached this symbol closes its due
  // bar first, at the tick's time, exactly as OnClock would have.
  if (sweep_.active && index < sweep_.end && slot.clock_sweep != sweep_.id) {
    ClosedBar due;
    if (VisitForClock(index, &due)) HandleBar(index, due);
  }
  arrivals_[index] = arrival_ns;
  const FeedResult fr = FeedTick(&slot.bars_state, tick, bar_options_);
  NoteBarState(index);
  if (fr.status != TickStatus::kAccepted) {
    counters_.rejects.Add(fr.reason);
    return;
  }
  ++counters_.ticks_accepted;
  ++slot.ticks;
  slot.last_tick_ns = tick.t_ns;
  if (fr.closed) HandleBar(index, fr.bar);
  // interval 0: the tick itself is the bar and is closed right away by FeedTick.
}

void IngestCore::HandleBar(int index, const ClosedBar& bar) {
  PendingBar& p = pending_[0];
  p.index = index;
  p.bar = bar;
  p.saved = 0;
  p.out = 0;
  if (!PrepareBar(&p)) return;
  bank_.Step(index, *p.step_model, p.r, &updates_[0]);
  FinishBar(p);
}

void IngestCore::HandleBars(int n) {
  // Prepare every bar (in index order), then step the filters: the symbols
  // stepping with their own model go through one FilterBank::StepBatch (its
  // results are bit-identical to FilterStep), the others (drive-mode tracking,
  // absurd returns) one by one; then publish in index order. The lanes are
  // distinct: a symbol has one open bar.
  int prepared[kBarChunk];
  int m = 0, nb = 0, top = kBarChunk;
  for (int k = 0; k < n; ++k) {
    PendingBar& p = pending_[k];
    p.saved = k;  // before_ entry, should the return be absurd
    if (!PrepareBar(&p)) continue;
    prepared[m++] = k;
  }
  for (int j = 0; j < m; ++j) {
    PendingBar& p = pending_[prepared[j]];
    if (p.step_model == p.model && !p.absurd) {
      batch_lanes_[nb] = p.index;
      batch_returns_[nb] = p.r;
      p.out = nb++;
    }
  }
  bank_.StepBatch(absl::MakeConstSpan(batch_lanes_.data(), static_cast<size_t>(nb)),
                  absl::MakeConstSpan(batch_returns_.data(), static_cast<size_t>(nb)),
                  updates_.data());
  for (int j = 0; j < m; ++j) {
    PendingBar& p = pending_[prepared[j]];
    if (p.step_model == p.model && !p.absurd) continue;
    // Entries from the top down never meet the batch's from the bottom up
    // (nb + these <= m <= kBarChunk).
    p.out = --top;
    bank_.Step(p.index, *p.step_model, p.r, &updates_[p.out]);
  }
  for (int j = 0; j < m; ++j) FinishBar(pending_[prepared[j]]);
}

void IngestCore::QueueClosedBar(int index, int* n) {
  pending_[*n].index = index;
  if (++*n == kBarChunk) {
    HandleBars(*n);
    *n = 0;
  }
}

bool IngestCore::PrepareBar(PendingBar* p) {
  const int index = p->index;
  const ClosedBar& bar = p->bar;
  Slot& slot = slots_[index];
  ++counters_.bars;
  ++slot.bars;
  if (bar.closed_by_clock) ++counters_.bars_clock_closed;
  // kFlagStale comes from the builder (whole silent intervals before the bar);
  // a bar closed by the clock is a normal bar and only counted.
  uint32_t flags = bar.flags | slot.pending_flags;
  flags &= ~static_cast<uint32_t>(kFlagFirstBar);  // the engine decides first_bar itself
  if (!bar.has_return) {
    slot.pending_flags = flags & ~static_cast<uint32_t>(kFlagStale);
    return false;
  }
  double r = bar.ret;
  if (bar.last_price > 0) r *= price_return_scale_;
  const FilterModel& model = *slot.model;
  // ---- Intraday seasonality: the filter sees x = r / s(k) ----
  const double r_raw = r;
  const SeasonalProfile* prof = seasonal_ ? slot.profile.get() : nullptr;
  const int32_t tag = seasonal_ ? SeasonalTagOf(bar, flags) : 0;
  if (seasonal_ && !SeasonalInput(prof, r_raw, tag, &r)) {
    // An opening return without an overnight multiplier: not filtered.
    slot.pending_flags = flags & ~static_cast<uint32_t>(kFlagStale);
    for (BarObserver* o : observers_) o->OnSkippedReturn(this, index, bar, r_raw);
    return false;
  }
  const int k_bar = bar.session_bar;
  const bool adjust =
      prof != nullptr && ((tag & kSeasonalTagOvernight) || (k_bar >= 0 && k_bar < prof->buckets()));
  // ---- end seasonality ----
  if (!slot.filter_ready) {
    // EWMA warm-up start ([warmup] start_bars = m): collect m finite returns,
    // start the variance at their robust scale and run them through; they
    // publish nothing (their flags carry to the first update). m = 1: the first
    // non-zero return starts the variance at r^2.
    const int m = config_.warmup.start_bars;
    const bool usable = m > 1 ? std::isfinite(r * r) : (r != 0.0 && std::isfinite(r * r));
    if (!usable) {
      slot.pending_flags = flags & ~static_cast<uint32_t>(kFlagStale);
      return false;
    }
    if (m == 1) {
      bank_.Init(index, r * r);
    } else {
      slot.start_returns[slot.num_start_returns++] = r;
      slot.pending_flags = flags & ~static_cast<uint32_t>(kFlagStale);
      if (slot.num_start_returns < m) return false;
      const absl::Span<const double> first(slot.start_returns.get(), static_cast<size_t>(m));
      const double v0 = RobustStartVariance(first, start_scratch_);
      slot.num_start_returns = 0;
      if (!(v0 > 0) || !std::isfinite(v0)) return false;  // all zero: collect afresh
      bank_.Init(index, v0);
      for (double x : first) bank_.Advance(index, x);
      slot.filter_ready = true;
      return false;  // the bar's return is in the state; the next bar publishes
    }
    slot.filter_ready = true;
  }
  slot.pending_flags = 0;
  // A step producing a non-finite value must not poison the symbol: the bar is
  // dropped (non_finite_output) and the state restored. Only an absurd return
  // (|r| >= 1e100) can overflow a recursion with persistence < 1, so only then
  // is the state copied first; otherwise the symbol restarts its filter.
  p->absurd = !(std::fabs(r) < 1e100);
  if (p->absurd) before_[p->saved] = bank_.Get(index);
  p->r = r;
  p->r_raw = r_raw;
  p->flags = flags;
  p->tag = tag;
  p->adjust = adjust;
  p->model = &model;
  p->step_model = TrackBar(index, r);
  return true;
}

void IngestCore::FinishBar(const PendingBar& p) {
  const int index = p.index;
  Slot& slot = slots_[index];
  const FilterModel& model = *p.model;
  const FilterModel& step_model = *p.step_model;
  BarUpdate& u = updates_[p.out];
  u.symbol = slot.symbol;
  u.t_ns = p.bar.t_end_ns;
  u.flags = p.flags | slot.status_flags;
  const double next_variance = bank_.next_variance(index);
  if (&step_model != &model) {
    // Drive: the tracker's next prediction is the filter's (equal unless the
    // tracker just reset to the model in force).
    if (next_variance > 0 && std::isfinite(next_variance)) {
      slot.tracker.SetNextVariance(next_variance);
    }
  }
  if (!std::isfinite(next_variance) || !std::isfinite(bank_.mu_next(index)) ||
      !std::isfinite(u.z)) {
    ++counters_.non_finite_output;
    if (p.absurd) {
      bank_.Set(index, before_[p.saved]);
    } else if (model.is_ewma()) {
      slot.filter_ready = false;
    } else {
      bank_.Init(index, 0.0);
    }
    slot.need_anchor = slot.tracking != TrackingMode::kOff;
    return;
  }
  if (p.adjust) {
    // Back to return units with the factors of this bar and the bars ahead.
    const SeasonalProfile* prof = slot.profile.get();
    const int kk = std::min(std::max(p.bar.session_bar, 0), prof->buckets() - 1);
    const double s2_now =
        (p.tag & kSeasonalTagOvernight) ? prof->overnight_factor() : prof->factor(kk);
    SeasonalizeUpdate(step_model, bank_.Get(index), p.r_raw, s2_now, prof->ahead(kk), &u);
    u.flags |= kFlagSeasonal;
  }
  ++slot.filtered;
  if (slot.filtered < static_cast<uint64_t>(config_.warmup.min_bars)) u.flags |= kFlagFirstBar;
  for (BarObserver* o : observers_) o->OnBar(this, index, p.bar, &u);

  const absl::Status s =
      encode_binary_ ? EncodeUpdateBinary(u, &body_) : EncodeUpdateJson(u, &body_);
  if (!s.ok()) {
    ++counters_.non_finite_output;
    return;
  }
  if (SendOn(TopicKind::kUpdate, slot.symbol.view(), body_)) {
    ++counters_.updates_out;
    ++slot.updates;
  } else {
    ++counters_.drops;
  }
}

void IngestCore::InitTracking(Slot* slot, absl::string_view symbol) {
  slot->tracking = config_.tracking.ModeFor(symbol);
  slot->need_anchor = slot->tracking != TrackingMode::kOff;
  if (slot->tracking == TrackingMode::kDrive) {
    slot->driven = std::make_unique<FilterModel>();
    // Room for the largest tracked model's vector (mean, 4 coefficients, nu).
    slot->driven->ReserveParams(kMaxTrackedParams + 2);
  }
}

const FilterModel* IngestCore::TrackBar(int index, double x) {
  Slot* slot = &slots_[index];
  const FilterModel* model = slot->model.get();
  if (slot->tracking == TrackingMode::kOff) return model;
  const TrackerOptions& o = config_.tracking.tracker;
  if (slot->need_anchor) {
    slot->need_anchor = false;
    slot->instability_armed = true;
    // The model in force and the state's prediction for this bar; an
    // unsupported model (EWMA warm-up, ARMA, higher orders) deactivates it.
    slot->tracker.Anchor(model->params(), bank_.next_variance(index), o);
    if (slot->tracker.active() && slot->driven) *slot->driven = *model;
  }
  if (!slot->tracker.active()) return model;
  slot->tracker.Step(x, o);
  if (slot->tracking != TrackingMode::kDrive) return model;
  const RecursiveTracker& t = slot->tracker;
  slot->driven->RetuneVariance(t.omega(), t.alpha(), t.gamma(), t.beta());
  return slot->driven.get();
}

bool IngestCore::TakeInstabilityAlert(int index) {
  Slot& slot = slots_[index];
  const double threshold = config_.tracking.alert_threshold;
  if (!(threshold > 0) || !slot.tracker.active()) return false;
  const double q = slot.tracker.instability();
  if (slot.instability_armed && q >= threshold) {
    slot.instability_armed = false;
    return true;
  }
  if (!slot.instability_armed && q < 0.5 * threshold) slot.instability_armed = true;
  return false;
}

bool IngestCore::SendOn(TopicKind kind, absl::string_view symbol, absl::string_view body) {
  topic_.clear();
  topic_.push_back(static_cast<char>(kind));
  topic_.push_back('.');
  topic_.append(symbol.data(), symbol.size());
  return sink_->Send(topic_, body);
}

bool IngestCore::PublishSymbolMessage(TopicKind kind, int index, absl::string_view body) {
  return PublishNamedMessage(kind, slots_[index].symbol.view(), body);
}

bool IngestCore::PublishNamedMessage(TopicKind kind, absl::string_view name,
                                     absl::string_view body) {
  const bool ok = SendOn(kind, name, body);
  if (ok) {
    ++counters_.extra_out;
  } else {
    ++counters_.extra_drops;
  }
  return ok;
}

void IngestCore::OnClock(int64_t now_ns) {
  StartClock(now_ns);
  FinishClock();
}

void IngestCore::StartClock(int64_t now_ns) {
  // Ticks never overlap: one still under way ends first, at its own time.
  FinishClock();
  last_clock_ns_ = now_ns;
  sweep_.active = true;
  sweep_.now_ns = now_ns;
  sweep_.next = 0;
  // Symbols that join during the tick are not its: with OnClock they did not
  // exist yet.
  sweep_.end = num_symbols();
  ++sweep_.id;
}

bool IngestCore::ContinueClock(int max_bars, int max_symbols) {
  if (!sweep_.active) return false;
  if (bar_options_.interval_ns > 0) {
    // Time bars close on the clock for every symbol at once: handled in chunks
    // (HandleBars), their filters stepped as a batch. A symbol a tick reached
    // first (HandleTick: VisitForClock) is skipped; its due bar is closed.
    int n = 0, closed = 0, scanned = 0;
    while (sweep_.next < sweep_.end && closed < max_bars && scanned < max_symbols) {
      const int i = sweep_.next++;
      ++scanned;
      // Nothing due: left unvisited. Should a tick of the symbol come before
      // the sweep ends, its VisitForClock finds nothing due either (only a
      // tick changes an open bar).
      if (close_at_[i] > sweep_.now_ns) continue;
      if (slots_[i].clock_sweep == sweep_.id) continue;
      if (VisitForClock(i, &pending_[n].bar)) {
        QueueClosedBar(i, &n);
        ++closed;
      }
    }
    // The chunk is handled before returning: pending_ is free between calls.
    if (n > 0) HandleBars(n);
    if (sweep_.next < sweep_.end) return true;
  }
  sweep_.active = false;
  for (BarObserver* o : observers_) o->OnClock(this, sweep_.now_ns);
  return false;
}

void IngestCore::FinishClock() {
  while (ContinueClock(std::numeric_limits<int>::max(), std::numeric_limits<int>::max())) {
  }
}

bool IngestCore::VisitForClock(int index, ClosedBar* bar) {
  Slot& slot = slots_[index];
  slot.clock_sweep = sweep_.id;
  if (!slot.bars_state.open ||
      !CloseIfDue(&slot.bars_state, sweep_.now_ns, config_.bars.grace_ns, bar_options_, bar)) {
    return false;
  }
  NoteBarState(index);
  return true;
}

void IngestCore::NoteBarState(int index) {
  const BarState& st = slots_[index].bars_state;
  // CloseIfDue's test, now >= end && now - end >= grace, is now >= end + grace
  // (grace >= 0; bar times and durations are bounded far below overflow).
  close_at_[index] = st.open && bar_options_.interval_ns > 0
                         ? st.open_end_ns + config_.bars.grace_ns
                         : kNoBarToClose;
}

void IngestCore::CloseAllOpenBars() {
  FinishClock();
  if (bar_options_.interval_ns <= 0) return;
  int n = 0;
  for (int i = 0; i < num_symbols(); ++i) {
    BarState& st = slots_[i].bars_state;
    if (!st.open) continue;
    // A time far enough past the bar end closes it whatever the grace.
    ClosedBar& bar = pending_[n].bar;
    if (CloseIfDue(&st, st.open_end_ns + config_.bars.grace_ns, config_.bars.grace_ns, bar_options_,
                   &bar)) {
      bar.closed_by_clock = false;  // the input ended: not counted as closed by the clock
      NoteBarState(i);
      QueueClosedBar(i, &n);
    }
  }
  if (n > 0) HandleBars(n);
}

int32_t IngestCore::SeasonalTagOf(const ClosedBar& bar, uint32_t update_flags) const {
  const bool start = (update_flags & kFlagGap) != 0;
  const bool overnight = opening_scaled_ && (bar.flags & kFlagGap) && bar.last_price > 0;
  const int k = std::min(std::max(bar.session_bar, 0), kSeasonalTagBucketMask);
  return SeasonalTag(k, start, overnight);
}

absl::Status IngestCore::SetSeasonalProfile(int index, std::shared_ptr<const SeasonalProfile> p) {
  if (index < 0 || index >= num_symbols()) {
    return absl::InvalidArgumentError(
        absl::StrCat("SetSeasonalProfile: no symbol with index ", index));
  }
  if (!seasonal_) return absl::OkStatus();
  if (p != nullptr && p->buckets() != seasonal_options_.buckets) {
    return absl::InvalidArgumentError(absl::StrCat("SetSeasonalProfile: the profile has ",
                                                   p->buckets(), " buckets; the session needs ",
                                                   seasonal_options_.buckets));
  }
  slots_[index].profile = std::move(p);
  return absl::OkStatus();
}

absl::Status IngestCore::SwapModel(int index, const ModelSwap& swap, ReplacedModel* replaced) {
  if (index < 0 || index >= num_symbols()) {
    return absl::InvalidArgumentError(absl::StrCat("SwapModel: no symbol with index ", index));
  }
  if (swap.model == nullptr) return absl::InvalidArgumentError("SwapModel: model is null");
  if (swap.model->is_ewma() && swap.start != ModelSwap::Start::kKeepState &&
      !(swap.initial_variance > 0)) {
    return absl::InvalidArgumentError(
        "SwapModel: an EWMA model needs a positive initial_variance unless the state is kept");
  }
  const SeasonalProfile* p = swap.profile.get();
  if (swap.replace_profile && seasonal_ && p != nullptr &&
      p->buckets() != seasonal_options_.buckets) {
    return absl::InvalidArgumentError("SwapModel: the profile does not fit the session");
  }
  Slot& slot = slots_[index];
  if (swap.start == ModelSwap::Start::kKeepState && !slot.filter_ready && swap.model->is_ewma()) {
    return absl::FailedPreconditionError(
        "SwapModel: kKeepState on a symbol without a filter state needs a non-EWMA model");
  }
  // The lane's model first: the bank's Init/Advance run the lane's model.
  bank_.SetModel(index, swap.model.get());
  switch (swap.start) {
    case ModelSwap::Start::kKeepState:
      if (!slot.filter_ready) bank_.Init(index, swap.initial_variance);
      break;
    case ModelSwap::Start::kRestart:
    case ModelSwap::Start::kRerun:
      bank_.Init(index, swap.initial_variance);
      if (swap.start == ModelSwap::Start::kRerun) {
        for (double r : swap.rerun_returns) bank_.Advance(index, r);
      }
      break;
  }
  if (replaced != nullptr) {
    replaced->model = std::move(slot.model);
    replaced->profile = swap.replace_profile ? std::move(slot.profile) : nullptr;
  }
  if (swap.replace_profile) slot.profile = seasonal_ ? swap.profile : nullptr;
  slot.filter_ready = true;
  slot.num_start_returns = 0;
  slot.model = swap.model;
  slot.need_anchor = slot.tracking != TrackingMode::kOff;
  slot.status_flags = swap.status_flags & (kFlagWarmup | kFlagFallback | kFlagPooled);
  ++counters_.model_swaps;
  return absl::OkStatus();
}

}  // namespace aftershock

namespace aftershock {
namespace {

bool SameModel(const FilterModel& a, const FilterModel& b) {
  if (a.version() != b.version() || a.params().spec != b.params().spec) return false;
  const std::vector<double>& x = a.params().values;
  const std::vector<double>& y = b.params().values;
  return x.size() == y.size() &&
         (x.empty() || std::memcmp(x.data(), y.data(), x.size() * sizeof(double)) == 0);
}

}  // namespace

// The core's captured state (state_capture.h): the values SaveState encodes,
// per symbol in flat records.
struct CoreSymbolCapture {
  Symbol symbol;  // copied when the record is created (a slot's name never changes)
  BarState bars_state;
  FilterState filter;
  // FilterBank::cold_stamp of the lane when filter's higher lags were copied
  // (0: never): they are copied again only when the bank wrote them since.
  uint64_t filter_cold_stamp = 0;
  // Immutable shared objects, re-pointed only when the core's pointer changed
  // (the capture holds them, so an address cannot be reused meanwhile).
  std::shared_ptr<const FilterModel> model;
  std::shared_ptr<const SeasonalProfile> profile;
  uint32_t status_flags = 0;
  uint32_t pending_flags = 0;
  bool filter_ready = false;
  int num_start_returns = 0;
  uint64_t bars = 0;
  uint64_t filtered = 0;
  uint64_t updates = 0;
  uint64_t ticks = 0;
  int64_t last_tick_ns = 0;
  int64_t last_arrival_ns = 0;
  // Tracking ([tracking]): the tracker (about 1.1 KB) is held, and copied,
  // only for symbols whose mode is not off; for the others it is the inactive
  // tracker their slot holds (InitTracking never anchors it), encoded as such.
  // Out of line so that the record stays a few cache lines: a capture walks
  // every record.
  bool need_anchor = false;
  bool instability_armed = false;
  std::unique_ptr<RecursiveTracker> tracker;  // null: the symbol's mode is off
};

// The tracker of every symbol whose tracking is off (never anchored).
const RecursiveTracker& InactiveTracker() {
  static const RecursiveTracker* const t = new RecursiveTracker();
  return *t;
}

class CoreCapture : public StateCapture {
 public:
  // `start_bars`: [warmup] start_bars, the most warm-up returns a symbol holds.
  CoreCapture(bool seasonal, int start_bars)
      : seasonal_(seasonal), stride_(static_cast<size_t>(start_bars)) {}

  // Symbol i's held warm-up returns (the first num_start_returns are valid).
  double* start_returns(size_t i) { return start_returns_.data() + i * stride_; }
  const double* start_returns(size_t i) const { return start_returns_.data() + i * stride_; }
  void Resize(size_t n) {
    symbols.resize(n);
    if (stride_ > 1) start_returns_.resize(n * stride_);
  }

  void Encode(StateWriter* w) const override {
    const EngineCounters& c = counters;
    // Per symbol: name, bar and filter state, model, flags, counters (about
    // 560 bytes without warm-up returns); reserved so the string rarely regrows.
    w->Reserve(256 + symbols.size() * 640);
    for (uint64_t v :
         {c.messages_in, c.ticks_in, c.ticks_accepted, c.bars, c.bars_clock_closed, c.updates_out,
          c.drops, c.non_finite_output, c.extra_out, c.extra_drops, c.model_swaps}) {
      w->U64(v);
    }
    for (uint64_t v : c.rejects.by_reason) w->U64(v);
    w->I64(last_clock_ns);
    w->U64(symbols.size());
    for (size_t k = 0; k < symbols.size(); ++k) {
      const CoreSymbolCapture& s = symbols[k];
      w->Bytes(s.symbol.view());
      SaveBarState(s.bars_state, w);
      SaveFilterState(s.filter, w);
      w->U32(s.model->version());
      SaveModelParams(s.model->params(), w);
      if (seasonal_) SaveSeasonalProfile(s.profile.get(), w);
      w->U32(s.status_flags);
      w->U32(s.pending_flags);
      w->Bool(s.filter_ready);
      w->U64(static_cast<uint64_t>(s.num_start_returns));
      for (int i = 0; i < s.num_start_returns; ++i) w->F64(start_returns(k)[i]);
      w->U64(s.bars);
      w->U64(s.filtered);
      w->U64(s.updates);
      w->U64(s.ticks);
      w->I64(s.last_tick_ns);
      w->I64(s.last_arrival_ns);
      // Tracking: the mode comes from the configuration; the drive model is the
      // model in force retuned to the tracked coefficients. (Checkpoints from
      // before these fields fail the configuration check: no [tracking] section.)
      w->Bool(s.need_anchor);
      w->Bool(s.instability_armed);
      (s.tracker != nullptr ? *s.tracker : InactiveTracker()).Save(w);
    }
  }

  EngineCounters counters;
  int64_t last_clock_ns = 0;
  std::vector<CoreSymbolCapture> symbols;  // by core index

 private:
  const bool seasonal_;
  const size_t stride_;
  std::vector<double> start_returns_;  // start_bars per symbol (none when it is 1)
};

void IngestCore::SaveState(StateWriter* w) const {
  CoreCapture c(seasonal_, config_.warmup.start_bars);
  CaptureState(&c);
  c.Encode(w);
}

std::unique_ptr<StateCapture> IngestCore::NewStateCapture() const {
  auto c = std::make_unique<CoreCapture>(seasonal_, config_.warmup.start_bars);
  // As the core's own slots: address space for the reserved symbols, so that
  // new symbols rarely move the records.
  c->symbols.reserve(slots_.capacity());
  return c;
}

void IngestCore::CaptureState(StateCapture* capture) const {
  CaptureSymbols(capture, 0, num_symbols());
  CaptureCoreWide(capture);
}

void IngestCore::CaptureCoreWide(StateCapture* capture) const {
  CoreCapture& c = *static_cast<CoreCapture*>(capture);
  c.counters = counters_;
  c.last_clock_ns = last_clock_ns_;
}

// The bytes CaptureSymbols copies for every symbol apart from the filter's
// higher lags, the warm-up returns and the tracker (StateCapture::
// copied_bytes): the bar state, the filter's lag-0 values (FilterBank::
// GetHot: eight doubles and the bar count), the flags and the counters.
constexpr uint64_t kFilterHotBytes = 8 * sizeof(double) + sizeof(int64_t);
constexpr uint64_t kFlatRecordBytes = sizeof(BarState) + kFilterHotBytes + 2 * sizeof(uint32_t) +
                                      sizeof(bool) + sizeof(int) + 4 * sizeof(uint64_t) +
                                      2 * sizeof(int64_t) + 2 * sizeof(bool);

void IngestCore::CaptureSymbols(StateCapture* capture, int begin, int end) const {
  CoreCapture& c = *static_cast<CoreCapture*>(capture);
  const size_t old = c.symbols.size();
  if (old < slots_.size()) {
    // Symbols only ever join: a record per new symbol, named once (its name
    // never changes), with a tracker only where tracking is on.
    c.Resize(slots_.size());
    for (size_t i = old; i < slots_.size(); ++i) {
      c.symbols[i].symbol = slots_[i].symbol;
      if (slots_[i].tracking != TrackingMode::kOff) {
        c.symbols[i].tracker = std::make_unique<RecursiveTracker>();
      }
    }
  }
  for (size_t i = static_cast<size_t>(begin); i < static_cast<size_t>(end); ++i) {
    const Slot& s = slots_[i];
    CoreSymbolCapture& d = c.symbols[i];
    d.bars_state = s.bars_state;
    // The filter's higher lags only when the bank wrote them since the last
    // copy (never, for a lane whose orders are all 1, after its warm-up):
    // they are most of the filter state's bytes.
    const int lane = static_cast<int>(i);
    bank_.GetHot(lane, &d.filter);
    if (d.filter_cold_stamp != bank_.cold_stamp(lane)) {
      bank_.GetCold(lane, &d.filter);
      d.filter_cold_stamp = bank_.cold_stamp(lane);
      c.AddCopied(sizeof(FilterState) - kFilterHotBytes);
    }
    if (d.model.get() != s.model.get()) d.model = s.model;
    if (d.profile.get() != s.profile.get()) d.profile = s.profile;
    d.status_flags = s.status_flags;
    d.pending_flags = s.pending_flags;
    d.filter_ready = s.filter_ready;
    d.num_start_returns = s.num_start_returns;
    if (s.num_start_returns > 0) {
      std::memcpy(c.start_returns(i), s.start_returns.get(),
                  static_cast<size_t>(s.num_start_returns) * sizeof(double));
    }
    d.bars = s.bars;
    d.filtered = s.filtered;
    d.updates = s.updates;
    d.ticks = s.ticks;
    d.last_tick_ns = s.last_tick_ns;
    d.last_arrival_ns = arrivals_[i];
    d.need_anchor = s.need_anchor;
    d.instability_armed = s.instability_armed;
    if (d.tracker != nullptr) *d.tracker = s.tracker;
    c.AddCopied(kFlatRecordBytes +
                static_cast<uint64_t>(std::max(s.num_start_returns, 0)) * sizeof(double) +
                (d.tracker != nullptr ? sizeof(RecursiveTracker) : 0));
  }
}

absl::Status IngestCore::RestoreState(absl::string_view payload) {
  if (!slots_.empty()) {
    return absl::FailedPreconditionError("RestoreState needs a core without symbols");
  }
  StateReader r(payload);
  EngineCounters c;
  for (uint64_t* v : {&c.messages_in, &c.ticks_in, &c.ticks_accepted, &c.bars, &c.bars_clock_closed,
                      &c.updates_out, &c.drops, &c.non_finite_output, &c.extra_out, &c.extra_drops,
                      &c.model_swaps}) {
    *v = r.U64("core counters");
  }
  for (uint64_t& v : c.rejects.by_reason) v = r.U64("core reject counters");
  const int64_t last_clock = r.I64("core last clock");
  const uint64_t n =
      r.Count("core symbol count", static_cast<uint64_t>(config_.limits.max_symbols));
  if (!r.ok()) return r.status();
  const OutputOptions outputs = config_.outputs.ToOutputOptions();
  const int m = config_.warmup.start_bars;
  std::vector<Slot> slots;
  slots.reserve(n);
  std::vector<int64_t> arrivals;
  arrivals.reserve(n);
  std::vector<FilterState> filters;  // by index, into bank_ at the commit
  filters.reserve(n);
  absl::flat_hash_map<std::string, int> index;
  for (uint64_t k = 0; k < n && r.ok(); ++k) {
    const absl::string_view name = r.Bytes("core symbol name", kMaxSymbolLength);
    if (!r.ok()) break;
    if (!IsValidSymbol(name) || index.contains(name)) {
      r.Fail(absl::StrCat("core symbol ", k),
             absl::StrCat("invalid or repeated name '", name, "'"));
      break;
    }
    const std::string what = absl::StrCat("symbol ", name);
    Slot s;
    s.symbol.assign(name);
    s.bars_state = RestoreBarState(&r, what);
    filters.push_back(RestoreFilterState(&r, what));
    const FilterState& filter = filters.back();
    const uint32_t version = r.U32(absl::StrCat(what, " model version"));
    const ModelParams params = RestoreModelParams(&r, absl::StrCat(what, " model"));
    if (!r.ok()) break;
    absl::StatusOr<FilterModel> model = FilterModel::Create(params, outputs, version);
    if (!model.ok()) {
      r.Fail(absl::StrCat(what, " model"), model.status().message());
      break;
    }
    // The shared starting model where it is the same one (most symbols).
    s.model = SameModel(*model, *initial_model_)
                  ? initial_model_
                  : std::make_shared<const FilterModel>(*std::move(model));
    if (seasonal_) s.profile = RestoreSeasonalProfile(&r, seasonal_options_, what + " profile");
    s.status_flags = r.U32(what + " status flags");
    s.pending_flags = r.U32(what + " carried flags");
    s.filter_ready = r.Bool(what + " filter ready");
    const uint64_t held = r.Count(what + " warm-up start returns", static_cast<uint64_t>(m - 1));
    if (!r.ok()) break;
    if (s.status_flags & ~static_cast<uint32_t>(kFlagWarmup | kFlagFallback | kFlagPooled)) {
      r.Fail(what + " status flags", "unknown flags");
      break;
    }
    if (s.filter_ready && !(filter.var.next_variance > 0)) {
      r.Fail(what + " filter state", "a ready filter needs a positive next variance");
      break;
    }
    if (m > 1) s.start_returns = std::make_unique<double[]>(static_cast<size_t>(m));
    s.num_start_returns = static_cast<int>(held);
    for (uint64_t i = 0; i < held; ++i) {
      s.start_returns[i] = r.FiniteF64(what + " warm-up start returns");
    }
    s.bars = r.U64(what + " counters");
    s.filtered = r.U64(what + " counters");
    s.updates = r.U64(what + " counters");
    s.ticks = r.U64(what + " counters");
    s.last_tick_ns = r.I64(what + " last tick");
    arrivals.push_back(r.I64(what + " last arrival"));
    const bool need_anchor = r.Bool(what + " tracking");
    const bool armed = r.Bool(what + " tracking");
    s.tracker = RecursiveTracker::Restore(&r, what);
    if (!r.ok()) break;
    InitTracking(&s, name);
    if (s.tracking == TrackingMode::kOff && (s.tracker.active() || need_anchor)) {
      r.Fail(what + " tracker", "tracking state while [tracking] is off for the symbol");
      break;
    }
    s.need_anchor = need_anchor;
    s.instability_armed = armed;
    if (s.driven && s.tracker.active() && !need_anchor) {
      if (!RecursiveTracker::Supports(s.model->params().spec) ||
          (s.tracker.gjr() != (s.model->params().spec.variance == VarianceKind::kGjr))) {
        r.Fail(what + " tracker", "does not match the model in force");
        break;
      }
      *s.driven = *s.model;
      s.driven->RetuneVariance(s.tracker.omega(), s.tracker.alpha(), s.tracker.gamma(),
                               s.tracker.beta());
    }
    index.emplace(std::string(name), static_cast<int>(k));
    slots.push_back(std::move(s));
  }
  if (absl::Status s = r.Finish("core state"); !s.ok()) return s;
  // Commit: nothing below can fail.
  for (size_t k = 0; k < slots.size(); ++k) {
    slots_.push_back(std::move(slots[k]));
    arrivals_.push_back(arrivals[k]);
    close_at_.push_back(kNoBarToClose);
    NoteBarState(static_cast<int>(slots_.size()) - 1);
    bank_.Add(slots_.back().model.get(), filters[k]);
  }
  index_ = std::move(index);
  counters_ = c;
  counters_.symbols = slots_.size();
  last_clock_ns_ = last_clock;
  sweep_.active = false;  // a restored state is at a clock boundary
  for (int i = 0; i < num_symbols(); ++i) {
    for (BarObserver* o : observers_) o->OnNewSymbol(this, i, slots_[i].symbol.view());
  }
  return absl::OkStatus();
}

absl::Status IngestCore::ShareModel(int index, std::shared_ptr<const FilterModel> model) {
  if (index < 0 || index >= num_symbols() || model == nullptr) {
    return absl::InvalidArgumentError(
        absl::StrCat("ShareModel: no symbol ", index, " or no model"));
  }
  if (!SameModel(*slots_[index].model, *model)) {
    return absl::InvalidArgumentError(absl::StrCat(
        "ShareModel: symbol ", symbol(index), " runs version ", slots_[index].model->version(),
        ", not the given version ", model->version(), " with the same parameters"));
  }
  slots_[index].model = std::move(model);
  bank_.SetModel(index, slots_[index].model.get());  // same coefficients, the shared object
  return absl::OkStatus();
}

}  // namespace aftershock
