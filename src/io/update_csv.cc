#include "aftershock/update_csv.h"

#include <cerrno>
#include <charconv>
#include <cstring>
#include <utility>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "aftershock/update_codec.h"
#include "io/shortest_double.h"

namespace aftershock {
namespace {

constexpr size_t kCsvBufferBytes = 1 << 20;

// The level as a column-name suffix: the shortest form, e.g. 0.99 or 0.975.
std::string LevelKey(double level) {
  std::string s;
  internal::AppendShortestDouble(&s, level);
  return s;
}

// Days since 1970-01-01 to the proleptic Gregorian civil date: the
// days-to-civil algorithm of H. Hinnant, "chrono-Compatible Low-Level Date
// Algorithms" (eras of 400 years, March-based years).
void CivilFromDays(int64_t z, int64_t* y, int* m, int* d) {
  z += 719468;
  const int64_t era = (z >= 0 ? z : z - 146096) / 146097;
  const int64_t doe = z - era * 146097;                                       // [0, 146096]
  const int64_t yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;  // [0, 399]
  const int64_t doy = doe - (365 * yoe + yoe / 4 - yoe / 100);                // [0, 365]
  const int64_t mp = (5 * doy + 2) / 153;                                     // [0, 11]
  *d = static_cast<int>(doy - (153 * mp + 2) / 5 + 1);
  *m = static_cast<int>(mp < 10 ? mp + 3 : mp - 9);
  *y = yoe + era * 400 + (*m <= 2 ? 1 : 0);
}

char* TwoDigits(char* p, int v) {
  p[0] = static_cast<char>('0' + v / 10);
  p[1] = static_cast<char>('0' + v % 10);
  return p + 2;
}

// t_ns as ISO-8601 UTC, YYYY-MM-DDTHH:MM:SS[.fraction]Z with the fraction's
// trailing zeros dropped (absl's "%Y-%m-%dT%H:%M:%E*SZ", which this replaced
// on the per-row path: it returns a new string per call). Every int64 time
// falls in the years 1677..2262, so the year always has four digits.
void AppendUtcTime(int64_t t_ns, std::string* out) {
  constexpr int64_t kNs = 1000000000;
  int64_t secs = t_ns / kNs;
  int64_t nanos = t_ns % kNs;
  if (nanos < 0) {  // floor, not truncation, before the epoch
    nanos += kNs;
    --secs;
  }
  int64_t days = secs / 86400;
  int64_t sod = secs % 86400;
  if (sod < 0) {
    sod += 86400;
    --days;
  }
  int64_t year;
  int month, day;
  CivilFromDays(days, &year, &month, &day);
  char buf[40];
  char* p = buf;
  const int y = static_cast<int>(year);
  p = TwoDigits(TwoDigits(p, y / 100), y % 100);
  *p++ = '-';
  p = TwoDigits(p, month);
  *p++ = '-';
  p = TwoDigits(p, day);
  *p++ = 'T';
  p = TwoDigits(p, static_cast<int>(sod / 3600));
  *p++ = ':';
  p = TwoDigits(p, static_cast<int>(sod / 60 % 60));
  *p++ = ':';
  p = TwoDigits(p, static_cast<int>(sod % 60));
  if (nanos != 0) {
    *p++ = '.';
    int digits = 9;
    while (nanos % 10 == 0) {
      nanos /= 10;
      --digits;
    }
    for (int i = digits - 1; i >= 0; --i) {
      p[i] = static_cast<char>('0' + nanos % 10);
      nanos /= 10;
    }
    p += digits;
  }
  *p++ = 'Z';
  out->append(buf, static_cast<size_t>(p - buf));
}

void AppendField(absl::string_view s, std::string* out) {
  if (s.find_first_of(",\"\r\n") == absl::string_view::npos) {
    out->append(s.data(), s.size());
    return;
  }
  out->push_back('"');
  for (char c : s) {
    if (c == '"') out->push_back('"');
    out->push_back(c);
  }
  out->push_back('"');
}

}  // namespace

std::string UpdateCsvHeader(absl::Span<const int> horizons, absl::Span<const double> levels) {
  std::string h = "symbol,time,r,mu,eps,var,z,var_next,vol_ann";
  for (int k : horizons) absl::StrAppend(&h, ",var_h_", k);
  for (double l : levels) {
    const std::string key = LevelKey(l);
    absl::StrAppend(&h, ",value_at_risk_", key, ",es_", key);
  }
  h += ",scale,ver,flags\n";
  return h;
}

absl::Status AppendUpdateCsvRow(const BarUpdate& u, std::string* out) {
  if (u.n_horizons < 0 || u.n_horizons > kMaxHorizons || u.n_levels < 0 ||
      u.n_levels > kMaxRiskLevels) {
    return absl::InvalidArgumentError(
        absl::StrCat("update for ", u.symbol.view(), ": horizon or level count out of range"));
  }
  AppendField(u.symbol.view(), out);
  out->push_back(',');
  AppendUtcTime(u.t_ns, out);
  for (double v : {u.r, u.mu, u.eps, u.var, u.z, u.var_next, u.vol_ann}) {
    out->push_back(',');
    internal::AppendShortestDouble(out, v);
  }
  for (int i = 0; i < u.n_horizons; ++i) {
    out->push_back(',');
    internal::AppendShortestDouble(out, u.var_h[i]);
  }
  for (int i = 0; i < u.n_levels; ++i) {
    out->push_back(',');
    internal::AppendShortestDouble(out, u.var_risk[i]);
    out->push_back(',');
    internal::AppendShortestDouble(out, u.es[i]);
  }
  out->push_back(',');
  internal::AppendShortestDouble(out, u.scale);
  out->push_back(',');
  char ver[16];
  out->append(ver, std::to_chars(ver, ver + sizeof(ver), u.ver).ptr);
  out->push_back(',');
  bool first = true;
  for (int bit = 0; bit < kNumUpdateFlags; ++bit) {
    if (!(u.flags & (1u << bit))) continue;
    if (!first) out->push_back('|');
    first = false;
    const absl::string_view name = FlagName(bit);
    out->append(name.data(), name.size());
  }
  out->push_back('\n');
  return absl::OkStatus();
}

absl::StatusOr<std::unique_ptr<UpdateCsvSink>> UpdateCsvSink::Open(const std::string& path,
                                                                   const std::string& header,
                                                                   UpdateSink* json_lines) {
  std::FILE* f = path == "-" ? stdout : std::fopen(path.c_str(), "wb");
  if (f == nullptr) {
    return absl::NotFoundError(
        absl::StrCat("cannot open '", path, "' for writing: ", std::strerror(errno)));
  }
  std::unique_ptr<UpdateCsvSink> sink(
      new UpdateCsvSink(f, path != "-", path == "-" ? "standard output" : path, json_lines));
  sink->buffer_ = header;
  return sink;
}

UpdateCsvSink::UpdateCsvSink(std::FILE* f, bool owned, std::string path, UpdateSink* json_lines)
    : file_(f), owned_(owned), path_(std::move(path)), json_lines_(json_lines) {
  buffer_.reserve(kCsvBufferBytes + 4096);
}

UpdateCsvSink::~UpdateCsvSink() {
  Flush().IgnoreError();
  if (owned_) std::fclose(file_);
}

bool UpdateCsvSink::Send(absl::string_view topic, absl::string_view body) {
  if (!absl::StartsWith(topic, "u.")) return true;
  BarUpdate u;
  if (!DecodeUpdateBinary(body, &u).ok()) return false;
  if (!AppendUpdateCsvRow(u, &buffer_).ok()) return false;
  ++rows_;
  if (json_lines_ != nullptr) {
    if (!EncodeUpdateJson(u, &json_).ok()) return false;
    if (!json_lines_->Send(topic, json_)) return false;
  }
  if (buffer_.size() >= kCsvBufferBytes) {
    if (std::fwrite(buffer_.data(), 1, buffer_.size(), file_) != buffer_.size()) failed_ = true;
    buffer_.clear();
  }
  return true;
}

absl::Status UpdateCsvSink::Flush() {
  if (!buffer_.empty()) {
    if (std::fwrite(buffer_.data(), 1, buffer_.size(), file_) != buffer_.size()) failed_ = true;
    buffer_.clear();
  }
  if (std::fflush(file_) != 0) failed_ = true;
  absl::Status js = json_lines_ != nullptr ? json_lines_->Flush() : absl::OkStatus();
  if (failed_) return absl::DataLossError(absl::StrCat("write to '", path_, "' failed"));
  return js;
}

}  // namespace aftershock
