#include "record/lock.hpp"

#include <fcntl.h>
#include <signal.h>
#include <sys/file.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <nlohmann/json.hpp>
#include <stdexcept>
#include <utility>

#include "record/sha256.hpp"

namespace loadtrim::record {

namespace {

// A holder's line is short; anything longer than this is not one of ours and is treated as unreadable.
constexpr std::size_t kMaxContent = 8192;

std::string errno_text(int err) {
  return std::strerror(err);
}

std::string this_host() {
  char buf[256] = {};
  if (::gethostname(buf, sizeof buf - 1) != 0) return "";
  return buf;
}

std::string holder_line(const LockHolder& h) {
  const nlohmann::json j = {
      {"pid", h.pid}, {"command", h.command}, {"folder", h.folder}, {"utc", h.utc}, {"host", h.host}};
  // A folder name is bytes from the file system; replace rather than throw on one that is not UTF-8.
  return j.dump(-1, ' ', false, nlohmann::json::error_handler_t::replace) + "\n";
}

// The file's content from offset 0 (pread: the descriptor's offset is never relied on). Empty on any error:
// the caller then treats the file as naming no one, which only costs detail in a message.
std::string read_content(int fd) {
  std::string out(kMaxContent + 1, '\0');
  std::size_t done = 0;
  while (done < out.size()) {
    const ssize_t r = ::pread(fd, out.data() + done, out.size() - done, static_cast<off_t>(done));
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) break;
    done += static_cast<std::size_t>(r);
  }
  out.resize(done);
  return out;
}

bool blank(const std::string& s) {
  return s.find_first_not_of(" \t\r\n") == std::string::npos;
}

// The holder named by the file's first line, or nullopt when it names no one we can trust (the file may be
// written by any process that can open it, so every field is type-checked and nothing throws).
std::optional<LockHolder> parse_holder(const std::string& content) {
  if (content.size() > kMaxContent) return std::nullopt;
  const auto j = nlohmann::json::parse(content.substr(0, content.find('\n')), nullptr, false);
  if (j.is_discarded() || !j.is_object()) return std::nullopt;
  const auto pid = j.find("pid");
  if (pid == j.end() || !pid->is_number_integer()) return std::nullopt;
  LockHolder h;
  const auto v = pid->get<long long>();
  if (v <= 0 || v > std::numeric_limits<pid_t>::max()) return std::nullopt;
  h.pid = static_cast<long>(v);
  const auto text = [&](const char* key) -> std::string {
    const auto it = j.find(key);
    return it != j.end() && it->is_string() ? it->get<std::string>() : std::string();
  };
  h.command = text("command");
  h.folder = text("folder");
  h.utc = text("utc");
  h.host = text("host");
  return h;
}

// A killed process stays a zombie until its parent reaps it; kill(pid, 0) succeeds on a zombie, so ask /proc
// whether the pid is one before calling it alive.
bool is_zombie(long pid) {
  std::ifstream in("/proc/" + std::to_string(pid) + "/stat");
  std::string line;
  if (!std::getline(in, line)) return false;
  const auto close_paren = line.rfind(')');  // the command name may itself contain ") "
  return close_paren != std::string::npos && close_paren + 2 < line.size() && line[close_paren + 2] == 'Z';
}

std::string stale_sentence(const std::optional<LockHolder>& h) {
  if (!h) return "a stale lock file whose holder line could not be read was taken over";
  std::string s = "a stale lock of pid " + std::to_string(h->pid) + " (" + h->command + ", " + h->folder +
                  ") was taken over: ";
  if (!h->host.empty() && h->host != this_host()) {
    return s + "that process ran on host " + h->host + " and no longer holds it";
  }
  const bool exists = ::kill(static_cast<pid_t>(h->pid), 0) == 0 || errno == EPERM;
  if (exists && !is_zombie(h->pid)) {
    // The kernel has dropped its lock, so it is not holding it; the number has most likely been reused.
    return s + "that process no longer holds it (pid " + std::to_string(h->pid) + " is in use again)";
  }
  return s + "that process is gone";
}

std::string busy_sentence(const LockHolder& h, const std::string& what) {
  std::string s = what + " busy: ";
  if (!h.folder.empty()) s += "session " + h.folder + ", ";
  s += "pid " + std::to_string(h.pid);
  if (!h.host.empty() && h.host != this_host()) s += " on host " + h.host;
  return s + " (" + h.command + " since " + h.utc + ")";
}

// Why a lock attempt on `fd` was refused with EWOULDBLOCK.
std::string refusal(int fd, const std::string& path, LockMode mode, const std::string& what) {
  if (mode == LockMode::exclusive) {
    // Refused either by an exclusive holder or by shared ones; shared holders write nothing, so ask the
    // kernel which: a shared attempt on the same description succeeds only if no exclusive holder is present.
    // If the holders left in between, this says "link-check" for a cell that just became free; the operator
    // retries. While this probe holds its shared lock (a few system calls), a third contender for the cell is
    // refused with the same sentence.
    if (::flock(fd, LOCK_SH | LOCK_NB) == 0) {
      ::flock(fd, LOCK_UN);
      return what + " busy: a link-check is using the " + what;
    }
  }
  const auto holder = parse_holder(read_content(fd));
  if (!holder)
    return what + " busy: held by another process that has not named itself (lock file " + path + ")";
  return busy_sentence(*holder, what);
}

// Lock files in a directory others can write (the system-wide one, mode 1777) are made 0666, so that an
// operator under another account can open the file to lock it; elsewhere the umask's mode stands.
void share_if_shared_dir(int fd, const std::string& path) {
  struct stat file {};
  struct stat dir {};
  if (::fstat(fd, &file) != 0 || file.st_uid != ::geteuid() || (file.st_mode & 0777) == 0666) return;
  const std::string parent = std::filesystem::path(path).parent_path().string();
  if (::stat(parent.empty() ? "." : parent.c_str(), &dir) != 0 || (dir.st_mode & S_IWOTH) == 0) return;
  if (::fchmod(fd, 0666) != 0) {
    // Not fatal: this process can still lock; another account may be refused "cannot lock" instead of queued.
  }
}

bool write_all_at_zero(int fd, const std::string& s, std::string& error) {
  if (::ftruncate(fd, 0) != 0) {
    error = errno_text(errno);
    return false;
  }
  std::size_t done = 0;
  while (done < s.size()) {
    const ssize_t w = ::pwrite(fd, s.data() + done, s.size() - done, static_cast<off_t>(done));
    if (w < 0 && errno == EINTR) continue;
    if (w <= 0) {
      error = w < 0 ? errno_text(errno) : "no progress";
      return false;
    }
    done += static_cast<std::size_t>(w);
  }
  return true;
}

}  // namespace

