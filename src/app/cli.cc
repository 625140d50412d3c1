#include "app/cli.h"

#include <cstdio>
#include <cstring>

namespace aftershock::app {
namespace {

struct Command {
  const char* name;
  const char* summary;
  int (*run)(int argc, char** argv);
};

// Keep in the order a user meets them; `aftershock --help` lists this table.
constexpr Command kCommands[] = {
    {"fit", "estimate a volatility model on a return series and print the report", FitCommand},
    {"run", "run the streaming engine (ZeroMQ ticks in, per-bar updates out)", RunCommand},
    {"replay", "replay a tick file through the engine, deterministically, to JSON Lines",
     ReplayCommand},
    {"models", "list, show or export the fitted models of a checkpoint or a model file",
     ModelsCommand},
    {"demo", "run the embedded default end to end (no input needed)", DemoCommand},
    {"simulate", "synthetic market of invented instruments to a tick CSV, ZeroMQ or JetStream",
     SimulateCommand},
    {"watch", "live terminal table of the engine's update stream", WatchCommand},
    {"cluster", "scale-out on NATS JetStream: `cluster status` prints the partition leases",
     ClusterCommand},
};

void PrintUsage(FILE* out) {
  std::fprintf(out,
               "usage: aftershock <command> [options]\n\n"
               "Streaming conditional-variance filter and re-estimator for return feeds.\n"
               "Outputs are statistical estimates, not advice.\n\ncommands:\n");
  for (const auto& c : kCommands) std::fprintf(out, "  %-10s %s\n", c.name, c.summary);
  std::fprintf(out, "\n`aftershock <command> --help` documents each command.\n");
}

}  // namespace

int Main(int argc, char** argv) {
  if (argc < 2 || std::strcmp(argv[1], "--help") == 0 || std::strcmp(argv[1], "-h") == 0 ||
      std::strcmp(argv[1], "help") == 0) {
    PrintUsage(argc < 2 ? stderr : stdout);
    return argc < 2 ? 2 : 0;
  }
  for (const auto& c : kCommands) {
    if (std::strcmp(argv[1], c.name) == 0) return c.run(argc - 2, argv + 2);
  }
  std::fprintf(stderr, "aftershock: unknown command '%s'\n\n", argv[1]);
  PrintUsage(stderr);
  return 2;
}

}  // namespace aftershock::app
