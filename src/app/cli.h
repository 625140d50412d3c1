// The `aftershock` command dispatcher. Each subcommand is a function taking the
// arguments after its name and returning the process exit code
// (0 ok, 1 runtime failure, 2 bad usage/input).
#ifndef AFTERSHOCK_APP_CLI_H_
#define AFTERSHOCK_APP_CLI_H_

namespace aftershock::app {

int Main(int argc, char** argv);

// Subcommands (one file each in src/app/).
int FitCommand(int argc, char** argv);       // fit_command.cc
int DemoCommand(int argc, char** argv);      // demo_command.cc
int SimulateCommand(int argc, char** argv);  // simulate_command.cc
int WatchCommand(int argc, char** argv);     // watch_command.cc
int RunCommand(int argc, char** argv);       // run_command.cc
int ReplayCommand(int argc, char** argv);    // replay_command.cc
int ModelsCommand(int argc, char** argv);    // models_command.cc
int ClusterCommand(int argc, char** argv);   // cluster_command.cc

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_CLI_H_
