// The model store: `replay --initial-models` starts each listed symbol on its
// stored model (version, no warm-up), `aftershock models list / show / export`
// on a checkpoint and on a model file, the export -> --initial-models round
// trip, and the errors (exit 2). Price ticks in 1-minute bars over sessions
// with overnight gaps, refits on.
#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <map>
#include <nlohmann/json.hpp>
#include <random>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"
#include "absl/strings/str_split.h"
#include "aftershock/bar_builder.h"
#include "support/test_support.h"

namespace aftershock {
namespace {

using testing::ReadFileOrDie;
using testing::RunCli;
using testing::WriteFile;

// 2026-03-02 00:00:00Z, a Monday.
constexpr int64_t kDay0 = 1772409600000000000;
const char* const kSymbols[] = {"CRANE.A", "MARTEN.B", "WREN.C"};

// Price ticks of three invented names, 08:00-10:00Z sessions on days
// [first_day, first_day + days), three ticks a minute per symbol, a
// GARCH(1,1)-like variance. The generator runs from day 0 so that the ticks of
// a later day are the continuation of the same market.
std::string TickCsv(int first_day, int days) {
  std::mt19937_64 rng(20260305);
  std::normal_distribution<double> norm(0.0, 1.0);
  std::string out = "symbol,time,price\n";
  double price[3] = {80, 45, 12};
  double h[3] = {1e-7, 3e-7, 2e-7};
  for (int day = 0; day < first_day + days; ++day) {
    for (int minute = 0; minute < 120; ++minute) {
      for (int sec : {5, 25, 45}) {
        const int64_t t = kDay0 + day * kNanosPerDay + (8 * 60 + minute) * 60 * kNanosPerSecond +
                          sec * kNanosPerSecond;
        for (int s = 0; s < 3; ++s) {
          const double eps = std::sqrt(h[s]) * norm(rng);
          h[s] = 3e-9 + 0.07 * eps * eps + 0.9 * h[s];
          price[s] *= std::exp(eps);
          if (day >= first_day) absl::StrAppendFormat(&out, "%s,%d,%.10f\n", kSymbols[s], t, price[s]);
        }
      }
    }
  }
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
min_bars = 100
holdout_bars = 30
apply_lag_bars = 5
)";

std::vector<nlohmann::json> JsonLines(const std::string& text) {
  std::vector<nlohmann::json> out;
  for (absl::string_view line : absl::StrSplit(text, '\n', absl::SkipEmpty())) {
    out.push_back(nlohmann::json::parse(line.begin(), line.end()));
  }
  return out;
}

// Per symbol, the last swapped record of a model file.
std::map<std::string, nlohmann::json> LastSwapped(const std::string& models_text) {
  std::map<std::string, nlohmann::json> out;
  for (const nlohmann::json& j : JsonLines(models_text)) {
    if (j["outcome"] == "swapped") out[j["symbol"].get<std::string>()] = j;
  }
  return out;
}

// Per symbol, its first update of an update file.
std::map<std::string, nlohmann::json> FirstUpdates(const std::string& updates_text) {
  std::map<std::string, nlohmann::json> out;
  for (const nlohmann::json& j : JsonLines(updates_text)) {
    out.emplace(j["s"].get<std::string>(), j);
  }
  return out;
}

bool HasFlag(const nlohmann::json& update, const std::string& flag) {
  for (const auto& f : update["flags"]) {
    if (f == flag) return true;
  }
  return false;
}

testing::CommandResult Replay(const std::string& cfg, const std::string& input,
                              const std::string& prefix, std::vector<std::string> extra) {
  std::vector<std::string> argv = {"replay",  "--config", cfg,          "--input", input,
                                   "--output", prefix + ".u", "--models", prefix + ".m",
                                   "--quiet"};
  argv.insert(argv.end(), extra.begin(), extra.end());
  return RunCli(argv);
}

struct Fixture {
  std::string dir, cfg, day4, models, ckpt;
  std::map<std::string, nlohmann::json> last;  // last swapped record per symbol
};

const Fixture& Day() {
  static const Fixture f = [] {
    Fixture f;
    f.dir = testing::ScratchDir("models_command");
    f.cfg = WriteFile(f.dir + "/c.toml", kConfig);
    const std::string days = WriteFile(f.dir + "/days0_3.csv", TickCsv(0, 4));
    f.day4 = WriteFile(f.dir + "/day4.csv", TickCsv(4, 1));
    f.ckpt = f.dir + "/end.ckpt";
    const auto r = Replay(f.cfg, days, f.dir + "/first", {"--checkpoint", f.ckpt});
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    f.models = f.dir + "/first.m";
    f.last = LastSwapped(ReadFileOrDie(f.models));
    return f;
  }();
  return f;
}

TEST_CASE("replay --initial-models starts every listed symbol on its model",
          "[app][models]") {
  const Fixture& f = Day();
  // The first replay fitted every symbol (the test is about starting on them).
  REQUIRE(f.last.size() == 3);
  const auto seeded = Replay(f.cfg, f.day4, f.dir + "/seeded", {"--initial-models", f.models});
  INFO(seeded.err);
  REQUIRE(seeded.exit_code == 0);
  const auto fresh = Replay(f.cfg, f.day4, f.dir + "/fresh", {});
  REQUIRE(fresh.exit_code == 0);
  const auto first_seeded = FirstUpdates(ReadFileOrDie(f.dir + "/seeded.u"));
  const auto first_fresh = FirstUpdates(ReadFileOrDie(f.dir + "/fresh.u"));
  const auto later = JsonLines(ReadFileOrDie(f.dir + "/seeded.m"));
  for (const char* sym : kSymbols) {
    INFO(sym);
    const nlohmann::json& rec = f.last.at(sym);
    const nlohmann::json& u = first_seeded.at(sym);
    CHECK(u["ver"] == rec["version"]);
    CHECK_FALSE(HasFlag(u, "warmup"));
    const nlohmann::json& w = first_fresh.at(sym);
    CHECK(w["ver"] == 0);
    CHECK(HasFlag(w, "warmup"));
    // The seeded start publishes from the first return (the warm-up collects
    // start_bars first), and its variance is the model's, not the warm-up's.
    CHECK(u["t"].get<int64_t>() < w["t"].get<int64_t>());
    const auto& seeded_same_bar = [&]() -> nlohmann::json {
      for (const nlohmann::json& j : JsonLines(ReadFileOrDie(f.dir + "/seeded.u"))) {
        if (j["s"] == sym && j["t"] == w["t"]) return j;
      }
      return nlohmann::json();
    }();
    REQUIRE(seeded_same_bar.is_object());
    CHECK(std::fabs(seeded_same_bar["var"].get<double>() - w["var"].get<double>()) >
          1e-3 * w["var"].get<double>());
    // Refits continue from it: the first refit of the day (at min_bars) is a
    // re-estimation warm-started from the stored model (no identification), and
    // its version numbers after the record's.
    bool seen = false;
    for (const nlohmann::json& r : later) {
      if (r["symbol"] != sym) continue;
      seen = true;
      CHECK(r["note"].get<std::string>().rfind("re-estimated", 0) == 0);
      CHECK(r["version"].get<uint32_t>() ==
            rec["version"].get<uint32_t>() + (r["outcome"] == "swapped" ? 1 : 0));
      break;
    }
    CHECK(seen);
  }
}

TEST_CASE("models list / show / export on a model file and a checkpoint", "[app][models]") {
  const Fixture& f = Day();
  REQUIRE(f.last.size() == 3);

  SECTION("list: a model file and the checkpoint agree with the records") {
    const auto text = RunCli({"models", "list", f.models});
    INFO(text.err);
    REQUIRE(text.exit_code == 0);
    CHECK(text.out.find("SYMBOL") != std::string::npos);
    CHECK(text.out.find("3 models.") != std::string::npos);
    for (const char* sym : kSymbols) CHECK(text.out.find(sym) != std::string::npos);
    // No tracking: no tracking columns, in a model file or a checkpoint.
    CHECK(text.out.find("TRACKING") == std::string::npos);
    const auto ck = RunCli({"models", "list", f.ckpt, "--config", f.cfg});
    REQUIRE(ck.exit_code == 0);
    CHECK(ck.out.find("TRACKING") == std::string::npos);
    for (const std::vector<std::string>& argv :
         {std::vector<std::string>{"models", "list", f.models, "--format", "json"},
          std::vector<std::string>{"models", "list", f.ckpt, "--config", f.cfg, "--format",
                                   "json"}}) {
      const auto r = RunCli(argv);
      INFO(argv[2] << ": " << r.err);
      REQUIRE(r.exit_code == 0);
      const nlohmann::json j = nlohmann::json::parse(r.out);
      CHECK(j["kind"] == (argv[2] == f.ckpt ? "checkpoint" : "model file"));
      REQUIRE(j["models"].size() == 3);
      for (const nlohmann::json& m : j["models"]) {
        const nlohmann::json& rec = f.last.at(m["symbol"].get<std::string>());
        if (m["status"] != "fitted") continue;  // a checkpoint symbol may be in fallback
        CHECK(m["version"] == rec["version"]);
        CHECK(m["spec"] == rec["spec"]);
        REQUIRE(m["estimates"].size() == rec["estimates"].size());
        for (size_t i = 0; i < m["estimates"].size(); ++i) {
          CHECK(m["estimates"][i]["name"] == rec["estimates"][i]["name"]);
          CHECK(m["estimates"][i]["value"] == rec["estimates"][i]["value"]);
        }
        // A constant-variance model has persistence 0 and no half-life.
        const double p = m["persistence"].get<double>();
        CHECK(p >= 0);
        CHECK(p < 1);
        CHECK(m["half_life_bars"].get<double>() ==
              Approx(p > 0 ? std::log(0.5) / std::log(p) : 0.0));
      }
    }
  }
  SECTION("show: every parameter, text and JSON") {
    const auto r = RunCli({"models", "show", f.models, "MARTEN.B"});
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    const nlohmann::json& rec = f.last.at("MARTEN.B");
    for (const auto& p : rec["estimates"]) {
      CHECK(r.out.find(p["name"].get<std::string>()) != std::string::npos);
    }
    CHECK(r.out.find(absl::StrCat("version         ", rec["version"].get<uint32_t>())) !=
          std::string::npos);
    const auto js = RunCli({"models", "show", f.ckpt, "WREN.C", "--config", f.cfg, "--format",
                            "json"});
    INFO(js.err);
    REQUIRE(js.exit_code == 0);
    const nlohmann::json j = nlohmann::json::parse(js.out);
    CHECK(j["symbol"] == "WREN.C");
    CHECK(j["estimates"].size() >= 2);
  }
  SECTION("export -> --initial-models gives the same replay as the original file") {
    const auto base = Replay(f.cfg, f.day4, f.dir + "/rt_base", {"--initial-models", f.models});
    REQUIRE(base.exit_code == 0);
    for (const std::string& src : {f.models, f.ckpt}) {
      INFO(src);
      const std::string out = f.dir + "/export.jsonl";
      const auto e = RunCli({"models", "export", src, "--output", out, "--config", f.cfg});
      INFO(e.err);
      REQUIRE(e.exit_code == 0);
      const auto exported = LastSwapped(ReadFileOrDie(out));
      // Every symbol on a fitted model is exported.
      CHECK(exported.size() >= 1);
      const auto r = Replay(f.cfg, f.day4, f.dir + "/rt", {"--initial-models", out});
      INFO(r.err);
      REQUIRE(r.exit_code == 0);
      if (exported.size() == 3) {
        CHECK(ReadFileOrDie(f.dir + "/rt.u") == ReadFileOrDie(f.dir + "/rt_base.u"));
        CHECK(ReadFileOrDie(f.dir + "/rt.m") == ReadFileOrDie(f.dir + "/rt_base.m"));
      }
    }
  }
}

// The same days replayed with [tracking] drive: the checkpoint holds each
// symbol's tracker, and `models` shows it.
TEST_CASE("models list / show: the tracked parameters a checkpoint holds", "[app][models]") {
  const std::string dir = testing::ScratchDir("models_command_tracking");
  const std::string cfg = WriteFile(dir + "/c.toml", absl::StrCat(kConfig, R"([tracking]
mode = "drive"
burn_in_bars = 10
)"));
  const std::string days = WriteFile(dir + "/days0_3.csv", TickCsv(0, 4));
  const std::string ckpt = dir + "/end.ckpt";
  const auto r = Replay(cfg, days, dir + "/first", {"--checkpoint", ckpt});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);

  const auto js = RunCli({"models", "list", ckpt, "--config", cfg, "--format", "json"});
  INFO(js.err);
  REQUIRE(js.exit_code == 0);
  const nlohmann::json list = nlohmann::json::parse(js.out);
  REQUIRE(list["models"].size() == 3);
  std::vector<std::string> tracked;
  for (const nlohmann::json& m : list["models"]) {
    if (!m.contains("tracking")) continue;
    tracked.push_back(m["symbol"].get<std::string>());
    const nlohmann::json& t = m["tracking"];
    INFO(m.dump());
    CHECK(t["mode"] == "drive");
    CHECK(t["variance"] == "GARCH(1,1)");
    CHECK(t["bars_since_refit"].get<int64_t>() >= 0);
    CHECK(t["instability"].get<double>() >= 0);
    CHECK_FALSE(t.contains("instability_alerts"));  // not in a checkpoint
    REQUIRE(t["estimates"].size() == 3);
    const char* names[] = {"omega", "alpha_1", "beta_1"};
    for (size_t i = 0; i < 3; ++i) {
      const nlohmann::json& e = t["estimates"][i];
      CHECK(e["name"] == names[i]);
      CHECK(e["drift"].get<double>() == e["value"].get<double>() - e["refit"].get<double>());
    }
    // The refit column is the model in force the tracker was anchored on:
    // its alpha_1 and beta_1 exactly (re-anchored at the first bar after a swap).
    for (const nlohmann::json& p : m["estimates"]) {
      for (size_t i = 1; i < 3; ++i) {
        if (p["name"] == names[i]) CHECK(p["value"] == t["estimates"][i]["refit"]);
      }
    }
  }
  // A symbol is tracked exactly when its model in force is one the tracker
  // handles (a zero or constant mean with GARCH(1,1) or GJR(1,1,1)).
  for (const nlohmann::json& m : list["models"]) {
    const std::string spec = m["spec"].get<std::string>();
    const bool supported = (spec.rfind("const/", 0) == 0 || spec.rfind("zero/", 0) == 0) &&
                           (spec.find("/GARCH(1,1)/") != std::string::npos ||
                            spec.find("/GJR-GARCH(1,1)/") != std::string::npos);
    INFO(m["symbol"] << " " << spec);
    CHECK(m.contains("tracking") == supported);
  }
  CHECK(tracked.size() >= 1);

  const auto text = RunCli({"models", "list", ckpt, "--config", cfg});
  REQUIRE(text.exit_code == 0);
  INFO(text.out);
  CHECK(text.out.find("TRACKING") != std::string::npos);
  CHECK(text.out.find("INSTABILITY") != std::string::npos);
  CHECK(text.out.find(absl::StrCat(tracked.size(), " tracked ([tracking])")) != std::string::npos);
  for (const char* sym : kSymbols) {
    const size_t line = text.out.find(std::string(sym) + " ");
    REQUIRE(line != std::string::npos);
    const bool is_tracked = std::find(tracked.begin(), tracked.end(), sym) != tracked.end();
    CHECK((text.out.substr(line, text.out.find('\n', line) - line).find(" drive ") !=
           std::string::npos) == is_tracked);
  }

  REQUIRE_FALSE(tracked.empty());
  const std::string shown = tracked.front();
  const auto show = RunCli({"models", "show", ckpt, shown, "--config", cfg});
  INFO(show.err);
  REQUIRE(show.exit_code == 0);
  INFO(show.out);
  CHECK(show.out.find("tracking        drive GARCH(1,1), ") != std::string::npos);
  CHECK(show.out.find("instability     ") != std::string::npos);
  const size_t table = show.out.find("\nTRACKED ");
  REQUIRE(table != std::string::npos);
  const std::string header = show.out.substr(table, show.out.find('\n', table + 1) - table);
  for (const char* col : {" VALUE", " REFIT", " DRIFT", " DRIFT %"}) {
    CHECK(header.find(col) != std::string::npos);
  }
  for (const char* name : {"omega", "alpha_1", "beta_1"}) {
    CHECK(show.out.find(std::string("\n") + name, table) != std::string::npos);
  }
  const auto show_json =
      RunCli({"models", "show", ckpt, shown, "--config", cfg, "--format", "json"});
  REQUIRE(show_json.exit_code == 0);
  const nlohmann::json sj = nlohmann::json::parse(show_json.out);
  CHECK(sj["tracking"]["mode"] == "drive");
  for (const nlohmann::json& m : list["models"]) {
    if (m["symbol"] == shown) CHECK(sj["tracking"] == m["tracking"]);
  }
}

TEST_CASE("model store errors exit 2 with the file, line and problem", "[app][models]") {
  const Fixture& f = Day();
  REQUIRE(f.last.size() == 3);
  const std::string good = f.last.at("CRANE.A").dump();

  SECTION("a line that is not JSON") {
    const std::string bad = WriteFile(f.dir + "/bad1.jsonl", good + "\n{not json\n");
    const auto r = Replay(f.cfg, f.day4, f.dir + "/e", {"--initial-models", bad});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find(bad + ":2: not a JSON object") != std::string::npos);
    const auto l = RunCli({"models", "list", bad});
    CHECK(l.exit_code == 2);
    CHECK(l.err.find(bad + ":2:") != std::string::npos);
  }
  SECTION("parameters failing the constraints name the symbol") {
    nlohmann::json j = f.last.at("CRANE.A");
    for (auto& p : j["estimates"]) {
      if (p["name"] == "beta_1") p["value"] = 1.2;
    }
    const std::string bad = WriteFile(f.dir + "/bad2.jsonl", j.dump() + "\n");
    const auto r = Replay(f.cfg, f.day4, f.dir + "/e", {"--initial-models", bad});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find(bad + ":1: symbol CRANE.A: parameters fail the model's constraints") !=
          std::string::npos);
  }
  SECTION("a spec label that does not match the parameters") {
    nlohmann::json j = f.last.at("CRANE.A");
    j["estimates"].erase(j["estimates"].size() - 1);
    const std::string bad = WriteFile(f.dir + "/bad3.jsonl", j.dump() + "\n");
    const auto r = Replay(f.cfg, f.day4, f.dir + "/e", {"--initial-models", bad});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find(bad + ":1: symbol CRANE.A: parameters do not match") != std::string::npos);
  }
  SECTION("a record of the retired format names the rename") {
    nlohmann::json j = f.last.at("CRANE.A");
    j["params"] = j["estimates"];
    j.erase("estimates");
    const std::string bad = WriteFile(f.dir + "/old.jsonl", j.dump() + "\n");
    const auto r = Replay(f.cfg, f.day4, f.dir + "/e", {"--initial-models", bad});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find(bad + ":1: symbol CRANE.A: a record of the retired format: 'params' was "
                           "renamed: use estimates (CHANGELOG.md)") != std::string::npos);
    nlohmann::json k = f.last.at("CRANE.A");
    k["spec"] = "constant-mean-GARCH(1,1)-t";
    const std::string old_label = WriteFile(f.dir + "/old_label.jsonl", k.dump() + "\n");
    const auto l = RunCli({"models", "list", old_label});
    CHECK(l.exit_code == 2);
    CHECK(l.err.find("labels were renamed, e.g. constant-mean-GARCH(1,1)-t is now "
                     "const/GARCH(1,1)/student") != std::string::npos);
  }
  SECTION("records of other outcomes are ignored") {
    nlohmann::json j = f.last.at("CRANE.A");
    j["outcome"] = "rejected";
    j["estimates"] = nlohmann::json::array();
    const std::string file = WriteFile(f.dir + "/rej.jsonl", j.dump() + "\n");
    const auto r = RunCli({"models", "list", file, "--format", "json"});
    CHECK(r.exit_code == 0);
    CHECK(nlohmann::json::parse(r.out)["models"].empty());
  }
  SECTION("a checkpoint needs its configuration; unknown symbols and files") {
    const auto r = RunCli({"models", "list", f.ckpt});
    CHECK(r.exit_code == 2);
    CHECK(r.err.find("is a checkpoint: give --config") != std::string::npos);
    const auto s = RunCli({"models", "show", f.models, "NOPE.X"});
    CHECK(s.exit_code == 2);
    CHECK(s.err.find("no model of symbol 'NOPE.X'") != std::string::npos);
    const auto n = RunCli({"models", "list", f.dir + "/missing.jsonl"});
    CHECK(n.exit_code == 2);
    const auto u = RunCli({"models", "frob", f.models});
    CHECK(u.exit_code == 2);
    CHECK(u.err.find("unknown subcommand 'frob'") != std::string::npos);
  }
  SECTION("--resume wins over --initial-models") {
    const auto r = Replay(f.cfg, f.day4, f.dir + "/res",
                          {"--resume", f.ckpt, "--initial-models", f.models});
    INFO(r.err);
    CHECK(r.exit_code == 0);
    const auto plain = Replay(f.cfg, f.day4, f.dir + "/res_plain", {"--resume", f.ckpt});
    REQUIRE(plain.exit_code == 0);
    CHECK(ReadFileOrDie(f.dir + "/res.u") == ReadFileOrDie(f.dir + "/res_plain.u"));
  }
}

