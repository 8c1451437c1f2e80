// Resume as a function of the verified folder (issue 14; docs/records.md): kill -9 and Ctrl-C at every
// session state, then `loadtrim resume`. The resumed session uses the recorded setting (never the zero
// setting), never runs a coast-down after a verdict was recorded, and leaves a sealed folder that verifies. A
// folder whose inputs were altered is refused before anything connects; the dyno-check gate applies to a
// resume as to a new run. Against the simulated controller on loopback; the session-level rules checked are
// the project's own (docs/records.md).
#include <gtest/gtest.h>

#include <csignal>
#include <filesystem>
#include <fstream>
#include <map>
#include <thread>

#include "process/child_process.hpp"
#include "record/event_log.hpp"
#include "record/verify.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;
const std::string kExe = LOADTRIM_EXE;
const std::string kOverride = "integration test against the simulator";

std::string temp_dir() {
  std::string dir = (fs::temp_directory_path() / "loadtrim-resume-XXXXXX").string();
  if (!::mkdtemp(dir.data())) throw std::runtime_error("mkdtemp");
  return dir;
}

std::vector<std::string> run_args(unsigned port, const std::string& sessions) {
  return {kExe,
          "run",
          "--override-checks",
          kOverride,
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
          "--unattended",
          "--quiet"};
}

std::string only_folder(const std::string& dir) {
  std::string folder;
  if (fs::exists(dir))
    for (const auto& e : fs::directory_iterator(dir))
      if (e.is_directory()) folder = e.path().string();
  return folder;
}

std::vector<nlohmann::json> records_of(const std::string& folder) {
  std::vector<nlohmann::json> recs;
  record::read_log(folder + "/events.jsonl", &recs);
  return recs;
}

// True once the log holds a record matching `what`: a record type, or "state:<name>" for entering a state.
bool logged(const std::string& folder, const std::string& what) {
  for (const auto& r : records_of(folder)) {
    if (r.value("type", "") == what) return true;
    if (r.value("type", "") == "state" && "state:" + r.value("to", "") == what) return true;
  }
  return false;
}

bool wait_logged(const std::string& dir, const std::string& what, std::chrono::seconds limit) {
  const auto end = std::chrono::steady_clock::now() + limit;
  while (std::chrono::steady_clock::now() < end) {
    const std::string f = only_folder(dir);
    if (!f.empty() && logged(f, what)) return true;
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  return false;
}

struct Row {
  const char* at;      // where the first process ends: a record type, or "state:<name>"
  bool kill9;          // kill -9 (frozen there by the test hook), else Ctrl-C (SIGINT) when it is logged
  bool after_verdict;  // the acceptance is already recorded there: resume must not run another coast-down
};
void PrintTo(const Row& r, std::ostream* os) {
  *os << r.at << (r.kill9 ? " kill -9" : " Ctrl-C");
}

std::string row_name(const Row& r) {
  std::string n = r.at;
  for (auto& ch : n)
    if (ch == ':') ch = '_';
  return n + (r.kill9 ? "_kill9" : "_ctrl_c");
}

const Row kRows[] = {
    {"warm_up_started", true, false},   {"loss_map_point", true, false},   {"state:write_set", true, false},
    {"state:run_up", true, false},      {"state:coast_down", true, false}, {"state:analyse", true, false},
    {"state:safe_stop", true, true},    {"state:finished", true, true},    {"warm_up_started", false, false},
    {"loss_map_point", false, false},   {"state:write_set", false, false}, {"state:run_up", false, false},
    {"state:coast_down", false, false}, {"state:analyse", false, false},   {"state:safe_stop", false, true},
    {"state:finished", false, true},
};
}  // namespace

class ResumeAt : public ::testing::TestWithParam<Row> {};

