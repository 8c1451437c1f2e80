// The record store on SQLite (src/store, docs/store.md) over temporary files: migrations from empty, the
// refusals at open (a newer schema, an older one, a file that is not a store), ingesting a sealed session
// folder made by the real session state machine against the in-process scripted controller (as
// tests/unit/session_unit_test.cpp does), history by vehicle, cell and date, a tampered folder refused at
// ingest, and `store check` finding a changed and a deleted folder. What each check holds the code to is
// named beside it: the project's rules for the store are issue 19's ("issue 19"); the file's behaviour is
// sqlite's documented behaviour (the C API's open flags, SQLITE_NOTADB); dates are ISO 8601 calendar dates
// with the Gregorian leap-year rule.
#include <gtest/gtest.h>
#include <sqlite3.h>
#include <stdlib.h>

#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "config/cell_loader.hpp"
#include "config/loaders.hpp"
#include "record/event_log.hpp"
#include "record/seal.hpp"
#include "record/sha256.hpp"
#include "record/verify.hpp"
#include "registry.hpp"
#include "session/record_writer.hpp"
#include "session/session.hpp"
#include "store/index.hpp"
#include "store/sqlite_store.hpp"
#include "support/fake_controller.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;
using nlohmann::json;

namespace {

const std::string kSrc = LOADTRIM_SOURCE_DIR;

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

void write_file(const std::string& path, const std::string& text) {
  std::ofstream f(path, std::ios::binary | std::ios::trunc);
  f << text;
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> out;
  std::istringstream in(text);
  for (std::string l; std::getline(in, l);) out.push_back(l);
  return out;
}

// A query on the store's file, outside the store's own code: the first column of the first row as text.
std::string sql_value(const std::string& file, const std::string& sql) {
  sqlite3* db = nullptr;
  std::string out = "(error)";
  if (sqlite3_open_v2(file.c_str(), &db, SQLITE_OPEN_READONLY, nullptr) == SQLITE_OK) {
    sqlite3_stmt* s = nullptr;
    if (sqlite3_prepare_v2(db, sql.c_str(), -1, &s, nullptr) == SQLITE_OK && sqlite3_step(s) == SQLITE_ROW) {
      const auto* t = sqlite3_column_text(s, 0);
      out = t ? reinterpret_cast<const char*>(t) : "(null)";
    }
    sqlite3_finalize(s);
  }
  sqlite3_close(db);
  return out;
}

// The same for a REAL column, as the C API returns it (sqlite3_column_double): the stored binary64 value.
double sql_double(const std::string& file, const std::string& sql) {
  sqlite3* db = nullptr;
  double out = -1e300;
  if (sqlite3_open_v2(file.c_str(), &db, SQLITE_OPEN_READONLY, nullptr) == SQLITE_OK) {
    sqlite3_stmt* s = nullptr;
    if (sqlite3_prepare_v2(db, sql.c_str(), -1, &s, nullptr) == SQLITE_OK && sqlite3_step(s) == SQLITE_ROW)
      out = sqlite3_column_double(s, 0);
    sqlite3_finalize(s);
  }
  sqlite3_close(db);
  return out;
}

void sql_exec(const std::string& file, const std::string& sql) {
  sqlite3* db = nullptr;
  ASSERT_EQ(sqlite3_open_v2(file.c_str(), &db, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE, nullptr),
            SQLITE_OK);
  char* msg = nullptr;
  const int rc = sqlite3_exec(db, sql.c_str(), nullptr, nullptr, &msg);
  EXPECT_EQ(rc, SQLITE_OK) << (msg ? msg : "");
  sqlite3_free(msg);
  sqlite3_close(db);
}

std::unique_ptr<store::Store> migrated_store(const std::string& file) {
  std::string err;
  auto s = store::open_sqlite(file, store::OpenMode::migrate, err);
  EXPECT_TRUE(s) << err;
  if (!s) return nullptr;
  EXPECT_TRUE(s->migrate(err)) << err;
  s.reset();
  s = store::open_sqlite(file, store::OpenMode::use, err);
  EXPECT_TRUE(s) << err;
  return s;
}

// One sealed session folder, signed with a key made for the test: the real session state machine and record
// writer against the scripted controller, the start record as the command writes it, then the seal.
struct SessionFolder {
  std::string root, folder, vehicle, cell;
  std::optional<record::SigningKey> key;
  record::VerifyOptions verify;
  bool ready = false;  // made, sealed and verified
};

SessionFolder* g_made = nullptr;

class StoreTest : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    g_made = new SessionFolder;
    SessionFolder& m = *g_made;
    m.root = make_temp_dir("loadtrim-store-test");
    ASSERT_FALSE(m.root.empty());
    std::string err;
    record::KeyPairFiles kp;
    ASSERT_TRUE(record::create_key_pair(m.root + "/cell.key.pem", m.root + "/cell.pub.pem", &kp, err)) << err;
    m.key = record::SigningKey::load(m.root + "/cell.key.pem", err);
    ASSERT_TRUE(m.key) << err;
    m.verify.cell_keys.push_back(m.key->public_key());

