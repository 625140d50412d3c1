#include "aftershock/bar_builder.h"

#include <cmath>
#include <cstddef>
#include <cstdint>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

int64_t FloorDiv(int64_t a, int64_t b) {
  int64_t q = a / b;
  if ((a % b != 0) && ((a < 0) != (b < 0))) --q;
  return q;
}

int64_t FloorMod(int64_t a, int64_t b) { return a - FloorDiv(a, b) * b; }

// log(p1 / p0) as a difference of logs: finite for all positive finite
// doubles, where the ratio itself can overflow (1e300 / 1e-300).
double LogReturn(double p1, double p0) { return std::log(p1) - std::log(p0); }

int64_t OffsetNs(const SessionWindow& s) {
  return static_cast<int64_t>(s.tz_offset_minutes) * kNanosPerMinute;
}

bool Wraps(const SessionWindow& s) { return s.end_minute <= s.start_minute; }

// Session index (local day of the session start) and the session's start and
// end in UTC ns. REQUIRES: session.enabled and InSession(session, t).
void SessionOf(const SessionWindow& s, int64_t t_ns, int64_t* day, int64_t* start_utc,
               int64_t* end_utc) {
  const int64_t local = t_ns + OffsetNs(s);
  const int64_t start_tod = s.start_minute * kNanosPerMinute;
  const int64_t end_tod = s.end_minute * kNanosPerMinute;
  int64_t d = FloorDiv(local, kNanosPerDay);
  if (Wraps(s) && FloorMod(local, kNanosPerDay) < end_tod) --d;
  const int64_t length = Wraps(s) ? end_tod + kNanosPerDay - start_tod : end_tod - start_tod;
  *day = d;
  *start_utc = d * kNanosPerDay + start_tod - OffsetNs(s);
  *end_utc = *start_utc + length;
}

void OpenBar(BarState* st, const Tick& tick, const BarOptions& o) {
  int64_t day = 0;
  int64_t anchor = -OffsetNs(o.session);
  int64_t session_end = INT64_MAX;
  if (o.session.enabled) SessionOf(o.session, tick.t_ns, &day, &anchor, &session_end);
  const int64_t start = anchor + FloorDiv(tick.t_ns - anchor, o.interval_ns) * o.interval_ns;
  int64_t end = start + o.interval_ns;
  if (end > session_end) end = session_end;
  const bool gap = (st->any_bar || st->open) && day != st->session_day;
  if (gap && !o.overnight_return) st->has_prev_close = false;
  st->open_index = static_cast<int32_t>(
      (o.session.enabled ? start - anchor : FloorMod(start - anchor, kNanosPerDay)) /
      o.interval_ns);
  st->open = true;
  st->open_gap = gap;
  st->session_day = day;
  st->open_start_ns = start;
  st->open_end_ns = end;
  st->latest_t_ns = tick.t_ns;
  st->n_ticks = 1;
  st->open_price = tick.kind == Tick::kPrice ? tick.value : 0;
  st->ret_sum = tick.kind == Tick::kReturn ? tick.value : 0;
}

ClosedBar CloseBar(BarState* st, bool by_clock, bool overnight) {
  ClosedBar bar;
  bar.t_end_ns = st->open_end_ns;
  bar.n_ticks = st->n_ticks;
  bar.closed_by_clock = by_clock;
  bar.session_bar = st->open_index;
  if (st->kind == Tick::kPrice) {
    bar.has_return = st->has_prev_close && (!st->open_gap || overnight);
    bar.ret = bar.has_return ? LogReturn(st->open_price, st->prev_close) : 0.0;
    bar.last_price = st->open_price;
    st->prev_close = st->open_price;
    st->has_prev_close = true;
  } else {
    bar.has_return = true;
    bar.ret = st->ret_sum;
  }
  if (st->open_gap) bar.flags |= kFlagGap;
  if (!st->any_bar && !bar.has_return) bar.flags |= kFlagFirstBar;
  // Whole intervals of this session passed without a tick since the last bar.
  if (st->any_bar && !st->open_gap && st->closed_end_ns < st->open_start_ns) {
    bar.flags |= kFlagStale;
  }
  st->any_bar = true;
  st->closed_end_ns = st->open_end_ns;
  st->open = false;
  return bar;
}

