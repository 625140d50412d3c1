#include "aftershock/engine_metrics.h"

#include <catch2/catch.hpp>

#include "aftershock/wire.h"
#include "streaming/engine_test_util.h"

namespace aftershock {
namespace {

// Format reference: Prometheus text exposition format 0.0.4 (HELP/TYPE lines,
// `name{label="value"} number`).
TEST_CASE("metrics text carries every counter, rejects by reason, per-symbol counts", "[metrics]") {
  EngineConfig config = testing::ParseConfigOrDie(testing::kFixedModelToml);
  testing::CollectingSink sink;
  ManualClock clock;
  auto core = IngestCore::Create(config, &sink, &clock);
  REQUIRE(core.ok());
  std::string body;
  for (int i : {3, 4, 5, 1}) {  // the last one is too old
    Tick t;
    t.symbol.assign("NUTMEG.J");
    t.t_ns = 1000 * i;
    t.kind = Tick::kReturn;
    t.value = 0.001 * i;
    EncodeTickJson(t, &body);
    (*core)->OnMessage("NUTMEG.J", body);
  }
  const std::string m = FormatPrometheusMetrics(**core);
  CHECK(m.find("# HELP aftershock_ticks_in_total ") != std::string::npos);
  CHECK(m.find("# TYPE aftershock_ticks_in_total counter\naftershock_ticks_in_total 4\n") !=
        std::string::npos);
  CHECK(m.find("\naftershock_updates_out_total 3\n") != std::string::npos);
  CHECK(m.find("\naftershock_symbols 1\n") != std::string::npos);
  CHECK(m.find("aftershock_rejects_total{reason=\"too_old\"} 1\n") != std::string::npos);
  CHECK(m.find("aftershock_rejects_total{reason=\"malformed_json\"} 0\n") != std::string::npos);
  CHECK(m.find("aftershock_rejects_total{reason=\"non_finite_output\"} 0\n") != std::string::npos);
  CHECK(m.find("aftershock_symbol_updates_total{symbol=\"NUTMEG.J\"} 3\n") != std::string::npos);
  CHECK(m.find("aftershock_symbol_ticks_total{symbol=\"NUTMEG.J\"} 3\n") != std::string::npos);
  CHECK(FormatHealthJson(**core) ==
        "{\"status\":\"ok\",\"symbols\":1,\"updates\":3,\"rejects\":1,\"recent_inputs\":4,"
        "\"recent_rejects\":1}\n");
}

TEST_CASE("health turns degraded when most inputs of the last minute are rejected", "[metrics]") {
  // The producer sends JSON to a feed configured for binary frames.
  EngineConfig config = testing::ParseConfigOrDie(std::string(testing::kFixedModelToml) +
                                                  "[feed]\nencoding = \"binary\"\n");
  testing::CollectingSink sink;
  ManualClock clock;
  auto core = IngestCore::Create(config, &sink, &clock);
  REQUIRE(core.ok());
  RejectWindow window;
  constexpr int64_t kS = kNanosPerSecond;
  window.Sample((*core)->counters(), 0);
  std::string json_body;
  Tick t;
  t.symbol.assign("NUTMEG.J");
  t.kind = Tick::kReturn;
  for (int i = 0; i < 97; ++i) {
    t.t_ns = 1000 * (i + 1);
    t.value = 0.001;
    EncodeTickJson(t, &json_body);
    (*core)->OnMessage("NUTMEG.J", json_body);
  }
  std::string binary_body;
  for (int i = 0; i < 3; ++i) {
    t.t_ns = 1000000 + 1000 * i;
    EncodeTickBinary(t, &binary_body);
    (*core)->OnMessage("NUTMEG.J", binary_body);
  }
  HealthStatus h = CheckHealth(**core, window, 30 * kS);
  CHECK(h.degraded);
  CHECK(h.reason ==
        "97% of inputs rejected in the last minute (97 of 100; most malformed_binary 97)");
  CHECK(h.json ==
        "{\"status\":\"degraded\",\"symbols\":1,\"updates\":3,\"rejects\":97,"
        "\"recent_inputs\":100,\"recent_rejects\":97,\"reason\":\"97% of inputs rejected in the "
        "last minute (97 of 100; most malformed_binary 97)\"}\n");
  // Samples every second; a minute later only good input arrived: ok again.
  for (int s = 1; s <= 61; ++s) window.Sample((*core)->counters(), s * kS);
  for (int i = 0; i < 30; ++i) {
    t.t_ns = 2000000 + 1000 * i;
    EncodeTickBinary(t, &binary_body);
    (*core)->OnMessage("NUTMEG.J", binary_body);
  }
  h = CheckHealth(**core, window, 61 * kS + kS / 2);
  CHECK_FALSE(h.degraded);
  CHECK(h.json.find("\"status\":\"ok\"") != std::string::npos);
  CHECK(h.json.find("\"rejects\":97,\"recent_inputs\":30,\"recent_rejects\":0}") !=
        std::string::npos);
  // Too few inputs to judge: 3 rejects of 3 is not degraded.
  RejectWindow fresh;
  fresh.Sample((*core)->counters(), 100 * kS);
  for (int i = 0; i < 3; ++i) (*core)->OnMessage("NUTMEG.J", json_body);
  CHECK_FALSE(CheckHealth(**core, fresh, 101 * kS).degraded);
}

}  // namespace
}  // namespace aftershock
