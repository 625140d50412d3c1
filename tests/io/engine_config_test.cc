#include "aftershock/engine_config.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <set>
#include <sstream>
#include <string>
#include <utility>
#include <vector>

#include "support/test_support.h"

namespace aftershock {
namespace {

std::string ErrorOf(const std::string& toml) {
  auto c = ParseEngineConfig(toml, "config.toml");
  if (c.ok()) return "ok";
  return std::string(c.status().message());
}

TEST_CASE("an empty document gives the documented defaults", "[engine_config]") {
  auto c = ParseEngineConfig("", "empty.toml");
  REQUIRE(c.ok());
  CHECK(c->feed.endpoints == std::vector<std::string>{"tcp://127.0.0.1:7301"});
  CHECK(c->feed.encoding == WireEncoding::kJson);
  CHECK(c->feed.max_message_bytes == 65536);
  CHECK(c->feed.curve_server_key.empty());
  CHECK(c->publish.endpoint == "tcp://127.0.0.1:7302");
  CHECK(c->publish.high_water_mark == 100000);
  CHECK(c->bars.interval_ns == 0);
  CHECK(c->bars.grace_ns == 200000000);
  CHECK(c->bars.max_lateness_ns == 5000000000);
  CHECK_FALSE(c->bars.session.enabled);
  CHECK(c->model.spec.Label() ==
        MakeModelSpec("constant", {}, "garch", {1, 1}, "student")->Label());
  CHECK(c->model.presample == Presample::kMeanSquare);
  CHECK_FALSE(c->model.has_params);
  CHECK(c->warmup.ewma_lambda == 0.94);
  CHECK(c->warmup.min_bars == 2);
  CHECK(c->outputs.horizons == std::vector<int>{1, 5, 20});
  CHECK(c->outputs.risk_levels == std::vector<double>{0.99, 0.975});
  CHECK(c->outputs.periods_per_year_auto);
  CHECK(c->outputs.periods_per_year == 252);  // auto with "0s" bars
  CHECK(c->outputs.return_units == ReturnUnits::kFraction);
  CHECK(c->outputs.target_vol_ann == 0.10);
  CHECK(c->outputs.scale_cap == 3.0);
  CHECK(c->limits.max_symbols == 10000);
  CHECK(c->refit.every_bars == 100);
  CHECK(c->refit.every_seconds == 0);
  CHECK(c->refit.window == 2000);
  CHECK(c->refit.min_bars == 200);
  CHECK(c->refit.workers == 1);
  CHECK(c->refit.reidentify_every == 10);
  CHECK(c->refit.max_persistence == 0.9995);
  CHECK(c->refit.holdout_bars == 100);
  CHECK(c->refit.holdout_margin == 0.05);
  CHECK(c->refit.max_failures == 3);
  CHECK(c->refit.apply_lag_bars == 1);
  CHECK(c->refit.jitter_fraction == 0.1);
  CHECK(c->refit.queue_capacity == 1024);
  CHECK(c->refit.diagnostics_level == 0.01);
  CHECK(c->alerts.shock_z == 4.0);
  CHECK(c->alerts.shock_critical_z == 6.0);
  CHECK(c->alerts.cooldown_bars == 20);
  CHECK(c->alerts.regime_scale == 3.0);
  CHECK(c->alerts.regime_enter_evidence == 10.0);
  CHECK(c->alerts.regime_exit_evidence == 6.0);
  CHECK(c->alerts.regime_tail_nu == 5.0);
  CHECK(c->alerts.persistence_threshold == 0.995);
  CHECK(c->alerts.stale_seconds == 60);
  CHECK(c->alerts.reject_burst == 100);
  CHECK(c->http.endpoint == "127.0.0.1:7310");
  CHECK(c->http.enabled);
  CHECK(c->checkpoint.path.empty());
  CHECK(c->checkpoint.every_seconds == 60);
  CHECK(c->log.level == LogLevel::kInfo);
}

TEST_CASE("both shipped configuration files parse", "[engine_config]") {
  auto d = LoadEngineConfigFile(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/default.toml");
  REQUIRE(d.ok());
  // default.toml states the defaults: it must equal an empty document.
  CHECK(FormatEngineConfig(*d) == FormatEngineConfig(*ParseEngineConfig("", "x")));
  auto e =
      LoadEngineConfigFile(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/example-intraday.toml");
  INFO((e.ok() ? std::string() : std::string(e.status().message())));
  REQUIRE(e.ok());
  CHECK(e->bars.interval_ns == 60 * kNanosPerSecond);
  CHECK(e->bars.session.enabled);
  CHECK(e->bars.session.start_minute == 480);
  CHECK(e->bars.session.end_minute == 990);
  CHECK(e->bars.session.tz_offset_minutes == 60);
  CHECK(e->model.spec.Label() == "ARMA(1,1)/GJR-GARCH(1,1)/student");
  CHECK(e->model.presample == Presample::kRobustStart);
  REQUIRE(e->model.has_params);
  CHECK(*e->model.params.Get("gamma_1") == 0.05);
  CHECK(e->outputs.return_units == ReturnUnits::kPercent);
  // What `aftershock simulate --publish` sends by default.
  CHECK(e->feed.encoding == WireEncoding::kJson);
  CHECK(e->feed.endpoints.size() == 1);
  CHECK(e->outputs.periods_per_year_auto);
  CHECK(e->outputs.periods_per_year == 252 * 510);
  CHECK(e->refit.min_bars <= 510);  // the first model inside the first session
  auto missing = LoadEngineConfigFile("/nonexistent/x.toml");
  CHECK(std::string(missing.status().message()) ==
        "/nonexistent/x.toml: cannot open configuration file");
}

TEST_CASE("a full configuration round-trips through FormatEngineConfig", "[engine_config]") {
  auto e =
      LoadEngineConfigFile(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/example-intraday.toml");
  REQUIRE(e.ok());
  EngineConfig c = *e;
  c.feed.curve_server_key = std::string(40, 'a');
  c.publish.curve_secret_key = "0123456789abcdefghijABCDEFGHIJ.-:+=^!/*?";
  c.refit.holdout_margin = 1.0 / 3.0;  // needs all 17 digits
  c.log.level = LogLevel::kWarn;
  c.http.enabled = false;
  const std::string text = FormatEngineConfig(c);
  auto back = ParseEngineConfig(text, "formatted.toml");
  INFO(text);
  REQUIRE(back.ok());
  CHECK(FormatEngineConfig(*back) == text);
  CHECK(back->refit.holdout_margin == 1.0 / 3.0);
  CHECK(back->publish.curve_secret_key == c.publish.curve_secret_key);
  CHECK(back->model.params.values == c.model.params.values);
  CHECK(back->bars.session.end_minute == 990);
}

TEST_CASE("periods_per_year: auto from the bar interval and session, or a number",
          "[engine_config]") {
  // 252 trading days times the bars of a day (the session, or 24 h).
  auto ppy = [](const std::string& toml) {
    auto c = ParseEngineConfig(toml, "p.toml");
    INFO(toml << (c.ok() ? "" : std::string(c.status().message())));
    REQUIRE(c.ok());
    return c->outputs.periods_per_year;
  };
  CHECK(ppy("") == 252);
  CHECK(ppy("[outputs]\nperiods_per_year = \"auto\"\n") == 252);
  CHECK(ppy("[bars]\ninterval = \"1m\"\n") == 252 * 1440);
  CHECK(ppy("[bars]\ninterval = \"5m\"\n") == 252 * 288);
  CHECK(ppy("[bars]\ninterval = \"1m\"\nsession = { start = \"09:30\", end = \"16:00\" }\n") ==
        98280);
  CHECK(ppy("[bars]\ninterval = \"1m\"\nsession = { start = \"08:00\", end = \"16:30\" }\n") ==
        128520);
  // 7 h at 1h bars: 7 bars; 6.5 h at 1h bars: 7 bars (the last is 30 minutes).
  CHECK(ppy("[bars]\ninterval = \"1h\"\nsession = { start = \"09:30\", end = \"16:00\" }\n") ==
        252 * 7);
  // Over midnight: 22:00-06:00 is 8 h.
  CHECK(ppy("[bars]\ninterval = \"1m\"\nsession = { start = \"22:00\", end = \"06:00\" }\n") ==
        252 * 480);
  CHECK(ppy("[bars]\ninterval = \"1m\"\n[outputs]\nperiods_per_year = 252\n") == 252);
  auto bad = ParseEngineConfig("[outputs]\nperiods_per_year = \"daily\"\n", "p.toml");
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) ==
        "p.toml:2: [outputs] periods_per_year: expected \"auto\" or a number > 0, got \"daily\"");
  // The round trip keeps "auto" (not the derived number) and a number.
  auto a = ParseEngineConfig("[bars]\ninterval = \"1m\"\n", "p.toml");
  REQUIRE(a.ok());
  CHECK(FormatEngineConfig(*a).find("periods_per_year = \"auto\"\n") != std::string::npos);
  EngineConfig by_hand;
  by_hand.bars.interval_ns = 60 * kNanosPerSecond;
  ResolveAutoSettings(&by_hand);
  CHECK(by_hand.outputs.periods_per_year == 252 * 1440);
  by_hand.outputs.periods_per_year_auto = false;
  by_hand.outputs.periods_per_year = 1000;
  auto back = ParseEngineConfig(FormatEngineConfig(by_hand), "p.toml");
  REQUIRE(back.ok());
  CHECK_FALSE(back->outputs.periods_per_year_auto);
  CHECK(back->outputs.periods_per_year == 1000);
}

TEST_CASE("durations", "[engine_config]") {
  CHECK(*ParseDuration("0s") == 0);
  CHECK(*ParseDuration("500ms") == 500000000);
  CHECK(*ParseDuration("5s") == 5000000000);
  CHECK(*ParseDuration("1m") == 60000000000);
  CHECK(*ParseDuration("1h") == 3600000000000);
  CHECK(*ParseDuration("250us") == 250000);
  CHECK(*ParseDuration("7ns") == 7);
  CHECK_FALSE(ParseDuration("1.5s").ok());
  CHECK_FALSE(ParseDuration("-1s").ok());
  CHECK_FALSE(ParseDuration("s").ok());
  CHECK_FALSE(ParseDuration("99999999999999999999h").ok());
  CHECK(FormatDuration(0) == "0s");
  CHECK(FormatDuration(90 * kNanosPerSecond) == "90s");
  CHECK(FormatDuration(3600 * kNanosPerSecond) == "1h");
  CHECK(FormatDuration(200000000) == "200ms");
}

TEST_CASE("every error class names file, line, section and key", "[engine_config]") {
  // TOML syntax error (from toml++), with the line.
  CHECK(ErrorOf("[feed]\nencoding = \"json\n").find("config.toml:2: ") == 0);
  // Unknown section, top-level key and key.
  CHECK(ErrorOf("\n[fed]\n").find("config.toml:2: unknown section [fed]") == 0);
  CHECK(ErrorOf("x = 1\n").find("config.toml:1: unknown top-level key 'x'") == 0);
  CHECK(ErrorOf("feed = 1\n") == "config.toml:1: 'feed' must be a section [feed], got integer");
  CHECK(ErrorOf("[bars]\ninterval = \"1m\"\nintervall = \"2m\"\n")
            .find("config.toml:3: [bars] unknown key 'intervall' (known: interval, grace,") == 0);
  // The example of the brief.
  CHECK(ErrorOf("[bars]\n\n\ninterval = \"abc\"\n") ==
        "config.toml:4: [bars] interval: expected a duration like \"0s\", \"5s\", \"1m\", got "
        "\"abc\"");
  CHECK(ErrorOf("[bars]\ngrace = 5\n") ==
        "config.toml:2: [bars] grace: expected a duration like \"0s\", \"5s\", \"1m\", got 5");
  // Type errors.
  CHECK(ErrorOf("[feed]\nmax_message_bytes = \"big\"\n") ==
        "config.toml:2: [feed] max_message_bytes: expected an integer, got string");
  CHECK(ErrorOf("[http]\nenabled = 1\n") ==
        "config.toml:2: [http] enabled: expected true or false, got integer");
  CHECK(ErrorOf("[warmup]\newma_lambda = \"x\"\n") ==
        "config.toml:2: [warmup] ewma_lambda: expected a number, got string");
  CHECK(ErrorOf("[feed]\nendpoints = \"tcp://a:1\"\n") ==
        "config.toml:2: [feed] endpoints: expected an array of strings, got string");
  // Ranges.
  CHECK(ErrorOf("[warmup]\newma_lambda = 1\n") ==
        "config.toml:2: [warmup] ewma_lambda: must be in (0, 1), got 1");
  CHECK(ErrorOf("[refit]\nworkers = 0\n") ==
        "config.toml:2: [refit] workers: must be in 1..256, got 0");
  CHECK(ErrorOf("[outputs]\nrisk_levels = [0.99, 0.4]\n") ==
        "config.toml:2: [outputs] risk_levels: entries must be in (0.5, 1), got 0.4");
  CHECK(ErrorOf("[outputs]\nhorizons = [1,2,3,4,5,6,7,8,9]\n") ==
        "config.toml:2: [outputs] horizons: at most 8 entries, got 9");
  CHECK(ErrorOf("[outputs]\nhorizons = [5, 1]\n") ==
        "config.toml:2: [outputs] horizons: entries must be strictly increasing");
  CHECK(ErrorOf("[outputs]\nreturn_units = \"bp\"\n") ==
        "config.toml:2: [outputs] return_units: expected one of \"fraction\", \"percent\", got "
        "\"bp\"");
  CHECK(ErrorOf("[outputs]\ntarget_vol_ann = 0\n") ==
        "config.toml:2: [outputs] target_vol_ann: must be in (0, inf), got 0");
  // Endpoints and keys.
  CHECK(ErrorOf("[publish]\nendpoint = \"127.0.0.1:7302\"\n") ==
        "config.toml:2: [publish] endpoint: expected a ZeroMQ endpoint like "
        "\"tcp://127.0.0.1:7301\", got \"127.0.0.1:7302\"");
  CHECK(ErrorOf("[feed]\nendpoints = []\n") ==
        "config.toml:2: [feed] endpoints: at least one endpoint is required");
  CHECK(ErrorOf("[feed]\ncurve_server_key = \"abc\"\n") ==
        "config.toml:2: [feed] curve_server_key: expected a 40-character Z85 CURVE key, got 3 "
        "characters");
  CHECK(ErrorOf("[http]\nendpoint = \"localhost\"\n") ==
        "config.toml:2: [http] endpoint: expected host:port like \"127.0.0.1:7310\", got "
        "\"localhost\"");
  // Cross-field rules.
  CHECK(ErrorOf("[refit]\nwindow = 100\n") ==
        "config.toml:2: [refit] window: min_bars (200) must not exceed window (100)");
  CHECK(ErrorOf("[alerts]\nshock_z = 7\n") ==
        "config.toml:2: [alerts] shock_z: shock_critical_z (6) must be >= shock_z (7)");
}

TEST_CASE("session errors", "[engine_config]") {
  CHECK(ErrorOf("[bars]\nsession = { start = \"8:00\", end = \"16:30\" }\n") ==
        "config.toml:2: [bars.session] start: expected a local time \"HH:MM\" (00:00..23:59), "
        "got \"8:00\"");
  CHECK(ErrorOf("[bars]\nsession = { start = \"08:00\" }\n") ==
        "config.toml:2: [bars.session] end: required when a session is given");
  CHECK(ErrorOf("[bars]\nsession = { start = \"08:00\", end = \"08:00\" }\n") ==
        "config.toml:2: [bars.session] end: the session must not be empty or a full day (start "
        "== end)");
  CHECK(ErrorOf("[bars]\nsession = { start = \"08:00\", end = \"24:00\", tz = 1 }\n")
            .find("config.toml:2: [bars.session] unknown key 'tz'") == 0);
  CHECK(ErrorOf("[bars]\nsession = \"08:00-16:30\"\n")
            .find("config.toml:2: [bars] session: expected a table") == 0);
  // Sub-table form, over midnight.
  auto c = ParseEngineConfig(
      "[bars]\ninterval = \"5m\"\n[bars.session]\nstart = \"22:00\"\nend = \"06:00\"\n"
      "timezone_offset_minutes = -300\n",
      "x");
  REQUIRE(c.ok());
  CHECK(c->bars.session.start_minute == 1320);
  CHECK(c->bars.session.end_minute == 360);
  CHECK(c->bars.session.tz_offset_minutes == -300);
  CHECK(c->bars.ToBarOptions().interval_ns == 5 * kNanosPerMinute);
}

TEST_CASE("model and parameter errors name the key and line", "[engine_config]") {
  CHECK(ErrorOf("[model]\nmean = \"arima\"\n") ==
        "config.toml:2: [model] mean: unknown mean 'arima' (expected zero, constant or arma)");
  CHECK(ErrorOf("[model]\nvariance = \"figarch\"\n")
            .find("config.toml:2: [model] variance: unknown variance 'figarch'") == 0);
  CHECK(ErrorOf("[model]\nmean = \"arma\"\nmean_order = [6, 0]\n")
            .find("config.toml:3: [model] mean_order: ARMA orders must be in 0..5") == 0);
  CHECK(ErrorOf("[model]\nmean_order = [1, 1]\n") ==
        "config.toml:2: [model] mean_order: only used with mean = \"arma\"");
  // Lags are named keys; the positional key of before is refused with its replacement.
  CHECK(ErrorOf("[model]\nvariance_order = [1, 1]\n") ==
        "config.toml:2: [model] 'variance_order' was renamed: use shock_lags, asym_lags, "
        "variance_lags (CHANGELOG.md)");
  CHECK(ErrorOf("[model]\nvariance = \"garch\"\nasym_lags = 1\n") ==
        "config.toml:3: [model] asym_lags: variance 'garch' has no asym_lags (asym_lags is for "
        "gjr)");
  CHECK(ErrorOf("[model]\nvariance = \"gjr\"\nshock_lags = 9\n")
            .find("config.toml:3: [model] shock_lags: GARCH shock_lags must be in 1..5, got 9") ==
        0);
  CHECK(ErrorOf("[model]\nvariance = \"garch\"\nvariance_lags = 6\n")
            .find("config.toml:3: [model] variance_lags: GARCH variance_lags must be in 0..5") ==
        0);
  CHECK(ErrorOf("[model]\nvariance = \"constant\"\n") ==
        "config.toml:2: [model] variance: unknown variance 'constant' (expected flat, arch, "
        "garch, gjr or ewma); 'constant' was renamed: use flat (CHANGELOG.md)");
  CHECK(ErrorOf("[model]\ninnovations = \"t\"\n").find("'t' was renamed: use student") !=
        std::string::npos);
  CHECK(ErrorOf("[model]\npresample = \"backcast\"\n")
            .find("'backcast' was renamed: use robust-start") != std::string::npos);
  {
    auto gjr = ParseEngineConfig(
        "[model]\nvariance = \"gjr\"\nshock_lags = 2\nasym_lags = 1\nvariance_lags = 1\n", "x");
    REQUIRE(gjr.ok());
    CHECK(gjr->model.spec.Label() == "const/GJR-GARCH(2,1;1)/student");
    CHECK(gjr->model.spec.arch_order == 2);
    CHECK(gjr->model.spec.asym_order == 1);
    CHECK(gjr->model.spec.garch_order == 1);
  }
  const std::string head = "[model]\nvariance = \"garch\"\ninnovations = \"gaussian\"\n";
  const std::string nu_error =
      ErrorOf(head + "[model.params]\nmu = 0\nomega = 0.1\nalpha_1 = 0.1\nbeta_1 = 0.8\nnu = 5\n");
  CHECK(nu_error.find("config.toml:9: [model.params] nu: not a parameter of ") == 0);
  CHECK(nu_error.find("(expected mu, omega, alpha_1, beta_1)") != std::string::npos);
  // The retired parameter spelling names the new one.
  CHECK(ErrorOf(head + "[model.params]\nmu = 0\nomega = 0.1\nalpha1 = 0.1\nbeta_1 = 0.8\n")
            .find("[model.params] alpha1: not a parameter of const/GARCH(1,1)/gaussian "
                  "(expected mu, omega, alpha_1, beta_1); 'alpha1' was renamed: use alpha_1") !=
        std::string::npos);
  CHECK(ErrorOf(head + "[model.params]\nmu = 0\nomega = 0.1\nalpha_1 = \"x\"\nbeta_1 = 0.8\n") ==
        "config.toml:7: [model.params] alpha_1: expected a number, got string");
  CHECK(ErrorOf(head + "[model.params]\nmu = 0\nomega = 0.1\nbeta_1 = 0.8\n")
            .find("config.toml:4: [model.params] ") == 0);
  CHECK(ErrorOf(head + "[model.params]\nmu = 0\nomega = -0.1\nalpha_1 = 0.1\nbeta_1 = 0.8\n")
            .find("config.toml:6: [model.params] omega: omega must be > 0") == 0);
  CHECK(ErrorOf(head + "[model.params]\nmu = 0\nomega = 0.1\nalpha_1 = 0.3\nbeta_1 = 0.8\n")
            .find("persistence must be < 1") != std::string::npos);
  auto ok = ParseEngineConfig(
      head + "[model.params]\nmu = 0\nomega = 1\nalpha_1 = 0.1\nbeta_1 = 0.8\n", "x");
  REQUIRE(ok.ok());
  CHECK(ok->model.has_params);
  CHECK(ok->model.params.values == std::vector<double>{0, 1, 0.1, 0.8});
}

}  // namespace
}  // namespace aftershock

namespace aftershock {
namespace {

TEST_CASE("alert groups override [alerts] for matching symbols", "[config][alerts]") {
  auto c = ParseEngineConfig(R"([alerts]
shock_z = 4.5
cooldown_bars = 10
[alerts.groups.energy]
symbols = ["BRANDR*", "SKJOLD.GAS"]
shock_z = 3.5
[alerts.groups.fx]
symbols = ["HALVARD.FX"]
regime_enter_evidence = 12
regime_exit_evidence = 4
)",
                             "groups.toml");
  INFO(c.status().message());
  REQUIRE(c.ok());
  REQUIRE(c->alert_groups.size() == 2);
  const AlertGroupConfig& e = c->alert_groups[0];
  CHECK(e.name == "energy");
  CHECK(e.alerts.shock_z == 3.5);
  CHECK(e.alerts.cooldown_bars == 10);  // inherited from [alerts]
  CHECK(e.Matches("BRANDR.NRG"));
  CHECK(e.Matches("BRANDR2.NRG"));
  CHECK(e.Matches("SKJOLD.GAS"));
  CHECK_FALSE(e.Matches("SKJOLD.GAS2"));
  CHECK_FALSE(e.Matches("VARDE.PWR"));
  CHECK(c->alert_groups[1].alerts.regime_enter_evidence == 12);
  CHECK(c->alert_groups[1].alerts.regime_exit_evidence == 4);
  CHECK(c->alert_groups[1].alerts.regime_scale == 3);  // the default
  CHECK(c->alert_groups[1].alerts.shock_z == 4.5);
  // The groups survive formatting.
  auto again = ParseEngineConfig(FormatEngineConfig(*c), "formatted.toml");
  REQUIRE(again.ok());
  REQUIRE(again->alert_groups.size() == 2);
  CHECK(again->alert_groups[0].symbols == e.symbols);
  CHECK(again->alert_groups[0].alerts.shock_z == 3.5);
}

TEST_CASE("alert group errors name the group, key and line", "[config][alerts]") {
  auto missing = ParseEngineConfig("[alerts.groups.g]\nshock_z = 3\n", "g.toml");
  REQUIRE_FALSE(missing.ok());
  CHECK(std::string(missing.status().message()) ==
        "g.toml:1: [alerts.groups.g] symbols: required: the symbols of the group");
  auto bad = ParseEngineConfig("[alerts.groups.g]\nsymbols = [\"A B\"]\n", "g.toml");
  REQUIRE_FALSE(bad.ok());
  CHECK(std::string(bad.status().message()) ==
        "g.toml:2: [alerts.groups.g] symbols: 'A B' is not a symbol or a prefix ending in *");
  auto unknown = ParseEngineConfig("[alerts.groups.g]\nsymbols = [\"A\"]\nshock = 3\n", "g.toml");
  REQUIRE_FALSE(unknown.ok());
  CHECK(std::string(unknown.status().message()).rfind(
            "g.toml:3: [alerts.groups.g] unknown key 'shock'", 0) == 0);
  auto scale = ParseEngineConfig(
      "[alerts.groups.g]\nsymbols = [\"A\"]\nregime_scale = 1\n", "g.toml");
  REQUIRE_FALSE(scale.ok());
  CHECK(std::string(scale.status().message()) ==
        "g.toml:3: [alerts.groups.g] regime_scale: must be in (1, 1e+06], got 1");
}

}  // namespace
}  // namespace aftershock

