// Bar builder: aggregates one symbol's ticks into time bars (PRODUCT.md C4).
// A small fixed-size state per symbol plus pure functions, so the engine keeps
// the states in a flat array and the hot path never allocates.
//
// Rules (all times ns since the Unix epoch, UTC):
//   * interval_ns == 0: every accepted tick is a bar ending at the tick time.
//     Price ticks: return = log(price / previous tick's price). Return ticks:
//     return = the tick's value. A tick older than the previous one is too_old.
//   * interval_ns > 0: bars are [start, start + interval) aligned to multiples
//     of the interval since the anchor: the session start (local time) when a
//     session is configured, else the epoch shifted by the session's UTC
//     offset (0 without a session). A bar never extends past its session end:
//     its end time is clipped to the session end.
//   * Price bars: return = log(last price of the bar / last price of the
//     previous bar); "last" means the tick with the latest timestamp (the later
//     arrival wins a tie). Return bars: return = sum of the ticks' log returns.
//   * has_return is false for a price symbol's first bar and for the first bar
//     of a new session (no overnight return). Return ticks carry their own
//     returns, so return bars always have one; the gap flag still marks the
//     first bar of a new session.
//   * A tick in the open bar but more than max_lateness_ns older than the
//     latest tick seen, or any tick before the open bar's start (its bar has
//     closed or never opened), or before the end of the last closed bar, is
//     rejected as too_old. A tick later than the open bar closes it (the
//     closed bar is returned) and opens a new bar.
//   * A tick equal in time and value to the previously accepted tick is an
//     exact duplicate: dropped and reported as duplicate (only the last tick is
//     remembered, so an older repeat inside the bar is counted as a tick).
//   * Tick times must lie in [0, kMaxBarTimeNs] (else bad_time), and
//     BarOptions durations must be at most kMaxBarDurationNs (7 days).
//   * A return tick that would make the open bar's sum non-finite is rejected
//     as non_finite. Price returns are computed as log(p1) - log(p0), finite
//     for every pair of positive finite prices.
//   * A tick outside the session is rejected as outside_session; a tick whose
//     kind differs from the symbol's first tick is rejected as kind_mismatch.
//   * CloseIfDue closes the open bar once now >= bar end + grace. Such a bar is
//     a normal bar: closed_by_clock is set for information only. A bar that
//     had ticks is never stale for being closed by the clock.
//   * An interval in which no tick arrived produces no bar at all; the next
//     bar's return spans the silence. Such a bar carries kFlagStale: the bar
//     before it in the same session ended earlier than this bar's start, so
//     its return spans at least one whole bar interval without a tick of the
//     symbol (informational; the alert rules treat it as any other bar). The
//     first bar of a session (kFlagGap) and per-tick bars (interval 0) never
//     carry it.
//
// Thread-safety: BarState is a plain value; one thread owns each state.
#ifndef AFTERSHOCK_BAR_BUILDER_H_
#define AFTERSHOCK_BAR_BUILDER_H_

#include <cstdint>

#include "aftershock/bar_update.h"
#include "aftershock/state_codec.h"
#include "aftershock/wire.h"