    session::Inputs in;
    in.cell = config::load_cell(kSrc + "/config/cells/sim-tcp.toml", adapters::production().sections());
    in.profile = config::load_profile(kSrc + "/tests/data/wltp-iterative-short-warmup.toml");
    in.vehicle = config::load_target(kSrc + "/samples/targets/demo-hatchback.toml");
    m.vehicle = in.vehicle.id;
    m.cell = in.cell.name;
    m.folder = m.root + "/sessions/20261203T000000Z-" + m.vehicle;
    fs::create_directories(m.folder);
    session::Options o;
    o.first_setting = core::FirstSetting::standard;
    o.whole_trace_estimator = false;
    o.stop_budget_s = 120.0;
    const controller::CellConfig cell = in.cell;
    // The start record as the command writes it (src/app/session_runner.cpp), with what a test can know.
    session::ev::StartCommon common;
    common.vehicle = in.vehicle.id;
    common.cell = in.cell.name;
    common.profile = in.profile.name;
    common.dyno_checks = json{{"enforced", false}, {"why", "unit test"}};
    common.operator_id = json{{"name", "A. Tester"}, {"from", "--operator"}};
    common.data_root_path = m.root;
    common.data_root_from = "unit test";
    common.signing_key = m.key->fingerprint();
    common.confirmation = "unit test: scripted controller, nothing moves";
    common.target = in.vehicle.target;
    common.vehicle_description = in.vehicle.description;
    common.test_mass_kg = in.vehicle.test_mass_kg;
    common.standard = in.profile.standard;
    common.tolerance_n = in.profile.tolerance_n;
    common.reference_speeds_kmh = in.profile.reference_speeds_kmh;
    common.software_version = "test";
    common.software_build = "test";
    common.first_setting_requested = "standard";
    session::ev::SessionStarted started;
    started.common = common;
    started.method = "iterative";
    started.files = json::array();
    {
      loadtrim::testing::FakeController c(loadtrim::testing::demo_truth());
      session::RecordWriter writer(m.folder);
      ASSERT_TRUE(writer.ok()) << writer.error();
      ASSERT_TRUE(writer.log().set_signer(&*m.key));
      const session::Event start{started, std::nullopt, nullptr};
      ASSERT_TRUE(writer.on_event(start)) << writer.error();
      session::Session s(std::move(in), o, c, {&writer});
      const session::Summary sum = s.run();
      ASSERT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
      writer.close();
      record::SealRequest sr;
      sr.cell = cell.name;
      sr.result = writer.summary();
      sr.key = &*m.key;
      record::SealInfo info;
      ASSERT_TRUE(record::seal_folder(m.folder, sr, &info, err)) << err;
    }
    const record::FolderVerdict v = record::verify_folder(m.folder, m.verify);
    ASSERT_EQ(v.outcome, record::Outcome::verified) << v.message;
    m.ready = true;
  }
  static void TearDownTestSuite() {
    if (g_made && !g_made->root.empty()) fs::remove_all(g_made->root);
    delete g_made;
    g_made = nullptr;
  }
  void SetUp() override {
    ASSERT_NE(g_made, nullptr);
    ASSERT_TRUE(g_made->ready) << "the session folder could not be made (see the suite's set-up)";
    dir_ = make_temp_dir("loadtrim-store-case");
    ASSERT_FALSE(dir_.empty());
    file_ = dir_ + "/store.sqlite";
  }
  void TearDown() override { fs::remove_all(dir_); }
  // A copy of the session folder under this test's own folder.
  std::string copy_folder(const std::string& name) {
    const std::string to = dir_ + "/" + name;
    fs::copy(g_made->folder, to, fs::copy_options::recursive);
    return to;
  }
  std::string dir_, file_;
};

}  // namespace

