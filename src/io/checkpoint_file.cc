#include "aftershock/checkpoint_file.h"

#include <fcntl.h>
#include <time.h>
#include <unistd.h>

#include <cerrno>
#include <chrono>
#include <cstring>
#include <fstream>
#include <sstream>
#include <system_error>

#include "absl/strings/str_cat.h"
#include "aftershock/state_codec.h"
#include "boost/crc.hpp"

#if defined(__x86_64__)
#include <nmmintrin.h>
#endif

namespace aftershock {
namespace {

constexpr char kHeaderMagic[9] = "AFSHSNAP";
constexpr char kTrailerMagic[9] = "AFSHDONE";
constexpr size_t kHeaderCrcOffset = kCheckpointHeaderBytes - 4;

using Crc32cType = boost::crc_optimal<32, 0x1EDC6F41, 0xFFFFFFFF, 0xFFFFFFFF, true, true>;
using Crc64Type =
    boost::crc_optimal<64, 0x42F0E1EBA9EA3693ULL, ~0ULL, ~0ULL, true, true>;

std::string OsReason() { return std::error_code(errno, std::generic_category()).message(); }

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#define AFTERSHOCK_CRC32C_HW 1
// CRC-32C with the SSE 4.2 crc32 instruction (the same polynomial, reflected,
// on the running register: init and final xor are the caller's), about 20
// times the table-driven rate: checkpoints of 10,000 symbols are tens of MB,
// checksummed on the writer thread of a live engine and at every restore.
// Compiled for SSE 4.2 whatever the build's target, and only called where
// the CPU has it (Crc32cState).
__attribute__((target("sse4.2"))) uint32_t Crc32cHardware(uint32_t reg, const char* p, size_t n) {
  uint64_t r = reg;
  for (; n >= 8; n -= 8, p += 8) {
    uint64_t v;
    std::memcpy(&v, p, 8);
    r = _mm_crc32_u64(r, v);
  }
  uint32_t r32 = static_cast<uint32_t>(r);
  for (; n > 0; --n, ++p) r32 = _mm_crc32_u8(r32, static_cast<uint8_t>(*p));
  return r32;
}

bool HasCrc32cHardware() {
  static const bool has = __builtin_cpu_supports("sse4.2");
  return has;
}
#endif

// Incremental CRC-32C (Castagnoli: reflected polynomial 0x82F63B78, init and
// final xor 0xFFFFFFFF): the hardware instruction where the CPU has it, else
// Boost.CRC's table-driven implementation. Both give the same checksum
// (checkpoint_file_test compares them).
class Crc32cState {
 public:
  void Update(const void* data, size_t n) {
#ifdef AFTERSHOCK_CRC32C_HW
    if (HasCrc32cHardware()) {
      reg_ = Crc32cHardware(reg_, static_cast<const char*>(data), n);
      return;
    }
#endif
    table_.process_bytes(data, n);
  }
  uint32_t Final() const {
#ifdef AFTERSHOCK_CRC32C_HW
    if (HasCrc32cHardware()) return reg_ ^ 0xFFFFFFFFu;
#endif
    return table_.checksum();
  }

 private:
  uint32_t reg_ = 0xFFFFFFFFu;
  Crc32cType table_;
};

uint32_t SectionCrc(uint32_t tag, uint64_t length, absl::string_view payload) {
  Crc32cState crc;
  crc.Update(&tag, sizeof tag);
  crc.Update(&length, sizeof length);
  crc.Update(payload.data(), payload.size());
  return crc.Final();
}

// Closes a descriptor on every path out of WriteFileAtomically.
class FdCloser {
 public:
  explicit FdCloser(int fd) : fd_(fd) {}
  ~FdCloser() {
    if (fd_ >= 0) ::close(fd_);
  }
  int Release() {
    const int fd = fd_;
    fd_ = -1;
    return fd;
  }

