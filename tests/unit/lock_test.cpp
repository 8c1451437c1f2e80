// Cell and folder locks (src/record/lock): real processes contend for one lock file. A child made with fork()
// takes the lock, reports on a pipe and then does what the parent tells it on a second pipe; the parent
// tries. The expected behaviour is flock(2) (Linux man-pages: locks belong to the open file description,
// LOCK_NB fails with EWOULDBLOCK, the kernel drops a lock when its last descriptor closes, including on
// SIGKILL) and open(2) (O_CLOEXEC, O_NOFOLLOW), plus the sentences the header promises.
#include "record/lock.hpp"

#include <fcntl.h>
#include <gtest/gtest.h>
#include <poll.h>
#include <signal.h>
#include <stdlib.h>
#include <sys/file.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <optional>
#include <sstream>
#include <string>

using namespace loadtrim;
using record::FileLock;
using record::LockHolder;
using record::LockMode;

namespace {

namespace fs = std::filesystem;

// How long a helper process keeps its lock when nobody tells it anything: a bound on how long a broken test
// can leave a process behind, not a timing under test.
constexpr int kDefaultHoldMs = 30000;
// How long the parent waits for a helper's report before failing the test.
constexpr int kReportWaitMs = 30000;

const char* const kUtc = "2026-12-01T19:39:30.123Z";

std::string read_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

void write_file(const std::string& path, const std::string& content) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out << content;
}

// One line from fd, or "" on end of file or after timeout_ms without one.
std::string read_line(int fd, int timeout_ms) {
  std::string line;
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::milliseconds(timeout_ms);
  for (;;) {
    const auto left =
        std::chrono::duration_cast<std::chrono::milliseconds>(deadline - std::chrono::steady_clock::now())
            .count();
    if (left <= 0) return "";
    pollfd p{fd, POLLIN, 0};
    const int r = ::poll(&p, 1, static_cast<int>(left));
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) return "";
    char c = 0;
    const ssize_t n = ::read(fd, &c, 1);
    if (n < 0 && errno == EINTR) continue;
    if (n <= 0) return "";
    if (c == '\n') return line;
    line += c;
  }
}

void write_text(int fd, const std::string& s) {
  std::size_t done = 0;
  while (done < s.size()) {
    const ssize_t w = ::write(fd, s.data() + done, s.size() - done);
    if (w < 0 && errno == EINTR) continue;
    if (w <= 0) return;
    done += static_cast<std::size_t>(w);
  }
}

// A holder of `command` writing `folder`, as the tool would describe itself.
LockHolder holder(long pid, const std::string& command, const std::string& folder) {
  LockHolder h;
  h.pid = pid;
  h.command = command;
  h.folder = folder;
  h.utc = kUtc;
  char host[256] = {};
  ::gethostname(host, sizeof host - 1);
  h.host = host;
  return h;
}

// A process that takes a lock and holds it until told otherwise.
//   report pipe (child -> parent): "A <grandchild pid or 0>" acquired, "R <sentence>" refused, "r" released
//   command pipe (parent -> child): 'r' release the lock and stay alive; end of file: exit
struct HelperOptions {
  LockMode mode = LockMode::exclusive;
  std::string command = "run";
  std::string what = "cell";
  int hold_ms = kDefaultHoldMs;
  bool exec_grandchild = false;  // after locking, start /bin/sleep (fork + exec) as a grandchild
};

class Helper {
 public:
  Helper(const std::string& path, const std::string& folder, HelperOptions o = {}) {
    int report[2], cmd[2];
    if (::pipe2(report, O_CLOEXEC) != 0 || ::pipe2(cmd, O_CLOEXEC) != 0) {
      ADD_FAILURE() << "pipe2: " << std::strerror(errno);
      return;
    }
    std::fflush(nullptr);  // nothing buffered may be written twice
    pid_ = ::fork();
    if (pid_ < 0) {
      ADD_FAILURE() << "fork: " << std::strerror(errno);
      return;
    }
    if (pid_ == 0) {
      ::close(report[0]);
      ::close(cmd[1]);
      child(report[1], cmd[0], path, folder, o);
    }
    ::close(report[1]);
    ::close(cmd[0]);
    report_ = report[0];
    cmd_ = cmd[1];
    const std::string first = read_line(report_, kReportWaitMs);
    if (first.rfind("A ", 0) == 0) {
      acquired_ = true;
      grandchild_ = static_cast<pid_t>(std::stol(first.substr(2)));
    } else if (first.rfind("R ", 0) == 0) {
      refusal_ = first.substr(2);
    } else {
      ADD_FAILURE() << "the helper process reported nothing";
    }
  }
  Helper(const Helper&) = delete;
  Helper& operator=(const Helper&) = delete;

