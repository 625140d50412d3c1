#include "aftershock/refit_options.h"

#include <catch2/catch.hpp>

namespace aftershock {
namespace {

std::string Msg(const RefitOptions& o) { return std::string(o.Validate().message()); }

TEST_CASE("default refit options are valid", "[options]") {
  RefitOptions o;
  CHECK(o.Validate().ok());
  CHECK(o.window == 2000);
  CHECK(o.min_bars == 250);
  CHECK(o.max_persistence == 0.9995);
  CHECK(o.holdout_bars == 100);
  CHECK(o.holdout_margin == 0.05);
  CHECK(o.max_failures == 3);
  CHECK(o.apply_lag_bars == 1);
  CHECK(o.workers == 1);
}

TEST_CASE("bad refit options name their field", "[options]") {
  RefitOptions o;
  o.every_bars = 0;
  CHECK(Msg(o) == "[refit] every_bars and every_seconds cannot both be 0");
  o = RefitOptions{};
  o.min_bars = 3000;
  CHECK(Msg(o) == "[refit] min_bars must be in 2..window");
  o = RefitOptions{};
  o.workers = 0;
  CHECK(Msg(o) == "[refit] workers must be in 1..256");
  o = RefitOptions{};
  o.apply_lag_bars = 0;
  CHECK(Msg(o) == "[refit] apply_lag_bars must be >= 1");
  o = RefitOptions{};
  o.jitter_fraction = 1.5;
  CHECK(Msg(o) == "[refit] jitter_fraction must be in [0, 1]");
  o = RefitOptions{};
  o.queue_capacity = 0;
  CHECK(Msg(o) == "[refit] queue_capacity must be >= 1");
  o = RefitOptions{};
  o.every_seconds = -1;
  CHECK(Msg(o) == "[refit] every_seconds must be a finite number >= 0");
  o = RefitOptions{};
  o.diagnostics_level = 1;
  CHECK(Msg(o) == "[refit] diagnostics_level must be in [0, 1)");
}

}  // namespace
}  // namespace aftershock