// issue 19: "versioned migrations, applied by a command"; every step is a row of schema_migrations.
TEST_F(StoreTest, MigratesAnEmptyFileStepByStepAndASecondMigrateDoesNothing) {
  std::string err;
  auto s = store::open_sqlite(file_, store::OpenMode::migrate, err);
  ASSERT_TRUE(s) << err;
  EXPECT_EQ(s->schema_version(err), 0) << err;
  std::vector<std::string> applied;
  ASSERT_TRUE(s->migrate(err, &applied)) << err;
  ASSERT_EQ(static_cast<int>(applied.size()), store::known_schema_version());
  EXPECT_EQ(applied.front().rfind("1 ", 0), 0u) << applied.front();
  EXPECT_EQ(s->schema_version(err), store::known_schema_version());
  applied.clear();
  ASSERT_TRUE(s->migrate(err, &applied)) << err;
  EXPECT_TRUE(applied.empty());
  s.reset();
  // Read back with sqlite itself: one row per step, numbered 1..N without a gap.
  EXPECT_EQ(sql_value(file_, "SELECT count(*) FROM schema_migrations"),
            std::to_string(store::known_schema_version()));
  EXPECT_EQ(sql_value(file_, "SELECT min(version) || '-' || max(version) FROM schema_migrations"),
            "1-" + std::to_string(store::known_schema_version()));
  EXPECT_TRUE(store::open_sqlite(file_, store::OpenMode::use, err)) << err;
}

// issue 19: the schema is "checked at start": opening never migrates. sqlite's documented open flags: without
// SQLITE_OPEN_CREATE a missing file is not created.
TEST_F(StoreTest, OpeningAMissingStoreIsRefusedAndCreatesNothing) {
  std::string err;
  EXPECT_FALSE(store::open_sqlite(file_, store::OpenMode::use, err));
  EXPECT_NE(err.find(file_), std::string::npos) << err;
  EXPECT_NE(err.find("loadtrim store migrate"), std::string::npos) << err;
  EXPECT_FALSE(fs::exists(file_));
}

// issue 19: a store older than required is refused with a clear message, never silently migrated on open.
TEST_F(StoreTest, AnOlderSchemaIsRefusedAtOpenAndLeftAsItWas) {
  std::string err;
  {
    auto s = store::open_sqlite(file_, store::OpenMode::migrate, err);
    ASSERT_TRUE(s) << err;
    ASSERT_TRUE(s->migrate(err, nullptr, 1)) << err;
    ASSERT_EQ(s->schema_version(err), 1);
  }
  ASSERT_GT(store::known_schema_version(), 1) << "the test needs a second step";
  EXPECT_FALSE(store::open_sqlite(file_, store::OpenMode::use, err));
  EXPECT_NE(err.find("version 1"), std::string::npos) << err;
  EXPECT_NE(err.find("loadtrim store migrate"), std::string::npos) << err;
  EXPECT_EQ(sql_value(file_, "SELECT max(version) FROM schema_migrations"), "1")
      << "opening changed the schema";
}

