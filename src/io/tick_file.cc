#include "aftershock/tick_file.h"

#include <cerrno>
#include <charconv>
#include <system_error>
#include <cmath>
#include <fstream>
#include <limits>
#include <sstream>
#include <tuple>

#include "absl/strings/ascii.h"
#include "absl/strings/str_cat.h"
#include "absl/time/civil_time.h"
#include "absl/time/time.h"

namespace aftershock {
namespace {

// Latest tick time a file may carry (2^62 ns, early 2116, as the bar builder).
constexpr int64_t kMaxBarTimeNsForFile = int64_t{1} << 62;

bool Digits(absl::string_view s, size_t pos, size_t n, int* out) {
  if (pos + n > s.size()) return false;
  int v = 0;
  for (size_t i = pos; i < pos + n; ++i) {
    if (s[i] < '0' || s[i] > '9') return false;
    v = v * 10 + (s[i] - '0');
  }
  *out = v;
  return true;
}

bool IsLeap(int y) { return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0; }

int DaysInMonth(int y, int m) {
  static constexpr int kDays[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return m == 2 && IsLeap(y) ? 29 : kDays[m - 1];
}

// ISO-8601 "YYYY-MM-DDTHH:MM:SS[.f{1,9}](Z|+hh:mm|-hh:mm)"; false if malformed.
bool ParseIso(absl::string_view s, int64_t* ns) {
  int y, mo, d, h, mi, sec;
  if (!Digits(s, 0, 4, &y) || s.size() < 19 || s[4] != '-' || !Digits(s, 5, 2, &mo) ||
      s[7] != '-' || !Digits(s, 8, 2, &d) || (s[10] != 'T' && s[10] != ' ') ||
      !Digits(s, 11, 2, &h) || s[13] != ':' || !Digits(s, 14, 2, &mi) || s[16] != ':' ||
      !Digits(s, 17, 2, &sec)) {
    return false;
  }
  if (y < 1970 || y > 2261 || mo < 1 || mo > 12 || d < 1 || d > DaysInMonth(y, mo) || h > 23 ||
      mi > 59 || sec > 59) {
    return false;
  }
  size_t pos = 19;
  int64_t frac = 0;
  if (pos < s.size() && s[pos] == '.') {
    ++pos;
    int n = 0;
    while (pos < s.size() && s[pos] >= '0' && s[pos] <= '9' && n < 10) {
      frac = frac * 10 + (s[pos] - '0');
      ++pos;
      ++n;
    }
    if (n == 0 || n > 9) return false;
    for (int i = n; i < 9; ++i) frac *= 10;
  }
  int offset_minutes = 0;
  if (pos < s.size() && s[pos] == 'Z') {
    ++pos;
  } else if (pos < s.size() && (s[pos] == '+' || s[pos] == '-')) {
    const int sign = s[pos] == '-' ? -1 : 1;
    int oh, om;
    if (!Digits(s, pos + 1, 2, &oh) || pos + 3 >= s.size() || s[pos + 3] != ':' ||
        !Digits(s, pos + 4, 2, &om) || oh > 23 || om > 59) {
      return false;
    }
    offset_minutes = sign * (oh * 60 + om);
    pos += 6;
  } else {
    return false;  // the zone must be explicit
  }
  if (pos != s.size()) return false;
  const absl::Time t =
      absl::FromCivil(absl::CivilSecond(y, mo, d, h, mi, sec), absl::UTCTimeZone());
  const int64_t secs = absl::ToUnixSeconds(t) - int64_t{offset_minutes} * 60;
  // 2261-12-31T23:59:59 + 23:59 of offset still fits in int64 ns.
  if (secs < 0) return false;
  *ns = secs * 1000000000 + frac;
  return true;
}

// Splits on commas into at most `max` fields; returns the number of fields
// (max + 1 when there are more).
int Split(absl::string_view line, absl::string_view* fields, int max) {
  int n = 0;
  size_t start = 0;
  while (true) {
    const size_t comma = line.find(',', start);
    const absl::string_view f = line.substr(
        start, comma == absl::string_view::npos ? absl::string_view::npos : comma - start);
    if (n < max) fields[n] = absl::StripAsciiWhitespace(f);
    ++n;
    if (comma == absl::string_view::npos || n > max) break;
    start = comma + 1;
  }
  return n;
}

constexpr int kMaxColumns = 64;

bool ParseNumber(absl::string_view f, double* v) {
  const auto res = std::from_chars(f.data(), f.data() + f.size(), *v);
  return !f.empty() && res.ec == std::errc() && res.ptr == f.data() + f.size();
}

// Plausible dates for auto-detection, in seconds since the epoch:
// 1971-01-01T00:00:00Z and 2200-01-01T00:00:00Z (Python:
// datetime(1971,1,1,tzinfo=timezone.utc).timestamp() = 31536000 and
// datetime(2200,1,1,tzinfo=timezone.utc).timestamp() = 7258118400).
constexpr double kPlausibleFromS = 31536000.0;
constexpr double kPlausibleToS = 7258118400.0;

double UnitPerSecond(TimeUnit u) {
  switch (u) {
    case TimeUnit::kSeconds: return 1.0;
    case TimeUnit::kMillis: return 1e3;
    case TimeUnit::kMicros: return 1e6;
    case TimeUnit::kNanos:
    case TimeUnit::kAuto: break;
  }
  return 1e9;
}

int64_t NanosPerUnit(TimeUnit u) {
  switch (u) {
    case TimeUnit::kSeconds: return 1000000000;
    case TimeUnit::kMillis: return 1000000;
    case TimeUnit::kMicros: return 1000;
    case TimeUnit::kNanos:
    case TimeUnit::kAuto: break;
  }
  return 1;
}

bool IsNumericTime(absl::string_view t) {
  // A loop rather than find_first_not_of: that builds its character table on
  // every call (about 235 instructions; three calls a line).
  if (t.empty() || t[0] == '.') return false;
  for (const char c : t) {
    if ((c < '0' || c > '9') && c != '.') return false;
  }
  return true;
}

// Our column names and where the reader keeps their index.
constexpr const char* kOurColumns[] = {"symbol", "time", "price", "return",
                                       "bid",    "ask",  "rv",    "size"};

}  // namespace

absl::string_view TimeUnitName(TimeUnit unit) {
  switch (unit) {
    case TimeUnit::kAuto: return "auto";
    case TimeUnit::kSeconds: return "s";
    case TimeUnit::kMillis: return "ms";
    case TimeUnit::kMicros: return "us";
    case TimeUnit::kNanos: return "ns";
  }
  return "?";
}

absl::StatusOr<TimeUnit> ParseTimeUnit(absl::string_view name) {
  for (TimeUnit u : {TimeUnit::kAuto, TimeUnit::kSeconds, TimeUnit::kMillis, TimeUnit::kMicros,
                     TimeUnit::kNanos}) {
    if (name == TimeUnitName(u)) return u;
  }
  return absl::InvalidArgumentError(
      absl::StrCat("time unit must be auto, s, ms, us or ns, got '", name, "'"));
}

absl::StatusOr<std::vector<std::pair<std::string, std::string>>> ParseColumnNames(
    absl::string_view text) {
  std::vector<std::pair<std::string, std::string>> out;
  if (absl::StripAsciiWhitespace(text).empty()) return out;
  size_t start = 0;
  while (start <= text.size()) {
    const size_t comma = text.find(',', start);
    const absl::string_view part = absl::StripAsciiWhitespace(text.substr(
        start, comma == absl::string_view::npos ? absl::string_view::npos : comma - start));
    const size_t eq = part.find('=');
    const absl::string_view ours =
        eq == absl::string_view::npos ? part : absl::StripAsciiWhitespace(part.substr(0, eq));
    const absl::string_view theirs =
        eq == absl::string_view::npos ? absl::string_view()
                                      : absl::StripAsciiWhitespace(part.substr(eq + 1));
    bool known = false;
    for (const char* c : kOurColumns) known = known || ours == c;
    if (eq == absl::string_view::npos || theirs.empty() || !known) {
      return absl::InvalidArgumentError(absl::StrCat(
          "columns: expected OURS=THEIRS pairs such as time=ts,price=last with OURS one of "
          "symbol, time, price, return, bid, ask, rv, size; got '",
          part, "'"));
    }
    for (const auto& [o, t] : out) {
      if (o == ours) {
        return absl::InvalidArgumentError(absl::StrCat("columns: '", ours, "' mapped twice"));
      }
    }
    out.emplace_back(std::string(ours), std::string(theirs));
    if (comma == absl::string_view::npos) break;
    start = comma + 1;
  }
  return out;
}

absl::StatusOr<int64_t> NumericTimeToNs(absl::string_view text, TimeUnit unit) {
  const auto bad = [&](absl::string_view why) {
    return absl::InvalidArgumentError(
        absl::StrCat("cannot parse '", text, "' as ", TimeUnitName(unit), " since the epoch",
                     why.empty() ? "" : " (", why, why.empty() ? "" : ")"));
  };
  if (!IsNumericTime(text)) return bad("");
  const size_t dot = text.find('.');
  const absl::string_view whole = text.substr(0, dot);
  const absl::string_view frac =
      dot == absl::string_view::npos ? absl::string_view() : text.substr(dot + 1);
  if (frac.find('.') != absl::string_view::npos) return bad("");
  if (dot != absl::string_view::npos && unit == TimeUnit::kNanos) {
    return bad("nanoseconds have no fraction");
  }
  int64_t w = 0;
  const auto res = std::from_chars(whole.data(), whole.data() + whole.size(), w);
  if (res.ec != std::errc() || res.ptr != whole.data() + whole.size()) return bad("out of range");
  const int64_t per = NanosPerUnit(unit);
  if (w > kMaxBarTimeNsForFile / per) return bad("out of range");
  // The fraction, to ns, truncated beyond the ns digit.
  int64_t f_ns = 0;
  int64_t scale = per;
  for (char c : frac) {
    scale /= 10;
    f_ns += (c - '0') * scale;
    if (scale == 0) break;
  }
  return w * per + f_ns;
}

absl::StatusOr<TimeUnit> DetectTimeUnit(absl::string_view text) {
  if (IsNumericTime(text)) {
    double v = 0;
    const auto res = std::from_chars(text.data(), text.data() + text.size(), v);
    if (res.ec == std::errc()) {
      for (TimeUnit u : {TimeUnit::kSeconds, TimeUnit::kMillis, TimeUnit::kMicros,
                         TimeUnit::kNanos}) {
        const double k = UnitPerSecond(u);
        if (v >= kPlausibleFromS * k && v < kPlausibleToS * k) return u;
      }
    }
  }
  return absl::InvalidArgumentError(
      absl::StrCat("'", text,
                   "' is not a date between 1971 and 2200 in s, ms, us or ns since the epoch; "
                   "give the unit (--time-unit) if the times are right"));
}

absl::StatusOr<int64_t> ParseTickTime(absl::string_view text) {
  int64_t ns = 0;
  bool ok = false;
  if (!text.empty() && text.find_first_not_of("0123456789") == absl::string_view::npos) {
    const auto res = std::from_chars(text.data(), text.data() + text.size(), ns);
    ok = res.ec == std::errc() && res.ptr == text.data() + text.size();
  } else {
    ok = ParseIso(text, &ns);
  }
  if (!ok) return absl::InvalidArgumentError(absl::StrCat("cannot parse '", text, "'"));
  return ns;
}

TickFileReader::TickFileReader(std::unique_ptr<std::istream> in, std::string name,
                               const TickFileOptions& options)
    : in_(std::move(in)), name_(std::move(name)), options_(options) {}

absl::StatusOr<std::unique_ptr<TickFileReader>> TickFileReader::Open(
    const std::string& path, const TickFileOptions& options) {
  auto in = std::make_unique<std::ifstream>(path, std::ios::binary);
  if (!*in) {
    return absl::NotFoundError(absl::StrCat("cannot open the tick file '", path, "': ",
                                            std::error_code(errno, std::generic_category()).message()));
  }
  std::unique_ptr<TickFileReader> r(new TickFileReader(std::move(in), path, options));
  if (absl::Status s = r->ReadHeader(); !s.ok()) return s;
  return r;
}

absl::StatusOr<std::unique_ptr<TickFileReader>> TickFileReader::FromString(
    std::string content, const std::string& name, const TickFileOptions& options) {
  auto in = std::make_unique<std::istringstream>(std::move(content));
  std::unique_ptr<TickFileReader> r(new TickFileReader(std::move(in), name, options));
  if (absl::Status s = r->ReadHeader(); !s.ok()) return s;
  return r;
}

bool TickFileReader::ReadLine(std::string* line) {
  while (std::getline(*in_, *line)) {
    ++line_number_;
    bytes_read_ += static_cast<int64_t>(line->size()) + 1;  // the '\n' getline dropped
    if (!line->empty() && line->back() == '\r') line->pop_back();
    const absl::string_view t = absl::StripAsciiWhitespace(*line);
    if (t.empty() || t[0] == '#') continue;
    return true;
  }
  return false;
}

absl::Status TickFileReader::ReadHeader() {
  if (!ReadLine(&line_)) {
    return absl::InvalidArgumentError(
        absl::StrCat(name_, ": empty file (expected a header like symbol,time,price)"));
  }
  const auto err = [&](absl::string_view msg) {
    return absl::InvalidArgumentError(absl::StrCat(name_, ":", line_number_, ": header: ", msg));
  };
  absl::string_view fields[kMaxColumns];
  const int n = Split(line_, fields, kMaxColumns);
  if (n > kMaxColumns) return err(absl::StrCat("at most ", kMaxColumns, " columns"));
  // A file's own name for one of our columns (TickFileOptions::column_names).
  const auto ours_for = [&](absl::string_view f) -> absl::string_view {
    for (const auto& [ours, theirs] : options_.column_names) {
      if (theirs == f) return ours;
    }
    for (const auto& [ours, theirs] : options_.column_names) {
      if (ours == f) return absl::string_view();  // our name, mapped elsewhere: not ours here
    }
    return f;
  };
  bool has_price = false;
  for (int i = 0; i < n; ++i) {
    int* col = nullptr;
    const absl::string_view f = ours_for(fields[i]);
    if (f == "symbol") {
      col = &symbol_col_;
    } else if (f == "time") {
      col = &time_col_;
    } else if (f == "price" || f == "return") {
      if (value_col_ >= 0) return err("needs exactly one of the columns price or return");
      has_price = f == "price";
      col = &value_col_;
    } else if (f == "bid") {
      col = &bid_col_;
    } else if (f == "ask") {
      col = &ask_col_;
    } else if (f == "rv") {
      col = &rv_col_;
    } else if (f == "size") {
      col = &size_col_;
    } else {
      ignored_columns_.emplace_back(fields[i]);
      continue;
    }
    if (*col >= 0) return err(absl::StrCat("column '", f, "' given twice"));
    *col = i;
  }
  for (const auto& [ours, theirs] : options_.column_names) {
    bool found = false;
    for (int i = 0; i < n; ++i) found = found || fields[i] == theirs;
    if (!found) return err(absl::StrCat("no column '", theirs, "' (mapped to ", ours, ")"));
  }
  if (symbol_col_ < 0) return err("needs a symbol column");
  if (time_col_ < 0) return err("needs a time column");
  if ((bid_col_ >= 0) != (ask_col_ >= 0)) return err("bid and ask come together");
  if (value_col_ >= 0 && bid_col_ >= 0) {
    return err("needs exactly one of the columns price or return, or the pair bid and ask");
  }
  if (value_col_ < 0 && bid_col_ < 0) {
    return err("needs exactly one of the columns price or return, or the pair bid and ask");
  }
  if (bid_col_ >= 0) has_price = true;
  time_unit_ = options_.time_unit;
  kind_ = has_price ? Tick::kPrice : Tick::kReturn;
  n_cols_ = n;
  return absl::OkStatus();
}

absl::StatusOr<int64_t> TickFileReader::ParseTime(absl::string_view field) {
  if (!IsNumericTime(field)) return ParseTickTime(field);  // ISO (or an error)
  if (options_.time_unit != TimeUnit::kAuto) return NumericTimeToNs(field, options_.time_unit);
  if (time_unit_ != TimeUnit::kAuto) {
    // The file's unit is known. A time well inside the plausible dates read
    // in that unit is what DetectTimeUnit would find (the units' ranges are
    // 1000 times apart and span a factor of 230, and the margins leave the
    // rounding of its double compare far away), so the check below, which
    // parses the number again as a double, is needed only near the edges or
    // on an error. With the loop in IsNumericTime: ParseTime 1,620 -> 800
    // instructions a line under callgrind, a whole line 3,050 -> 2,220.
    constexpr double kFromNs = kPlausibleFromS * 1e9 * 1.001;
    constexpr double kToNs = kPlausibleToS * 1e9 * 0.999;
    auto ns = NumericTimeToNs(field, time_unit_);
    if (ns.ok() && static_cast<double>(*ns) > kFromNs && static_cast<double>(*ns) < kToNs) {
      return ns;
    }
  }
  auto unit = DetectTimeUnit(field);
  if (!unit.ok()) return unit.status();
  if (time_unit_ == TimeUnit::kAuto) {
    time_unit_ = *unit;
  } else if (*unit != time_unit_) {
    return absl::InvalidArgumentError(absl::StrCat("'", field, "' reads as ", TimeUnitName(*unit),
                                                   " but the file's times are in ",
                                                   TimeUnitName(time_unit_)));
  }
  return NumericTimeToNs(field, time_unit_);
}

absl::Status TickFileReader::ParseLine(absl::string_view line, Tick* tick) {
  if (line.size() > options_.max_line_bytes) {
    return absl::InvalidArgumentError(
        absl::StrCat("line longer than ", options_.max_line_bytes, " bytes"));
  }
  absl::string_view f[kMaxColumns];
  const int n = Split(line, f, n_cols_);
  if (n != n_cols_) {
    return absl::InvalidArgumentError(absl::StrCat("expected ", n_cols_, " fields, got ",
                                                   n > n_cols_ ? "more" : std::to_string(n)));
  }
  const absl::string_view sym = f[symbol_col_];
  if (!IsValidSymbol(sym)) {
    return absl::InvalidArgumentError(
        absl::StrCat("symbol: '", sym, "' is not 1-32 characters of A-Z a-z 0-9 . _ : -"));
  }
  auto t = ParseTime(f[time_col_]);
  if (!t.ok()) return absl::InvalidArgumentError(absl::StrCat("time: ", t.status().message()));
  double value = 0;
  if (bid_col_ >= 0) {
    double bid = 0, ask = 0;
    for (const auto& [name, col, out] : {std::tuple<const char*, int, double*>{"bid", bid_col_, &bid},
                                         {"ask", ask_col_, &ask}}) {
      if (!ParseNumber(f[col], out) || !std::isfinite(*out) || *out <= 0) {
        return absl::InvalidArgumentError(
            absl::StrCat(name, ": expected a finite number > 0, got '", f[col], "'"));
      }
    }
    if (ask < bid) {
      return absl::InvalidArgumentError(
          absl::StrCat("crossed quote: ask ", f[ask_col_], " below bid ", f[bid_col_]));
    }
    value = 0.5 * bid + 0.5 * ask;  // no overflow for any pair of finite doubles
  } else {
    const char* value_name = kind_ == Tick::kPrice ? "price" : "return";
    if (!ParseNumber(f[value_col_], &value) || !std::isfinite(value)) {
      return absl::InvalidArgumentError(
          absl::StrCat(value_name, ": expected a finite number, got '", f[value_col_], "'"));
    }
    if (kind_ == Tick::kPrice && value <= 0) {
      return absl::InvalidArgumentError(
          absl::StrCat("price: must be > 0, got '", f[value_col_], "'"));
    }
  }
  double rv = std::numeric_limits<double>::quiet_NaN();
  if (rv_col_ >= 0 && !f[rv_col_].empty()) {
    if (!ParseNumber(f[rv_col_], &rv) || !std::isfinite(rv) || rv < 0) {
      return absl::InvalidArgumentError(
          absl::StrCat("rv: expected a finite number >= 0 or nothing, got '", f[rv_col_], "'"));
    }
  }
  double size = 0;
  if (size_col_ >= 0 && !f[size_col_].empty()) {
    if (!ParseNumber(f[size_col_], &size) || !std::isfinite(size) || size < 0) {
      return absl::InvalidArgumentError(
          absl::StrCat("size: expected a finite number >= 0 or nothing, got '", f[size_col_], "'"));
    }
  }
  tick->symbol.assign(sym);
  tick->t_ns = *t;
  tick->kind = kind_;
  tick->value = value;
  tick->rv = rv;
  tick->size = size;
  return absl::OkStatus();
}

bool TickFileReader::Next(Tick* tick) {
  if (done_) return false;
  while (ReadLine(&line_)) {
    const absl::Status s = ParseLine(line_, tick);
    if (s.ok()) {
      ++good_lines_;
      return true;
    }
    ++bad_lines_;
    std::string msg = absl::StrCat(name_, ":", line_number_, ": ", s.message());
    if (options_.stop_at_first_error) {
      status_ = absl::InvalidArgumentError(msg);
      done_ = true;
      return false;
    }
    if (errors_.size() < static_cast<size_t>(kMaxKeptErrors)) errors_.push_back(std::move(msg));
  }
  done_ = true;
  if (in_->bad()) {
    status_ = absl::DataLossError(absl::StrCat(name_, ": read error after line ", line_number_));
  } else if (good_lines_ == 0 && bad_lines_ > 0) {
    status_ = absl::InvalidArgumentError(
        absl::StrCat(name_, ": no line could be read (", bad_lines_,
                     " bad lines); first error: ", errors_.empty() ? "" : errors_[0]));
  }
  return false;
}

}  // namespace aftershock
