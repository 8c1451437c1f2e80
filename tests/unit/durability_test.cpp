// What the record layer makes durable, and what it does when it cannot (docs/records.md, "The chain", "The
// seal", "The cell log"): every directory it makes is fsync'd into its parent, a new log's name into its
// folder, every file a seal covers before the seal; a failed append leaves the log ending at its last good
// record and refuses every later append; a torn last line cut on the way is reported.
//
// fsync(2) is interposed in this test program (and only here): the definition below takes the place of the C
// library's for every call the record layer makes (its libraries are linked statically into this program),
// records the path of the descriptor (/proc/self/fd) while a test listens, and then syncs through the system
// call itself. So the tests see which files and directories were synced, and in which order, without strace.
#include <fcntl.h>
#include <gtest/gtest.h>
#include <sys/syscall.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <climits>
#include <filesystem>
#include <fstream>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "checks/cell_history.hpp"
#include "record/data_root.hpp"
#include "record/event_log.hpp"
#include "record/seal.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "record/vehicle_history.hpp"
#include "record/verify.hpp"
#include "store/queue.hpp"

namespace {
std::mutex g_mu;
bool g_listening = false;
std::vector<std::string> g_synced;  // the paths fsync'd while listening, in order
std::string g_fail;                 // while set: an fsync of this path fails with EIO (nothing synced)
}  // namespace

extern "C" int fsync(int fd) {
  {
    const std::lock_guard<std::mutex> lock(g_mu);
    if (g_listening || !g_fail.empty()) {
      char buf[PATH_MAX];
      const std::string link = "/proc/self/fd/" + std::to_string(fd);
      const ssize_t n = ::readlink(link.c_str(), buf, sizeof buf - 1);
      const std::string path =
          n > 0 ? std::string(buf, static_cast<std::size_t>(n)) : "fd " + std::to_string(fd);
      if (g_listening) g_synced.push_back(path);
      if (!g_fail.empty() && path == g_fail) {
        errno = EIO;
        return -1;
      }
    }
  }
  return static_cast<int>(::syscall(SYS_fsync, fd));
}

using namespace loadtrim;
namespace fs = std::filesystem;
using nlohmann::json;

namespace {

// Listens to fsync for its lifetime; synced() is what was synced so far.
struct SyncLog {
  SyncLog() {
    const std::lock_guard<std::mutex> lock(g_mu);
    g_synced.clear();
    g_listening = true;
  }
  ~SyncLog() {
    const std::lock_guard<std::mutex> lock(g_mu);
    g_listening = false;
  }
  std::vector<std::string> synced() const {
    const std::lock_guard<std::mutex> lock(g_mu);
    return g_synced;
  }
  // The position of the first (or last) fsync of `path`; -1 when it was never synced.
  long first(const std::string& path) const {
    const auto s = synced();
    const auto it = std::find(s.begin(), s.end(), path);
    return it == s.end() ? -1 : static_cast<long>(it - s.begin());
  }
  long last(const std::string& path) const {
    const auto s = synced();
    const auto it = std::find(s.rbegin(), s.rend(), path);
    return it == s.rend() ? -1 : static_cast<long>(s.rend() - it - 1);
  }
  std::string all() const {
    std::string out;
    for (const auto& p : synced()) out += "  " + p + "\n";
    return out;
  }
};

// Makes every fsync of `path` fail with EIO for its lifetime.
struct FailSync {
  explicit FailSync(const std::string& path) {
    const std::lock_guard<std::mutex> lock(g_mu);
    g_fail = path;
  }
  ~FailSync() {
    const std::lock_guard<std::mutex> lock(g_mu);
    g_fail.clear();
  }
  FailSync(const FailSync&) = delete;
  FailSync& operator=(const FailSync&) = delete;
};

// A scratch directory, by its canonical path (what /proc/self/fd shows), removed with everything in it when
// the test ends.
struct Scratch {
  std::string path;
  explicit Scratch(const std::string& tag) {
    std::string t = (fs::temp_directory_path() / ("loadtrim-" + tag + "-XXXXXX")).string();
    if (!::mkdtemp(t.data())) throw std::runtime_error("mkdtemp failed");
    path = fs::canonical(t).string();
  }
  ~Scratch() {
    std::error_code ec;
    fs::remove_all(path, ec);
  }
  Scratch(const Scratch&) = delete;
  Scratch& operator=(const Scratch&) = delete;
};

void write(const std::string& path, const std::string& text) {
  std::ofstream(path, std::ios::binary) << text;
}

std::string slurp(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::string(std::istreambuf_iterator<char>(in), {});
}

// A small finished folder: an input, a trace, summary.json, operator.log (written as spdlog writes it:
// buffered, never synced) and a log recording the hashed files.
std::string make_folder(const std::string& root) {
  const std::string f = root + "/session";
  fs::create_directories(f + "/inputs");
  fs::create_directories(f + "/traces");
  const std::string cell = "name = \"unit cell\"\n";
  write(f + "/inputs/cell.toml", cell);
  const std::string trace = "index,time_s,speed_kmh,force_n,mode,flags\n0,0.0000,130.0000,0.00,road_load,0\n";
  write(f + "/traces/run-001.csv", trace);
  const std::string stext = json{{"result", "accepted"}, {"accepted", true}}.dump(2) + "\n";
  write(f + "/summary.json", stext);
  write(f + "/operator.log", "2026-12-02T08:00:00.000Z session started\n");
  record::EventLog log(f + "/events.jsonl");
  EXPECT_TRUE(log.append(
      "session_started",
      {{"cell", "unit cell"},
       {"files", json::array({{{"path", "inputs/cell.toml"}, {"sha256", record::sha256_hex(cell)}}})}},
      "2026-12-02T08:00:00.000Z"));
  EXPECT_TRUE(log.append(
      "coastdown",
      {{"run", 1},
       {"files", json::array({{{"path", "traces/run-001.csv"}, {"sha256", record::sha256_hex(trace)}}})}},
      "2026-12-02T08:10:00.000Z"));
  EXPECT_TRUE(log.append(
      "finished",
      {{"result", "accepted"},
       {"files", json::array({{{"path", "summary.json"}, {"sha256", record::sha256_hex(stext)}}})}},
      "2026-12-02T08:20:00.000Z"));
  return f;
}

}  // namespace

