// Resume as a function of the verified folder (issue 14; docs/records.md): kill -9 and Ctrl-C at every
// session state, then `loadtrim resume`. The resumed session uses the recorded setting (never the zero
// setting), never runs a coast-down after a verdict was recorded, and leaves a sealed folder that verifies. A
// folder whose inputs were altered is refused before anything connects; the dyno-check gate applies to a
// resume as to a new run. Against the simulated controller on loopback; the session-level rules checked are
// the project's own (docs/records.md).
#include <gtest/gtest.h>
#include <unistd.h>

#include <algorithm>
#include <csignal>
#include <filesystem>
#include <fstream>
#include <functional>
#include <map>
#include <thread>

#include "process/child_process.hpp"
#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/lock.hpp"
#include "record/sha256.hpp"
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

namespace {
// A session of a cell with a signing key, killed (-9) after its first coast-down was recorded: the folder an
// attacker without the key finds. Returns the folder; `lab` is its data root.
std::string killed_signed_session(const std::string& dir, const std::string& lab, unsigned port,
                                  const std::string& freeze_at = "coastdown") {
  std::string out, err;
  if (process::run_command({kExe, "keys", "create", "--cell", "sim-cell-tcp (invented)", "--data-dir", lab},
                           &out, &err) != 0)
    return "";
  const auto at = out.find("fingerprint: sha256:");
  if (at == std::string::npos) return "";
  std::ifstream in(kSrc + "/config/cells/sim-tcp.toml");
  std::string cell((std::istreambuf_iterator<char>(in)), {});
  cell += "\n[records]\npublic_key = \"" + out.substr(at + 13, 71) + "\"\n";
  std::ofstream(dir + "/keyed.toml") << cell;
  std::vector<std::string> argv = {"/usr/bin/env", "LOADTRIM_TEST_FREEZE_IN_STATE=" + freeze_at};
  auto args = run_args(port, dir + "/s");
  args[5] = dir + "/keyed.toml";
  args.insert(args.end(), {"--data-dir", lab});
  argv.insert(argv.end(), args.begin(), args.end());
  process::ChildProcess first(argv);
  const bool ok = wait_logged(dir + "/s", freeze_at, std::chrono::seconds(120));
  first.signal(SIGKILL);
  first.wait();
  return ok ? only_folder(dir + "/s") : "";
}

// The log as an attacker rewrites it without the key: each record parsed, changed, serialised again and every
// link recomputed (docs/records.md: the chain alone shows accidents, not intent).
void rechain(const std::string& folder, const std::function<void(std::vector<nlohmann::json>&)>& change) {
  std::vector<nlohmann::json> recs = records_of(folder);
  change(recs);
  std::string prev(64, '0'), text;
  for (auto& r : recs) {
    r["prev"] = prev;
    const std::string line = r.dump(-1, ' ', false, nlohmann::json::error_handler_t::replace);
    prev = record::sha256_hex(line);
    text += line + "\n";
  }
  std::ofstream(folder + "/events.jsonl", std::ios::binary | std::ios::trunc) << text;
}

int resume(const std::string& folder, const std::string& lab, std::string& err) {
  std::string out;
  return process::run_command(
      {kExe, "resume", folder, "--unattended", "--quiet", "--override-checks", kOverride, "--data-dir", lab},
      &out, &err);
}
}  // namespace

