// The fault matrix: one table of end-to-end faults against the simulated controller. For every row the tool
// exits with the documented code (README) and message, the rollers end stopped (the simulator reports zero
// speed and idle), the session folder verifies, and, where the fault was transient, `loadtrim resume`
// completes the session.
#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>
#include <thread>

#include "line/line_controller.hpp"
#include "process/child_process.hpp"
#include "record/event_log.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;
const std::string kExe = LOADTRIM_EXE;

struct Row {
  const char* name;
  std::vector<std::string> sim_args;
  int exit_code;                 // README exit codes
  const char* message;           // in the tool's stdout+stderr or the log
  bool resumable;                // transient: resume must complete the session
  std::vector<std::string> env;  // extra environment for the first run
};

void PrintTo(const Row& r, std::ostream* os) {
  *os << r.name;
}

const Row kRows[] = {
    {"link_dropped_at_connect", {"--drop-at-s", "0"}, 0, "accepted", false, {}},
    {"link_dropped_in_warm_up",
     {"--drop-in-mode", "HOLD", "--drop-after-s", "200"},
     3,
     "connection closed by the controller",
     true,
     {}},
    {"link_dropped_in_coast_down",
     {"--drop-in-mode", "ROADLOAD", "--drop-after-s", "40"},
     0,
     "link_restored",
     false,
     {}},
    {"corrupted_reply", {"--corrupt-line", "3"}, 0, "accepted", false, {}},
    {"stalled_sample_stream", {"--stall-at-s", "300"}, 3, "no sample for", false, {}},
    {"replies_slower_than_deadline",
     {"--delay-replies-ms", "1500"},
     3,
     "no reply to IDENT before the deadline",
     false,
     {}},
    {"command_refused", {"--refuse", "INERTIA"}, 3, "controller refused INERTIA (error 41)", false, {}},
    {"emergency_stop", {"--estop-at-s", "300"}, 3, "the controller reports a fault", false, {}},
    {"wrong_roller_diameter",
     {"--report-roller-diameter-m", "1.0"},
     2,
     "dyno.roller_diameter_m: the controller reports 1 m",
     false,
     {}},
    {"wrong_base_inertia",
     {"--report-base-inertia-kg", "1300"},
     2,
     "dyno.base_inertia_kg: the controller reports 1300 kg",
     false,
     {}},
    {"log_disk_unwritable", {}, 5, "record failure", true, {"LOADTRIM_TEST_FAIL_WRITES_AFTER=30"}},
};

int run_tool(const std::vector<std::string>& args, const std::vector<std::string>& env, std::string& out) {
  // The environment goes through /usr/bin/env so the child sees exactly these extra variables.
  std::vector<std::string> argv = {"/usr/bin/env"};
  argv.insert(argv.end(), env.begin(), env.end());
  argv.push_back(kExe);
  argv.insert(argv.end(), args.begin(), args.end());
  std::string o, e;
  const int rc = process::run_command(argv, &o, &e);
  out = o + e;
  return rc;
}

std::string log_text(const std::string& folder) {
  std::ifstream in(folder + "/events.jsonl");
  return std::string(std::istreambuf_iterator<char>(in), {});
}
}  // namespace

class FaultMatrix : public ::testing::TestWithParam<Row> {};

TEST_P(FaultMatrix, ExitsAsDocumentedWithTheRollersStopped) {
  const Row& row = GetParam();
  std::vector<std::string> sim_args = {"--time-scale", "200"};
  sim_args.insert(sim_args.end(), row.sim_args.begin(), row.sim_args.end());
  loadtrim::testing::SimProcess sim(sim_args);
  std::string dir = (fs::temp_directory_path() / "loadtrim-fault-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  // The shipped profile with a late first release kept (a finding): at 200x the 120 s rule after the warm-up
  // is 0.6 s of the tool's wall time, and a release late for the host's reasons (a sanitized build beside
  // other tests) must not use the unusable runs a row's fault needs. The rule itself: session_unit_test.
  const std::string profile = dir + "/profile.toml";
  std::ofstream(profile) << loadtrim::testing::profile_keeping_late_release(
      kSrc + "/config/profiles/wltp-iterative.toml");
  std::string out;
  const int rc =
      run_tool({"run", "--override-checks", "integration test against the simulator", "--cell",
                kSrc + "/config/cells/sim-tcp.toml", "--port", std::to_string(sim.port()), "--target",
                kSrc + "/samples/targets/demo-hatchback.toml", "--profile", profile, "--sessions", dir,
                "--unattended", "--rewarm-s", "120",
                // No loss map: its coasts are road load too and would take the faults meant for the
                // coast-downs (the map's coasts under faults: session_unit_test, SessionUnitCoasts).
                "--first-setting", "standard"},
               row.env, out);
  EXPECT_EQ(rc, row.exit_code) << out;
  std::string folder;
  for (const auto& e : fs::directory_iterator(dir))
    if (e.is_directory() && e.path().filename() != "history") folder = e.path().string();
  const std::string logged = folder.empty() ? "" : log_text(folder);
  EXPECT_TRUE(out.find(row.message) != std::string::npos || logged.find(row.message) != std::string::npos)
      << "expected '" << row.message << "' in:\n"
      << out;
  // The rollers end stopped: the simulator says zero speed and idle. Wait out its watchdog window first, so
  // that this check's own requests cannot keep a motoring controller alive; allow for slowed replies.
  std::this_thread::sleep_for(std::chrono::milliseconds(1500));  // > the simulator's 1 s watchdog window
  controller::Timeouts patient;
  patient.reply = std::chrono::milliseconds(4000);
  line::LineController c(line::make_tcp_transport("127.0.0.1", sim.port()), patient, {160.0});
  controller::StatusReport st;
  bool stopped = false;
  for (int i = 0; i < 20 && !stopped; ++i) {
    if (c.connect().ok() && c.status(st).ok())
      stopped = st.speed_kmh <= 0.5 && st.mode == controller::Mode::idle;  // the standstill threshold
    c.disconnect();
    if (!stopped) std::this_thread::sleep_for(std::chrono::milliseconds(100));
  }
  EXPECT_TRUE(stopped) << "speed " << st.speed_kmh << " mode " << controller::to_string(st.mode);
  // The folder verifies: nothing the operator logged was lost.
  if (!folder.empty()) {
    const auto v = record::verify_session_folder(folder);
    EXPECT_TRUE(v.ok) << v.message;
  }
  if (row.resumable) {
    ASSERT_FALSE(folder.empty());
    const int rrc = run_tool({"resume", folder, "--unattended", "--quiet", "--rewarm-s", "120",
                              "--override-checks", "integration test against the simulator"},
                             {}, out);
    EXPECT_EQ(rrc, 0) << out;
    std::vector<nlohmann::json> recs;
    EXPECT_TRUE(record::read_log(folder + "/events.jsonl", &recs).ok);
    ASSERT_GE(recs.size(), 2u);
    // A finished session's last records: "finished", then the seal (docs/records.md).
    EXPECT_EQ(recs.back().value("type", ""), "seal");
    EXPECT_EQ(recs[recs.size() - 2].value("type", ""), "finished");
    EXPECT_TRUE(recs[recs.size() - 2].value("accepted", false));
  }
  if (!HasFailure()) fs::remove_all(dir);
}

INSTANTIATE_TEST_SUITE_P(Faults, FaultMatrix, ::testing::ValuesIn(kRows),
                         [](const auto& info) { return std::string(info.param.name); });