// docs/records.md, "The chain" ("fsync'd before the program goes on"): a new session folder's name, its
// inputs/ and traces/, and every missing parent (sessions/ on a new data root) are fsync'd into their
// directories before create_session_folder returns; without it a power loss could lose the folder a
// confirmed record lives in.
TEST(Durability, ANewSessionFolderIsSyncedIntoEveryParentItMade) {
  const Scratch scratch("dur-folder");
  const std::string& t = scratch.path;
  const std::string sessions = t + "/lab/sessions";
  SyncLog s;
  const std::string folder = record::create_session_folder(sessions, "vehicle 1");
  EXPECT_GE(s.first(t), 0) << "lab/ made: its name synced into " << t << "\n" << s.all();
  EXPECT_GE(s.first(t + "/lab"), 0) << "sessions/ made: synced into lab/\n" << s.all();
  EXPECT_GE(s.first(sessions), 0) << "the folder's name synced into sessions/\n" << s.all();
  EXPECT_GE(s.first(folder), 0) << "inputs/ and traces/ synced into the folder\n" << s.all();
}

// docs/records.md, "The data root": the directories made on first use (sessions/, checks/, history/, queue/,
// keys/) are synced into the root, and the root into its parent.
TEST(Durability, TheDataRootsDirectoriesAreSyncedWhenMade) {
  const Scratch scratch("dur-root");
  const std::string& t = scratch.path;
  const record::DataRoot root = record::find_data_root(t + "/root");
  ASSERT_TRUE(root.ok()) << root.describe();
  SyncLog s;
  std::string err;
  ASSERT_TRUE(record::ensure_data_root(root, err)) << err;
  EXPECT_GE(s.first(t), 0) << s.all();
  EXPECT_GE(s.first(t + "/root"), 0) << s.all();
}

// record/event_log.hpp ("a record that append() confirmed survives a crash"), docs/records.md "The chain": a
// new log's name is synced into its folder before its first record is confirmed; an existing log's folder
// is left alone.
TEST(Durability, ANewLogsNameIsSyncedIntoItsFolder) {
  const Scratch scratch("dur-log");
  const std::string& t = scratch.path;
  {
    SyncLog s;
    record::EventLog log(t + "/events.jsonl");
    ASSERT_TRUE(log.error().empty()) << log.error();
    EXPECT_GE(s.first(t), 0) << s.all();
    ASSERT_TRUE(log.append("a", json::object(), "2026-12-02T08:00:00.000Z"));
    EXPECT_LT(s.first(t), s.first(t + "/events.jsonl")) << s.all();
  }
  SyncLog s;
  record::EventLog again(t + "/events.jsonl");
  EXPECT_EQ(s.first(t), -1) << "an existing log's folder needs no sync\n" << s.all();
}