FeedResult Reject(RejectReason r) {
  FeedResult res;
  res.status = TickStatus::kRejected;
  res.reason = r;
  return res;
}

}  // namespace

bool InSession(const SessionWindow& s, int64_t t_ns) {
  if (!s.enabled) return true;
  const int64_t tod = FloorMod(t_ns + OffsetNs(s), kNanosPerDay);
  const int64_t a = s.start_minute * kNanosPerMinute;
  const int64_t b = s.end_minute * kNanosPerMinute;
  return Wraps(s) ? (tod >= a || tod < b) : (tod >= a && tod < b);
}

int64_t SessionOpenNs(const SessionWindow& s, int64_t t_ns) {
  if (!s.enabled) return INT64_MIN;
  int64_t day = 0, start = 0, end = 0;
  SessionOf(s, t_ns, &day, &start, &end);
  return start;
}

FeedResult FeedTick(BarState* st, const Tick& tick, const BarOptions& o) {
  // Bounds keep every boundary computation below free of int64 overflow.
  if (tick.t_ns < 0 || tick.t_ns > kMaxBarTimeNs) return Reject(RejectReason::kBadTime);
  if (st->has_tick && tick.kind != st->kind) return Reject(RejectReason::kKindMismatch);
  if (tick.kind == Tick::kPrice && !(tick.value > 0)) {
    return Reject(RejectReason::kNonPositivePrice);
  }
  if (!std::isfinite(tick.value)) return Reject(RejectReason::kNonFinite);
  if (!InSession(o.session, tick.t_ns)) return Reject(RejectReason::kOutsideSession);
  if (st->has_tick && tick.t_ns == st->last_t_ns && tick.value == st->last_value) {
    FeedResult dup;
    dup.status = TickStatus::kDuplicate;
    dup.reason = RejectReason::kDuplicate;
    return dup;
  }

  FeedResult res;
  if (o.interval_ns == 0) {
    if (st->any_bar && tick.t_ns < st->closed_end_ns) return Reject(RejectReason::kTooOld);
    int64_t day = 0, s0 = 0, s1 = 0;
    if (o.session.enabled) SessionOf(o.session, tick.t_ns, &day, &s0, &s1);
    const bool gap = st->any_bar && day != st->session_day;
    ClosedBar& bar = res.bar;
    bar.t_end_ns = tick.t_ns;
    bar.n_ticks = 1;
    if (tick.kind == Tick::kPrice) {
      bar.has_return = st->has_prev_close && (!gap || o.overnight_return);
      bar.ret = bar.has_return ? LogReturn(tick.value, st->prev_close) : 0.0;
      bar.last_price = tick.value;
      st->prev_close = tick.value;
      st->has_prev_close = true;
    } else {
      bar.has_return = true;
      bar.ret = tick.value;
    }
    if (gap) bar.flags |= kFlagGap;
    if (!st->any_bar && !bar.has_return) bar.flags |= kFlagFirstBar;
    st->any_bar = true;
    st->closed_end_ns = tick.t_ns;
    st->session_day = day;
    res.closed = true;
  } else if (st->open && tick.t_ns < st->open_end_ns) {
    if (tick.t_ns < st->open_start_ns || tick.t_ns < st->latest_t_ns - o.max_lateness_ns) {
      return Reject(RejectReason::kTooOld);
    }
    // Two finite returns can sum to infinity; the bar's return must stay finite.
    if (tick.kind == Tick::kReturn && !std::isfinite(st->ret_sum + tick.value)) {
      return Reject(RejectReason::kNonFinite);
    }
    ++st->n_ticks;
    if (tick.kind == Tick::kPrice) {
      if (tick.t_ns >= st->latest_t_ns) st->open_price = tick.value;
    } else {
      st->ret_sum += tick.value;
    }
    if (tick.t_ns > st->latest_t_ns) st->latest_t_ns = tick.t_ns;
  } else {
    if (st->open) {
      res.bar = CloseBar(st, /*by_clock=*/false, o.overnight_return);
      res.closed = true;
    } else if (st->any_bar && tick.t_ns < st->closed_end_ns) {
      return Reject(RejectReason::kTooOld);
    }
    st->kind = tick.kind;  // OpenBar's gap logic does not depend on it
    OpenBar(st, tick, o);
  }
  st->has_tick = true;
  st->kind = tick.kind;
  st->last_t_ns = tick.t_ns;
  st->last_value = tick.value;
  return res;
}

