// The store's queue (src/store/queue.hpp, docs/store.md "Indexed when it ends") over temporary data roots: an
// entry stays queued while the store cannot be opened, the deadline is our own clock's, an entry that can
// never index is set aside (never retried forever), a file in the queue that is not an entry is not
// believed, and a folder's name cannot place its entry outside the queue. What each check holds the code to
// is issue 19's rules ("the store down or slow neither stops nor slows a session; the entry is queued and
// ingested when the store is back, logged both times") and POSIX rename/append behaviour.
#include <gtest/gtest.h>
#include <stdlib.h>

#include <algorithm>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "store/queue.hpp"
#include "store/sqlite_store.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;

namespace {

std::string make_temp_dir(const std::string& stem) {
  std::string dir = (fs::temp_directory_path() / (stem + "-XXXXXX")).string();
  if (!::mkdtemp(dir.data())) return "";
  return dir;
}

std::string read_file(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  std::ostringstream s;
  s << f.rdbuf();
  return s.str();
}

std::unique_ptr<store::Store> migrated_store(const std::string& path) {
  std::string err;
  auto s = store::open_sqlite(path, store::OpenMode::migrate, err);
  if (!s || !s->migrate(err)) ADD_FAILURE() << err;
  return s;
}

const auto kLater = std::chrono::steady_clock::now() + std::chrono::hours(1);

}  // namespace

// Issue 19: the store unavailable keeps every entry queued, says why, and the log keeps each step.
TEST(StoreQueue, AnUnavailableStoreKeepsTheEntriesQueued) {
  const std::string root = make_temp_dir("lt-queue");
  std::string err;
  ASSERT_TRUE(store::enqueue(root, "/labs/x/sessions/20261203T100000Z-A", "session", err)) << err;
  ASSERT_TRUE(store::enqueue(root, "/labs/x/sessions/20261203T100100Z-B", "session", err)) << err;
  // The same folder queued twice is one entry.
  ASSERT_TRUE(store::enqueue(root, "/labs/x/sessions/20261203T100100Z-B", "session", err)) << err;
  ASSERT_EQ(store::queued_entries(root).size(), 2u);
  int opens = 0;
  const store::StoreOpener down = [&](std::string& e) -> std::unique_ptr<store::Store> {
    ++opens;
    e = "server 127.0.0.1:1 refused the connection";
    return nullptr;
  };
  const store::DrainResult r = store::drain_queue(root, down, {}, kLater);
  EXPECT_FALSE(r.store_ok);
  EXPECT_EQ(r.indexed, 0);
  EXPECT_EQ(r.remaining, 2);
  EXPECT_EQ(opens, 1) << "one attempt per drain, not one per entry";
  ASSERT_FALSE(r.messages.empty());
  EXPECT_NE(r.messages.back().find("refused the connection"), std::string::npos) << r.messages.back();
  ASSERT_TRUE(store::log_store_line(root, "queued session B\nsecond line", err)) << err;
  const std::string log = read_file(root + "/" + store::kStoreLogName);
  EXPECT_NE(log.find("queued session B second line\n"), std::string::npos) << "one line per step: " << log;
  fs::remove_all(root);
}

// Our own clock's deadline: a drain whose deadline has passed opens nothing and indexes nothing.
TEST(StoreQueue, ADrainPastItsDeadlineLeavesTheQueue) {
  const std::string root = make_temp_dir("lt-queue");
  std::string err;
  ASSERT_TRUE(store::enqueue(root, "/labs/x/sessions/S1", "session", err)) << err;
  bool opened = false;
  const store::StoreOpener open = [&](std::string&) -> std::unique_ptr<store::Store> {
    opened = true;
    return nullptr;
  };
  const store::DrainResult r =
      store::drain_queue(root, open, {}, std::chrono::steady_clock::now() - std::chrono::seconds(1));
  EXPECT_FALSE(opened);
  EXPECT_EQ(r.remaining, 1);
  fs::remove_all(root);
}

