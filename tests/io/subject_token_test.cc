#include "aftershock/subject_token.h"

#include <catch2/catch.hpp>
#include <random>
#include <string>

#include "aftershock/wire.h"

namespace aftershock {
namespace {

// True when `t` can be one NATS subject token: no '.', '*', '>' or white space
// (the server's rule for literal subjects), and not empty.
bool IsSubjectToken(const std::string& t) {
  if (t.empty()) return false;
  for (unsigned char c : t) {
    if (c == '.' || c == '*' || c == '>' || c <= ' ' || c >= 0x7f) return false;
  }
  return true;
}

TEST_CASE("subject tokens keep plain symbols and escape the rest") {
  CHECK(EncodeSubjectToken("ALDER") == "ALDER");
  CHECK(EncodeSubjectToken("ALDER.X") == "ALDER~2EX");
  CHECK(EncodeSubjectToken("fx:EUR-USD_1") == "fx:EUR-USD_1");
  CHECK(EncodeSubjectToken("a~b") == "a~7Eb");
  CHECK(EncodeSubjectToken("*>") == "~2A~3E");
  CHECK(EncodeSubjectToken(std::string("\0 \xff", 3)) == "~00~20~FF");
  CHECK(*DecodeSubjectToken("ALDER~2EX") == "ALDER.X");
  CHECK(*DecodeSubjectToken("~00~20~FF") == std::string("\0 \xff", 3));
}

TEST_CASE("subject token decoding rejects non-canonical tokens") {
  for (const char* bad : {"", "A.B", "A~2e", "A~2", "A~", "~41", "A B", "A*", "A>", "~7", "~G0"}) {
    INFO(bad);
    CHECK(!DecodeSubjectToken(bad).ok());
    char buf[64];
    CHECK(DecodeSubjectTokenTo(bad, buf, sizeof(buf)) == -1);
  }
  CHECK(DecodeSubjectToken("A~2e").status().message().find("offset 1") != std::string::npos);
  char small[3];
  CHECK(DecodeSubjectTokenTo("ABCD", small, sizeof(small)) == -1);  // does not fit
  CHECK(DecodeSubjectTokenTo("A~2EB", small, sizeof(small)) == 3);
  CHECK(std::string(small, 3) == "A.B");
}

TEST_CASE("subject tokens round-trip random byte strings and valid symbols") {
  std::mt19937_64 rng(20261202);
  const std::string alphabet = "ABCXYZabcxyz0189._:-";  // the symbol alphabet (wire.h)
  for (int i = 0; i < 20000; ++i) {
    std::string s;
    const int n = 1 + static_cast<int>(rng() % 32);
    const bool symbol_like = i % 2 == 0;
    for (int k = 0; k < n; ++k) {
      s.push_back(symbol_like ? alphabet[rng() % alphabet.size()] : static_cast<char>(rng() & 0xff));
    }
    const std::string t = EncodeSubjectToken(s);
    INFO(i);
    REQUIRE(IsSubjectToken(t));
    REQUIRE(t.size() <= 3 * s.size());
    if (symbol_like) REQUIRE((IsValidSymbol(s) && t.size() <= kMaxSymbolTokenBytes));
    auto back = DecodeSubjectToken(t);
    REQUIRE(back.ok());
    REQUIRE(*back == s);
    char buf[kMaxSymbolTokenBytes];
    REQUIRE(DecodeSubjectTokenTo(t, buf, sizeof(buf)) == static_cast<int>(s.size()));
    REQUIRE(std::string(buf, s.size()) == s);
  }
}

TEST_CASE("every decodable token is the encoding of its symbol (bijection)") {
  // Random strings over the token alphabet plus '~' and hex digits: whatever
  // decodes must re-encode to the same token, so two tokens never name one symbol.
  std::mt19937_64 rng(7);
  const std::string alphabet = "AB09_:-~2E7F0a.";
  int decoded = 0;
  for (int i = 0; i < 50000; ++i) {
    std::string t;
    const int n = 1 + static_cast<int>(rng() % 12);
    for (int k = 0; k < n; ++k) t.push_back(alphabet[rng() % alphabet.size()]);
    auto s = DecodeSubjectToken(t);
    if (!s.ok()) continue;
    ++decoded;
    INFO(t);
    REQUIRE(EncodeSubjectToken(*s) == t);
  }
  CHECK(decoded > 1000);  // the property was exercised, not vacuous
}

}  // namespace
}  // namespace aftershock
