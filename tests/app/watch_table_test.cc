// Tests of the `aftershock watch` table model (src/app/watch_table.h): exact
// text of the plain line and table forms for a known set of updates (the
// formats documented in watch_table.h and `aftershock watch --help`), the ANSI
// form's control sequences (ECMA-48: CSI H cursor home, CSI K erase to end of
// line, CSI J erase below, CSI 7 m inverse), sorting and filtering.
#include "app/watch_table.h"

#include <catch2/catch.hpp>
#include <string>

namespace aftershock::app {
namespace {

BarUpdate Make(const char* sym, int64_t t_ns, double r, double z, double vol_ann, double var_next,
               double scale, uint32_t ver, uint32_t flags) {
  BarUpdate u;
  u.symbol.assign(sym);
  u.t_ns = t_ns;
  u.r = r;
  u.z = z;
  u.vol_ann = vol_ann;
  u.var_next = var_next;
  u.scale = scale;
  u.ver = ver;
  u.flags = flags;
  return u;
}

constexpr int64_t k0931 = 1772443860000000000;  // 2026-03-02T09:31:00Z

TEST_CASE("plain line per update") {
  WatchTable table;
  // var_next = 0.000961^2, so the next-bar volatility prints as 0.000961.
  auto a = Make("BRANDR.NRG", k0931, -0.000412, -0.54, 0.3012, 0.000961 * 0.000961, 0.332, 2, 0);
  CHECK(table.FormatLine(a) ==
        "2026-03-02T09:31:00Z BRANDR.NRG r=-0.000412 z=-0.54 vol_ann=0.3012 vol_next=0.000961 "
        "scale=0.332 ver=2 flags=-");
  auto b = Make("SKJOLD.GAS", k0931 + 500000000, 0.0123, 3.5, 0.61, 4e-6, 0.164, 0,
                kFlagWarmup | kFlagGap);
  CHECK(table.FormatLine(b) ==
        "2026-03-02T09:31:00.5Z SKJOLD.GAS r=0.012300 z=3.50 vol_ann=0.6100 vol_next=0.002000 "
        "scale=0.164 ver=0 flags=warmup+gap !");
  // The mark is at |z| >= 3 on both sides, exactly at the threshold too.
  auto c = Make("ASKE.CRB", k0931, -0.01, -3.0, 0.4, 1e-6, 0.25, 1, kFlagFirstBar);
  CHECK(table.FormatLine(c).substr(table.FormatLine(c).size() - 17) == "flags=first_bar !");
}

TEST_CASE("table rendering, sorted by symbol, latest values win") {
  WatchTable table;
  REQUIRE(table.Apply(
      Make("SKJOLD.GAS", k0931, 0.0123, 3.5, 0.61, 4e-6, 0.164, 0, kFlagWarmup | kFlagGap)));
  REQUIRE(table.Apply(Make("BRANDR.NRG", k0931 - 60000000000, 0.002, 1.0, 0.2, 1e-6, 0.5, 1, 0)));
  REQUIRE(table.Apply(
      Make("BRANDR.NRG", k0931, -0.000412, -0.54, 0.3012, 0.000961 * 0.000961, 0.332, 2, 0)));
  REQUIRE(table.Apply(Make("ASKE.CRB", k0931, 0, 0, 0.25, 2.5e-7, 0.4, 0, kFlagFirstBar)));
  CHECK(table.updates() == 4);
  CHECK(table.size() == 3);
  const std::string want =
      "symbol         bar time (UTC)           return       z    vol_ann   vol_next        VaR "
      "        ES  scale  ver regime flags\n"
      "ASKE.CRB       2026-03-02T09:31:00Z   0.000000    0.00     0.2500   0.000500          - "
      "         -  0.400    0 -      first_bar\n"
      "BRANDR.NRG     2026-03-02T09:31:00Z  -0.000412   -0.54     0.3012   0.000961          - "
      "         -  0.332    2 -      -\n"
      "SKJOLD.GAS     2026-03-02T09:31:00Z   0.012300    3.50 !   0.6100   0.002000          - "
      "         -  0.164    0 -      warmup+gap\n"
      "3 symbols, 4 updates; marked: |z| >= 3\n";
  CHECK(table.Render(false) == want);
}

TEST_CASE("VaR and ES at the first level, and the regime from the regime alerts") {
  WatchTable table;
  BarUpdate u = Make("BRANDR.NRG", k0931, -0.000412, -0.54, 0.3012, 1e-6, 0.332, 2, 0);
  u.n_levels = 2;
  u.levels[0] = 0.99;
  u.var_risk[0] = 0.00231;
  u.es[0] = 0.00265;
  u.levels[1] = 0.975;
  u.var_risk[1] = 0.0019;
  u.es[1] = 0.0023;
  CHECK(table.FormatLine(u) ==
        "2026-03-02T09:31:00Z BRANDR.NRG r=-0.000412 z=-0.54 vol_ann=0.3012 vol_next=0.001000 "
        "var99=0.00231 es99=0.00265 scale=0.332 ver=2 flags=-");
  REQUIRE(table.Apply(u));
  // An alert of a symbol without an update yet is kept but not shown.
  CHECK(table.ApplyAlert("SKJOLD.GAS", "regime", "regime_high"));
  CHECK(table.size() == 1);
  CHECK(table.ApplyAlert("BRANDR.NRG", "shock", "shock"));  // not a regime: no change
  std::string s = table.Render(false);
  INFO(s);
  CHECK(s.find("   0.002310   0.002650  0.332    2 -      -\n") != std::string::npos);
  CHECK(s.find("VaR, ES: next bar at 99 %, positive losses") != std::string::npos);
  CHECK(table.ApplyAlert("BRANDR.NRG", "regime", "regime_high"));
  CHECK(table.Render(false).find("  2 high   -\n") != std::string::npos);
  table.ApplyAlert("BRANDR.NRG", "regime_clear", "regime_high");
  CHECK(table.Render(false).find("  2 -      -\n") != std::string::npos);
  table.ApplyAlert("BRANDR.NRG", "regime", "regime_low");
  CHECK(table.Render(false).find("  2 low    -\n") != std::string::npos);
  // SKJOLD.GAS shows its regime once it has an update.
  REQUIRE(table.Apply(Make("SKJOLD.GAS", k0931, 0.01, 1.0, 0.6, 4e-6, 0.2, 1, 0)));
  CHECK(table.Render(false).find("  1 high   -\n") != std::string::npos);
}

TEST_CASE("ANSI rendering refreshes in place and highlights large shocks") {
  WatchTable table;
  table.Apply(Make("SKJOLD.GAS", k0931, 0.0123, -3.5, 0.61, 4e-6, 0.164, 0, 0));
  table.Apply(Make("BRANDR.NRG", k0931, 0.001, 1.2, 0.3, 1e-6, 0.3, 0, 0));
  const std::string s = table.Render(true);
  CHECK(s.rfind("\x1b[H", 0) == 0);  // cursor home first
  CHECK(s.size() > 3);
  CHECK(s.substr(s.size() - 3) == "\x1b[J");                      // clear what is below
  CHECK(s.find("\x1b[7m  -3.50\x1b[0m !") != std::string::npos);  // inverted, marked
  CHECK(s.find("\x1b[7m   1.20") == std::string::npos);           // |z| < 3 not highlighted
  CHECK(s.find("warmup") == std::string::npos);
  // Every line ends by erasing the rest of the old line.
  size_t lines = 0;
  for (size_t at = s.find('\n'); at != std::string::npos; at = s.find('\n', at + 1)) {
    CHECK(s.substr(at - 3, 3) == "\x1b[K");
    ++lines;
  }
  CHECK(lines == 4);  // header, two rows, footer
}

TEST_CASE("symbol filter and alert threshold") {
  WatchTableOptions o;
  o.symbols = {"BRANDR.NRG"};
  o.z_alert = 2.0;
  WatchTable table(o);
  CHECK_FALSE(table.Apply(Make("SKJOLD.GAS", k0931, 0, 0, 0.1, 1e-6, 1, 0, 0)));
  CHECK_FALSE(table.Apply(Make("BRANDR.NRGX", k0931, 0, 0, 0.1, 1e-6, 1, 0, 0)));  // exact match
  CHECK(table.Apply(Make("BRANDR.NRG", k0931, 0, 2.5, 0.1, 1e-6, 1, 0, 0)));
  CHECK(table.updates() == 1);
  CHECK(table.Render(false).find("SKJOLD") == std::string::npos);
  CHECK(table.Render(false).find("   2.50 !") != std::string::npos);
  CHECK(FlagList(0) == "-");
  CHECK(FlagList(kFlagFallback | kFlagStale | kFlagSeasonal) == "fallback+stale+seasonal");
}

}  // namespace
}  // namespace aftershock::app
