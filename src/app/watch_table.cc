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

// "99" for 0.99, "97.5" for 0.975.
std::string LevelTag(double level) { return absl::StrFormat("%g", 100.0 * level); }

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
  row.level = u.n_levels > 0 ? u.levels[0] : 0.0;
  row.value_at_risk = u.n_levels > 0 ? u.var_risk[0] : 0.0;
  row.es = u.n_levels > 0 ? u.es[0] : 0.0;
  ++row.updates;
  ++updates_;
  return true;
}

size_t WatchTable::size() const {
  size_t n = 0;
  for (const auto& [sym, row] : rows_) n += row.updates > 0 ? 1 : 0;
  return n;
}

bool WatchTable::ApplyAlert(const std::string& symbol, const std::string& kind,
                            const std::string& rule) {
  if (!filter_.empty() && filter_.count(symbol) == 0) return false;
  if (kind == "regime") {
    if (rule == "regime_high") rows_[symbol].regime = "high";
    if (rule == "regime_low") rows_[symbol].regime = "low";
  } else if (kind == "regime_clear") {
    rows_[symbol].regime = "-";
  }
  return true;
}

std::string WatchTable::FormatLine(const BarUpdate& u) const {
  std::string risk;
  if (u.n_levels > 0) {
    const std::string tag = LevelTag(u.levels[0]);
    risk = absl::StrFormat(" var%s=%.6g es%s=%.6g", tag, u.var_risk[0], tag, u.es[0]);
  }
  std::string out =
      absl::StrFormat("%s %s r=%.6f z=%.2f vol_ann=%.4f vol_next=%.6f%s scale=%.3f ver=%u flags=%s",
                      FormatUtc(u.t_ns), u.symbol.view(), u.r, u.z, u.vol_ann, SafeSqrt(u.var_next),
                      risk, u.scale, u.ver, FlagList(u.flags));
  if (std::fabs(u.z) >= options_.z_alert) out += " !";
  return out;
}

std::string WatchTable::Render(bool ansi) const {
  const std::string eol = ansi ? absl::StrCat(kClearEol, "\n") : "\n";
  std::string out = ansi ? kHome : "";
  absl::StrAppend(&out,
                  absl::StrFormat("%-14s %-20s %10s %7s %1s %8s %10s %10s %10s %6s %4s %-6s %s",
                                  "symbol", "bar time (UTC)", "return", "z", "", "vol_ann",
                                  "vol_next", "VaR", "ES", "scale", "ver", "regime", "flags"),
                  eol);
  double level = 0;
  for (const auto& [sym, row] : rows_) {
    const bool mark = std::fabs(row.z) >= options_.z_alert;
    std::string z = absl::StrFormat("%7.2f", row.z);
    if (mark && ansi) z = absl::StrCat(kReverse, z, kPlain);
    if (row.updates == 0) continue;  // an alert arrived before any update
    if (level == 0) level = row.level;
    const std::string var =
        row.level > 0 ? absl::StrFormat("%10.6f", row.value_at_risk) : absl::StrFormat("%10s", "-");
    const std::string es =
        row.level > 0 ? absl::StrFormat("%10.6f", row.es) : absl::StrFormat("%10s", "-");
    absl::StrAppend(
        &out,
        absl::StrFormat("%-14s %-20s %10.6f %s %1s %8.4f %10.6f %s %s %6.3f %4u %-6s %s", sym,
                        FormatUtc(row.t_ns), row.r, z, mark ? "!" : "", row.vol_ann, row.vol_next,
                        var, es, row.scale, row.ver, row.regime, FlagList(row.flags)),
        eol);
  }
  absl::StrAppend(
      &out,
      absl::StrFormat("%d symbols, %d updates; marked: |z| >= %g", size(), updates_,
                      options_.z_alert),
      level > 0 ? absl::StrFormat("; VaR, ES: next bar at %s %%, positive losses", LevelTag(level))
                : "",
      eol);
  if (ansi) absl::StrAppend(&out, kClearBelow);
  return out;
}

}  // namespace aftershock::app
