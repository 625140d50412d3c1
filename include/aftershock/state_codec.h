// StateWriter / StateReader: the byte encoding of engine state in checkpoints
// (PRODUCT.md C10, §6). Every value is written little-endian with its exact
// bit pattern (doubles included), so a restored state continues bit for bit
// as the saved one would have.
//
// The reader never reads past its input: a short or malformed input sets a
// sticky error (the first one wins), every later read returns zero values,
// and status() names what was being read and at which offset. Callers read a
// whole record, then check status() once.
//
// Thread-safety: plain values; one thread uses a writer or reader at a time.
#ifndef AFTERSHOCK_STATE_CODEC_H_
#define AFTERSHOCK_STATE_CODEC_H_

#include <cstdint>
#include <cstring>
#include <string>
#include <utility>

#include "absl/status/status.h"
#include "absl/strings/string_view.h"

namespace aftershock {

// Appends encoded values to a string it owns.
class StateWriter {
 public:
  StateWriter() = default;
  // Writes into `buffer`'s storage: the content is dropped, the capacity kept
  // (a buffer handed back by Release is reused without allocating again).
  explicit StateWriter(std::string buffer) : out_(std::move(buffer)) { out_.clear(); }

  void U8(uint8_t v) { out_.push_back(static_cast<char>(v)); }
  void Bool(bool v) { U8(v ? 1 : 0); }
  void U32(uint32_t v) { Raw(&v, sizeof v); }
  void U64(uint64_t v) { Raw(&v, sizeof v); }
  void I32(int32_t v) { Raw(&v, sizeof v); }
  void I64(int64_t v) { Raw(&v, sizeof v); }
  void F64(double v) { Raw(&v, sizeof v); }
  // A length-prefixed (u32) byte string. REQUIRES: s.size() < 2^32.
  void Bytes(absl::string_view s) {
    U32(static_cast<uint32_t>(s.size()));
    out_.append(s.data(), s.size());
  }

  // Raw bytes, no length prefix (the caller knows the length).
  void Append(absl::string_view raw) { out_.append(raw.data(), raw.size()); }
  // Overwrites the 8 bytes at `offset`, written earlier (e.g. a length
  // written as 0 before the bytes it counts), with v.
  // REQUIRES: offset + 8 <= size().
  void PatchU64(size_t offset, uint64_t v) { std::memcpy(&out_[offset], &v, sizeof v); }
  // The same for the 4 bytes at `offset`. REQUIRES: offset + 4 <= size().
  void PatchU32(size_t offset, uint32_t v) { std::memcpy(&out_[offset], &v, sizeof v); }
  // Empties the output, keeping its capacity (a writer reused from one
  // checkpoint capture to the next does not allocate again).
  void Clear() { out_.clear(); }
  // Reserves room for n more bytes.
  void Reserve(size_t n) { out_.reserve(out_.size() + n); }

  const std::string& data() const { return out_; }
  std::string Release() { return std::move(out_); }
  size_t size() const { return out_.size(); }

 private:
  // The project targets little-endian hosts (x86-64, AArch64); a big-endian
  // build is refused at compile time in state_codec.cc.
  void Raw(const void* p, size_t n) { out_.append(static_cast<const char*>(p), n); }

  std::string out_;
};

// Reads values written by StateWriter from a view it does not own (the bytes
// must outlive the reader).
class StateReader {
 public:
  explicit StateReader(absl::string_view in) : in_(in) {}

  uint8_t U8(absl::string_view what);
  // A byte that must be 0 or 1 (else a DataLoss error).
  bool Bool(absl::string_view what);
  uint32_t U32(absl::string_view what);
  uint64_t U64(absl::string_view what);
  int32_t I32(absl::string_view what);
  int64_t I64(absl::string_view what);
  double F64(absl::string_view what);
  // F64 that must be finite (else a DataLoss "what: a non-finite value").
  double FiniteF64(absl::string_view what);
  // A length-prefixed byte string of at most max_size bytes; a view into the input.
  absl::string_view Bytes(absl::string_view what, size_t max_size);
  // A count that must lie in [0, max] (a guard before sizing containers).
  uint64_t Count(absl::string_view what, uint64_t max);

  // Records a DataLoss error unless one is already recorded.
  void Fail(absl::string_view what, absl::string_view problem);

  bool ok() const { return status_.ok(); }
  const absl::Status& status() const { return status_; }
  size_t offset() const { return pos_; }
  size_t remaining() const { return in_.size() - pos_; }
  // DataLoss unless every byte was consumed (and no earlier error).
  absl::Status Finish(absl::string_view what);

 private:
  bool Take(void* dst, size_t n, absl::string_view what);
  // One fixed-size value (zero after an error).
  template <typename T>
  T Scalar(absl::string_view what) {
    T v;
    Take(&v, sizeof v, what);
    return v;
  }

  absl::string_view in_;
  size_t pos_ = 0;
  absl::Status status_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_STATE_CODEC_H_
