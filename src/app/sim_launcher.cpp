#include "app/sim_launcher.hpp"

#include <csignal>
#include <filesystem>
#include <stdexcept>

#include "sim/announce.hpp"

namespace loadtrim::app {

std::string sibling_executable(const std::string& name) {
  return (std::filesystem::read_symlink("/proc/self/exe").parent_path() / name).string();
}

SimLauncher::SimLauncher(const std::vector<std::string>& args) {
  std::vector<std::string> argv = {sibling_executable("loadtrim-sim")};
  argv.insert(argv.end(), args.begin(), args.end());
  child_ = std::make_unique<process::ChildProcess>(argv, SIGTERM);  // the simulator stops with the tool
  const auto line = child_->read_line(std::chrono::seconds(10));
  const sim::Announcement a = sim::parse_announcement(line.value_or(""));
  if (!a.ok || a.port == 0)
    throw std::runtime_error("the simulated controller did not start (" + argv[0] + ")");
  port_ = a.port;
}

}  // namespace loadtrim::app
