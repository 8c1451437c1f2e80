#include "support/sim_process.hpp"

#include <signal.h>
#include <sys/prctl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cstring>
#include <stdexcept>
#include <thread>

namespace loadtrim::testing {

SimProcess::SimProcess(std::vector<std::string> args, bool pty) {
  bool has_truth = false;
  for (const auto& a : args) has_truth = has_truth || a == "--truth";
  std::vector<std::string> argv = {LOADTRIM_SIM_EXE};
  if (!has_truth) argv.insert(argv.end(), {"--truth", std::string(LOADTRIM_SOURCE_DIR) + "/samples/truths/demo-hatchback.toml"});
  argv.insert(argv.end(), {"--exit-after-s", "600"});
  if (pty) argv.push_back("--pty");
  else argv.insert(argv.end(), {"--port", "0"});
  argv.insert(argv.end(), args.begin(), args.end());
  int fds[2];
  if (::pipe(fds) != 0) throw std::runtime_error("pipe failed");
  const pid_t parent = ::getpid();
  pid_ = ::fork();
  if (pid_ < 0) throw std::runtime_error("fork failed");
  if (pid_ == 0) {
    ::prctl(PR_SET_PDEATHSIG, SIGKILL);
    if (::getppid() != parent) ::_exit(1);
    ::dup2(fds[1], STDOUT_FILENO);
    ::close(fds[0]);
    ::close(fds[1]);
    std::vector<char*> cargv;
    for (auto& a : argv) cargv.push_back(a.data());
    cargv.push_back(nullptr);
    ::execv(cargv[0], cargv.data());
    ::_exit(127);
  }
  ::close(fds[1]);
  std::string first;
  char c;
  while (::read(fds[0], &c, 1) == 1 && c != '\n') first += c;
  ::close(fds[0]);
  // "loadtrim-sim listening tcp 127.0.0.1:PORT pid=N" or "loadtrim-sim listening pty /dev/pts/N pid=N"
  if (const auto p = first.find("tcp "); p != std::string::npos) {
    const auto colon = first.find(':', p);
    port_ = static_cast<unsigned short>(std::stoi(first.substr(colon + 1)));
  } else if (const auto q = first.find("pty "); q != std::string::npos) {
    device_ = first.substr(q + 4, first.find(' ', q + 4) - (q + 4));
  } else if (const auto m = first.find("modbus-rtu "); m != std::string::npos) {
    device_ = first.substr(m + 11, first.find(' ', m + 11) - (m + 11));
  } else {
    stop();
    throw std::runtime_error("loadtrim-sim did not start: '" + first + "'");
  }
}

bool SimProcess::alive() const { return pid_ > 0 && ::kill(pid_, 0) == 0; }

void SimProcess::stop() {
  if (pid_ <= 0) return;
  ::kill(pid_, SIGTERM);
  for (int i = 0; i < 100; ++i) {
    int st;
    if (::waitpid(pid_, &st, WNOHANG) == pid_) {
      pid_ = -1;
      return;
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  ::kill(pid_, SIGKILL);
  int st;
  ::waitpid(pid_, &st, 0);
  pid_ = -1;
}

SimProcess::~SimProcess() { stop(); }

}  // namespace loadtrim::testing
