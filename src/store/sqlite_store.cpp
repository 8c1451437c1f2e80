#include "store/sqlite_store.hpp"

#include <sqlite3.h>

#include <algorithm>
#include <filesystem>
#include <optional>
#include <stdexcept>
#include <utility>

#include "record/session_folder.hpp"
#include "store/schema.hpp"

namespace loadtrim::store {

namespace {

// The migrations are schema.hpp's steps, shared with the PostgreSQL engine; SQLite's dialect of them.

// Inside this file only: an SQLite call that failed, with its message. Caught at each Store method.
struct SqlError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

class Stmt {
 public:
  Stmt(sqlite3* db, const std::string& sql) : db_(db) {
    if (sqlite3_prepare_v2(db, sql.c_str(), -1, &s_, nullptr) != SQLITE_OK)
      throw SqlError(std::string("cannot prepare a statement: ") + sqlite3_errmsg(db));
  }
  ~Stmt() { sqlite3_finalize(s_); }
  Stmt(const Stmt&) = delete;
  Stmt& operator=(const Stmt&) = delete;

  Stmt& text(int i, const std::string& v) {
    return check(sqlite3_bind_text(s_, i, v.data(), static_cast<int>(v.size()), SQLITE_TRANSIENT));
  }
  Stmt& real(int i, double v) { return check(sqlite3_bind_double(s_, i, v)); }
  Stmt& integer(int i, std::int64_t v) { return check(sqlite3_bind_int64(s_, i, v)); }
  Stmt& null(int i) { return check(sqlite3_bind_null(s_, i)); }
  Stmt& real(int i, const std::optional<double>& v) { return v ? real(i, *v) : null(i); }
  Stmt& flag(int i, const std::optional<bool>& v) { return v ? integer(i, *v ? 1 : 0) : null(i); }
  // Three columns from i: the coefficients, or three NULLs.
  Stmt& road_load(int i, const std::optional<core::RoadLoad>& v) {
    if (!v) return null(i).null(i + 1).null(i + 2);
    return real(i, v->f0_n).real(i + 1, v->f1_n_per_kmh).real(i + 2, v->f2_n_per_kmh2);
  }

  // True when a row is ready, false when done.
  bool step() {
    const int rc = sqlite3_step(s_);
    if (rc == SQLITE_ROW) return true;
    if (rc == SQLITE_DONE) return false;
    throw SqlError(sqlite3_errmsg(db_));
  }
  void run() {
    while (step()) {
    }
  }
  void reset() {
    sqlite3_reset(s_);
    sqlite3_clear_bindings(s_);
  }
  bool is_null(int c) const { return sqlite3_column_type(s_, c) == SQLITE_NULL; }
  std::string col_text(int c) const {
    const auto* p = sqlite3_column_text(s_, c);
    return p ? std::string(reinterpret_cast<const char*>(p),
                           static_cast<std::size_t>(sqlite3_column_bytes(s_, c)))
             : std::string();
  }
  double col_real(int c) const { return sqlite3_column_double(s_, c); }
  std::int64_t col_int(int c) const { return sqlite3_column_int64(s_, c); }

 private:
  Stmt& check(int rc) {
    if (rc != SQLITE_OK) throw SqlError(std::string("cannot bind a value: ") + sqlite3_errmsg(db_));
    return *this;
  }
  sqlite3* db_;
  sqlite3_stmt* s_ = nullptr;
};

// The statement's current row for the engine-neutral readers of schema.hpp.
class StmtRow : public schema::ResultRow {
 public:
  explicit StmtRow(const Stmt& s) : s_(s) {}
  bool is_null(int c) const override { return s_.is_null(c); }
  std::string text(int c) const override { return s_.col_text(c); }
  std::int64_t integer(int c) const override { return s_.col_int(c); }
  double real(int c) const override { return s_.col_real(c); }

