#include "aftershock/subject_token.h"

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

constexpr char kEscape = '~';
constexpr char kHex[] = "0123456789ABCDEF";

// Bytes copied unchanged into a token.
bool IsPlain(unsigned char c) {
  return (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '_' ||
         c == ':' || c == '-';
}

// Value of an upper-case hex digit, or -1 (lower case is not canonical).
int HexValue(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  return -1;
}

// Decodes into out when out != nullptr; returns the symbol length, or
// -(offset + 1) of the first bad byte, or kTooLong when capacity is exceeded.
constexpr long kTooLong = -(1L << 40);
long Decode(absl::string_view token, char* out, size_t capacity) {
  if (token.empty()) return -1;
  size_t n = 0;
  for (size_t i = 0; i < token.size(); ++i) {
    const unsigned char c = static_cast<unsigned char>(token[i]);
    unsigned char b;
    if (IsPlain(c)) {
      b = c;
    } else if (c == kEscape && i + 2 < token.size() && HexValue(token[i + 1]) >= 0 &&
               HexValue(token[i + 2]) >= 0) {
      b = static_cast<unsigned char>(HexValue(token[i + 1]) * 16 + HexValue(token[i + 2]));
      if (IsPlain(b)) return -static_cast<long>(i) - 1;  // escape of a plain byte
      i += 2;
    } else {
      return -static_cast<long>(i) - 1;
    }
    if (out != nullptr) {
      if (n >= capacity) return kTooLong;
      out[n] = static_cast<char>(b);
    }
    ++n;
  }
  return static_cast<long>(n);
}

}  // namespace

std::string EncodeSubjectToken(absl::string_view symbol) {
  std::string out;
  out.reserve(symbol.size() * 3);
  for (char ch : symbol) {
    const unsigned char c = static_cast<unsigned char>(ch);
    if (IsPlain(c)) {
      out.push_back(ch);
    } else {
      out.push_back(kEscape);
      out.push_back(kHex[c >> 4]);
      out.push_back(kHex[c & 15]);
    }
  }
  return out;
}

absl::StatusOr<std::string> DecodeSubjectToken(absl::string_view token) {
  if (token.empty()) return absl::InvalidArgumentError("empty subject token");
  std::string out(token.size(), '\0');
  const long n = Decode(token, out.data(), out.size());
  if (n < 0) {
    return absl::InvalidArgumentError(absl::StrCat("subject token '", token,
                                                   "' is not canonical at offset ", -n - 1));
  }
  out.resize(static_cast<size_t>(n));
  return out;
}

int DecodeSubjectTokenTo(absl::string_view token, char* out, size_t capacity) {
  const long n = Decode(token, out, capacity);
  return n < 0 ? -1 : static_cast<int>(n);
}

}  // namespace aftershock
