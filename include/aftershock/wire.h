// Inbound wire format: decoding ticks from two-frame ZeroMQ messages
// [symbol][body] without allocating, and encoders for tests, the simulator and
// the benchmarks. Bad input is data: every rejection is a RejectReason value,
// counted by the caller in a RejectCounters; nothing here throws.
//
// ---------------------------------------------------------------------------
// JSON body (encoding = "json")
// ---------------------------------------------------------------------------
// Single tick, symbol frame = the symbol:
//     {"t": 1772443800000000000, "p": 101.25}          price tick
//     {"t": 1772443800000000000, "r": -0.00042, "v": 300}   return tick with size
//   "t"  integer ns since the Unix epoch (UTC), 0 <= t < 2^63; no fraction, no exponent.
//   "p"  price (> 0) or "r" log return; exactly one of the two.
//   "v"  optional size (finite, >= 0); 0 when absent.
//   "s"  optional in a single message; when present it must equal the symbol frame.
// Batch, symbol frame = "*": a JSON array of such objects, each with "s":
//     [{"s":"ALDER.X","t":...,"p":...},{"s":"BIRCH.Y","t":...,"r":...}]
//   An empty array is a valid batch of zero ticks.
// The parser is strict JSON (RFC 8259) for this fixed schema. Decisions:
//   * Unknown keys are REJECTED (unknown_field) rather than ignored: the schema
//     is fixed and small, and a publisher sending other keys is misconfigured.
//     The rest of a batch is still decoded (the unknown value is skipped).
//   * A repeated key, or both "p" and "r", is malformed_json for that record.
//   * NaN / Infinity / -Infinity tokens, and numbers that overflow a double,
//     are non_finite (not malformed_json), so a publisher bug is named.
//   * Numbers decode to the correctly rounded double (as strtod); one that
//     underflows is a zero of its sign.
//   * A syntax error anywhere rejects the WHOLE message (malformed_json,
//     counted once): after a syntax error record boundaries are not reliable.
//   * Semantic errors (bad_symbol, non_finite, non_positive_price,
//     missing_field, unknown_field, bad_time, bad_size) reject only that
//     record; each is counted.
//
// ---------------------------------------------------------------------------
// Binary body (encoding = "binary"), version 1, all integers little-endian,
// doubles IEEE-754 binary64 little-endian:
// ---------------------------------------------------------------------------
//   offset  size  field
//   0       1     magic    0xA7 (kTickMagic)
//   1       1     version  1    (kTickWireVersion)
//   2       2     count    uint16, number of records, 0..kMaxBatchTicks
//   4       ...   count records, each 26 + L bytes:
//                   1   L        uint8 symbol length, 1..32
//                   L   symbol   bytes of [A-Za-z0-9._:-]
//                   8   t_ns     int64, ns since the Unix epoch, >= 0
//                   1   kind     uint8, 0 = price, 1 = return
//                   8   value    double, price (> 0) or log return
//                   8   size     double, finite, >= 0 (0 = not given)
//   The body must end exactly after the last record.
// The symbol frame is the ZeroMQ topic: the symbol for a single-record message
// (then the record's symbol must equal it) or "*" for a batch of any count.
// Structural errors (bad magic/version, truncation, trailing bytes, a symbol
// length of 0 or > 32) reject the whole message as malformed_binary; record
// content errors (bad symbol characters, kind not 0/1, non-finite values, price
// <= 0, negative time or size) reject only that record.
//
// Thread-safety: all functions are reentrant; none keeps state.
#ifndef AFTERSHOCK_WIRE_H_
#define AFTERSHOCK_WIRE_H_

#include <cstddef>
#include <cstdint>
#include <limits>
#include <string>

#include "absl/strings/string_view.h"
#include "absl/types/span.h"
#include "aftershock/bar_update.h"

