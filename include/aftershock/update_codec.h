// Outbound wire format of BarUpdate (PRODUCT.md C6): JSON and a compact
// binary form, each with an encoder for the hot path and a decoder for tests,
// the terminal view and consumers written in C++.
//
// JSON (one object per message, keys always present and in this order):
//   {"s":"ALDER.X","t":1772443800000000000,"r":-0.0012,"mu":0.0001,"eps":-0.0013,
//    "var":1.1e-6,"z":-1.24,"var_next":1.2e-6,"vol_ann":0.0174,
//    "var_h":{"1":1.2e-6,"5":6.1e-6},"value_at_risk":{"0.99":0.0025},"es":{"0.99":0.0029},
//    "scale":5.74,"ver":3,"flags":["warmup","gap"]}
// Doubles are written with the shortest representation that parses back to
// the same double (std::to_chars), so a consumer recovers every value exactly.
// Horizon keys are the integer bar counts; level keys are the shortest
// representation of the confidence level.
//
// Binary, version 1, little-endian, doubles IEEE-754 binary64:
//   offset  size   field
//   0       1      magic 0xA8 (kUpdateMagic)
//   1       1      version 1 (kUpdateWireVersion)
//   2       1      L, symbol length 1..32
//   3       L      symbol bytes
//   3+L     8      t_ns int64
//   ...     7*8    r, mu, eps, var, z, var_next, vol_ann (doubles, in this order)
//   ...     1      H, number of horizons 0..kMaxHorizons
//   ...     H*12   H x { uint32 horizon bars, double var_h }
//   ...     1      K, number of risk levels 0..kMaxRiskLevels
//   ...     K*24   K x { double level, double value_at_risk, double es }
//   ...     8      scale double
//   ...     4      ver uint32
//   ...     4      flags uint32 (UpdateFlag bits)
//   The message ends exactly there (size 3 + L + 8 + 56 + 1 + 12H + 1 + 24K + 16).
//
// Non-finite values are never published: both encoders check every double
// first and return InvalidArgument naming the field (leaving *out cleared);
// the caller counts and drops the update. OK costs no allocation; the out
// string is reused, so once its capacity suffices encoding allocates nothing.
//
// Thread-safety: reentrant functions, no shared state.
#ifndef AFTERSHOCK_UPDATE_CODEC_H_
#define AFTERSHOCK_UPDATE_CODEC_H_

#include <string>

#include "absl/status/status.h"
#include "absl/strings/string_view.h"
#include "aftershock/bar_update.h"

namespace aftershock {

inline constexpr uint8_t kUpdateMagic = 0xA8;
inline constexpr uint8_t kUpdateWireVersion = 1;

// Clears *out and writes the JSON object. InvalidArgument if a field is
// non-finite or the counts are out of range (then *out is empty).
absl::Status EncodeUpdateJson(const BarUpdate& u, std::string* out);

// Parses the JSON produced by EncodeUpdateJson (strict on key names; not for
// the hot path: it allocates).
absl::Status DecodeUpdateJson(absl::string_view json, BarUpdate* u);

// Clears *out and writes the binary form; same error rule as the JSON encoder.
absl::Status EncodeUpdateBinary(const BarUpdate& u, std::string* out);
absl::Status DecodeUpdateBinary(absl::string_view data, BarUpdate* u);

}  // namespace aftershock

#endif  // AFTERSHOCK_UPDATE_CODEC_H_
