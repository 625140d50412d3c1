#include "aftershock/series_file.h"

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <system_error>
#include <fstream>
#include <iostream>
#include <iterator>
#include <sstream>

#include "absl/container/flat_hash_set.h"
#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
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

absl::StatusOr<std::string> ReadTextFile(const std::string& path) {
  std::string text;
  if (path == "-") {
    text.assign(std::istreambuf_iterator<char>(std::cin), std::istreambuf_iterator<char>());
    return text;
  }
  std::ifstream f(path, std::ios::binary);
  if (!f) {
    return absl::NotFoundError(absl::StrCat(
        "cannot open '", path, "': ", std::error_code(errno, std::generic_category()).message()));
  }
  std::stringstream ss;
  ss << f.rdbuf();
  return std::move(ss).str();
}

absl::StatusOr<Series> ReadSeriesFile(const std::string& path, absl::string_view column) {
  auto text = ReadTextFile(path);
  if (!text.ok()) return text.status();
  return ParseSeries(*text, path == "-" ? "stdin" : path, column);
}

bool LooksLikeTickFile(absl::string_view text,
                       const std::vector<std::pair<std::string, std::string>>& column_names) {
  for (absl::string_view raw : absl::StrSplit(text, '\n')) {
    const absl::string_view line = absl::StripAsciiWhitespace(raw);
    if (line.empty() || line[0] == '#') continue;
    for (const std::string& f : SplitFields(line)) {
      std::string ours = f;
      for (const auto& [o, theirs] : column_names) {
        if (theirs == f) ours = o;
      }
      if (ours == "symbol") return true;
    }
    return false;
  }
  return false;
}

absl::StatusOr<std::vector<double>> LogReturnsOfPrices(const std::vector<double>& prices,
                                                       double scale) {
  if (prices.size() < 2) {
    return absl::InvalidArgumentError("at least two prices are needed for one return");
  }
  std::vector<double> out;
  out.reserve(prices.size() - 1);
  for (size_t i = 0; i < prices.size(); ++i) {
    if (!(prices[i] > 0)) {
      return absl::InvalidArgumentError(
          absl::StrCat("price number ", i + 1, " is ", prices[i], "; prices must be > 0"));
    }
    if (i > 0) out.push_back(scale * (std::log(prices[i]) - std::log(prices[i - 1])));
  }
  return out;
}

absl::StatusOr<Series> ReturnsFromTicks(std::string text, const std::string& source_name,
                                        const TickSeriesOptions& options) {
  auto reader = TickFileReader::FromString(std::move(text), source_name, options.file);
  if (!reader.ok()) return reader.status();
  BarOptions bars;
  bars.interval_ns = options.interval_ns;
  bars.session = options.session;
  BarState state;
  Series series;
  series.column = options.symbol;
  absl::flat_hash_set<std::string> seen;
  std::vector<std::string> symbols;  // the first few seen, in file order, for messages
  Tick tick;
  int64_t rejected = 0;
  const auto take = [&](const ClosedBar& bar) {
    if (bar.has_return) series.values.push_back(options.scale * bar.ret);
  };
  while ((*reader)->Next(&tick)) {
    const absl::string_view sym = tick.symbol.view();
    if (seen.size() < 100000 && seen.emplace(sym).second && symbols.size() < 5) {
      symbols.emplace_back(sym);
    }
    if (sym != options.symbol) continue;
    const FeedResult fr = FeedTick(&state, tick, bars);
    if (fr.status == TickStatus::kRejected) ++rejected;
    if (fr.closed) take(fr.bar);
  }
  if (!(*reader)->status().ok()) return (*reader)->status();
  ClosedBar last;
  if (CloseIfDue(&state, state.open_end_ns, 0, bars, &last)) take(last);
  const size_t n_symbols = seen.size();
  const auto listing = [&] {
    std::string s = absl::StrJoin(symbols, ", ");
    if (n_symbols > symbols.size()) absl::StrAppend(&s, ", ... (", n_symbols, " in all)");
    return s;
  };
  if (options.symbol.empty()) {
    return absl::InvalidArgumentError(absl::StrCat(
        source_name, " holds ticks of ", n_symbols == 1 ? "an instrument" : "several instruments",
        " (", listing(), "): choose one with --symbol"));
  }
  if (series.values.size() < 2) {
    if (!seen.contains(options.symbol)) {
      return absl::InvalidArgumentError(absl::StrCat(source_name, " has no ticks of '",
                                                     options.symbol, "' (it has ", listing(),
                                                     ")"));
    }
    return absl::InvalidArgumentError(
        absl::StrCat(source_name, ": '", options.symbol, "' gives ", series.values.size(),
                     " bar returns (", rejected, " ticks rejected by the bar builder); at least "
                     "two are needed"));
  }
  return series;
}

}  // namespace aftershock
