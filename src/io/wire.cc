#include "aftershock/wire.h"

#include <cctype>
#include <charconv>
#include <cmath>
#include <cstring>

#include "io/shortest_double.h"

namespace aftershock {
namespace {

constexpr int kMaxSkipDepth = 16;  // nesting allowed inside a skipped unknown value

// Byte classes, one table lookup per byte on the per-tick path.
enum : uint8_t {
  kSymbolByte = 1,  // [A-Za-z0-9._:-]
  kPlainByte = 2,   // inside a JSON string without special meaning: >= 0x20, not '"' or '\\'
  kDigitByte = 4,   // [0-9]
};
struct ByteClasses {
  uint8_t of[256] = {};
  constexpr ByteClasses() {
    for (int c = 0; c < 256; ++c) {
      const bool symbol = (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') ||
                          (c >= '0' && c <= '9') || c == '.' || c == '_' || c == ':' || c == '-';
      of[c] = static_cast<uint8_t>((symbol ? kSymbolByte : 0) |
                                   (c >= 0x20 && c != '"' && c != '\\' ? kPlainByte : 0) |
                                   (c >= '0' && c <= '9' ? kDigitByte : 0));
    }
  }
};
constexpr ByteClasses kByteClasses;

inline bool Is(char c, uint8_t cls) {
  return (kByteClasses.of[static_cast<unsigned char>(c)] & cls) != 0;
}

// A scanned JSON number: the token and its decimal value w * 10^q, exact
// while digits <= 19 (w is meaningless past that).
struct Number {
  absl::string_view tok;
  bool non_finite = false;  // NaN, Infinity or -Infinity (not JSON; named as non_finite)
  bool is_integer = true;   // no fraction and no exponent
  bool negative = false;    // a leading '-'
  uint64_t w = 0;           // the significant digits, leading zeros included
  int digits = 0;           // how many digits w holds
  int q = 0;                // decimal exponent: fraction digits subtracted, exponent added
};

// ---- Strict JSON scanner for the fixed tick schema ---------------------------
// The scanner works on [p, end) and never allocates. Any syntax error sets
// syntax_error and the caller rejects the whole message.
class Scanner {
 public:
  Scanner(const char* p, const char* end) : p_(p), end_(end) {}

  bool syntax_error() const { return syntax_error_; }
  bool AtEnd() {
    SkipWs();
    return p_ == end_;
  }
  void Fail() { syntax_error_ = true; }

  void SkipWs() {
    while (p_ < end_ && (*p_ == ' ' || *p_ == '\t' || *p_ == '\n' || *p_ == '\r')) ++p_;
  }
  // Consumes c after whitespace; false (no error set) when the next char differs.
  bool Consume(char c) {
    SkipWs();
    if (p_ < end_ && *p_ == c) {
      ++p_;
      return true;
    }
    return false;
  }
  bool Expect(char c) {
    if (!Consume(c)) Fail();
    return !syntax_error_;
  }
  char Peek() {
    SkipWs();
    return p_ < end_ ? *p_ : '\0';
  }

  // Scans a string; *raw receives the bytes between the quotes and *escaped
  // whether any backslash escape occurred (then raw is not the decoded value).
  bool String(absl::string_view* raw, bool* escaped) {
    if (!Expect('"')) return false;
    const char* start = p_;
    *escaped = false;
    while (p_ < end_) {
      if (Is(*p_, kPlainByte)) {  // the common case: one lookup per byte
        ++p_;
        continue;
      }
      const unsigned char c = static_cast<unsigned char>(*p_);
      if (c == '"') {
        *raw = absl::string_view(start, static_cast<size_t>(p_ - start));
        ++p_;
        return true;
      }
      if (c < 0x20) break;
      // c == '\\'
      *escaped = true;
      ++p_;
      if (p_ == end_) break;
      const char e = *p_;
      if (e == 'u') {
        for (int i = 0; i < 4; ++i) {
          ++p_;
          if (p_ == end_ || !std::isxdigit(static_cast<unsigned char>(*p_))) {
            Fail();
            return false;
          }
        }
      } else if (!IsEscapeLetter(e)) {
        break;
      }
      ++p_;
    }
    Fail();
    return false;
  }

