#include "aftershock/update_codec.h"

#include <cassert>
#include <charconv>
#include <cmath>
#include <cstring>
#include <exception>
#include <nlohmann/json.hpp>

#if defined(__SSE2__)
#include <emmintrin.h>
#endif

#include "absl/base/attributes.h"
#include "absl/base/optimization.h"
#include "absl/strings/str_cat.h"
#include "aftershock/renames.h"
#include "aftershock/wire.h"
#include "io/shortest_double.h"

namespace aftershock {

absl::string_view FlagName(int bit) {
  static constexpr absl::string_view kNames[kNumUpdateFlags] = {
      "warmup", "fallback", "stale", "seasonal", "gap", "first_bar", "pooled"};
  return bit >= 0 && bit < kNumUpdateFlags ? kNames[bit] : "unknown";
}

namespace {

// Bit 63 set when some value of v is not finite: a double's exponent field
// is all ones exactly for inf and NaN, and adding one unit to the field
// carries into bit 63 only then. Integer operations on independent values
// over the whole array, two per SSE2 instruction: no branch and no chain of
// floating-point compares.
#if defined(__SSE2__)
template <size_t N>
inline __m128i NonFiniteBits(__m128i acc, const double (&v)[N]) {
  static_assert(N % 2 == 0, "pairs of doubles");
  const __m128i exponent = _mm_set1_epi64x(0x7FF0000000000000LL);
  const __m128i one = _mm_set1_epi64x(0x0010000000000000LL);
#pragma GCC unroll 8
  for (size_t i = 0; i < N; i += 2) {
    const __m128i b = _mm_loadu_si128(reinterpret_cast<const __m128i*>(v + i));
    acc = _mm_or_si128(acc, _mm_add_epi64(_mm_and_si128(b, exponent), one));
  }
  return acc;
}
#else
template <size_t N>
inline uint64_t NonFiniteBits(uint64_t acc, const double (&v)[N]) {
  for (size_t i = 0; i < N; ++i) {
    uint64_t b;
    std::memcpy(&b, &v[i], sizeof(b));
    acc |= (b & 0x7FF0000000000000ULL) + 0x0010000000000000ULL;
  }
  return acc;
}
#endif

// True when every value of u is finite, the arrays read whole: entries past
// the counts are zero in an update the engine fills (BarUpdate's
// initializers); where they are not finite, the caller's search decides.
inline bool AllFinite(const BarUpdate& u) {
  const double scalars[] = {u.r, u.mu, u.eps, u.var, u.z, u.var_next, u.vol_ann, u.scale};
#if defined(__SSE2__)
  __m128i acc = NonFiniteBits(_mm_setzero_si128(), scalars);
  acc = NonFiniteBits(acc, u.var_h);
  acc = NonFiniteBits(acc, u.levels);
  acc = NonFiniteBits(acc, u.var_risk);
  acc = NonFiniteBits(acc, u.es);
  return _mm_movemask_pd(_mm_castsi128_pd(acc)) == 0;  // the two bits 63
#else
  const uint64_t acc = NonFiniteBits(
      NonFiniteBits(NonFiniteBits(NonFiniteBits(NonFiniteBits(0, scalars), u.var_h), u.levels),
                    u.var_risk),
      u.es);
  return (acc >> 63) == 0;
#endif
}

// The field-by-field checks, naming what failed.
ABSL_ATTRIBUTE_NOINLINE absl::Status CheckUpdateFields(const BarUpdate& u) {
  if (u.symbol.size == 0 || u.symbol.size > kMaxSymbolLength) {
    return absl::InvalidArgumentError("update: symbol length out of range");
  }
  if (u.n_horizons < 0 || u.n_horizons > kMaxHorizons || u.n_levels < 0 ||
      u.n_levels > kMaxRiskLevels) {
    return absl::InvalidArgumentError(
        absl::StrCat("update for ", u.symbol.view(), ": horizon or level count out of range"));
  }
  const struct {
    const char* name;
    double v;
  } fields[] = {{"r", u.r},
                {"mu", u.mu},
                {"eps", u.eps},
                {"var", u.var},
                {"z", u.z},
                {"var_next", u.var_next},
                {"vol_ann", u.vol_ann},
                {"scale", u.scale}};
  for (const auto& f : fields) {
    if (!std::isfinite(f.v)) {
      return absl::InvalidArgumentError(
          absl::StrCat("update for ", u.symbol.view(), ": field ", f.name, " is not finite"));
    }
  }
  for (int i = 0; i < u.n_horizons; ++i) {
    if (!std::isfinite(u.var_h[i])) {
      return absl::InvalidArgumentError(
          absl::StrCat("update for ", u.symbol.view(), ": field var_h[", i, "] is not finite"));
    }
  }
  for (int i = 0; i < u.n_levels; ++i) {
    if (!std::isfinite(u.levels[i]) || !std::isfinite(u.var_risk[i]) || !std::isfinite(u.es[i])) {
      return absl::InvalidArgumentError(absl::StrCat(
          "update for ", u.symbol.view(), ": level, value_at_risk or es [", i, "] is not finite"));
    }
  }
  return absl::OkStatus();
}

// Every update the engine publishes passes: one test of the sizes and of all
// values (178 -> 77 instructions an update under callgrind, when every value
// was tested in turn by the code that names it); CheckUpdateFields only to
// name what failed.
inline absl::Status CheckUpdate(const BarUpdate& u) {
  if (u.symbol.size - 1u < static_cast<unsigned>(kMaxSymbolLength) &&
      static_cast<unsigned>(u.n_horizons) <= static_cast<unsigned>(kMaxHorizons) &&
      static_cast<unsigned>(u.n_levels) <= static_cast<unsigned>(kMaxRiskLevels) &&
      ABSL_PREDICT_TRUE(AllFinite(u))) {
    return absl::OkStatus();
  }
  return CheckUpdateFields(u);
}

// ---- JSON writer -------------------------------------------------------------
// The JSON encoder writes into a stack buffer through a cursor and copies the
// result into *out once: no per-field capacity checks, no allocation once *out
// has capacity. kMaxUpdateJsonBytes bounds every update the count checks of
// CheckUpdate admit (worst case 1,178 bytes: 32 doubles of at most 24
// characters, 8 horizon keys, a 32-byte symbol, every flag and the key text).
constexpr size_t kMaxUpdateJsonBytes = 2048;
// The shortest form of a double is at most 24 characters
// ("-2.2250738585072014e-308").
constexpr int kMaxDoubleChars = internal::kShortestDoubleMaxChars;

template <size_t N>
inline char* Put(char* p, const char (&lit)[N]) {
  std::memcpy(p, lit, N - 1);
  return p + N - 1;
}

// std::to_chars's bytes, faster (io/shortest_double.h).
inline char* PutDouble(char* p, double v) { return internal::WriteShortestDouble(p, v); }

template <typename T>
inline char* PutInt(char* p, T v) {
  return std::to_chars(p, p + 24, v).ptr;
}

inline uint64_t Bits(double v) {
  uint64_t b;
  std::memcpy(&b, &v, sizeof(b));
  return b;
}

// The last text written for a few fields that rarely change between updates
// (the configured confidence levels, which also key value_at_risk and es; the
// mean of a constant-mean model; the capped scale). Formatting a double costs
// ~16 ns (json_wire_bench BM_FormatDouble), a hit a compare and a 24-byte
// copy. Keyed by the bit pattern, so a hit writes exactly what std::to_chars
// would. One per thread: no sharing.
class TextMemo {
 public:
  enum Slot { kMu = 0, kScale = 1, kLevel0 = 2 };
  static constexpr int kSlots = kLevel0 + kMaxRiskLevels;

