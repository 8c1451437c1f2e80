// End-to-end setting sessions against the simulated controller process over TCP: a fleet of real EPA targets
// with randomised truths under both methods, kill -9 and resume, a dropped link, interruption, tampering, and
// bad input refused before anything moves.
#include "session/session.hpp"

#include <gtest/gtest.h>
#include <signal.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <random>
#include <thread>

#include "config/cell_loader.hpp"
#include "config/epa_csv.hpp"
#include "config/loaders.hpp"
#include "config/target_writer.hpp"
#include "line/line_controller.hpp"
#include "physics/truth_generator.hpp"
#include "process/child_process.hpp"
#include "record/event_log.hpp"
#include "registry.hpp"
#include "session/record_writer.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;
using loadtrim::process::ChildProcess;
using loadtrim::process::run_command;
using loadtrim::testing::SimProcess;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;
const std::string kExe = LOADTRIM_EXE;

std::string temp_dir(const std::string& tag) {
  std::string t = (fs::temp_directory_path() / ("loadtrim-" + tag + "-XXXXXX")).string();
  if (!::mkdtemp(t.data())) throw std::runtime_error("mkdtemp failed");
  return t;
}

void write(const std::string& path, const std::string& text) {
  std::ofstream(path) << text;
}

std::string cell_text(unsigned port, const std::string& axles, double rate_hz, int reconnect_delay_ms = 500,
                      const std::string& run_up = "vehicle") {
  return "name = \"test cell (invented)\"\n[controller]\nadapter = \"line-tcp\"\nhost = \"127.0.0.1\"\nport "
         "= " +
         std::to_string(port) + "\nsample_rate_hz = " + std::to_string(rate_hz) +
         "\nmax_time_scale = 10000.0" +
         "\n[timeouts]\nconnect_ms = 3000\nreply_ms = 1000\nsample_gap_ms = 1000\nheartbeat_interval_ms = "
         "100\n"
         "[reconnect]\nattempts = 3\ndelay_ms = " +
         std::to_string(reconnect_delay_ms) +
         // Motoring time is controller time: at 1000x a loaded host stretches it (a fixed-run fleet session
         // of about 3 s of wall time alone reached 7200 s in a loaded ctest -j4 here), so these cells allow
         // 10 h; the planned motoring time against the limit is tested in policy_test.
         "\n[limits]\nmax_speed_kmh = 160.0\nmax_force_n = 8000.0\nmax_motoring_s = 36000.0\n"
         "[dyno]\nroller_diameter_m = 1.2192\nbase_inertia_kg = 1250.0\naxles = \"" +
         axles + "\"\nrun_up = \"" + run_up + "\"\n";
}

std::vector<nlohmann::json> records(const std::string& folder) {
  std::vector<nlohmann::json> r;
  const auto v = record::read_log(folder + "/events.jsonl", &r);
  EXPECT_TRUE(v.ok) << v.message;
  return r;
}

int count(const std::vector<nlohmann::json>& rs, const std::string& type) {
  int n = 0;
  for (const auto& r : rs) n += r.value("type", "") == type;
  return n;
}

// The i-th plausible EPA row in a seeded shuffle, the same for both methods.
config::EpaRow epa_row(int i) {
  static const config::EpaFile f =
      config::read_epa_csv(kSrc + "/samples/data/epa_test_car_roadload_MY2016_2019.csv");
  static std::vector<std::size_t> order = [] {
    std::vector<std::size_t> o(f.rows.size());
    std::iota(o.begin(), o.end(), 0);
    std::mt19937_64 rng(7);
    std::shuffle(o.begin(), o.end(), rng);
    std::vector<std::size_t> keep;
    for (auto k : o)
      if (!core::has_errors(core::plausibility(config::target_from_epa(f.rows[k], "p")))) keep.push_back(k);
    return keep;
  }();
  return f.rows[order.at(static_cast<std::size_t>(i))];
}
}  // namespace

class FleetOverTcp : public ::testing::TestWithParam<std::tuple<std::string, int>> {};

