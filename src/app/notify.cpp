#include "app/notify.hpp"

#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <spawn.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cerrno>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <filesystem>

#include "app/exit_codes.hpp"
#include "store/queue.hpp"

extern char** environ;

namespace loadtrim::app {

namespace fs = std::filesystem;

namespace {

constexpr std::size_t kKeepStderrBytes = 2048;

std::string one_line(std::string s) {
  for (char& c : s)
    if (c == '\n' || c == '\r') c = ' ';
  return s;
}

std::string first_line(const std::string& s) {
  const auto n = s.find('\n');
  return n == std::string::npos ? s : s.substr(0, n);
}

// The plain-text message the mailer gets (RFC 5322 headers, then the summary). Header values are single
// lines.
std::string mail_text(const std::string& to, const nlohmann::json& m) {
  const std::string subject = "loadtrim: cell " + m.value("cell", std::string("?")) + ": " +
                              m.value("what", std::string("?")) + " " + m.value("id", std::string("?")) +
                              " " + m.value("event", std::string("?")) + ": " +
                              m.value("result", std::string("?"));
  std::string t = "To: " + one_line(to) + "\nSubject: " + one_line(subject) +
                  "\nContent-Type: text/plain; charset=utf-8\n\n";
  t += m.value("what", std::string("?")) + " " + m.value("id", std::string("?")) + " on cell " +
       m.value("cell", std::string("?")) + ": " + m.value("result", std::string("?")) + " (exit code " +
       std::to_string(m.value("exit_code", -1)) + ")\nfolder: " + m.value("folder", std::string("?")) +
       "\n\nsummary (JSON):\n" + m.dump(2, ' ', false, nlohmann::json::error_handler_t::replace) + "\n";
  return t;
}

}  // namespace

NotifierRun run_notifier(const std::vector<std::string>& argv, const std::string& input,
                         const std::vector<std::string>& env, double timeout_s,
                         const std::atomic<bool>* stop) {
  NotifierRun out;
  if (argv.empty() || argv[0].empty() || argv[0][0] != '/') {
    out.message = "not run: the program must be an absolute path";
    return out;
  }
  // A notifier that exits without reading must give EPIPE, never end the tool (the tool ignores SIGPIPE).
  ::signal(SIGPIPE, SIG_IGN);
  int in[2], err[2];
  if (::pipe2(in, O_CLOEXEC) != 0) {
    out.message = std::string("not run: pipe: ") + std::strerror(errno);
    return out;
  }
  if (::pipe2(err, O_CLOEXEC) != 0) {
    out.message = std::string("not run: pipe: ") + std::strerror(errno);
    ::close(in[0]);
    ::close(in[1]);
    return out;
  }
  posix_spawn_file_actions_t fa;
  posix_spawn_file_actions_init(&fa);
  posix_spawn_file_actions_adddup2(&fa, in[0], 0);
  posix_spawn_file_actions_addopen(&fa, 1, "/dev/null", O_WRONLY, 0);
  posix_spawn_file_actions_adddup2(&fa, err[1], 2);
  // Its own process group, so that an overrun stops what it started too.
  posix_spawnattr_t attr;
  posix_spawnattr_init(&attr);
  posix_spawnattr_setflags(&attr, POSIX_SPAWN_SETPGROUP | POSIX_SPAWN_SETSIGMASK | POSIX_SPAWN_SETSIGDEF);
  posix_spawnattr_setpgroup(&attr, 0);
  sigset_t none, all;
  sigemptyset(&none);
  sigfillset(&all);
  posix_spawnattr_setsigmask(&attr, &none);
  posix_spawnattr_setsigdefault(&attr, &all);
  // The notifier gets the tool's environment without its secrets (the live page's token, a store password)
  // and without stale LOADTRIM_NOTIFY_* values; then this end's.
  std::vector<std::string> envs;
  for (char** e = environ; e && *e; ++e) {
    const std::string v = *e;
    if (v.rfind("LOADTRIM_LIVE_TOKEN=", 0) == 0 || v.rfind("LOADTRIM_NOTIFY_", 0) == 0 ||
        v.rfind("PGPASSWORD=", 0) == 0 || v.rfind("PGPASSFILE=", 0) == 0)
      continue;
    envs.push_back(v);
  }
  envs.insert(envs.end(), env.begin(), env.end());
  std::vector<char*> cargv, cenv;
  for (const auto& a : argv) cargv.push_back(const_cast<char*>(a.c_str()));
  cargv.push_back(nullptr);
  for (const auto& e : envs) cenv.push_back(const_cast<char*>(e.c_str()));
  cenv.push_back(nullptr);
  pid_t pid = -1;
  const int rc = ::posix_spawn(&pid, argv[0].c_str(), &fa, &attr, cargv.data(), cenv.data());
  posix_spawn_file_actions_destroy(&fa);
  posix_spawnattr_destroy(&attr);
  ::close(in[0]);
  ::close(err[1]);
  if (rc != 0) {
    ::close(in[1]);
    ::close(err[0]);
    out.message = "not run: " + argv[0] + ": " + std::strerror(rc);
    return out;
  }
  ::fcntl(in[1], F_SETFL, O_NONBLOCK);
  ::fcntl(err[0], F_SETFL, O_NONBLOCK);
  const auto deadline =
      std::chrono::steady_clock::now() + std::chrono::duration_cast<std::chrono::steady_clock::duration>(
                                             std::chrono::duration<double>(timeout_s));
  std::size_t written = 0;
  std::string err_text;
  int in_fd = in[1], err_fd = err[0];
  if (input.empty()) {
    ::close(in_fd);
    in_fd = -1;
  }
  int status = 0;
  bool exited = false;
  while (!exited) {
    const pid_t w = ::waitpid(pid, &status, WNOHANG);
    if (w == pid) {
      exited = true;
      break;
    }
    const auto now = std::chrono::steady_clock::now();
    if (now >= deadline || (stop && stop->load())) break;
    pollfd fds[2];
    nfds_t n = 0;
    if (in_fd >= 0) fds[n++] = {in_fd, POLLOUT, 0};
    if (err_fd >= 0) fds[n++] = {err_fd, POLLIN, 0};
    const auto left_ms = std::chrono::duration_cast<std::chrono::milliseconds>(deadline - now).count();
    ::poll(fds, n, static_cast<int>(std::min<long long>(20, std::max<long long>(1, left_ms))));
    if (in_fd >= 0) {
      // Writes are non-blocking; SIGPIPE is ignored by the tool (a notifier that exits early gives EPIPE).
      const ssize_t k = ::write(in_fd, input.data() + written, input.size() - written);
      if (k > 0) written += static_cast<std::size_t>(k);
      if ((k < 0 && errno != EAGAIN && errno != EINTR) || written == input.size()) {
        ::close(in_fd);
        in_fd = -1;
      }
    }
    if (err_fd >= 0) {
      char buf[512];
      const ssize_t k = ::read(err_fd, buf, sizeof buf);
      if (k > 0 && err_text.size() < kKeepStderrBytes) err_text.append(buf, static_cast<std::size_t>(k));
      if (k == 0 || (k < 0 && errno != EAGAIN && errno != EINTR)) {
        ::close(err_fd);
        err_fd = -1;
      }
    }
  }
  if (in_fd >= 0) ::close(in_fd);
  if (err_fd >= 0) ::close(err_fd);
  if (!exited) {
    ::kill(-pid, SIGKILL);
    ::kill(pid, SIGKILL);
    while (::waitpid(pid, &status, 0) < 0 && errno == EINTR) {
    }
    char t[64];
    std::snprintf(t, sizeof t, "%.0f", timeout_s);
    out.message = stop && stop->load() ? argv[0] + " stopped: the operator interrupted the wait"
                                       : argv[0] + " did not finish within " + t + " s: stopped";
    return out;
  }
  const std::string why = one_line(first_line(err_text));
  if (WIFEXITED(status) && WEXITSTATUS(status) == 0) {
    out.ok = written == input.size();
    out.message = out.ok ? argv[0] + " done"
                         : argv[0] + " exited 0 without reading the whole summary (" +
                               std::to_string(written) + " of " + std::to_string(input.size()) + " bytes)";
    return out;
  }
  out.message = argv[0] +
                (WIFEXITED(status) ? " exited " + std::to_string(WEXITSTATUS(status))
                                   : " ended by signal " + std::to_string(WTERMSIG(status))) +
                (why.empty() ? std::string() : ": " + why);
  return out;
}

nlohmann::json end_message(const std::string& what, const std::string& cell, const std::string& folder,
                           const std::string& result, int exit_code, const nlohmann::json& summary) {
  const char* event =
      exit_code == kInterrupted ? "interrupted"
      : (exit_code == kControllerFault || exit_code == kRecordFailure || exit_code == kInternalError)
          ? "fault"
          : "ended";
  return {{"what", what},           {"event", event},
          {"cell", cell},           {"id", fs::path(folder).filename().string()},
          {"folder", folder},       {"result", result},
          {"exit_code", exit_code}, {"summary", summary}};
}

void notify_end(const controller::CellConfig& cell, const record::DataRoot& root,
                const nlohmann::json& message, const std::atomic<bool>* stop) {
  if (cell.notify_command.empty() && cell.notify_mail_to.empty()) return;
  try {
    const std::string id =
        message.value("what", std::string("?")) + " " + message.value("id", std::string("?"));
    auto log = [&](const std::string& who, const NotifierRun& r) {
      const std::string line = std::string(r.ok ? "notified " : "NOTIFIER FAILED ") + who + " for " + id +
                               " (" + message.value("event", std::string("?")) + "): " + r.message;
      if (!r.ok) std::fprintf(stderr, "loadtrim: %s (the session's result is not affected)\n", line.c_str());
      std::string err;
      if (root.ok() && !store::append_utc_line((fs::path(root.path) / "notify.log").string(), line, err))
        std::fprintf(stderr, "loadtrim: notify.log not written: %s\n", err.c_str());
    };
    const std::vector<std::string> env = {"LOADTRIM_NOTIFY_EVENT=" + message.value("event", std::string()),
                                          "LOADTRIM_NOTIFY_WHAT=" + message.value("what", std::string()),
                                          "LOADTRIM_NOTIFY_FOLDER=" + message.value("folder", std::string())};
    if (!cell.notify_command.empty())
      log("command",
          run_notifier(cell.notify_command,
                       message.dump(-1, ' ', false, nlohmann::json::error_handler_t::replace) + "\n", env,
                       cell.notify_timeout_s, stop));
    if (!cell.notify_mail_to.empty())
      log("mail to " + cell.notify_mail_to,
          run_notifier({cell.notify_mailer, "-oi", "--", cell.notify_mail_to},
                       mail_text(cell.notify_mail_to, message), env, cell.notify_timeout_s, stop));
  } catch (const std::exception& e) {
    std::fprintf(stderr, "loadtrim: notifier not run: %s (the session's result is not affected)\n", e.what());
  }
}

}  // namespace loadtrim::app