// Never retried forever: a folder that is gone is set aside (queue/refused/), a file that is not an entry is
// set aside too, and neither stops the rest.
TEST(StoreQueue, WhatCanNeverIndexIsSetAside) {
  const std::string root = make_temp_dir("lt-queue");
  std::string err;
  ASSERT_TRUE(store::enqueue(root, root + "/sessions/gone", "session", err)) << err;
  const fs::path qdir = fs::path(root) / store::kQueueDirName;
  std::ofstream(qdir / "0-not-an-entry.json") << "{\"folder\": 7}";
  std::ofstream(qdir / "1-relative.json") << R"({"folder": "sessions/x", "what": "session"})";
  auto s = migrated_store(root + "/store.sqlite");
  ASSERT_TRUE(s);
  const store::StoreOpener open = [&](std::string& e) -> std::unique_ptr<store::Store> {
    return store::open_sqlite(root + "/store.sqlite", store::OpenMode::use, e);
  };
  const store::DrainResult r = store::drain_queue(root, open, {}, kLater);
  EXPECT_EQ(r.set_aside, 3);
  EXPECT_EQ(r.remaining, 0);
  // Each under its own name, with the time it was set aside: nothing set aside is replaced by a later one.
  std::vector<std::string> refused;
  for (const auto& f : fs::directory_iterator(qdir / "refused"))
    refused.push_back(f.path().filename().string());
  std::sort(refused.begin(), refused.end());
  ASSERT_EQ(refused.size(), 3u);
  EXPECT_EQ(refused[0].rfind("0-not-an-entry.", 0), 0u) << refused[0];
  EXPECT_EQ(refused[1].rfind("1-relative.", 0), 0u) << refused[1];
  EXPECT_EQ(refused[2].rfind("gone-", 0), 0u) << refused[2];
  fs::remove_all(root);
}

// Two folders of the same name (check folders of two cells started in the same second) are two entries; a
// queued_utc that is not a string makes a file that is not an entry (set aside, never thrown).
TEST(StoreQueue, FoldersOfTheSameNameAreTwoEntries) {
  const std::string root = make_temp_dir("lt-queue");
  std::string err;
  ASSERT_TRUE(store::enqueue(root, "/labs/x/checks/cell-a/20261203T100000Z-coastdown", "check", err)) << err;
  ASSERT_TRUE(store::enqueue(root, "/labs/x/checks/cell-b/20261203T100000Z-coastdown", "check", err)) << err;
  EXPECT_EQ(store::queued_entries(root).size(), 2u);
  const fs::path qdir = fs::path(root) / store::kQueueDirName;
  std::ofstream(qdir / "0-bad-time.json") << R"({"folder": "/labs/x/s", "what": "session", "queued_utc": 5})";
  const store::StoreOpener none = [&](std::string& e) -> std::unique_ptr<store::Store> {
    e = "down";
    return nullptr;
  };
  const store::DrainResult r = store::drain_queue(root, none, {}, kLater);
  EXPECT_EQ(r.set_aside, 1);
  EXPECT_EQ(r.remaining, 2);
  fs::remove_all(root);
}

// A folder's name never places its entry outside the queue folder.
TEST(StoreQueue, AFolderNameCannotLeaveTheQueue) {
  const std::string root = make_temp_dir("lt-queue");
  std::string err;
  ASSERT_TRUE(store::enqueue(root, "/labs/x/sessions/..", "session", err)) << err;
  ASSERT_TRUE(store::enqueue(root, "/labs/x/sessions/.hidden", "session", err)) << err;
  for (const auto& f : store::queued_entries(root))
    EXPECT_EQ(fs::path(f).parent_path(), fs::path(root) / store::kQueueDirName) << f;
  EXPECT_EQ(store::queued_entries(root).size(), 2u);
  EXPECT_FALSE(fs::exists(fs::path(root) / "...json"));
  fs::remove_all(root);
}