TEST_P(FleetOverTcp, ReachesAcceptanceWithinTolerance) {
  const auto [profile_name, i] = GetParam();
  // LOADTRIM_TEST_FLEET_VEHICLES limits the fleet for slow builds (the sanitizer pass runs the first 8 per
  // method: the same code paths; convergence over all 20 is the normal build's job).
  if (const char* nv = std::getenv("LOADTRIM_TEST_FLEET_VEHICLES"); nv && i >= std::atoi(nv))
    GTEST_SKIP() << "vehicle " << i << " beyond LOADTRIM_TEST_FLEET_VEHICLES=" << nv;
  const core::Profile profile = config::load_profile(kSrc + "/config/profiles/" + profile_name + ".toml");
  const config::EpaRow row = epa_row(i);
  core::VehicleTarget v = config::target_from_epa(row, profile.name);
  const auto layout =
      v.drive == core::Drive::all ? core::AxleLayout::two_axle : core::AxleLayout::single_axle;
  std::mt19937_64 rng(1000 + static_cast<unsigned>(i));
  physics::Truth truth = physics::random_truth(
      v.test_mass_kg, core::resolved_rotating_mass_kg(v, profile.mass), layout, {}, rng);
  const std::string dir = temp_dir("fleet");
  write(dir + "/truth.toml", config::truth_toml(truth, "randomised test truth"));
  // LOADTRIM_TEST_FLEET_TIME_SCALE lowers the simulator's speed for slow builds (the sanitizer preset), where
  // the tool would otherwise fall behind a 1000x controller.
  const char* scale = std::getenv("LOADTRIM_TEST_FLEET_TIME_SCALE");
  SimProcess sim({"--truth", dir + "/truth.toml", "--time-scale", scale ? scale : "1000"});
  session::Inputs in =
      session::plan_inputs(config::parse_cell(cell_text(sim.port(), core::to_string(layout), 20.0),
                                              "cell.toml", adapters::production().sections()),
                           profile, v);
  // At 1000x, 0.12 s of the tool's wall time is 120 s of controller time: on a loaded host the first release
  // can miss the 120 s rule for reasons of the host alone. This test is about convergence, so a late release
  // is kept with a finding (the rule itself is tested in SessionUnit at controller speed).
  in.profile.late_start = core::Profile::LateStart::finding;
  auto c = adapters::make_controller(in.cell);
  const std::string folder = dir + "/session";
  fs::create_directories(folder);
  session::RecordWriter writer(folder);
  session::Options opt;  // default first setting: the warm-up loss map
  session::Session s(in, opt, *c, {&writer});
  const session::Summary sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << row.id << ": " << sum.stop_reason;
  // The honest simulator's encoder reads noise at rest (0.05 km/h σ, in samples and status alike): the safe
  // stop must still confirm standstill by the cell's threshold (docs/safety.md §3), never by an exact zero.
  EXPECT_TRUE(sum.rollers_stopped) << row.id << ": " << sum.stop_note;
  // The final measured forces within the tolerance (GTR 15 §8.1.3.4.2: ±10 N) at every reference speed.
  ASSERT_EQ(sum.deviations.size(), in.profile.reference_speeds_kmh.size());
  for (const auto& d : sum.deviations)
    EXPECT_LE(std::abs(d.deviation_n), profile.tolerance_n) << row.id << " at " << d.speed_kmh;
  EXPECT_TRUE(record::verify_session_folder(folder).ok);
  if (HasFailure())
    std::cerr << "session folder kept for inspection: " << folder << "\n";
  else
    fs::remove_all(dir);
}

INSTANTIATE_TEST_SUITE_P(EpaVehicles, FleetOverTcp,
                         ::testing::Combine(::testing::Values("wltp-iterative", "wltp-fixed-run"),
                                            ::testing::Range(0, 20)),
                         [](const auto& info) {
                           std::string n =
                               std::get<0>(info.param) + "_" + std::to_string(std::get<1>(info.param));
                           for (char& ch : n)
                             if (ch == '-') ch = '_';
                           return n;
                         });

// --- Who accelerates the vehicle (docs/session.md "Who accelerates the vehicle: the run-up") ---

namespace {
struct VehicleRun {
  int rc = -1;
  std::string out, err;
  std::vector<nlohmann::json> rs;
};
// One `run` of the demo vehicle with the short-warm-up iterative profile against a simulator started with
// `sim_args` (at 1000x, 20 Hz samples: a few seconds of wall time). LOADTRIM_TEST_VEHICLE_TIME_SCALE lowers
// the simulator's speed for slow builds (the sanitizer preset: 200).
// At 1000x, 0.12 s of the tool's wall time is 120 s of controller time: in a CI sanitizer pass every first
// release of five sessions missed the 120 s rule after the warm-up (CI of 2026-12-04; on an idle 2-core host
// the sanitized tool's gap was 33 s of controller time, 30.5 s of it the driver's run-up: the rest was the
// load). These tests are about the run-up, so the profile keeps a late first release with a finding
// (timing.late_start = "finding": the test profile in tests/data does so itself now, and the helper keeps it
// as it is); the rule itself is tested on the fake controller's clock in SessionUnit.
VehicleRun vehicle_session(std::vector<std::string> sim_args, const std::string& name) {
  const char* scale = std::getenv("LOADTRIM_TEST_VEHICLE_TIME_SCALE");
  sim_args.insert(sim_args.end(), {"--time-scale", scale && *scale ? scale : "1000"});
  SimProcess sim(sim_args);
  const std::string dir = temp_dir(name);
  write(dir + "/cell.toml", cell_text(sim.port(), "single-axle", 20.0));
  write(dir + "/profile.toml", loadtrim::testing::profile_keeping_late_release(
                                   kSrc + "/tests/data/wltp-iterative-short-warmup.toml"));
  VehicleRun v;
  v.rc = run_command(
      {kExe, "run", "--override-checks", "integration test against the simulator", "--cell",
       dir + "/cell.toml", "--target", kSrc + "/samples/targets/demo-hatchback.toml", "--profile",
       dir + "/profile.toml", "--sessions", dir, "--unattended", "--quiet", "--first-setting", "standard"},
      &v.out, &v.err);
  for (const auto& e : fs::directory_iterator(dir))
    if (e.is_directory() && e.path().filename() != "history") v.rs = records(e.path().string());
  fs::remove_all(dir);
  return v;
}
std::vector<nlohmann::json> of_type(const std::vector<nlohmann::json>& rs, const std::string& type) {
  std::vector<nlohmann::json> out;
  for (const auto& r : rs)
    if (r.value("type", "") == type) out.push_back(r);
  return out;
}
}  // namespace

