#include "app/stop_signal.h"

#include <atomic>

namespace aftershock::app {
namespace {

volatile std::sig_atomic_t g_stop = 0;

extern "C" void OnStopSignal(int) { g_stop = 1; }

}  // namespace

ScopedStopHandler::ScopedStopHandler() {
  g_stop = 0;
  struct sigaction sa {};
  sa.sa_handler = OnStopSignal;
  sigemptyset(&sa.sa_mask);
  sa.sa_flags = 0;  // no SA_RESTART: sleeps and polls return early
  sigaction(SIGINT, &sa, &old_int_);
  sigaction(SIGTERM, &sa, &old_term_);
}

ScopedStopHandler::~ScopedStopHandler() {
  sigaction(SIGINT, &old_int_, nullptr);
  sigaction(SIGTERM, &old_term_, nullptr);
}

bool StopRequested() {
  std::atomic_signal_fence(std::memory_order_acquire);
  return g_stop != 0;
}

}  // namespace aftershock::app