FileLock::FileLock(int fd, std::string path, LockMode mode) noexcept
    : fd_(fd), path_(std::move(path)), mode_(mode), owner_pid_(::getpid()) {}

FileLock::FileLock(FileLock&& other) noexcept
    : fd_(std::exchange(other.fd_, -1)),
      path_(std::move(other.path_)),
      mode_(other.mode_),
      owner_pid_(other.owner_pid_) {}

FileLock& FileLock::operator=(FileLock&& other) noexcept {
  if (this != &other) {
    release();
    fd_ = std::exchange(other.fd_, -1);
    path_ = std::move(other.path_);
    mode_ = other.mode_;
    owner_pid_ = other.owner_pid_;
  }
  return *this;
}

FileLock::~FileLock() {
  release();
}

void FileLock::release() noexcept {
  if (fd_ < 0) return;
  if (::getpid() == owner_pid_) {
    // Cleared before unlocking, so a non-empty file seen by the next holder means only one thing: a holder
    // died.
    if (mode_ == LockMode::exclusive && ::ftruncate(fd_, 0) != 0) {
      // Nothing to do from a destructor: the next holder reports a stale lock naming this pid, which is
      // harmless.
    }
    ::flock(fd_, LOCK_UN);
  }
  ::close(fd_);
  fd_ = -1;
}