namespace aftershock {

// One validated input tick.
struct Tick {
  enum Kind : uint8_t { kPrice = 0, kReturn = 1 };
  Symbol symbol;
  int64_t t_ns = 0;    // event time, ns since the Unix epoch (UTC)
  Kind kind = kPrice;  // what `value` is
  double value = 0;    // price (> 0) for kPrice, log return for kReturn
  double size = 0;     // traded size; 0 when not given
  // Realized variance of the interval (tick files only); NaN when not given.
  double rv = std::numeric_limits<double>::quiet_NaN();
};

enum class WireEncoding : uint8_t { kJson = 0, kBinary = 1 };
absl::string_view WireEncodingName(WireEncoding e);  // "json" | "binary"

// Why an input was dropped. Names (RejectReasonName) appear in metrics and logs.
enum class RejectReason : uint8_t {
  kMalformedJson = 0,  // "malformed_json": syntax error, repeated key, both p and r
  kMalformedBinary,    // "malformed_binary": bad magic/version/structure/kind
  kBadSymbol,          // "bad_symbol": empty, > 32 bytes, bad character, frame mismatch
  kOversize,           // "oversize": body longer than the configured limit
  kNonFinite,          // "non_finite": NaN/inf value or size, or a number overflowing
  kNonPositivePrice,   // "non_positive_price": price <= 0
  kMissingField,       // "missing_field": no t, no p/r, or no s in a batch record
  kUnknownField,       // "unknown_field": a key outside the schema
  kBatchTooLarge,      // "batch_too_large": more records than the caller's capacity
  kBadTime,            // "bad_time": t negative, fractional or out of int64 range
  kBadSize,            // "bad_size": size negative
  kTooOld,             // "too_old": set by the bar builder
  kOutsideSession,     // "outside_session": set by the bar builder
  kDuplicate,          // "duplicate": exact repeat dropped by the bar builder
  kKindMismatch,       // "kind_mismatch": price tick for a return symbol or vice versa
  kSymbolLimit,        // "symbol_limit": set by the engine at the symbol cap
};
inline constexpr int kNumRejectReasons = 16;
absl::string_view RejectReasonName(RejectReason r);

// Per-reason counts. Plain value; not thread-safe (one per ingest thread).
struct RejectCounters {
  uint64_t by_reason[kNumRejectReasons] = {};
  void Add(RejectReason r, uint64_t n = 1) { by_reason[static_cast<int>(r)] += n; }
  uint64_t Get(RejectReason r) const { return by_reason[static_cast<int>(r)]; }
  uint64_t Total() const;
};

inline constexpr uint8_t kTickMagic = 0xA7;
inline constexpr uint8_t kTickWireVersion = 1;
inline constexpr int kMaxBatchTicks = 8192;  // records per batch message
inline constexpr size_t kDefaultMaxMessageBytes = 65536;

// True for 1..32 bytes of [A-Za-z0-9._:-] ("*" is not a symbol).
bool IsValidSymbol(absl::string_view s);

// Result of decoding one message.
struct DecodeResult {
  int n_ticks = 0;     // good ticks written to out[0, n_ticks)
  int n_rejected = 0;  // rejections added to the counters by this call
};

// Decodes one two-frame message into out[0..]. Every rejection is added to
// *counters. Never allocates, never throws.
// REQUIRES: counters != nullptr; out.size() <= kMaxBatchTicks is the batch capacity
// (a batch with more records is batch_too_large as a whole).
DecodeResult DecodeTicks(absl::string_view symbol_frame, absl::string_view body,
                         WireEncoding encoding, size_t max_message_bytes, absl::Span<Tick> out,
                         RejectCounters* counters);

// Encoders (clear *out first; they do not validate: callers pass good ticks,
// tests pass bad ones on purpose). The symbol frame is tick.symbol or "*".
void EncodeTickJson(const Tick& tick, std::string* out);               // body without "s"
void EncodeBatchJson(absl::Span<const Tick> ticks, std::string* out);  // array with "s"
void EncodeTickBinary(const Tick& tick, std::string* out);
// REQUIRES: ticks.size() <= 65535.
void EncodeBatchBinary(absl::Span<const Tick> ticks, std::string* out);

}  // namespace aftershock

#endif  // AFTERSHOCK_WIRE_H_