  // The schema's keys are one plain byte: "t", "p", ... Consumes such a
  // string (after whitespace) and returns true; otherwise consumes nothing
  // (String then reads the key, with the same result for these bytes).
  bool OneByteKey(absl::string_view* key) {
    SkipWs();
    if (end_ - p_ >= 3 && p_[0] == '"' && p_[2] == '"' && Is(p_[1], kPlainByte)) {
      *key = absl::string_view(p_ + 1, 1);
      p_ += 3;
      return true;
    }
    return false;
  }

  // Number token per the JSON grammar, read once: the token and, for the
  // exact fast path of ParseDouble and for integer times, its decimal
  // significand and exponent. Also recognizes NaN/Infinity/-Infinity, which
  // are not JSON but are reported as non-finite values.
  bool NumberToken(Number* n) {
    SkipWs();
    n->non_finite = false;
    n->is_integer = true;
    n->negative = false;
    n->w = 0;
    n->digits = 0;
    n->q = 0;
    const char* start = p_;
    if (p_ < end_ && (*p_ == 'N' || *p_ == 'I' || (*p_ == '-' && end_ - p_ > 1 && p_[1] == 'I')) &&
        (MatchWord("NaN") || MatchWord("Infinity") || MatchWord("-Infinity"))) {
      n->non_finite = true;
      n->tok = absl::string_view(start, static_cast<size_t>(p_ - start));
      return true;
    }
    if (p_ < end_ && *p_ == '-') {
      n->negative = true;
      ++p_;
    }
    if (p_ == end_) return FailFalse();
    // Digits accumulate into w; past 19 of them w may wrap, and `digits` says
    // so (consumers check it before using w).
    uint64_t w = 0;
    int digits = 0;
    if (*p_ == '0') {
      ++p_;
      digits = 1;
    } else if (*p_ >= '1' && *p_ <= '9') {
      digits = Digits(&w);
    } else {
      return FailFalse();
    }
    int q = 0;
    if (p_ < end_ && *p_ == '.') {
      n->is_integer = false;
      ++p_;
      if (p_ == end_ || !IsDigit(*p_)) return FailFalse();
      const int fraction = Digits(&w);
      digits += fraction;
      q -= fraction;
    }
    if (p_ < end_ && (*p_ == 'e' || *p_ == 'E')) {
      n->is_integer = false;
      ++p_;
      bool neg_exp = false;
      if (p_ < end_ && (*p_ == '+' || *p_ == '-')) neg_exp = *p_++ == '-';
      if (p_ == end_ || !IsDigit(*p_)) return FailFalse();
      int e = 0;
      for (; p_ < end_ && IsDigit(*p_); ++p_) {
        if (e < 100000) e = e * 10 + static_cast<int>(DigitValue(*p_));  // saturates
      }
      q += neg_exp ? -e : e;
    }
    n->tok = absl::string_view(start, static_cast<size_t>(p_ - start));
    n->w = w;
    n->digits = digits;
    n->q = q;
    return true;
  }

  // Skips any JSON value (used for the values of unknown keys).
  bool SkipValue(int depth) {
    if (depth > kMaxSkipDepth) return FailFalse();
    const char c = Peek();
    if (c == '"') {
      absl::string_view raw;
      bool esc;
      return String(&raw, &esc);
    }
    if (c == '{') {
      ++p_;
      if (Consume('}')) return true;
      do {
        absl::string_view raw;
        bool esc;
        if (!String(&raw, &esc) || !Expect(':') || !SkipValue(depth + 1)) return false;
      } while (Consume(','));
      return Expect('}');
    }
    if (c == '[') {
      ++p_;
      if (Consume(']')) return true;
      do {
        if (!SkipValue(depth + 1)) return false;
      } while (Consume(','));
      return Expect(']');
    }
    if (MatchWord("true") || MatchWord("false") || MatchWord("null")) return true;
    Number n;
    return NumberToken(&n);
  }