TEST_P(ResumeAt, UsesTheRecordedSettingNeverRerunsAVerdictAndTheFolderVerifies) {
  const Row& row = GetParam();
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir();
  std::vector<std::string> argv = {"/usr/bin/env"};
  if (row.kill9) argv.push_back(std::string("LOADTRIM_TEST_FREEZE_IN_STATE=") + row.at);
  const auto args = run_args(sim.port(), dir);
  argv.insert(argv.end(), args.begin(), args.end());
  {
    process::ChildProcess first(argv);
    ASSERT_TRUE(wait_logged(dir, row.at, std::chrono::seconds(90))) << "the session never reached " << row.at;
    first.signal(row.kill9 ? SIGKILL : SIGINT);
    first.wait();
  }
  const std::string folder = only_folder(dir);
  const auto before = records_of(folder);
  std::this_thread::sleep_for(std::chrono::milliseconds(1500));  // the simulator's watchdog stops the rollers
  std::string out, err;
  const int rc = process::run_command(
      {kExe, "resume", folder, "--unattended", "--quiet", "--rewarm-s", "60", "--override-checks", kOverride},
      &out, &err);
  EXPECT_EQ(rc, 0) << out << err;
  const auto after = records_of(folder);
  if (!before.empty() && before.back().value("type", "") == "seal") {
    // Ctrl-C during the safe stop does not stop a stop: the first process finished and sealed the folder, and
    // the resume found nothing to do and wrote nothing.
    EXPECT_FALSE(row.kill9);
    EXPECT_EQ(after.size(), before.size());
    EXPECT_NE(err.find("nothing to resume"), std::string::npos) << err;
    if (!HasFailure()) fs::remove_all(dir);
    return;
  }
  ASSERT_GT(after.size(), before.size());
  // Where the resume began, and what it did.
  std::size_t from = before.size();
  bool ran_coastdown = false, chose_first = false;
  std::optional<nlohmann::json> first_set_after, first_setting;
  for (std::size_t i = from; i < after.size(); ++i) {
    const std::string t = after[i].value("type", "");
    ran_coastdown = ran_coastdown || t == "coastdown_started";
    if (t == "first_setting") {
      chose_first = true;
      first_setting = after[i]["set"];
    }
    if (t == "set_written" && !first_set_after) first_set_after = after[i]["set"];
  }
  // The setting the record held when the first process ended (the last first_setting / decision before it).
  std::optional<nlohmann::json> recorded;
  for (const auto& r : before) {
    if (r.value("type", "") == "first_setting") recorded = r["set"];
    if (r.value("type", "") == "coastdown" && r.value("usable", false)) recorded = r["decision"]["next_set"];
  }
  if (row.after_verdict) {
    EXPECT_FALSE(ran_coastdown) << "a session whose acceptance was recorded ran another coast-down";
  } else if (!row.kill9 && !recorded && !chose_first) {
    // Ctrl-C may land after the verdict on a fast host: then nothing more may run either.
    EXPECT_FALSE(ran_coastdown);
  } else {
    ASSERT_TRUE(first_set_after) << "the resumed session wrote no setting";
    const auto& s = *first_set_after;
    EXPECT_FALSE(s.value("f0_n", 0.0) == 0.0 && s.value("f1_n_per_kmh", 0.0) == 0.0 &&
                 s.value("f2_n_per_kmh2", 0.0) == 0.0)
        << "the zero setting was written after the resume";
    if (recorded && !chose_first) {
      EXPECT_EQ(s, *recorded) << "the resumed session did not use the recorded setting";
    }
    if (!recorded) {
      EXPECT_TRUE(chose_first) << "no first setting was chosen and recorded by the resume";
      if (first_setting) {
        EXPECT_EQ(s, *first_setting);
      }
    }
  }
  // The folder ends sealed with an accepted result, and verifies (unsigned: the simulator's cell has no key).
  EXPECT_EQ(after.back().value("type", ""), "seal");
  const record::FolderVerdict v = record::verify_folder(folder);
  EXPECT_TRUE(v.intact()) << v.message;
  ASSERT_TRUE(v.seal);
  EXPECT_EQ(v.seal->result.value("result", ""), "accepted");
  // No run number is recorded twice, and a resumed record never names the same discarded run twice.
  std::map<int, int> runs;
  for (const auto& r : after)
    if (r.value("type", "") == "coastdown") ++runs[r.value("run", 0)];
  for (const auto& [run, n] : runs) EXPECT_EQ(n, 1) << "run " << run;
  if (!HasFailure()) fs::remove_all(dir);
}

INSTANTIATE_TEST_SUITE_P(States, ResumeAt, ::testing::ValuesIn(kRows),
                         [](const auto& info) { return row_name(info.param); });

TEST(Resume, AlteredInputsAreRefusedBeforeAnythingConnects) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir();
  {
    std::vector<std::string> argv = {"/usr/bin/env", "LOADTRIM_TEST_FREEZE_IN_STATE=warm_up_started"};
    const auto args = run_args(sim.port(), dir);
    argv.insert(argv.end(), args.begin(), args.end());
    process::ChildProcess first(argv);
    ASSERT_TRUE(wait_logged(dir, "warm_up_started", std::chrono::seconds(60)));
    first.signal(SIGKILL);
    first.wait();
  }
  const std::string folder = only_folder(dir);
  // Raise the speed limit in the folder's copy of the cell file (160 → 195 km/h).
  std::string cell;
  {
    std::ifstream in(folder + "/inputs/cell.toml");
    cell.assign(std::istreambuf_iterator<char>(in), {});
  }
  cell.replace(cell.find("max_speed_kmh = 160.0"), 21, "max_speed_kmh = 195.0");
  std::ofstream(folder + "/inputs/cell.toml") << cell;
  const auto before = records_of(folder).size();
  std::string out, err;
  const int rc = process::run_command(
      {kExe, "resume", folder, "--unattended", "--quiet", "--override-checks", kOverride}, &out, &err);
  EXPECT_EQ(rc, 5) << out << err;
  EXPECT_NE(err.find("does not verify"), std::string::npos) << err;
  EXPECT_NE(err.find("inputs/cell.toml"), std::string::npos) << err;
  EXPECT_EQ(records_of(folder).size(), before) << "a record was added to a folder that does not verify";
  if (!HasFailure()) fs::remove_all(dir);
}

