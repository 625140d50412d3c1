#include "aftershock/series_file.h"

#include <cmath>
#include <fstream>
#include <iostream>
#include <iterator>
#include <sstream>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "absl/strings/strip.h"

namespace aftershock {
namespace {

std::vector<std::string> SplitFields(absl::string_view line) {
  std::vector<std::string> out;
  for (absl::string_view f : absl::StrSplit(line, ',')) {
    f = absl::StripAsciiWhitespace(f);
    if (f.size() >= 2 && f.front() == '"' && f.back() == '"') f = f.substr(1, f.size() - 2);
    out.emplace_back(f);
  }
  return out;
}

bool ParseNumber(absl::string_view s, double* out) { return absl::SimpleAtod(s, out); }

}  // namespace

absl::StatusOr<Series> ParseSeries(absl::string_view text, absl::string_view source_name,
                                   absl::string_view column) {
  Series series;
  int line_no = 0;
  int col = -1;          // selected column; -1 = not decided yet
  bool header_seen = false;
  bool one_per_line = false;
  std::vector<std::string> header;
  for (absl::string_view raw : absl::StrSplit(text, '\n')) {
    ++line_no;
    absl::string_view line = absl::StripAsciiWhitespace(raw);
    if (line.empty()) continue;
    std::vector<std::string> fields = SplitFields(line);
    if (!header_seen && !one_per_line) {
      bool all_numeric = true;
      double tmp;
      for (const auto& f : fields) all_numeric = all_numeric && ParseNumber(f, &tmp);
      // A lone "nan"/"inf" token parses as a number too; one per line is then
      // assumed and the value check below reports it.
      if (all_numeric) {
        if (!column.empty()) {
          return absl::InvalidArgumentError(absl::StrCat(
              source_name, ": no header row, so column '", column, "' cannot be selected"));
        }
        if (fields.size() != 1) {
          return absl::InvalidArgumentError(absl::StrCat(
              source_name, ":", line_no, ": expected one number a line or a CSV header, got ",
              fields.size(), " fields"));
        }
        one_per_line = true;
        col = 0;
      } else {
        header = fields;
        header_seen = true;
        if (!column.empty()) {
          for (size_t i = 0; i < header.size(); ++i) {
            if (header[i] == column) col = static_cast<int>(i);
          }
          if (col < 0) {
            return absl::InvalidArgumentError(absl::StrCat(source_name, ":", line_no,
                                                           ": no column named '", column, "'"));
          }
        }
        continue;
      }
    }
    if (header_seen && col < 0) {  // first data row decides the default column
      double tmp;
      for (size_t i = 0; i < fields.size() && col < 0; ++i) {
        if (ParseNumber(fields[i], &tmp) && std::isfinite(tmp)) col = static_cast<int>(i);
      }
      if (col < 0) {
        return absl::InvalidArgumentError(absl::StrCat(
            source_name, ":", line_no, ": no numeric column in the first data row"));
      }
    }
    const std::string col_label =
        header_seen ? absl::StrCat("column '", header[col], "': ") : std::string();
    if (col >= static_cast<int>(fields.size())) {
      return absl::InvalidArgumentError(absl::StrCat(source_name, ":", line_no, ": ", col_label,
                                                     "missing (only ", fields.size(),
                                                     " fields)"));
    }
    double v;
    if (!ParseNumber(fields[col], &v)) {
      return absl::InvalidArgumentError(absl::StrCat(source_name, ":", line_no, ": ", col_label,
                                                     "'", fields[col], "' is not a number"));
    }
    if (!std::isfinite(v)) {
      return absl::InvalidArgumentError(absl::StrCat(source_name, ":", line_no, ": ", col_label,
                                                     "'", fields[col],
                                                     "' is not a finite number"));
    }
    series.values.push_back(v);
  }
  if (series.values.empty()) {
    return absl::InvalidArgumentError(absl::StrCat(source_name, ": no data rows"));
  }
  if (header_seen) series.column = header[col];
  return series;
}

absl::StatusOr<Series> ReadSeriesFile(const std::string& path, absl::string_view column) {
  std::string text;
  if (path == "-") {
    text.assign(std::istreambuf_iterator<char>(std::cin), std::istreambuf_iterator<char>());
  } else {
    std::ifstream f(path, std::ios::binary);
    if (!f) return absl::NotFoundError(absl::StrCat("cannot open '", path, "'"));
    std::stringstream ss;
    ss << f.rdbuf();
    text = ss.str();
  }
  return ParseSeries(text, path == "-" ? "stdin" : path, column);
}

}  // namespace aftershock
