// WatchTable: the model behind `aftershock watch` — the latest update of every
// symbol, and its two renderings: a table (optionally with ANSI cursor control
// for in-place refresh on a terminal) and one plain line per update for pipes
// and logs. Kept apart from the socket loop so the exact text is testable.
//
// Columns: symbol, bar time (UTC), last return r, standardized shock z,
// annualized volatility vol_ann, next-bar volatility sqrt(var_next), next-bar
// VaR and ES at the first risk level of the update (positive losses), sizing
// scale, model version, volatility regime (from the symbol's regime alerts:
// "high", "low" or '-') and the flags of the latest update ('-' when none).
// Values are shown in the feed's own units (fractions or per cent).
//
// Thread-safety: not thread-safe; one thread owns a table.
#ifndef AFTERSHOCK_APP_WATCH_TABLE_H_
#define AFTERSHOCK_APP_WATCH_TABLE_H_

#include <cstdint>
#include <map>
#include <set>
#include <string>
#include <vector>

#include "aftershock/bar_update.h"

namespace aftershock::app {

struct WatchTableOptions {
  // Only these symbols are kept (exact match); empty = every symbol. Default empty.
  std::vector<std::string> symbols;
  // |z| at or above this is marked ('!' column; inverted, SGR 7, with ANSI). Default 3.
  double z_alert = 3.0;
};

// Latest values of one symbol.
struct WatchRow {
  int64_t t_ns = 0;
  double r = 0;
  double z = 0;
  double vol_ann = 0;
  double vol_next = 0;  // sqrt(var_next)
  double scale = 0;
  uint32_t ver = 0;
  uint32_t flags = 0;
  uint64_t updates = 0;  // updates seen for the symbol
  double level = 0;      // first risk level of the latest update; 0 = none
  double value_at_risk = 0, es = 0;  // at `level`, next bar, positive losses
  std::string regime = "-";          // "high", "low" or "-" (none announced)
};

class WatchTable {
 public:
  explicit WatchTable(WatchTableOptions options = {});

  // Records an update; false (and nothing recorded) when the filter drops it.
  bool Apply(const BarUpdate& u);

  // Records an alert of `symbol` (alerts.h kinds and rules): "regime" with rule
  // "regime_high" / "regime_low" sets the regime, "regime_clear" clears it;
  // other alerts are ignored. False when the filter drops the symbol.
  bool ApplyAlert(const std::string& symbol, const std::string& kind, const std::string& rule);

  // The table, rows sorted by symbol. With ansi: starts with cursor-home,
  // clears each line's tail and everything below, and shows marked z cells in
  // inverted (SGR 7), so rewriting it refreshes the screen in place.
  std::string Render(bool ansi) const;

  // One plain line for an update (no newline), e.g.
  //   2026-03-02T09:31:00Z BRANDR.NRG r=-0.000412 z=-0.54 vol_ann=0.3012
  //   vol_next=0.000961 var99=0.00231 es99=0.00265 scale=0.332 ver=2 flags=- (on one line)
  // (VaR and ES at the update's first risk level, left out when it has none)
  // followed by " !" when |z| >= z_alert.
  std::string FormatLine(const BarUpdate& u) const;

  uint64_t updates() const { return updates_; }  // accepted updates
  size_t size() const;                           // symbols shown (with an update)

 private:
  WatchTableOptions options_;
  std::set<std::string> filter_;
  std::map<std::string, WatchRow> rows_;
  uint64_t updates_ = 0;
};

// Flag names of a bit set joined with '+', or "-" when none.
std::string FlagList(uint32_t flags);

// "2026-03-02T09:31:00Z" (fraction shown only when not whole seconds).
std::string FormatUtc(int64_t t_ns);

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_WATCH_TABLE_H_