  ~Helper() {
    if (grandchild_ > 0) ::kill(grandchild_, SIGKILL);  // not our child: the helper's; init reaps it
    if (cmd_ >= 0) ::close(cmd_);                       // end of file: the helper exits
    if (pid_ > 0 && !reaped_) ::waitpid(pid_, nullptr, 0);
    if (report_ >= 0) ::close(report_);
  }

  pid_t pid() const { return pid_; }
  bool acquired() const { return acquired_; }
  const std::string& refusal() const { return refusal_; }
  pid_t grandchild() const { return grandchild_; }

  // Asks the helper to destroy its FileLock while it keeps running; true once it says it has.
  bool release() {
    write_text(cmd_, "r");
    return read_line(report_, kReportWaitMs) == "r";
  }

  // SIGKILL, then wait until the kernel has finished the process's exit (its descriptors are closed by then)
  // but leave it a zombie, unreaped, when `reap` is false: a just-killed holder whose parent has not yet
  // called wait().
  void kill9(bool reap) {
    ::kill(pid_, SIGKILL);
    siginfo_t info{};
    ::waitid(P_PID, static_cast<id_t>(pid_), &info, WEXITED | (reap ? 0 : WNOWAIT));
    reaped_ = reap;
  }

  bool alive_and_unreaped() const { return pid_ > 0 && ::waitpid(pid_, nullptr, WNOHANG) == 0; }

 private:
  [[noreturn]] static void child(int report, int cmd, const std::string& path, const std::string& folder,
                                 const HelperOptions& o) {
    std::string busy;
    std::optional<FileLock> lock =
        FileLock::try_acquire(path, o.mode, holder(::getpid(), o.command, folder), o.what, busy);
    if (!lock) {
      write_text(report, "R " + busy + "\n");
      ::_exit(0);
    }
    pid_t grandchild = 0;
    if (o.exec_grandchild) {
      // Until it execs, a fork()ed grandchild shares the lock's open file description; report only once the
      // exec has happened (the close-on-exec pipe reads end of file), so what the test sees is the exec'd
      // program.
      int execd[2];
      if (::pipe2(execd, O_CLOEXEC) != 0) ::_exit(1);
      grandchild = ::fork();
      if (grandchild == 0) {
        ::execl("/bin/sleep", "sleep", "60", static_cast<char*>(nullptr));
        ::_exit(127);
      }
      ::close(execd[1]);
      char c = 0;
      while (::read(execd[0], &c, 1) < 0 && errno == EINTR) {
      }
      ::close(execd[0]);
    }
    write_text(report, "A " + std::to_string(grandchild) + "\n");
    for (;;) {
      pollfd p{cmd, POLLIN, 0};
      const int r = ::poll(&p, 1, o.hold_ms);
      if (r < 0 && errno == EINTR) continue;
      char c = 0;
      if (r <= 0 || ::read(cmd, &c, 1) != 1)
        ::_exit(0);  // told to go, or held for hold_ms: the kernel unlocks
      if (c == 'r') {
        lock.reset();
        write_text(report, "r\n");
      }
    }
  }

  pid_t pid_ = -1;
  pid_t grandchild_ = 0;
  int report_ = -1, cmd_ = -1;
  bool acquired_ = false, reaped_ = false;
  std::string refusal_;
};

