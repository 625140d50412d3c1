// Writes the seed corpus of engine_state_fuzz (tests/fuzz/corpus/engine_state_fuzz/):
// the states of an engine fed two symbols' one-minute price ticks over three
// sessions (engine_state_input.h's configuration), captured at several points
// (warm-up only, open bars, refit jobs pending, fitted models, seasonal
// profiles), as raw-payload inputs and as whole checkpoint files.
//   engine_state_corpus <output directory>
// Built with the fuzz targets; run by hand when the state format changes.
#include <cmath>
#include <cstdio>
#include <fstream>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"
#include "aftershock/clock.h"
#include "aftershock/engine_checkpoint.h"
#include "aftershock/engine_config.h"
#include "aftershock/engine_services.h"
#include "aftershock/ingest_core.h"
#include "aftershock/update_sink.h"
#include "engine_state_input.h"

namespace aftershock {
namespace {

constexpr int64_t kDay0 = 1772409600000000000;  // 2026-03-02 00:00Z

bool WriteBytes(const std::string& path, const std::string& bytes) {
  std::ofstream out(path, std::ios::binary);
  out.write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
  return static_cast<bool>(out);
}

int Main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: engine_state_corpus <output directory>\n");
    return 2;
  }
  const std::string dir = argv[1];
  auto config = ParseEngineConfig(fuzz::kEngineStateToml, "fuzz.toml");
  if (!config.ok()) return 1;
  NullSink sink;
  ManualClock clock;
  auto core = IngestCore::Create(*config, &sink, &clock);
  if (!core.ok()) return 1;
  ServiceOptions so;
  so.mode = RefitMode::kReplay;
  so.workers = 1;
  auto services = EngineServices::Attach(core->get(), *config, so);
  if (!services.ok()) return 1;
  // Two price ticks a minute per symbol, 08:00-09:30Z, three days (seed 7).
  std::mt19937_64 rng(7);
  std::normal_distribution<double> norm(0.0, 1.0);
  double price[2] = {80, 30};
  const std::vector<int> captures = {40, 130, 301, 455, 733, 1001};
  int n = 0, written = 0;
  int64_t next_sweep = -1;
  for (int day = 0; day < 3; ++day) {
    for (int m = 0; m < 90; ++m) {
      for (int sec : {10, 40}) {
        for (int s = 0; s < 2; ++s) {
          Tick t;
          t.symbol.assign(s == 0 ? "GANNET.A" : "PUFFIN.B");
          t.t_ns = kDay0 + day * kNanosPerDay + (8 * 60 + m) * 60 * kNanosPerSecond +
                   sec * kNanosPerSecond;
          t.kind = Tick::kPrice;
          price[s] *= std::exp(0.0008 * (1.0 + (m < 10 || m > 80)) * norm(rng));
          t.value = price[s];
          if (next_sweep < 0) next_sweep = t.t_ns + 100000000;
          if (t.t_ns >= next_sweep) {
            clock.Set(t.t_ns);
            (*core)->OnClock(t.t_ns);
            next_sweep = t.t_ns + 100000000;
          }
          (*core)->OnTick(t);
          ++n;
          for (size_t c = 0; c < captures.size(); ++c) {
            if (n != captures[c]) continue;
            const EngineSnapshot snap = CaptureEngineState(**core, services->get(), 1);
            const std::string raw =
                fuzz::RawStateInput(static_cast<uint32_t>(snap.symbols), snap.core, snap.services);
            if (!WriteBytes(absl::StrCat(dir, "/raw_", n, ".bin"), raw)) return 1;
            ++written;
            if (c % 2 == 1) {  // some as whole files
              auto file = SerializeEngineSnapshot(snap, *config);
              if (!file.ok() || !WriteBytes(absl::StrCat(dir, "/file_", n, ".ckpt"), *file)) {
                return 1;
              }
              ++written;
            }
          }
        }
      }
    }
  }
  std::printf("wrote %d inputs to %s\n", written, dir.c_str());
  return 0;
}

}  // namespace
}  // namespace aftershock

int main(int argc, char** argv) { return aftershock::Main(argc, argv); }
