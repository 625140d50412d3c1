// `aftershock fit`: estimate one model on a return series (explicit model).
#include <cstdio>

#include "app/args.h"
#include "app/cli.h"

namespace aftershock::app {

int FitCommand(int argc, char** argv) {
  ArgParser args("aftershock fit", "Estimate a volatility model on a return series.");
  args.AddOption("input", "FILE", "return series (CSV with header, or one number a line)", "",
                 true);
  if (auto s = args.Parse(argc, argv); !s.ok()) {
    std::fprintf(stderr, "aftershock fit: %s\n", std::string(s.message()).c_str());
    return 2;
  }
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  std::fprintf(stderr, "aftershock fit: estimator not built yet\n");
  return 1;
}

}  // namespace aftershock::app
