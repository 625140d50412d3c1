#include "aftershock/checkpoint_file.h"

#include <sys/stat.h>

#include <cstdio>
#include <fstream>
#include <sstream>
#include <vector>
#include <string>

#include "absl/strings/str_cat.h"
#include "catch2/catch.hpp"
#include "support/test_support.h"

namespace aftershock {
namespace {

std::string SampleFile() {
  CheckpointHeader h;
  h.engine_version = "0.1.0";
  h.config_fingerprint = 0x1122334455667788ULL;
  h.symbol_count = 3;
  h.created_ns = 1764000000000000000;
  const std::string a = "first section payload";
  const std::string b(1000, 'x');
  auto bytes = SerializeCheckpoint(h, {{SectionTag("SYMB"), a}, {SectionTag("WIND"), b},
                                       {SectionTag("EMPT"), absl::string_view()}});
  REQUIRE(bytes.ok());
  return *bytes;
}

TEST_CASE("CRC-32C and CRC-64/XZ match their check values and an independent implementation") {
  // Check values of the standard input "123456789" (CRC-32C 0xE3069283 and
  // CRC-64/XZ 0x995DC9BBDF1939FA, from memory of the CRC catalogue).
  CHECK(Crc32c("123456789") == 0xE3069283u);
  CHECK(Fingerprint64("123456789") == 0x995DC9BBDF1939FAULL);
  // Live: a bit-by-bit implementation from the polynomials' definitions
  // (tests/python/crc_ref.py) on inputs of many lengths.
  std::string input, expected;
  std::vector<std::string> samples;
  for (int len = 0; len < 70; len += 3) {
    std::string s;
    for (int i = 0; i < len; ++i) s.push_back(static_cast<char>((i * 37 + len * 11) & 0xFF));
    samples.push_back(s);
    static const char* kHex = "0123456789abcdef";
    for (unsigned char c : s) {
      input.push_back(kHex[c >> 4]);
      input.push_back(kHex[c & 15]);
    }
    input.push_back('\n');
  }
  const testing::CommandResult py = testing::RunPython("crc_ref.py", {}, input);
  REQUIRE(py.exit_code == 0);
  std::istringstream lines(py.out);
  for (const std::string& s : samples) {
    std::string c32, c64;
    REQUIRE(lines >> c32 >> c64);
    char buf[40];
    std::snprintf(buf, sizeof buf, "%08x %016llx", Crc32c(s),
                  static_cast<unsigned long long>(Fingerprint64(s)));
    CHECK(std::string(buf) == c32 + " " + c64);
    std::snprintf(buf, sizeof buf, "%08x", Crc32cPortable(s));
    CHECK(std::string(buf) == c32);
  }
}

TEST_CASE("The instruction-based and the table-driven CRC-32C agree at every alignment") {
  // Crc32c uses the CPU's crc32 instruction where there is one; both must
  // give the same value whatever the start address and length (8-byte steps
  // plus a tail).
  std::string big(4096 + 64, '\0');
  uint64_t x = 0x243F6A8885A308D3ull;
  for (char& c : big) {
    x = x * 6364136223846793005ull + 1442695040888963407ull;
    c = static_cast<char>(x >> 56);
  }
  for (size_t start = 0; start < 9; ++start) {
    for (size_t len : {size_t{0}, size_t{1}, size_t{7}, size_t{8}, size_t{9}, size_t{63},
                       size_t{4096}}) {
      const absl::string_view v(big.data() + start, len);
      CHECK(Crc32c(v) == Crc32cPortable(v));
    }
  }
}

TEST_CASE("A checkpoint round-trips its header and sections") {
  auto cp = ParseCheckpoint(SampleFile());
  REQUIRE(cp.ok());
  CHECK(cp->header().format_version == kCheckpointFormatVersion);
  CHECK(cp->header().engine_version == "0.1.0");
  CHECK(cp->header().config_fingerprint == 0x1122334455667788ULL);
  CHECK(cp->header().symbol_count == 3);
  CHECK(cp->header().created_ns == 1764000000000000000);
  REQUIRE(cp->num_sections() == 3);
  CHECK(SectionTagName(cp->tag(0)) == "SYMB");
  CHECK(cp->payload(0) == "first section payload");
  CHECK(cp->payload(1) == std::string(1000, 'x'));
  CHECK(cp->payload(2).empty());
  auto w = cp->Find(SectionTag("WIND"));
  REQUIRE(w.ok());
  CHECK(w->size() == 1000);
  CHECK(cp->Find(SectionTag("NONE")).status().message().find("'NONE'") != absl::string_view::npos);
  // The payload views survive a move of the checkpoint.
  Checkpoint moved = *std::move(cp);
  CHECK(moved.payload(0) == "first section payload");
}

TEST_CASE("A checkpoint written by an independent writer from the layout in the header parses") {
  // tests/fuzz/corpus/checkpoint_fuzz/two_sections.ckpt was written by a few
  // lines of Python following checkpoint_file.h's layout (bit-by-bit CRC-32C);
  // its format version field was later set to 2, then 3, and the header CRC
  // recomputed (bit-by-bit CRC-32C in Python).
  auto cp = ReadCheckpointFile(std::string(AFTERSHOCK_SOURCE_DIR) +
                               "/tests/fuzz/corpus/checkpoint_fuzz/two_sections.ckpt");
  REQUIRE(cp.ok());
  CHECK(cp->header().engine_version == "0.1.0");
  CHECK(cp->header().config_fingerprint == 0xABCDEF);
  CHECK(cp->header().symbol_count == 1);
  REQUIRE(cp->num_sections() == 2);
  CHECK(cp->payload(0).substr(4) == "BRANDR.NRG");
  CHECK(cp->payload(1).size() == 200);
  auto old = ReadCheckpointFile(std::string(AFTERSHOCK_SOURCE_DIR) +
                                "/tests/fuzz/corpus/checkpoint_fuzz/other_version.ckpt");
  CHECK(old.status().code() == absl::StatusCode::kFailedPrecondition);
}

TEST_CASE("Every truncation of a checkpoint is refused with a message") {
  const std::string full = SampleFile();
  for (size_t cut = 0; cut < full.size(); ++cut) {
    auto cp = ParseCheckpoint(full.substr(0, cut));
    REQUIRE_FALSE(cp.ok());
    CHECK(cp.status().code() == absl::StatusCode::kDataLoss);
    CHECK_FALSE(cp.status().message().empty());
  }
  // And a file with bytes appended.
  auto longer = ParseCheckpoint(full + "x");
  CHECK_FALSE(longer.ok());
}

TEST_CASE("Every single-byte corruption of a checkpoint is refused") {
  const std::string full = SampleFile();
  for (size_t i = 0; i < full.size(); ++i) {
    for (unsigned char flip : {0x01, 0x80, 0xFF}) {
      std::string bad = full;
      bad[i] = static_cast<char>(static_cast<unsigned char>(bad[i]) ^ flip);
      auto cp = ParseCheckpoint(bad);
      INFO("byte " << i << " xor " << int(flip));
      REQUIRE_FALSE(cp.ok());
      CHECK_FALSE(cp.status().message().empty());
    }
  }
}

TEST_CASE("Another format version is refused as such") {
  CheckpointHeader h;
  h.format_version = kCheckpointFormatVersion + 1;
  auto bytes = SerializeCheckpoint(h, {});
  REQUIRE(bytes.ok());
  auto cp = ParseCheckpoint(*bytes);
  REQUIRE_FALSE(cp.ok());
  CHECK(cp.status().code() == absl::StatusCode::kFailedPrecondition);
  const std::string other = absl::StrCat("format version ", kCheckpointFormatVersion + 1);
  CHECK(cp.status().message().find(other) != absl::string_view::npos);
  CHECK_FALSE(ParseCheckpoint("GARBAGE-GARBAGE-GARBAGE-GARBAGE-GARBAGE-GARBAGE-GARBAGE-GARBAGE-"
                              "GARBAGE-GARBAGE")
                  .ok());
}

TEST_CASE("SerializeCheckpoint refuses what it cannot represent") {
  CheckpointHeader h;
  h.engine_version = std::string(16, 'v');
  CHECK_FALSE(SerializeCheckpoint(h, {}).ok());
}

TEST_CASE("WriteFileAtomically replaces the file whole and leaves no temp file") {
  const std::string dir = testing::ScratchDir("checkpoint_file");
  const std::string path = dir + "/state.ckpt";
  const std::string a = SampleFile();
  REQUIRE(WriteFileAtomically(path, "old contents").ok());
  REQUIRE(WriteFileAtomically(path, a).ok());
  auto cp = ReadCheckpointFile(path);
  REQUIRE(cp.ok());
  CHECK(cp->file_bytes() == a.size());
  struct stat st;
  CHECK(::stat((path + ".tmp").c_str(), &st) != 0);
  // Errors name the path and the OS reason.
  auto missing = ReadCheckpointFile(dir + "/absent.ckpt");
  CHECK(missing.status().code() == absl::StatusCode::kNotFound);
  const absl::Status s = WriteFileAtomically(dir + "/no/such/dir/x.ckpt", a);
  CHECK_FALSE(s.ok());
  CHECK(s.message().find("No such file or directory") != absl::string_view::npos);
  // A corrupt file on disk: the message starts with its path.
  std::string bad = a;
  bad[100] ^= 0x10;
  REQUIRE(WriteFileAtomically(path, bad).ok());
  auto c = ReadCheckpointFile(path);
  REQUIRE_FALSE(c.ok());
  CHECK(c.status().message().find(path) == 0);
}

}  // namespace
}  // namespace aftershock