// issue 19: a store whose version is newer than the tool knows is refused, by `use` and by `migrate` alike.
TEST_F(StoreTest, ANewerSchemaIsRefusedEvenByMigrate) {
  ASSERT_TRUE(migrated_store(file_));
  const int newer = store::known_schema_version() + 1;
  sql_exec(file_, "INSERT INTO schema_migrations (version, name, applied_utc) VALUES (" +
                      std::to_string(newer) + ", 'from a later loadtrim', '2030-01-01T00:00:00.000Z')");
  std::string err;
  EXPECT_FALSE(store::open_sqlite(file_, store::OpenMode::use, err));
  EXPECT_NE(err.find("newer than this loadtrim knows"), std::string::npos) << err;
  err.clear();
  EXPECT_FALSE(store::open_sqlite(file_, store::OpenMode::migrate, err));
  EXPECT_NE(err.find("newer"), std::string::npos) << err;
  EXPECT_EQ(sql_value(file_, "SELECT max(version) FROM schema_migrations"), std::to_string(newer));
}

// sqlite's documented result code SQLITE_NOTADB ("file is not a database") for a file that is not one; and a
// database without schema_migrations is someone else's (issue 19: a clear message).
TEST_F(StoreTest, AFileThatIsNotAStoreIsRefused) {
  write_file(file_,
             "this is a text file, not a database; it is long enough to hold a header of 100 bytes......\n");
  std::string err;
  EXPECT_FALSE(store::open_sqlite(file_, store::OpenMode::migrate, err));
  EXPECT_NE(err.find("not a database"), std::string::npos) << err;
  EXPECT_EQ(read_file(file_).rfind("this is a text file", 0), 0u) << "the file was changed";

  const std::string other = dir_ + "/other.sqlite";
  sql_exec(other, "CREATE TABLE something_else (x INTEGER)");
  err.clear();
  EXPECT_FALSE(store::open_sqlite(other, store::OpenMode::migrate, err));
  EXPECT_NE(err.find("not a loadtrim store"), std::string::npos) << err;
}

// issue 19: what an ingest stores (ids, cell, vehicle, operator, profile and method, first-setting strategy,
// result and stop reason, target, every coast-down's set and measured coefficients and per-speed deviations,
// cell time, the chain head and the seal), each compared with the folder's own files read here directly.
TEST_F(StoreTest, ASealedSessionIsIndexedWithWhatItsFolderSays) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  const store::IngestResult r = store::ingest_folder(*s, g_made->folder, g_made->verify);
  ASSERT_EQ(r.status, store::IngestStatus::indexed) << r.message;
  EXPECT_EQ(r.exit_code(), 0);
  EXPECT_EQ(r.what, "session");

  const json summary = json::parse(read_file(g_made->folder + "/summary.json"));
  const std::vector<std::string> lines = lines_of(read_file(g_made->folder + "/events.jsonl"));
  const json seal = json::parse(lines.back());
  ASSERT_EQ(seal["type"], "seal");
  std::size_t coastdowns = 0, rows = 0;
  for (const auto& l : lines) {
    const json j = json::parse(l);
    if (j["type"] == "coastdown") {
      ++coastdowns;
      if (j.contains("check")) rows += j["check"]["rows"].size();
    }
  }
  ASSERT_GT(coastdowns, 0u);

  const std::string q = "SELECT ";
  const std::string w = " FROM sessions";
  EXPECT_EQ(sql_value(file_, q + "vehicle" + w), g_made->vehicle);
  EXPECT_EQ(sql_value(file_, q + "cell" + w), g_made->cell);
  EXPECT_EQ(sql_value(file_, q + "operator" + w), "A. Tester");
  EXPECT_EQ(sql_value(file_, q + "method" + w), "iterative");
  EXPECT_EQ(sql_value(file_, q + "first_setting_strategy" + w), "standard");
  EXPECT_EQ(sql_value(file_, q + "result" + w), summary["result"].get<std::string>());
  EXPECT_EQ(sql_value(file_, q + "stop_reason" + w), summary["stop_reason"].get<std::string>());
  EXPECT_EQ(sql_value(file_, q + "name" + w), fs::path(g_made->folder).filename().string());
  EXPECT_EQ(sql_value(file_, q + "origin" + w), record::sha256_hex(lines.front()));
  EXPECT_EQ(sql_value(file_, q + "chain_head" + w), seal["chain_head"].get<std::string>());
  EXPECT_EQ(sql_value(file_, q + "seal_sha256" + w), record::sha256_hex(lines.back()));
  EXPECT_EQ(sql_value(file_, q + "signer" + w), g_made->key->fingerprint());
  EXPECT_EQ(sql_value(file_, q + "verify_outcome" + w), "verified");
  EXPECT_EQ(sql_value(file_, "SELECT count(*) FROM coastdowns"), std::to_string(coastdowns));
  EXPECT_EQ(sql_value(file_, "SELECT count(*) FROM coastdown_deviations"), std::to_string(rows));
  EXPECT_EQ(sql_value(file_, "SELECT count(*) FROM session_deviations"),
            std::to_string(summary["deviations"].size()));
  // REAL columns hold the JSON's doubles exactly (IEEE 754 binary64 both sides).
  EXPECT_EQ(sql_double(file_, "SELECT cell_time_s FROM sessions"), summary["cell_time_s"].get<double>());
  EXPECT_EQ(sql_double(file_, "SELECT final_f2_n_per_kmh2 FROM sessions"),
            summary["final_set"]["f2_n_per_kmh2"].get<double>());
  EXPECT_EQ(sql_double(file_, "SELECT target_f0_n FROM sessions"),
            json::parse(lines.front())["target"]["f0_n"].get<double>());
}

