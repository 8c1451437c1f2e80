#include "process/child_process.hpp"

#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <sys/prctl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <stdexcept>
#include <thread>

namespace loadtrim::process {

ChildProcess::ChildProcess(std::vector<std::string> argv, int death_signal) {
  int fds[2];
  if (::pipe(fds) != 0) throw std::runtime_error("pipe failed");
  const pid_t parent = ::getpid();
  pid_ = ::fork();
  if (pid_ < 0) throw std::runtime_error("fork failed");
  if (pid_ == 0) {
    ::prctl(PR_SET_PDEATHSIG, death_signal);
    if (::getppid() != parent) ::_exit(1);
    ::dup2(fds[1], STDOUT_FILENO);
    const int devnull = ::open("/dev/null", O_RDONLY);
    ::dup2(devnull, STDIN_FILENO);
    ::close(fds[0]);
    ::close(fds[1]);
    std::vector<char*> c;
    for (auto& a : argv) c.push_back(a.data());
    c.push_back(nullptr);
    ::execv(c[0], c.data());
    ::_exit(127);
  }
  ::close(fds[1]);
  out_ = fds[0];
}

ChildProcess::~ChildProcess() {
  if (!reaped_ && pid_ > 0) {
    ::kill(pid_, SIGKILL);
    wait();
  }
  if (out_ >= 0) ::close(out_);
}

std::optional<std::string> ChildProcess::read_line(std::chrono::milliseconds timeout) {
  const auto deadline = std::chrono::steady_clock::now() + timeout;
  for (;;) {
    const auto nl = buffer_.find('\n');
    if (nl != std::string::npos) {
      std::string line = buffer_.substr(0, nl);
      buffer_.erase(0, nl + 1);
      return line;
    }
    const auto left =
        std::chrono::duration_cast<std::chrono::milliseconds>(deadline - std::chrono::steady_clock::now())
            .count();
    if (left <= 0) return std::nullopt;
    pollfd p{out_, POLLIN, 0};
    if (::poll(&p, 1, static_cast<int>(left)) <= 0) return std::nullopt;
    char buf[4096];
    const ssize_t n = ::read(out_, buf, sizeof buf);
    if (n <= 0) return std::nullopt;
    buffer_.append(buf, static_cast<std::size_t>(n));
  }
}

void ChildProcess::stop(std::chrono::milliseconds grace) {
  if (reaped_ || pid_ <= 0) return;
  ::kill(pid_, SIGTERM);
  const auto until = std::chrono::steady_clock::now() + grace;
  while (std::chrono::steady_clock::now() < until) {
    if (::waitpid(pid_, &status_, WNOHANG) == pid_) {
      reaped_ = true;
      return;
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  ::kill(pid_, SIGKILL);
  wait();
}

void ChildProcess::signal(int sig) {
  if (pid_ > 0 && !reaped_) ::kill(pid_, sig);
}

int ChildProcess::wait() {
  if (!reaped_) {
    // Keep draining stdout so the child never blocks on a full pipe.
    for (;;) {
      if (::waitpid(pid_, &status_, WNOHANG) == pid_) break;
      pollfd p{out_, POLLIN, 0};
      if (::poll(&p, 1, 50) > 0) {
        char buf[4096];
        const ssize_t n = ::read(out_, buf, sizeof buf);
        if (n > 0) buffer_.append(buf, static_cast<std::size_t>(n));
      }
    }
    reaped_ = true;
  }
  return WIFEXITED(status_) ? WEXITSTATUS(status_) : 128 + WTERMSIG(status_);
}

int run_command(const std::vector<std::string>& argv, std::string* out, std::string* err) {
  int o[2], e[2];
  if (::pipe(o) != 0 || ::pipe(e) != 0) throw std::runtime_error("pipe failed");
  const pid_t pid = ::fork();
  if (pid == 0) {
    ::prctl(PR_SET_PDEATHSIG, SIGKILL);
    ::dup2(o[1], STDOUT_FILENO);
    ::dup2(e[1], STDERR_FILENO);
    const int devnull = ::open("/dev/null", O_RDONLY);
    ::dup2(devnull, STDIN_FILENO);
    ::close(o[0]);
    ::close(e[0]);
    std::vector<std::string> copy = argv;
    std::vector<char*> c;
    for (auto& a : copy) c.push_back(a.data());
    c.push_back(nullptr);
    ::execv(c[0], c.data());
    ::_exit(127);
  }
  ::close(o[1]);
  ::close(e[1]);
  std::string so, se;
  pollfd p[2] = {{o[0], POLLIN, 0}, {e[0], POLLIN, 0}};
  int open = 2;
  while (open > 0) {
    if (::poll(p, 2, -1) <= 0) break;
    for (auto& x : p) {
      if (x.fd < 0 || !(x.revents & (POLLIN | POLLHUP))) continue;
      char buf[4096];
      const ssize_t n = ::read(x.fd, buf, sizeof buf);
      if (n <= 0) {
        ::close(x.fd);
        x.fd = -1;
        --open;
      } else {
        (x.fd == o[0] ? so : se).append(buf, static_cast<std::size_t>(n));
      }
    }
  }
  int st = 0;
  ::waitpid(pid, &st, 0);
  if (out) *out = so;
  if (err) *err = se;
  return WIFEXITED(st) ? WEXITSTATUS(st) : 128 + WTERMSIG(st);
}

}  // namespace loadtrim::process