 private:
  int fd_;
};

}  // namespace

std::string SectionTagName(uint32_t tag) {
  std::string s(4, '?');
  for (int i = 0; i < 4; ++i) {
    const unsigned char c = static_cast<unsigned char>(tag >> (8 * i));
    if (c >= 0x20 && c < 0x7f) s[i] = static_cast<char>(c);
  }
  return s;
}

uint32_t Crc32c(absl::string_view bytes) {
  Crc32cState crc;
  crc.Update(bytes.data(), bytes.size());
  return crc.Final();
}

uint32_t Crc32cPortable(absl::string_view bytes) {
  Crc32cType crc;
  crc.process_bytes(bytes.data(), bytes.size());
  return crc.checksum();
}

uint64_t Fingerprint64(absl::string_view bytes) {
  Crc64Type crc;
  crc.process_bytes(bytes.data(), bytes.size());
  return crc.checksum();
}

absl::StatusOr<absl::string_view> Checkpoint::Find(uint32_t tag) const {
  for (int i = 0; i < num_sections(); ++i) {
    if (sections_[i].tag == tag) return payload(i);
  }
  return absl::NotFoundError(
      absl::StrCat("the checkpoint has no section '", SectionTagName(tag), "'"));
}

absl::StatusOr<std::string> SerializeCheckpoint(
    const CheckpointHeader& header,
    const std::vector<std::pair<uint32_t, absl::string_view>>& sections) {
  std::string out;
  if (absl::Status s = SerializeCheckpointInto(header, sections, &out); !s.ok()) return s;
  return out;
}

namespace {

// The header's checks (the serializers' REQUIREs).
absl::Status CheckHeader(const CheckpointHeader& header, size_t sections) {
  if (header.engine_version.size() > kMaxEngineVersionBytes) {
    return absl::InvalidArgumentError(absl::StrCat("engine version '", header.engine_version,
                                                   "' is longer than ", kMaxEngineVersionBytes,
                                                   " bytes"));
  }
  if (sections > static_cast<size_t>(kMaxCheckpointSections)) {
    return absl::InvalidArgumentError(
        absl::StrCat(sections, " sections; at most ", kMaxCheckpointSections));
  }
  return absl::OkStatus();
}

// The 64-byte header, with its checksum. REQUIRES: w empty.
void WriteHeader(const CheckpointHeader& header, size_t sections, StateWriter* w) {
  for (int i = 0; i < 8; ++i) w->U8(static_cast<uint8_t>(kHeaderMagic[i]));
  w->U32(header.format_version);
  w->U32(static_cast<uint32_t>(sections));
  w->U64(header.config_fingerprint);
  w->U64(header.symbol_count);
  w->I64(header.created_ns);
  for (size_t i = 0; i < 16; ++i) {
    w->U8(i < header.engine_version.size() ? static_cast<uint8_t>(header.engine_version[i]) : 0);
  }
  w->U32(0);
  w->U32(Crc32c(w->data()));
}

// The trailer: magic and the file's whole length (the trailer included).
void WriteTrailer(StateWriter* w) {
  for (int i = 0; i < 8; ++i) w->U8(static_cast<uint8_t>(kTrailerMagic[i]));
  w->U64(w->size() + sizeof(uint64_t));
}

}  // namespace

absl::Status SerializeCheckpointEncoded(const CheckpointHeader& header,
                                        const std::vector<SectionEncoder>& sections,
                                        std::string* out) {
  if (absl::Status s = CheckHeader(header, sections.size()); !s.ok()) return s;
  StateWriter w(std::move(*out));
  WriteHeader(header, sections.size(), &w);
  for (const SectionEncoder& section : sections) {
    // Length and checksum are patched in once the payload is written.
    const size_t at = w.size();
    w.U32(section.tag);
    w.U64(0);
    w.U32(0);
    section.encode(&w);
    const uint64_t length = w.size() - at - kCheckpointSectionHeaderBytes;
    w.PatchU64(at + 4, length);
    w.PatchU32(at + 12, SectionCrc(section.tag, length,
                                   absl::string_view(w.data()).substr(
                                       at + kCheckpointSectionHeaderBytes, length)));
  }
  WriteTrailer(&w);
  *out = w.Release();
  return absl::OkStatus();
}

absl::Status SerializeCheckpointInto(
    const CheckpointHeader& header,
    const std::vector<std::pair<uint32_t, absl::string_view>>& sections, std::string* out) {
  if (absl::Status s = CheckHeader(header, sections.size()); !s.ok()) return s;
  StateWriter w(std::move(*out));
  WriteHeader(header, sections.size(), &w);
  size_t total = kCheckpointHeaderBytes + kCheckpointTrailerBytes;
  for (const auto& section : sections) {
    total += kCheckpointSectionHeaderBytes + section.second.size();
  }
  w.Reserve(total - w.size());
  for (const auto& [tag, payload] : sections) {
    const uint64_t length = payload.size();
    w.U32(tag);
    w.U64(length);
    w.U32(SectionCrc(tag, length, payload));
    w.Append(payload);
  }
  WriteTrailer(&w);
  *out = w.Release();
  return absl::OkStatus();
}

absl::StatusOr<Checkpoint> ParseCheckpoint(std::string bytes) {
  if (bytes.size() < kCheckpointHeaderBytes + kCheckpointTrailerBytes) {
    return absl::DataLossError(absl::StrCat("truncated checkpoint: ", bytes.size(),
                                            " bytes, shorter than an empty one (",
                                            kCheckpointHeaderBytes + kCheckpointTrailerBytes,
                                            ")"));
  }
  const absl::string_view all(bytes);
  if (all.substr(0, 8) != absl::string_view(kHeaderMagic, 8)) {
    return absl::DataLossError("not a checkpoint file (wrong magic bytes)");
  }
  StateReader h(all.substr(0, kCheckpointHeaderBytes));
  h.U64("magic");
  Checkpoint cp;
  CheckpointHeader& hd = cp.header_;
  hd.format_version = h.U32("format version");
  const uint32_t n_sections = h.U32("section count");
  hd.config_fingerprint = h.U64("configuration fingerprint");
  hd.symbol_count = h.U64("symbol count");
  hd.created_ns = h.I64("creation time");
  const absl::string_view version = all.substr(h.offset(), 16);
  for (int i = 0; i < 16; ++i) h.U8("engine version");
  h.U32("reserved");
  const uint32_t header_crc = h.U32("header checksum");
  if (Crc32c(all.substr(0, kHeaderCrcOffset)) != header_crc) {
    return absl::DataLossError("checkpoint header checksum mismatch (the file is corrupt)");
  }
  if (hd.format_version != kCheckpointFormatVersion) {
    return absl::FailedPreconditionError(
        absl::StrCat("checkpoint format version ", hd.format_version, "; this build reads version ",
                     kCheckpointFormatVersion));
  }
  hd.engine_version = std::string(version.substr(0, version.find('\0')));
  if (n_sections > static_cast<uint32_t>(kMaxCheckpointSections)) {
    return absl::DataLossError(absl::StrCat("checkpoint declares ", n_sections,
                                            " sections; at most ", kMaxCheckpointSections));
  }
  // The trailer first: it tells a truncated or over-long file before any
  // section is trusted.
  const absl::string_view trailer = all.substr(all.size() - kCheckpointTrailerBytes);
  StateReader t(trailer.substr(8));
  const uint64_t declared = t.U64("file length");
  if (trailer.substr(0, 8) != absl::string_view(kTrailerMagic, 8)) {
    return absl::DataLossError(absl::StrCat(
        "truncated checkpoint: no end marker (", all.size(), " bytes; the write did not finish)"));
  }
  if (declared != all.size()) {
    return absl::DataLossError(absl::StrCat("checkpoint length ", all.size(),
                                            " bytes, its end marker says ", declared));
  }
  const absl::string_view body =
      all.substr(kCheckpointHeaderBytes,
                 all.size() - kCheckpointHeaderBytes - kCheckpointTrailerBytes);
  size_t pos = 0;
  for (uint32_t i = 0; i < n_sections; ++i) {
    if (body.size() - pos < kCheckpointSectionHeaderBytes) {
      return absl::DataLossError(absl::StrCat("checkpoint section ", i + 1, " of ", n_sections,
                                              ": truncated header"));
    }
    StateReader s(body.substr(pos, kCheckpointSectionHeaderBytes));
    const uint32_t tag = s.U32("tag");
    const uint64_t length = s.U64("length");
    const uint32_t crc = s.U32("checksum");
    pos += kCheckpointSectionHeaderBytes;
    if (length > body.size() - pos) {
      return absl::DataLossError(absl::StrCat("checkpoint section ", i + 1, " ('",
                                              SectionTagName(tag), "'): length ", length,
                                              " runs past the end of the file"));
    }
    const absl::string_view payload = body.substr(pos, length);
    if (SectionCrc(tag, length, payload) != crc) {
      return absl::DataLossError(absl::StrCat("checkpoint section ", i + 1, " ('",
                                              SectionTagName(tag),
                                              "'): checksum mismatch (the file is corrupt)"));
    }
    cp.sections_.push_back(
        Checkpoint::Section{tag, kCheckpointHeaderBytes + pos, static_cast<size_t>(length)});
    pos += length;
  }
  if (pos != body.size()) {
    return absl::DataLossError(absl::StrCat("checkpoint has ", body.size() - pos,
                                            " bytes after its last section"));
  }
  cp.bytes_ = std::move(bytes);
  return cp;
}

absl::StatusOr<Checkpoint> ReadCheckpointFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    const std::string reason = OsReason();
    if (errno == ENOENT) return absl::NotFoundError(absl::StrCat("no checkpoint file '", path, "'"));
    return absl::NotFoundError(absl::StrCat("cannot open '", path, "': ", reason));
  }
  std::ostringstream ss;
  ss << in.rdbuf();
  if (in.bad()) {
    return absl::DataLossError(absl::StrCat("cannot read '", path, "': ", OsReason()));
  }
  absl::StatusOr<Checkpoint> cp = ParseCheckpoint(std::move(ss).str());
  if (!cp.ok()) {
    return absl::Status(cp.status().code(), absl::StrCat(path, ": ", cp.status().message()));
  }
  return cp;
}

