// The real bellwetherd as a child process on 127.0.0.1 (port 0), for integration tests:
// reads the bound gRPC (and, with --http, HTTP) address from its first lines of stdout.
// The child dies with the test process, so a test killed by a timeout leaves no daemon.
// (PR_SET_PDEATHSIG fires when the creating THREAD exits: construct it on a thread that
// outlives it.)
#ifndef BELLWETHER_TESTS_INTEGRATION_DAEMON_PROCESS_H_
#define BELLWETHER_TESTS_INTEGRATION_DAEMON_PROCESS_H_

#include <signal.h>
#include <sys/prctl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cstdio>
#include <string>
#include <vector>

#include "absl/strings/match.h"
#include "tests/test_util.h"

namespace bellwether::testing {

class DaemonProcess {
 public:
  // Starts the daemon with `--listen 127.0.0.1:0 --state-dir DIR` plus `extra_args`;
  // DIR is `state_dir`, or a fresh temporary directory.
  explicit DaemonProcess(std::vector<std::string> extra_args = {}, std::string state_dir = "") {
    state_dir_ = state_dir.empty() ? MakeTempDir("daemon") : state_dir;
    std::vector<std::string> args = {BW_DAEMON_PATH, "--listen", "127.0.0.1:0", "--state-dir",
                                     state_dir_};
    bool http = false;
    for (std::string& a : extra_args) {
      http |= a == "--http";
      args.push_back(std::move(a));
    }
    int fds[2];
    if (pipe(fds) != 0) return;
    pid_ = fork();
    if (pid_ == 0) {
      prctl(PR_SET_PDEATHSIG, SIGKILL);
      dup2(fds[1], 1);
      close(fds[0]);
      std::vector<char*> argv;
      for (std::string& a : args) argv.push_back(a.data());
      argv.push_back(nullptr);
      execv(BW_DAEMON_PATH, argv.data());
      _exit(127);
    }
    close(fds[1]);
    FILE* out = fdopen(fds[0], "r");
    if (out == nullptr) return;
    address_ = ReadAddress(out, "listening on ");
    if (http) http_address_ = ReadAddress(out, "http on ");
    // "ready" follows once the state is loaded and health is SERVING.
    char line[64] = {};
    if (std::fgets(line, sizeof(line), out) == nullptr || std::string(line) != "ready\n") {
      address_.clear();
    }
    std::fclose(out);
  }
  ~DaemonProcess() {
    if (pid_ > 0 && !stopped_) Stop();
  }
  DaemonProcess(const DaemonProcess&) = delete;
  DaemonProcess& operator=(const DaemonProcess&) = delete;

  // SIGKILL: a crash at an arbitrary moment.
  void Kill() {
    if (stopped_) return;
    stopped_ = true;
    kill(pid_, SIGKILL);
    int status = 0;
    waitpid(pid_, &status, 0);
  }
  const std::string& state_dir() const { return state_dir_; }

  // Sends `sig` (e.g. SIGHUP) without waiting.
  void Signal(int sig) { kill(pid_, sig); }

  // Sends SIGTERM (without waiting).
  void Terminate() { kill(pid_, SIGTERM); }
  // Sends SIGTERM (unless already sent) and returns the exit code.
  int Stop() {
    if (!stopped_) kill(pid_, SIGTERM);
    stopped_ = true;
    int status = 0;
    waitpid(pid_, &status, 0);
    return WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  }
  const std::string& address() const { return address_; }
  const std::string& http_address() const { return http_address_; }

 private:
  static std::string ReadAddress(FILE* out, const char* prefix) {
    char line[256] = {};
    if (std::fgets(line, sizeof(line), out) == nullptr) return "";
    std::string l(line);
    if (!absl::StartsWith(l, prefix)) return "";
    l = l.substr(std::string(prefix).size());
    while (!l.empty() && (l.back() == '\n' || l.back() == '\r')) l.pop_back();
    return l;
  }

  pid_t pid_ = -1;
  bool stopped_ = false;
  std::string state_dir_;
  std::string address_, http_address_;
};

}  // namespace bellwether::testing

#endif  // BELLWETHER_TESTS_INTEGRATION_DAEMON_PROCESS_H_