TEST(SessionCli, IterativeOnADynoMotoredCellIsRefused) {
  // GTR 15 Annex 4 §8.1.3.4 (text): when the dyno accelerates the vehicle only the fixed-run method may be
  // used. Refused before anything connects (nothing listens on the port): exit 2, naming the key and the
  // fixed-run method.
  const std::string dir = temp_dir("dyno-runup");
  write(dir + "/cell.toml", cell_text(1, "single-axle", 20.0, 500, "dyno"));
  std::string out, err;
  const int rc = run_command(
      {kExe, "run", "--override-checks", "integration test", "--cell", dir + "/cell.toml", "--target",
       kSrc + "/samples/targets/demo-hatchback.toml", "--sessions", dir, "--unattended", "--quiet"},
      &out, &err);
  EXPECT_EQ(rc, 2) << out << err;
  EXPECT_NE(err.find("dyno.run_up"), std::string::npos) << err;
  EXPECT_NE(err.find("fixed-run"), std::string::npos) << err;
  fs::remove_all(dir);
}

TEST(SessionCli, VehicleRunUpReachesAcceptanceForSeveralDriverSeeds) {
  for (const char* seed : {"3", "17", "42"}) {
    const VehicleRun v = vehicle_session({"--driver-seed", seed}, std::string("driver-") + seed);
    EXPECT_EQ(v.rc, 0) << "seed " << seed << "\n" << v.out << v.err;
    const auto prompts = of_type(v.rs, "driver_prompt");
    const auto checks = of_type(v.rs, "run_up_checked");
    // Two consecutive passes at least (GTR 15 §8.1.3.4.2): each run prompted to accelerate and to shift to
    // neutral, the release found by the controller's neutral signal, above the start speed.
    ASSERT_GE(checks.size(), 2u) << "seed " << seed;
    int accelerate = 0, neutral = 0;
    for (const auto& p : prompts) {
      accelerate += p.value("prompt", "") == "accelerate";
      neutral += p.value("prompt", "") == "neutral";
    }
    EXPECT_EQ(accelerate, static_cast<int>(checks.size()));
    EXPECT_EQ(neutral, static_cast<int>(checks.size()));
    for (const auto& c : checks) {
      EXPECT_EQ(c.value("ending", ""), "coasted") << c.dump();
      EXPECT_EQ(c.value("detected_by", ""), "neutral signal");
      EXPECT_GE(c.value("release_speed_kmh", 0.0), c.value("start_speed_kmh", 1e9) - 0.5) << c.dump();
      // The demo truth's driver has the default 60 kW (an assumption): well above 6 m²/s³ (GTR 15 Annex 4
      // §8.1.3.4).
      EXPECT_TRUE(c.value("meets", false)) << c.dump();
    }
    EXPECT_EQ(of_type(v.rs, "run_up").at(0).value("run_up", ""), "vehicle");
    // The 120 s rule after the warm-up (EU SA4 §8.1.2-8.1.3, docs/standards.md §3.6) is judged once, on the
    // first release, with a finite gap; missed, it is kept with a finding (the profile's policy here), never
    // silently.
    int judged = 0;
    for (const auto& t : of_type(v.rs, "timing")) {
      if (!t.contains("within")) continue;
      ++judged;
      const double gap = t.value("gap_s", -1.0);
      EXPECT_TRUE(std::isfinite(gap) && gap >= 0.0) << t.dump();
      if (!t.value("within", true)) {
        const auto fin = of_type(v.rs, "finished");
        ASSERT_EQ(fin.size(), 1u);
        EXPECT_NE(fin[0].at("findings").dump().find("beyond the 120 s rule"), std::string::npos)
            << fin[0].dump();
      }
    }
    EXPECT_EQ(judged, 1) << "seed " << seed;
    // The first run-up starts from the warm-up speed, in controller time (the host's load barely moves it):
    // one longer than the rule's 120 s could never meet the rule.
    EXPECT_LT(checks.front().value("run_up_s", 1e9), 120.0) << checks.front().dump();
  }
}