bool CloseIfDue(BarState* st, int64_t now_ns, int64_t grace_ns, const BarOptions& o,
                ClosedBar* out) {
  if (o.interval_ns == 0 || !st->open) return false;
  if (now_ns < st->open_end_ns || now_ns - st->open_end_ns < grace_ns) return false;
  *out = CloseBar(st, /*by_clock=*/true, o.overnight_return);
  return true;
}

}  // namespace aftershock

namespace aftershock {

// The encoding is every field in declaration order at its own width (bools
// as one byte 0/1), which is exactly the struct's layout up to open_gap
// (checked here), so a state is written with one copy (a live checkpoint
// writes 10,000 of them per period).
static_assert(offsetof(BarState, open_end_ns) == 8 && offsetof(BarState, latest_t_ns) == 16 &&
                  offsetof(BarState, closed_end_ns) == 24 &&
                  offsetof(BarState, session_day) == 32 && offsetof(BarState, last_t_ns) == 40 &&
                  offsetof(BarState, last_value) == 48 && offsetof(BarState, open_price) == 56 &&
                  offsetof(BarState, prev_close) == 64 && offsetof(BarState, ret_sum) == 72 &&
                  offsetof(BarState, n_ticks) == 80 && offsetof(BarState, open_index) == 84 &&
                  offsetof(BarState, kind) == 88 && offsetof(BarState, has_tick) == 89 &&
                  offsetof(BarState, open) == 90 && offsetof(BarState, has_prev_close) == 91 &&
                  offsetof(BarState, any_bar) == 92 && offsetof(BarState, open_gap) == 93 &&
                  sizeof(bool) == 1,
              "BarState is no longer laid out as its checkpoint encoding");
constexpr size_t kBarStateBytes = 94;

void SaveBarState(const BarState& s, StateWriter* w) {
  w->Append(absl::string_view(reinterpret_cast<const char*>(&s), kBarStateBytes));
}

BarState RestoreBarState(StateReader* r, absl::string_view what) {
  BarState s;
  const std::string f = absl::StrCat(what, " bar state");
  s.open_start_ns = r->I64(f);
  s.open_end_ns = r->I64(f);
  s.latest_t_ns = r->I64(f);
  s.closed_end_ns = r->I64(f);
  s.session_day = r->I64(f);
  s.last_t_ns = r->I64(f);
  s.last_value = r->F64(f);
  s.open_price = r->F64(f);
  s.prev_close = r->F64(f);
  s.ret_sum = r->F64(f);
  s.n_ticks = r->I32(f);
  s.open_index = r->I32(f);
  s.kind = r->U8(f);
  s.has_tick = r->Bool(f);
  s.open = r->Bool(f);
  s.has_prev_close = r->Bool(f);
  s.any_bar = r->Bool(f);
  s.open_gap = r->Bool(f);
  if (!r->ok()) return s;
  if (s.kind > Tick::kReturn || s.n_ticks < 0 || s.open_index < 0) {
    r->Fail(f, "unknown tick kind or a negative count");
  } else if (!std::isfinite(s.last_value) || !std::isfinite(s.open_price) ||
             !std::isfinite(s.prev_close) || !std::isfinite(s.ret_sum)) {
    r->Fail(f, "a non-finite value");
  }
  return s;
}

}  // namespace aftershock
