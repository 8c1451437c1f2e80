// A child process with its stdout on a pipe (stdin from /dev/null), killed with SIGKILL if the parent dies
// first (PR_SET_PDEATHSIG) and on destruction if still running. Used to start the simulated controller and,
// in tests, the loadtrim command itself. Processes are always stopped by their PID.
#pragma once

#include <sys/types.h>

#include <chrono>
#include <optional>
#include <string>
#include <vector>

namespace loadtrim::process {

class ChildProcess {
 public:
  explicit ChildProcess(std::vector<std::string> argv, int death_signal = 9);
  ~ChildProcess();  // SIGKILL and reap if still running
  ChildProcess(const ChildProcess&) = delete;
  ChildProcess& operator=(const ChildProcess&) = delete;
  // The next stdout line, or nullopt at end of output or after the timeout.
  std::optional<std::string> read_line(std::chrono::milliseconds timeout);
  void signal(int sig);
  // SIGTERM, then SIGKILL after grace; reaps it.
  void stop(std::chrono::milliseconds grace = std::chrono::milliseconds(2000));
  // Waits for the exit; the exit code, or 128 + signal.
  int wait();
  pid_t pid() const { return pid_; }

 private:
  pid_t pid_ = -1;
  int out_ = -1;
  std::string buffer_;
  bool reaped_ = false;
  int status_ = 0;
};

// Runs a command to completion; returns the exit code and fills stdout/stderr.
int run_command(const std::vector<std::string>& argv, std::string* out = nullptr, std::string* err = nullptr);

}  // namespace loadtrim::process