TEST(SessionCli, VehicleRunUpReleaseFoundFromTheTraceWhenTheNeutralSignalIsHidden) {
  const VehicleRun v = vehicle_session({"--hide-neutral"}, "hidden-neutral");
  EXPECT_EQ(v.rc, 0) << v.out << v.err;
  const auto checks = of_type(v.rs, "run_up_checked");
  ASSERT_GE(checks.size(), 2u);
  for (const auto& c : checks) {
    EXPECT_EQ(c.value("ending", ""), "coasted") << c.dump();
    EXPECT_EQ(c.value("detected_by", ""), "speed trace");
    // The release placed at the held speed: the driver holds 0.5-1.5 km/h above the start speed
    // (an assumption of the simulated driver); within the trace detector's band of it.
    EXPECT_GE(c.value("release_speed_kmh", 0.0), c.value("start_speed_kmh", 1e9) - 0.5) << c.dump();
  }
}

TEST(SessionCli, VehicleRunUpTooSlowIsNamed) {
  // 1000 N and 40 kW at most against about the demo hatchback's road load (142 N + 0.35·v + 0.033·v², plus
  // a few per cent): the mean a·v from 12 to 142 km/h is about 5.7 m²/s³ in about 135 s (a 10 ms Euler
  // integration of m·dv/dt = min(F, P/v) − F_rl(v), m = 1530 kg, done beside this test), below the 6 m²/s³
  // of GTR 15 Annex 4 §8.1.3.4 and within the 600 s run-up deadline.
  const VehicleRun v =
      vehicle_session({"--driver-max-force-n", "1000", "--driver-max-power-w", "40000"}, "slow-driver");
  const auto checks = of_type(v.rs, "run_up_checked");
  ASSERT_GE(checks.size(), 1u) << v.out << v.err;
  bool named = false;
  for (const auto& c : checks)
    if (!c.value("meets", true)) {
      EXPECT_EQ(c.value("ending", ""), "coasted") << c.dump();
      EXPECT_LT(c.value("mean_av_m2ps3", 99.0), 6.0) << c.dump();
      named = named || c.value("why", "").find("too slow run-up") != std::string::npos;
    }
  EXPECT_TRUE(named);
}

TEST(SessionCli, VehicleRunUpEarlyReleaseIsDiscardedAndRepeated) {
  // Every run-up released 8 km/h below the start speed: each run discarded and repeated until the profile's
  // limit of unusable runs ends the session, not accepted (exit 1).
  const VehicleRun v = vehicle_session({"--driver-early-release", "1"}, "early-driver");
  EXPECT_EQ(v.rc, 1) << v.out << v.err;
  const auto discarded = of_type(v.rs, "coastdown_discarded");
  ASSERT_GE(discarded.size(), 2u);
  for (const auto& d : discarded)
    EXPECT_NE(d.value("why", "").find("below the start speed"), std::string::npos) << d.dump();
  EXPECT_EQ(count(v.rs, "coastdown_started"), static_cast<int>(discarded.size()));
  EXPECT_EQ(count(v.rs, "coastdown"), 0);
  for (const auto& c : of_type(v.rs, "run_up_checked")) EXPECT_EQ(c.value("ending", ""), "early_release");
}

TEST(SessionCli, KillNineMidCoastdownThenResume) {
  SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir("resume");
  // The shipped profile with a late first release kept (a finding): at 200x a late release is the host's.
  write(dir + "/profile.toml",
        loadtrim::testing::profile_keeping_late_release(kSrc + "/config/profiles/wltp-iterative.toml"));
  std::string folder;
  {
    ChildProcess run({kExe, "run", "--override-checks", "integration test against the simulator", "--cell",
                      kSrc + "/config/cells/sim-tcp.toml", "--port", std::to_string(sim.port()), "--target",
                      kSrc + "/samples/targets/demo-hatchback.toml", "--profile", dir + "/profile.toml",
                      "--sessions", dir, "--unattended", "--json", "--first-setting", "standard"});
    bool first_done = false;
    for (;;) {
      auto line = run.read_line(std::chrono::seconds(60));
      ASSERT_TRUE(line) << "the session ended or stalled before its second coast-down";
      const auto j = nlohmann::json::parse(*line, nullptr, false);
      if (!j.is_object()) continue;
      if (j.value("type", "") == "session_folder") folder = j.value("path", "");
      if (j.value("type", "") == "coastdown") first_done = true;
      if (first_done && j.value("type", "") == "state" && j.value("to", "") == "coast_down") break;
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(300));  // some way into coast-down 2
    run.signal(SIGKILL);
    EXPECT_EQ(run.wait(), 128 + SIGKILL);
  }
  ASSERT_FALSE(folder.empty());
  const auto before = records(folder);
  ASSERT_EQ(count(before, "coastdown"), 1);
  // A run discarded before the kill (a stalled stream on a loaded host is repeated, docs/session.md) shifts
  // the run numbers by one each.
  const int late = count(before, "coastdown_discarded");
  ASSERT_EQ(count(before, "coastdown_started"), 2 + late);
  std::string out, err;
  const int rc = run_command({kExe, "resume", folder, "--unattended", "--rewarm-s", "300", "--quiet",
                              "--override-checks", "integration test against the simulator"},
                             &out, &err);
  EXPECT_EQ(rc, 0) << out << err;
  const auto after = records(folder);
  // Nothing before the kill was lost or changed: the old records are a prefix of the new log, chain intact.
  ASSERT_GT(after.size(), before.size());
  for (std::size_t k = 0; k < before.size(); ++k) EXPECT_EQ(after[k], before[k]) << k;
  bool said = false;
  for (const auto& r : after)
    if (r.value("type", "") == "resumed") {
      EXPECT_EQ(r.value("discarded_run", 0), 2 + late);
      EXPECT_EQ(r.value("completed_coastdowns", 0), 1);
      said = true;
    }
  EXPECT_TRUE(said);
  std::vector<int> runs;
  for (const auto& r : after)
    if (r.value("type", "") == "coastdown") runs.push_back(r.value("run", 0));
  ASSERT_GE(runs.size(), 2u);
  EXPECT_EQ(runs[0], 1 + late);
  // Run 2 was half-recorded: the first run the resume starts is run 3 (its later runs may be discarded and
  // repeated on a loaded host; the number of the first is what the resume decides).
  bool resumed = false;
  int first_after_resume = 0;
  for (const auto& r : after) {
    if (r.value("type", "") == "resumed") resumed = true;
    if (resumed && r.value("type", "") == "coastdown_started") {
      first_after_resume = r.value("run", 0);
      break;
    }
  }
  EXPECT_EQ(first_after_resume, 3 + late);
  ASSERT_GE(after.size(), 2u);
  EXPECT_EQ(after.back().value("type", ""), "seal");
  EXPECT_EQ(after[after.size() - 2].value("type", ""), "finished");
  EXPECT_TRUE(after[after.size() - 2].value("accepted", false));
  const auto v = record::verify_session_folder(folder);
  EXPECT_TRUE(v.ok) << v.message;
  fs::remove_all(dir);
}

