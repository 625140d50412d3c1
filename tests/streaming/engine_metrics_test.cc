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
        "{\"status\":\"ok\",\"symbols\":1,\"updates\":3,\"rejects\":1}\n");
}

}  // namespace
}  // namespace aftershock
