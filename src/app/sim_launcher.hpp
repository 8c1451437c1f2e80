// Starts loadtrim-sim (from the same directory as this executable) as a child process and stops it by PID.
#pragma once

#include <string>
#include <sys/types.h>
#include <vector>

namespace loadtrim::app {

class SimLauncher {
 public:
  // Throws std::runtime_error when the simulator does not start.
  explicit SimLauncher(const std::vector<std::string>& args);
  ~SimLauncher();
  unsigned short port() const { return port_; }
  pid_t pid() const { return pid_; }

 private:
  pid_t pid_ = -1;
  unsigned short port_ = 0;
};

std::string sibling_executable(const std::string& name);

}  // namespace loadtrim::app
