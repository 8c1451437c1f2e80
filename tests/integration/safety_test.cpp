// The safety envelope end to end (issue 13; docs/safety.md): a tool whose own thread stalls lets the
// controller's watchdog stop the rollers; one session per cell and one process per folder, with stale locks
// after kill -9 recognised. Against the simulated controller on loopback; the bounds are the project's own
// (common practice, no source).
#include <arpa/inet.h>
#include <gtest/gtest.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <filesystem>
#include <fstream>
#include <thread>

#include "process/child_process.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;
const std::string kExe = LOADTRIM_EXE;

std::string temp_dir() {
  std::string dir = (fs::temp_directory_path() / "loadtrim-safety-XXXXXX").string();
  if (!::mkdtemp(dir.data())) throw std::runtime_error("mkdtemp");
  return dir;
}

std::vector<std::string> run_args(unsigned port, const std::string& sessions) {
  return {kExe,
          "run",
          "--override-checks",
          "integration test against the simulator",
          "--cell",
          kSrc + "/config/cells/sim-tcp.toml",
          "--port",
          std::to_string(port),
          "--target",
          kSrc + "/samples/targets/demo-hatchback.toml",
          "--profile",
          kSrc + "/tests/data/wltp-iterative-short-warmup.toml",
          "--sessions",
          sessions,
          "--unattended"};
}

std::string only_folder(const std::string& dir) {
  std::string folder;
  for (const auto& e : fs::directory_iterator(dir))
    if (e.is_directory() && e.path().filename() != "history") folder = e.path().string();
  return folder;
}

