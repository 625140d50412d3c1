// Reading a single return series from text: a CSV file with a header row, or one
// number a line. Used by `aftershock fit` and the tests.
//
// Thread-safety: free functions.
#ifndef AFTERSHOCK_SERIES_FILE_H_
#define AFTERSHOCK_SERIES_FILE_H_

#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"

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

}  // namespace aftershock

#endif  // AFTERSHOCK_SERIES_FILE_H_
