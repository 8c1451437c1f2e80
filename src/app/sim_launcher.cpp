#include "app/sim_launcher.hpp"

#include <signal.h>
#include <sys/prctl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <filesystem>
#include <stdexcept>
#include <thread>

namespace loadtrim::app {

std::string sibling_executable(const std::string& name) {
  return (std::filesystem::read_symlink("/proc/self/exe").parent_path() / name).string();
}

SimLauncher::SimLauncher(const std::vector<std::string>& args) {
  std::vector<std::string> argv = {sibling_executable("loadtrim-sim")};
  argv.insert(argv.end(), args.begin(), args.end());
  int fds[2];
  if (::pipe(fds) != 0) throw std::runtime_error("pipe failed");
  const pid_t parent = ::getpid();
  pid_ = ::fork();
  if (pid_ < 0) throw std::runtime_error("fork failed");
  if (pid_ == 0) {
    ::prctl(PR_SET_PDEATHSIG, SIGTERM);  // the simulator stops with the tool
    if (::getppid() != parent) ::_exit(1);
    ::dup2(fds[1], STDOUT_FILENO);
    ::close(fds[0]);
    ::close(fds[1]);
    std::vector<char*> c;
    for (auto& a : argv) c.push_back(a.data());
    c.push_back(nullptr);
    ::execv(c[0], c.data());
    ::_exit(127);
  }
  ::close(fds[1]);
  std::string first;
  char ch;
  while (::read(fds[0], &ch, 1) == 1 && ch != '\n') first += ch;
  ::close(fds[0]);
  const auto p = first.find("tcp ");
  if (p == std::string::npos) throw std::runtime_error("the simulated controller did not start (" + argv[0] + ")");
  port_ = static_cast<unsigned short>(std::stoi(first.substr(first.find(':', p) + 1)));
}

SimLauncher::~SimLauncher() {
  if (pid_ <= 0) return;
  ::kill(pid_, SIGTERM);
  for (int i = 0; i < 100; ++i) {
    int st;
    if (::waitpid(pid_, &st, WNOHANG) == pid_) return;
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  ::kill(pid_, SIGKILL);
  int st;
  ::waitpid(pid_, &st, 0);
}

}  // namespace loadtrim::app
