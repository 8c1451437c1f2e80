// Starts loadtrim-sim as a child process for an integration test, reads where it listens from its first line,
// and stops it by its PID (SIGTERM, then SIGKILL) when the object goes away. The child also gets SIGKILL if
// the test process dies first (PR_SET_PDEATHSIG), so a simulator never outlives its test.
#pragma once

#include <chrono>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "process/child_process.hpp"

namespace loadtrim::testing {

// The text of the profile file at `path` with a late first release kept with a finding (timing.late_start =
// "finding", docs/standards.md §3.6) instead of repeated. For tests that run a simulator at a high time scale
// and are not about that rule: at 200x, 0.6 s of a loaded host's wall time is 120 s of controller time (the
// rule itself is tested at controller speed in SessionUnit). A profile that already keeps it (the test
// profiles in tests/data) is returned as it is. Throws when the file cannot be read or says something else of
// late_start.
std::string profile_keeping_late_release(const std::string& path);

class SimProcess {
 public:
  // args: extra command-line arguments; --truth defaults to the demo truth, --exit-after-s to 600.
  explicit SimProcess(std::vector<std::string> args, bool pty = false);
  ~SimProcess();
  SimProcess(const SimProcess&) = delete;
  SimProcess& operator=(const SimProcess&) = delete;

  unsigned short port() const { return port_; }
  const std::string& device() const { return device_; }
  int pid() const { return child_->pid(); }
  // The simulator's next output line after its announcement (it says latched faults: "loadtrim-sim: ... EVT
  // FAULT kind=WATCHDOG ..."), or nullopt after the timeout.
  std::optional<std::string> read_line(std::chrono::milliseconds timeout) {
    return child_->read_line(timeout);
  }
  void stop();

 private:
  std::unique_ptr<process::ChildProcess> child_;
  unsigned short port_ = 0;
  std::string device_;
};

}  // namespace loadtrim::testing