TEST(SessionCli, LinkDroppedMidCoastdownIsRepeated) {
  // The simulator drops the link 40 s into the first coast-down; its watchdog (1 s) stops the rollers before
  // the tool reconnects (2.5 s); the run is discarded, the watchdog fault cleared with the rollers stopped,
  // the vehicle re-warmed and the run repeated.
  SimProcess sim(
      {"--time-scale", "200", "--watchdog-ms", "1000", "--drop-in-mode", "ROADLOAD", "--drop-after-s", "40"});
  const std::string dir = temp_dir("drop");
  write(dir + "/cell.toml", cell_text(sim.port(), "single-axle", 100.0, 2500));
  // The shipped profile with a late first release kept (a finding): at 200x the injected drop already uses
  // one of the three unusable runs a session allows, and a release late for the host's reasons must not use
  // the others.
  write(dir + "/profile.toml",
        loadtrim::testing::profile_keeping_late_release(kSrc + "/config/profiles/wltp-iterative.toml"));
  std::string out, err;
  const int rc = run_command(
      {kExe, "run", "--override-checks", "integration test against the simulator", "--cell",
       dir + "/cell.toml", "--target", kSrc + "/samples/targets/demo-hatchback.toml", "--profile",
       dir + "/profile.toml", "--sessions", dir, "--unattended", "--quiet", "--rewarm-s", "200",
       // no loss map: its coasts are road load too and would take the drop meant for the coast-down
       "--first-setting", "standard"},
      &out, &err);
  EXPECT_EQ(rc, 0) << out << err;
  std::string folder;
  for (const auto& e : fs::directory_iterator(dir))
    if (e.is_directory() && e.path().filename() != "history") folder = e.path().string();
  const auto rs = records(folder);
  // At least the injected drop (a heavily loaded host may add a stalled-stream incident of its own; each is
  // handled the same way and all of them are logged).
  EXPECT_GE(count(rs, "link_lost"), 1);
  EXPECT_EQ(count(rs, "link_restored"), count(rs, "link_lost"));
  EXPECT_GE(count(rs, "coastdown_discarded"), 1);
  bool watchdog = false;
  for (const auto& r : rs)
    if (r.value("type", "") == "fault_cleared")
      watchdog = r.value("fault", "") == "WATCHDOG" && r.value("rollers", "") == "stopped";
  EXPECT_TRUE(watchdog) << "the controller's watchdog should have stopped the rollers";
  // A finished session's last records: "finished", then the seal (docs/records.md).
  ASSERT_GE(rs.size(), 2u);
  EXPECT_EQ(rs.back().value("type", ""), "seal");
  EXPECT_EQ(rs[rs.size() - 2].value("type", ""), "finished");
  EXPECT_TRUE(rs[rs.size() - 2].value("accepted", false));
  EXPECT_TRUE(record::verify_session_folder(folder).ok);
  fs::remove_all(dir);
}