// Without the cell's key, a killed session's folder cannot be altered into another result or other inputs
// (issue 14: resume never changes a result; docs/records.md, record signatures).
TEST(Resume, AFolderAlteredWithoutTheCellsKeyIsRefused) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir(), lab = dir + "/lab";
  const std::string base = killed_signed_session(dir, lab, sim.port());
  ASSERT_FALSE(base.empty());
  ASSERT_TRUE(records_of(base).front().contains("record_signer"));
  auto copy = [&](const std::string& name) {
    fs::copy(base, dir + "/" + name, fs::copy_options::recursive);
    return dir + "/" + name;
  };
  std::string err;
  // 1. The first coast-down's decision made "accepted", every link recomputed.
  const std::string forged = copy("forged");
  rechain(forged, [](auto& recs) {
    for (auto& r : recs)
      if (r.value("type", "") == "coastdown" && r.contains("decision")) r["decision"]["kind"] = "accepted";
  });
  EXPECT_EQ(resume(forged, lab, err), 5) << err;
  EXPECT_NE(err.find("signature does not verify"), std::string::npos) << err;
  EXPECT_FALSE(fs::exists(forged + "/summary.json"));
  // 2. The cell file's gate switched off and a limit raised, its hash in record 0 recomputed.
  const std::string inputs = copy("inputs");
  {
    std::ofstream(inputs + "/inputs/cell.toml", std::ios::app) << "\n[checks]\nenforce = false\n";
    std::ifstream in(inputs + "/inputs/cell.toml");
    const std::string text((std::istreambuf_iterator<char>(in)), {});
    rechain(inputs, [&](auto& recs) {
      for (auto& f : recs.front()["files"])
        if (f.value("path", "") == "inputs/cell.toml") f["sha256"] = record::sha256_hex(text);
    });
  }
  EXPECT_EQ(resume(inputs, lab, err), 5) << err;
  EXPECT_NE(err.find("record 0's signature does not verify"), std::string::npos) << err;
  // 3. Every signature stripped: the cell has a key, so unsigned records were re-chained without it.
  const std::string stripped = copy("stripped");
  rechain(stripped, [](auto& recs) {
    for (auto& r : recs) {
      r.erase("sig");
      r.erase("record_signer");
    }
  });
  EXPECT_EQ(resume(stripped, lab, err), 5) << err;
  EXPECT_NE(err.find("the records are not signed, but cell"), std::string::npos) << err;
  // 4. Signatures stripped and record 0 renamed to a cell without a key: its inputs name another cell.
  const std::string renamed = copy("renamed");
  rechain(renamed, [](auto& recs) {
    for (auto& r : recs) {
      r.erase("sig");
      r.erase("record_signer");
    }
    recs.front()["cell"] = "a cell without a key";
  });
  EXPECT_EQ(resume(renamed, lab, err), 5) << err;
  EXPECT_NE(err.find("its first record names cell \"a cell without a key\""), std::string::npos) << err;
  // 5. A copy of the folder, resumed after the original was finished, is refused (checked below).
  const std::string twin = copy("twin");
  // 6. The untouched folder resumes and ends sealed, signed and verified.
  const std::string honest = copy("honest");
  EXPECT_EQ(resume(honest, lab, err), 0) << err;
  std::string out;
  EXPECT_EQ(process::run_command({kExe, "verify", honest, "--data-dir", lab}, &out, &err), 0) << out << err;
  EXPECT_EQ(resume(twin, lab, err), 5) << err;
  // verify finds the origin sealed in the cell log: the copy reads as cut back (seal_and_log also refuses a
  // second seal of one origin).
  EXPECT_NE(err.find("the folder was cut back"), std::string::npos) << err;
  EXPECT_EQ(process::run_command({kExe, "verify", honest, "--data-dir", lab}, &out, &err), 0) << out << err;
  if (!HasFailure()) fs::remove_all(dir);
}

// A signed session killed after its verdict was recorded is finalised without motoring, its last records
// signed like the others, and its folder verifies as signed by the cell's key (issue 14: resume never changes
// a result).
TEST(Resume, ASignedFolderKilledAfterItsVerdictIsFinalisedSigned) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir(), lab = dir + "/lab";
  const std::string folder = killed_signed_session(dir, lab, sim.port(), "state:safe_stop");
  ASSERT_FALSE(folder.empty());
  std::string err, out;
  EXPECT_EQ(resume(folder, lab, err), 0) << err;
  EXPECT_EQ(process::run_command({kExe, "verify", folder, "--data-dir", lab}, &out, &err), 0) << out << err;
  int unsigned_records = 0;
  for (const auto& r : records_of(folder))
    if (r.value("type", "") != "seal" && !r.contains("sig")) ++unsigned_records;
  EXPECT_EQ(unsigned_records, 0);
  if (!HasFailure()) fs::remove_all(dir);
}

