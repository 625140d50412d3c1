// BarUpdate: the per-bar, per-symbol output record of the streaming filter
// (PRODUCT.md C6). Fixed-size so the hot path never allocates; encoders for the
// wire live in aftershock/update_codec.h.
//
// Thread-safety: plain value type.
#ifndef AFTERSHOCK_BAR_UPDATE_H_
#define AFTERSHOCK_BAR_UPDATE_H_

#include <cstdint>
#include <cstring>

#include "absl/strings/string_view.h"
#include "aftershock/limits.h"

namespace aftershock {


// A symbol stored inline (no heap). Invariant: size <= kMaxSymbolLength.
struct Symbol {
  char data[kMaxSymbolLength] = {};
  uint8_t size = 0;

  absl::string_view view() const { return absl::string_view(data, size); }
  // REQUIRES: s.size() <= kMaxSymbolLength.
  void assign(absl::string_view s) {
    size = static_cast<uint8_t>(s.size());
    std::memcpy(data, s.data(), s.size());
  }
  bool operator==(const Symbol& o) const { return view() == o.view(); }
};

// Bit flags carried by an update; names on the wire are given by FlagName().
enum UpdateFlag : uint32_t {
  kFlagWarmup = 1u << 0,    // no estimated model yet: EWMA warm-up variance
  kFlagFallback = 1u << 1,  // the model failed its gate repeatedly: EWMA fallback
  // The bar's return spans at least one whole bar interval of the same session
  // in which the symbol had no tick (the previous bar of the session ended
  // before this bar's start). Informational: never set for being closed by the
  // clock, never on per-tick bars or a session's first bar; alerts still fire.
  kFlagStale = 1u << 2,
  kFlagSeasonal = 1u << 3,   // the return was deseasonalized before filtering
  kFlagGap = 1u << 4,        // a session boundary or gap preceded this bar
  kFlagFirstBar = 1u << 5,   // first bar of the symbol: no return, no z
  kFlagPooled = 1u << 6,     // the symbol's group model stands in for its own (refit.h)
};
inline constexpr int kNumUpdateFlags = 7;
absl::string_view FlagName(int bit);  // "warmup", "fallback", "stale", ...

struct BarUpdate {
  Symbol symbol;
  int64_t t_ns = 0;        // bar end, ns since the Unix epoch
  double r = 0;            // bar return (log, in the feed's units)
  double mu = 0;           // mean forecast for this bar (made before it was seen)
  double eps = 0;          // r - mu
  double var = 0;          // sigma^2 used to standardize this bar
  double z = 0;            // eps / sqrt(var)
  double var_next = 0;     // sigma^2 forecast for the next bar
  double vol_ann = 0;      // sqrt(var_next * periods_per_year)
  int n_horizons = 0;
  int horizons[kMaxHorizons] = {};   // bars ahead
  double var_h[kMaxHorizons] = {};   // variance of the return summed over each horizon
  int n_levels = 0;
  double levels[kMaxRiskLevels] = {};    // confidence levels, e.g. 0.99
  double var_risk[kMaxRiskLevels] = {};  // next-bar VaR, positive loss quantile of the return
  double es[kMaxRiskLevels] = {};        // next-bar expected shortfall, positive
  double scale = 0;        // min(cap, target_vol / vol_ann)
  uint32_t ver = 0;        // model version (0 = warm-up EWMA)
  uint32_t flags = 0;      // UpdateFlag bits
};

}  // namespace aftershock

#endif  // AFTERSHOCK_BAR_UPDATE_H_
