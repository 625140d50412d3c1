// A real `nats-server -js` for the cluster tests: started on a free loopback
// port with a fresh store directory and config/nats-server.conf (the shipped
// partition mapping), stopped (SIGTERM, then waited for) on destruction.
//
// Thread-safety: one thread owns an instance.
#ifndef AFTERSHOCK_TESTS_SUPPORT_NATS_SERVER_H_
#define AFTERSHOCK_TESTS_SUPPORT_NATS_SERVER_H_

#include <signal.h>
#include <sys/types.h>

#include <memory>
#include <string>
#include <vector>

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

// Membership of one server in a cluster of nats-servers on loopback.
struct NatsClusterNode {
  std::string server_name;       // --server_name, unique in the cluster
  std::string cluster_name;      // --cluster_name, equal on every node
  int client_port = 0;           // -p: the client port (chosen by the caller)
  int cluster_port = 0;          // --cluster nats://127.0.0.1:<cluster_port>
  std::vector<int> route_ports;  // --routes: the other nodes' cluster ports
};

class NatsServer {
 public:
  // Starts the server with `config` (default: the shipped config/nats-server.conf)
  // on 127.0.0.1:<free port>, store under `dir`/store; waits (at most 10 s) until
  // it accepts connections. Fails the running test if it does not.
  explicit NatsServer(const std::string& dir, const std::string& config = "");
  // The same as one node of a cluster: on node.client_port (no retry on
  // another port, the other nodes' routes name this one), server name, cluster
  // listener and routes from `node`.
  NatsServer(const std::string& dir, const NatsClusterNode& node, const std::string& config = "");
  ~NatsServer();
  NatsServer(const NatsServer&) = delete;
  NatsServer& operator=(const NatsServer&) = delete;

  int port() const { return port_; }
  std::string url() const;  // "nats://127.0.0.1:<port>"
  // SIGKILLs the server (no clean shutdown) and waits for it.
  void Kill() { Stop(SIGKILL); }
  // Sends `sig` (SIGTERM: the server's clean shutdown) and waits for the exit.
  void Stop(int sig);
  // SIGSTOPs the server: it keeps its connections but answers nothing (what a
  // client sees of a hung or partitioned server) until Resume (SIGCONT).
  // Returns once every thread of the server is stopped (/proc/<pid>/task/*/stat
  // in state T): kill() only queues the signal, and a thread running on the
  // other core could still answer a request sent right after it. Fails the
  // running test if the server is not stopped within 5 s.
  void Pause();
  void Resume() { kill(pid_, SIGCONT); }

 private:
  void Start(const std::string& dir, const std::string& config,
             const std::vector<std::string>& extra_args, int fixed_port);

  pid_t pid_ = -1;
  int port_ = 0;
};

// `nodes` nats-servers -js forming one JetStream cluster on loopback (free
// ports, store of node i under <dir>/n<i+1>, the shipped configuration with
// its partition mapping); stopped on destruction.
class NatsCluster {
 public:
  NatsCluster(const std::string& dir, int nodes);

  NatsServer& node(int i) { return *nodes_[static_cast<size_t>(i)]; }
  // Every node's client URL.
  std::vector<std::string> urls() const;
  // Polls every running node (skipping `except`) until its JetStream answers
  // an account request, which needs an elected meta leader; seconds it took,
  // or -1 after `limit_s`.
  double AwaitJetStream(double limit_s, int except = -1);

 private:
  std::vector<std::unique_ptr<NatsServer>> nodes_;
};

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_SUPPORT_NATS_SERVER_H_
