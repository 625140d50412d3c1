#include "app/watch_table.h"

#include <cmath>
#include <cstdio>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/time/time.h"

namespace aftershock::app {
namespace {

constexpr char kHome[] = "\x1b[H";
constexpr char kClearEol[] = "\x1b[K";
constexpr char kClearBelow[] = "\x1b[J";
constexpr char kReverse[] = "\x1b[7m";
constexpr char kPlain[] = "\x1b[0m";

double SafeSqrt(double v) { return v > 0 ? std::sqrt(v) : 0.0; }

}  // namespace

std::string FlagList(uint32_t flags) {
  std::string out;
  for (int bit = 0; bit < kNumUpdateFlags; ++bit) {
    if (flags & (1u << bit)) {
      if (!out.empty()) out.push_back('+');
      absl::StrAppend(&out, FlagName(bit));
    }
  }
  return out.empty() ? "-" : out;
}

std::string FormatUtc(int64_t t_ns) {
  return absl::FormatTime("%Y-%m-%dT%H:%M:%E*SZ", absl::FromUnixNanos(t_ns), absl::UTCTimeZone());
}

WatchTable::WatchTable(WatchTableOptions options)
    : options_(std::move(options)), filter_(options_.symbols.begin(), options_.symbols.end()) {}

bool WatchTable::Apply(const BarUpdate& u) {
  std::string sym(u.symbol.view());
  if (!filter_.empty() && filter_.count(sym) == 0) return false;
  WatchRow& row = rows_[sym];
  row.t_ns = u.t_ns;
  row.r = u.r;
  row.z = u.z;
  row.vol_ann = u.vol_ann;
  row.vol_next = SafeSqrt(u.var_next);
  row.scale = u.scale;
  row.ver = u.ver;
  row.flags = u.flags;
  ++row.updates;
  ++updates_;
  return true;
}

std::string WatchTable::FormatLine(const BarUpdate& u) const {
  std::string out =
      absl::StrFormat("%s %s r=%.6f z=%.2f vol_ann=%.4f vol_next=%.6f scale=%.3f ver=%u flags=%s",
                      FormatUtc(u.t_ns), u.symbol.view(), u.r, u.z, u.vol_ann, SafeSqrt(u.var_next),
                      u.scale, u.ver, FlagList(u.flags));
  if (std::fabs(u.z) >= options_.z_alert) out += " !";
  return out;
}

std::string WatchTable::Render(bool ansi) const {
  const std::string eol = ansi ? absl::StrCat(kClearEol, "\n") : "\n";
  std::string out = ansi ? kHome : "";
  absl::StrAppend(
      &out,
      absl::StrFormat("%-14s %-20s %10s %7s %1s %8s %10s %6s %4s %s", "symbol", "bar time (UTC)",
                      "return", "z", "", "vol_ann", "vol_next", "scale", "ver", "flags"),
      eol);
  for (const auto& [sym, row] : rows_) {
    const bool mark = std::fabs(row.z) >= options_.z_alert;
    std::string z = absl::StrFormat("%7.2f", row.z);
    if (mark && ansi) z = absl::StrCat(kReverse, z, kPlain);
    absl::StrAppend(&out,
                    absl::StrFormat("%-14s %-20s %10.6f %s %1s %8.4f %10.6f %6.3f %4u %s", sym,
                                    FormatUtc(row.t_ns), row.r, z, mark ? "!" : "", row.vol_ann,
                                    row.vol_next, row.scale, row.ver, FlagList(row.flags)),
                    eol);
  }
  absl::StrAppend(&out,
                  absl::StrFormat("%d symbols, %d updates; marked: |z| >= %g", rows_.size(),
                                  updates_, options_.z_alert),
                  eol);
  if (ansi) absl::StrAppend(&out, kClearBelow);
  return out;
}

}  // namespace aftershock::app
