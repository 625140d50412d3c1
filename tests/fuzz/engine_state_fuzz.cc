// Fuzz entry point for the engine-state restore (engine_checkpoint.h): any
// input (engine_state_input.h: a checkpoint file, or raw CORE/SERV payloads
// sealed into a valid container) either restores into a fresh core and
// services or is refused with a message; never a crash. A restored engine
// must save the same state again, restore that save, and take ticks and clock
// ticks.
#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>

#include "absl/strings/string_view.h"
#include "aftershock/checkpoint_file.h"
#include "aftershock/clock.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/update_sink.h"
#include "engine_state_input.h"
#include "fuzz_common.h"

namespace {

using aftershock::Checkpoint;
using aftershock::EngineConfig;
using aftershock::EngineServices;
using aftershock::IngestCore;

const EngineConfig& Config() {
  static const EngineConfig* config = [] {
    auto c = aftershock::ParseEngineConfig(aftershock::fuzz::kEngineStateToml, "fuzz.toml");
    FUZZ_CHECK(c.ok());
    return new EngineConfig(*c);
  }();
  return *config;
}

// A fresh core with services attached, as `aftershock replay` builds them.
struct Fresh {
  aftershock::NullSink sink;
  aftershock::ManualClock clock;
  std::unique_ptr<IngestCore> core;
  std::unique_ptr<EngineServices> services;
  Fresh() {
    auto c = IngestCore::Create(Config(), &sink, &clock);
    FUZZ_CHECK(c.ok());
    core = *std::move(c);
    aftershock::ServiceOptions so;
    so.mode = aftershock::RefitMode::kReplay;
    so.workers = 1;
    auto s = EngineServices::Attach(core.get(), Config(), so);
    FUZZ_CHECK(s.ok());
    services = *std::move(s);
  }
};

// The checkpoint an input stands for, or an error (bad container).
absl::StatusOr<Checkpoint> ToCheckpoint(absl::string_view in) {
  if (in.substr(0, 8) == "AFSHSNAP") return aftershock::ParseCheckpoint(std::string(in));
  if (in.size() < 8) return absl::InvalidArgumentError("fuzz input shorter than its prefix");
  aftershock::EngineSnapshot snap;
  snap.symbols = aftershock::fuzz::GetU32(in);
  size_t core_len = aftershock::fuzz::GetU32(in.substr(4));
  in.remove_prefix(8);
  if (core_len > in.size()) core_len = in.size();
  snap.core = std::string(in.substr(0, core_len));
  snap.services = std::string(in.substr(core_len));
  snap.has_services = true;
  snap.created_ns = 1;
  auto bytes = aftershock::SerializeEngineSnapshot(snap, Config());
  FUZZ_CHECK(bytes.ok());  // any payloads fit a container
  auto cp = aftershock::ParseCheckpoint(*bytes);
  FUZZ_CHECK(cp.ok());  // what we sealed parses
  return cp;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  if (size > 1 << 20) return 0;
  const absl::string_view in(reinterpret_cast<const char*>(data), size);
  absl::StatusOr<Checkpoint> cp = ToCheckpoint(in);
  if (!cp.ok()) {
    FUZZ_CHECK(!cp.status().message().empty());
    return 0;
  }
  Fresh a;
  const absl::Status s =
      aftershock::RestoreEngineState(*cp, Config(), a.core.get(), a.services.get());
  if (!s.ok()) {
    FUZZ_CHECK(!s.message().empty());
    return 0;
  }
  // A restored engine saves what it restored: the save restores again into
  // another fresh engine and saves the same bytes.
  const aftershock::EngineSnapshot snap =
      aftershock::CaptureEngineState(*a.core, a.services.get(), 1);
  auto bytes = aftershock::SerializeEngineSnapshot(snap, Config());
  FUZZ_CHECK(bytes.ok());
  auto again = aftershock::ParseCheckpoint(*bytes);
  FUZZ_CHECK(again.ok());
  {
    Fresh b;
    FUZZ_CHECK(
        aftershock::RestoreEngineState(*again, Config(), b.core.get(), b.services.get()).ok());
    auto bytes_b = aftershock::SerializeEngineSnapshot(
        aftershock::CaptureEngineState(*b.core, b.services.get(), 1), Config());
    FUZZ_CHECK(bytes_b.ok() && *bytes_b == *bytes);
  }
  // And it runs: one tick per symbol a minute after its last one, then the
  // clock past every open bar.
  int64_t latest = 0;
  for (int i = 0; i < a.core->num_symbols(); ++i) {
    // Restored times are validated, but stay clear of int64 overflow anyway.
    if (a.core->last_tick_ns(i) < 0 || a.core->last_tick_ns(i) > (int64_t{1} << 62)) continue;
    aftershock::Tick t;
    t.symbol.assign(a.core->symbol(i));
    t.t_ns = a.core->last_tick_ns(i) + 60 * aftershock::kNanosPerSecond;
    t.kind = aftershock::Tick::kPrice;
    t.value = 50.0 + i;
    if (t.t_ns > latest) latest = t.t_ns;
    a.core->OnTick(t);
  }
  a.clock.Set(latest + 3600 * aftershock::kNanosPerSecond);
  a.core->OnClock(latest + 3600 * aftershock::kNanosPerSecond);
  return 0;
}
