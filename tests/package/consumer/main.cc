// Uses the installed public headers and library: fits nothing, only builds a
// spec and a filter model and runs a few bars, then prints the last variance.
#include <cstdio>

#include "aftershock/online_filter.h"

int main() {
  auto spec = aftershock::MakeModelSpec("constant", {}, "garch", {1, 1}, "gaussian");
  if (!spec.ok()) return 1;
  auto params = aftershock::ModelParams::FromNamed(
      *spec, {{"mu", 0.0}, {"omega", 0.1}, {"alpha_1", 0.1}, {"beta_1", 0.8}});
  if (!params.ok()) return 1;
  auto model = aftershock::FilterModel::Create(*params, aftershock::OutputOptions{}, 1);
  if (!model.ok()) return 1;
  const double returns[] = {0.5, -1.0, 0.25};
  auto updates = aftershock::FilterSeries(*model, 0, returns);
  std::printf("%.17g\n", updates.back().var_next);
  return 0;
}