 private:
  const Stmt& s_;
};

void exec(sqlite3* db, const std::string& sql) {
  char* msg = nullptr;
  if (sqlite3_exec(db, sql.c_str(), nullptr, nullptr, &msg) != SQLITE_OK) {
    const std::string m = msg ? msg : sqlite3_errmsg(db);
    sqlite3_free(msg);
    throw SqlError(m);
  }
}

// A write transaction, rolled back unless committed. BEGIN IMMEDIATE takes the write lock at once, so a
// second writer waits (at most the busy timeout) instead of failing half-way (sqlite's documented locking).
class Transaction {
 public:
  explicit Transaction(sqlite3* db) : db_(db) { exec(db_, "BEGIN IMMEDIATE"); }
  ~Transaction() {
    if (!done_) sqlite3_exec(db_, "ROLLBACK", nullptr, nullptr, nullptr);
  }
  void commit() {
    exec(db_, "COMMIT");
    done_ = true;
  }

 private:
  sqlite3* db_;
  bool done_ = false;
};

void insert_deviations(sqlite3* db, const std::string& table, const std::string& owner_column,
                       std::int64_t owner, const std::vector<SpeedDeviation>& rows) {
  Stmt ins(db,
           "INSERT INTO " + table + " (" + owner_column +
               ", speed_kmh, target_n, measured_n, deviation_n, limit_n, u_n, pass) VALUES (?1, ?2, ?3, ?4, "
               "?5, ?6, ?7, ?8)");
  for (const auto& d : rows) {
    ins.integer(1, owner)
        .real(2, d.speed_kmh)
        .real(3, d.target_n)
        .real(4, d.measured_n)
        .real(5, d.deviation_n)
        .real(6, d.limit_n)
        .real(7, d.u_n)
        .integer(8, d.pass ? 1 : 0);
    ins.run();
    ins.reset();
  }
}

void insert_reviews(sqlite3* db, std::int64_t session, const std::vector<Review>& reviews) {
  Stmt del(db, "DELETE FROM reviews WHERE session = ?1");
  del.integer(1, session).run();
  Stmt ins(
      db,
      "INSERT INTO reviews (session, seq, reviewer, utc, statement, signature_checked) VALUES (?1, ?2, ?3, "
      "?4, ?5, ?6)");
  for (const auto& r : reviews) {
    ins.integer(1, session)
        .integer(2, static_cast<std::int64_t>(r.seq))
        .text(3, r.reviewer)
        .text(4, r.utc)
        .text(5, r.statement)
        .integer(6, r.signature_checked ? 1 : 0);
    ins.run();
    ins.reset();
  }
}

class SqliteStore final : public Store {
 public:
  SqliteStore(sqlite3* db, std::string path) : db_(db), path_(std::move(path)) {}
  ~SqliteStore() override { sqlite3_close(db_); }
  SqliteStore(const SqliteStore&) = delete;
  SqliteStore& operator=(const SqliteStore&) = delete;

  std::string engine() const override { return "sqlite"; }
  std::string location() const override { return path_; }

  int schema_version(std::string& error) override {
    try {
      return version();
    } catch (const std::exception& e) {
      error = path_ + ": " + e.what();
      return -1;
    }
  }

  bool migrate(std::string& error, std::vector<std::string>* applied, int up_to) override {
    try {
      const int target = up_to > 0 ? std::min(up_to, schema::step_count()) : schema::step_count();
      const int have = version();
      if (have > schema::step_count()) {
        error = newer_message(have);
        return false;
      }
      for (int step = have + 1; step <= target; ++step) {
        Transaction t(db_);
        exec(db_,
             "CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name TEXT NOT NULL, "
             "applied_utc TEXT NOT NULL)");
        exec(db_, schema::step_sql(step, schema::Dialect::sqlite));
        Stmt ins(db_, "INSERT INTO schema_migrations (version, name, applied_utc) VALUES (?1, ?2, ?3)");
        ins.integer(1, step).text(2, schema::step_name(step)).text(3, record::utc_now()).run();
        t.commit();
        if (applied) applied->push_back(std::to_string(step) + " " + schema::step_name(step));
      }
      return true;
    } catch (const std::exception& e) {
      error = path_ + ": migration failed, the store is left at the last step that completed: " + e.what();
      return false;
    }
  }

