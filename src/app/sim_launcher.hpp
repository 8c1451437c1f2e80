// Starts loadtrim-sim (from the same directory as this executable) as a child process and stops it by PID.
#pragma once

#include <memory>
#include <string>
#include <vector>

#include "process/child_process.hpp"

namespace loadtrim::app {

class SimLauncher {
 public:
  // Throws std::runtime_error when the simulator does not start.
  explicit SimLauncher(const std::vector<std::string>& args);
  ~SimLauncher() { child_->stop(); }
  unsigned short port() const { return port_; }
  int pid() const { return child_->pid(); }

 private:
  std::unique_ptr<process::ChildProcess> child_;
  unsigned short port_ = 0;
};

std::string sibling_executable(const std::string& name);

}  // namespace loadtrim::app
