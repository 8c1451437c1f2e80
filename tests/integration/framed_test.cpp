// The framed ASCII dialect end to end (docs/framed.md): the adapter against loadtrim-sim serving the same
// command table (--framed-table), a full `loadtrim run` session ending accepted, and the four dyno checks
// (`loadtrim check`) over the dialect. The simulator runs faster than real time; the cell file's poll rate is
// raised with it to 10 samples per second of controller time, the least the instruments may sample at
// (docs/standards.md §2.7, GTR 15 §3.1), so that each test stays short: 100× (1000 polls per wall second, the
// most a table allows) in the normal build; a sanitized tool cannot poll that fast, so under the sanitizer
// preset (which sets LOADTRIM_TEST_CHECKS_TIME_SCALE) 40× (400 polls per wall second).
#include <gtest/gtest.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

#include "config/cell_loader.hpp"
#include "framed/framed_controller.hpp"
#include "process/child_process.hpp"
#include "record/event_log.hpp"
#include "registry.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;
using loadtrim::process::run_command;
using loadtrim::testing::SimProcess;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;
const std::string kCell = kSrc + "/config/cells/sim-framed.toml";

std::string temp_dir(const std::string& tag) {
  std::string t = (fs::temp_directory_path() / ("loadtrim-" + tag + "-XXXXXX")).string();
  if (!::mkdtemp(t.data())) throw std::runtime_error("mkdtemp failed");
  return t;
}

// The shipped cell file with its poll rate multiplied (the simulator's clock runs `scale` times faster).
std::string cell_polling_at(const std::string& dir, double poll_hz) {
  std::ifstream in(kCell);
  std::string cell(std::istreambuf_iterator<char>(in), {});
  const std::string key = "poll_rate_hz = 50.0";
  cell.replace(cell.find(key), key.size(), "poll_rate_hz = " + std::to_string(poll_hz));
  const std::string path = dir + "/cell.toml";
  std::ofstream(path) << cell;
  return path;
}

// The simulator's time scale (see above) and the poll rate that gives 10 Hz of controller time at it.
double time_scale() {
  const char* sanitized = std::getenv("LOADTRIM_TEST_CHECKS_TIME_SCALE");
  return sanitized && *sanitized ? 40.0 : 100.0;
}
constexpr double kControllerHz = 10.0;

struct Ran {
  int rc;
  std::string out, err;
  nlohmann::json json;
};
Ran tool(std::vector<std::string> args) {
  Ran r;
  args.insert(args.begin(), LOADTRIM_EXE);
  r.rc = run_command(args, &r.out, &r.err);
  const auto nl = r.out.find('\n');
  r.json = nlohmann::json::parse(r.out.substr(0, nl), nullptr, false);
  return r;
}
}  // namespace

TEST(Framed, AdapterHandshakeReadBackAndPolling) {
  SimProcess sim({"--framed-table", kCell, "--time-scale", "10"});
  auto cell = config::load_cell(kCell, adapters::production().sections());
  adapters::production().override_link(cell, {sim.port(), ""});
  auto c = adapters::production().make_controller(cell);
  ASSERT_TRUE(c->connect().ok());
  controller::ControllerInfo info;
  const auto id = c->identify(info);
  ASSERT_TRUE(id.ok()) << id.message;
  EXPECT_NEAR(info.roller_diameter_m, 1.2192, 1e-4);
  EXPECT_TRUE(info.has("force") && info.has("free"));
  // Values that are not whole counts of the fields' units: the read-back differs by less than half a count.
  ASSERT_TRUE(c->set_inertia(1491.075).ok());
  const auto set = c->set_coefficients({42.3812, 0.313527, 0.0301349});
  ASSERT_TRUE(set.ok()) << set.message;
  core::RoadLoad back;
  ASSERT_TRUE(c->read_coefficients(back).ok());
  EXPECT_NEAR(back.f0_n, 42.38, 1e-9);
  ASSERT_TRUE(c->hold_speed(40.0).ok());
  ASSERT_TRUE(c->start_stream(50.0).ok());
  std::vector<controller::Sample> all;
  for (int i = 0; i < 400 && (all.empty() || all.back().speed_kmh < 39.0); ++i) {
    std::vector<controller::Sample> got;
    const auto r = c->receive_samples(got);
    ASSERT_TRUE(r.ok()) << r.message;
    all.insert(all.end(), got.begin(), got.end());
  }
  ASSERT_FALSE(all.empty());
  EXPECT_GE(all.back().speed_kmh, 39.0);
  EXPECT_EQ(all.back().mode, controller::Mode::speed_hold);
  // A refusal comes back as the status digit's meaning.
  const auto refused = c->clear_fault();
  EXPECT_FALSE(refused.ok());
  EXPECT_NE(refused.message.find("status 4"), std::string::npos) << refused.message;
  ASSERT_TRUE(c->controlled_stop().ok());
  c->disconnect();
}