double ThreadCpuSeconds() {
  timespec ts{};
  if (clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts) != 0) return 0;
  return static_cast<double>(ts.tv_sec) + static_cast<double>(ts.tv_nsec) * 1e-9;
}

namespace {

// Fills a WriteTimings on every path out of WriteFileAtomically: the write
// phase ends at Synced(), the sync phase at destruction.
class WriteTimer {
 public:
  explicit WriteTimer(WriteTimings* out)
      : out_(out),
        cpu0_(out != nullptr ? ThreadCpuSeconds() : 0),
        t0_(std::chrono::steady_clock::now()),
        t1_(t0_) {}
  ~WriteTimer() {
    if (out_ == nullptr) return;
    const auto t2 = std::chrono::steady_clock::now();
    if (!synced_) t1_ = t2;
    out_->write_seconds = std::chrono::duration<double>(t1_ - t0_).count();
    out_->sync_seconds = std::chrono::duration<double>(t2 - t1_).count();
    out_->cpu_seconds = ThreadCpuSeconds() - cpu0_;
  }
  // The bytes are in the temporary; the fsyncs start.
  void Synced() {
    t1_ = std::chrono::steady_clock::now();
    synced_ = true;
  }

 private:
  WriteTimings* const out_;
  const double cpu0_;
  const std::chrono::steady_clock::time_point t0_;
  std::chrono::steady_clock::time_point t1_;
  bool synced_ = false;
};

}  // namespace

