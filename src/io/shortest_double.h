// WriteShortestDouble: a double as the shortest decimal text that parses back
// to the same double, byte for byte what std::to_chars(first, last, v) writes
// (no format argument), only faster. The JSON and CSV writers of updates and
// ticks call it for every number they publish.
//
// Why not std::to_chars itself: libstdc++ 12's call costs about 520
// instructions a double, and the JSON update writer makes 12 or 13 of them an
// update (86 % of its instructions under callgrind). Where the build finds
// Debian's fmt 9 with its shortest-digits routine (CMakeLists.txt,
// AFTERSHOCK_HAVE_FMT_DRAGONBOX; header-only, with its full table of powers
// of ten) the digits come from there (about 85 instructions) and this file
// lays them out with std::to_chars's notation rule (about 140); without it
// every call is std::to_chars. Either way the bytes are
// std::to_chars's (shortest_double_test compares them on millions of values).
//
// Thread-safety: thread-compatible (no state).
#ifndef AFTERSHOCK_SRC_IO_SHORTEST_DOUBLE_H_
#define AFTERSHOCK_SRC_IO_SHORTEST_DOUBLE_H_

#include <string>

namespace aftershock::internal {

// The longest text WriteShortestDouble writes: "-2.2250738585072014e-308".
constexpr int kShortestDoubleMaxChars = 24;
// The bytes at p WriteShortestDouble may write: the text, then scratch (it
// copies digits in fixed-size blocks; a copy of variable size is a library
// call). Bytes past the returned end are unspecified.
constexpr int kShortestDoubleBufferBytes = 40;

// Writes v at p and returns the end of the text (no terminating NUL).
// Notation: fixed or scientific, whichever is shorter (fixed on a tie), as
// std::to_chars; "inf", "-inf", "nan" and "-0" as std::to_chars.
// REQUIRES: kShortestDoubleBufferBytes writable bytes at p.
char* WriteShortestDouble(char* p, double v);

// Appends WriteShortestDouble's text of v to *out.
void AppendShortestDouble(std::string* out, double v);

// True when the build uses fmt's shortest-digits routine (false: every call
// is std::to_chars). For benchmarks and the contributor guide.
bool ShortestDoubleHasFastDigits();

}  // namespace aftershock::internal

#endif  // AFTERSHOCK_SRC_IO_SHORTEST_DOUBLE_H_