  bool put_session(const SessionEntry& e, PutResult& result, std::string& error) override {
    try {
      Transaction t(db_);
      if (auto existing = find("sessions", e.facts.origin)) {
        if (existing->second != e.facts.seal_sha256) {
          result = PutResult::conflict;
          return true;  // rolled back: nothing changed
        }
        refresh("sessions", existing->first, e.facts);
        insert_reviews(db_, existing->first, e.reviews);
        t.commit();
        result = PutResult::refreshed;
        return true;
      }
      Stmt ins(db_, R"SQL(INSERT INTO sessions (origin, name, folder, cell, vehicle, vehicle_description,
        operator, profile, standard, method, first_setting_requested, first_setting_strategy,
        first_setting_fallback, result, accepted, stop_reason, target_f0_n, target_f1_n_per_kmh,
        target_f2_n_per_kmh2, final_f0_n, final_f1_n_per_kmh, final_f2_n_per_kmh2, measured_f0_n,
        measured_f1_n_per_kmh, measured_f2_n_per_kmh2, tolerance_n, test_mass_kg, coastdowns, usable_coastdowns,
        iterations, cell_time_s, started_utc, sealed_utc, chain_head, seal_sha256, signer, verify_outcome,
        indexed_utc) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18,
        ?19, ?20, ?21, ?22, ?23, ?24, ?25, ?26, ?27, ?28, ?29, ?30, ?31, ?32, ?33, ?34, ?35, ?36, ?37, ?38))SQL");
      const FolderFacts& f = e.facts;
      ins.text(1, f.origin)
          .text(2, f.name)
          .text(3, f.folder)
          .text(4, f.cell)
          .text(5, e.vehicle)
          .text(6, e.vehicle_description)
          .text(7, f.operator_name)
          .text(8, e.profile)
          .text(9, e.standard)
          .text(10, e.method)
          .text(11, e.first_setting_requested)
          .text(12, e.first_setting_strategy)
          .text(13, e.first_setting_fallback)
          .text(14, e.result)
          .integer(15, e.accepted ? 1 : 0)
          .text(16, e.stop_reason)
          .road_load(17, e.target)
          .road_load(20, e.final_set)
          .road_load(23, e.measured)
          .real(26, e.tolerance_n)
          .real(27, e.test_mass_kg)
          .integer(28, e.coastdowns)
          .integer(29, e.usable_coastdowns)
          .integer(30, e.iterations)
          .real(31, e.cell_time_s)
          .text(32, f.started_utc)
          .text(33, f.sealed_utc)
          .text(34, f.chain_head)
          .text(35, f.seal_sha256)
          .text(36, f.signer)
          .text(37, f.verify_outcome)
          .text(38, record::utc_now());
      ins.run();
      const std::int64_t id = sqlite3_last_insert_rowid(db_);
      insert_deviations(db_, "session_deviations", "session", id, e.final_deviations);
      Stmt cd(db_, R"SQL(INSERT INTO coastdowns (session, seq, run, usable, unusable_reason, set_f0_n,
        set_f1_n_per_kmh, set_f2_n_per_kmh2, measured_f0_n, measured_f1_n_per_kmh, measured_f2_n_per_kmh2, passed,
        worst_abs_deviation_n, cell_time_s) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13,
        ?14))SQL");
      for (const auto& c : e.coastdown_records) {
        cd.integer(1, id)
            .integer(2, static_cast<std::int64_t>(c.seq))
            .integer(3, c.run)
            .integer(4, c.usable ? 1 : 0)
            .text(5, c.unusable_reason)
            .road_load(6, c.set)
            .road_load(9, c.measured)
            .flag(12, c.passed)
            .real(13, c.worst_abs_deviation_n)
            .real(14, c.cell_time_s);
        cd.run();
        cd.reset();
        insert_deviations(db_, "coastdown_deviations", "coastdown", sqlite3_last_insert_rowid(db_),
                          c.deviations);
      }
      insert_reviews(db_, id, e.reviews);
      t.commit();
      result = PutResult::indexed;
      return true;
    } catch (const std::exception& ex) {
      error = path_ + ": cannot index " + e.facts.folder + ": " + ex.what();
      return false;
    }
  }

  bool put_check(const CheckEntry& e, PutResult& result, std::string& error) override {
    try {
      Transaction t(db_);
      if (auto existing = find("checks", e.facts.origin)) {
        if (existing->second != e.facts.seal_sha256) {
          result = PutResult::conflict;
          return true;
        }
        refresh("checks", existing->first, e.facts);
        t.commit();
        result = PutResult::refreshed;
        return true;
      }
      Stmt ins(db_, R"SQL(INSERT INTO checks (origin, name, folder, cell, kind, end_state, passed, verdict,
        operator, started_utc, sealed_utc, chain_head, seal_sha256, signer, verify_outcome, indexed_utc)
        VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16))SQL");
      const FolderFacts& f = e.facts;
      ins.text(1, f.origin)
          .text(2, f.name)
          .text(3, f.folder)
          .text(4, f.cell)
          .text(5, e.kind)
          .text(6, e.end)
          .integer(7, e.passed ? 1 : 0)
          .text(8, e.verdict)
          .text(9, f.operator_name)
          .text(10, f.started_utc)
          .text(11, f.sealed_utc)
          .text(12, f.chain_head)
          .text(13, f.seal_sha256)
          .text(14, f.signer)
          .text(15, f.verify_outcome)
          .text(16, record::utc_now());
      ins.run();
      t.commit();
      result = PutResult::indexed;
      return true;
    } catch (const std::exception& ex) {
      error = path_ + ": cannot index " + e.facts.folder + ": " + ex.what();
      return false;
    }
  }

  bool history(const HistoryQuery& q, std::vector<HistoryRow>& rows, std::string& error) override {
    try {
      rows.clear();
      // Only fixed clauses go into the SQL; every value the user gave is a bound parameter.
      std::string where = " WHERE 1 = 1";
      if (!q.cell.empty()) where += " AND s.cell = ?1";
      if (!q.since.empty()) where += " AND s.started_utc >= ?2";
      {
        Stmt s(db_,
               std::string("SELECT ") + schema::kHistorySessionColumns +
                   ", (SELECT group_concat(r.reviewer, ', ') FROM reviews r WHERE r.session = s.id) FROM "
                   "sessions s" +
                   where + (q.vehicle.empty() ? "" : " AND s.vehicle = ?3") + " ORDER BY s.started_utc DESC");
        if (!q.cell.empty()) s.text(1, q.cell);
        if (!q.since.empty()) s.text(2, q.since);
        if (!q.vehicle.empty()) s.text(3, q.vehicle);
        const StmtRow row(s);
        while (s.step()) rows.push_back(schema::history_session_row(row));
      }
      if (q.vehicle.empty()) {  // a check has no vehicle
        Stmt s(db_, std::string("SELECT ") + schema::kHistoryCheckColumns + " FROM checks s" + where +
                        " ORDER BY s.started_utc DESC");
        if (!q.cell.empty()) s.text(1, q.cell);
        if (!q.since.empty()) s.text(2, q.since);
        const StmtRow row(s);
        while (s.step()) rows.push_back(schema::history_check_row(row));
      }
      std::stable_sort(rows.begin(), rows.end(),
                       [](const HistoryRow& a, const HistoryRow& b) { return a.utc > b.utc; });
      return true;
    } catch (const std::exception& e) {
      error = path_ + ": " + e.what();
      return false;
    }
  }

  bool folders(std::vector<IndexedFolder>& rows, std::string& error) override {
    try {
      rows.clear();
      for (const char* table : {"sessions", "checks"}) {
        Stmt s(db_, std::string("SELECT folder, origin, seal_sha256, verify_outcome FROM ") + table +
                        " ORDER BY started_utc");
        while (s.step())
          rows.push_back({std::string(table) == "sessions" ? "session" : "check", s.col_text(0),
                          s.col_text(1), s.col_text(2), s.col_text(3)});
      }
      return true;
    } catch (const std::exception& e) {
      error = path_ + ": " + e.what();
      return false;
    }
  }

  // --- the history first setting (docs/store.md, "The history first setting") ---
  bool accepted_sessions(const std::string& vehicle, std::vector<AcceptedSession>& rows,
                         std::string& error) override {
    try {
      rows.clear();
      Stmt s(db_, schema::accepted_sessions_sql("?1"));
      s.text(1, vehicle);
      const StmtRow row(s);
      while (s.step()) rows.push_back(schema::accepted_session_row(row));
      return true;
    } catch (const std::exception& e) {
      error = path_ + ": " + e.what();
      return false;
    }
  }
  bool cell_pairs(const std::string& cell_a, const std::string& cell_b, std::vector<CellPairRow>& rows,
                  std::string& error) override {
    try {
      rows.clear();
      if (cell_a == cell_b) return true;
      Stmt s(db_, schema::cell_pairs_sql("?1", "?2"));
      s.text(1, cell_a).text(2, cell_b);
      const StmtRow row(s);
      std::vector<AcceptedSession> found;
      while (s.step()) found.push_back(schema::accepted_session_row(row));
      rows = schema::pair_rows(found, cell_a, cell_b);
      return true;
    } catch (const std::exception& e) {
      error = path_ + ": " + e.what();
      return false;
    }
  }

  // The version, as read from schema_migrations; 0 for an empty file. Throws SqlError for a file that is
  // not a loadtrim store.
  int version() {
    Stmt t(db_, "SELECT count(*), sum(name = 'schema_migrations') FROM sqlite_master WHERE type = 'table'");
    t.step();
    const std::int64_t tables = t.col_int(0);
    const bool has_migrations = !t.is_null(1) && t.col_int(1) > 0;
    if (!has_migrations) {
      if (tables > 0)
        throw SqlError(
            "holds tables but no schema_migrations: it is not a loadtrim store (give another file)");
      return 0;
    }
    Stmt v(db_, "SELECT coalesce(max(version), 0) FROM schema_migrations");
    v.step();
    return static_cast<int>(v.col_int(0));
  }

  std::string newer_message(int have) const {
    return path_ + ": the store's schema is version " + std::to_string(have) +
           ", newer than this loadtrim knows (up to " + std::to_string(schema::step_count()) +
           "): use the loadtrim that migrated it, or a newer one; nothing was changed";
  }

  // --- the lab overview (schema step 3; docs/store.md "The lab overview") ---
  bool note_running(const RunningEntry& e, bool& noted, std::string& error) override {
    try {
      Transaction t(db_);
      // Every value is a bound parameter. Not noted when the folder is indexed already (a start entry
      // drained after its end's); noted again (a resume) its start, page and time are the new ones (ON
      // CONFLICT: sqlite's upsert, which needs the WHERE).
      Stmt ins(db_, R"SQL(INSERT INTO running (folder, what, name, cell, vehicle, kind, started_utc, live_url,
        noted_utc) SELECT ?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9 WHERE NOT EXISTS (SELECT 1 FROM sessions WHERE
        folder = ?1) AND NOT EXISTS (SELECT 1 FROM checks WHERE folder = ?1) ON CONFLICT (folder) DO UPDATE
        SET started_utc = excluded.started_utc, live_url = excluded.live_url, noted_utc = excluded.noted_utc)SQL");
      ins.text(1, e.folder)
          .text(2, e.what)
          .text(3, e.name)
          .text(4, e.cell)
          .text(5, e.vehicle)
          .text(6, e.kind)
          .text(7, e.started_utc)
          .text(8, e.live_url)
          .text(9, record::utc_now());
      ins.run();
      noted = sqlite3_changes(db_) > 0;
      t.commit();
      return true;
    } catch (const std::exception& ex) {
      error = path_ + ": cannot note " + e.folder + " as running: " + ex.what();
      return false;
    }
  }

  bool clear_running(const std::string& folder, std::string& error) override {
    try {
      Transaction t(db_);
      Stmt del(db_, "DELETE FROM running WHERE folder = ?1");
      del.text(1, folder).run();
      t.commit();
      return true;
    } catch (const std::exception& ex) {
      error = path_ + ": cannot clear the running row of " + folder + ": " + ex.what();
      return false;
    }
  }

  bool overview(std::vector<CellOverview>& cells, std::string& error) override {
    try {
      std::vector<LatestRow> sessions, checks;
      std::vector<RunningEntry> running;
      // One read transaction: the three answers are of one state of the file.
      exec(db_, "BEGIN");
      struct End {
        sqlite3* db;
        ~End() { sqlite3_exec(db, "COMMIT", nullptr, nullptr, nullptr); }
      } end{db_};
      {
        Stmt s(db_, schema::kLatestSessionSql);
        const StmtRow row(s);
        while (s.step()) sessions.push_back(schema::latest_row(row, "session"));
      }
      {
        Stmt s(db_, schema::kLatestCheckSql);
        const StmtRow row(s);
        while (s.step()) checks.push_back(schema::latest_row(row, "check"));
      }
      {
        Stmt s(db_, schema::kRunningSql);
        const StmtRow row(s);
        while (s.step()) running.push_back(schema::running_row(row));
      }
      cells = schema::assemble_overview(sessions, checks, running);
      return true;
    } catch (const std::exception& e) {
      error = path_ + ": " + e.what();
      return false;
    }
  }

 private:
  // The row id and seal of the folder with this origin, if indexed.
  std::optional<std::pair<std::int64_t, std::string>> find(const std::string& table,
                                                           const std::string& origin) {
    Stmt s(db_, "SELECT id, seal_sha256 FROM " + table + " WHERE origin = ?1");
    s.text(1, origin);
    if (!s.step()) return std::nullopt;
    return std::make_pair(s.col_int(0), s.col_text(1));
  }
  void refresh(const std::string& table, std::int64_t id, const FolderFacts& f) {
    Stmt u(db_, "UPDATE " + table + " SET folder = ?1, verify_outcome = ?2, indexed_utc = ?3 WHERE id = ?4");
    u.text(1, f.folder).text(2, f.verify_outcome).text(3, record::utc_now()).integer(4, id).run();
  }

  sqlite3* db_;
  std::string path_;
};

}  // namespace

