// `aftershock replay --checkpoint / --resume`: replaying a tick file in two
// parts gives byte-identical updates, model records and alerts to replaying it
// whole, on price ticks in 1-minute bars over sessions with overnight gaps,
// with refits in flight and bars open at the split; broken or foreign
// checkpoints are refused with exit 2.
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdio>
#include <random>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "aftershock/bar_builder.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::ReadFileOrDie;
using testing::RunCli;
using testing::WriteFile;

// 2026-03-02 00:00:00Z, a Monday.
constexpr int64_t kDay0 = 1772409600000000000;

// Price ticks of three invented names (or `symbols` of them), 08:00-10:00Z
// sessions on four days (overnight gaps), three ticks a minute per symbol at
// seconds 5, 25 and 45, a GARCH(1,1)-like variance and a U-shaped time-of-day
// factor. One CSV line per tick, in time order.
std::vector<std::string> TickLines(int symbols = 3) {
  std::vector<std::string> syms = {"HERON.X", "LYNX.Y", "OTTER.Z"};
  std::vector<double> price = {100, 50, 20};
  std::vector<double> h = {1e-7, 2e-7, 1.5e-7};
  for (int s = 3; s < symbols; ++s) {
    syms.push_back(absl::StrFormat("KITE%03d.Q", s));
    price.push_back(30.0 + s);
    h.push_back(1e-7 * (1.0 + 0.01 * s));
  }
  std::mt19937_64 rng(20260302);
  std::normal_distribution<double> norm(0.0, 1.0);
  std::vector<std::string> lines;
  for (int day = 0; day < 4; ++day) {
    for (int minute = 0; minute < 120; ++minute) {
      const double x = (minute + 0.5) / 120.0;
      const double shape = 0.6 + 2.0 * (x - 0.5) * (x - 0.5) * 4.0 / 2.0;
      for (int sec : {5, 25, 45}) {
        const int64_t t = kDay0 + day * kNanosPerDay + (8 * 60 + minute) * 60 * kNanosPerSecond +
                          sec * kNanosPerSecond;
        for (int s = 0; s < symbols; ++s) {
          const double z = norm(rng);
          const double eps = std::sqrt(h[s] * shape) * z;
          h[s] = 2e-9 + 0.08 * eps * eps / shape + 0.9 * h[s];
          price[s] *= std::exp(eps);
          lines.push_back(absl::StrFormat("%s,%d,%.10f", syms[s], t, price[s]));
        }
      }
    }
  }
  return lines;
}

std::string Csv(const std::vector<std::string>& lines, size_t begin, size_t end) {
  std::string out = "symbol,time,price\n";
  for (size_t i = begin; i < end; ++i) absl::StrAppend(&out, lines[i], "\n");
  return out;
}

constexpr const char* kConfig = R"([bars]
interval = "1m"
session = { start = "08:00", end = "10:00" }
[warmup]
min_bars = 5
start_bars = 10
[refit]
every_bars = 40
window = 300
min_bars = 60
reidentify_every = 0
holdout_bars = 30
apply_lag_bars = 15
[seasonality]
enabled = true
opening_return = "scaled"
min_sessions = 2
[alerts]
shock_z = 2.5
regime_warmup_bars = 20
)";

struct Outputs {
  std::string updates, models, alerts;
};

Outputs Read(const std::string& prefix) {
  return {ReadFileOrDie(prefix + ".u"), ReadFileOrDie(prefix + ".m"),
          ReadFileOrDie(prefix + ".a")};
}

testing::CommandResult Replay(const std::string& cfg, const std::string& input,
                              const std::string& prefix, const std::string& workers,
                              std::vector<std::string> extra) {
  std::vector<std::string> argv = {"replay",   "--config", cfg,          "--input",
                                   input,      "--output", prefix + ".u", "--models",
                                   prefix + ".m", "--alerts", prefix + ".a", "--workers",
                                   workers};
  argv.insert(argv.end(), extra.begin(), extra.end());
  return RunCli(argv);
}

// The whole replay (the reference), which must have swapped refits.
Outputs ReplayWhole(const std::string& dir, const std::string& cfg, const std::string& csv,
                    const std::string& workers) {
  const auto whole = Replay(cfg, csv, dir + "/whole" + workers, workers, {});
  INFO(whole.err);
  REQUIRE(whole.exit_code == 0);
  Outputs ref = Read(dir + "/whole" + workers);
  REQUIRE(ref.models.find("\"swapped\"") != std::string::npos);
  return ref;
}