// Waits until `dir` holds a session folder whose log names `record`.
bool wait_for_record(const std::string& dir, const std::string& record, std::chrono::seconds limit) {
  const auto end = std::chrono::steady_clock::now() + limit;
  while (std::chrono::steady_clock::now() < end) {
    if (fs::exists(dir)) {
      const std::string f = only_folder(dir);
      if (!f.empty()) {
        std::ifstream in(f + "/events.jsonl");
        const std::string text((std::istreambuf_iterator<char>(in)), {});
        if (text.find("\"type\":\"" + record + "\"") != std::string::npos) return true;
      }
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  return false;
}
}  // namespace

TEST(Safety, AStalledToolLetsTheControllersWatchdogStopTheRollers) {
  loadtrim::testing::SimProcess sim({"--time-scale", "50", "--watchdog-ms", "500"});
  const std::string dir = temp_dir();
  // The session's own thread freezes once the warm-up hold is reached (a test hook): the keep-alive may feed
  // the watchdog only within the progress grace (2 s by default), so the controller must latch its watchdog
  // fault.
  std::vector<std::string> argv = {"/usr/bin/env", "LOADTRIM_TEST_FREEZE_IN_STATE=warm_up_started"};
  const auto args = run_args(sim.port(), dir);
  argv.insert(argv.end(), args.begin(), args.end());
  process::ChildProcess tool(argv);
  const auto t0 = std::chrono::steady_clock::now();
  bool tripped = false;
  while (!tripped && std::chrono::steady_clock::now() - t0 < std::chrono::seconds(60)) {
    const auto line = sim.read_line(std::chrono::milliseconds(500));
    tripped = line && line->find("EVT FAULT kind=WATCHDOG") != std::string::npos;
  }
  const double took = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  EXPECT_TRUE(tripped) << "the simulator's watchdog never tripped while the tool was frozen";
  EXPECT_TRUE(wait_for_record(dir, "warm_up_started", std::chrono::seconds(1)))
      << "the freeze came before any motoring";
  tool.signal(SIGKILL);
  tool.wait();
  std::printf("watchdog tripped %.1f s after the tool started\n", took);
  if (!HasFailure()) fs::remove_all(dir);
}

TEST(Safety, OneSessionPerCellAndOneProcessPerFolder) {
  loadtrim::testing::SimProcess sim({"--time-scale", "20"});
  const std::string dir = temp_dir(), dir2 = temp_dir();
  process::ChildProcess first(run_args(sim.port(), dir));
  ASSERT_TRUE(wait_for_record(dir, "warm_up_started", std::chrono::seconds(30)));
  const std::string folder = only_folder(dir);
  // A second run on the same controller is refused at once, naming the session and the process that hold it.
  std::string out, err;
  auto t0 = std::chrono::steady_clock::now();
  int rc = process::run_command(run_args(sim.port(), dir2), &out, &err);
  double took = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  EXPECT_EQ(rc, 2) << err;
  EXPECT_NE(err.find("cell busy: session " + folder), std::string::npos) << err;
  EXPECT_NE(err.find("pid " + std::to_string(first.pid())), std::string::npos) << err;
  EXPECT_LT(took, 5.0) << "refused at once, not after a connection timeout";
  EXPECT_TRUE(only_folder(dir2).empty()) << "the refused run left a folder";
  // A resume of the running session's folder is refused too.
  rc = process::run_command({kExe, "resume", folder, "--unattended"}, &out, &err);
  EXPECT_EQ(rc, 2) << err;
  EXPECT_NE(err.find("folder busy"), std::string::npos) << err;
  // A link-check (moves nothing, shares the lock with other link-checks) is refused while a session holds the
  // cell.
  rc = process::run_command({kExe, "link-check", "--cell", kSrc + "/config/cells/sim-tcp.toml", "--port",
                             std::to_string(sim.port())},
                            &out, &err);
  EXPECT_EQ(rc, 2) << err;
  EXPECT_NE(err.find("cell busy"), std::string::npos) << err;
  // The same controller spelled another way in another cell file ("localhost" for 127.0.0.1) is the same
  // cell.
  {
    std::ifstream in(kSrc + "/config/cells/sim-tcp.toml");
    std::string cell((std::istreambuf_iterator<char>(in)), {});
    const auto at = cell.find("host = \"127.0.0.1\"");
    ASSERT_NE(at, std::string::npos);
    cell.replace(at, 18, "host = \"localhost\"");
    std::ofstream(dir2 + "/localhost.toml") << cell;
    auto argv = run_args(sim.port(), dir2 + "/s");
    argv[5] = dir2 + "/localhost.toml";
    rc = process::run_command(argv, &out, &err);
    EXPECT_EQ(rc, 2) << err;
    EXPECT_NE(err.find("cell busy: session " + folder), std::string::npos) << err;
  }
  // kill -9: the kernel drops the lock; the next run takes it over and says whose it was.
  first.signal(SIGKILL);
  first.wait();
  std::this_thread::sleep_for(std::chrono::milliseconds(1500));  // the simulator's watchdog stops the rollers
  process::ChildProcess next(run_args(sim.port(), dir2));
  ASSERT_TRUE(wait_for_record(dir2, "session_started", std::chrono::seconds(30)));
  {
    std::ifstream in(only_folder(dir2) + "/events.jsonl");
    const std::string text((std::istreambuf_iterator<char>(in)), {});
    EXPECT_NE(text.find("a stale lock of pid " + std::to_string(first.pid())), std::string::npos)
        << text.substr(0, 2000);
  }
  next.signal(SIGTERM);  // a controlled stop (exit 4)
  EXPECT_EQ(next.wait(), 4);
  if (!HasFailure()) {
    fs::remove_all(dir);
    fs::remove_all(dir2);
  }
}

// A closed terminal (SIGHUP) stops the session safely, as Ctrl-C does: exit 4, the interruption and the safe
// stop in the record (docs/safety.md).
TEST(Safety, HangupStopsTheSessionSafely) {
  loadtrim::testing::SimProcess sim({"--time-scale", "20"});
  const std::string dir = temp_dir();
  process::ChildProcess tool(run_args(sim.port(), dir));
  ASSERT_TRUE(wait_for_record(dir, "warm_up_started", std::chrono::seconds(30)));
  tool.signal(SIGHUP);
  const int rc = tool.wait();
  EXPECT_EQ(rc, 4);
  EXPECT_TRUE(wait_for_record(dir, "interrupted", std::chrono::seconds(1)));
  EXPECT_TRUE(wait_for_record(dir, "safe_stop", std::chrono::seconds(1)));
  if (!HasFailure()) fs::remove_all(dir);
}

// Ctrl-C while the controller accepts the connection but never answers: an interruption (exit 4), not a
// fault.
TEST(Safety, CtrlCDuringConnectIsAnInterruption) {
  const int lfd = ::socket(AF_INET, SOCK_STREAM | SOCK_CLOEXEC, 0);
  ASSERT_GE(lfd, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  ASSERT_EQ(::bind(lfd, reinterpret_cast<sockaddr*>(&a), sizeof a), 0);
  ASSERT_EQ(::listen(lfd, 8), 0);  // the kernel completes the handshake; nobody ever reads or answers
  socklen_t len = sizeof a;
  ASSERT_EQ(::getsockname(lfd, reinterpret_cast<sockaddr*>(&a), &len), 0);
  const std::string dir = temp_dir();
  process::ChildProcess tool(run_args(ntohs(a.sin_port), dir));
  ASSERT_TRUE(wait_for_record(dir, "session_started", std::chrono::seconds(30)));
  std::this_thread::sleep_for(std::chrono::milliseconds(500));
  tool.signal(SIGINT);
  const int rc = tool.wait();
  ::close(lfd);
  EXPECT_EQ(rc, 4);
  EXPECT_TRUE(wait_for_record(dir, "interrupted", std::chrono::seconds(1)));
  if (!HasFailure()) fs::remove_all(dir);
}