 private:
  static bool IsDigit(char c) { return Is(c, kDigitByte); }
  static uint64_t DigitValue(char c) { return static_cast<uint64_t>(c - '0'); }

  // Consumes a run of digits, appending them to *w (which wraps past 19
  // digits in all; callers count), and returns how many there were. Eight at
  // a time where eight bytes remain: a time stamp has 19 digits, and one
  // multiply-add per digit is a chain of dependent multiplications.
  int Digits(uint64_t* w) {
    const char* start = p_;
    uint64_t v = *w;
    uint64_t eight;
    while (end_ - p_ >= 8 && EightDigits(p_, &eight)) {
      v = v * 100000000 + eight;
      p_ += 8;
    }
    for (; p_ < end_ && IsDigit(*p_); ++p_) v = v * 10 + DigitValue(*p_);
    *w = v;
    return static_cast<int>(p_ - start);
  }

  // True when the 8 bytes at p are all ASCII digits; then *value is their
  // decimal value. SWAR on one little-endian 64-bit load (the supported
  // targets are little-endian): the digit test checks that every byte's high
  // nibble is 3 and stays 3 after adding 6 (low nibble <= 9); the value
  // combines neighbouring digits into 2-, 4- and then 8-digit groups.
  static bool EightDigits(const char* p, uint64_t* value) {
    uint64_t v;
    std::memcpy(&v, p, 8);
    constexpr uint64_t kHigh = 0xF0F0F0F0F0F0F0F0ull;
    if (((v & kHigh) | (((v + 0x0606060606060606ull) & kHigh) >> 4)) != 0x3333333333333333ull) {
      return false;
    }
    v -= 0x3030303030303030ull;  // bytes 0..9, first digit in the lowest byte
    // Pairs: byte 2k+1 of the result = 10 * d[2k] + d[2k+1] (in 16-bit lanes).
    v = (v * 10 + (v >> 8)) & 0x00FF00FF00FF00FFull;
    // Quads: 100 * pair[0] + pair[1] in 32-bit lanes.
    v = (v * 100 + (v >> 16)) & 0x0000FFFF0000FFFFull;
    // The eight digits: 10000 * quad[0] + quad[1].
    v = (v * 10000 + (v >> 32)) & 0xFFFFFFFFull;
    *value = v;
    return true;
  }
  static bool IsEscapeLetter(char e) {
    switch (e) {
      case '"':
      case '\\':
      case '/':
      case 'b':
      case 'f':
      case 'n':
      case 'r':
      case 't':
        return true;
      default:
        return false;
    }
  }
  bool FailFalse() {
    Fail();
    return false;
  }
  bool MatchWord(const char* w) {
    const size_t n = std::strlen(w);
    if (static_cast<size_t>(end_ - p_) >= n && std::memcmp(p_, w, n) == 0) {
      p_ += n;
      return true;
    }
    return false;
  }