TEST(SessionCli, InterruptStopsTheRollersAndSaysSo) {
  SimProcess sim({"--time-scale", "100"});
  const std::string dir = temp_dir("sigterm");
  std::string folder;
  ChildProcess run({kExe, "run", "--override-checks", "integration test against the simulator", "--cell",
                    kSrc + "/config/cells/sim-tcp.toml", "--port", std::to_string(sim.port()), "--target",
                    kSrc + "/samples/targets/demo-hatchback.toml", "--sessions", dir, "--unattended",
                    "--json"});
  for (;;) {
    auto line = run.read_line(std::chrono::seconds(60));
    ASSERT_TRUE(line);
    const auto j = nlohmann::json::parse(*line, nullptr, false);
    if (j.is_object() && j.value("type", "") == "session_folder") folder = j.value("path", "");
    if (j.is_object() && j.value("type", "") == "warm_up_started") break;
  }
  run.signal(SIGTERM);
  EXPECT_EQ(run.wait(), 4);  // README: interrupted
  const auto rs = records(folder);
  EXPECT_EQ(count(rs, "interrupted"), 1);
  bool stopped = false;
  for (const auto& r : rs)
    if (r.value("type", "") == "safe_stop") stopped = r.value("rollers_stopped", false);
  EXPECT_TRUE(stopped);
  // The controller agrees: rollers at zero, idle.
  line::LineController c(line::make_tcp_transport("127.0.0.1", sim.port()), {}, {160.0});
  ASSERT_TRUE(c.connect().ok());
  controller::StatusReport st;
  ASSERT_TRUE(c.status(st).ok());
  // At rest the encoder reads its noise (the simulator's 0.05 km/h σ): at or below the cell's standstill
  // threshold (docs/safety.md §3, 5 × the stated noise, 0.5 km/h here), not an exact zero.
  EXPECT_LE(st.speed_kmh, 0.5);
  EXPECT_EQ(st.mode, controller::Mode::idle);
  EXPECT_TRUE(record::verify_session_folder(folder).ok);
  fs::remove_all(dir);
}

TEST(SessionCli, TamperedRecordOrTraceIsDetected) {
  const std::string dir = temp_dir("tamper");
  std::string out, err;
  // A lab data root of the test's own with a key pair for the invented in-process cell, and the cell file
  // naming its public key: the session seals its folder signed (docs/records.md).
  const std::string data = dir + "/lab", cell = dir + "/cell.toml";
  ASSERT_EQ(
      run_command({kExe, "keys", "create", "--cell", "sim-cell-inprocess (invented)", "--data-dir", data},
                  &out, &err),
      0)
      << out << err;
  const auto fp = out.find("sha256:");
  ASSERT_NE(fp, std::string::npos) << out;
  {
    std::ifstream in(kSrc + "/config/cells/sim-inprocess.toml");
    std::string text((std::istreambuf_iterator<char>(in)), {});
    const auto truth = text.find("../../samples");
    text.replace(truth, 5,
                 kSrc + "/");  // the truth path relative to config/cells, made absolute for the copy
    std::ofstream(cell) << text << "\n[records]\npublic_key = \"" << out.substr(fp, 71) << "\"\n";
  }
  ASSERT_EQ(
      run_command({kExe, "run", "--cell", cell, "--target", kSrc + "/samples/targets/demo-hatchback.toml",
                   "--data-dir", data, "--sessions", dir, "--unattended", "--quiet", "--override-checks",
                   "test against the in-process simulator"},
                  &out, &err),
      0)
      << out << err;
  std::string folder;
  for (const auto& e : fs::directory_iterator(dir))
    if (e.is_directory() && e.path().filename() != "history" && e.path().filename() != "lab")
      folder = e.path().string();
  ASSERT_EQ(run_command({kExe, "verify", folder, "--data-dir", data}, &out), 0) << out;
  // Alter one character of record 5's content.
  std::vector<std::string> lines;
  {
    std::ifstream in(folder + "/events.jsonl");
    for (std::string l; std::getline(in, l);) lines.push_back(l);
  }
  const std::string original = lines[5];
  const auto pos = lines[5].find("\"utc\":\"") + 8;
  lines[5][pos] = lines[5][pos] == '1' ? '2' : '1';
  auto save = [&] {
    std::ofstream o(folder + "/events.jsonl");
    for (const auto& l : lines) o << l << "\n";
  };
  save();
  EXPECT_EQ(run_command({kExe, "verify", folder}, &out), 5) << out;
  EXPECT_NE(out.find("first broken record: 5"), std::string::npos) << out;
  lines[5] = original;
  save();
  ASSERT_EQ(run_command({kExe, "verify", folder, "--data-dir", data}, &out), 0) << out;
  // Alter one sample of a trace.
  {
    std::string csv;
    {
      std::ifstream in(folder + "/traces/run-001.csv");
      csv.assign(std::istreambuf_iterator<char>(in), {});
    }
    const auto at = csv.find_first_of("0123456789", 200);
    csv[at] = csv[at] == '7' ? '8' : '7';
    std::ofstream(folder + "/traces/run-001.csv") << csv;
  }
  EXPECT_EQ(run_command({kExe, "verify", folder}, &out), 5) << out;
  EXPECT_NE(out.find("traces/run-001.csv does not match"), std::string::npos) << out;
  fs::remove_all(dir);
}