// docs/records.md, "The cell log": a cell's log directory, when new, is synced into checks/ (and checks/ into
// its parent when it is made with it), and the log's name into the cell's directory.
TEST(Durability, TheCellLogsDirectoryIsSyncedWhenMade) {
  const Scratch scratch("dur-cell");
  const std::string& t = scratch.path;
  checks::CellHistory h(t + "/checks", "unit cell");
  SyncLog s;
  ASSERT_TRUE(h.append("maintenance", {{"note", "rollers replaced"}}, "2026-12-02T08:00:00.000Z"))
      << h.error();
  EXPECT_GE(s.first(t), 0) << s.all();
  EXPECT_GE(s.first(t + "/checks"), 0) << s.all();
  EXPECT_GE(s.first(h.dir()), 0) << s.all();
}

// docs/records.md, "The seal": the seal covers only what a power loss leaves. operator.log is written through
// a buffered sink that never syncs it; seal_folder syncs it, every other file it covers and the directories
// holding them, all before the seal record itself (the last fsync of events.jsonl). Without it a finished
// folder could verify as broken forever after a power loss.
TEST(Durability, EveryFileTheSealCoversIsSyncedBeforeTheSeal) {
  const Scratch scratch("dur-seal");
  const std::string& t = scratch.path;
  const std::string f = make_folder(t);
  SyncLog s;
  record::SealInfo info;
  std::string err;
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"result", "accepted"}}, nullptr, ""}, &info, err))
      << err;
  const long seal = s.last(f + "/events.jsonl");
  ASSERT_GE(seal, 0) << s.all();
  for (const std::string rel :
       {"operator.log", "summary.json", "inputs/cell.toml", "traces/run-001.csv", "", "inputs", "traces"}) {
    const std::string p = rel.empty() ? f : f + "/" + rel;
    const long at = s.first(p);
    EXPECT_GE(at, 0) << p << " never synced\n" << s.all();
    EXPECT_LT(at, seal) << p << " synced only after the seal\n" << s.all();
  }
}

// record/event_log.hpp, docs/records.md "The chain": a write cut short (a full disk mid-line) is cut off
// again, so the file ends at its last good record and reads with no torn line; the log is poisoned: every
// later append is refused with the first failure's message, so no record follows a gap or repeats a seq.
// Reopened (resume), the log continues its chain.
TEST(Durability, AShortWriteIsCutOffAndLaterAppendsAreRefused) {
  const Scratch scratch("dur-short");
  const std::string& t = scratch.path;
  const std::string path = t + "/events.jsonl";
  record::EventLog log(path);
  ASSERT_TRUE(log.append("a", {{"n", 1}}, "2026-12-02T08:00:00.000Z"));
  ASSERT_TRUE(log.append("b", {{"n", 2}}, "2026-12-02T08:00:01.000Z"));
  const std::string good = slurp(path);
  log.inject_short_write(17);
  EXPECT_FALSE(log.append("c", {{"n", 3}}, "2026-12-02T08:00:02.000Z"));
  const std::string first_error = log.error();
  EXPECT_NE(first_error.find("No space left"), std::string::npos) << first_error;
  EXPECT_EQ(slurp(path), good) << "the torn line was not cut off";
  EXPECT_TRUE(log.poisoned());
  EXPECT_FALSE(log.append("d", {{"n", 4}}, "2026-12-02T08:00:03.000Z")) << "an append after a failure";
  EXPECT_EQ(log.error(), first_error);
  EXPECT_EQ(slurp(path), good);
  std::vector<json> recs;
  bool torn = true;
  std::vector<record::LogLine> lines;
  const record::VerifyResult v = record::parse_log(slurp(path), &lines, &torn);
  EXPECT_TRUE(v.ok) << v.message;
  EXPECT_FALSE(torn);
  EXPECT_EQ(v.records, 2u);
  record::EventLog reopened(path);
  EXPECT_TRUE(reopened.repaired().empty());
  EXPECT_EQ(reopened.records(), 2u);
  ASSERT_TRUE(reopened.append("c", {{"n", 3}}, "2026-12-02T08:00:04.000Z")) << reopened.error();
  EXPECT_TRUE(record::read_log(path, &recs).ok);
  EXPECT_EQ(recs.size(), 3u);
}

