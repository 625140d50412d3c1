// Fixed capacities shared by the per-bar records and the precomputed tables, so
// that the hot path works on fixed-size arrays and never allocates.
#ifndef AFTERSHOCK_LIMITS_H_
#define AFTERSHOCK_LIMITS_H_

namespace aftershock {

inline constexpr int kMaxSymbolLength = 32;  // bytes of [A-Za-z0-9._:-]
inline constexpr int kMaxHorizons = 8;       // forecast horizons per update (var_h)
inline constexpr int kMaxRiskLevels = 4;     // VaR/ES confidence levels per update

}  // namespace aftershock

#endif  // AFTERSHOCK_LIMITS_H_