// The lab overview (docs/store.md "The lab overview"): a start entry drains into a running row without the
// folder being indexed or verified (it is running: nothing to verify yet); an end without a seal ("ended")
// clears it; a start entry still queued when its folder's end is queued is removed (it is no longer news); a
// start entry that is not one (a member missing) is set aside, never believed.
TEST(StoreQueue, StartAndEndedEntriesNoteAndClearTheRunningRow) {
  const std::string root = make_temp_dir("lt-queue");
  auto s = migrated_store(root + "/store.sqlite");
  ASSERT_TRUE(s);
  const store::StoreOpener open = [&](std::string& e) -> std::unique_ptr<store::Store> {
    return store::open_sqlite(root + "/store.sqlite", store::OpenMode::use, e);
  };
  std::string err;
  const store::RunningEntry run{"session",
                                root + "/sessions/20261203T100000Z-A",
                                "20261203T100000Z-A",
                                "bay 1",
                                "car-A",
                                "iterative",
                                "2026-12-03T10:00:00.000Z",
                                "http://127.0.0.1:9/",
                                ""};
  ASSERT_TRUE(store::enqueue_started(root, run, err)) << err;
  store::DrainResult r = store::drain_queue(root, open, {}, kLater);
  EXPECT_EQ(r.set_aside, 0);
  EXPECT_EQ(r.remaining, 0);
  std::vector<store::CellOverview> cells;
  ASSERT_TRUE(s->overview(cells, err)) << err;
  ASSERT_EQ(cells.size(), 1u);
  ASSERT_EQ(cells[0].running.size(), 1u);
  EXPECT_EQ(cells[0].running[0].folder, run.folder);
  EXPECT_EQ(cells[0].running[0].live_url, "http://127.0.0.1:9/");

  ASSERT_TRUE(store::enqueue(root, run.folder, "ended", err)) << err;
  r = store::drain_queue(root, open, {}, kLater);
  EXPECT_EQ(r.remaining, 0);
  ASSERT_TRUE(s->overview(cells, err)) << err;
  EXPECT_TRUE(cells.empty() || cells[0].running.empty());

  // A start still queued when the end is queued: removed, so it can never be drained after the end.
  ASSERT_TRUE(store::enqueue_started(root, run, err)) << err;
  ASSERT_EQ(store::queued_entries(root).size(), 1u);
  ASSERT_TRUE(store::enqueue(root, run.folder, "ended", err)) << err;
  const auto left = store::queued_entries(root);
  ASSERT_EQ(left.size(), 1u);
  EXPECT_NE(left[0].find(".ended.json"), std::string::npos) << left[0];
  r = store::drain_queue(root, open, {}, kLater);
  ASSERT_TRUE(s->overview(cells, err)) << err;
  EXPECT_TRUE(cells.empty() || cells[0].running.empty());

  const fs::path qdir = fs::path(root) / store::kQueueDirName;
  std::ofstream(qdir / "x.started.json")
      << R"({"folder": "/labs/x", "what": "started", "running": {"what": "session"}})";
  r = store::drain_queue(root, open, {}, kLater);
  EXPECT_EQ(r.set_aside, 1);
  ASSERT_TRUE(s->overview(cells, err)) << err;
  EXPECT_TRUE(cells.empty() || cells[0].running.empty());
  fs::remove_all(root);
}

// An entry that goes while a drain runs (its folder's end removes a start entry without the drain lock, or
// another drainer took it) is not "set aside": nothing was (the hostile review saw exit 5 and a set-aside
// line in store.log with queue/refused/ empty).
TEST(StoreQueue, AnEntryGoneWhileTheQueueDrainsIsNotSetAside) {
  const std::string root = make_temp_dir("lt-queue");
  auto s = migrated_store(root + "/store.sqlite");
  ASSERT_TRUE(s);
  std::string err;
  for (const char* name : {"20261203T100000Z-A", "20261203T100100Z-B"}) {
    const store::RunningEntry run{"session",   root + "/sessions/" + name, name, "bay 1", "car",
                                  "iterative", "2026-12-03T10:00:00.000Z", "",   ""};
    ASSERT_TRUE(store::enqueue_started(root, run, err)) << err;
  }
  const auto files = store::queued_entries(root);
  ASSERT_EQ(files.size(), 2u);
  // The store is opened when the first entry has been read: the second goes then.
  const store::StoreOpener open = [&](std::string& e) -> std::unique_ptr<store::Store> {
    fs::remove(files[1]);
    return store::open_sqlite(root + "/store.sqlite", store::OpenMode::use, e);
  };
  const store::DrainResult r = store::drain_queue(root, open, {}, kLater);
  EXPECT_EQ(r.set_aside, 0);
  EXPECT_EQ(r.remaining, 0);
  for (const auto& m : r.messages) EXPECT_EQ(m.find("set aside"), std::string::npos) << m;
  EXPECT_FALSE(fs::exists(fs::path(root) / store::kQueueDirName / "refused"));
  fs::remove_all(root);
}