  const char* p_;
  const char* end_;
  bool syntax_error_ = false;
};

// Exact powers of ten: every 10^k with k <= 22 is a double without rounding.
constexpr double kExactPow10[] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                  1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                                  1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};

// The exact fast path of decimal-to-double conversion (Clinger, "How to read
// floating point numbers accurately", PLDI 1990): when the decimal significand
// w fits in 53 bits and the decimal exponent |q| <= 22, both w and 10^|q| are
// doubles exactly and one IEEE multiplication or division, correctly rounded,
// gives the correctly rounded value of w * 10^q: the same double from_chars
// returns. Ticks are mostly short decimals (prices, returns of a few digits).
// False when the path does not apply.
bool ParseDoubleFast(const Number& n, double* out) {
  if (n.digits > 19 || n.w > (uint64_t{1} << 53) || n.q < -22 || n.q > 22) return false;
  const double m = static_cast<double>(n.w);
  const double v = n.q < 0 ? m / kExactPow10[-n.q] : m * kExactPow10[n.q];
  *out = n.negative ? -v : v;
  return true;
}

// A finite double from a non-NaN/Infinity number token; false on overflow.
bool ParseDouble(const Number& n, double* out) {
  if (ParseDoubleFast(n, out)) return true;
  const absl::string_view tok = n.tok;
  const auto res = std::from_chars(tok.data(), tok.data() + tok.size(), *out);
  if (res.ec == std::errc::result_out_of_range) {
    // Overflow is non-finite; underflow to a subnormal/zero is a finite value.
    // from_chars leaves *out unmodified on range errors, so decide by exponent sign.
    const bool neg_exp =
        tok.find("e-") != absl::string_view::npos || tok.find("E-") != absl::string_view::npos;
    if (neg_exp) {
      *out = tok[0] == '-' ? -0.0 : 0.0;  // keeps the sign, as strtod does
      return true;
    }
    return false;
  }
  return res.ec == std::errc() && res.ptr == tok.data() + tok.size() && std::isfinite(*out);
}

// Parses one tick object at the scanner position. Returns true when the
// record is good; otherwise *reason is set (for semantic errors) or the
// scanner's syntax flag is set (caller checks).
// `frame_symbol` is the single-message symbol (empty for a batch record, in
// which case "s" is required).
bool ParseTickObject(Scanner* sc, absl::string_view frame_symbol, Tick* tick,
                     RejectReason* reason) {
  if (!sc->Expect('{')) return false;
  bool have_t = false, have_value = false, have_v = false, have_s = false;
  bool bad = false;
  RejectReason first = RejectReason::kMalformedJson;
  auto mark = [&](RejectReason r) {
    if (!bad) first = r;
    bad = true;
  };
  tick->size = 0;
  tick->rv = std::numeric_limits<double>::quiet_NaN();
  if (!sc->Consume('}')) {
    do {
      absl::string_view key;
      bool esc = false;
      if (!sc->OneByteKey(&key) && !sc->String(&key, &esc)) return false;
      if (!sc->Expect(':')) return false;
      const bool known =
          !esc && key.size() == 1 &&
          (key[0] == 't' || key[0] == 'p' || key[0] == 'r' || key[0] == 'v' || key[0] == 's');
      if (!known) {
        if (!sc->SkipValue(0)) return false;
        mark(RejectReason::kUnknownField);
        continue;
      }
      const char k = key[0];
      if (k == 's') {
        absl::string_view sym;
        bool sym_esc;
        if (sc->Peek() != '"') {
          if (!sc->SkipValue(0)) return false;
          mark(RejectReason::kBadSymbol);
          continue;
        }
        if (!sc->String(&sym, &sym_esc)) return false;
        if (have_s) mark(RejectReason::kMalformedJson);
        have_s = true;
        if (sym_esc || !IsValidSymbol(sym) || (!frame_symbol.empty() && sym != frame_symbol)) {
          mark(RejectReason::kBadSymbol);
        } else {
          tick->symbol.assign(sym);
        }
        continue;
      }
      const char c = sc->Peek();
      if (c != '-' && c != 'N' && c != 'I' && (c < '0' || c > '9')) {
        // Not a number: skip it (strings, null, ...) and reject the record.
        if (!sc->SkipValue(0)) return false;
        mark(k == 't' ? RejectReason::kBadTime : RejectReason::kNonFinite);
        if (k == 't')
          have_t = true;
        else if (k == 'v')
          have_v = true;
        else
          have_value = true;
        continue;
      }
      Number num;
      if (!sc->NumberToken(&num)) return false;
      const bool non_finite = num.non_finite;
      if (k == 't') {
        if (have_t) mark(RejectReason::kMalformedJson);
        have_t = true;
        // An integer in [0, 2^63): at most 19 digits (no wrap in w); "-0" is 0.
        if (non_finite || !num.is_integer || num.digits > 19 ||
            num.w > static_cast<uint64_t>(std::numeric_limits<int64_t>::max()) ||
            (num.negative && num.w != 0)) {
          mark(RejectReason::kBadTime);
        } else {
          tick->t_ns = static_cast<int64_t>(num.w);
        }
      } else if (k == 'v') {
        if (have_v) mark(RejectReason::kMalformedJson);
        have_v = true;
        double v = 0;
        if (non_finite || !ParseDouble(num, &v)) {
          mark(RejectReason::kNonFinite);
        } else if (v < 0) {
          mark(RejectReason::kBadSize);
        } else {
          tick->size = v;
        }
      } else {  // 'p' or 'r'
        if (have_value) mark(RejectReason::kMalformedJson);
        have_value = true;
        double v = 0;
        if (non_finite || !ParseDouble(num, &v)) {
          mark(RejectReason::kNonFinite);
        } else if (k == 'p' && v <= 0) {
          mark(RejectReason::kNonPositivePrice);
        } else {
          tick->kind = k == 'p' ? Tick::kPrice : Tick::kReturn;
          tick->value = v;
        }
      }
    } while (sc->Consume(','));
    if (!sc->Expect('}')) return false;
  }
  if (bad) {
    *reason = first;
    return false;
  }
  if (!have_t || !have_value || (frame_symbol.empty() && !have_s)) {
    *reason = RejectReason::kMissingField;
    return false;
  }
  if (!have_s) tick->symbol.assign(frame_symbol);
  return true;
}

DecodeResult DecodeJson(absl::string_view symbol_frame, absl::string_view body,
                        absl::Span<Tick> out, RejectCounters* counters) {
  DecodeResult result;
  Scanner sc(body.data(), body.data() + body.size());
  auto reject_message = [&](RejectReason r) {
    counters->Add(r);
    return DecodeResult{0, 1};
  };
  if (symbol_frame == "*") {
    if (!sc.Expect('[')) return reject_message(RejectReason::kMalformedJson);
    RejectCounters local;  // committed only when the whole message is well-formed
    int n_records = 0;
    bool too_large = false;
    if (!sc.Consume(']')) {
      do {
        ++n_records;
        Tick scratch;
        const bool fits = result.n_ticks < static_cast<int>(out.size());
        if (!fits) too_large = true;
        Tick* dst = fits ? &out[static_cast<size_t>(result.n_ticks)] : &scratch;
        RejectReason reason = RejectReason::kMalformedJson;
        const bool ok = ParseTickObject(&sc, absl::string_view(), dst, &reason);
        if (sc.syntax_error()) return reject_message(RejectReason::kMalformedJson);
        if (ok) {
          if (fits) ++result.n_ticks;
        } else {
          local.Add(reason);
          ++result.n_rejected;
        }
      } while (sc.Consume(','));
      if (!sc.Expect(']')) return reject_message(RejectReason::kMalformedJson);
    }
    if (!sc.AtEnd()) return reject_message(RejectReason::kMalformedJson);
    if (too_large || n_records > kMaxBatchTicks) {
      return reject_message(RejectReason::kBatchTooLarge);
    }
    for (int i = 0; i < kNumRejectReasons; ++i) counters->by_reason[i] += local.by_reason[i];
    return result;
  }
  if (!IsValidSymbol(symbol_frame)) return reject_message(RejectReason::kBadSymbol);
  if (out.empty()) return reject_message(RejectReason::kBatchTooLarge);
  RejectReason reason = RejectReason::kMalformedJson;
  const bool ok = ParseTickObject(&sc, symbol_frame, &out[0], &reason);
  if (sc.syntax_error() || !sc.AtEnd()) return reject_message(RejectReason::kMalformedJson);
  if (!ok) return reject_message(reason);
  result.n_ticks = 1;
  return result;
}

// ---- Binary -------------------------------------------------------------------

template <typename T>
T LoadLe(const unsigned char* p) {
  // The supported targets are little-endian (x86-64, aarch64); memcpy keeps
  // the load alignment-safe.
  static_assert(sizeof(T) <= 8, "scalar");
  T v;
  std::memcpy(&v, p, sizeof(T));
  return v;
}

template <typename T>
void AppendLe(std::string* out, T v) {
  char buf[sizeof(T)];
  std::memcpy(buf, &v, sizeof(T));
  out->append(buf, sizeof(T));
}

DecodeResult DecodeBinary(absl::string_view symbol_frame, absl::string_view body,
                          absl::Span<Tick> out, RejectCounters* counters) {
  auto reject_message = [&](RejectReason r) {
    counters->Add(r);
    return DecodeResult{0, 1};
  };
  const bool batch = symbol_frame == "*";
  if (!batch && !IsValidSymbol(symbol_frame)) return reject_message(RejectReason::kBadSymbol);
  const auto* p = reinterpret_cast<const unsigned char*>(body.data());
  const auto* end = p + body.size();
  if (body.size() < 4 || p[0] != kTickMagic || p[1] != kTickWireVersion) {
    return reject_message(RejectReason::kMalformedBinary);
  }
  const int count = LoadLe<uint16_t>(p + 2);
  p += 4;
  if (!batch && count != 1) return reject_message(RejectReason::kMalformedBinary);
  // First pass: structure only, so a truncated message is rejected as a whole.
  {
    const unsigned char* q = p;
    for (int i = 0; i < count; ++i) {
      if (q == end) return reject_message(RejectReason::kMalformedBinary);
      const int len = *q;
      if (len == 0 || len > kMaxSymbolLength ||
          static_cast<size_t>(end - q) < static_cast<size_t>(1 + len + 25)) {
        return reject_message(RejectReason::kMalformedBinary);
      }
      q += 1 + len + 25;
    }
    if (q != end) return reject_message(RejectReason::kMalformedBinary);
  }
  if (count > static_cast<int>(out.size()) || count > kMaxBatchTicks) {
    return reject_message(RejectReason::kBatchTooLarge);
  }
  DecodeResult result;
  for (int i = 0; i < count; ++i) {
    const int len = *p;
    const absl::string_view sym(reinterpret_cast<const char*>(p + 1), static_cast<size_t>(len));
    p += 1 + len;
    const int64_t t = LoadLe<int64_t>(p);
    const uint8_t kind = p[8];
    const double value = LoadLe<double>(p + 9);
    const double size = LoadLe<double>(p + 17);
    p += 25;
    RejectReason reason;
    if (!IsValidSymbol(sym) || (!batch && sym != symbol_frame)) {
      reason = RejectReason::kBadSymbol;
    } else if (kind > 1) {
      reason = RejectReason::kMalformedBinary;
    } else if (t < 0) {
      reason = RejectReason::kBadTime;
    } else if (!std::isfinite(value) || !std::isfinite(size)) {
      reason = RejectReason::kNonFinite;
    } else if (kind == Tick::kPrice && value <= 0) {
      reason = RejectReason::kNonPositivePrice;
    } else if (size < 0) {
      reason = RejectReason::kBadSize;
    } else {
      Tick& tick = out[static_cast<size_t>(result.n_ticks++)];
      tick.symbol.assign(sym);
      tick.t_ns = t;
      tick.kind = static_cast<Tick::Kind>(kind);
      tick.value = value;
      tick.size = size;
      tick.rv = std::numeric_limits<double>::quiet_NaN();
      continue;
    }
    counters->Add(reason);
    ++result.n_rejected;
  }
  return result;
}

void AppendInt(std::string* out, int64_t v) {
  char buf[24];
  const auto res = std::to_chars(buf, buf + sizeof(buf), v);
  out->append(buf, static_cast<size_t>(res.ptr - buf));
}

void AppendTickJsonFields(const Tick& tick, std::string* out) {
  out->append("\"t\":");
  AppendInt(out, tick.t_ns);
  out->append(tick.kind == Tick::kReturn ? ",\"r\":" : ",\"p\":");
  internal::AppendShortestDouble(out, tick.value);
  if (tick.size != 0) {
    out->append(",\"v\":");
    internal::AppendShortestDouble(out, tick.size);
  }
}

void AppendTickBinaryRecord(const Tick& tick, std::string* out) {
  out->push_back(static_cast<char>(tick.symbol.size));
  out->append(tick.symbol.data, tick.symbol.size);
  AppendLe<int64_t>(out, tick.t_ns);
  out->push_back(static_cast<char>(tick.kind));
  AppendLe<double>(out, tick.value);
  AppendLe<double>(out, tick.size);
}

}  // namespace

absl::string_view WireEncodingName(WireEncoding e) {
  return e == WireEncoding::kBinary ? "binary" : "json";
}

absl::string_view RejectReasonName(RejectReason r) {
  static constexpr absl::string_view kNames[kNumRejectReasons] = {
      "malformed_json",  "malformed_binary",   "bad_symbol",    "oversize",
      "non_finite",      "non_positive_price", "missing_field", "unknown_field",
      "batch_too_large", "bad_time",           "bad_size",      "too_old",
      "outside_session", "duplicate",          "kind_mismatch", "symbol_limit"};
  const int i = static_cast<int>(r);
  return i >= 0 && i < kNumRejectReasons ? kNames[i] : "unknown";
}

uint64_t RejectCounters::Total() const {
  uint64_t total = 0;
  for (uint64_t n : by_reason) total += n;
  return total;
}

bool IsValidSymbol(absl::string_view s) {
  if (s.empty() || s.size() > static_cast<size_t>(kMaxSymbolLength)) return false;
  for (char c : s) {
    if (!Is(c, kSymbolByte)) return false;
  }
  return true;
}

DecodeResult DecodeTicks(absl::string_view symbol_frame, absl::string_view body,
                         WireEncoding encoding, size_t max_message_bytes, absl::Span<Tick> out,
                         RejectCounters* counters) {
  if (body.size() > max_message_bytes) {
    counters->Add(RejectReason::kOversize);
    return DecodeResult{0, 1};
  }
  return encoding == WireEncoding::kBinary ? DecodeBinary(symbol_frame, body, out, counters)
                                           : DecodeJson(symbol_frame, body, out, counters);
}

void EncodeTickJson(const Tick& tick, std::string* out) {
  out->clear();
  out->push_back('{');
  AppendTickJsonFields(tick, out);
  out->push_back('}');
}

void EncodeBatchJson(absl::Span<const Tick> ticks, std::string* out) {
  out->clear();
  out->push_back('[');
  for (size_t i = 0; i < ticks.size(); ++i) {
    if (i > 0) out->push_back(',');
    out->append("{\"s\":\"");
    out->append(ticks[i].symbol.data, ticks[i].symbol.size);
    out->append("\",");
    AppendTickJsonFields(ticks[i], out);
    out->push_back('}');
  }
  out->push_back(']');
}

void EncodeTickBinary(const Tick& tick, std::string* out) {
  EncodeBatchBinary(absl::Span<const Tick>(&tick, 1), out);
}

void EncodeBatchBinary(absl::Span<const Tick> ticks, std::string* out) {
  out->clear();
  out->push_back(static_cast<char>(kTickMagic));
  out->push_back(static_cast<char>(kTickWireVersion));
  AppendLe<uint16_t>(out, static_cast<uint16_t>(ticks.size()));
  for (const Tick& t : ticks) AppendTickBinaryRecord(t, out);
}

}  // namespace aftershock
