// The notifier runner (src/app/notify.cpp, docs/notify.md) with real child processes: the summary arrives
// whole on standard input, a failing notifier is named with its exit code and the first line of its standard
// error, one that overruns its time is stopped with what it started (its process group), a relative program
// is not run, and one that exits without reading is a failure rather than a hang. The rules are issue 19's
// ("a failing notifier is logged and never affects the session") and the project's "every wait has a
// deadline"; process behaviour is POSIX's (posix_spawn, process groups, SIGPIPE/EPIPE).
#include "app/notify.hpp"

#include <gtest/gtest.h>
#include <signal.h>
#include <stdlib.h>

#include <chrono>
#include <filesystem>
#include <fstream>
#include <sstream>

using namespace loadtrim;
namespace fs = std::filesystem;

namespace {

std::string temp_dir() {
  std::string dir = (fs::temp_directory_path() / "lt-notify-XXXXXX").string();
  if (!::mkdtemp(dir.data())) return "";
  return dir;
}

std::string read_file(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  std::ostringstream s;
  s << f.rdbuf();
  return s.str();
}

}  // namespace

TEST(Notify, TheSummaryArrivesWholeOnStandardInput) {
  const std::string dir = temp_dir();
  const std::string out = dir + "/got.json";
  // 200 kB: more than a pipe holds (64 KiB on Linux, pipe(7)), so the writer must go on as the reader reads.
  const std::string input(200000, 'x');
  const auto r =
      app::run_notifier({"/bin/sh", "-c", "cat > \"$0\"; echo \"$LOADTRIM_NOTIFY_EVENT\" > \"$0.env\"", out},
                        input, {"LOADTRIM_NOTIFY_EVENT=ended"}, 20.0);
  EXPECT_TRUE(r.ok) << r.message;
  EXPECT_EQ(read_file(out), input);
  EXPECT_EQ(read_file(out + ".env"), "ended\n");
  fs::remove_all(dir);
}

TEST(Notify, AFailingNotifierIsNamedWithItsCodeAndError) {
  const auto r = app::run_notifier(
      {"/bin/sh", "-c", "cat >/dev/null; echo 'mail server refused' >&2; exit 3"}, "{}\n", {}, 20.0);
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("exited 3"), std::string::npos) << r.message;
  EXPECT_NE(r.message.find("mail server refused"), std::string::npos) << r.message;
}

TEST(Notify, AnOverrunningNotifierIsStoppedWithWhatItStarted) {
  const std::string dir = temp_dir();
  const std::string pidfile = dir + "/child.pid";
  const auto t0 = std::chrono::steady_clock::now();
  // The shell starts a child that would outlive it; both are in the notifier's process group.
  const auto r =
      app::run_notifier({"/bin/sh", "-c", "sleep 30 & echo $! > \"$0\"; wait", pidfile}, "", {}, 1.0);
  const double took = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("did not finish within 1 s"), std::string::npos) << r.message;
  EXPECT_LT(took, 10.0) << "the deadline is 1 s; it must not wait for the 30 s sleep";
  const std::string pid = read_file(pidfile);
  ASSERT_FALSE(pid.empty());
  // The grandchild is gone within a few seconds: no such process (kill(pid, 0) fails with ESRCH), or a zombie
  // waiting for its new parent to reap it (state Z in /proc/PID/stat, proc(5)).
  auto dead = [](const std::string& p) {
    if (::kill(std::stoi(p), 0) != 0) return true;
    const std::string stat = read_file("/proc/" + std::to_string(std::stoi(p)) + "/stat");
    const auto close = stat.rfind(')');
    return close != std::string::npos && close + 2 < stat.size() && stat[close + 2] == 'Z';
  };
  bool gone = false;
  for (int i = 0; i < 100 && !gone; ++i) {
    gone = dead(pid);
    if (!gone) ::usleep(50000);
  }
  EXPECT_TRUE(gone) << "the notifier's own child " << pid << " still runs";
  fs::remove_all(dir);
}

TEST(Notify, ARelativeProgramIsNotRun) {
  const auto r = app::run_notifier({"notify.sh"}, "{}", {}, 5.0);
  EXPECT_FALSE(r.ok);
  EXPECT_NE(r.message.find("absolute path"), std::string::npos) << r.message;
  const auto missing = app::run_notifier({"/nonexistent/notify"}, "{}", {}, 5.0);
  EXPECT_FALSE(missing.ok);
  EXPECT_NE(missing.message.find("not run"), std::string::npos) << missing.message;
}

TEST(Notify, ANotifierThatDoesNotReadIsAFailureNotAHang) {
  const auto r = app::run_notifier({"/bin/true"}, std::string(300000, 'y'), {}, 20.0);
  EXPECT_FALSE(r.ok) << r.message;
  EXPECT_NE(r.message.find("without reading the whole summary"), std::string::npos) << r.message;
}

TEST(Notify, TheEndMessageNamesTheEvent) {
  // The README's exit codes: 0 accepted, 4 interrupted, 3 controller fault.
  EXPECT_EQ(app::end_message("session", "c", "/x/S1", "accepted", 0, {})["event"], "ended");
  EXPECT_EQ(app::end_message("session", "c", "/x/S1", "interrupted", 4, {})["event"], "interrupted");
  EXPECT_EQ(app::end_message("check", "c", "/x/C1", "controller-fault", 3, {})["event"], "fault");
  EXPECT_EQ(app::end_message("check", "c", "/x/C1", "passed", 0, {})["id"], "C1");
}
