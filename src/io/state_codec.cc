#include "aftershock/state_codec.h"

#include <cmath>

#include "absl/strings/str_cat.h"

namespace aftershock {

static_assert(__BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__,
              "checkpoints are little-endian; a big-endian port needs byte swaps in StateWriter");
static_assert(sizeof(double) == 8, "IEEE-754 binary64 expected");

void StateReader::Fail(absl::string_view what, absl::string_view problem) {
  if (!status_.ok()) return;
  status_ = absl::DataLossError(absl::StrCat(what, ": ", problem, " (at byte ", pos_, ")"));
  pos_ = in_.size();
}

bool StateReader::Take(void* dst, size_t n, absl::string_view what) {
  if (!status_.ok()) {
    std::memset(dst, 0, n);
    return false;
  }
  if (in_.size() - pos_ < n) {
    std::memset(dst, 0, n);
    Fail(what, absl::StrCat("truncated: needs ", n, " bytes, ", in_.size() - pos_, " left"));
    return false;
  }
  std::memcpy(dst, in_.data() + pos_, n);
  pos_ += n;
  return true;
}

uint8_t StateReader::U8(absl::string_view what) { return Scalar<uint8_t>(what); }

bool StateReader::Bool(absl::string_view what) {
  const uint8_t v = U8(what);
  if (v > 1) Fail(what, absl::StrCat("expected 0 or 1, got ", v));
  return v == 1;
}

uint32_t StateReader::U32(absl::string_view what) { return Scalar<uint32_t>(what); }
uint64_t StateReader::U64(absl::string_view what) { return Scalar<uint64_t>(what); }
int32_t StateReader::I32(absl::string_view what) { return Scalar<int32_t>(what); }
int64_t StateReader::I64(absl::string_view what) { return Scalar<int64_t>(what); }
double StateReader::FiniteF64(absl::string_view what) {
  const double v = F64(what);
  if (ok() && !std::isfinite(v)) Fail(what, "a non-finite value");
  return v;
}

double StateReader::F64(absl::string_view what) { return Scalar<double>(what); }

absl::string_view StateReader::Bytes(absl::string_view what, size_t max_size) {
  const uint32_t n = U32(what);
  if (!status_.ok()) return {};
  if (n > max_size) {
    Fail(what, absl::StrCat("length ", n, " exceeds the limit ", max_size));
    return {};
  }
  if (in_.size() - pos_ < n) {
    Fail(what, absl::StrCat("truncated: needs ", n, " bytes, ", in_.size() - pos_, " left"));
    return {};
  }
  const absl::string_view s = in_.substr(pos_, n);
  pos_ += n;
  return s;
}

uint64_t StateReader::Count(absl::string_view what, uint64_t max) {
  const uint64_t n = U64(what);
  if (status_.ok() && n > max) {
    Fail(what, absl::StrCat("count ", n, " exceeds the limit ", max));
    return 0;
  }
  return n;
}

absl::Status StateReader::Finish(absl::string_view what) {
  if (status_.ok() && pos_ != in_.size()) {
    Fail(what, absl::StrCat(in_.size() - pos_, " unexpected trailing bytes"));
  }
  return status_;
}

}  // namespace aftershock