TEST(SessionCli, BadInputIsRefusedBeforeAnythingMoves) {
  // Nothing listens on the port: a tool that tried to connect would fail with code 3, not 2.
  const std::string dir = temp_dir("bad");
  write(dir + "/cell.toml", cell_text(9, "single-axle", 100.0));
  std::string slow = cell_text(9, "single-axle", 100.0);
  slow.replace(slow.find("max_speed_kmh = 160.0"), 21, "max_speed_kmh = 130.0");
  write(dir + "/slow-cell.toml", slow);
  std::string base;
  {
    std::ifstream in(kSrc + "/samples/targets/demo-hatchback.toml");
    base.assign(std::istreambuf_iterator<char>(in), {});
  }
  auto variant = [&](const std::string& name, const std::string& from, const std::string& to) {
    std::string t = base;
    t.replace(t.find(from), from.size(), to);
    write(dir + "/" + name, t);
    return dir + "/" + name;
  };
  struct Case {
    std::string cell, target, must;
  };
  const Case cases[] = {
      // F2 given per (m/s)² instead of per (km/h)²: 0.033 × 3.6² = 0.428.
      {dir + "/cell.toml", variant("units.toml", "f2_n_per_kmh2 = 0.03300", "f2_n_per_kmh2 = 0.428"),
       "units.toml: error: target.f2_n_per_kmh2 (line 16): is 0.428, allowed 0 to 0.2 N/(km/h)²"},
      {dir + "/cell.toml", variant("missing.toml", "test_mass_kg = 1470.0\n", ""),
       "missing.toml: error: vehicle.test_mass_kg: is missing, allowed 50 to 20000 kg"},
      // A 50 km/h vehicle keeps only 20 and 30 km/h (40 + 14 ≥ 50; GTR 15 §2.2 from memory,
      // docs/standards.md §2.1): too few points for f0, f1, f2.
      {dir + "/cell.toml", variant("slowcar.toml", "max_speed_kmh = 185.0", "max_speed_kmh = 50.0"),
       "error: bands.reference_speeds_kmh: only 2 of the profile's 12 reference speeds remain for this "
       "vehicle"},
      {dir + "/slow-cell.toml", kSrc + "/samples/targets/demo-hatchback.toml",
       "slow-cell.toml: error: limits.max_speed_kmh: is 130 km/h; the profile starts its coast-downs at 142 "
       "km/h"},
  };
  for (const auto& c : cases) {
    std::string out, err;
    const int rc =
        run_command({kExe, "run", "--override-checks", "integration test against the simulator", "--cell",
                     c.cell, "--target", c.target, "--sessions", dir + "/sessions", "--unattended"},
                    &out, &err);
    EXPECT_EQ(rc, 2) << err;
    EXPECT_NE(err.find(c.must), std::string::npos) << "expected: " << c.must << "\ngot: " << err;
    EXPECT_NE(err.find("refused: nothing was started"), std::string::npos) << err;
    EXPECT_FALSE(fs::exists(dir + "/sessions")) << "a session folder was created";
  }
  // Without a terminal and without --unattended, the rollers are not motored.
  std::string out, err;
  EXPECT_EQ(run_command({kExe, "run", "--override-checks", "integration test against the simulator", "--cell",
                         dir + "/cell.toml", "--target", kSrc + "/samples/targets/demo-hatchback.toml",
                         "--sessions", dir + "/sessions"},
                        &out, &err),
            2);
  EXPECT_NE(err.find("refusing to motor the rollers"), std::string::npos) << err;
  EXPECT_FALSE(fs::exists(dir + "/sessions"));
  fs::remove_all(dir);
}

TEST(SessionCli, AVehicleSlowerThanTheWarmUpIsRefusedAlikeByTargetAndRun) {
  // The shipped wltp-iterative profile warms up at 80 km/h (docs/standards.md §3); a vehicle whose maximum is
  // 70 km/h cannot be driven there. `run` refuses it before connecting (core::check_combination); `target`,
  // which prepares the file, must refuse it with the same sentence (the profile's key, the figure, the cause)
  // rather than accept what run then refuses. By hand: 80 > 70; the session's speed limit is min(cell 160,
  // vehicle 70) = 70 km/h. Nothing listens on the cell's port: a tool that tried to connect would exit 3.
  const std::string dir = temp_dir("slowwarm");
  write(dir + "/cell.toml", cell_text(9, "single-axle", 100.0));
  std::string t;
  {
    std::ifstream in(kSrc + "/samples/targets/demo-hatchback.toml");
    t.assign(std::istreambuf_iterator<char>(in), {});
  }
  t.replace(t.find("max_speed_kmh = 185.0"), 21, "max_speed_kmh = 70.0");
  write(dir + "/t70.toml", t);
  const std::string must =
      "warm_up.speed_kmh: is 80 km/h, above the vehicle's vehicle.max_speed_kmh (70 km/h): "
      "allowed up to 70 km/h";
  std::string out, err;
  EXPECT_EQ(
      run_command({kExe, "target", "--metric", "142", "0.35", "0.033", "--id", "slow-70", "--test-mass-kg",
                   "1470", "--mass-in-running-order-kg", "1380", "--max-speed-kmh", "70"},
                  &out, &err),
      2)
      << out << err;
  EXPECT_NE((out + err).find(must), std::string::npos) << out << err;
  EXPECT_EQ(run_command({kExe, "run", "--override-checks", "integration test against the simulator", "--cell",
                         dir + "/cell.toml", "--target", dir + "/t70.toml", "--sessions", dir + "/sessions",
                         "--unattended"},
                        &out, &err),
            2)
      << err;
  EXPECT_NE(err.find(must), std::string::npos) << err;
  EXPECT_NE(err.find("refused: nothing was started"), std::string::npos) << err;
  EXPECT_FALSE(fs::exists(dir + "/sessions")) << "a session folder was created";
  fs::remove_all(dir);
}