// Replays lines [0, split) with --checkpoint, then the rest with --resume,
// and checks the two parts' outputs, concatenated, against `ref` (the whole
// replay's). Returns what further checks need.
struct SplitRun {
  std::string p2;  // the second part's prefix (its CSV is p2 + ".csv")
  std::string cp;  // the checkpoint between the parts
  std::string resume_err;
};
SplitRun CheckSplit(const std::string& dir, const std::string& cfg,
                    const std::vector<std::string>& lines, size_t split, const std::string& workers,
                    const Outputs& ref) {
  SplitRun run;
  const std::string p1 = absl::StrCat(dir, "/p1_", workers, "_", split);
  run.p2 = absl::StrCat(dir, "/p2_", workers, "_", split);
  run.cp = absl::StrCat(dir, "/state_", workers, "_", split, ".ckpt");
  WriteFile(p1 + ".csv", Csv(lines, 0, split));
  WriteFile(run.p2 + ".csv", Csv(lines, split, lines.size()));
  const auto r1 = Replay(cfg, p1 + ".csv", p1, workers, {"--checkpoint", run.cp});
  INFO(r1.err);
  REQUIRE(r1.exit_code == 0);
  const auto r2 = Replay(cfg, run.p2 + ".csv", run.p2, workers, {"--resume", run.cp});
  INFO(r2.err);
  REQUIRE(r2.exit_code == 0);
  run.resume_err = r2.err;
  const Outputs a = Read(p1), b = Read(run.p2);
  CHECK(a.updates + b.updates == ref.updates);
  CHECK(a.models + b.models == ref.models);
  CHECK(a.alerts + b.alerts == ref.alerts);
  return run;
}

TEST_CASE("replay in two parts equals the whole replay (time bars, sessions, refits, seasonality)",
          "[app][replay][checkpoint]") {
  const std::string dir = testing::ScratchDir("replay_checkpoint_split");
  const std::vector<std::string> lines = TickLines();
  const std::string cfg = WriteFile(dir + "/c.toml", kConfig);
  const std::string whole_csv = WriteFile(dir + "/whole.csv", Csv(lines, 0, lines.size()));
  // Split points inside a minute (every symbol that ticked in it has an open
  // bar with ticks), in the first session, across the first night, in later
  // sessions (refits and profiles in force).
  const std::vector<size_t> splits = {1000, 3 * 360 + 4, 1797, 2161, 3600 + 7, 4004};
  int resumed_with_jobs = 0;
  for (const std::string workers : {"1", "2"}) {
    // The run does what the test is about: refits swapped, alerts raised.
    const Outputs ref = ReplayWhole(dir, cfg, whole_csv, workers);
    REQUIRE(!ref.alerts.empty());
    REQUIRE(ref.updates.find("seasonal") != std::string::npos);
    for (size_t split : splits) {
      INFO("workers " << workers << ", split after line " << split);
      const SplitRun run = CheckSplit(dir, cfg, lines, split, workers, ref);
      CHECK(run.resume_err.find("replay: resumed 3 symbols from") != std::string::npos);
      if (run.resume_err.find("(0 refit jobs re-submitted)") == std::string::npos) {
        ++resumed_with_jobs;
      }
    }
  }
  // Some of the splits fell while a refit job was in flight.
  CHECK(resumed_with_jobs >= 2);
}

// From 128 symbols on, the pooled seasonal prior is shared among jobs (a
// snapshot rebuilt once per symbols / 64 estimates, refit.cc), and a wider
// universe raises more alerts across the splits. (Here every symbol's refits
// fall at the same bars, so a restored pool that rebuilt its snapshot from
// its sums would give the same priors: seasonal_profile_test checks that the
// snapshot itself survives. This case found regime alerts carrying the
// previous alert's model version.)
TEST_CASE("replay in two parts equals the whole replay with 130 symbols (shared pooled prior)",
          "[app][replay][checkpoint]") {
  const std::string dir = testing::ScratchDir("replay_checkpoint_split_wide");
  const std::vector<std::string> lines = TickLines(130);
  const std::string cfg = WriteFile(dir + "/c.toml", kConfig);
  const std::string whole_csv = WriteFile(dir + "/whole.csv", Csv(lines, 0, lines.size()));
  const Outputs ref = ReplayWhole(dir, cfg, whole_csv, "1");
  REQUIRE(ref.updates.find("seasonal") != std::string::npos);
  // In the second to fourth sessions (profiles pooled and in force), inside
  // a minute and between minutes.
  const size_t per_day = lines.size() / 4;
  const size_t minute = 130 * 3;
  std::vector<size_t> splits;
  for (int k = 0; k < 12; ++k) {
    splits.push_back(per_day + k * (2 * per_day / 12) + (k % 3) * 137 + 7 * minute);
  }
  for (size_t split : splits) {
    INFO("split after line " << split);
    const SplitRun run = CheckSplit(dir, cfg, lines, split, "1", ref);
    CHECK(run.resume_err.find("replay: resumed 130 symbols from") != std::string::npos);
  }
}

