// TickFileReader: streaming reader of tick CSV files for replay (PRODUCT.md C8).
//
// Format: a header line naming the columns, then one tick per line.
//   symbol,time,price            price ticks
//   symbol,time,return           log-return ticks
//   symbol,time,return,rv        with the interval's realized variance
// Columns may appear in any order; `symbol`, `time` and exactly one of
// `price` / `return` are required; `rv` and `size` are optional (an empty rv
// field means "not given"). Fields are plain (no quoting; symbols cannot hold
// commas). Blank lines and lines starting with '#' are skipped; CRLF is accepted.
// time: integer ns since the Unix epoch, or ISO-8601 with date and time,
//   "2026-03-02T09:30:00Z", optional fraction up to 9 digits
//   ("09:30:00.123456789Z"), and "Z" or a "+hh:mm" / "-hh:mm" offset.
//
// Errors carry the file name and line: "ticks.csv:17: time: cannot parse
// '2026-13-40'". By default a bad line is counted, its message kept (the first
// kMaxKeptErrors), and reading continues; with stop_at_first_error the first
// bad line ends the read with that error. A file in which no line parses (but
// some were present) is an error either way.
//
// Thread-safety: a reader is used by one thread at a time.
#ifndef AFTERSHOCK_TICK_FILE_H_
#define AFTERSHOCK_TICK_FILE_H_

#include <cstdint>
#include <istream>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/wire.h"

namespace aftershock {

struct TickFileOptions {
  bool stop_at_first_error = false;  // true: the first bad line is fatal; default false
  size_t max_line_bytes = 4096;      // longer lines are bad lines; default 4096
};

inline constexpr int kMaxKeptErrors = 20;

// Parses a time field as described above; returns ns since the Unix epoch.
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
  int64_t good_lines() const { return good_lines_; }
  int64_t bad_lines() const { return bad_lines_; }
  const std::vector<std::string>& errors() const { return errors_; }  // first kMaxKeptErrors
  Tick::Kind kind() const { return kind_; }                           // from the header
  bool has_rv() const { return rv_col_ >= 0; }

 private:
  TickFileReader(std::unique_ptr<std::istream> in, std::string name,
                 const TickFileOptions& options);
  absl::Status ReadHeader();
  // Parses one data line; on error returns the message without the prefix.
  absl::Status ParseLine(absl::string_view line, Tick* tick) const;
  bool ReadLine(std::string* line);

  std::unique_ptr<std::istream> in_;
  std::string name_;
  TickFileOptions options_;
  absl::Status status_;
  std::string line_;
  int64_t line_number_ = 0;
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
  bool done_ = false;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_TICK_FILE_H_