// issue 19: `history --vehicle`, `--cell`, `--since` return the indexed session with its result and final
// setting; --since is inclusive of its day (UTC), compared with record 0's time.
TEST_F(StoreTest, HistoryByVehicleCellAndSinceReturnsTheSession) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  ASSERT_EQ(store::ingest_folder(*s, g_made->folder, g_made->verify).status, store::IngestStatus::indexed);
  const json summary = json::parse(read_file(g_made->folder + "/summary.json"));
  const std::string day = json::parse(lines_of(read_file(g_made->folder + "/events.jsonl")).front())["utc"]
                              .get<std::string>()
                              .substr(0, 10);
  std::string err;
  std::vector<store::HistoryRow> rows;
  ASSERT_TRUE(s->history({g_made->vehicle, "", ""}, rows, err)) << err;
  ASSERT_EQ(rows.size(), 1u);
  EXPECT_EQ(rows[0].what, "session");
  EXPECT_EQ(rows[0].cell, g_made->cell);
  EXPECT_EQ(rows[0].result, summary["result"].get<std::string>());
  EXPECT_TRUE(rows[0].accepted);
  ASSERT_TRUE(rows[0].final_set);
  EXPECT_EQ(rows[0].final_set->f0_n, summary["final_set"]["f0_n"].get<double>());
  EXPECT_EQ(rows[0].final_set->f1_n_per_kmh, summary["final_set"]["f1_n_per_kmh"].get<double>());
  EXPECT_EQ(rows[0].coastdowns, summary["coastdowns"].get<int>());
  EXPECT_EQ(rows[0].folder, fs::absolute(g_made->folder).lexically_normal().string());

  for (const store::HistoryQuery& hit :
       {store::HistoryQuery{"", g_made->cell, ""}, store::HistoryQuery{"", "", day},
        store::HistoryQuery{g_made->vehicle, g_made->cell, day}}) {
    ASSERT_TRUE(s->history(hit, rows, err)) << err;
    EXPECT_EQ(rows.size(), 1u) << hit.vehicle << "|" << hit.cell << "|" << hit.since;
  }
  for (const store::HistoryQuery& miss :
       {store::HistoryQuery{"NO-SUCH-VEHICLE", "", ""}, store::HistoryQuery{"", "another cell", ""},
        store::HistoryQuery{"", "", "9999-12-31"}}) {
    ASSERT_TRUE(s->history(miss, rows, err)) << err;
    EXPECT_TRUE(rows.empty()) << miss.vehicle << "|" << miss.cell << "|" << miss.since;
  }
}

