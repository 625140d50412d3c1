// Checkpoint container: the versioned, checksummed file every engine
// checkpoint is stored in (PRODUCT.md C10, §6). What goes into the sections
// (per-symbol state) is defined by the engine; this header defines only the
// envelope, its checks and the crash-consistent write.
//
// Layout (little-endian, every offset fixed by the sizes below):
//   header, 64 bytes:
//     magic "AFSHSNAP" (8) | format version u32 | section count u32 |
//     configuration fingerprint u64 | symbol count u64 | created (ns since the
//     epoch) i64 | engine version, NUL-padded (16) | reserved u32 (0) |
//     CRC-32C of the 60 bytes before it u32
//   section, repeated `section count` times:
//     tag u32 (four ASCII letters) | length u64 | CRC-32C of tag, length and
//     payload u32 | payload (length bytes)
//   trailer, 16 bytes: magic "AFSHDONE" (8) | total file length u64
// A reader refuses, with a message naming the problem, any file that is
// truncated, longer than its trailer says, has a wrong magic or an unknown
// format version, or fails a checksum: never a partial result.
//
// The CRC is CRC-32C (Castagnoli, reflected, init and final XOR 0xFFFFFFFF;
// check value 0xE3069283 for "123456789"), computed with Boost.CRC.
//
// Thread-safety: free functions on values; safe to call from any thread.
#ifndef AFTERSHOCK_CHECKPOINT_FILE_H_
#define AFTERSHOCK_CHECKPOINT_FILE_H_

#include <cstdint>
#include <functional>
#include <string>
#include <utility>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/state_codec.h"

namespace aftershock {

// The version also covers the layout of the engine's sections, so a checkpoint
// of another layout is refused rather than misread. 2: the regime detector's
// state became CUSUM statistics (regime_detector.h), the configuration section
// names models, parameters and the presample rule in the renamed vocabulary
// (CHANGELOG.md) and the core holds the recursive tracker's state. 3: the
// refit coordinator's seasonal pool holds its snapshot and the estimates added
// since it was built (SeasonalPool::SaveState).
inline constexpr uint32_t kCheckpointFormatVersion = 3;
inline constexpr size_t kCheckpointHeaderBytes = 64;
inline constexpr size_t kCheckpointTrailerBytes = 16;
inline constexpr size_t kCheckpointSectionHeaderBytes = 16;
inline constexpr int kMaxCheckpointSections = 256;
inline constexpr size_t kMaxEngineVersionBytes = 15;

// A section tag from four ASCII letters, e.g. SectionTag("SYMB").
constexpr uint32_t SectionTag(const char (&s)[5]) {
  return static_cast<uint32_t>(static_cast<unsigned char>(s[0])) |
         static_cast<uint32_t>(static_cast<unsigned char>(s[1])) << 8 |
         static_cast<uint32_t>(static_cast<unsigned char>(s[2])) << 16 |
         static_cast<uint32_t>(static_cast<unsigned char>(s[3])) << 24;
}
// "SYMB" for SectionTag("SYMB"); non-printable bytes as '?'.
std::string SectionTagName(uint32_t tag);

struct CheckpointHeader {
  uint32_t format_version = kCheckpointFormatVersion;  // of the container
  std::string engine_version;   // the writing build's version; at most 15 bytes
  uint64_t config_fingerprint = 0;  // ConfigFingerprint of the state-relevant settings
  uint64_t symbol_count = 0;        // symbols whose state the file holds
  int64_t created_ns = 0;           // wall clock at the snapshot, ns since the epoch
};

// A parsed checkpoint. Owns the file's bytes; payload(i) views into them.
class Checkpoint {
 public:
  const CheckpointHeader& header() const { return header_; }
  int num_sections() const { return static_cast<int>(sections_.size()); }
  uint32_t tag(int i) const { return sections_[i].tag; }
  absl::string_view payload(int i) const {
    return absl::string_view(bytes_).substr(sections_[i].offset, sections_[i].length);
  }
  // The first section with this tag, or NotFound naming it.
  absl::StatusOr<absl::string_view> Find(uint32_t tag) const;
  size_t file_bytes() const { return bytes_.size(); }

