// Clock: the engine's source of wall-clock time, injected so tests can drive
// bar closes and stale-feed checks deterministically.
//
// Thread-safety: SystemClock is thread-safe; ManualClock is not (set it from
// the thread that runs the engine, or before starting it).
#ifndef AFTERSHOCK_CLOCK_H_
#define AFTERSHOCK_CLOCK_H_

#include <cstdint>
#include <memory>

namespace aftershock {

// Wall-clock time in ns since the Unix epoch (UTC), the time base of ticks.
class Clock {
 public:
  virtual ~Clock() = default;
  virtual int64_t NowNs() = 0;
};

// The real-time clock (CLOCK_REALTIME). The returned object is process-wide
// and never destroyed.
Clock* SystemClock();

// A clock that only moves when told to (tests, replay).
class ManualClock : public Clock {
 public:
  explicit ManualClock(int64_t start_ns = 0) : now_ns_(start_ns) {}
  int64_t NowNs() override { return now_ns_; }
  void Set(int64_t now_ns) { now_ns_ = now_ns; }
  void Advance(int64_t delta_ns) { now_ns_ += delta_ns; }

 private:
  int64_t now_ns_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_CLOCK_H_
