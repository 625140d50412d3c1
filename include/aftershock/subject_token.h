// Subject tokens: a reversible encoding of symbols (any byte string) into one
// NATS subject token, so that a tick for symbol S travels on "<subject>.<token>"
// and the broker's partition() mapping hashes exactly that one token.
//
// A NATS token may not contain '.', '*', '>' or white space, and our symbols
// may contain '.' (IsValidSymbol allows [A-Za-z0-9._:-]). The encoding:
//   * bytes of [A-Za-z0-9_:-] are copied unchanged (so "ALDER" is "ALDER");
//   * every other byte b, including '.', '~' itself, '*', '>', white space,
//     control and non-ASCII bytes, becomes "~XX", XX = b in upper-case hex.
// Example: "ALDER.X" <-> "ALDER~2EX", "a~b" <-> "a~7Eb".
// Decoding is strict, so the mapping is a bijection between byte strings and
// canonical tokens: a token with a byte outside [A-Za-z0-9_:-~], a '~' not
// followed by two upper-case hex digits, or an escape of a byte that is copied
// unchanged ("~41" for 'A') is rejected. The empty string has no token.
// An encoded symbol is at most 3x its length (96 bytes for a 32-byte symbol).
//
// Thread-safety: pure functions, reentrant.
#ifndef AFTERSHOCK_SUBJECT_TOKEN_H_
#define AFTERSHOCK_SUBJECT_TOKEN_H_

#include <cstddef>
#include <string>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"

namespace aftershock {

// Longest token of a valid symbol (32 bytes, each escaped).
inline constexpr size_t kMaxSymbolTokenBytes = 96;

// The token of `symbol`. REQUIRES: !symbol.empty().
std::string EncodeSubjectToken(absl::string_view symbol);

// The symbol of a token; InvalidArgument naming the offset of the first
// non-canonical byte.
absl::StatusOr<std::string> DecodeSubjectToken(absl::string_view token);

// Allocation-free decoder for the ingest path: writes the symbol into
// out[0, n) and returns n, or -1 for a non-canonical token or one whose
// symbol does not fit in `capacity` bytes. REQUIRES: out != nullptr.
int DecodeSubjectTokenTo(absl::string_view token, char* out, size_t capacity);

}  // namespace aftershock

#endif  // AFTERSHOCK_SUBJECT_TOKEN_H_