 private:
  friend absl::StatusOr<Checkpoint> ParseCheckpoint(std::string bytes);
  struct Section {
    uint32_t tag;
    size_t offset;
    size_t length;
  };
  CheckpointHeader header_;
  std::string bytes_;
  std::vector<Section> sections_;
};

// The whole file for a header and (tag, payload) sections, in order.
// REQUIRES: engine_version at most kMaxEngineVersionBytes, at most
// kMaxCheckpointSections sections; InvalidArgument otherwise.
absl::StatusOr<std::string> SerializeCheckpoint(
    const CheckpointHeader& header,
    const std::vector<std::pair<uint32_t, absl::string_view>>& sections);
// The same file written into *out (its content replaced, its capacity kept, so
// a periodic writer reuses one buffer). On error *out is unspecified.
absl::Status SerializeCheckpointInto(
    const CheckpointHeader& header,
    const std::vector<std::pair<uint32_t, absl::string_view>>& sections, std::string* out);

// A section whose payload `encode` appends to the file's own buffer, so a
// large payload is not encoded into a buffer of its own and then copied
// (EngineCapture::Serialize).
struct SectionEncoder {
  uint32_t tag = 0;
  std::function<void(StateWriter*)> encode;
};
// The file SerializeCheckpointInto gives for the payloads the encoders
// append, byte for byte, written into *out (content replaced, capacity kept).
// Same REQUIREs and errors as SerializeCheckpointInto.
absl::Status SerializeCheckpointEncoded(const CheckpointHeader& header,
                                        const std::vector<SectionEncoder>& sections,
                                        std::string* out);

// Checks and splits a file's bytes. DataLoss naming the problem (truncated,
// checksum of which section, trailing bytes...), FailedPrecondition for a
// well-formed file of another format version.
absl::StatusOr<Checkpoint> ParseCheckpoint(std::string bytes);

// Reads and parses `path`; NotFound when it does not exist, the parse errors
// otherwise (each prefixed with the path).
absl::StatusOr<Checkpoint> ReadCheckpointFile(const std::string& path);

// Where the time of one WriteFileAtomically went (checkpointer metrics,
// engine_bench). Plain value.
struct WriteTimings {
  double write_seconds = 0;  // wall time of creating and writing the temporary, s
  double sync_seconds = 0;   // wall time of the fsyncs, close, rename (file and directory), s
  double cpu_seconds = 0;    // the calling thread's CPU time over the whole call, s
};

// Crash-consistent replacement of `path` by `bytes`: writes "<path>.tmp",
// fsyncs it, renames it over `path`, then fsyncs the directory, so after a
// crash at any moment `path` holds either the old or the new file, whole.
// Errors name the step and the OS reason. `timings` (may be null) receives
// the split of the time, also on error (up to the failing step).
absl::Status WriteFileAtomically(const std::string& path, absl::string_view bytes,
                                 WriteTimings* timings = nullptr);

// CPU time of the calling thread, s (CLOCK_THREAD_CPUTIME_ID; 0 where the
// clock is missing): the checkpoint costs are reported in it, since unlike
// wall time it does not grow with what else the host runs.
double ThreadCpuSeconds();

// CRC-32C of bytes (see above): the CPU's crc32 instruction where it has one
// (x86-64 with SSE 4.2), else the table-driven Crc32cPortable; the same value.
uint32_t Crc32c(absl::string_view bytes);
// CRC-32C of bytes, table-driven (Boost.CRC) on every CPU.
uint32_t Crc32cPortable(absl::string_view bytes);
// A stable 64-bit fingerprint (CRC-64/XZ: ECMA-182 polynomial, reflected, init
// and final XOR all ones; check value 0x995DC9BBDF1939FA for "123456789"),
// identical across builds and runs, for configuration text.
uint64_t Fingerprint64(absl::string_view bytes);

}  // namespace aftershock

#endif  // AFTERSHOCK_CHECKPOINT_FILE_H_