// The same for a line written whole whose fsync failed: the record was not confirmed, so it is cut off (the
// caller was told it is not there), and the log takes nothing more.
TEST(Durability, ALineWhoseSyncFailedIsCutOffAndLaterAppendsAreRefused) {
  const Scratch scratch("dur-sync");
  const std::string& t = scratch.path;
  const std::string path = t + "/events.jsonl";
  record::EventLog log(path);
  ASSERT_TRUE(log.append("a", {{"n", 1}}, "2026-12-02T08:00:00.000Z"));
  const std::string good = slurp(path);
  log.inject_sync_failure();
  EXPECT_FALSE(log.append("b", {{"n", 2}}, "2026-12-02T08:00:01.000Z"));
  const std::string first_error = log.error();
  EXPECT_NE(first_error.find("cannot sync"), std::string::npos) << first_error;
  EXPECT_EQ(slurp(path), good);
  EXPECT_FALSE(log.append("c", {{"n", 3}}, "2026-12-02T08:00:02.000Z"));
  EXPECT_EQ(log.error(), first_error);
  EXPECT_EQ(slurp(path), good) << "no record with a repeated seq after the unconfirmed one";
  EXPECT_EQ(record::read_log(path, nullptr).records, 1u);
}

// docs/records.md, "The seal": a torn last line that opening the log for the seal cuts is reported to the
// caller (SealInfo::notes), never cut silently.
TEST(Durability, ATornLineCutForTheSealIsReported) {
  const Scratch scratch("dur-torn-seal");
  const std::string& t = scratch.path;
  const std::string f = make_folder(t);
  std::ofstream(f + "/events.jsonl", std::ios::binary | std::ios::app) << "{\"seq\":3,\"utc\":\"2026";
  record::SealInfo info;
  std::string err;
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"result", "accepted"}}, nullptr, ""}, &info, err))
      << err;
  ASSERT_EQ(info.notes.size(), 1u);
  EXPECT_NE(info.notes[0].find("cut an incomplete last line"), std::string::npos) << info.notes[0];
  EXPECT_NE(info.notes[0].find("events.jsonl"), std::string::npos) << info.notes[0];
  EXPECT_TRUE(record::verify_folder(f).intact()) << record::verify_folder(f).message;
}

// docs/records.md, "The cell log": a torn last line of the cell log (an append a crash cut short) is cut when
// the next append opens it, and that append says so (CellHistory::repaired; seal_and_log passes it on in
// SealInfo::notes).
TEST(Durability, ATornCellLogLineCutByAnAppendIsReported) {
  const Scratch scratch("dur-torn-cell");
  const std::string& t = scratch.path;
  {
    checks::CellHistory h(t + "/checks", "unit cell");
    ASSERT_TRUE(h.append("maintenance", {{"note", "one"}}, "2026-12-02T08:00:00.000Z")) << h.error();
    EXPECT_TRUE(h.repaired().empty());
    std::ofstream(h.log_path(), std::ios::binary | std::ios::app) << "{\"seq\":1,\"ty";
  }
  {
    checks::CellHistory h(t + "/checks", "unit cell");
    ASSERT_TRUE(h.ok()) << h.error();
    ASSERT_TRUE(h.append("maintenance", {{"note", "two"}}, "2026-12-02T09:00:00.000Z")) << h.error();
    EXPECT_NE(h.repaired().find("cut an incomplete last line"), std::string::npos) << h.repaired();
    EXPECT_NE(h.repaired().find("cell-log.jsonl"), std::string::npos) << h.repaired();
    std::ofstream(h.log_path(), std::ios::binary | std::ios::app) << "{\"seq\":2,\"ty";
  }
  const std::string f = make_folder(t);
  record::SealInfo info;
  std::string err;
  ASSERT_TRUE(checks::seal_and_log(f, {"unit cell", {{"result", "accepted"}}, nullptr, ""}, t + "/checks",
                                   "session", &info, err))
      << err;
  ASSERT_EQ(info.notes.size(), 1u);
  EXPECT_NE(info.notes[0].find("cell-log.jsonl"), std::string::npos) << info.notes[0];
  std::vector<json> recs;
  EXPECT_TRUE(record::read_log(checks::CellHistory(t + "/checks", "unit cell").log_path(), &recs).ok);
  EXPECT_EQ(recs.size(), 3u);
}

