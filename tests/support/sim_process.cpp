#include "support/sim_process.hpp"

#include <fstream>
#include <sstream>
#include <stdexcept>

#include "sim/announce.hpp"

namespace loadtrim::testing {

SimProcess::SimProcess(std::vector<std::string> args, bool pty) {
  bool has_truth = false, has_exit = false;
  for (const auto& a : args) {
    has_truth = has_truth || a == "--truth";
    has_exit = has_exit || a == "--exit-after-s";
  }
  std::vector<std::string> argv = {LOADTRIM_SIM_EXE};
  if (!has_truth)
    argv.insert(argv.end(),
                {"--truth", std::string(LOADTRIM_SOURCE_DIR) + "/samples/truths/demo-hatchback.toml"});
  if (!has_exit) argv.insert(argv.end(), {"--exit-after-s", "600"});
  if (pty)
    argv.push_back("--pty");
  else
    argv.insert(argv.end(), {"--port", "0"});
  argv.insert(argv.end(), args.begin(), args.end());
  child_ = std::make_unique<process::ChildProcess>(argv);
  const auto line = child_->read_line(std::chrono::seconds(10));
  const sim::Announcement a = sim::parse_announcement(line.value_or(""));
  if (!a.ok) {
    child_->stop();
    throw std::runtime_error("loadtrim-sim did not start: '" + line.value_or("") + "'");
  }
  port_ = a.port;
  device_ = a.device;
}

void SimProcess::stop() {
  child_->stop();
}

std::string profile_keeping_late_release(const std::string& path) {
  std::ifstream in(path);
  if (!in) throw std::runtime_error("cannot read the profile " + path);
  std::stringstream text;
  text << in.rdbuf();
  std::string profile = text.str();
  const std::string repeat = "\nlate_start = \"repeat\"";  // the key at the start of a line, not in a comment
  // The test profiles keep it already (the key at the start of a line: a comment naming it does not count).
  if (profile.find("\nlate_start = \"finding\"") != std::string::npos) return profile;
  if (const auto at = profile.find(repeat); at != std::string::npos)
    return profile.replace(at, repeat.size(), "\nlate_start = \"finding\"");
  if (profile.find("late_start") != std::string::npos || profile.find("[timing]") != std::string::npos)
    throw std::runtime_error("the profile " + path + " has a [timing] table this helper does not know");
  return profile + "\n[timing]\nlate_start = \"finding\"\n";
}

SimProcess::~SimProcess() {
  stop();
}

}  // namespace loadtrim::testing
