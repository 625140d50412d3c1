// Helpers shared by the tests: locating reference data, running the CLI and the
// live Python reference computations (Debian's /usr/bin/python3 with scipy and
// statsmodels), and scratch files under the build directory.
#ifndef AFTERSHOCK_TESTS_SUPPORT_TEST_SUPPORT_H_
#define AFTERSHOCK_TESTS_SUPPORT_TEST_SUPPORT_H_

#include <optional>
#include <string>
#include <vector>

#include "aftershock/model_params.h"

namespace aftershock::testing {

// Path of a file from the shared reference-data folder: $AFTERSHOCK_REFERENCE_DATA
// if set, else ../shared/data next to the project root. nullopt when absent; the
// caller then skips with a clear message (see SkipMessage).
std::optional<std::string> ReferenceDataPath(const std::string& file);

// The message printed when a reference-data check is skipped.
std::string SkipMessage(const std::string& file);

// Path of a script under tests/python/.
std::string PythonScript(const std::string& name);

struct CommandResult {
  int exit_code = -1;
  std::string out;  // standard output
  std::string err;  // standard error
};

// Runs argv[0] with the given arguments (no shell), feeding `input` on stdin.
CommandResult RunCommand(const std::vector<std::string>& argv, const std::string& input = "");

// Runs tests/python/<script> with /usr/bin/python3.
CommandResult RunPython(const std::string& script, const std::vector<std::string>& args,
                        const std::string& input = "");

// Runs the built `aftershock` binary.
CommandResult RunCli(const std::vector<std::string>& args, const std::string& input = "");

// A fresh, empty scratch directory under the build tree for this test.
std::string ScratchDir(const std::string& name);

// Writes `content` to `path`, returning path.
std::string WriteFile(const std::string& path, const std::string& content);
std::string ReadFileOrDie(const std::string& path);

// Returns simulated from `params` (simulate.h, default burn-in) with a fixed
// seed; fails the running test if the simulation is refused.
std::vector<double> SimulatedReturns(const ModelParams& params, int n, uint64_t seed);

// A minimal HTTP/1.1 GET to 127.0.0.1:port; the whole response (status line,
// headers, body), or "" when the connection fails.
std::string HttpGet(int port, const std::string& path);

// Relative difference |a-b| / max(|b|, tiny).
double RelDiff(double a, double b);

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_SUPPORT_TEST_SUPPORT_H_