class Lock : public ::testing::Test {
 protected:
  void SetUp() override {
    std::string tmpl = (fs::temp_directory_path() / "loadtrim-lock-test-XXXXXX").string();
    ASSERT_NE(::mkdtemp(tmpl.data()), nullptr) << std::strerror(errno);
    dir_ = tmpl;
    path_ = record::cell_lock_path(dir_, "tcp-127.0.0.1-7301");
    folder_ = dir_ + "/sessions/20261201T193930Z-T1";
  }
  void TearDown() override {
    std::error_code ec;
    fs::remove_all(dir_, ec);
  }

  std::optional<FileLock> try_lock(LockMode mode, std::string& busy, std::string* stale = nullptr,
                                   const std::string& command = "run", const std::string& what = "cell") {
    return FileLock::try_acquire(path_, mode, holder(::getpid(), command, dir_ + "/sessions/mine"), what,
                                 busy, stale);
  }

  // The sentence the header promises for an exclusive holder.
  std::string busy_by(pid_t pid, const std::string& command = "run", const std::string& what = "cell") const {
    return what + " busy: session " + folder_ + ", pid " + std::to_string(pid) + " (" + command + " since " +
           kUtc + ")";
  }

  std::string dir_, path_, folder_;
};

}  // namespace

TEST_F(Lock, ExclusiveRefusesExclusiveNamingTheHolder) {
  Helper h(path_, folder_);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  std::string busy;
  const auto mine = try_lock(LockMode::exclusive, busy);
  EXPECT_FALSE(mine.has_value());
  EXPECT_EQ(busy, busy_by(h.pid()));
}

// No waiting: the helper keeps its lock until the parent has its answer (or for kHoldMs, if something is
// wrong), so a call that waited for the lock would come back holding it and fail here. The time taken is
// recorded, not asserted (DEVELOPERS.md: no test asserts a timing).
TEST_F(Lock, RefusalComesWhileTheHolderStillHoldsIt) {
  HelperOptions o;
  o.hold_ms = 10000;
  Helper h(path_, folder_, o);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  std::string busy;
  const auto t0 = std::chrono::steady_clock::now();
  const auto mine = try_lock(LockMode::exclusive, busy);
  const auto us =
      std::chrono::duration_cast<std::chrono::microseconds>(std::chrono::steady_clock::now() - t0).count();
  RecordProperty("refusal_us", std::to_string(us));
  std::printf("refused after %lld us\n", static_cast<long long>(us));
  EXPECT_FALSE(mine.has_value()) << "the attempt waited until the holder let go";
  EXPECT_EQ(busy, busy_by(h.pid()));
  EXPECT_TRUE(h.alive_and_unreaped()) << "the holder had already gone when the refusal came";
}

TEST_F(Lock, FolderLockSaysFolderBusy) {
  HelperOptions o;
  o.command = "resume";
  o.what = "folder";
  Helper h(path_, folder_, o);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  std::string busy;
  EXPECT_FALSE(try_lock(LockMode::exclusive, busy, nullptr, "resume", "folder").has_value());
  EXPECT_EQ(busy, busy_by(h.pid(), "resume", "folder"));
}

TEST_F(Lock, SharedAllowsSharedAndWritesNothing) {
  HelperOptions o;
  o.mode = LockMode::shared;
  o.command = "link-check";
  Helper h(path_, folder_, o);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  std::string busy;
  const auto mine = try_lock(LockMode::shared, busy, nullptr, "link-check");
  EXPECT_TRUE(mine.has_value()) << busy;
  EXPECT_EQ(read_file(path_), "");
}

TEST_F(Lock, SharedHolderRefusesExclusive) {
  HelperOptions o;
  o.mode = LockMode::shared;
  o.command = "link-check";
  Helper h(path_, folder_, o);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  std::string busy;
  EXPECT_FALSE(try_lock(LockMode::exclusive, busy).has_value());
  EXPECT_EQ(busy, "cell busy: a link-check is using the cell");
}

TEST_F(Lock, ExclusiveHolderRefusesSharedAndKeepsItsLine) {
  Helper h(path_, folder_);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  const std::string line = read_file(path_);
  EXPECT_NE(line.find("\"pid\":" + std::to_string(h.pid())), std::string::npos) << line;
  std::string busy;
  EXPECT_FALSE(try_lock(LockMode::shared, busy, nullptr, "link-check").has_value());
  EXPECT_EQ(busy, busy_by(h.pid()));
  EXPECT_EQ(read_file(path_), line);
}