// record/session_folder.hpp, docs/records.md "The chain": write_durable's last step, the fsync of the
// directory that holds the new name, is part of the write: when it fails, write_durable reports failure with
// an error naming the directory (the content is in place but not durable), never success.
TEST(Durability, WriteDurableReportsAFailedSyncOfItsDirectory) {
  const Scratch scratch("dur-dir-fail");
  const std::string& t = scratch.path;
  fs::create_directories(t + "/sub");
  std::string err;
  {
    const FailSync fail(t + "/sub");
    EXPECT_FALSE(record::write_durable(t + "/sub/summary.json", "{}\n", err));
  }
  EXPECT_NE(err.find(t + "/sub"), std::string::npos) << err;
  EXPECT_NE(err.find("not durable"), std::string::npos) << err;
  EXPECT_FALSE(fs::exists(t + "/sub/summary.json.tmp"));
  err.clear();
  EXPECT_TRUE(record::write_durable(t + "/sub/summary.json", "{}\n", err)) << err;
}

// docs/records.md, "The vehicle history": a new history folder and the cell's folder in it are synced into
// their parents before the entry is written (the entry's own write syncs only the cell's folder).
TEST(Durability, ANewVehicleHistoryFolderIsSyncedIntoItsParents) {
  const Scratch scratch("dur-history");
  const std::string& t = scratch.path;
  const std::string file = record::vehicle_history_file(t + "/history", "unit cell", "vehicle 1");
  SyncLog s;
  std::string err;
  const core::RoadLoad set{100.0, 0.5, 0.03};
  ASSERT_TRUE(record::save_vehicle_history(file, "vehicle 1", "session", set, set, err)) << err;
  EXPECT_GE(s.first(t), 0) << "history/ made: its name synced into " << t << "\n" << s.all();
  EXPECT_GE(s.first(t + "/history"), 0) << "the cell's folder synced into history/\n" << s.all();
  EXPECT_LT(s.first(t + "/history"), s.first(file + ".tmp")) << "before the entry is written\n" << s.all();
}

// docs/store.md / docs/records.md "The data root": the store queue's folder, made on the first entry, is
// synced into the data root before the entry is confirmed.
TEST(Durability, TheStoreQueueFolderIsSyncedWhenMade) {
  const Scratch scratch("dur-queue");
  const std::string& t = scratch.path;
  SyncLog s;
  std::string err;
  ASSERT_TRUE(store::enqueue(t + "/root", t + "/root/sessions/one", "session", err)) << err;
  EXPECT_GE(s.first(t), 0) << "root/ made: synced into " << t << "\n" << s.all();
  EXPECT_GE(s.first(t + "/root"), 0) << "queue/ made: synced into the root\n" << s.all();
}

// checks/cell_history.hpp, docs/records.md "The cell log": the look for an earlier seal of the same origin,
// the seal and the cell-log append happen under one hold of the cell log's lock. Two copies of one unfinished
// folder finished at the same moment: exactly one is sealed and logged, the other refused, and the cell log
// holds one seal for the origin. (Without the one hold, both found no seal and both logged one.)
TEST(CellLogSeal, ACopyAndItsOriginalSealedAtOnceLogOneSeal) {
  for (int round = 0; round < 3; ++round) {
    const Scratch scratch("dur-dup-" + std::to_string(round));
    const std::string& t = scratch.path;
    const std::string original = make_folder(t);
    const std::string copy = t + "/copy";
    fs::copy(original, copy, fs::copy_options::recursive);
    std::atomic<int> ready{0};
    bool ok[2] = {false, false};
    std::string err[2];
    auto finish = [&](int i, const std::string& f) {
      ++ready;
      while (ready.load() < 2) std::this_thread::yield();
      record::SealInfo info;
      ok[i] = checks::seal_and_log(f, {"unit cell", {{"result", "accepted"}}, nullptr, ""}, t + "/checks",
                                   "session", &info, err[i]);
    };
    std::thread a(finish, 0, original), b(finish, 1, copy);
    a.join();
    b.join();
    EXPECT_NE(ok[0], ok[1]) << "round " << round << ": " << err[0] << " / " << err[1];
    const std::string& refused = ok[0] ? err[1] : err[0];
    EXPECT_NE(refused.find("already holds a seal for this folder's origin"), std::string::npos) << refused;
    std::vector<json> recs;
    ASSERT_TRUE(record::read_log(checks::CellHistory(t + "/checks", "unit cell").log_path(), &recs).ok);
    EXPECT_EQ(
        std::count_if(recs.begin(), recs.end(), [](const json& r) { return r.value("type", "") == "seal"; }),
        1)
        << "round " << round;
  }
}
