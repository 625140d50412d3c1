// Reading a single return series from text: a CSV file with a header row, or one
// number a line, or one instrument's bar returns from a tick file. Used by
// `aftershock fit` and the tests.
//
// Thread-safety: free functions.
#ifndef AFTERSHOCK_SERIES_FILE_H_
#define AFTERSHOCK_SERIES_FILE_H_

#include <cstdint>
#include <string>
#include <utility>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/bar_builder.h"
#include "aftershock/tick_file.h"

namespace aftershock {

struct Series {
  std::vector<double> values;
  std::string column;  // the column read ("" for one number a line)
};

// Parses `text`. If the first non-blank line has a field that is not a number,
// it is the header: `column` selects a column by name, or (empty) the first
// column whose first data value is numeric. Otherwise every line holds one
// number (`column` must then be empty). Blank lines are skipped. Errors name the
// source and line, e.g. "data.csv:17: column 'ret': 'nan' is not a finite number".
absl::StatusOr<Series> ParseSeries(absl::string_view text, absl::string_view source_name,
                                   absl::string_view column = "");

// Reads and parses a file ("-" reads standard input).
absl::StatusOr<Series> ReadSeriesFile(const std::string& path, absl::string_view column = "");

// Reads a whole file ("-" = standard input); NotFound with the OS reason.
absl::StatusOr<std::string> ReadTextFile(const std::string& path);

// True when the first header line of `text` names a `symbol` column (after
// `column_names` mapping): a tick file, which ReturnsFromTicks reads.
bool LooksLikeTickFile(absl::string_view text,
                       const std::vector<std::pair<std::string, std::string>>& column_names = {});

// How ReturnsFromTicks turns one instrument's ticks into a return series.
struct TickSeriesOptions {
  std::string symbol;        // the instrument to read; required
  int64_t interval_ns = 0;   // bar length (bar_builder.h); 0 = one bar per tick; default 0
  SessionWindow session;     // trading session; default none
  double scale = 1.0;        // returns are multiplied by this (100 = per cent); default 1
  TickFileOptions file;      // time unit and column names of the tick file
};

// The bar returns of `options.symbol` in a tick file (tick_file.h format),
// built by the same bar builder as replay: price ticks give log returns of bar
// closes, return ticks their sums per bar; the first bar of each session has
// no return. InvalidArgument when the symbol is empty (listing the file's
// symbols), absent, or has fewer than two returns.
absl::StatusOr<Series> ReturnsFromTicks(std::string text, const std::string& source_name,
                                        const TickSeriesOptions& options);

// Log returns log(p_t / p_{t-1}) of a price series, times `scale`.
// InvalidArgument when a price is not > 0 or fewer than two prices are given.
absl::StatusOr<std::vector<double>> LogReturnsOfPrices(const std::vector<double>& prices,
                                                       double scale);

}  // namespace aftershock

#endif  // AFTERSHOCK_SERIES_FILE_H_
