// The framed ASCII dialect end to end (docs/framed.md): the adapter against loadtrim-sim serving the same
// command table (--framed-table), a full `loadtrim run` session ending accepted, and the four dyno checks
// (`loadtrim check`) over the dialect. The simulator runs faster than real time; the cell file's poll rate is
// raised with it so that the controller-time sample rate stays that of the shipped cell file.
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
  SimProcess sim({"--framed-table", kCell, "--time-scale", "20"});
  const std::string cell = cell_polling_at(dir, 400.0);  // 20 Hz of controller time at 20x
  const Ran r =
      tool({"run", "--override-checks", "integration test against the simulator", "--cell", cell, "--port",
            std::to_string(sim.port()), "--target", kSrc + "/samples/targets/demo-hatchback.toml",
            "--profile", kSrc + "/tests/data/wltp-iterative-short-warmup.toml", "--sessions", dir,
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

TEST(Framed, TheFourDynoChecksPass) {
  const std::string dir = temp_dir("framed-checks");
  // A sanitized tool cannot poll at 1 kHz: the sanitizer preset (which lowers
  // LOADTRIM_TEST_CHECKS_TIME_SCALE) runs the simulator slower, with the same controller-time sample rate.
  const char* slow = std::getenv("LOADTRIM_TEST_CHECKS_TIME_SCALE");
  const double scale = slow && *slow ? 20.0 : 50.0;
  SimProcess sim({"--framed-table", kCell, "--empty-rollers", "--time-scale", std::to_string(scale),
                  "--watchdog-ms", "1000"});
  const std::string cell = cell_polling_at(dir, 20.0 * scale);  // 20 Hz of controller time
  for (const std::string kind : {"parasitic", "coastdown", "readiness", "inertia"}) {
    const Ran r = tool({"check", kind, "--cell", cell, "--port", std::to_string(sim.port()), "--checks", dir,
                        "--unattended", "--json"});
    EXPECT_EQ(r.rc, 0) << kind << ": " << r.out << r.err;
    ASSERT_TRUE(r.json.is_object()) << r.out << r.err;
    EXPECT_EQ(r.json.value("end", ""), "passed") << kind << ": " << r.json.value("verdict", "");
    const auto v = record::verify_session_folder(r.json.value("folder", ""));
    EXPECT_TRUE(v.ok) << kind << ": " << v.message;
  }
  if (!HasFailure()) fs::remove_all(dir);
}
