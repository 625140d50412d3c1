#include "aftershock/refit_scheduler.h"

#include <algorithm>
#include <cmath>

namespace aftershock {

uint64_t StableSymbolHash(absl::string_view symbol) {
  uint64_t h = 14695981039346656037ull;  // FNV-1a 64-bit offset basis
  for (unsigned char c : symbol) {
    h ^= c;
    h *= 1099511628211ull;  // FNV prime
  }
  return h;
}

RefitScheduler::RefitScheduler(const RefitOptions& o)
    : min_bars_(o.min_bars),
      every_bars_(o.every_bars),
      every_ns_(static_cast<int64_t>(std::llround(o.every_seconds * 1e9))) {
  bar_span_ = std::max<int64_t>(
      1, static_cast<int64_t>(std::floor(static_cast<double>(every_bars_) * o.jitter_fraction)));
  ns_span_ = std::max<int64_t>(
      1, static_cast<int64_t>(std::floor(static_cast<double>(every_ns_) * o.jitter_fraction)));
}

void RefitScheduler::InitSymbol(absl::string_view symbol, ScheduleState* s) const {
  const uint64_t h = StableSymbolHash(symbol);
  *s = ScheduleState{};
  s->phase_bars = static_cast<int32_t>(h % static_cast<uint64_t>(bar_span_));
  s->phase_ns = static_cast<int64_t>((h >> 32) % static_cast<uint64_t>(ns_span_));
}

bool RefitScheduler::OnBar(ScheduleState* s, int64_t bars, int64_t t_ns) const {
  if (bars < min_bars_) return false;
  if (!s->armed) {
    s->armed = true;
    s->next_due_bar = bars + s->phase_bars;
    s->next_due_ns = t_ns + s->phase_ns;
  }
  const bool due =
      (every_bars_ > 0 && bars >= s->next_due_bar) || (every_ns_ > 0 && t_ns >= s->next_due_ns);
  if (!due) return false;
  s->next_due_bar = bars + every_bars_;
  s->next_due_ns = t_ns + every_ns_;
  return true;
}

}  // namespace aftershock
