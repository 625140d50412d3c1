// A real `nats-server -js` for the cluster tests: started on a free loopback
// port with a fresh store directory and config/nats-server.conf (the shipped
// partition mapping), stopped (SIGTERM, then waited for) on destruction.
//
// Thread-safety: one thread owns an instance.
#ifndef AFTERSHOCK_TESTS_SUPPORT_NATS_SERVER_H_
#define AFTERSHOCK_TESTS_SUPPORT_NATS_SERVER_H_

#include <sys/types.h>

#include <string>

namespace aftershock::testing {

// Path of the nats-server binary (/usr/sbin/nats-server or on PATH), "" when
// absent.
std::string NatsServerBinary();

// Ends the running test binary with ctest's skip code (77, SKIP_RETURN_CODE of
// the cluster tests) after printing "SKIP: nats-server not found ..." when the
// binary is absent. Never returns in that case.
void SkipUnlessNatsServer();

// A loopback TCP port the kernel considers free now (bound to port 0, then
// released; a later bind may still lose a race).
int FreeLoopbackPort();

class NatsServer {
 public:
  // Starts the server with `config` (default: the shipped config/nats-server.conf)
  // on 127.0.0.1:<free port>, store under `dir`/store; waits (at most 10 s) until
  // it accepts connections. Fails the running test if it does not.
  explicit NatsServer(const std::string& dir, const std::string& config = "");
  ~NatsServer();
  NatsServer(const NatsServer&) = delete;
  NatsServer& operator=(const NatsServer&) = delete;

  int port() const { return port_; }
  std::string url() const;  // "nats://127.0.0.1:<port>"
  // SIGKILLs the server (no clean shutdown) and waits for it.
  void Kill();

 private:
  pid_t pid_ = -1;
  int port_ = 0;
};

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_SUPPORT_NATS_SERVER_H_