// issue 19: indexing the same folder again (after an approval, or moved) adds no second row.
TEST_F(StoreTest, ImportingAFolderAgainRefreshesItsRowInsteadOfAddingOne) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  ASSERT_EQ(store::ingest_folder(*s, g_made->folder, g_made->verify).status, store::IngestStatus::indexed);
  const std::string moved = copy_folder("moved");
  const store::IngestResult again = store::ingest_folder(*s, moved, g_made->verify);
  EXPECT_EQ(again.status, store::IngestStatus::refreshed) << again.message;
  EXPECT_EQ(sql_value(file_, "SELECT count(*) FROM sessions"), "1");
  EXPECT_EQ(sql_value(file_, "SELECT folder FROM sessions"), fs::absolute(moved).lexically_normal().string());
}

// issue 19 (the folder is the evidence, the store its index): the same folder (same origin) with another seal
// — cut back and sealed again — is refused (exit 5) and the indexed row is left as it was.
TEST_F(StoreTest, TheSameFolderWithAnotherSealIsRefused) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  ASSERT_EQ(store::ingest_folder(*s, g_made->folder, g_made->verify).status, store::IngestStatus::indexed);
  const std::string copy = copy_folder("resealed");
  std::vector<std::string> lines = lines_of(read_file(copy + "/events.jsonl"));
  ASSERT_EQ(json::parse(lines.back())["type"], "seal");
  lines.pop_back();
  std::string text;
  for (const auto& l : lines) text += l + "\n";
  write_file(copy + "/events.jsonl", text);
  record::SealRequest sr;
  sr.cell = g_made->cell;
  sr.result = json::parse(read_file(copy + "/summary.json"));
  sr.key = &*g_made->key;
  sr.utc = "2030-01-01T00:00:00.000Z";  // another seal line than the first
  record::SealInfo info;
  std::string err;
  ASSERT_TRUE(record::seal_folder(copy, sr, &info, err)) << err;
  ASSERT_EQ(record::verify_folder(copy, g_made->verify).outcome, record::Outcome::verified);
  const std::string indexed_seal = sql_value(file_, "SELECT seal_sha256 FROM sessions");
  ASSERT_NE(info.seal_sha256, indexed_seal);
  const store::IngestResult r = store::ingest_folder(*s, copy, g_made->verify);
  EXPECT_EQ(r.status, store::IngestStatus::broken) << r.message;
  EXPECT_EQ(r.exit_code(), 5);
  EXPECT_NE(r.message.find("another seal"), std::string::npos) << r.message;
  EXPECT_EQ(sql_value(file_, "SELECT seal_sha256 FROM sessions"), indexed_seal);
  EXPECT_EQ(sql_value(file_, "SELECT folder FROM sessions"),
            fs::absolute(g_made->folder).lexically_normal().string());
}

// issue 19: "ingest verifies the folder's seal first and refuses a folder that does not verify". One byte of
// events.jsonl changed: broken (exit 5, README's exit codes), the record named, nothing indexed.
TEST_F(StoreTest, AFolderWithOneByteOfItsLogChangedIsRefused) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  const std::string copy = copy_folder("tampered");
  std::string log = read_file(copy + "/events.jsonl");
  const std::size_t at = log.find("\"A. Tester\"");
  ASSERT_NE(at, std::string::npos);
  log[at + 1] = 'B';  // "A. Tester" -> "B. Tester" in record 0
  write_file(copy + "/events.jsonl", log);
  const store::IngestResult r = store::ingest_folder(*s, copy, g_made->verify);
  EXPECT_EQ(r.status, store::IngestStatus::broken) << r.message;
  EXPECT_EQ(r.exit_code(), 5);
  EXPECT_NE(r.message.find("broken"), std::string::npos) << r.message;
  EXPECT_NE(r.message.find("record"), std::string::npos) << r.message;
  EXPECT_EQ(sql_value(file_, "SELECT count(*) FROM sessions"), "0");
}