namespace aftershock {
namespace {

// The `key = value` lines of one [section] of a TOML text (comments skipped),
// in order: {key, line}.
std::vector<std::pair<std::string, std::string>> SectionLines(const std::string& text,
                                                              const std::string& section) {
  std::vector<std::pair<std::string, std::string>> out;
  std::istringstream in(text);
  std::string line;
  bool inside = false;
  while (std::getline(in, line)) {
    if (!line.empty() && line[0] == '[') {
      inside = line == "[" + section + "]";
      continue;
    }
    const size_t eq = line.find(" = ");
    if (!inside || line.empty() || line[0] == '#' || eq == std::string::npos) continue;
    out.emplace_back(line.substr(0, eq), line);
  }
  return out;
}

// The keys the parser knows in a section, from its unknown-key message
// ("... unknown key 'x' (known: a, b, c)").
std::vector<std::string> ParserKeys(const std::string& header) {
  const std::string err = ErrorOf(header + "\nnot_a_key_of_any_section = 1\n");
  const size_t at = err.find("(known: ");
  REQUIRE(at != std::string::npos);
  std::vector<std::string> keys;
  std::string list = err.substr(at + 8, err.size() - at - 9);
  std::istringstream in(list);
  std::string k;
  while (std::getline(in, k, ',')) {
    if (!k.empty() && k[0] == ' ') k.erase(0, 1);
    keys.push_back(k);
  }
  return keys;
}

// Backticked lower-case names (`shock_z`) in text.
std::set<std::string> BacktickedNames(const std::string& text) {
  std::set<std::string> names;
  for (size_t i = text.find('`'); i != std::string::npos; i = text.find('`', i + 1)) {
    const size_t j = text.find('`', i + 1);
    if (j == std::string::npos) break;
    const std::string t = text.substr(i + 1, j - i - 1);
    bool name = !t.empty() && t[0] >= 'a' && t[0] <= 'z';
    for (char ch : t)
      name = name && ((ch >= 'a' && ch <= 'z') || (ch >= '0' && ch <= '9') || ch == '_');
    if (name) names.insert(t);
    i = j;
  }
  return names;
}

TEST_CASE("every [alerts] key: parsed, in default.toml, in the README, formatted",
          "[config][alerts]") {
  std::vector<std::string> parser = ParserKeys("[alerts]");
  // `groups` introduces the group tables; it is no threshold.
  parser.erase(std::remove(parser.begin(), parser.end(), "groups"), parser.end());
  CHECK(parser.size() == 17);
  const std::set<std::string> known(parser.begin(), parser.end());

  // config/default.toml lists every key the parser knows, and nothing else, and
  // each of its lines parses on its own in [alerts] and in a group (the two
  // feed-wide reject keys are refused in a group with a hint).
  const std::string dflt =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/default.toml");
  std::set<std::string> in_default;
  for (const auto& [key, line] : SectionLines(dflt, "alerts")) {
    INFO(line);
    in_default.insert(key);
    CHECK(ErrorOf("[alerts]\n" + line + "\n") == "ok");
    const std::string group = ErrorOf("[alerts.groups.g]\nsymbols = [\"A*\"]\n" + line + "\n");
    if (key == "reject_burst" || key == "reject_window_seconds") {
      CHECK(group == "config.toml:3: [alerts.groups.g] " + key +
                         ": the reject-burst rule is feed-wide: set it in [alerts]");
    } else {
      CHECK(group == "ok");
    }
  }
  CHECK(in_default == known);

  // FormatEngineConfig writes every key.
  std::set<std::string> formatted;
  for (const auto& kv : SectionLines(FormatEngineConfig(EngineConfig()), "alerts")) {
    formatted.insert(kv.first);
  }
  CHECK(formatted == known);

  // The README: every backticked name in its Alerts chapter and every
  // "`[alerts] name`" anywhere is an [alerts] key the parser knows, unless it
  // is a word of another vocabulary (kinds, rules, severities, flags, the
  // alert JSON keys, test names); and every key is documented there.
  const std::string readme =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/README.md");
  const size_t begin = readme.find("\n## Alerts\n");
  REQUIRE(begin != std::string::npos);
  const size_t end = readme.find("\n## ", begin + 1);
  std::set<std::string> named = BacktickedNames(readme.substr(begin, end - begin));
  for (size_t i = readme.find("`[alerts] "); i != std::string::npos;
       i = readme.find("`[alerts] ", i + 1)) {
    const size_t j = readme.find('`', i + 1);
    REQUIRE(j != std::string::npos);
    named.insert(readme.substr(i + 10, j - i - 10));
  }
  std::set<std::string> other = {"s",     "t",         "kind", "rule",   "severity",
                                 "value", "threshold", "ver",  "message"};
  for (int k = 0; k < kNumAlertKinds; ++k) {
    other.insert(std::string(AlertKindName(static_cast<AlertKind>(k))));
  }
  for (int r = 0; r <= static_cast<int>(AlertRule::kInstability); ++r) {
    other.insert(std::string(AlertRuleName(static_cast<AlertRule>(r))));
  }
  for (int v = 0; v < kNumSeverities; ++v) {
    other.insert(std::string(SeverityName(static_cast<Severity>(v))));
  }
  for (int b = 0; b < kNumUpdateFlags; ++b) other.insert(std::string(FlagName(b)));
  int keys_named = 0;
  for (const std::string& name : named) {
    const bool is_test = name.size() > 5 && name.compare(name.size() - 5, 5, "_test") == 0;
    if (known.count(name)) {
      ++keys_named;
      continue;
    }
    INFO("README names `" << name << "`: neither an [alerts] key nor another known word");
    CHECK((other.count(name) > 0 || is_test));
  }
  CHECK(keys_named == static_cast<int>(known.size()));
  for (const std::string& k : known) {
    INFO(k);
    CHECK(named.count(k) == 1);
  }
}

TEST_CASE("[alerts] defaults equal AlertOptions' and every key reaches its option",
          "[config][alerts]") {
  const AlertOptions d;
  const AlertOptions c = AlertsConfig().ToAlertOptions();
  CHECK(c.shock_z == d.shock_z);
  CHECK(c.shock_critical_z == d.shock_critical_z);
  CHECK(c.shock_info_z == d.shock_info_z);
  CHECK(c.cooldown_bars == d.cooldown_bars);
  CHECK(c.cooldown_seconds == d.cooldown_seconds);
  CHECK(c.regime_scale == d.regime_scale);
  CHECK(c.regime_enter_evidence == d.regime_enter_evidence);
  CHECK(c.regime_exit_evidence == d.regime_exit_evidence);
  CHECK(c.regime_tail_nu == d.regime_tail_nu);
  CHECK(c.regime_warmup_bars == d.regime_warmup_bars);
  CHECK(c.persistence_threshold == d.persistence_threshold);
  CHECK(c.refit_failures == d.refit_failures);
  CHECK(c.stale_seconds == d.stale_seconds);
  CHECK(c.stale_gap_multiple == d.stale_gap_multiple);
  CHECK(c.reject_burst == d.reject_burst);
  CHECK(c.reject_window_seconds == d.reject_window_seconds);
  CHECK(c.alert_during_warmup == d.alert_during_warmup);

  auto p = ParseEngineConfig(R"([alerts]
shock_z = 4.2
shock_critical_z = 6.5
shock_info_z = 3.1
cooldown_bars = 7
cooldown_seconds = 90
regime_scale = 2.5
regime_enter_evidence = 8
regime_exit_evidence = 2
regime_tail_nu = 7
regime_warmup_bars = 40
persistence_threshold = 0.99
refit_failures = 2
stale_seconds = 45
stale_gap_multiple = 8
reject_burst = 50
reject_window_seconds = 30
alert_during_warmup = true
[alerts.groups.g]
symbols = ["G*"]
shock_info_z = 2.5
cooldown_seconds = 10
regime_tail_nu = 0
regime_warmup_bars = 5
refit_failures = 4
stale_gap_multiple = 0
alert_during_warmup = false
)",
                             "all.toml");
  INFO(p.status().message());
  REQUIRE(p.ok());
  const AlertOptions o = p->alerts.ToAlertOptions();
  CHECK(o.shock_z == 4.2);
  CHECK(o.shock_critical_z == 6.5);
  CHECK(o.shock_info_z == 3.1);
  CHECK(o.cooldown_bars == 7);
  CHECK(o.cooldown_seconds == 90);
  CHECK(o.regime_scale == 2.5);
  CHECK(o.regime_enter_evidence == 8);
  CHECK(o.regime_exit_evidence == 2);
  CHECK(o.regime_tail_nu == 7);
  CHECK(o.regime_warmup_bars == 40);
  CHECK(o.persistence_threshold == 0.99);
  CHECK(o.refit_failures == 2);
  CHECK(o.stale_seconds == 45);
  CHECK(o.stale_gap_multiple == 8);
  CHECK(o.reject_burst == 50);
  CHECK(o.reject_window_seconds == 30);
  CHECK(o.alert_during_warmup);
  REQUIRE(p->alert_groups.size() == 1);
  const AlertOptions g = p->alert_groups[0].alerts.ToAlertOptions();
  CHECK(g.shock_info_z == 2.5);
  CHECK(g.cooldown_seconds == 10);
  CHECK(g.regime_tail_nu == 0);
  CHECK(g.regime_warmup_bars == 5);
  CHECK(g.refit_failures == 4);
  CHECK(g.stale_gap_multiple == 0);
  CHECK_FALSE(g.alert_during_warmup);
  CHECK(g.shock_z == 4.2);  // inherited
  CHECK(g.reject_window_seconds == 30);
  // Formatting keeps every value.
  auto again = ParseEngineConfig(FormatEngineConfig(*p), "again.toml");
  REQUIRE(again.ok());
  CHECK(FormatEngineConfig(*again) == FormatEngineConfig(*p));
}

TEST_CASE("[alerts] range errors name the key", "[config][alerts]") {
  CHECK(ErrorOf("[alerts]\nshock_info_z = 4\n") ==
        "config.toml:2: [alerts] shock_info_z: shock_info_z (4) must be 0 (off) or below shock_z "
        "(4)");
  CHECK(ErrorOf("[alerts]\nregime_tail_nu = 1.5\n") ==
        "config.toml:2: [alerts] regime_tail_nu: must be 0 (normal law) or larger than 2, got 1.5");
  CHECK(ErrorOf("[alerts]\nregime_exit_evidence = 0\n") ==
        "config.toml:2: [alerts] regime_exit_evidence: must be in (0, 1e+06], got 0");
  CHECK(ErrorOf("[alerts]\nregime_enter_evidence = -1\n") ==
        "config.toml:2: [alerts] regime_enter_evidence: must be in (0, 1e+06], got -1");
  CHECK(ErrorOf("[alerts]\nregime_scale = 0.5\n") ==
        "config.toml:2: [alerts] regime_scale: must be in (1, 1e+06], got 0.5");
  // The removed ratio detector's keys are unknown now.
  CHECK(ErrorOf("[alerts]\nregime_enter = 2\n").find("unknown key 'regime_enter'") !=
        std::string::npos);
  CHECK(ErrorOf("[alerts]\nrefit_failures = 0\n") ==
        "config.toml:2: [alerts] refit_failures: must be in 1..1000000, got 0");
  CHECK(ErrorOf("[alerts]\nregime_warmup_bars = -1\n")
            .find("[alerts] regime_warmup_bars: must "
                  "be in 0..") != std::string::npos);
  CHECK(ErrorOf("[alerts]\ncooldown_seconds = -1\n") ==
        "config.toml:2: [alerts] cooldown_seconds: must be in [0, 1e+09], got -1");
  CHECK(ErrorOf("[alerts]\nstale_gap_multiple = -2\n") ==
        "config.toml:2: [alerts] stale_gap_multiple: must be in [0, 1e+06], got -2");
  CHECK(ErrorOf("[alerts]\nreject_window_seconds = 0\n")
            .find("[alerts] reject_window_seconds: must be in [") != std::string::npos);
  CHECK(ErrorOf("[alerts]\nalert_during_warmup = 1\n") ==
        "config.toml:2: [alerts] alert_during_warmup: expected true or false, got integer");
}

TEST_CASE("every [nats] key: parsed, in default.toml, in the README, formatted", "[config][nats]") {
  const std::vector<std::string> parser = ParserKeys("[nats]");
  CHECK(parser.size() == 14);
  const std::set<std::string> known(parser.begin(), parser.end());
  const std::string dflt =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/default.toml");
  std::set<std::string> in_default;
  for (const auto& [key, line] : SectionLines(dflt, "nats")) {
    INFO(line);
    in_default.insert(key);
    CHECK(ErrorOf("[nats]\n" + line + "\n") == "ok");
  }
  CHECK(in_default == known);
  std::set<std::string> formatted;
  for (const auto& kv : SectionLines(FormatEngineConfig(EngineConfig()), "nats")) {
    formatted.insert(kv.first);
  }
  CHECK(formatted == known);
  // The README's Scale-out chapter documents every key.
  const std::string readme =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/README.md");
  const size_t begin = readme.find("\n## Scale-out");
  REQUIRE(begin != std::string::npos);
  const size_t end = readme.find("\n## ", begin + 1);
  const std::set<std::string> named = BacktickedNames(readme.substr(begin, end - begin));
  for (const std::string& k : known) {
    INFO(k);
    CHECK(named.count(k) == 1);
  }
}

TEST_CASE("[feed] source and [nats] values are checked", "[config][nats]") {
  auto c = ParseEngineConfig(
      "[feed]\nsource = \"nats\"\n[nats]\nservers = [\"nats://10.0.0.1:4222\", "
      "\"tls://10.0.0.2:4222\"]\nstream = \"T_1\"\nsubject = \"md.ticks\"\n"
      "partition_subject = \"md.part\"\npartitions = 3\nlease_seconds = 2.5\n"
      "instance = \"eng-a\"\nlease_bucket = \"L\"\ncheckpoint_bucket = \"C-1\"\n"
      "checkpoint_seconds = 0\nexact_refits = false\nreplicas = 3\n"
      "duplicate_window_seconds = 300\n",
      "config.toml");
  REQUIRE(c.ok());
  CHECK(c->feed.source == FeedSource::kNats);
  CHECK(c->nats.servers.size() == 2);
  CHECK(c->nats.stream == "T_1");
  CHECK(c->nats.subject == "md.ticks");
  CHECK(c->nats.partition_subject == "md.part");
  CHECK(c->nats.partitions == 3);
  CHECK(c->nats.lease_seconds == 2.5);
  CHECK(c->nats.instance == "eng-a");
  CHECK(c->nats.lease_bucket == "L");
  CHECK(c->nats.checkpoint_bucket == "C-1");
  CHECK(c->nats.checkpoint_seconds == 0);
  CHECK(!c->nats.exact_refits);
  CHECK(c->nats.replicas == 3);
  CHECK(c->nats.duplicate_window_seconds == 300);
  auto back = ParseEngineConfig(FormatEngineConfig(*c), "x");
  REQUIRE(back.ok());
  CHECK(FormatEngineConfig(*back) == FormatEngineConfig(*c));

  CHECK(ErrorOf("[feed]\nsource = \"kafka\"\n").find("[feed] source") != std::string::npos);
  CHECK(ErrorOf("[nats]\nservers = [\"127.0.0.1:4222\"]\n") ==
        "config.toml:2: [nats] servers: expected a URL like \"nats://127.0.0.1:4222\", got "
        "\"127.0.0.1:4222\"");
  CHECK(ErrorOf("[nats]\nservers = []\n").find("at least one server") != std::string::npos);
  CHECK(ErrorOf("[nats]\nstream = \"a.b\"\n").find("[nats] stream: expected 1..64") !=
        std::string::npos);
  CHECK(ErrorOf("[nats]\nsubject = \"t.*\"\n").find("[nats] subject: expected a subject") !=
        std::string::npos);
  CHECK(ErrorOf("[nats]\nsubject = \"t..x\"\n").find("[nats] subject") != std::string::npos);
  CHECK(ErrorOf("[nats]\nsubject = \"ticks\"\npartition_subject = \"ticks.p\"\n")
            .find("must not overlap") != std::string::npos);
  CHECK(ErrorOf("[nats]\npartitions = 0\n").find("[nats] partitions") != std::string::npos);
  CHECK(ErrorOf("[nats]\nlease_seconds = 0.5\n").find("[nats] lease_seconds") !=
        std::string::npos);
  CHECK(ErrorOf("[nats]\ninstance = \"a b\"\n").find("[nats] instance") != std::string::npos);
  CHECK(ErrorOf("[nats]\nupdates_subject = \"ticks.u\"\n").find("must not overlap") !=
        std::string::npos);
  CHECK(ErrorOf("[nats]\nupdates_subject = \"u.>\"\n").find("[nats] updates_subject") !=
        std::string::npos);
  CHECK(ErrorOf("[nats]\nupdates_subject = \"md.updates\"\n") == "ok");
  CHECK(ErrorOf("[nats]\ncheckpoint_bucket = \"a.b\"\n").find("[nats] checkpoint_bucket") !=
        std::string::npos);
  CHECK(ErrorOf("[nats]\ncheckpoint_seconds = -1\n").find("[nats] checkpoint_seconds") !=
        std::string::npos);
  CHECK(ErrorOf("[nats]\nreplicas = 0\n").find("[nats] replicas") != std::string::npos);
  CHECK(ErrorOf("[nats]\nreplicas = 6\n").find("[nats] replicas") != std::string::npos);
  CHECK(ErrorOf("[nats]\nreplicas = 5\n") == "ok");
  CHECK(
      ErrorOf("[nats]\nduplicate_window_seconds = 0.5\n").find("[nats] duplicate_window_seconds") !=
      std::string::npos);
  CHECK(ErrorOf("[nats]\nduplicate_window_seconds = 86401\n")
            .find("[nats] duplicate_window_seconds") != std::string::npos);
  CHECK(ErrorOf("[nats]\nexact_refits = 1\n").find("[nats] exact_refits") != std::string::npos);
}

}  // namespace
}  // namespace aftershock