// Both ways with processes: a shared holder refuses an exclusive helper, and an exclusive one a shared
// helper.
TEST_F(Lock, SharedAndExclusiveRefuseEachOtherAcrossProcesses) {
  std::string busy;
  {
    const auto mine = try_lock(LockMode::shared, busy, nullptr, "link-check");
    ASSERT_TRUE(mine.has_value()) << busy;
    Helper other(path_, folder_);
    EXPECT_FALSE(other.acquired());
    EXPECT_EQ(other.refusal(), "cell busy: a link-check is using the cell");
  }
  {
    const auto mine = try_lock(LockMode::exclusive, busy);
    ASSERT_TRUE(mine.has_value()) << busy;
    HelperOptions o;
    o.mode = LockMode::shared;
    o.command = "link-check";
    Helper other(path_, folder_, o);
    EXPECT_FALSE(other.acquired());
    EXPECT_EQ(other.refusal(), "cell busy: session " + dir_ + "/sessions/mine, pid " +
                                   std::to_string(::getpid()) + " (run since " + kUtc + ")");
  }
}

TEST_F(Lock, ReleasedOnDestructionWhileTheHolderLivesOn) {
  Helper h(path_, folder_);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  std::string busy, stale;
  EXPECT_FALSE(try_lock(LockMode::exclusive, busy).has_value());
  ASSERT_TRUE(h.release());
  ASSERT_TRUE(h.alive_and_unreaped());
  const auto mine = try_lock(LockMode::exclusive, busy, &stale);
  ASSERT_TRUE(mine.has_value()) << busy;
  EXPECT_EQ(stale, "") << "a clean release must not look stale";
  EXPECT_NE(read_file(path_).find("\"pid\":" + std::to_string(::getpid())), std::string::npos);
}

// flock(2): two descriptions in one process exclude each other; a moved-from lock releases nothing;
// destruction of the one that holds it does.
TEST_F(Lock, MoveKeepsTheLockAndDestructionReleasesIt) {
  std::string busy;
  std::optional<FileLock> a = try_lock(LockMode::exclusive, busy);
  ASSERT_TRUE(a.has_value()) << busy;
  std::optional<FileLock> b(std::move(*a));
  a.reset();
  EXPECT_TRUE(b->held());
  EXPECT_FALSE(try_lock(LockMode::exclusive, busy).has_value());
  EXPECT_FALSE(try_lock(LockMode::shared, busy).has_value());
  b.reset();
  EXPECT_EQ(read_file(path_), "") << "an exclusive holder clears its line before it unlocks";
  const auto c = try_lock(LockMode::exclusive, busy);
  EXPECT_TRUE(c.has_value()) << busy;
}

// flock(2): a fork()ed child shares its parent's open file description. A child that destroys its copy of the
// FileLock (say, on its way out after a failed exec) must not unlock the parent's cell.
TEST_F(Lock, ForkedChildDroppingItsCopyKeepsTheParentsLock) {
  std::string busy;
  std::optional<FileLock> mine = try_lock(LockMode::exclusive, busy);
  ASSERT_TRUE(mine.has_value()) << busy;
  const std::string line = read_file(path_);
  std::fflush(nullptr);
  const pid_t child = ::fork();
  ASSERT_GE(child, 0);
  if (child == 0) {
    mine.reset();
    ::_exit(0);
  }
  int status = 0;
  ASSERT_EQ(::waitpid(child, &status, 0), child);
  EXPECT_FALSE(try_lock(LockMode::exclusive, busy).has_value()) << "the child's release unlocked the parent";
  EXPECT_EQ(read_file(path_), line) << "the child's release cleared the parent's line";
}

