#include "app/pause_watch.hpp"

#include <fcntl.h>
#include <poll.h>
#include <pwd.h>
#include <signal.h>
#include <sys/stat.h>
#include <unistd.h>

#include <chrono>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <nlohmann/json.hpp>
#include <optional>

#include "app/cell_locks.hpp"
#include "app/exit_codes.hpp"
#include "record/session_folder.hpp"

namespace loadtrim::app {

namespace fs = std::filesystem;

namespace {

// Set by the signal handlers (async-signal-safe: lock-free atomics only), taken by the watch's thread.
std::atomic<bool> g_pause_signal{false}, g_continue_signal{false};
std::atomic<long> g_pause_uid{-1}, g_continue_uid{-1};
static_assert(std::atomic<long>::is_always_lock_free && std::atomic<bool>::is_always_lock_free);

extern "C" void on_pause_signal(int sig, siginfo_t* info, void*) {
  const long uid = info ? static_cast<long>(info->si_uid) : -1;
  if (sig == SIGUSR1) {
    g_pause_uid.store(uid);
    g_pause_signal.store(true);
  } else {
    g_continue_uid.store(uid);
    g_continue_signal.store(true);
  }
}

std::string user_name(long uid) {
  if (uid < 0) return "an unknown user";
  struct passwd pw {};
  struct passwd* out = nullptr;
  char buf[4096];
  if (::getpwuid_r(static_cast<uid_t>(uid), &pw, buf, sizeof buf, &out) == 0 && out && out->pw_name)
    return out->pw_name;
  return "uid " + std::to_string(uid);
}

std::string reply_path(const std::string& request_path) {
  return request_path.substr(0, request_path.size() - std::string(".request").size()) + ".reply";
}

// Limits on what a request file may hold (common practice, no source: a name and a sentence).
constexpr std::uintmax_t kMaxRequestBytes = 4096;
constexpr std::size_t kMaxByChars = 200, kMaxWhyChars = 1000;

}  // namespace

namespace {
struct sigaction g_old_usr1 {
}, g_old_usr2{};

// Writes `text` to a new file at `path` (an old one removed first), never through a symlink.
bool write_new_file(const std::string& path, const std::string& text) {
  std::error_code ec;
  fs::remove(path, ec);
  const int fd = ::open(path.c_str(), O_WRONLY | O_CREAT | O_EXCL | O_NOFOLLOW | O_CLOEXEC, 0644);
  if (fd < 0) return false;
  const bool ok = ::write(fd, text.data(), text.size()) == static_cast<ssize_t>(text.size());
  return ::close(fd) == 0 && ok;
}
}  // namespace

void install_pause_handlers() {
  struct sigaction sa {};
  sa.sa_sigaction = on_pause_signal;
  sa.sa_flags = SA_SIGINFO | SA_RESTART;
  sigemptyset(&sa.sa_mask);
  ::sigaction(SIGUSR1, &sa, &g_old_usr1);
  ::sigaction(SIGUSR2, &sa, &g_old_usr2);
}

PauseWatch::PauseWatch(session::PauseControl& control, std::string folder, std::string operator_name,
                       bool console_lines)
    : control_(control),
      folder_(std::move(folder)),
      operator_(std::move(operator_name)),
      console_(console_lines) {
  try {
    request_path_ = folder_request_path(folder_);
  } catch (const std::exception& e) {
    std::cerr << "loadtrim: `loadtrim pause` cannot reach this session (" << e.what()
              << "); signals and the console still can\n";
  }
  // A request left by an earlier process is not this session's.
  if (!request_path_.empty()) {
    std::error_code ec;
    fs::remove(request_path_, ec);
    fs::remove(reply_path(request_path_), ec);
  }
  g_pause_signal.store(false);
  g_continue_signal.store(false);
  install_pause_handlers();  // only while a session can take them (elsewhere SIGUSR1/2 stop safely)
  thread_ = std::thread([this] { loop(); });
}

PauseWatch::~PauseWatch() {
  done_.store(true);
  if (thread_.joinable()) thread_.join();
  ::sigaction(SIGUSR1, &g_old_usr1, nullptr);
  ::sigaction(SIGUSR2, &g_old_usr2, nullptr);
  if (!request_path_.empty()) {
    std::error_code ec;
    fs::remove(request_path_, ec);
    fs::remove(reply_path(request_path_), ec);
  }
}

void PauseWatch::loop() {
  while (!done_.load()) {
    take_signals();
    if (!request_path_.empty()) take_file();
    if (console_) take_console();
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
  }
}

void PauseWatch::take_signals() {
  if (g_pause_signal.exchange(false)) {
    const std::string who = user_name(g_pause_uid.load());
    if (!control_.request_pause({who, "SIGUSR1", "signal"}))
      std::cerr << "\nloadtrim: SIGUSR1 from " << who << " ignored: the session is already paused\n";
  }
  if (g_continue_signal.exchange(false)) {
    const std::string who = user_name(g_continue_uid.load());
    if (!control_.request_continue({who, "SIGUSR2", "signal"}))
      std::cerr << "\nloadtrim: SIGUSR2 from " << who << " ignored: the session is not paused\n";
  }
}

void PauseWatch::take_file() {
  // Checked before it is believed: a regular file (never through a symlink, never a FIFO that would block)
  // of this process's own user, at most kMaxRequestBytes; one this process cannot remove is answered once.
  const int fd = ::open(request_path_.c_str(), O_RDONLY | O_NOFOLLOW | O_NONBLOCK | O_CLOEXEC);
  if (fd < 0) return;
  struct stat st {};
  std::string text, refusal;
  if (::fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
    refusal = "not a regular file";
  } else if (st.st_uid != ::geteuid()) {
    refusal = "the request file belongs to " + user_name(static_cast<long>(st.st_uid)) +
              ", not to the user running the session";
  } else {
    char buf[kMaxRequestBytes + 1];
    const ssize_t n = ::read(fd, buf, sizeof buf);
    if (n <= 0 || static_cast<std::uintmax_t>(n) > kMaxRequestBytes)
      refusal = "empty or larger than " + std::to_string(kMaxRequestBytes) + " bytes";
    else
      text.assign(buf, static_cast<std::size_t>(n));
  }
  ::close(fd);
  if (answered_ && st.st_dev == answered_dev_ && st.st_ino == answered_ino_) return;  // could not be removed
  std::error_code ec;
  fs::remove(request_path_, ec);
  if (ec || fs::exists(fs::symlink_status(request_path_, ec))) {
    answered_ = true;
    answered_dev_ = st.st_dev;
    answered_ino_ = st.st_ino;
  }
  std::string reply;
  const nlohmann::json j = nlohmann::json::parse(text, nullptr, /*allow_exceptions=*/false);
  const auto str = [&](const char* k) {
    return j.is_object() && j.contains(k) && j[k].is_string()
               ? std::optional<std::string>(j[k].get<std::string>())
               : std::nullopt;
  };
  const auto action = str("action"), by = str("by"), why = str("why");
  if (!refusal.empty() || !action || (*action != "pause" && *action != "continue") || !by || by->empty() ||
      by->size() > kMaxByChars || (why && why->size() > kMaxWhyChars)) {
    reply = "refused: " + (refusal.empty()
                               ? std::string("the request file is not one `loadtrim pause`/`continue` "
                                             "writes (action pause or continue, by 1 to 200 "
                                             "characters, why at most 1000)")
                               : refusal);
    std::cerr << "\nloadtrim: a request for this session was refused: " << reply << "\n";
  } else {
    const session::PauseRequest r{*by, why.value_or(""),
                                  "command (user " + user_name(static_cast<long>(st.st_uid)) + ")"};
    const bool ok = *action == "pause" ? control_.request_pause(r) : control_.request_continue(r);
    reply = ok ? "taken: " + *action + " by " + *by
               : std::string("ignored: ") +
                     (*action == "pause" ? "the session is already paused" : "the session is not paused");
  }
  if (!write_new_file(reply_path(request_path_), reply + "\n"))
    std::cerr << "\nloadtrim: could not answer the request at " << reply_path(request_path_) << "\n";
}

void PauseWatch::take_console() {
  pollfd p{STDIN_FILENO, POLLIN, 0};
  while (::poll(&p, 1, 0) == 1 && (p.revents & POLLIN)) {
    char buf[256];
    const ssize_t n = ::read(STDIN_FILENO, buf, sizeof buf);
    if (n <= 0) {
      console_ = false;  // end of input: no more lines
      return;
    }
    for (ssize_t i = 0; i < n; ++i) {
      if (buf[i] != '\n') {
        if (line_.size() < kMaxWhyChars) line_ += buf[i];
        continue;
      }
      std::string l = line_;
      line_.clear();
      while (!l.empty() && (l.back() == '\r' || l.back() == ' ')) l.pop_back();
      const auto word_end = l.find(' ');
      const std::string word = l.substr(0, word_end);
      std::string rest = word_end == std::string::npos ? "" : l.substr(word_end + 1);
      while (!rest.empty() && rest.front() == ' ') rest.erase(0, 1);
      if (word == "pause") {
        if (!control_.request_pause({operator_, rest, "console"}))
          std::cerr << "loadtrim: already paused (type \"continue\" to go on)\n";
      } else if (word == "continue") {
        if (!control_.request_continue({operator_, rest, "console"}))
          std::cerr << "loadtrim: not paused (type \"pause <reason>\" to pause)\n";
      } else if (!l.empty()) {
        std::cerr << "loadtrim: type \"pause <reason>\" to stop the rollers and wait, \"continue\" to go on, "
                     "or Ctrl-C to end the session\n";
      }
    }
  }
}

int send_pause_request(const std::string& folder, const std::string& action, const std::string& by,
                       const std::string& why) {
  std::error_code ec;
  if (!fs::is_directory(folder, ec)) {
    std::cerr << "loadtrim " << action << ": " << folder << " is not a session folder (no such directory)\n";
    return kBadInput;
  }
  if (by.empty() || by.size() > kMaxByChars || why.size() > kMaxWhyChars) {
    std::cerr << "loadtrim " << action << ": --by must be 1 to 200 characters and --why at most 1000\n";
    return kBadInput;
  }
  // Nothing holds the folder's lock: no session runs there.
  {
    std::optional<record::FileLock> held;
    std::string msg;
    if (lock_folder(folder, action, held, msg)) {
      std::cerr << "loadtrim " << action << ": no session is running in " << folder
                << " (nothing holds its lock); an interrupted session is continued with `loadtrim resume`\n";
      return kBadInput;
    }
  }
  std::string path;
  try {
    path = folder_request_path(folder);
  } catch (const std::exception& e) {
    std::cerr << "loadtrim " << action << ": " << e.what() << "\n";
    return kBadInput;
  }
  if (fs::exists(path, ec)) {
    std::cerr << "loadtrim " << action << ": another request for this session is still waiting (" << path
              << ")\n";
    return kBadInput;
  }
  fs::remove(reply_path(path), ec);
  const nlohmann::json j = {{"action", action}, {"by", by}, {"why", why}, {"utc", record::utc_now()}};
  const std::string tmp = path + ".tmp-" + std::to_string(::getpid());
  if (!write_new_file(tmp, j.dump() + "\n")) {
    std::cerr << "loadtrim " << action << ": cannot write " << tmp << "\n";
    return kBadInput;
  }
  fs::rename(tmp, path, ec);
  if (ec) {
    std::cerr << "loadtrim " << action << ": cannot write " << path << ": " << ec.message() << "\n";
    fs::remove(tmp, ec);
    return kBadInput;
  }
  // Taken within 10 s of our own clock, and answered (common practice, no source: the watch polls at 10 Hz).
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(10);
  std::string reply;
  while (std::chrono::steady_clock::now() < deadline) {
    std::ifstream in(reply_path(path));
    if (in && std::getline(in, reply) && !reply.empty()) break;
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  fs::remove(reply_path(path), ec);
  fs::remove(path, ec);  // our own request, in case the session could not remove it
  if (reply.empty()) {
    std::cerr << "loadtrim " << action << ": the session in " << folder
              << " did not take the request within 10 s (request withdrawn)\n";
    return kBadInput;
  }
  if (reply.rfind("taken", 0) != 0) {
    std::cerr << "loadtrim " << action << ": " << reply << "\n";
    return kBadInput;
  }
  if (action == "pause")
    std::printf(
        "pause asked of the session in %s: it discards a run in progress, stops the rollers and waits "
        "for `loadtrim continue %s`\n",
        folder.c_str(), folder.c_str());
  else
    std::printf(
        "continue asked of the session in %s: it re-warms the vehicle and goes on (the pass count starts "
        "again)\n",
        folder.c_str());
  return kAccepted;
}

}  // namespace loadtrim::app