TEST_CASE("replay in two parts equals the whole replay with recursive tracking in drive mode",
          "[app][replay][checkpoint][tracking]") {
  const std::string dir = testing::ScratchDir("replay_checkpoint_tracking");
  const std::vector<std::string> lines = TickLines();
  // Starting parameters keep every symbol on a tracked GARCH(1,1)-t (refits
  // re-estimate it); a low instability threshold so that model alerts of rule
  // instability occur.
  const std::string base = std::string(kConfig) +
                           "[model.params]\nmu = 0.0\nomega = 2e-9\nalpha_1 = 0.08\n"
                           "beta_1 = 0.9\nnu = 8.0\n";
  const std::string cfg =
      WriteFile(dir + "/c.toml", base + "[tracking]\nmode = \"drive\"\nburn_in_bars = 20\n"
                                        "stability_decay = 0.95\nalert_threshold = 6\n");
  const std::string plain = WriteFile(dir + "/plain.toml", base);
  const std::string whole_csv = WriteFile(dir + "/whole.csv", Csv(lines, 0, lines.size()));
  const Outputs ref = ReplayWhole(dir, cfg, whole_csv, "1");
  REQUIRE(ref.alerts.find("\"instability\"") != std::string::npos);
  // Drive changes the published variances (the tracked parameters are in use).
  const auto off = Replay(plain, whole_csv, dir + "/off", "1", {});
  REQUIRE(off.exit_code == 0);
  CHECK(Read(dir + "/off").updates != ref.updates);
  for (size_t split : {size_t{1797}, size_t{3600 + 7}}) {
    INFO("split after line " << split);
    const SplitRun run = CheckSplit(dir, cfg, lines, split, "1", ref);
    // The tracking settings are part of the checkpoint's configuration check.
    const auto foreign = Replay(plain, run.p2 + ".csv", run.p2 + "x", "1", {"--resume", run.cp});
    CHECK(foreign.exit_code == 2);
  }
}

TEST_CASE("replay --resume refuses a corrupt, truncated or foreign checkpoint (exit 2)",
          "[app][replay][checkpoint]") {
  const std::string dir = testing::ScratchDir("replay_checkpoint_bad");
  const std::vector<std::string> lines = TickLines();
  const std::string cfg = WriteFile(dir + "/c.toml", kConfig);
  const std::string p1 = WriteFile(dir + "/p1.csv", Csv(lines, 0, 1500));
  const std::string p2 = WriteFile(dir + "/p2.csv", Csv(lines, 1500, lines.size()));
  const std::string cp = dir + "/state.ckpt";
  REQUIRE(Replay(cfg, p1, dir + "/a", "1", {"--checkpoint", cp}).exit_code == 0);
  const std::string good = ReadFileOrDie(cp);
  REQUIRE(good.size() > 200);

  SECTION("a flipped byte in the state") {
    std::string bad = good;
    bad[bad.size() / 2] ^= 0x20;
    WriteFile(dir + "/bad.ckpt", bad);
    const auto r = Replay(cfg, p2, dir + "/b", "1", {"--resume", dir + "/bad.ckpt"});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find("cannot resume from '" + dir + "/bad.ckpt'") != std::string::npos);
    CHECK(r.err.find("checksum") != std::string::npos);
  }
  SECTION("a truncated file") {
    WriteFile(dir + "/short.ckpt", good.substr(0, good.size() - 100));
    const auto r = Replay(cfg, p2, dir + "/b", "1", {"--resume", dir + "/short.ckpt"});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find("truncated") != std::string::npos);
  }
  SECTION("no such file") {
    const auto r = Replay(cfg, p2, dir + "/b", "1", {"--resume", dir + "/none.ckpt"});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find("cannot resume from") != std::string::npos);
  }
  SECTION("another bar interval: refused, naming [bars]") {
    std::string other = kConfig;
    other.replace(other.find("\"1m\""), 4, "\"5m\"");
    const std::string cfg5 = WriteFile(dir + "/c5.toml", other);
    const auto r = Replay(cfg5, p2, dir + "/b", "1", {"--resume", cp});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find("another configuration: [bars] (was 'interval_ns = 60000000000', now "
                     "'interval_ns = 300000000000')") != std::string::npos);
  }
  SECTION("new alert thresholds: the state is still usable") {
    std::string other = kConfig;
    other.replace(other.find("shock_z = 2.5"), 13, "shock_z = 3.5");
    const std::string cfg2 = WriteFile(dir + "/c2.toml", other);
    const auto r = Replay(cfg2, p2, dir + "/b", "1", {"--resume", cp});
    INFO(r.err);
    CHECK(r.exit_code == 0);
    CHECK(r.err.find("replay: resumed 3 symbols") != std::string::npos);
  }
}

}  // namespace
}  // namespace aftershock
