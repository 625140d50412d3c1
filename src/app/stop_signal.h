// StopSignal: SIGINT/SIGTERM handling for the long-running desk commands
// (simulate, watch). The handler only sets a flag; loops poll StopRequested()
// and wind down cleanly (final counts printed, sockets closed).
//
// Thread-safety: StopRequested() may be called from any thread; install and
// restore happen on the main thread (one ScopedStopHandler at a time).
#ifndef AFTERSHOCK_APP_STOP_SIGNAL_H_
#define AFTERSHOCK_APP_STOP_SIGNAL_H_

#include <csignal>

namespace aftershock::app {

// Installs the flag-setting handler for SIGINT and SIGTERM (without
// SA_RESTART, so blocking calls return EINTR) and restores the previous
// handlers on destruction. A second Ctrl-C while stopping still just sets the flag.
class ScopedStopHandler {
 public:
  ScopedStopHandler();
  ~ScopedStopHandler();
  ScopedStopHandler(const ScopedStopHandler&) = delete;
  ScopedStopHandler& operator=(const ScopedStopHandler&) = delete;

 private:
  struct sigaction old_int_ {};
  struct sigaction old_term_ {};
};

// True once SIGINT or SIGTERM arrived since the handler was installed.
bool StopRequested();

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_STOP_SIGNAL_H_
