#include "support/test_support.h"

#include "aftershock/simulate.h"

#include <arpa/inet.h>
#include <fcntl.h>
#include <netinet/in.h>
#include <poll.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <stdexcept>

namespace aftershock::testing {
namespace fs = std::filesystem;

std::optional<std::string> ReferenceDataPath(const std::string& file) {
  std::vector<fs::path> candidates;
  if (const char* env = std::getenv("AFTERSHOCK_REFERENCE_DATA"); env && *env) {
    candidates.emplace_back(fs::path(env) / file);
  }
  candidates.emplace_back(fs::path(AFTERSHOCK_SOURCE_DIR) / ".." / "shared" / "data" / file);
  for (const auto& p : candidates) {
    std::error_code ec;
    if (fs::is_regular_file(p, ec)) return fs::weakly_canonical(p).string();
  }
  return std::nullopt;
}

std::string SkipMessage(const std::string& file) {
  return "SKIPPED: reference data '" + file +
         "' not found (set AFTERSHOCK_REFERENCE_DATA to its folder, or place it in "
         "../shared/data next to the project root)";
}

std::string PythonScript(const std::string& name) {
  return (fs::path(AFTERSHOCK_SOURCE_DIR) / "tests" / "python" / name).string();
}

CommandResult RunCommand(const std::vector<std::string>& argv, const std::string& input) {
  // A child that exits before reading all of its input must not kill the test
  // with SIGPIPE; the short write is simply abandoned.
  signal(SIGPIPE, SIG_IGN);
  int in_pipe[2], out_pipe[2], err_pipe[2];
  if (pipe(in_pipe) != 0 || pipe(out_pipe) != 0 || pipe(err_pipe) != 0) {
    throw std::runtime_error("pipe failed");
  }
  pid_t pid = fork();
  if (pid < 0) throw std::runtime_error("fork failed");
  if (pid == 0) {
    dup2(in_pipe[0], 0);
    dup2(out_pipe[1], 1);
    dup2(err_pipe[1], 2);
    close(in_pipe[1]);
    close(out_pipe[0]);
    close(err_pipe[0]);
    std::vector<char*> args;
    for (const auto& a : argv) args.push_back(const_cast<char*>(a.c_str()));
    args.push_back(nullptr);
    execv(args[0], args.data());
    _exit(127);
  }
  close(in_pipe[0]);
  close(out_pipe[1]);
  close(err_pipe[1]);
  // Feed stdin and drain stdout/stderr concurrently so large outputs never deadlock.
  size_t written = 0;
  int in_fd = in_pipe[1];
  fcntl(in_fd, F_SETFL, O_NONBLOCK);
  if (input.empty()) {
    close(in_fd);
    in_fd = -1;
  }
  CommandResult result;
  bool out_open = true, err_open = true;
  char buf[65536];
  while (out_open || err_open || in_fd >= 0) {
    pollfd fds[3];
    int n = 0;
    int out_i = -1, err_i = -1, in_i = -1;
    if (out_open) { fds[n] = {out_pipe[0], POLLIN, 0}; out_i = n++; }
    if (err_open) { fds[n] = {err_pipe[0], POLLIN, 0}; err_i = n++; }
    if (in_fd >= 0) { fds[n] = {in_fd, POLLOUT, 0}; in_i = n++; }
    if (poll(fds, n, -1) < 0) break;
    if (out_i >= 0 && fds[out_i].revents) {
      ssize_t r = read(out_pipe[0], buf, sizeof buf);
      if (r <= 0) out_open = false; else result.out.append(buf, r);
    }
    if (err_i >= 0 && fds[err_i].revents) {
      ssize_t r = read(err_pipe[0], buf, sizeof buf);
      if (r <= 0) err_open = false; else result.err.append(buf, r);
    }
    if (in_i >= 0 && fds[in_i].revents) {
      ssize_t w = write(in_fd, input.data() + written, input.size() - written);
      if (w > 0) written += static_cast<size_t>(w);
      if (w < 0 || written == input.size()) { close(in_fd); in_fd = -1; }
    }
  }
  close(out_pipe[0]);
  close(err_pipe[0]);
  int status = 0;
  waitpid(pid, &status, 0);
  result.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  return result;
}

CommandResult RunPython(const std::string& script, const std::vector<std::string>& args,
                        const std::string& input) {
  std::vector<std::string> argv = {AFTERSHOCK_PYTHON, PythonScript(script)};
  argv.insert(argv.end(), args.begin(), args.end());
  return RunCommand(argv, input);
}

CommandResult RunCli(const std::vector<std::string>& args, const std::string& input) {
  std::vector<std::string> argv = {AFTERSHOCK_CLI};
  argv.insert(argv.end(), args.begin(), args.end());
  return RunCommand(argv, input);
}

std::string ScratchDir(const std::string& name) {
  fs::path base;
  if (const char* env = std::getenv("AFTERSHOCK_TEST_TMP"); env && *env) {
    base = env;
  } else {
    base = fs::path(AFTERSHOCK_BINARY_DIR) / "tests" / "tmp";
  }
  fs::path dir = base / name;
  fs::remove_all(dir);
  fs::create_directories(dir);
  return dir.string();
}

std::string WriteFile(const std::string& path, const std::string& content) {
  std::ofstream f(path, std::ios::binary);
  f << content;
  if (!f) throw std::runtime_error("cannot write " + path);
  return path;
}

std::string ReadFileOrDie(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  if (!f) throw std::runtime_error("cannot read " + path);
  std::stringstream ss;
  ss << f.rdbuf();
  return ss.str();
}

std::vector<double> SimulatedReturns(const ModelParams& params, int n, uint64_t seed) {
  SimulationOptions o;
  o.n = n;
  o.seed = seed;
  auto s = Simulate(params, o);
  if (!s.ok()) throw std::runtime_error("simulation refused: " + std::string(s.status().message()));
  return s->returns;
}

double RelDiff(double a, double b) {
  return std::fabs(a - b) / std::max(std::fabs(b), 1e-300);
}

std::string HttpGet(int port, const std::string& path) {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = htons(static_cast<uint16_t>(port));
  if (connect(fd, reinterpret_cast<sockaddr*>(&a), sizeof(a)) != 0) {
    close(fd);
    return "";
  }
  const std::string req = "GET " + path + " HTTP/1.1\r\nHost: 127.0.0.1\r\n\r\n";
  (void)!write(fd, req.data(), req.size());
  std::string out;
  char buf[4096];
  ssize_t n;
  while ((n = read(fd, buf, sizeof(buf))) > 0) out.append(buf, static_cast<size_t>(n));
  close(fd);
  return out;
}

}  // namespace aftershock::testing
