#include "aftershock/bar_builder.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <type_traits>
#include <vector>

namespace aftershock {
namespace {

constexpr int64_t kSec = kNanosPerSecond;
constexpr int64_t kMin = kNanosPerMinute;
// 2026-03-02T00:00:00Z = 20514 days after the epoch (1970-01-01 + 20514 d;
// checked with Python: datetime(2026,3,2) - datetime(1970,1,1) = 20514 days).
constexpr int64_t kDay0 = 20514 * kNanosPerDay;

Tick Price(int64_t t, double p) {
  Tick tick;
  tick.symbol.assign("ALDER.X");
  tick.t_ns = t;
  tick.kind = Tick::kPrice;
  tick.value = p;
  return tick;
}

Tick Return(int64_t t, double r) {
  Tick tick = Price(t, 1);
  tick.kind = Tick::kReturn;
  tick.value = r;
  return tick;
}

TEST_CASE("interval 0: every price message is a bar", "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = 0;
  FeedResult r = FeedTick(&st, Price(10, 100), o);
  REQUIRE(r.closed);
  CHECK_FALSE(r.bar.has_return);
  CHECK(r.bar.flags == kFlagFirstBar);
  CHECK(r.bar.t_end_ns == 10);
  r = FeedTick(&st, Price(20, 101), o);
  REQUIRE(r.closed);
  CHECK(r.bar.has_return);
  CHECK(r.bar.ret == (std::log(101.0) - std::log(100.0)));
  CHECK(r.bar.flags == 0);
  CHECK(r.bar.n_ticks == 1);
  // Exact duplicate of the last message: dropped.
  r = FeedTick(&st, Price(20, 101), o);
  CHECK(r.status == TickStatus::kDuplicate);
  CHECK(r.reason == RejectReason::kDuplicate);
  CHECK_FALSE(r.closed);
  // Same time, new value: a new bar.
  r = FeedTick(&st, Price(20, 102), o);
  REQUIRE(r.closed);
  CHECK(r.bar.ret == (std::log(102.0) - std::log(101.0)));
  // Older than the previous bar.
  r = FeedTick(&st, Price(19, 102), o);
  CHECK(r.status == TickStatus::kRejected);
  CHECK(r.reason == RejectReason::kTooOld);
  // Kind is fixed by the first tick.
  r = FeedTick(&st, Return(30, 0.01), o);
  CHECK(r.reason == RejectReason::kKindMismatch);
  ClosedBar bar;
  CHECK_FALSE(CloseIfDue(&st, 1000 * kSec, 0, o, &bar));
}

TEST_CASE("interval 0: return messages are their own bars", "[bar_builder]") {
  BarState st;
  BarOptions o;
  FeedResult r = FeedTick(&st, Return(5, 0.25), o);
  REQUIRE(r.closed);
  CHECK(r.bar.has_return);
  CHECK(r.bar.ret == 0.25);
  CHECK(r.bar.flags == 0);
}

TEST_CASE("time bars aligned to the epoch close on the next bar's tick", "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = 5 * kSec;
  o.max_lateness_ns = 2 * kSec;
  const int64_t t0 = kDay0 + 9 * 3600 * kSec;  // 09:00:00Z, a multiple of 5 s
  FeedResult r = FeedTick(&st, Price(t0 + 1 * kSec, 100), o);
  CHECK_FALSE(r.closed);
  CHECK(st.open_start_ns == t0);
  CHECK(st.open_end_ns == t0 + 5 * kSec);
  // Out of order inside the bar and within lateness: accepted, does not
  // replace the last price (it is older than the latest tick).
  CHECK(FeedTick(&st, Price(t0 + 3 * kSec, 102), o).status == TickStatus::kAccepted);
  CHECK(FeedTick(&st, Price(t0 + 2 * kSec, 150), o).status == TickStatus::kAccepted);
  CHECK(st.n_ticks == 3);
  // Older than the latest tick by more than max_lateness: too_old.
  r = FeedTick(&st, Price(t0 + 3 * kSec - 2 * kSec - 1, 99), o);
  CHECK(r.reason == RejectReason::kTooOld);
  // Next bar's tick closes the first bar.
  r = FeedTick(&st, Price(t0 + 6 * kSec, 103), o);
  REQUIRE(r.closed);
  CHECK(r.bar.t_end_ns == t0 + 5 * kSec);
  CHECK(r.bar.n_ticks == 3);
  CHECK(r.bar.last_price == 102);
  CHECK_FALSE(r.bar.has_return);
  CHECK(r.bar.flags == kFlagFirstBar);
  CHECK_FALSE(r.bar.closed_by_clock);
  // A tick for the closed bar is too_old even within max_lateness.
  r = FeedTick(&st, Price(t0 + 5 * kSec - 1, 101), o);
  CHECK(r.reason == RejectReason::kTooOld);
  // Skip two empty intervals: no bars for them; the next bar's return spans them.
  r = FeedTick(&st, Price(t0 + 21 * kSec, 104), o);
  REQUIRE(r.closed);
  CHECK(r.bar.t_end_ns == t0 + 10 * kSec);
  CHECK(r.bar.has_return);
  CHECK(r.bar.ret == (std::log(103.0) - std::log(102.0)));
  CHECK(st.open_start_ns == t0 + 20 * kSec);
}

TEST_CASE("latest timestamp wins, ties go to the later arrival", "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = kMin;
  FeedTick(&st, Price(kDay0 + 1, 10), o);
  FeedResult r = FeedTick(&st, Price(kDay0 + kMin + 1, 20), o);  // bar 1 closes, last 10
  REQUIRE(r.closed);
  FeedTick(&st, Price(kDay0 + kMin + 5, 30), o);
  FeedTick(&st, Price(kDay0 + kMin + 5, 40), o);  // same time, later arrival
  FeedTick(&st, Price(kDay0 + kMin + 3, 50), o);  // older: ignored for the last price
  ClosedBar bar;
  REQUIRE(CloseIfDue(&st, kDay0 + 2 * kMin, 0, o, &bar));
  CHECK(bar.ret == (std::log(40.0) - std::log(10.0)));
  CHECK(bar.n_ticks == 4);
}

TEST_CASE("return ticks are summed within a bar", "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = 10 * kSec;
  FeedTick(&st, Return(kDay0 + 1 * kSec, 0.01), o);
  FeedTick(&st, Return(kDay0 + 4 * kSec, -0.025), o);
  FeedTick(&st, Return(kDay0 + 3 * kSec, 0.005), o);
  FeedResult r = FeedTick(&st, Return(kDay0 + 12 * kSec, 0.5), o);
  REQUIRE(r.closed);
  CHECK(r.bar.has_return);
  CHECK(r.bar.ret == Approx(-0.01).margin(1e-15));
  CHECK(r.bar.n_ticks == 3);
  CHECK(r.bar.flags == 0);
}

TEST_CASE("the clock closes an idle bar after the grace period", "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = 5 * kSec;
  const int64_t grace = 200 * 1000 * 1000;
  FeedTick(&st, Price(kDay0 + 1 * kSec, 100), o);
  ClosedBar bar;
  CHECK_FALSE(CloseIfDue(&st, kDay0 + 5 * kSec, grace, o, &bar));
  CHECK_FALSE(CloseIfDue(&st, kDay0 + 5 * kSec + grace - 1, grace, o, &bar));
  REQUIRE(CloseIfDue(&st, kDay0 + 5 * kSec + grace, grace, o, &bar));
  CHECK(bar.t_end_ns == kDay0 + 5 * kSec);
  CHECK(bar.closed_by_clock);
  CHECK((bar.flags & kFlagStale) == 0);
  CHECK_FALSE(CloseIfDue(&st, kDay0 + 60 * kSec, grace, o, &bar));  // nothing open
  // A late tick for the closed bar is too_old; a tick for a later bar opens one.
  CHECK(FeedTick(&st, Price(kDay0 + 4 * kSec, 100), o).reason == RejectReason::kTooOld);
  FeedResult r = FeedTick(&st, Price(kDay0 + 7 * kSec, 101), o);
  CHECK_FALSE(r.closed);
  CHECK(r.status == TickStatus::kAccepted);
  REQUIRE(CloseIfDue(&st, kDay0 + 11 * kSec, grace, o, &bar));
  CHECK(bar.has_return);
  CHECK(bar.ret == (std::log(101.0) - std::log(100.0)));
}

TEST_CASE("sessions: outside ticks rejected, bars anchored and clipped, gaps flagged",
          "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = 7 * kMin;  // does not divide the day: anchoring matters
  o.session.enabled = true;
  o.session.start_minute = 8 * 60;
  o.session.end_minute = 16 * 60 + 30;
  o.session.tz_offset_minutes = 60;                // local = UTC+1
  const int64_t open_utc = kDay0 + 7 * 60 * kMin;  // 08:00 local = 07:00Z
  // 07:59 local is outside.
  CHECK(FeedTick(&st, Price(open_utc - kMin, 100), o).reason == RejectReason::kOutsideSession);
  FeedResult r = FeedTick(&st, Price(open_utc + 3 * kMin, 100), o);
  CHECK(r.status == TickStatus::kAccepted);
  CHECK(st.open_start_ns == open_utc);
  CHECK(st.open_end_ns == open_utc + 7 * kMin);
  // Last bar of the day: 16:24 local + 7 min would pass 16:30, so it is clipped.
  const int64_t close_utc = open_utc + (8 * 60 + 30) * kMin;
  r = FeedTick(&st, Price(close_utc - 2 * kMin, 101), o);
  REQUIRE(r.closed);
  CHECK(r.bar.t_end_ns == open_utc + 7 * kMin);
  CHECK(st.open_start_ns == open_utc + 72 * 7 * kMin);  // 16:24 local
  CHECK(st.open_end_ns == close_utc);
  CHECK(FeedTick(&st, Price(close_utc, 101), o).reason == RejectReason::kOutsideSession);
  // Next day's first tick: closes yesterday's last bar; the new bar is a gap bar.
  r = FeedTick(&st, Price(open_utc + kNanosPerDay + 1 * kMin, 120), o);
  REQUIRE(r.closed);
  CHECK(r.bar.t_end_ns == close_utc);
  CHECK(r.bar.has_return);
  CHECK(r.bar.ret == (std::log(101.0) - std::log(100.0)));
  ClosedBar bar;
  REQUIRE(CloseIfDue(&st, open_utc + kNanosPerDay + 8 * kMin, 0, o, &bar));
  CHECK_FALSE(bar.has_return);  // no overnight return
  CHECK(bar.flags == kFlagGap);
  CHECK(bar.last_price == 120);
  // The following bar has a return again, relative to the gap bar's price.
  FeedTick(&st, Price(open_utc + kNanosPerDay + 9 * kMin, 121), o);
  REQUIRE(CloseIfDue(&st, open_utc + kNanosPerDay + 15 * kMin, 0, o, &bar));
  CHECK(bar.has_return);
  CHECK(bar.ret == (std::log(121.0) - std::log(120.0)));
  CHECK(bar.flags == 0);
}

TEST_CASE("stale: a bar after whole silent intervals of its session, never for the clock",
          "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = kMin;
  o.session.enabled = true;
  o.session.start_minute = 8 * 60;
  o.session.end_minute = 16 * 60 + 30;
  o.session.tz_offset_minutes = 60;
  const int64_t open = kDay0 + 7 * 60 * kMin;  // 08:00 local
  ClosedBar bar;
  // Bars 08:00 and 08:01 have ticks and are closed by the clock: not stale.
  FeedTick(&st, Price(open + 10 * kSec, 100), o);
  REQUIRE(CloseIfDue(&st, open + kMin, 0, o, &bar));
  CHECK(bar.closed_by_clock);
  CHECK(bar.flags == kFlagFirstBar);
  FeedTick(&st, Price(open + kMin + 5 * kSec, 101), o);
  REQUIRE(CloseIfDue(&st, open + 2 * kMin, 0, o, &bar));
  CHECK(bar.closed_by_clock);
  CHECK(bar.has_return);
  CHECK(bar.flags == 0);
  // No tick in 08:02..08:04: no bars; the 08:05 bar's return spans them.
  FeedTick(&st, Price(open + 5 * kMin + 1 * kSec, 102), o);
  REQUIRE(CloseIfDue(&st, open + 6 * kMin, 0, o, &bar));
  CHECK(bar.has_return);
  CHECK(bar.ret == (std::log(102.0) - std::log(101.0)));
  CHECK(bar.flags == kFlagStale);
  // The next consecutive bar, closed by its successor's tick, is not stale.
  FeedTick(&st, Price(open + 6 * kMin + 1 * kSec, 103), o);
  FeedResult r = FeedTick(&st, Price(open + 7 * kMin + 1 * kSec, 104), o);
  REQUIRE(r.closed);
  CHECK_FALSE(r.bar.closed_by_clock);
  CHECK(r.bar.flags == 0);
  // A bar closed by a tick after a silent interval is stale all the same.
  r = FeedTick(&st, Price(open + 9 * kMin, 105), o);
  REQUIRE(r.closed);  // closes 08:07
  CHECK(r.bar.flags == 0);
  r = FeedTick(&st, Price(open + 10 * kMin, 106), o);
  REQUIRE(r.closed);  // closes 08:09, one silent minute (08:08) before it
  CHECK(r.bar.flags == kFlagStale);
  // The first bar of the next session spans the night: gap, not stale.
  r = FeedTick(&st, Price(open + kNanosPerDay + 30 * kMin, 107), o);
  REQUIRE(r.closed);
  REQUIRE(CloseIfDue(&st, open + kNanosPerDay + 31 * kMin, 0, o, &bar));
  CHECK(bar.flags == kFlagGap);
  // Per-tick bars never carry it, however long the silence.
  BarState t0;
  BarOptions per_tick;
  FeedTick(&t0, Price(kDay0, 100), per_tick);
  r = FeedTick(&t0, Price(kDay0 + 3600 * kSec, 101), per_tick);
  REQUIRE(r.closed);
  CHECK(r.bar.flags == 0);
}

TEST_CASE("SessionOpenNs: the start of the session containing a time", "[bar_builder]") {
  SessionWindow s;
  CHECK(SessionOpenNs(s, kDay0 + 5 * kMin) == INT64_MIN);  // no session
  s.enabled = true;
  s.start_minute = 8 * 60;
  s.end_minute = 16 * 60 + 30;
  s.tz_offset_minutes = 60;
  CHECK(SessionOpenNs(s, kDay0 + 7 * 60 * kMin) == kDay0 + 7 * 60 * kMin);
  CHECK(SessionOpenNs(s, kDay0 + 15 * 60 * kMin) == kDay0 + 7 * 60 * kMin);
  // Over midnight: 01:00 belongs to the session opened at 22:00 the day before.
  SessionWindow night;
  night.enabled = true;
  night.start_minute = 22 * 60;
  night.end_minute = 6 * 60;
  CHECK(SessionOpenNs(night, kDay0 + 25 * 60 * kMin) == kDay0 + 22 * 60 * kMin);
  CHECK(SessionOpenNs(night, kDay0 + 23 * 60 * kMin) == kDay0 + 22 * 60 * kMin);
}

TEST_CASE("sessions over midnight and per-message bars across a session gap", "[bar_builder]") {
  SessionWindow s;
  s.enabled = true;
  s.start_minute = 22 * 60;
  s.end_minute = 6 * 60;
  CHECK(InSession(s, kDay0 + 23 * 60 * kMin));
  CHECK(InSession(s, kDay0 + 5 * 60 * kMin));
  CHECK_FALSE(InSession(s, kDay0 + 6 * 60 * kMin));
  CHECK_FALSE(InSession(s, kDay0 + 12 * 60 * kMin));

  BarState st;
  BarOptions o;
  o.session = s;
  // 23:00 and 01:00 next day are the same session: no gap.
  FeedTick(&st, Price(kDay0 + 23 * 60 * kMin, 10), o);
  FeedResult r = FeedTick(&st, Price(kDay0 + 25 * 60 * kMin, 11), o);
  REQUIRE(r.closed);
  CHECK(r.bar.has_return);
  CHECK(r.bar.flags == 0);
  // 22:30 the next evening is a new session.
  r = FeedTick(&st, Price(kDay0 + (24 + 22) * 60 * kMin + 30 * kMin, 12), o);
  REQUIRE(r.closed);
  CHECK_FALSE(r.bar.has_return);
  CHECK(r.bar.flags == kFlagGap);
}

TEST_CASE("extreme but valid inputs keep the return finite", "[bar_builder]") {
  // Found by tests/fuzz/wire_fuzz: the ratio 1e308 / 5e-324 overflows to inf.
  BarState st;
  BarOptions o;
  FeedTick(&st, Price(1, 5e-324), o);
  FeedResult r = FeedTick(&st, Price(2, 1e308), o);
  REQUIRE(r.closed);
  CHECK(std::isfinite(r.bar.ret));
  CHECK(r.bar.ret == Approx(std::log(1e308) - std::log(5e-324)));
  BarState rs;
  o.interval_ns = kSec;
  CHECK(FeedTick(&rs, Return(1, 1e308), o).status == TickStatus::kAccepted);
  r = FeedTick(&rs, Return(2, 1e308), o);
  CHECK(r.status == TickStatus::kRejected);
  CHECK(r.reason == RejectReason::kNonFinite);
}

TEST_CASE("times outside [0, 2^62] are bad_time", "[bar_builder]") {
  BarState st;
  BarOptions o;
  o.interval_ns = kMin;
  o.session.tz_offset_minutes = 1440;
  CHECK(FeedTick(&st, Price(-1, 1), o).reason == RejectReason::kBadTime);
  CHECK(FeedTick(&st, Price(kMaxBarTimeNs + 1, 1), o).reason == RejectReason::kBadTime);
  CHECK(FeedTick(&st, Price(kMaxBarTimeNs, 1), o).status == TickStatus::kAccepted);
}

TEST_CASE("the builder state is small and fixed-size", "[bar_builder]") {
  CHECK(sizeof(BarState) <= 96);
  CHECK(std::is_trivially_copyable<BarState>::value);
}


TEST_CASE("bar-of-session index and the opening return", "[bar_builder]") {
  BarOptions o;
  o.interval_ns = kMin;
  o.session = SessionWindow{true, 9 * 60, 10 * 60, 0};  // 09:00-10:00 UTC
  for (bool overnight : {false, true}) {
    o.overnight_return = overnight;
    BarState st;
    const int64_t open = kDay0 + 9 * 60 * kMin;
    std::vector<ClosedBar> bars;
    for (int64_t t : {open + 30 * kSec, open + 5 * kMin + 30 * kSec, open + 59 * kMin + 10 * kSec,
                      open + kNanosPerDay + 2 * kMin + 30 * kSec,
                      open + kNanosPerDay + 3 * kMin + 30 * kSec}) {
      const FeedResult r = FeedTick(&st, Price(t, 100.0 + static_cast<double>(bars.size())), o);
      if (r.closed) bars.push_back(r.bar);
    }
    ClosedBar last;
    REQUIRE(CloseIfDue(&st, open + kNanosPerDay + 10 * kMin, 0, o, &last));
    bars.push_back(last);
    REQUIRE(bars.size() == 5);
    CHECK(bars[0].session_bar == 0);
    CHECK(bars[1].session_bar == 5);
    CHECK(bars[2].session_bar == 59);
    CHECK(bars[3].session_bar == 2);  // next day: index from that session's start
    CHECK(bars[4].session_bar == 3);
    CHECK(bars[3].flags == kFlagGap);
    // The first bar of the next session: no return when skipped; with the
    // opening return, log(its close / the previous session's last close).
    CHECK(bars[3].has_return == overnight);
    if (overnight) CHECK(bars[3].ret == Approx(std::log(102.0 / 101.0)));
    CHECK(bars[4].has_return);
    CHECK_FALSE(bars[0].has_return);  // the symbol's first bar never has one
  }
  BarOptions zero;
  BarState st;
  CHECK(FeedTick(&st, Price(kDay0, 100), zero).bar.session_bar == -1);
}

}  // namespace
}  // namespace aftershock
