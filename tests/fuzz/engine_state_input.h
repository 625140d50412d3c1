// Shared by the engine-state fuzz entry point and its seed-corpus generator:
// the fixed configuration the states are restored under, and the layout of a
// fuzz input.
//
// An input is either
//   * a whole checkpoint file (it starts with the magic "AFSHSNAP"): parsed
//     and restored as `aftershock run` does, so the container and
//     configuration checks are exercised; or
//   * raw state payloads, sealed by the entry point into a valid container
//     (correct checksums and configuration section), so mutations reach the
//     state decoders instead of failing a checksum:
//       u32 LE  symbol count written into the header
//       u32 LE  core payload length L (clamped to what follows)
//       L       IngestCore::SaveState payload ("CORE")
//       rest    EngineServices::SaveState payload ("SERV")
#ifndef AFTERSHOCK_TESTS_FUZZ_ENGINE_STATE_INPUT_H_
#define AFTERSHOCK_TESTS_FUZZ_ENGINE_STATE_INPUT_H_

#include <cstdint>
#include <string>

#include "absl/strings/string_view.h"

namespace aftershock::fuzz {

// One-minute price bars in a session with seasonality, refits (pending jobs
// are part of the state), group models and alerts: every state section is
// non-trivial.
inline constexpr char kEngineStateToml[] = R"(
[bars]
interval = "1m"
session = { start = "08:00", end = "09:30" }
[warmup]
start_bars = 8
[refit]
every_bars = 30
window = 120
min_bars = 50
reidentify_every = 0
holdout_bars = 20
apply_lag_bars = 12
[seasonality]
enabled = true
min_sessions = 2
[alerts]
shock_z = 2.5
)";

inline void PutU32(uint32_t v, std::string* out) {
  for (int i = 0; i < 4; ++i) out->push_back(static_cast<char>((v >> (8 * i)) & 0xFF));
}

inline uint32_t GetU32(absl::string_view in) {
  uint32_t v = 0;
  for (int i = 0; i < 4; ++i)
    v |= static_cast<uint32_t>(static_cast<unsigned char>(in[i])) << (8 * i);
  return v;
}

// A raw-payload input (see above).
inline std::string RawStateInput(uint32_t symbols, absl::string_view core,
                                 absl::string_view services) {
  std::string out;
  PutU32(symbols, &out);
  PutU32(static_cast<uint32_t>(core.size()), &out);
  out.append(core.data(), core.size());
  out.append(services.data(), services.size());
  return out;
}

}  // namespace aftershock::fuzz

#endif  // AFTERSHOCK_TESTS_FUZZ_ENGINE_STATE_INPUT_H_