  char* Put(int slot, double v, char* p) {
    Entry& e = entries_[slot];
    const uint64_t b = Bits(v);
    if (e.len == 0 || e.bits != b) {
      e.bits = b;
      e.len = static_cast<uint8_t>(PutDouble(e.text, v) - e.text);
    }
    std::memcpy(p, e.text, kMaxDoubleChars);  // fixed size: one wide copy
    return p + e.len;
  }

 private:
  struct Entry {
    uint64_t bits = 0;
    uint8_t len = 0;  // 0 = empty
    char text[internal::kShortestDoubleBufferBytes] = {};  // PutDouble's scratch too
  };
  Entry entries_[kSlots];
};

thread_local TextMemo tls_memo;

// Stores v at p (REQUIRES: sizeof(T) bytes there); returns the next position.
template <typename T>
char* StoreLe(char* p, T v) {
  std::memcpy(p, &v, sizeof(T));
  return p + sizeof(T);
}

// Bounded little-endian reader for the binary decoder.
class Reader {
 public:
  explicit Reader(absl::string_view d) : p_(d.data()), end_(d.data() + d.size()) {}
  template <typename T>
  bool Read(T* v) {
    if (static_cast<size_t>(end_ - p_) < sizeof(T)) return false;
    std::memcpy(v, p_, sizeof(T));
    p_ += sizeof(T);
    return true;
  }
  bool ReadBytes(size_t n, const char** s) {
    if (static_cast<size_t>(end_ - p_) < n) return false;
    *s = p_;
    p_ += n;
    return true;
  }
  bool AtEnd() const { return p_ == end_; }