std::optional<FileLock> FileLock::try_acquire(const std::string& path, LockMode mode, const LockHolder& me,
                                              const std::string& what, std::string& busy,
                                              std::string* took_over_stale) {
  busy.clear();
  if (took_over_stale) took_over_stale->clear();

  // O_NOFOLLOW: in a directory others can write, a planted symbolic link must not redirect the lock (or the
  // holder line we write) to another file.
  bool writable = true;
  int fd = ::open(path.c_str(), O_RDWR | O_CREAT | O_CLOEXEC | O_NOFOLLOW, 0666);
  if (fd < 0 && errno == EACCES && mode == LockMode::shared) {
    // A file made by another account without write permission for us still locks shared: flock needs no write
    // access. Such a holder just cannot clear a stale line.
    fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC | O_NOFOLLOW);
    writable = false;
  }
  if (fd < 0) {
    busy = "cannot lock " + path + ": " + errno_text(errno);
    return std::nullopt;
  }
  struct stat st {};
  if (::fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
    busy = "cannot lock " + path + ": not a regular file";
    ::close(fd);
    return std::nullopt;
  }
  if (writable) share_if_shared_dir(fd, path);

  const int op = (mode == LockMode::exclusive ? LOCK_EX : LOCK_SH) | LOCK_NB;
  int rc = 0;
  do {
    rc = ::flock(fd, op);  // LOCK_NB: returns at once; EINTR only if a signal arrived during the call itself
  } while (rc != 0 && errno == EINTR);
  if (rc != 0) {
    const int err = errno;
    busy =
        err == EWOULDBLOCK ? refusal(fd, path, mode, what) : "cannot lock " + path + ": " + errno_text(err);
    ::close(fd);
    return std::nullopt;
  }

  FileLock lock(fd, path, mode);  // from here on every return releases through the destructor
  // Every holder clears the file before unlocking, so what is left in it was left by a holder that died.
  const std::string before = read_content(fd);
  const bool stale = !blank(before);
  if (stale && took_over_stale) *took_over_stale = stale_sentence(parse_holder(before));

  if (mode == LockMode::exclusive) {
    std::string error;
    if (!write_all_at_zero(fd, holder_line(me), error)) {
      // A holder that cannot name itself would leave the next contender with a sentence naming no one and
      // make stale detection impossible; refusing keeps the contract "a held exclusive lock names its
      // holder".
      busy = "cannot lock " + path + ": cannot write the holder line: " + error;
      if (took_over_stale) took_over_stale->clear();
      return std::nullopt;
    }
  } else if (stale && writable) {
    // Holding it shared proves no exclusive holder is alive, so the stale line can go; several shared holders
    // clearing it at once is harmless.
    if (::ftruncate(fd, 0) != 0) {
      // Left in place: the next exclusive holder reports the same stale lock again, which is harmless.
    }
  }
  return lock;
}

std::string lock_dir() {
  if (const char* env = std::getenv("LOADTRIM_LOCK_DIR"); env != nullptr && *env != '\0') {
    ::mkdir(env, 0700);  // a failure surfaces as "cannot lock <path>" when a lock is tried
    return env;
  }

  // The system-wide directory lets every account on this computer see every cell lock. Trusted only if it is
  // a real directory we can write, and, when others can write it too, sticky (nobody can remove another's
  // lock file; removing one would let two processes lock two different inodes of "the same" file).
  const std::string system_dir = "/run/lock/loadtrim";
  if (::mkdir(system_dir.c_str(), 01777) == 0 && ::chmod(system_dir.c_str(), 01777) != 0) {
    // The umask narrowed it and we could not widen it: other accounts fall back to their own directories.
  }
  struct stat st {};
  if (::lstat(system_dir.c_str(), &st) == 0 && S_ISDIR(st.st_mode) &&
      ((st.st_mode & S_IWOTH) == 0 || (st.st_mode & S_ISVTX) != 0) &&
      ::access(system_dir.c_str(), W_OK | X_OK) == 0) {
    return system_dir;
  }

  const std::string user_dir = "/tmp/loadtrim-locks-" + std::to_string(::getuid());
  if (::mkdir(user_dir.c_str(), 0700) != 0 && errno != EEXIST) {
    throw std::runtime_error("cannot create the lock directory " + user_dir + ": " + errno_text(errno));
  }
  // /tmp is shared: a directory of that name made by someone else could be used to plant or remove our locks.
  if (::lstat(user_dir.c_str(), &st) != 0 || !S_ISDIR(st.st_mode) || st.st_uid != ::getuid() ||
      (st.st_mode & 07777) != 0700) {
    throw std::runtime_error(
        "the lock directory " + user_dir +
        " is not a directory of this user with mode 0700; remove it or set LOADTRIM_LOCK_DIR");
  }
  return user_dir;
}

std::string cell_lock_path(const std::string& dir, const std::string& endpoint_key) {
  std::string enc;
  for (const char ch : endpoint_key) {
    const auto c = static_cast<unsigned char>(ch);
    const bool keep = (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') ||
                      c == '-' || c == '_' || c == '.';
    if (keep) {
      enc += ch;
    } else {
      char hex[4];
      std::snprintf(hex, sizeof hex, "%%%02X", c);
      enc += hex;
    }
  }
  // NAME_MAX is 255 on the file systems we support; "cell-" + ".lock" take 10. '~' never appears in an
  // encoding, so a shortened name cannot equal an unshortened one, and the hash keeps long keys apart.
  constexpr std::size_t kMaxEncoded = 200;
  if (enc.size() > kMaxEncoded) enc = enc.substr(0, 120) + "~" + sha256_hex(endpoint_key);
  return (std::filesystem::path(dir) / ("cell-" + enc + ".lock")).string();
}

}  // namespace loadtrim::record
