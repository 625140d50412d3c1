// The compact CSV form of BarUpdate (one header line, one row per update) and
// a sink that writes it for `aftershock replay --csv`.
//
// Columns, in this order (names are the JSON keys of update_codec.h):
//   symbol,time,r,mu,eps,var,z,var_next,vol_ann,
//   var_h_<h> for each horizon h (bars),
//   value_at_risk_<level>,es_<level> for each confidence level,
//   scale,ver,flags
// time is the bar end in ISO-8601 UTC with as many fractional digits as the
// nanoseconds need (2026-03-02T14:31:00Z); doubles use the shortest text that
// parses back to the same double; flags are the flag names joined by '|'
// (empty when none). A symbol containing a comma, a quote or a line break is
// quoted as RFC 4180 says. Rows end with '\n'.
//
// Thread-safety: the functions are reentrant; a sink is used by one thread.
#ifndef AFTERSHOCK_UPDATE_CSV_H_
#define AFTERSHOCK_UPDATE_CSV_H_

#include <cstdio>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "absl/types/span.h"
#include "aftershock/bar_update.h"
#include "aftershock/update_sink.h"

namespace aftershock {

// The header line (with its '\n') for updates carrying `horizons` and `levels`.
std::string UpdateCsvHeader(absl::Span<const int> horizons, absl::Span<const double> levels);

// Appends one row. InvalidArgument (and *out unchanged) when the horizon or
// level count is out of range.
absl::Status AppendUpdateCsvRow(const BarUpdate& u, std::string* out);

// Takes updates in the binary wire form (topics "u.<symbol>"; other topics are
// skipped), writes each as a CSV row and, when `json_lines` is given, passes
// it on re-encoded as JSON (EncodeUpdateJson: the same bytes a JSON engine
// would have published), so one replay can write both files. Buffered (1 MiB).
class UpdateCsvSink : public UpdateSink {
 public:
  // Creates `path` ("-" = standard output) and writes `header`. `json_lines`
  // (may be null) is not owned and must outlive the sink. NotFound naming the
  // path and the OS reason when the file cannot be created.
  static absl::StatusOr<std::unique_ptr<UpdateCsvSink>> Open(const std::string& path,
                                                             const std::string& header,
                                                             UpdateSink* json_lines);
  ~UpdateCsvSink() override;

  // False (a dropped message) when the body is not a valid binary update.
  bool Send(absl::string_view topic, absl::string_view body) override;
  // Writes the buffer out and flushes the JSON Lines sink; DataLoss naming the
  // path when a write failed.
  absl::Status Flush() override;
  uint64_t rows() const { return rows_; }

 private:
  UpdateCsvSink(std::FILE* f, bool owned, std::string path, UpdateSink* json_lines);
  std::FILE* file_;
  bool owned_;
  std::string path_;
  UpdateSink* json_lines_;
  std::string buffer_;
  std::string json_;
  uint64_t rows_ = 0;
  bool failed_ = false;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_UPDATE_CSV_H_