namespace aftershock {
namespace {

TEST_CASE("every [tracking] key: parsed, in default.toml, in the README, formatted",
          "[config][tracking]") {
  std::vector<std::string> parser = ParserKeys("[tracking]");
  parser.erase(std::remove(parser.begin(), parser.end(), "groups"), parser.end());
  CHECK(parser.size() == 10);
  const std::set<std::string> known(parser.begin(), parser.end());
  const std::string dflt =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/default.toml");
  std::set<std::string> in_default;
  for (const auto& [key, line] : SectionLines(dflt, "tracking")) {
    INFO(line);
    in_default.insert(key);
    CHECK(ErrorOf("[tracking]\n" + line + "\n") == "ok");
  }
  CHECK(in_default == known);
  std::set<std::string> formatted;
  for (const auto& kv : SectionLines(FormatEngineConfig(EngineConfig()), "tracking")) {
    formatted.insert(kv.first);
  }
  CHECK(formatted == known);
  // Every key is named in the README's chapter on tracking.
  const std::string readme =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/README.md");
  const size_t begin = readme.find("\n## Parameter tracking between refits\n");
  REQUIRE(begin != std::string::npos);
  const size_t end = readme.find("\n## ", begin + 1);
  const std::set<std::string> named = BacktickedNames(readme.substr(begin, end - begin));
  for (const std::string& k : known) {
    INFO(k);
    CHECK(named.count(k) == 1);
  }
}

TEST_CASE("[tracking]: modes, groups, ranges; formatted back", "[config][tracking]") {
  auto c = ParseEngineConfig(
      "[tracking]\nmode = \"track\"\nforgetting = 0.995\nalert_threshold = 0\n"
      "[tracking.groups.fast]\nsymbols = [\"PINE*\", \"FIR.A\"]\nmode = \"drive\"\n",
      "config.toml");
  REQUIRE(c.ok());
  CHECK(c->tracking.mode == TrackingMode::kTrack);
  CHECK(c->tracking.tracker.forgetting == 0.995);
  CHECK(c->tracking.alert_threshold == 0);
  REQUIRE(c->tracking.groups.size() == 1);
  CHECK(c->tracking.ModeFor("PINE.B") == TrackingMode::kDrive);
  CHECK(c->tracking.ModeFor("FIR.A") == TrackingMode::kDrive);
  CHECK(c->tracking.ModeFor("FIR.B") == TrackingMode::kTrack);
  CHECK(c->tracking.AnyOn());
  CHECK_FALSE(EngineConfig().tracking.AnyOn());
  auto again = ParseEngineConfig(FormatEngineConfig(*c), "again");
  REQUIRE(again.ok());
  CHECK(FormatEngineConfig(*again) == FormatEngineConfig(*c));
  CHECK(ErrorOf("[tracking]\nmode = \"fast\"\n").find("[tracking] mode") != std::string::npos);
  CHECK(ErrorOf("[tracking]\nforgetting = 1\n").find("[tracking] forgetting") !=
        std::string::npos);
  CHECK(ErrorOf("[tracking]\nmax_level_ratio = 1\n").find("max_level_ratio") !=
        std::string::npos);
  CHECK(ErrorOf("[tracking.groups.g]\nmode = \"drive\"\n").find("symbols") != std::string::npos);
  CHECK(ErrorOf("[tracking.groups.g]\nsymbols = [\"A\"]\nforgetting = 0.9\n")
            .find("unknown key 'forgetting'") != std::string::npos);
}

// Issue 13: update batches and the low-latency mode.
TEST_CASE("every [feed] and [publish] key: parsed, in default.toml, in the README, formatted",
          "[config][publish]") {
  const std::string dflt =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/config/default.toml");
  const std::string readme =
      testing::ReadFileOrDie(std::string(AFTERSHOCK_SOURCE_DIR) + "/README.md");
  const size_t begin = readme.find("\n## Streaming engine");
  REQUIRE(begin != std::string::npos);
  const size_t end = readme.find("\n## ", begin + 1);
  const std::set<std::string> named = BacktickedNames(readme.substr(begin, end - begin));
  for (const std::string section : {"feed", "publish"}) {
    INFO(section);
    const std::vector<std::string> parser = ParserKeys("[" + section + "]");
    const std::set<std::string> known(parser.begin(), parser.end());
    CHECK(known.size() == (section == "feed" ? 6u : 7u));
    std::set<std::string> in_default;
    for (const auto& [key, line] : SectionLines(dflt, section)) {
      INFO(line);
      in_default.insert(key);
      CHECK(ErrorOf("[" + section + "]\n" + line + "\n") == "ok");
    }
    // The CURVE keys are commented out in default.toml (no key is the default).
    for (const char* curve : {"curve_server_key", "curve_secret_key"}) in_default.insert(curve);
    for (const std::string& k : known) {
      INFO(k);
      CHECK(in_default.count(k) == 1);
    }
    std::set<std::string> formatted;
    for (const auto& kv : SectionLines(FormatEngineConfig(EngineConfig()), section)) {
      formatted.insert(kv.first);
    }
    for (const std::string& k : known) {
      INFO(k);
      if (k.rfind("curve_", 0) != 0) CHECK(formatted.count(k) == 1);  // curve keys only when set
    }
  }
  for (const char* k : {"busy_poll_us", "update_topics", "batch_max_bytes", "batch_max_updates"}) {
    INFO(k);
    CHECK(named.count(k) == 1);
  }
}

TEST_CASE("[publish] update batches and [feed] busy_poll_us: values and ranges",
          "[config][publish]") {
  const EngineConfig d;
  CHECK(d.publish.update_topics == UpdateTopics::kSymbol);
  CHECK(d.publish.batch_max_bytes == 65536);
  CHECK(d.publish.batch_max_updates == 1024);
  CHECK(d.feed.busy_poll_us == 0);
  auto c = ParseEngineConfig(
      "[feed]\nbusy_poll_us = 250\n[publish]\nupdate_topics = \"both\"\n"
      "batch_max_bytes = 4096\nbatch_max_updates = 64\n",
      "config.toml");
  REQUIRE(c.ok());
  CHECK(c->feed.busy_poll_us == 250);
  CHECK(c->publish.update_topics == UpdateTopics::kBoth);
  CHECK(c->publish.batch_max_bytes == 4096);
  CHECK(c->publish.batch_max_updates == 64);
  auto back = ParseEngineConfig(FormatEngineConfig(*c), "x");
  REQUIRE(back.ok());
  CHECK(FormatEngineConfig(*back) == FormatEngineConfig(*c));
  CHECK(back->publish.update_topics == UpdateTopics::kBoth);
  CHECK(back->feed.busy_poll_us == 250);
  CHECK(ParseEngineConfig("[publish]\nupdate_topics = \"batch\"\n", "x")->publish.update_topics ==
        UpdateTopics::kBatch);

  CHECK(ErrorOf("[publish]\nupdate_topics = \"all\"\n").find("[publish] update_topics") !=
        std::string::npos);
  CHECK(ErrorOf("[publish]\nbatch_max_bytes = 1023\n") ==
        "config.toml:2: [publish] batch_max_bytes: must be in 1024..16777216, got 1023");
  CHECK(ErrorOf("[publish]\nbatch_max_updates = 0\n") ==
        "config.toml:2: [publish] batch_max_updates: must be in 1..65535, got 0");
  CHECK(ErrorOf("[publish]\nbatch_max_updates = 65536\n").find("batch_max_updates") !=
        std::string::npos);
  CHECK(ErrorOf("[feed]\nbusy_poll_us = -1\n") ==
        "config.toml:2: [feed] busy_poll_us: must be in 0..3600000000, got -1");
  CHECK(ErrorOf("[feed]\nbusy_poll_us = 1.5\n").find("[feed] busy_poll_us") != std::string::npos);
}

}  // namespace
}  // namespace aftershock