TEST(Resume, TheDynoCheckGateAppliesToAResume) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir();
  {
    std::vector<std::string> argv = {"/usr/bin/env", "LOADTRIM_TEST_FREEZE_IN_STATE=warm_up_started"};
    const auto args = run_args(sim.port(), dir);
    argv.insert(argv.end(), args.begin(), args.end());
    process::ChildProcess first(argv);
    ASSERT_TRUE(wait_logged(dir, "warm_up_started", std::chrono::seconds(60)));
    first.signal(SIGKILL);
    first.wait();
  }
  const std::string folder = only_folder(dir);
  const auto before = records_of(folder).size();
  // The test's own data root has no dyno-check history: every check is due, and the cell enforces them.
  std::string out, err;
  int rc = process::run_command(
      {kExe, "resume", folder, "--unattended", "--quiet", "--data-dir", dir + "/lab"}, &out, &err);
  EXPECT_EQ(rc, 2) << out << err;
  EXPECT_NE(err.find("dyno's own checks are not current"), std::string::npos) << err;
  EXPECT_EQ(records_of(folder).size(), before);
  // With the override, the resume goes on and the gate and its reason are in the record.
  rc = process::run_command({kExe, "resume", folder, "--unattended", "--quiet", "--data-dir", dir + "/lab",
                             "--rewarm-s", "60", "--override-checks", kOverride},
                            &out, &err);
  EXPECT_EQ(rc, 0) << out << err;
  bool gate_recorded = false;
  for (const auto& r : records_of(folder))
    if (r.value("type", "") == "resume_started" && r.contains("dyno_checks"))
      gate_recorded = r["dyno_checks"].value("override_reason", "") == kOverride;
  EXPECT_TRUE(gate_recorded);
  if (!HasFailure()) fs::remove_all(dir);
}

TEST(Resume, TwoKilledResumesNameTheDiscardedRunOnce) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir();
  auto killed_at = [&](const std::vector<std::string>& cmd, const std::string& at,
                       std::size_t records_before) {
    std::vector<std::string> argv = {"/usr/bin/env", "LOADTRIM_TEST_FREEZE_IN_STATE=" + at};
    argv.insert(argv.end(), cmd.begin(), cmd.end());
    process::ChildProcess p(argv);
    const auto end = std::chrono::steady_clock::now() + std::chrono::seconds(60);
    bool reached = false;
    while (!reached && std::chrono::steady_clock::now() < end) {
      const std::string f = only_folder(dir);
      if (!f.empty()) {
        const auto recs = records_of(f);
        for (std::size_t i = records_before; i < recs.size() && !reached; ++i)
          reached = recs[i].value("type", "") == at ||
                    (recs[i].value("type", "") == "state" && "state:" + recs[i].value("to", "") == at);
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
    p.signal(SIGKILL);
    p.wait();
    std::this_thread::sleep_for(
        std::chrono::milliseconds(1500));  // the simulator's watchdog stops the rollers
    return reached;
  };
  // Killed during coast-down 1 (a run half recorded), then the resume killed in its warm-up, then resumed to
  // the end.
  ASSERT_TRUE(killed_at(run_args(sim.port(), dir), "state:coast_down", 0));
  const std::string folder = only_folder(dir);
  const std::vector<std::string> resume = {
      kExe, "resume", folder, "--unattended", "--quiet", "--rewarm-s", "60", "--override-checks", kOverride};
  ASSERT_TRUE(killed_at(resume, "warm_up_started", records_of(folder).size()));
  std::string out, err;
  EXPECT_EQ(process::run_command(resume, &out, &err), 0) << out << err;
  std::vector<int> discarded;
  for (const auto& r : records_of(folder))
    if (r.value("type", "") == "resumed" && r.contains("discarded_run") && r["discarded_run"].is_number())
      discarded.push_back(r["discarded_run"].get<int>());
  EXPECT_EQ(discarded, std::vector<int>{1})
      << "the half-recorded run 1 is discarded once, by the first resume";
  if (!HasFailure()) fs::remove_all(dir);
}