absl::Status WriteFileAtomically(const std::string& path, absl::string_view bytes,
                                 WriteTimings* timings) {
  WriteTimer timer(timings);
  const std::string tmp = path + ".tmp";
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) {
    return absl::UnavailableError(absl::StrCat("cannot create '", tmp, "': ", OsReason()));
  }
  FdCloser closer(fd);
  size_t done = 0;
  while (done < bytes.size()) {
    const ssize_t n = ::write(fd, bytes.data() + done, bytes.size() - done);
    if (n < 0) {
      if (errno == EINTR) continue;
      const std::string reason = OsReason();
      ::unlink(tmp.c_str());
      return absl::UnavailableError(absl::StrCat("cannot write '", tmp, "': ", reason));
    }
    done += static_cast<size_t>(n);
  }
  timer.Synced();
  if (::fsync(fd) != 0) {
    const std::string reason = OsReason();
    ::unlink(tmp.c_str());
    return absl::UnavailableError(absl::StrCat("cannot flush '", tmp, "' to disk: ", reason));
  }
  if (::close(closer.Release()) != 0) {
    const std::string reason = OsReason();
    ::unlink(tmp.c_str());
    return absl::UnavailableError(absl::StrCat("cannot close '", tmp, "': ", reason));
  }
  if (::rename(tmp.c_str(), path.c_str()) != 0) {
    const std::string reason = OsReason();
    ::unlink(tmp.c_str());
    return absl::UnavailableError(
        absl::StrCat("cannot rename '", tmp, "' to '", path, "': ", reason));
  }
  // The rename is durable only once the directory entry is on disk.
  const size_t slash = path.rfind('/');
  const std::string dir =
      slash == std::string::npos ? "." : (slash == 0 ? "/" : path.substr(0, slash));
  const int dfd = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dfd < 0) {
    return absl::UnavailableError(
        absl::StrCat("cannot open the directory '", dir, "' to flush it: ", OsReason()));
  }
  FdCloser dir_closer(dfd);
  if (::fsync(dfd) != 0) {
    return absl::UnavailableError(
        absl::StrCat("cannot flush the directory '", dir, "': ", OsReason()));
  }
  return absl::OkStatus();
}

}  // namespace aftershock