TEST_CASE("run --initial-models: a bad file is exit 2, a good one seeds the symbols",
          "[app][models][run]") {
  const Fixture& f = Day();
  REQUIRE(f.last.size() == 3);
  // No input arrives: the run only gets as far as reading the file.
  const std::string cfg = WriteFile(
      f.dir + "/run.toml",
      "[feed]\nendpoints = [\"tcp://127.0.0.1:1\"]\n[publish]\nendpoint = "
      "\"tcp://127.0.0.1:*\"\n[http]\nenabled = false\n");
  nlohmann::json j = f.last.at("WREN.C");
  j["spec"] = "const/GARCH(1,x)/gaussian";
  const std::string bad = WriteFile(f.dir + "/bad_run.jsonl", j.dump() + "\n");
  const auto r = RunCli({"run", "--config", cfg, "--initial-models", bad});
  CHECK(r.exit_code == 2);
  CHECK(r.err.find(bad + ":1: symbol WREN.C: 'const/GARCH(1,x)/gaussian' is not a model "
                         "label") != std::string::npos);
  // A good file: the run starts (stopped by SIGTERM from timeout(1) after 2 s).
  const auto ok = testing::RunCommand(
      {"/usr/bin/timeout", "-s", "TERM", "2", AFTERSHOCK_CLI, "run", "--config", cfg,
       "--initial-models", f.models});
  INFO(ok.err);
  CHECK(ok.err.find("aftershock run: 3 symbols start on the models of " + f.models) !=
        std::string::npos);
}

}  // namespace
}  // namespace aftershock