namespace {
// A session (in dir/s, data root lab) killed by SIGKILL while frozen in its first coast-down: its folder, or
// "" when the coast-down was never logged.
std::string killed_in_coastdown(const loadtrim::testing::SimProcess& sim, const std::string& dir,
                                const std::string& lab) {
  std::vector<std::string> argv = {"/usr/bin/env", "LOADTRIM_TEST_FREEZE_IN_STATE=coastdown"};
  auto args = run_args(sim.port(), dir + "/s");
  args.insert(args.end(), {"--data-dir", lab});
  argv.insert(argv.end(), args.begin(), args.end());
  process::ChildProcess first(argv);
  const bool logged = wait_logged(dir + "/s", "coastdown", std::chrono::seconds(120));
  first.signal(SIGKILL);
  first.wait();
  return logged ? only_folder(dir + "/s") : std::string();
}
}  // namespace

// A record that verifies but lacks a field resume reads is named (exit 5), never read as a default; a link
// placed in an unfinished folder is refused before anything connects; a damaged cell log refuses a session
// before it connects (issue 14, robust readers; docs/records.md).
TEST(Resume, AMissingFieldALinkOrADamagedCellLogIsRefusedBeforeAnythingMoves) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir(), lab = dir + "/lab";
  const std::string base = killed_in_coastdown(sim, dir, lab);
  ASSERT_FALSE(base.empty());
  std::string err, out;
  const std::string missing = dir + "/missing";
  fs::copy(base, missing, fs::copy_options::recursive);
  std::uint64_t seq = 0;
  rechain(missing, [&](auto& recs) {
    for (auto& r : recs)
      if (r.value("type", "") == "coastdown") {
        r.erase("usable");
        seq = r.value("seq", std::uint64_t{0});
      }
  });
  EXPECT_EQ(resume(missing, lab, err), 5) << err;
  EXPECT_NE(err.find("record " + std::to_string(seq) + " (coastdown)"), std::string::npos) << err;
  EXPECT_NE(err.find("usable"), std::string::npos) << err;

  const std::string linked = dir + "/linked";
  fs::copy(base, linked, fs::copy_options::recursive);
  fs::create_symlink("/etc/hostname", linked + "/traces/run-009.csv");
  EXPECT_EQ(process::run_command({kExe, "verify", linked, "--data-dir", lab}, &out, &err), 5) << out;
  const auto before = records_of(linked).size();
  EXPECT_EQ(resume(linked, lab, err), 5) << err;
  EXPECT_NE(err.find("traces/run-009.csv"), std::string::npos) << err;
  EXPECT_EQ(records_of(linked).size(), before);

  const std::string logdir =
      lab + "/checks/sim-cell-tcp__invented_-" + record::sha256_hex("sim-cell-tcp (invented)").substr(0, 8);
  fs::create_directories(logdir);
  std::ofstream(logdir + "/cell-log.jsonl", std::ios::app) << "{\"junk\":1}\n";
  auto args = run_args(sim.port(), dir + "/s2");
  args.insert(args.end(), {"--data-dir", lab});
  EXPECT_EQ(process::run_command(args, &out, &err), 5) << err;
  EXPECT_NE(err.find("cell-log.jsonl is damaged"), std::string::npos) << err;
  EXPECT_FALSE(fs::exists(dir + "/s2")) << "a folder was made for a session that could not be sealed";
  if (!HasFailure()) fs::remove_all(dir);
}