std::unique_ptr<Store> open_sqlite(const std::string& path, OpenMode mode, std::string& error,
                                   int busy_timeout_ms) {
  std::error_code ec;
  const bool exists = std::filesystem::exists(path, ec);
  if (mode == OpenMode::use && !exists) {
    error = path + ": no store there; create it with `loadtrim store migrate` (nothing was changed)";
    return nullptr;
  }
  if (exists && !std::filesystem::is_regular_file(path, ec)) {
    error = path + ": is not a regular file; the store must be an SQLite database file";
    return nullptr;
  }
  sqlite3* db = nullptr;
  const int flags = SQLITE_OPEN_READWRITE | (mode == OpenMode::migrate ? SQLITE_OPEN_CREATE : 0);
  if (sqlite3_open_v2(path.c_str(), &db, flags, nullptr) != SQLITE_OK) {
    error = path + ": cannot open the store: " + (db ? sqlite3_errmsg(db) : "out of memory");
    sqlite3_close(db);
    return nullptr;
  }
  sqlite3_busy_timeout(db, busy_timeout_ms);
  sqlite3_extended_result_codes(db, 1);
  auto store = std::make_unique<SqliteStore>(db, path);
  try {
    // Foreign keys are off by default in SQLite and set per connection (sqlite's documented behaviour).
    exec(db, "PRAGMA foreign_keys = ON");
    const int have = store->version();
    if (have > schema::step_count()) {
      error = store->newer_message(have);
      return nullptr;
    }
    if (mode == OpenMode::use && have < schema::step_count()) {
      error = path + ": the store's schema is version " + std::to_string(have) + "; this loadtrim needs " +
              std::to_string(schema::step_count()) +
              ": run `loadtrim store migrate` first (nothing was changed)";
      return nullptr;
    }
  } catch (const std::exception& e) {
    // "file is not a database" (SQLITE_NOTADB) arrives here, from the first statement that reads the file.
    error = path + ": " + e.what();
    return nullptr;
  }
  return store;
}

}  // namespace loadtrim::store
