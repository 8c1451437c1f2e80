// Cell and folder locks: one session per cell, one process per session folder (issue 13).
//
// Contract
// - Advisory locks with flock(2) on a lock file that is opened O_CLOEXEC | O_NOFOLLOW and never unlinked
//   (unlinking a lock file lets two processes hold "the same" lock on two different inodes). A released lock
//   leaves an empty file behind; that is its normal state.
// - Tries once and never waits: LOCK_NB, no retry loop, no sleep. A refusal comes back at once, with a
//   sentence for the operator naming the holder.
// - flock locks belong to the open file description, not to the process or the thread:
//     * two FileLocks on the same path in one process exclude each other like two processes do;
//     * a child made by fork() shares the parent's description (and so its lock) until it exits or execs;
//       O_CLOEXEC keeps the lock out of exec'd programs (the simulator, a browser for the PDF);
//     * the lock ends when the FileLock is destroyed or released, or when the process dies, however it dies
//       (kill -9 included): the kernel drops it with the last descriptor.
// - Local file systems only. flock over NFS is either not supported or emulated with byte-range locks that
//   behave differently; keep lock_dir() on a local file system (tmpfs under /run/lock is the default).
// - What the file says (one JSON line, written by exclusive holders only):
//     {"pid":N,"command":"run","folder":"...","utc":"...","host":"..."}
//   Shared holders (a link-check that moves nothing) write nothing: there may be several of them and none may
//   overwrite an exclusive holder's line. A process refused because only shared holders are present is told
//   "<what> busy: a link-check is using the <what>"; one refused by an exclusive holder is told who it is.
//   An exclusive holder clears the file before it unlocks, so a non-empty file found by a process that has
//   just obtained the lock can only have been left by a holder that died: that is a stale lock, reported
//   through `took_over_stale` and cleared (by exclusive and shared acquirers alike).
// - Never throws from try_acquire, the destructor, release() or the move operations. lock_dir() throws
//   std::runtime_error only when the per-user fallback directory cannot be made or is unsafe (see there).
#pragma once

#include <sys/types.h>

#include <optional>
#include <string>

namespace loadtrim::record {

// Who holds a lock, as written into the lock file by an exclusive holder.
struct LockHolder {
  long pid = 0;
  std::string command;  // "run", "resume", "check", "link-check", "approve"
  std::string folder;   // the session (or check) folder the holder writes
  std::string utc;      // when it took the lock, record::utc_now() form
  std::string host;     // gethostname(); informational (locks are local, see above)
};

// run/resume/check take the cell exclusively; a link-check that moves nothing takes it shared.
enum class LockMode { exclusive, shared };

// One held lock. Movable, not copyable; released on destruction.
class FileLock {
 public:
  // Opens (creating it if needed) the lock file at `path` and tries once to lock it in `mode`.
  // On success: in exclusive mode, writes `me` into the file as one JSON line; returns the lock. If the file
  //   named a holder that is no longer holding it, *took_over_stale (when given) is set to
  //   "a stale lock of pid N (<command>, <folder>) was taken over: that process is gone" (or a variant naming
  //   why the pid could not be confirmed gone: alive again under another process, or on another host), for
  //   the caller's log; otherwise it is cleared.
  // On refusal: returns nullopt; `busy` is one sentence for the operator, `what` being "cell" or "folder":
  //   "<what> busy: session <folder>, pid <N> (<command> since <utc>)"   an exclusive holder
  //   "<what> busy: a link-check is using the <what>"                    shared holders only
  //   "<what> busy: held by another process that has not named itself (lock file <path>)"
  //                                                                      its line is unwritten or unreadable
  //   "cannot lock <path>: <reason>"                                    the file cannot be opened, locked or
  //                                                                      written (not a busy cell)
  //   A stale line that cannot be parsed is still taken over; *took_over_stale then says so without a pid.
  // Never blocks, never throws (allocation failure aside).
  static std::optional<FileLock> try_acquire(const std::string& path, LockMode mode, const LockHolder& me,
                                             const std::string& what, std::string& busy,
                                             std::string* took_over_stale = nullptr);

  FileLock(FileLock&& other) noexcept;
  FileLock& operator=(FileLock&& other) noexcept;  // releases what this held first
  FileLock(const FileLock&) = delete;
  FileLock& operator=(const FileLock&) = delete;
  ~FileLock();  // release(); never throws

  // Releases now (idempotent). An exclusive holder clears the file first. Only the process that took the lock
  // clears and unlocks: in a fork()ed child that never exec'd, release() just closes its copy of the
  // descriptor, so a child leaving early does not drop its parent's lock.
  void release() noexcept;

  bool held() const noexcept { return fd_ >= 0; }
  LockMode mode() const noexcept { return mode_; }
  const std::string& path() const noexcept { return path_; }

 private:
  FileLock(int fd, std::string path, LockMode mode) noexcept;

  int fd_ = -1;
  std::string path_;
  LockMode mode_ = LockMode::exclusive;
  pid_t owner_pid_ = 0;
};

// Where cell locks live: $LOADTRIM_LOCK_DIR if set and not empty (created with mode 0700 if missing; returned
// as given either way, a failure shows up when a lock is tried); else /run/lock/loadtrim if it exists or can
// be created and is writable (created with mode 1777, like /tmp, so that operators under different accounts
// exclude each other on one cell; lock files in it are made 0666 for the same reason); else
// /tmp/loadtrim-locks-<uid>, created with mode 0700. Throws std::runtime_error if that fallback cannot be
// created, or exists but is not a directory owned by this user with mode 0700 (another account could
// otherwise plant or remove locks). A system-wide directory that exists but is not writable by this account
// (made by another one without mode 1777) silently sends this account to its own fallback, where it no longer
// excludes the others: make /run/lock/loadtrim mode 1777, or set LOADTRIM_LOCK_DIR for every operator.
std::string lock_dir();

// The lock file for one controller endpoint: <dir>/cell-<key>.lock, the key percent-encoded (bytes other than
// letters, digits, '-', '_', '.' become %XX), so distinct keys never share a file and no key makes a
// subdirectory ("serial-/dev/ttyUSB0" -> "cell-serial-%2Fdev%2FttyUSB0.lock"). Keys too long for a file name
// are shortened to a prefix plus their SHA-256. Pass a canonical key (two cells files naming the same
// controller must produce the same key, e.g. "tcp-127.0.0.1-7301"): the lock is only as good as that.
std::string cell_lock_path(const std::string& dir, const std::string& endpoint_key);

}  // namespace loadtrim::record
