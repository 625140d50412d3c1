#include "io/shortest_double.h"

#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstring>

#if defined(__SSE2__)
#include <emmintrin.h>
#endif

#if defined(AFTERSHOCK_HAVE_FMT_DRAGONBOX)
#include <fmt/format.h>
#endif

namespace aftershock::internal {

#if defined(AFTERSHOCK_HAVE_FMT_DRAGONBOX)
namespace {

constexpr uint64_t kPow10[] = {1,
                               10,
                               100,
                               1000,
                               10000,
                               100000,
                               1000000,
                               10000000,
                               100000000,
                               1000000000,
                               10000000000,
                               100000000000,
                               1000000000000,
                               10000000000000,
                               100000000000000,
                               1000000000000000,
                               10000000000000000,
                               100000000000000000};

constexpr char kZeros[8] = {'0', '0', '0', '0', '0', '0', '0', '0'};

// The 8 ASCII digits of x < 10^8 (leading zeros kept), the first in the low
// byte: split in registers, 4 + 4 digits, then 2 + 2 per half, then 1 + 1.
// Each step divides every lane at once by a multiply and a shift, exact for
// the lane's range (q = (v * 10486) >> 20 is v / 100 for v < 10^4, and
// (v * 103) >> 10 is v / 10 for v < 100). Built in registers and stored
// whole: digits stored piecewise and read back as one block stall the load
// until the stores complete, which cost more than the digit search itself.
inline uint64_t Ascii8(uint32_t x) {
  const uint64_t v = x;
  const uint64_t y = v / 10000 | (v % 10000) << 32;
  const uint64_t hundreds = ((y * 10486) >> 20) & 0x0000007F0000007FULL;
  const uint64_t w = hundreds | (y - hundreds * 100) << 16;
  const uint64_t tens = ((w * 103) >> 10) & 0x000F000F000F000FULL;
  const uint64_t digits = tens | (w - tens * 10) << 8;
  return digits + 0x3030303030303030ULL;
}

// Ascii8 of a and b at once, a in the low 64 bits: the same steps with SSE2,
// each 64-bit lane one number (16 digits for about the instructions of 8).
// The first division, by 10^4, multiplies 32 x 32 -> 64 bits (pmuludq):
// (v * 3518437209) >> 45 is v / 10^4 for every v < 2^32 (3518437209 is
// 2^45 / 10^4 rounded up). The later ones work on 16-bit parts: v / 100 as
// the high half of v * 10486, shifted right by 4 (v < 10^4), v / 10 as
// (v * 103) >> 10 (v < 100), as in Ascii8.
#if defined(__SSE2__)
inline __m128i Ascii8x2(uint32_t a, uint32_t b) {
  const __m128i v = _mm_set_epi64x(b, a);
  const __m128i q =
      _mm_srli_epi64(_mm_mul_epu32(v, _mm_set1_epi32(static_cast<int>(3518437209u))), 45);
  const __m128i r = _mm_sub_epi32(v, _mm_mul_epu32(q, _mm_set1_epi32(10000)));
  const __m128i y = _mm_or_si128(q, _mm_slli_epi64(r, 32));  // 4 + 4 digits, 32-bit parts
  const __m128i hundreds = _mm_srli_epi16(_mm_mulhi_epu16(y, _mm_set1_epi16(10486)), 4);
  const __m128i w = _mm_or_si128(
      hundreds, _mm_slli_epi32(_mm_sub_epi16(y, _mm_mullo_epi16(hundreds, _mm_set1_epi16(100))),
                               16));  // 2 + 2 + 2 + 2 digits, 16-bit parts
  const __m128i tens = _mm_srli_epi16(_mm_mullo_epi16(w, _mm_set1_epi16(103)), 10);
  const __m128i digits = _mm_or_si128(
      tens, _mm_slli_epi16(_mm_sub_epi16(w, _mm_mullo_epi16(tens, _mm_set1_epi16(10))), 8));
  return _mm_add_epi8(digits, _mm_set1_epi8('0'));
}
#endif

// Writes the last n digits of x < 10^17 (with leading zeros where x has
// fewer) at p and returns the first of them; writes up to p[16]. Three
// independent parts (the top digit and two blocks of 8), each in a register,
// left-aligned by a shift and stored whole: no copy of a variable size, and
// no stored byte is read back.
inline char PutDigits(char* p, uint64_t x, int n) {
  if (n <= 8) {
    const uint64_t s = Ascii8(static_cast<uint32_t>(x)) >> (8 * (8 - n));  // x < 10^8 here
    std::memcpy(p, &s, 8);
    return static_cast<char>(s);
  }
  const uint64_t hi = x / 100000000;    // < 10^9
  const uint64_t top = hi / 100000000;  // < 10
#if defined(__SSE2__)
  const __m128i both = Ascii8x2(static_cast<uint32_t>(hi - top * 100000000),
                                static_cast<uint32_t>(x - hi * 100000000));
  const uint64_t mid = static_cast<uint64_t>(_mm_cvtsi128_si64(both));
  const uint64_t lo = static_cast<uint64_t>(_mm_cvtsi128_si64(_mm_unpackhi_epi64(both, both)));
#else
  const uint64_t mid = Ascii8(static_cast<uint32_t>(hi - top * 100000000));
  const uint64_t lo = Ascii8(static_cast<uint32_t>(x - hi * 100000000));
#endif
  // Without branches on n (9..17): digit counts of consecutive numbers vary
  // at random, and a mispredicted branch costs more than the shift. n = 17:
  // the top digit, then mid whole from p[1]; n <= 16: mid's last n - 8
  // digits from p[0] (over the top digit's byte).
  const char first_of_17 = static_cast<char>('0' + top);
  p[0] = first_of_17;
  const uint64_t s = mid >> (n >= 16 ? 0 : 8 * (16 - n));
  std::memcpy(p + (n == 17 ? 1 : 0), &s, 8);
  std::memcpy(p + n - 8, &lo, 8);
  return n == 17 ? first_of_17 : static_cast<char>(s);
}

// The digits of a scientific exponent's magnitude (0..324), at least two,
// as ASCII bytes, the first in the low byte.
struct ExponentDigits {
  uint32_t text[325];
};
constexpr ExponentDigits MakeExponentDigits() {
  ExponentDigits t{};
  for (uint32_t a = 0; a < 325; ++a) {
    const uint32_t ones = '0' + a % 10;
    const uint32_t tens = '0' + a / 10 % 10;
    t.text[a] = a >= 100 ? ('0' + a / 100) | tens << 8 | ones << 16 : tens | ones << 8;
  }
  return t;
}
constexpr ExponentDigits kExponentDigits = MakeExponentDigits();

// Decimal digits of x (1 <= x < 10^17).
inline int DigitCount(uint64_t x) {
  // floor(log2(x)) * 1233 / 4096 is floor(log10(x)) or one less.
  const int t = ((63 - __builtin_clzll(x)) * 1233) >> 12;
  return t + 1 + (x >= kPow10[t + 1] ? 1 : 0);
}

}  // namespace
#endif

bool ShortestDoubleHasFastDigits() {
#if defined(AFTERSHOCK_HAVE_FMT_DRAGONBOX)
  return true;
#else
  return false;
#endif
}

char* WriteShortestDouble(char* p, double v) {
#if defined(AFTERSHOCK_HAVE_FMT_DRAGONBOX)
  if (std::isfinite(v) && v != 0.0) {
    // v = sig x 10^e, with the fewest digits that read back as v (the
    // closest such, as std::to_chars picks); trailing zeros removed.
    const auto dec = fmt::detail::dragonbox::to_decimal(std::fabs(v));
    const uint64_t sig = dec.significand;  // < 10^17
    const int n = DigitCount(sig);
    const int e = dec.exponent;
    const int x = e + n - 1;  // the exponent in scientific notation
    const int ax = x < 0 ? -x : x;
    // d[.ddd]e+XX: std::to_chars (as printf's %e) writes at least 2 exponent digits.
    const int sci_len = n + (n > 1 ? 1 : 0) + 2 + (ax >= 100 ? 3 : 2);
    // Fixed notation: "ddd000" (e >= 0), "dd.ddd" or "0.000ddd".
    const int fixed_len = e >= 0 ? n + e : (n + e > 0 ? n + 1 : 2 - e);
    // Bytes past the text are scratch (the caller's kShortestDoubleBufferBytes).
    *p = '-';  // kept for a negative number (no branch on a sign)
    p += v < 0 ? 1 : 0;
    if (fixed_len <= sci_len) {
      if (e >= 0) {
        // std::to_chars writes the exact integer value in fixed notation. The
        // digits padded with zeros are that value when it is below 10^15 (an
        // integer < 2^53 is a double of its own, so no other value reads back
        // to v); larger ones (rare) go to std::to_chars.
        if (n + e > 15) return std::to_chars(p - (v < 0), p + kShortestDoubleMaxChars, v).ptr;
        PutDigits(p, sig, n);
        std::memcpy(p + n, kZeros, 8);  // e <= 5: fixed is not longer than d.ddde+XX
        return p + n + e;
      }
      const int k = n + e;  // digits before the point
      if (k > 0) {          // dd.ddd
        const uint64_t ip = sig / kPow10[-e];
        PutDigits(p, ip, k);
        p[k] = '.';
        PutDigits(p + k + 1, sig - ip * kPow10[-e], -e);  // with its leading zeros
        return p + n + 1;
      }
      // 0.000ddd: -e - n zeros (at most 20: fixed_len <= sci_len <= 23).
      p[0] = '0';
      p[1] = '.';
      std::memcpy(p + 2, kZeros, 8);
      std::memcpy(p + 10, kZeros, 8);
      std::memcpy(p + 18, kZeros, 8);
      p += 2 - e - n;
      PutDigits(p, sig, n);
      return p + n;
    }
    // d.ddd: the digits one place on, the first also before the point.
    p[0] = PutDigits(p + 1, sig, n);
    p[1] = '.';
    p += n == 1 ? 1 : n + 1;
    // "e+XX" or "e+XXX" from a table, in a register (bytes stored one by
    // one and read back as a word stall the load), stored whole.
    const uint64_t exp = 'e' | static_cast<uint64_t>(x < 0 ? '-' : '+') << 8 |
                         static_cast<uint64_t>(kExponentDigits.text[ax]) << 16;
    std::memcpy(p, &exp, 8);
    return p + (ax >= 100 ? 5 : 4);
  }
#endif
  return std::to_chars(p, p + kShortestDoubleMaxChars, v).ptr;
}

void AppendShortestDouble(std::string* out, double v) {
  char buf[kShortestDoubleBufferBytes];
  out->append(buf, WriteShortestDouble(buf, v));
}

}  // namespace aftershock::internal