// issue 19 (only sealed folders are indexed): a folder whose seal is cut off is not finished: refused,
// exit 2.
TEST_F(StoreTest, AnUnfinishedFolderIsRefused) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  const std::string copy = copy_folder("unfinished");
  std::vector<std::string> lines = lines_of(read_file(copy + "/events.jsonl"));
  ASSERT_EQ(json::parse(lines.back())["type"], "seal");
  lines.pop_back();
  std::string text;
  for (const auto& l : lines) text += l + "\n";
  write_file(copy + "/events.jsonl", text);
  const store::IngestResult r = store::ingest_folder(*s, copy, g_made->verify);
  EXPECT_EQ(r.status, store::IngestStatus::refused) << r.message;
  EXPECT_EQ(r.exit_code(), 2);
  EXPECT_NE(r.message.find("not finished"), std::string::npos) << r.message;
  EXPECT_EQ(sql_value(file_, "SELECT count(*) FROM sessions"), "0");
}

// issue 19: "store check finds rows whose folders are missing or no longer verify".
TEST_F(StoreTest, StoreCheckFindsAChangedAndThenADeletedFolder) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  const std::string copy = copy_folder("indexed");
  ASSERT_EQ(store::ingest_folder(*s, copy, g_made->verify).status, store::IngestStatus::indexed);
  std::vector<store::CheckFinding> findings;
  std::size_t rows = 0;
  std::string err;
  ASSERT_TRUE(store::check_store(*s, g_made->verify, findings, rows, err)) << err;
  EXPECT_EQ(rows, 1u);
  EXPECT_TRUE(findings.empty()) << findings.front().message;

  std::string summary = read_file(copy + "/summary.json");
  summary.back() = summary.back() == ' ' ? '\t' : ' ';  // one byte of a sealed file
  write_file(copy + "/summary.json", summary);
  ASSERT_TRUE(store::check_store(*s, g_made->verify, findings, rows, err)) << err;
  ASSERT_EQ(findings.size(), 1u);
  EXPECT_EQ(findings[0].problem, "broken") << findings[0].message;

  fs::remove_all(copy);
  ASSERT_TRUE(store::check_store(*s, g_made->verify, findings, rows, err)) << err;
  ASSERT_EQ(findings.size(), 1u);
  EXPECT_EQ(findings[0].problem, "missing") << findings[0].message;
  EXPECT_NE(findings[0].message.find(fs::absolute(copy).lexically_normal().string()), std::string::npos)
      << findings[0].message;
}

// issue 19: dyno checks are indexed with their kind, cell, verdict and time. The folder is made with the
// record layer as the check runner makes one (check_started, check_finished, the seal; docs/session.md's
// members), sealed without a key: indexed, and its verify outcome kept in the row.
TEST_F(StoreTest, ADynoCheckFolderIsIndexedAndShownByCellNotByVehicle) {
  auto s = migrated_store(file_);
  ASSERT_TRUE(s);
  const std::string folder = dir_ + "/20261203T010000Z-coastdown";
  fs::create_directories(folder);
  {
    record::EventLog log(folder + "/events.jsonl");
    ASSERT_TRUE(log.append("check_started",
                           {{"check", "coastdown"},
                            {"cell", g_made->cell},
                            {"files", json::array()},
                            {"confirmation", "unit test"},
                            {"note", ""},
                            {"vehicle_on_rollers", false},
                            {"operator", {{"name", "C. Tester"}, {"from", "--operator"}}},
                            {"signing_key", "none: the folder will be sealed unsigned"}},
                           "2000-01-01T01:00:00.000Z"))
        << log.error();
    ASSERT_TRUE(log.append("check_finished",
                           {{"check", "coastdown"},
                            {"end", "passed"},
                            {"passed", true},
                            {"verdict", "pass (40 CFR 1066.270): scripted"},
                            {"files", json::array()}},
                           "2000-01-01T01:05:00.000Z"))
        << log.error();
  }
  std::string err;
  record::SealRequest sr;
  sr.cell = g_made->cell;
  sr.result = {{"check", "coastdown"}, {"passed", true}};
  record::SealInfo info;
  ASSERT_TRUE(record::seal_folder(folder, sr, &info, err)) << err;

  const store::IngestResult r = store::ingest_folder(*s, folder, record::VerifyOptions{});
  ASSERT_EQ(r.status, store::IngestStatus::indexed) << r.message;
  EXPECT_EQ(r.what, "check");
  EXPECT_EQ(
      sql_value(file_, "SELECT kind || '|' || passed || '|' || operator || '|' || started_utc FROM checks"),
      "coastdown|1|C. Tester|2000-01-01T01:00:00.000Z");
  EXPECT_EQ(sql_value(file_, "SELECT verify_outcome FROM checks"),
            record::to_string(record::Outcome::unsigned_seal));
  std::vector<store::HistoryRow> rows;
  ASSERT_TRUE(s->history({"", g_made->cell, ""}, rows, err)) << err;
  ASSERT_EQ(rows.size(), 1u);
  EXPECT_EQ(rows[0].what, "check");
  EXPECT_EQ(rows[0].detail, "pass (40 CFR 1066.270): scripted");
  ASSERT_TRUE(s->history({g_made->vehicle, "", ""}, rows, err)) << err;
  EXPECT_TRUE(rows.empty()) << "a check has no vehicle";

  // With the session of the same cell indexed too: both, newest first (issue 19's history lists every session
  // and check; the check above is dated 2000-01-01, before the session).
  ASSERT_EQ(store::ingest_folder(*s, g_made->folder, g_made->verify).status, store::IngestStatus::indexed);
  ASSERT_TRUE(s->history({"", g_made->cell, ""}, rows, err)) << err;
  ASSERT_EQ(rows.size(), 2u);
  EXPECT_GE(rows[0].utc, rows[1].utc);
  EXPECT_EQ(rows[1].what, "check");
}