namespace aftershock {

inline constexpr int64_t kNanosPerSecond = 1000000000;
inline constexpr int64_t kNanosPerMinute = 60 * kNanosPerSecond;
inline constexpr int64_t kNanosPerDay = 1440 * kNanosPerMinute;
// Latest tick time the builder accepts (2^62 ns, early 2116); later or
// negative times are rejected as bad_time.
inline constexpr int64_t kMaxBarTimeNs = int64_t{1} << 62;

// A daily trading session in local time (UTC + tz_offset_minutes). When
// end_minute <= start_minute the session runs over midnight.
struct SessionWindow {
  bool enabled = false;       // false: every tick is in session, bars never clip
  int start_minute = 0;       // minutes after local midnight, 0..1439; default 0
  int end_minute = 1440;      // minutes after local midnight, 1..1440; default 1440
  int tz_offset_minutes = 0;  // local time = UTC + offset; -1440..1440; default 0
};

inline constexpr int64_t kMaxBarDurationNs = 7 * kNanosPerDay;

struct BarOptions {
  int64_t interval_ns = 0;                        // bar length; 0 = one bar per tick
  int64_t max_lateness_ns = 5 * kNanosPerSecond;  // tolerated reordering; default 5 s
  SessionWindow session;                          // default: no session
  // Price bars: the first bar of a session gets the return over the night
  // (from the previous session's last price) instead of none. Default false.
  bool overnight_return = false;
};

// One closed bar.
struct ClosedBar {
  int64_t t_end_ns = 0;   // bar end (boundary, clipped to the session end)
  double ret = 0;         // log return of the bar (0 when !has_return)
  double last_price = 0;  // price bars: last price; return bars: 0
  bool has_return = false;
  bool closed_by_clock = false;  // closed by CloseIfDue rather than by a later tick
  int32_t n_ticks = 0;
  int32_t session_bar = -1;  // bar-of-session index k (see above); -1 for interval 0
  uint32_t flags = 0;  // kFlagGap, kFlagFirstBar, kFlagStale (UpdateFlag bits)
};

// Per-symbol builder state: fixed size, trivially copyable (checkpointable).
struct BarState {
  int64_t open_start_ns = 0;    // start of the open bar
  int64_t open_end_ns = 0;      // end of the open bar (clipped)
  int64_t latest_t_ns = 0;      // latest tick time in the open bar
  int64_t closed_end_ns = 0;    // end of the last closed bar (0 = none yet)
  int64_t session_day = 0;      // session index of the open / last bar
  int64_t last_t_ns = 0;        // time of the last accepted tick (duplicates)
  double last_value = 0;        // value of the last accepted tick (duplicates)
  double open_price = 0;        // price bars: price at latest_t_ns
  double prev_close = 0;        // price bars: last price of the previous bar
  double ret_sum = 0;           // return bars: sum of the open bar's returns
  int32_t n_ticks = 0;          // ticks in the open bar
  int32_t open_index = 0;       // bar-of-session index of the open bar
  uint8_t kind = 0;             // Tick::Kind of the symbol (valid when has_tick)
  bool has_tick = false;        // any tick accepted yet
  bool open = false;            // a bar is open
  bool has_prev_close = false;  // prev_close valid (and in the same session)
  bool any_bar = false;         // a bar has been closed before
  bool open_gap = false;        // the open bar is the first of a new session
};

// Checkpoint encoding of a symbol's bar state (every field, exact bits), so
// an open bar continues where it was.
void SaveBarState(const BarState& state, StateWriter* w);
// Reads what SaveBarState wrote; an unknown tick kind, a negative tick count
// or non-finite values set the reader's error naming `what`.
BarState RestoreBarState(StateReader* r, absl::string_view what);

enum class TickStatus : uint8_t { kAccepted, kDuplicate, kRejected };

struct FeedResult {
  TickStatus status = TickStatus::kAccepted;
  RejectReason reason = RejectReason::kTooOld;  // meaningful when kRejected / kDuplicate
  bool closed = false;                          // `bar` holds a bar closed by this tick
  ClosedBar bar;
};

// Feeds one validated tick (the decoder has checked symbol, finiteness and
// price > 0). REQUIRES: state != nullptr; options.interval_ns >= 0.
FeedResult FeedTick(BarState* state, const Tick& tick, const BarOptions& options);

// Closes the open bar when now_ns >= its end + grace_ns; returns true and
// fills *out in that case. Never closes anything when interval_ns == 0.
bool CloseIfDue(BarState* state, int64_t now_ns, int64_t grace_ns, const BarOptions& options,
                ClosedBar* out);

// True when t_ns lies inside the session (always true when disabled).
bool InSession(const SessionWindow& session, int64_t t_ns);

// Start (UTC ns) of the session that contains t_ns; INT64_MIN when sessions
// are disabled (one endless session). REQUIRES: InSession(session, t_ns).
int64_t SessionOpenNs(const SessionWindow& session, int64_t t_ns);

}  // namespace aftershock

#endif  // AFTERSHOCK_BAR_BUILDER_H_