// A log too large to be read whole (a sparse events.jsonl past record::kMaxRecordFileBytes, as a damaged disk
// or a planted file could leave) is a record failure naming the file and the limit (exit 5), never an
// allocation failure (exit 70), and nothing is written to it. The log is read only under the folder's lock:
// with the lock held by another process, resume is refused as busy (exit 2) before it reads the folder
// (docs/records.md, "Size limits" and "When folders are sealed, and resume").
TEST(Resume, ALogTooLargeToReadIsARecordFailureAndIsReadOnlyUnderTheFolderLock) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir(), lab = dir + "/lab";
  const std::string base = killed_in_coastdown(sim, dir, lab);
  ASSERT_FALSE(base.empty());
  const std::string log = base + "/events.jsonl";
  const auto intact = fs::file_size(log);
  std::string err;
  {
    // A line that breaks the chain: read before the lock, it would refuse the folder as broken (exit 5).
    std::ofstream(log, std::ios::app) << "{\"junk\":1}\n";
    // The lock file `loadtrim` takes for this folder (app/cell_locks.cpp, lock_folder).
    const std::string lock_path =
        (fs::path(record::lock_dir()) /
         ("folder-" + record::sha256_hex(fs::weakly_canonical(base).string()).substr(0, 32) + ".lock"))
            .string();
    std::string busy;
    const auto held = record::FileLock::try_acquire(lock_path, record::LockMode::exclusive,
                                                    {::getpid(), "resume", base, "", ""}, "folder", busy);
    ASSERT_TRUE(held) << busy;
    EXPECT_EQ(resume(base, lab, err), 2) << err;
    EXPECT_NE(err.find("busy"), std::string::npos) << err;
  }
  fs::resize_file(log, intact);
  const auto size = record::kMaxRecordFileBytes + 1;
  ASSERT_EQ(::truncate(log.c_str(), static_cast<off_t>(size)), 0);
  EXPECT_EQ(resume(base, lab, err), 5) << err;
  EXPECT_NE(err.find("events.jsonl"), std::string::npos) << err;
  EXPECT_NE(err.find(std::to_string(record::kMaxRecordFileBytes)), std::string::npos) << err;
  EXPECT_EQ(fs::file_size(log), size) << "the log was written to";
  if (!HasFailure()) fs::remove_all(dir);
}

// The members of the session_started record that resume reads (the first command line's first setting, port
// and device) are checked for type and range: a wrong one refuses the resume with exit 5, naming the record,
// the member and what is allowed, before anything connects, never exit 70 (docs/records.md, "When folders are
// sealed, and resume"). The folder is otherwise intact: every link recomputed, verify says NOT FINISHED
// (exit 6).
TEST(Resume, AWrongTypedOrOutOfRangeStartMemberIsRefusedNamingIt) {
  loadtrim::testing::SimProcess sim({"--time-scale", "200", "--watchdog-ms", "1000"});
  const std::string dir = temp_dir(), lab = dir + "/lab";
  const std::string base = killed_in_coastdown(sim, dir, lab);
  ASSERT_FALSE(base.empty());
  ASSERT_EQ(records_of(base).front().value("type", ""), "session_started");
  struct Case {
    const char* name;
    std::function<void(nlohmann::json&)> change;  // record 0
    std::string must;                             // in resume's message
  };
  const Case cases[] = {
      {"first setting a number", [](auto& r) { r["first_setting_requested"] = 5; },
       "record 0 (session_started): \"first_setting_requested\" is 5; allowed: one of the strings "
       "\"standard\", \"fleet\", \"loss-map\", \"history\""},
      {"first setting unknown", [](auto& r) { r["first_setting_requested"] = "guess"; },
       "record 0 (session_started): \"first_setting_requested\" is \"guess\"; allowed:"},
      {"port out of range", [](auto& r) { r["overrides"]["port"] = 70000; },
       "record 0 (session_started): \"overrides.port\" is 70000; allowed: an integer from 1 to 65535"},
      {"port a string", [](auto& r) { r["overrides"]["port"] = "7301"; },
       "record 0 (session_started): \"overrides.port\" is \"7301\"; allowed: an integer"},
      {"device a number", [](auto& r) { r["overrides"]["device"] = 1; },
       "record 0 (session_started): \"overrides.device\" is 1; allowed: a string"},
      {"overrides a list", [](auto& r) { r["overrides"] = nlohmann::json::array(); },
       "record 0 (session_started): \"overrides\" is []; allowed: an object"},
  };
  for (const Case& c : cases) {
    SCOPED_TRACE(c.name);
    std::string name = c.name;
    std::replace(name.begin(), name.end(), ' ', '-');
    const std::string f = dir + "/" + name;
    fs::copy(base, f, fs::copy_options::recursive);
    rechain(f, [&](auto& recs) { c.change(recs.front()); });
    std::string out, err;
    EXPECT_EQ(process::run_command({kExe, "verify", f, "--data-dir", lab}, &out, &err), 6) << out << err;
    const auto before = records_of(f).size();
    EXPECT_EQ(resume(f, lab, err), 5) << err;
    EXPECT_NE(err.find("refusing to resume " + f), std::string::npos) << err;
    EXPECT_NE(err.find(c.must), std::string::npos) << err;
    EXPECT_EQ(records_of(f).size(), before) << "nothing was written";
  }
  if (!HasFailure()) fs::remove_all(dir);
}