// Where the store is (issue 19): --store, else [store] sqlite in the lab's system file (absolute, or relative
// to the data root), else <data root>/store.sqlite; a bad value names the file and the key.
TEST(StorePath, OptionThenLabConfigThenDataRoot) {
  const std::string cfg = "/etc/loadtrim/loadtrim.toml";
  EXPECT_EQ(store::resolve_store_path("s.sqlite", "/home/op", std::nullopt, cfg, "/data").path,
            "/home/op/s.sqlite");
  EXPECT_EQ(store::resolve_store_path("", "/x", std::string("[store]\nsqlite = \"/srv/lab.sqlite\"\n"), cfg,
                                      "/data")
                .path,
            "/srv/lab.sqlite");
  EXPECT_EQ(
      store::resolve_store_path("", "/x", std::string("[store]\nsqlite = 'idx/lab.sqlite'\n"), cfg, "/data")
          .path,
      "/data/idx/lab.sqlite");
  EXPECT_EQ(store::resolve_store_path("", "/x", std::string("data_dir = \"/data\"\n"), cfg, "/data").path,
            "/data/store.sqlite");
  EXPECT_EQ(store::resolve_store_path("", "/x", std::nullopt, cfg, "/data/").path, "/data/store.sqlite");
  const store::StorePath bad =
      store::resolve_store_path("", "/x", std::string("[store]\nsqlite = 3\n"), cfg, "/data");
  EXPECT_FALSE(bad.ok());
  EXPECT_NE(bad.error.find(cfg), std::string::npos) << bad.error;
  EXPECT_NE(bad.error.find("store.sqlite"), std::string::npos) << bad.error;
  const store::StorePath empty =
      store::resolve_store_path("", "/x", std::string("[store]\nsqlite = \"\"\n"), cfg, "/d");
  EXPECT_FALSE(empty.ok());
}

// ISO 8601 calendar dates, YYYY-MM-DD; February has 29 days in Gregorian leap years (divisible by 4, except
// centuries not divisible by 400).
TEST(StoreDate, OnlyCalendarDatesAreAccepted) {
  for (const char* ok : {"2026-12-03", "2024-02-29", "2000-02-29", "2026-01-31", "2026-04-30"})
    EXPECT_TRUE(store::is_iso_date(ok)) << ok;
  for (const char* no : {"2023-02-29", "1900-02-29", "2026-13-01", "2026-00-10", "2026-04-31", "2026-1-01",
                         "2026/01/01", "20260101", "2026-01-01T00:00", "", "yyyy-mm-dd"})
    EXPECT_FALSE(store::is_iso_date(no)) << no;
}
