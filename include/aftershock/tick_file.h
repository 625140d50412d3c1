// TickFileReader: streaming reader of tick CSV files for replay (PRODUCT.md C8).
//
// Format: a header line naming the columns, then one tick per line.
//   symbol,time,price            price ticks
//   symbol,time,return           log-return ticks
//   symbol,time,return,rv        with the interval's realized variance
//   symbol,time,bid,ask          quotes: the price is the mid, (bid + ask) / 2
// Columns may appear in any order; `symbol`, `time` and exactly one of
// `price` / `return` / the pair `bid` and `ask` are required; `rv` and `size`
// are optional (an empty rv field means "not given"). Other columns are
// ignored (ignored_columns() lists them), and TickFileOptions::column_names
// maps a file's own header names onto ours (e.g. time from "ts"). Fields are
// plain (no quoting; symbols cannot hold commas). Blank lines and lines
// starting with '#' are skipped; CRLF is accepted.
// time: ISO-8601 with date and time, "2026-03-02T09:30:00Z" or with a space
//   "2026-03-02 09:30:00Z", optional fraction up to 9 digits
//   ("09:30:00.123456789Z"), and "Z" or a "+hh:mm" / "-hh:mm" offset; or a
//   number since the Unix epoch in the unit of TickFileOptions::time_unit.
//   With the default (auto) the unit is read off the magnitude of the file's
//   first numeric time: a time between 1971-01-01 and 2200-01-01 is in
//   exactly one of s, ms, us and ns (the ranges are three decades apart), and
//   every later numeric time must be plausible in the same unit. A number that
//   is plausible in no unit (e.g. 5, or a date in 1970) is a bad line asking
//   for an explicit unit; with an explicit unit any time >= 0 is taken as given.
//   Seconds, milliseconds and microseconds may carry a decimal fraction.
//
// A quote line with ask < bid, or a non-positive side, is a bad line.
// Thread-safety: a reader is used by one thread at a time.
#ifndef AFTERSHOCK_TICK_FILE_H_
#define AFTERSHOCK_TICK_FILE_H_

#include <cstdint>
#include <istream>
#include <memory>
#include <string>
#include <utility>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/wire.h"

namespace aftershock {

// Unit of numeric tick times.
enum class TimeUnit : uint8_t { kAuto, kSeconds, kMillis, kMicros, kNanos };
// "auto", "s", "ms", "us", "ns".
absl::string_view TimeUnitName(TimeUnit unit);
// Parses one of the names above; InvalidArgument listing them otherwise.
absl::StatusOr<TimeUnit> ParseTimeUnit(absl::string_view name);

struct TickFileOptions {
  bool stop_at_first_error = false;  // true: the first bad line is fatal; default false
  size_t max_line_bytes = 4096;      // longer lines are bad lines; default 4096
  TimeUnit time_unit = TimeUnit::kAuto;  // unit of numeric times; default auto (see above)
  // (our column, the file's header name) pairs: the file's column stands for
  // ours, e.g. {"time", "ts"}, {"price", "last"}. Our names: symbol, time,
  // price, return, bid, ask, rv, size. Default: none (headers use our names).
  std::vector<std::pair<std::string, std::string>> column_names;
};

// Parses "ours=theirs,ours=theirs" (the --columns option) into
// TickFileOptions::column_names; InvalidArgument naming the bad part.
absl::StatusOr<std::vector<std::pair<std::string, std::string>>> ParseColumnNames(
    absl::string_view text);

// A numeric time since the epoch in `unit` (not kAuto) as ns, or
// InvalidArgument (negative, overflow, a fraction with unit ns).
absl::StatusOr<int64_t> NumericTimeToNs(absl::string_view text, TimeUnit unit);
// The unit in which a numeric time is a plausible date (1971-01-01 ..
// 2200-01-01), or InvalidArgument when it is plausible in none.
absl::StatusOr<TimeUnit> DetectTimeUnit(absl::string_view text);

inline constexpr int kMaxKeptErrors = 20;

// Parses an ISO-8601 time as described above, or an integer taken as ns;
// returns ns since the Unix epoch.
absl::StatusOr<int64_t> ParseTickTime(absl::string_view text);

class TickFileReader {
 public:
  // Opens a file; NotFound if it cannot be read. The header is read here:
  // a missing or bad header is InvalidArgument.
  static absl::StatusOr<std::unique_ptr<TickFileReader>> Open(const std::string& path,
                                                              const TickFileOptions& options = {});
  // Reads from an in-memory document (tests, fuzzing); `name` prefixes messages.
  static absl::StatusOr<std::unique_ptr<TickFileReader>> FromString(
      std::string content, const std::string& name, const TickFileOptions& options = {});

  // Reads the next good tick. False at the end or after a fatal error; then
  // status() tells which.
  bool Next(Tick* tick);

  // OK while reading and at a clean end; the error after a fatal error, or
  // when the file ended without one good line but with bad ones.
  const absl::Status& status() const { return status_; }

  int64_t line_number() const { return line_number_; }  // last line read (1-based)
  int64_t bytes_read() const { return bytes_read_; }    // input consumed so far, bytes
  int64_t good_lines() const { return good_lines_; }
  int64_t bad_lines() const { return bad_lines_; }
  const std::vector<std::string>& errors() const { return errors_; }  // first kMaxKeptErrors
  Tick::Kind kind() const { return kind_; }                           // from the header
  bool has_rv() const { return rv_col_ >= 0; }
  // Header names of the columns the reader ignores, in file order.
  const std::vector<std::string>& ignored_columns() const { return ignored_columns_; }
  // The unit of the numeric times (kAuto until the first numeric time of an
  // auto-detecting reader was read; ISO times do not set it).
  TimeUnit time_unit() const { return time_unit_; }

 private:
  TickFileReader(std::unique_ptr<std::istream> in, std::string name,
                 const TickFileOptions& options);
  absl::Status ReadHeader();
  // Parses one data line; on error returns the message without the prefix.
  absl::Status ParseLine(absl::string_view line, Tick* tick);
  absl::StatusOr<int64_t> ParseTime(absl::string_view field);
  bool ReadLine(std::string* line);

  std::unique_ptr<std::istream> in_;
  std::string name_;
  TickFileOptions options_;
  absl::Status status_;
  std::string line_;
  int64_t line_number_ = 0;
  int64_t bytes_read_ = 0;
  int64_t good_lines_ = 0;
  int64_t bad_lines_ = 0;
  std::vector<std::string> errors_;
  Tick::Kind kind_ = Tick::kPrice;
  int n_cols_ = 0;
  int symbol_col_ = -1;
  int time_col_ = -1;
  int value_col_ = -1;
  int rv_col_ = -1;
  int size_col_ = -1;
  int bid_col_ = -1;
  int ask_col_ = -1;
  std::vector<std::string> ignored_columns_;
  TimeUnit time_unit_ = TimeUnit::kAuto;
  bool done_ = false;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_TICK_FILE_H_