TEST(SessionCli, ReferenceSpeedsOfASlowVehicleAreDroppedAlikeByTargetAndRun) {
  // GTR 15 §2.2 (from memory; docs/standards.md §2.1): a reference speed v is dropped when v + 14 km/h ≥ the
  // vehicle's maximum speed. By hand for the wltp-iterative profile (20..130 km/h, run-up margin 12 km/h):
  // 120 km/h keeps 20..100 (110 + 14 = 124 ≥ 120) and starts at 112 km/h; 140 and 143 km/h keep 20..120
  // (130 + 14 = 144) and start at 132 km/h. `target` and `run` must agree, and the run must reach acceptance
  // on the in-process simulator with its record naming what was dropped.
  const std::string dir = temp_dir("refspeeds");
  std::string cell_text_copy;
  {
    std::ifstream in(kSrc + "/config/cells/sim-inprocess.toml");
    cell_text_copy.assign((std::istreambuf_iterator<char>(in)), {});
    cell_text_copy.replace(cell_text_copy.find("../../samples"), 5, kSrc + "/");
  }
  write(dir + "/cell.toml", cell_text_copy);
  struct Case {
    double vmax, top, start;
    std::size_t dropped;
  };
  for (const Case c :
       {Case{120.0, 100.0, 112.0, 3}, Case{140.0, 120.0, 132.0, 1}, Case{143.0, 120.0, 132.0, 1}}) {
    SCOPED_TRACE("vehicle maximum " + std::to_string(c.vmax));
    const std::string tag = std::to_string(static_cast<int>(c.vmax));
    const std::string target = dir + "/t" + tag + ".toml";
    std::string out, err;
    ASSERT_EQ(run_command({kExe, "target", "--metric", "100", "0.5", "0.03", "--id", "slow-" + tag,
                           "--test-mass-kg", "1500", "--mass-in-running-order-kg", "1400", "--max-speed-kmh",
                           tag, "--json", "--out", target},
                          &out, &err),
              0)
        << out << err;
    const auto t = nlohmann::json::parse(out);
    std::vector<double> expected;
    for (double v = 20.0; v <= c.top + 1e-9; v += 10.0) expected.push_back(v);
    EXPECT_EQ(t["reference_speeds_kmh"].get<std::vector<double>>(), expected);
    std::size_t noted = 0;
    for (const auto& r : t["rows"]) noted += r.contains("note");
    EXPECT_EQ(noted, c.dropped);
    const std::string sessions = dir + "/s" + tag;
    EXPECT_EQ(run_command({kExe, "run", "--cell", dir + "/cell.toml", "--target", target, "--sessions",
                           sessions, "--data-dir", dir + "/lab", "--unattended", "--quiet",
                           "--override-checks", "test against the in-process simulator"},
                          &out, &err),
              0)
        << out << err;
    std::string folder;
    for (const auto& e : fs::directory_iterator(sessions))
      if (e.is_directory() && e.path().filename() != "history") folder = e.path().string();
    const auto rs = records(folder);
    ASSERT_FALSE(rs.empty());
    EXPECT_EQ(rs[0]["reference_speeds_kmh"], t["reference_speeds_kmh"]);
    EXPECT_EQ(rs[0]["dropped_reference_speeds"].size(), c.dropped);
    int limits = 0, coastdowns = 0;
    for (const auto& r : rs) {
      if (r.value("type", "") == "limits") {
        ++limits;
        EXPECT_DOUBLE_EQ(r["start_speed_kmh"].get<double>(), c.start);
      }
      // Each coast-down's bands are the kept speeds only.
      if (r.value("type", "") == "coastdown") {
        ++coastdowns;
        EXPECT_EQ(r["bands"].size(), expected.size()) << r.dump();
      }
    }
    EXPECT_EQ(limits, 1);
    EXPECT_GE(coastdowns, 2);
  }
  fs::remove_all(dir);
}