TEST_F(Lock, StaleLockAfterSigkillIsTakenOverAndNamed) {
  Helper h(path_, folder_);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  h.kill9(/*reap=*/false);  // still a zombie: kill(pid, 0) succeeds on it, yet it holds nothing
  std::string busy, stale;
  const auto mine = try_lock(LockMode::exclusive, busy, &stale);
  ASSERT_TRUE(mine.has_value()) << busy;
  EXPECT_EQ(stale, "a stale lock of pid " + std::to_string(h.pid()) + " (run, " + folder_ +
                       ") was taken over: that process is gone");
  EXPECT_NE(read_file(path_).find("\"pid\":" + std::to_string(::getpid())), std::string::npos);
}

TEST_F(Lock, StaleLockAfterSigkillIsReportedOnceByASharedHolder) {
  Helper h(path_, folder_);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  h.kill9(/*reap=*/true);
  std::string busy, stale;
  {
    const auto shared = try_lock(LockMode::shared, busy, &stale, "link-check");
    ASSERT_TRUE(shared.has_value()) << busy;
    EXPECT_EQ(stale, "a stale lock of pid " + std::to_string(h.pid()) + " (run, " + folder_ +
                         ") was taken over: that process is gone");
    EXPECT_EQ(read_file(path_), "");
  }
  const auto mine = try_lock(LockMode::exclusive, busy, &stale);
  ASSERT_TRUE(mine.has_value()) << busy;
  EXPECT_EQ(stale, "");
}

// O_CLOEXEC: a program the holder starts (the simulator, a browser) must not keep the cell locked after the
// holder dies.
TEST_F(Lock, ProgramStartedByTheHolderDoesNotKeepTheLock) {
  HelperOptions o;
  o.exec_grandchild = true;
  Helper h(path_, folder_, o);
  ASSERT_TRUE(h.acquired()) << h.refusal();
  ASSERT_GT(h.grandchild(), 0);
  h.kill9(/*reap=*/true);
  ASSERT_EQ(::kill(h.grandchild(), 0), 0) << "the started program should still be running";
  std::string busy, stale;
  const auto mine = try_lock(LockMode::exclusive, busy, &stale);
  EXPECT_TRUE(mine.has_value()) << busy;
  EXPECT_NE(stale, "");
}

TEST_F(Lock, HolderThatHasNotNamedItselfIsStillRefused) {
  const int fd = ::open(path_.c_str(), O_RDWR | O_CREAT | O_CLOEXEC, 0600);
  ASSERT_GE(fd, 0);
  ASSERT_EQ(::flock(fd, LOCK_EX | LOCK_NB), 0);
  std::string busy;
  EXPECT_FALSE(try_lock(LockMode::exclusive, busy).has_value());
  EXPECT_EQ(busy, "cell busy: held by another process that has not named itself (lock file " + path_ + ")");
  ::close(fd);
}

TEST_F(Lock, StaleLineThatCannotBeReadIsTakenOver) {
  write_file(path_, "{\"pid\": \"not a number\"\n");
  std::string busy, stale;
  const auto mine = try_lock(LockMode::exclusive, busy, &stale);
  ASSERT_TRUE(mine.has_value()) << busy;
  EXPECT_EQ(stale, "a stale lock file whose holder line could not be read was taken over");
}

// A stale line naming a live pid (ours: the number was reused) or another host cannot claim "gone".
TEST_F(Lock, StaleLineNamingALivePidOrAnotherHostSaysSo) {
  const std::string me = std::to_string(::getpid());
  write_file(path_, "{\"pid\":" + me + ",\"command\":\"check\",\"folder\":\"f\",\"utc\":\"u\"}\n");
  std::string busy, stale;
  {
    const auto mine = try_lock(LockMode::exclusive, busy, &stale);
    ASSERT_TRUE(mine.has_value()) << busy;
    EXPECT_EQ(stale, "a stale lock of pid " + me +
                         " (check, f) was taken over: that process no longer holds it (pid " + me +
                         " is in use again)");
  }
  write_file(
      path_,
      "{\"pid\":1,\"command\":\"run\",\"folder\":\"f\",\"utc\":\"u\",\"host\":\"elsewhere.invalid\"}\n");
  const auto mine = try_lock(LockMode::exclusive, busy, &stale);
  ASSERT_TRUE(mine.has_value()) << busy;
  EXPECT_EQ(stale,
            "a stale lock of pid 1 (run, f) was taken over: that process ran on host elsewhere.invalid and "
            "no longer "
            "holds it");
}