TEST(Framed, FullSessionEndsAccepted) {
  const std::string dir = temp_dir("framed-session");
  const double scale = time_scale();
  SimProcess sim({"--framed-table", kCell, "--time-scale", std::to_string(scale)});
  const std::string cell = cell_polling_at(dir, kControllerHz * scale);
  const Ran r =
      tool({"run", "--override-checks", "integration test against the simulator", "--cell", cell, "--port",
            std::to_string(sim.port()), "--target", kSrc + "/samples/targets/demo-hatchback.toml",
            "--profile", kSrc + "/tests/data/wltp-fixed-run-short-warmup.toml", "--sessions", dir,
            "--unattended", "--quiet", "--rewarm-s", "60"});
  EXPECT_EQ(r.rc, 0) << r.out << r.err;
  std::string folder;
  for (const auto& e : fs::directory_iterator(dir))
    if (e.is_directory() && e.path().filename() != "history") folder = e.path().string();
  ASSERT_FALSE(folder.empty());
  const auto v = record::verify_session_folder(folder);
  EXPECT_TRUE(v.ok) << v.message;
  std::ifstream in(folder + "/summary.json");
  const auto j = nlohmann::json::parse(in);
  EXPECT_TRUE(j.value("accepted", false)) << j.dump(2);
  for (const auto& d : j["deviations"]) EXPECT_LE(std::abs(d.value("deviation_n", 99.0)), 10.0);
  if (!HasFailure()) fs::remove_all(dir);
}

// The four checks, each a `loadtrim check` process against a simulator of its own cell: the parasitic check
// (the longest: a free coast of the empty rollers from 130 km/h) runs beside the other three, which run one
// after the other. Each simulator has its own port (so its own cell lock) and its own check folder (so its
// own check history); the coast-down checks need no stored parasitic curve. All processes are started from
// this thread (a fork from a second thread could hand one child's pipe to another).
TEST(Framed, TheFourDynoChecksPass) {
  const std::string dir = temp_dir("framed-checks");
  const double scale = time_scale();
  const std::vector<std::string> sim_args = {
      "--framed-table", kCell, "--empty-rollers", "--time-scale", std::to_string(scale),
      "--watchdog-ms",  "1000"};
  SimProcess sim_a(sim_args), sim_b(sim_args);
  const std::string cell = cell_polling_at(dir, kControllerHz * scale);
  // The inertia check accelerates the rollers under a set force until the tool turns it: its own simulator at
  // a fifth of the scale (20x, 8x sanitized), as tests/integration/checks_test.cpp's accel_scale() explains.
  // At 100x, on a host loaded by a build beside the suite, the check was refused a speed hold for a latched
  // fault after its fourth force step (observed, not traced further; at 3 mph/s, the top rate of
  // config/checks/cfr1066.toml, from the 69.2 km/h turn-round checks_test names to the over-speed trip (the
  // cell's 160 km/h and the 2 km/h margin) is 19.2 s of controller time: 0.19 s of the tool's wall time at
  // 100x, 0.96 s at 20x; 1 mph = 1.609344 km/h, NIST SP 811).
  const double accel_scale = scale / 5.0;
  const std::vector<std::string> accel_sim_args = {
      "--framed-table", kCell, "--empty-rollers", "--time-scale", std::to_string(accel_scale),
      "--watchdog-ms",  "1000"};
  SimProcess sim_c(accel_sim_args);
  fs::create_directories(dir + "/c");
  const std::string accel_cell = cell_polling_at(dir + "/c", kControllerHz * accel_scale);
  auto args = [](const std::string& kind, const SimProcess& sim, const std::string& checks,
                 const std::string& cell_file) {
    return std::vector<std::string>{
        "check",    kind,   "--cell",       cell_file, "--port", std::to_string(sim.port()),
        "--checks", checks, "--unattended", "--json"};
  };
  std::vector<std::string> parasitic_argv = args("parasitic", sim_a, dir + "/a", cell);
  parasitic_argv.insert(parasitic_argv.begin(), LOADTRIM_EXE);
  process::ChildProcess parasitic(parasitic_argv);
  std::vector<std::pair<std::string, Ran>> ran;
  for (const std::string kind : {"coastdown", "readiness"})
    ran.emplace_back(kind, tool(args(kind, sim_b, dir + "/b", cell)));
  // With the tests' short check profile (one set per rate pair, as checks_test's inertia rows; the verdict
  // says it is fewer than the text's): the full counts are checked on the physics model in dyno_checks_test.
  std::vector<std::string> inertia_argv = args("inertia", sim_c, dir + "/c", accel_cell);
  inertia_argv.insert(inertia_argv.end(), {"--profile", kSrc + "/tests/data/checks-short.toml"});
  ran.emplace_back("inertia", tool(inertia_argv));
  Ran p;
  p.out = parasitic.read_line(std::chrono::seconds(300)).value_or("");
  p.rc = parasitic.wait();
  p.json = nlohmann::json::parse(p.out, nullptr, false);
  ran.emplace_back("parasitic", p);
  for (const auto& [kind, r] : ran) {
    EXPECT_EQ(r.rc, 0) << kind << ": " << r.out << r.err;
    ASSERT_TRUE(r.json.is_object()) << kind << ": " << r.out << r.err;
    EXPECT_EQ(r.json.value("check", ""), kind);
    EXPECT_EQ(r.json.value("end", ""), "passed") << kind << ": " << r.json.value("verdict", "");
    const auto v = record::verify_session_folder(r.json.value("folder", ""));
    EXPECT_TRUE(v.ok) << kind << ": " << v.message;
  }
  if (!HasFailure()) fs::remove_all(dir);
}