 private:
  const char* p_;
  const char* end_;
};

}  // namespace

absl::Status EncodeUpdateJson(const BarUpdate& u, std::string* out) {
  out->clear();
  if (absl::Status s = CheckUpdate(u); !s.ok()) return s;
  // The slack: PutDouble and TextMemo::Put write past the text they leave.
  char buf[kMaxUpdateJsonBytes + internal::kShortestDoubleBufferBytes];
  TextMemo& memo = tls_memo;
  char* p = Put(buf, "{\"s\":\"");
  std::memcpy(p, u.symbol.data, u.symbol.size);
  p += u.symbol.size;
  p = PutInt(Put(p, "\",\"t\":"), u.t_ns);
  p = PutDouble(Put(p, ",\"r\":"), u.r);
  p = memo.Put(TextMemo::kMu, u.mu, Put(p, ",\"mu\":"));
  p = PutDouble(Put(p, ",\"eps\":"), u.eps);
  p = PutDouble(Put(p, ",\"var\":"), u.var);
  p = PutDouble(Put(p, ",\"z\":"), u.z);
  p = Put(p, ",\"var_next\":");
  const char* var_next_text = p;
  p = PutDouble(p, u.var_next);
  const size_t var_next_len = static_cast<size_t>(p - var_next_text);
  p = PutDouble(Put(p, ",\"vol_ann\":"), u.vol_ann);
  p = Put(p, ",\"var_h\":{");
  for (int i = 0; i < u.n_horizons; ++i) {
    if (i > 0) *p++ = ',';
    *p++ = '"';
    p = Put(PutInt(p, u.horizons[i]), "\":");
    if (Bits(u.var_h[i]) == Bits(u.var_next)) {  // the one-bar horizon: same value, same text
      std::memcpy(p, var_next_text, var_next_len);
      p += var_next_len;
    } else {
      p = PutDouble(p, u.var_h[i]);
    }
  }
  for (int which = 0; which < 2; ++which) {
    p = which == 0 ? Put(p, "},\"value_at_risk\":{") : Put(p, "},\"es\":{");
    const double* values = which == 0 ? u.var_risk : u.es;
    for (int i = 0; i < u.n_levels; ++i) {
      if (i > 0) *p++ = ',';
      *p++ = '"';
      p = Put(memo.Put(TextMemo::kLevel0 + i, u.levels[i], p), "\":");
      p = PutDouble(p, values[i]);
    }
  }
  p = memo.Put(TextMemo::kScale, u.scale, Put(p, "},\"scale\":"));
  p = PutInt(Put(p, ",\"ver\":"), u.ver);
  p = Put(p, ",\"flags\":[");
  bool first = true;
  for (int bit = 0; bit < kNumUpdateFlags; ++bit) {
    if ((u.flags & (1u << bit)) == 0) continue;
    if (!first) *p++ = ',';
    first = false;
    *p++ = '"';
    const absl::string_view name = FlagName(bit);
    std::memcpy(p, name.data(), name.size());
    p += name.size();
    *p++ = '"';
  }
  p = Put(p, "]}");
  out->assign(buf, static_cast<size_t>(p - buf));
  return absl::OkStatus();
}

absl::Status DecodeUpdateJson(absl::string_view text, BarUpdate* u) {
  // ordered_json keeps the wire order of horizons and levels.
  using json = nlohmann::ordered_json;
  try {
    const json j = json::parse(text.begin(), text.end());
    if (!j.is_object()) return absl::InvalidArgumentError("update JSON: not an object");
    static const char* const kKeys[] = {
        "s",     "t",        "r",       "mu",    "eps",           "var",
        "z",     "var_next", "vol_ann", "var_h", "value_at_risk", "es",
        "scale", "ver",      "flags"};
    for (auto it = j.begin(); it != j.end(); ++it) {
      bool known = false;
      for (const char* k : kKeys) known = known || it.key() == k;
      if (!known) {
        const std::string hint = RenameHint(RenameKind::kJsonKey, "update", it.key());
        return absl::InvalidArgumentError(absl::StrCat("update JSON: unknown key '", it.key(), "'",
                                                       hint.empty() ? "" : ": ", hint));
      }
    }
    for (const char* k : kKeys) {
      if (!j.contains(k))
        return absl::InvalidArgumentError(absl::StrCat("update JSON: missing key '", k, "'"));
    }
    BarUpdate v;
    const std::string sym = j.at("s").get<std::string>();
    if (!IsValidSymbol(sym)) return absl::InvalidArgumentError("update JSON: bad symbol");
    v.symbol.assign(sym);
    v.t_ns = j.at("t").get<int64_t>();
    v.r = j.at("r").get<double>();
    v.mu = j.at("mu").get<double>();
    v.eps = j.at("eps").get<double>();
    v.var = j.at("var").get<double>();
    v.z = j.at("z").get<double>();
    v.var_next = j.at("var_next").get<double>();
    v.vol_ann = j.at("vol_ann").get<double>();
    v.scale = j.at("scale").get<double>();
    v.ver = j.at("ver").get<uint32_t>();
    const json& vh = j.at("var_h");
    if (!vh.is_object() || vh.size() > static_cast<size_t>(kMaxHorizons)) {
      return absl::InvalidArgumentError("update JSON: var_h must be an object of <= 8 entries");
    }
    for (auto it = vh.begin(); it != vh.end(); ++it) {
      int h = 0;
      const std::string& key = it.key();
      const auto res = std::from_chars(key.data(), key.data() + key.size(), h);
      if (res.ec != std::errc() || res.ptr != key.data() + key.size()) {
        return absl::InvalidArgumentError(absl::StrCat("update JSON: bad horizon key '", key, "'"));
      }
      const int pos = v.n_horizons++;
      v.horizons[pos] = h;
      v.var_h[pos] = it.value().get<double>();
    }
    const json& vr = j.at("value_at_risk");
    const json& es = j.at("es");
    if (!vr.is_object() || !es.is_object() || vr.size() != es.size() ||
        vr.size() > static_cast<size_t>(kMaxRiskLevels)) {
      return absl::InvalidArgumentError(
          "update JSON: value_at_risk and es must be matching objects");
    }
    for (auto it = vr.begin(); it != vr.end(); ++it) {
      const std::string& key = it.key();
      double level = 0;
      const auto res = std::from_chars(key.data(), key.data() + key.size(), level);
      if (res.ec != std::errc() || res.ptr != key.data() + key.size() || !es.contains(key)) {
        return absl::InvalidArgumentError(absl::StrCat("update JSON: bad level key '", key, "'"));
      }
      const int pos = v.n_levels++;
      v.levels[pos] = level;
      v.var_risk[pos] = it.value().get<double>();
      v.es[pos] = es.at(key).get<double>();
    }
    const json& flags = j.at("flags");
    if (!flags.is_array()) return absl::InvalidArgumentError("update JSON: flags must be an array");
    for (const json& f : flags) {
      const std::string name = f.get<std::string>();
      int bit = 0;
      while (bit < kNumUpdateFlags && FlagName(bit) != name) ++bit;
      if (bit == kNumUpdateFlags) {
        return absl::InvalidArgumentError(absl::StrCat("update JSON: unknown flag '", name, "'"));
      }
      v.flags |= 1u << bit;
    }
    *u = v;
    return absl::OkStatus();
  } catch (const std::exception& e) {
    return absl::InvalidArgumentError(absl::StrCat("update JSON: ", e.what()));
  }
}

absl::Status EncodeUpdateBinary(const BarUpdate& u, std::string* out) {
  out->clear();
  if (absl::Status s = CheckUpdate(u); !s.ok()) return s;
  // One resize, then fixed-size stores through a cursor. Appending field by
  // field cost a library call per field: 1,643 instructions an update under
  // callgrind, the replay core's largest item, against 335 now (77 of them
  // the checks above).
  const size_t size = 3 + u.symbol.size + sizeof(int64_t) + 7 * sizeof(double) + 1 +
                      static_cast<size_t>(u.n_horizons) * (sizeof(uint32_t) + sizeof(double)) + 1 +
                      static_cast<size_t>(u.n_levels) * 3 * sizeof(double) + sizeof(double) +
                      2 * sizeof(uint32_t);
  out->resize(size);
  char* p = out->data();
  *p++ = static_cast<char>(kUpdateMagic);
  *p++ = static_cast<char>(kUpdateWireVersion);
  *p++ = static_cast<char>(u.symbol.size);
  std::memcpy(p, u.symbol.data, u.symbol.size);
  p += u.symbol.size;
  p = StoreLe<int64_t>(p, u.t_ns);
  for (double d : {u.r, u.mu, u.eps, u.var, u.z, u.var_next, u.vol_ann}) p = StoreLe<double>(p, d);
  *p++ = static_cast<char>(u.n_horizons);
  for (int i = 0; i < u.n_horizons; ++i) {
    p = StoreLe<uint32_t>(p, static_cast<uint32_t>(u.horizons[i]));
    p = StoreLe<double>(p, u.var_h[i]);
  }
  *p++ = static_cast<char>(u.n_levels);
  for (int i = 0; i < u.n_levels; ++i) {
    p = StoreLe<double>(p, u.levels[i]);
    p = StoreLe<double>(p, u.var_risk[i]);
    p = StoreLe<double>(p, u.es[i]);
  }
  p = StoreLe<double>(p, u.scale);
  p = StoreLe<uint32_t>(p, u.ver);
  p = StoreLe<uint32_t>(p, u.flags);
  assert(p == out->data() + size);
  return absl::OkStatus();
}

absl::Status DecodeUpdateBinary(absl::string_view data, BarUpdate* u) {
  const auto bad = [](absl::string_view why) {
    return absl::InvalidArgumentError(absl::StrCat("binary update: ", why));
  };
  Reader r(data);
  uint8_t magic = 0, version = 0, len = 0;
  if (!r.Read(&magic) || !r.Read(&version)) return bad("truncated header");
  if (magic != kUpdateMagic) return bad("bad magic byte");
  if (version != kUpdateWireVersion) {
    return bad(absl::StrCat("unsupported version ", version));
  }
  BarUpdate v;
  const char* sym = nullptr;
  if (!r.Read(&len) || !r.ReadBytes(len, &sym)) return bad("truncated symbol");
  if (!IsValidSymbol(absl::string_view(sym, len))) return bad("bad symbol");
  v.symbol.assign(absl::string_view(sym, len));
  if (!r.Read(&v.t_ns)) return bad("truncated");
  for (double* d : {&v.r, &v.mu, &v.eps, &v.var, &v.z, &v.var_next, &v.vol_ann}) {
    if (!r.Read(d)) return bad("truncated");
  }
  uint8_t n = 0;
  if (!r.Read(&n)) return bad("truncated");
  if (n > kMaxHorizons) return bad("too many horizons");
  v.n_horizons = n;
  for (int i = 0; i < n; ++i) {
    uint32_t h = 0;
    if (!r.Read(&h) || !r.Read(&v.var_h[i])) return bad("truncated");
    if (h > 0x7fffffffu) return bad("horizon out of range");
    v.horizons[i] = static_cast<int>(h);
  }
  if (!r.Read(&n)) return bad("truncated");
  if (n > kMaxRiskLevels) return bad("too many risk levels");
  v.n_levels = n;
  for (int i = 0; i < n; ++i) {
    if (!r.Read(&v.levels[i]) || !r.Read(&v.var_risk[i]) || !r.Read(&v.es[i])) {
      return bad("truncated");
    }
  }
  if (!r.Read(&v.scale) || !r.Read(&v.ver) || !r.Read(&v.flags)) return bad("truncated");
  if (!r.AtEnd()) return bad("trailing bytes");
  if (absl::Status s = CheckUpdate(v); !s.ok()) return s;
  *u = v;
  return absl::OkStatus();
}

}  // namespace aftershock