TEST_F(Lock, CannotLockSaysWhyRatherThanBusy) {
  std::string busy;
  EXPECT_FALSE(FileLock::try_acquire(dir_ + "/missing/cell.lock", LockMode::exclusive, holder(1, "run", "f"),
                                     "cell", busy)
                   .has_value());
  EXPECT_EQ(busy.rfind("cannot lock " + dir_ + "/missing/cell.lock: ", 0), 0u) << busy;
  // open(2) O_NOFOLLOW: a planted symbolic link is refused, not followed to its target.
  const std::string target = dir_ + "/target", link = dir_ + "/link.lock";
  write_file(target, "keep me");
  ASSERT_EQ(::symlink(target.c_str(), link.c_str()), 0);
  EXPECT_FALSE(
      FileLock::try_acquire(link, LockMode::exclusive, holder(1, "run", "f"), "cell", busy).has_value());
  EXPECT_EQ(busy.rfind("cannot lock " + link + ": ", 0), 0u) << busy;
  EXPECT_EQ(read_file(target), "keep me");
}

TEST_F(Lock, LockDirHonoursTheEnvironment) {
  const char* old = std::getenv("LOADTRIM_LOCK_DIR");
  const std::optional<std::string> saved = old ? std::optional<std::string>(old) : std::nullopt;
  const std::string wanted = dir_ + "/locks";
  ASSERT_EQ(::setenv("LOADTRIM_LOCK_DIR", wanted.c_str(), 1), 0);
  const std::string got = record::lock_dir();
  if (saved) {
    ::setenv("LOADTRIM_LOCK_DIR", saved->c_str(), 1);
  } else {
    ::unsetenv("LOADTRIM_LOCK_DIR");
  }
  EXPECT_EQ(got, wanted);
  struct stat st {};
  ASSERT_EQ(::stat(wanted.c_str(), &st), 0) << "lock_dir() creates a missing directory";
  EXPECT_TRUE(S_ISDIR(st.st_mode));
  EXPECT_EQ(st.st_mode & 0777, 0700u);
}

TEST_F(Lock, CellLockPathIsOneSafeFilePerEndpoint) {
  EXPECT_EQ(record::cell_lock_path(dir_, "tcp-127.0.0.1-7301"), dir_ + "/cell-tcp-127.0.0.1-7301.lock");
  EXPECT_EQ(record::cell_lock_path(dir_, "serial-/dev/ttyUSB0"), dir_ + "/cell-serial-%2Fdev%2FttyUSB0.lock");
  EXPECT_EQ(record::cell_lock_path(dir_, "tcp-127.0.0.1-7301"),
            record::cell_lock_path(dir_, "tcp-127.0.0.1-7301"));
  // Keys that a lossy mapping would merge stay apart.
  const std::string a = record::cell_lock_path(dir_, "tcp-a/b"), b = record::cell_lock_path(dir_, "tcp-a_b"),
                    c = record::cell_lock_path(dir_, "tcp-a%2Fb");
  EXPECT_NE(a, b);
  EXPECT_NE(a, c);
  EXPECT_NE(b, c);
  // Long keys: a valid file name (NAME_MAX 255), still one per key, and usable.
  const std::string long1(1000, 'x'), long2 = std::string(999, 'x') + "y";
  const std::string p1 = record::cell_lock_path(dir_, long1), p2 = record::cell_lock_path(dir_, long2);
  EXPECT_NE(p1, p2);
  for (const std::string& p : {a, b, c, p1, p2}) {
    EXPECT_EQ(fs::path(p).parent_path(), fs::path(dir_)) << p;
    EXPECT_LE(fs::path(p).filename().string().size(), 255u) << p;
    std::string busy;
    EXPECT_TRUE(FileLock::try_acquire(p, LockMode::exclusive, holder(::getpid(), "run", "f"), "cell", busy)
                    .has_value())
        << busy;
  }
}
