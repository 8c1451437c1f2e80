#include "store/pg_store.hpp"

#include <libpq-fe.h>
#include <poll.h>

#include <algorithm>
#include <cerrno>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <optional>
#include <stdexcept>
#include <utility>
#include <vector>

#include "record/session_folder.hpp"
#include "store/schema.hpp"

namespace loadtrim::store {

namespace {

using Clock = std::chrono::steady_clock;

// Inside this file only: a libpq call or a statement that failed, with the server's message. Caught at each
// Store method and turned into a sentence naming the server.
struct PgError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

// libpq's messages end with a line break and may hold several lines: one line for ours.
std::string one_line(std::string m) {
  while (!m.empty() && (m.back() == '\n' || m.back() == ' ')) m.pop_back();
  for (char& c : m)
    if (c == '\n' || c == '\t') c = ' ';
  return m;
}

// The parsed connection string (PQconninfoParse), freed on scope exit.
struct ConninfoOptions {
  PQconninfoOption* options = nullptr;
  std::string error;
  explicit ConninfoOptions(const std::string& conninfo) {
    char* msg = nullptr;
    options = PQconninfoParse(conninfo.c_str(), &msg);
    if (!options) error = msg ? one_line(msg) : "out of memory";
    if (msg) PQfreemem(msg);
  }
  ~ConninfoOptions() {
    if (options) PQconninfoFree(options);
  }
  ConninfoOptions(const ConninfoOptions&) = delete;
  ConninfoOptions& operator=(const ConninfoOptions&) = delete;
  std::optional<std::string> get(const char* keyword) const {
    for (const PQconninfoOption* o = options; o && o->keyword; ++o)
      if (std::strcmp(o->keyword, keyword) == 0 && o->val && *o->val) return std::string(o->val);
    return std::nullopt;
  }
};

std::string env_or(const char* name, const std::string& fallback) {
  const char* v = std::getenv(name);
  return v && *v ? std::string(v) : fallback;
}

// Values go to the server as text in the order they are added: $1, $2, ... A double is written with 17
// significant digits, which reads back as the same IEEE 754 binary64 value (the format's round-trip
// precision).
class Params {
 public:
  Params& text(const std::string& v) {
    values_.emplace_back(v);
    return *this;
  }
  Params& real(double v) {
    char buf[40];
    std::snprintf(buf, sizeof buf, "%.17g", v);
    values_.emplace_back(buf);
    return *this;
  }
  Params& integer(std::int64_t v) {
    values_.emplace_back(std::to_string(v));
    return *this;
  }
  Params& null() {
    values_.emplace_back(std::nullopt);
    return *this;
  }
  Params& real(const std::optional<double>& v) { return v ? real(*v) : null(); }
  Params& flag(const std::optional<bool>& v) { return v ? integer(*v ? 1 : 0) : null(); }
  Params& road_load(const std::optional<core::RoadLoad>& v) {
    if (!v) return null().null().null();
    return real(v->f0_n).real(v->f1_n_per_kmh).real(v->f2_n_per_kmh2);
  }
  const std::vector<std::optional<std::string>>& values() const { return values_; }

 private:
  std::vector<std::optional<std::string>> values_;
};

// A query's result rows, read as text (libpq's text format).
class Rows {
 public:
  explicit Rows(PGresult* r) : r_(r, &PQclear) {}
  int size() const { return PQntuples(r_.get()); }
  bool is_null(int row, int col) const { return PQgetisnull(r_.get(), row, col) != 0; }
  std::string text(int row, int col) const {
    return std::string(PQgetvalue(r_.get(), row, col),
                       static_cast<std::size_t>(PQgetlength(r_.get(), row, col)));
  }
  std::int64_t integer(int row, int col) const {
    return std::strtoll(PQgetvalue(r_.get(), row, col), nullptr, 10);
  }
  // float8's text output is the shortest text that reads back as the same binary64 value (extra_float_digits
  // > 0, set at connection), so strtod returns the stored double exactly.
  double real(int row, int col) const { return std::strtod(PQgetvalue(r_.get(), row, col), nullptr); }

 private:
  std::unique_ptr<PGresult, decltype(&PQclear)> r_;
};

// Row `i` of a result for the engine-neutral readers of schema.hpp.
class RowOf : public schema::ResultRow {
 public:
  RowOf(const Rows& r, int i) : r_(r), i_(i) {}
  bool is_null(int c) const override { return r_.is_null(i_, c); }
  std::string text(int c) const override { return r_.text(i_, c); }
  std::int64_t integer(int c) const override { return r_.integer(i_, c); }
  double real(int c) const override { return r_.real(i_, c); }

 private:
  const Rows& r_;
  int i_;
};

// Serialises `store migrate` runs on one database (pg_advisory_xact_lock's key; any constant of our own).
constexpr const char* kMigrateLockKey = "4207191901";

class PgStore final : public Store {
 public:
  PgStore(PGconn* c, std::string where, const PgTimeouts& t) : c_(c), where_(std::move(where)), t_(t) {}
  ~PgStore() override { close(); }
  PgStore(const PgStore&) = delete;
  PgStore& operator=(const PgStore&) = delete;

  std::string engine() const override { return "postgresql"; }
  std::string location() const override { return where_; }

  // The session's settings: the statement deadline, exact doubles, no notices on our standard error.
  void configure() {
    run("SELECT set_config('statement_timeout', $1, false), set_config('extra_float_digits', '3', false), "
        "set_config('client_min_messages', 'warning', false)",
        Params().text(std::to_string(t_.statement_timeout_ms)));
    Rows s = run("SELECT current_schema()");
    schema_ = s.is_null(0, 0) ? std::string() : s.text(0, 0);
    if (!schema_.empty() && schema_ != "public") where_ += " (schema " + schema_ + ")";
  }

  // A text of statements without parameters, for pg_bench_schema (whose names are checked there).
  void run_script(const std::string& sql) { script(sql); }

  int schema_version(std::string& error) override {
    try {
      return version();
    } catch (const std::exception& e) {
      error = where_ + ": " + e.what();
      return -1;
    }
  }

  bool migrate(std::string& error, std::vector<std::string>* applied, int up_to) override {
    try {
      const int known = schema::step_count();
      const int target = up_to > 0 ? std::min(up_to, known) : known;
      const int have = version();
      if (have > known) {
        error = newer_message(have);
        return false;
      }
      if (schema_.empty())
        throw PgError(
            "the connection's search_path names no schema that exists, so there is nowhere to create the "
            "store "
            "(create the schema, or name an existing one with options=-csearch_path=NAME)");
      for (int step = have + 1; step <= target; ++step) {
        // PostgreSQL's DDL is transactional: the step and its schema_migrations row commit together or not at
        // all. The advisory lock makes a second `store migrate` on the same database wait (at most the
        // statement timeout) and then find the step applied.
        Transaction t(*this);
        run("SELECT pg_advisory_xact_lock($1::bigint)", Params().text(kMigrateLockKey));
        if (version() >= step) {
          t.commit();
          continue;
        }
        run("CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name TEXT NOT NULL, "
            "applied_utc TEXT NOT NULL)");
        script(schema::step_sql(step, schema::Dialect::postgresql));
        run("INSERT INTO schema_migrations (version, name, applied_utc) VALUES ($1, $2, $3)",
            Params().integer(step).text(schema::step_name(step)).text(record::utc_now()));
        t.commit();
        if (applied) applied->push_back(std::to_string(step) + " " + schema::step_name(step));
      }
      return true;
    } catch (const std::exception& e) {
      error = where_ + ": migration failed, the store is left at the last step that completed: " + e.what();
      return false;
    }
  }

  bool put_session(const SessionEntry& e, PutResult& result, std::string& error) override {
    try {
      Transaction t(*this);
      lock_origin(e.facts.origin);
      if (auto existing = find("sessions", e.facts.origin)) {
        if (existing->second != e.facts.seal_sha256) {
          result = PutResult::conflict;
          return true;  // rolled back: nothing changed
        }
        refresh("sessions", existing->first, e.facts);
        insert_reviews(existing->first, e.reviews);
        t.commit();
        result = PutResult::refreshed;
        return true;
      }
      const FolderFacts& f = e.facts;
      Params p;
      p.text(f.origin)
          .text(f.name)
          .text(f.folder)
          .text(f.cell)
          .text(e.vehicle)
          .text(e.vehicle_description)
          .text(f.operator_name)
          .text(e.profile)
          .text(e.standard)
          .text(e.method)
          .text(e.first_setting_requested)
          .text(e.first_setting_strategy)
          .text(e.first_setting_fallback)
          .text(e.result)
          .integer(e.accepted ? 1 : 0)
          .text(e.stop_reason)
          .road_load(e.target)
          .road_load(e.final_set)
          .road_load(e.measured)
          .real(e.tolerance_n)
          .real(e.test_mass_kg)
          .integer(e.coastdowns)
          .integer(e.usable_coastdowns)
          .integer(e.iterations)
          .real(e.cell_time_s)
          .text(f.started_utc)
          .text(f.sealed_utc)
          .text(f.chain_head)
          .text(f.seal_sha256)
          .text(f.signer)
          .text(f.verify_outcome)
          .text(record::utc_now());
      // PostgreSQL hands the new row's id back with RETURNING (SQLite's engine asks
      // sqlite3_last_insert_rowid).
      Rows r = run(R"SQL(INSERT INTO sessions (origin, name, folder, cell, vehicle, vehicle_description,
        operator, profile, standard, method, first_setting_requested, first_setting_strategy,
        first_setting_fallback, result, accepted, stop_reason, target_f0_n, target_f1_n_per_kmh,
        target_f2_n_per_kmh2, final_f0_n, final_f1_n_per_kmh, final_f2_n_per_kmh2, measured_f0_n,
        measured_f1_n_per_kmh, measured_f2_n_per_kmh2, tolerance_n, test_mass_kg, coastdowns, usable_coastdowns,
        iterations, cell_time_s, started_utc, sealed_utc, chain_head, seal_sha256, signer, verify_outcome,
        indexed_utc) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18,
        $19, $20, $21, $22, $23, $24, $25, $26, $27, $28, $29, $30, $31, $32, $33, $34, $35, $36, $37, $38)
        RETURNING id)SQL",
                   p);
      const std::int64_t id = r.integer(0, 0);
      insert_deviations("session_deviations", "session", id, e.final_deviations);
      for (const auto& c : e.coastdown_records) {
        Params cp;
        cp.integer(id)
            .integer(static_cast<std::int64_t>(c.seq))
            .integer(c.run)
            .integer(c.usable ? 1 : 0)
            .text(c.unusable_reason)
            .road_load(c.set)
            .road_load(c.measured)
            .flag(c.passed)
            .real(c.worst_abs_deviation_n)
            .real(c.cell_time_s);
        Rows cr = run(R"SQL(INSERT INTO coastdowns (session, seq, run, usable, unusable_reason, set_f0_n,
        set_f1_n_per_kmh, set_f2_n_per_kmh2, measured_f0_n, measured_f1_n_per_kmh, measured_f2_n_per_kmh2, passed,
        worst_abs_deviation_n, cell_time_s) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14)
        RETURNING id)SQL",
                      cp);
        insert_deviations("coastdown_deviations", "coastdown", cr.integer(0, 0), c.deviations);
      }
      insert_reviews(id, e.reviews);
      t.commit();
      result = PutResult::indexed;
      return true;
    } catch (const std::exception& ex) {
      error = where_ + ": cannot index " + e.facts.folder + ": " + ex.what();
      return false;
    }
  }

  bool put_check(const CheckEntry& e, PutResult& result, std::string& error) override {
    try {
      Transaction t(*this);
      lock_origin(e.facts.origin);
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
      const FolderFacts& f = e.facts;
      run(R"SQL(INSERT INTO checks (origin, name, folder, cell, kind, end_state, passed, verdict,
        operator, started_utc, sealed_utc, chain_head, seal_sha256, signer, verify_outcome, indexed_utc)
        VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16))SQL",
          Params()
              .text(f.origin)
              .text(f.name)
              .text(f.folder)
              .text(f.cell)
              .text(e.kind)
              .text(e.end)
              .integer(e.passed ? 1 : 0)
              .text(e.verdict)
              .text(f.operator_name)
              .text(f.started_utc)
              .text(f.sealed_utc)
              .text(f.chain_head)
              .text(f.seal_sha256)
              .text(f.signer)
              .text(f.verify_outcome)
              .text(record::utc_now()));
      t.commit();
      result = PutResult::indexed;
      return true;
    } catch (const std::exception& ex) {
      error = where_ + ": cannot index " + e.facts.folder + ": " + ex.what();
      return false;
    }
  }

  // --- the history first setting (docs/store.md, "The history first setting") ---
  bool accepted_sessions(const std::string& vehicle, std::vector<AcceptedSession>& rows,
                         std::string& error) override {
    try {
      rows.clear();
      Rows s = run(schema::accepted_sessions_sql("$1"), Params().text(vehicle));
      for (int i = 0; i < s.size(); ++i) rows.push_back(schema::accepted_session_row(RowOf(s, i)));
      return true;
    } catch (const std::exception& e) {
      error = where_ + ": " + e.what();
      return false;
    }
  }
  bool cell_pairs(const std::string& cell_a, const std::string& cell_b, std::vector<CellPairRow>& rows,
                  std::string& error) override {
    try {
      rows.clear();
      if (cell_a == cell_b) return true;
      Rows s = run(schema::cell_pairs_sql("$1", "$2"), Params().text(cell_a).text(cell_b));
      std::vector<AcceptedSession> found;
      for (int i = 0; i < s.size(); ++i) found.push_back(schema::accepted_session_row(RowOf(s, i)));
      rows = schema::pair_rows(found, cell_a, cell_b);
      return true;
    } catch (const std::exception& e) {
      error = where_ + ": " + e.what();
      return false;
    }
  }

  bool history(const HistoryQuery& q, std::vector<HistoryRow>& rows, std::string& error) override {
    try {
      rows.clear();
      // Only fixed clauses go into the SQL; every value the user gave is a bound parameter. PostgreSQL must
      // know every parameter's type, so the numbers follow the clauses present (SQLite's engine leaves gaps).
      Params p;
      std::string where = " WHERE 1 = 1";
      int n = 0;
      if (!q.cell.empty()) {
        where += " AND s.cell = $" + std::to_string(++n);
        p.text(q.cell);
      }
      if (!q.since.empty()) {
        where += " AND s.started_utc >= $" + std::to_string(++n);
        p.text(q.since);
      }
      {
        Params sp = p;
        std::string w = where;
        if (!q.vehicle.empty()) {
          w += " AND s.vehicle = $" + std::to_string(n + 1);
          sp.text(q.vehicle);
        }
        // string_agg ... ORDER BY: PostgreSQL's aggregate for SQLite's group_concat, here in approval order.
        Rows s =
            run(std::string("SELECT ") + schema::kHistorySessionColumns +
                    ", (SELECT string_agg(r.reviewer, ', ' ORDER BY r.seq) FROM reviews r WHERE r.session = "
                    "s.id) FROM sessions s" +
                    w + " ORDER BY s.started_utc DESC",
                sp);
        for (int i = 0; i < s.size(); ++i) rows.push_back(schema::history_session_row(RowOf(s, i)));
      }
      if (q.vehicle.empty()) {  // a check has no vehicle
        Rows s = run(std::string("SELECT ") + schema::kHistoryCheckColumns + " FROM checks s" + where +
                         " ORDER BY s.started_utc DESC",
                     p);
        for (int i = 0; i < s.size(); ++i) rows.push_back(schema::history_check_row(RowOf(s, i)));
      }
      std::stable_sort(rows.begin(), rows.end(),
                       [](const HistoryRow& a, const HistoryRow& b) { return a.utc > b.utc; });
      return true;
    } catch (const std::exception& e) {
      error = where_ + ": " + e.what();
      return false;
    }
  }

  bool folders(std::vector<IndexedFolder>& rows, std::string& error) override {
    try {
      rows.clear();
      for (const char* table : {"sessions", "checks"}) {
        Rows s = run(std::string("SELECT folder, origin, seal_sha256, verify_outcome FROM ") + table +
                     " ORDER BY started_utc");
        for (int i = 0; i < s.size(); ++i)
          rows.push_back({std::string(table) == "sessions" ? "session" : "check", s.text(i, 0), s.text(i, 1),
                          s.text(i, 2), s.text(i, 3)});
      }
      return true;
    } catch (const std::exception& e) {
      error = where_ + ": " + e.what();
      return false;
    }
  }

  // The version, from schema_migrations in the current schema; 0 when the schema holds no table (or none
  // exists). Throws PgError for a schema whose tables are someone else's.
  int version() {
    // pg_class, not information_schema: the latter lists only the tables this role may use.
    Rows t = run(
        "SELECT count(*), count(*) FILTER (WHERE c.relname = 'schema_migrations') FROM pg_catalog.pg_class c "
        "WHERE c.relnamespace = to_regnamespace(current_schema()) AND c.relkind IN ('r', 'p')");
    const std::int64_t tables = t.integer(0, 0);
    const bool has_migrations = t.integer(0, 1) > 0;
    if (!has_migrations) {
      if (tables > 0)
        throw PgError(
            "holds tables but no schema_migrations: it is not a loadtrim store (give another database "
            "or schema)");
      return 0;
    }
    Rows v = run("SELECT coalesce(max(version), 0) FROM schema_migrations");
    return static_cast<int>(v.integer(0, 0));
  }

  std::string newer_message(int have) const {
    return where_ + ": the store's schema is version " + std::to_string(have) +
           ", newer than this loadtrim knows (up to " + std::to_string(schema::step_count()) +
           "): use the loadtrim that migrated it, or a newer one; nothing was changed";
  }

  // --- the lab overview (schema step 3; docs/store.md "The lab overview") ---
  bool note_running(const RunningEntry& e, bool& noted, std::string& error) override {
    try {
      // Every value is a bound parameter; CAST gives each its type (PostgreSQL must know it, and a parameter
      // in a select list has none). Not noted when the folder is indexed already; noted again (a resume),
      // its start, page and time are the new ones.
      Rows r = run(R"SQL(INSERT INTO running (folder, what, name, cell, vehicle, kind, started_utc, live_url,
        noted_utc) SELECT CAST($1 AS TEXT), CAST($2 AS TEXT), CAST($3 AS TEXT), CAST($4 AS TEXT),
        CAST($5 AS TEXT), CAST($6 AS TEXT), CAST($7 AS TEXT), CAST($8 AS TEXT), CAST($9 AS TEXT)
        WHERE NOT EXISTS (SELECT 1 FROM sessions WHERE folder = CAST($1 AS TEXT)) AND NOT EXISTS
        (SELECT 1 FROM checks WHERE folder = CAST($1 AS TEXT)) ON CONFLICT (folder) DO UPDATE
        SET started_utc = excluded.started_utc, live_url = excluded.live_url, noted_utc = excluded.noted_utc
        RETURNING folder)SQL",
                   Params()
                       .text(e.folder)
                       .text(e.what)
                       .text(e.name)
                       .text(e.cell)
                       .text(e.vehicle)
                       .text(e.kind)
                       .text(e.started_utc)
                       .text(e.live_url)
                       .text(record::utc_now()));
      noted = r.size() > 0;
      return true;
    } catch (const std::exception& ex) {
      error = where_ + ": cannot note " + e.folder + " as running: " + ex.what();
      return false;
    }
  }

  bool clear_running(const std::string& folder, std::string& error) override {
    try {
      run("DELETE FROM running WHERE folder = $1", Params().text(folder));
      return true;
    } catch (const std::exception& ex) {
      error = where_ + ": cannot clear the running row of " + folder + ": " + ex.what();
      return false;
    }
  }

  bool overview(std::vector<CellOverview>& cells, std::string& error) override {
    try {
      std::vector<LatestRow> sessions, checks;
      std::vector<RunningEntry> running;
      // One snapshot for the three answers (REPEATABLE READ: every statement sees the transaction's start).
      run("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY");
      struct End {
        PgStore& s;
        ~End() {
          try {
            if (s.c_) s.run("COMMIT");
          } catch (const std::exception&) {  // a read-only transaction: nothing to lose
          }
        }
      } end{*this};
      {
        Rows r = run(schema::kLatestSessionSql);
        for (int i = 0; i < r.size(); ++i) sessions.push_back(schema::latest_row(RowOf(r, i), "session"));
      }
      {
        Rows r = run(schema::kLatestCheckSql);
        for (int i = 0; i < r.size(); ++i) checks.push_back(schema::latest_row(RowOf(r, i), "check"));
      }
      {
        Rows r = run(schema::kRunningSql);
        for (int i = 0; i < r.size(); ++i) running.push_back(schema::running_row(RowOf(r, i)));
      }
      cells = schema::assemble_overview(sessions, checks, running);
      return true;
    } catch (const std::exception& e) {
      error = where_ + ": " + e.what();
      return false;
    }
  }

 private:
  // A transaction, rolled back unless committed.
  class Transaction {
   public:
    explicit Transaction(PgStore& s) : s_(s) { s_.run("BEGIN"); }
    ~Transaction() {
      if (done_ || !s_.c_) return;
      try {
        s_.run("ROLLBACK");
      } catch (const std::exception&) {
        s_.close();  // the connection is in an unknown state: no further use
      }
    }
    Transaction(const Transaction&) = delete;
    Transaction& operator=(const Transaction&) = delete;
    void commit() {
      s_.run("COMMIT");
      done_ = true;
    }

   private:
    PgStore& s_;
    bool done_ = false;
  };

  void close() {
    if (c_) PQfinish(c_);
    c_ = nullptr;
  }

  // One statement with its parameters, sent and awaited with a deadline.
  Rows run(const std::string& sql, const Params& p = Params()) {
    if (!c_) throw PgError("the connection was closed after an earlier failure");
    std::vector<const char*> values;
    for (const auto& v : p.values()) values.push_back(v ? v->c_str() : nullptr);
    if (!PQsendQueryParams(c_, sql.c_str(), static_cast<int>(values.size()), nullptr, values.data(), nullptr,
                           nullptr, 0))
      throw PgError(one_line(PQerrorMessage(c_)));
    return await();
  }

  // A migration step: several statements without parameters (PQsendQuery's simple protocol takes them in
  // one).
  void script(const std::string& sql) {
    if (!c_) throw PgError("the connection was closed after an earlier failure");
    if (!PQsendQuery(c_, sql.c_str())) throw PgError(one_line(PQerrorMessage(c_)));
    await();
  }

  // Reads every result of what was sent, waiting for the server at most statement_timeout + answer_margin on
  // our monotonic clock; past it the connection is closed (the server's own statement_timeout should have
  // ended the statement first: no answer by then means the server or the network is gone). The first error
  // wins.
  Rows await() {
    const auto deadline = Clock::now() + std::chrono::milliseconds(t_.statement_timeout_ms) +
                          std::chrono::milliseconds(t_.answer_margin_ms);
    std::optional<Rows> last, first_error;
    std::string error_text;
    for (;;) {
      while (PQisBusy(c_)) {
        const auto left =
            std::chrono::duration_cast<std::chrono::milliseconds>(deadline - Clock::now()).count();
        if (left <= 0) {
          close();
          throw PgError("no answer from the server within " +
                        std::to_string((t_.statement_timeout_ms + t_.answer_margin_ms) / 1000) +
                        " s; the connection was closed");
        }
        pollfd fd{PQsocket(c_), POLLIN, 0};
        const int r = ::poll(&fd, 1, static_cast<int>(std::min<long long>(left, 1000)));
        if (r < 0 && errno != EINTR) throw PgError(std::string("poll: ") + std::strerror(errno));
        if (r > 0 && !PQconsumeInput(c_)) {
          const std::string m = one_line(PQerrorMessage(c_));
          close();
          throw PgError(m);
        }
      }
      PGresult* res = PQgetResult(c_);
      if (!res) break;
      const ExecStatusType st = PQresultStatus(res);
      if (st == PGRES_COMMAND_OK || st == PGRES_TUPLES_OK || st == PGRES_EMPTY_QUERY) {
        last.emplace(res);
      } else {
        if (!first_error) error_text = one_line(PQresultErrorMessage(res));
        if (!first_error)
          first_error.emplace(res);
        else
          PQclear(res);
      }
    }
    if (first_error) throw PgError(error_text.empty() ? "the statement failed" : error_text);
    if (PQstatus(c_) == CONNECTION_BAD) {
      const std::string m = one_line(PQerrorMessage(c_));
      close();
      throw PgError("the connection was lost: " + m);
    }
    if (!last) throw PgError("the server sent no result");
    return std::move(*last);
  }

  // Two imports of the same folder at once take turns (per origin, until commit), so neither fails on the
  // UNIQUE origin half-way; imports of different folders do not wait for each other.
  void lock_origin(const std::string& origin) {
    run("SELECT pg_advisory_xact_lock(hashtextextended($1, 0))", Params().text(origin));
  }

  std::optional<std::pair<std::int64_t, std::string>> find(const std::string& table,
                                                           const std::string& origin) {
    Rows s = run("SELECT id, seal_sha256 FROM " + table + " WHERE origin = $1", Params().text(origin));
    if (s.size() == 0) return std::nullopt;
    return std::make_pair(s.integer(0, 0), s.text(0, 1));
  }
  void refresh(const std::string& table, std::int64_t id, const FolderFacts& f) {
    run("UPDATE " + table + " SET folder = $1, verify_outcome = $2, indexed_utc = $3 WHERE id = $4",
        Params().text(f.folder).text(f.verify_outcome).text(record::utc_now()).integer(id));
  }
  void insert_deviations(const std::string& table, const std::string& owner_column, std::int64_t owner,
                         const std::vector<SpeedDeviation>& rows) {
    const std::string sql =
        "INSERT INTO " + table + " (" + owner_column +
        ", speed_kmh, target_n, measured_n, deviation_n, limit_n, u_n, pass) VALUES ($1, $2, "
        "$3, $4, $5, $6, $7, $8)";
    for (const auto& d : rows)
      run(sql, Params()
                   .integer(owner)
                   .real(d.speed_kmh)
                   .real(d.target_n)
                   .real(d.measured_n)
                   .real(d.deviation_n)
                   .real(d.limit_n)
                   .real(d.u_n)
                   .integer(d.pass ? 1 : 0));
  }
  void insert_reviews(std::int64_t session, const std::vector<Review>& reviews) {
    run("DELETE FROM reviews WHERE session = $1", Params().integer(session));
    for (const auto& r : reviews)
      run("INSERT INTO reviews (session, seq, reviewer, utc, statement, signature_checked) VALUES ($1, $2, "
          "$3, "
          "$4, $5, $6)",
          Params()
              .integer(session)
              .integer(static_cast<std::int64_t>(r.seq))
              .text(r.reviewer)
              .text(r.utc)
              .text(r.statement)
              .integer(r.signature_checked ? 1 : 0));
  }

  PGconn* c_;
  std::string where_;
  PgTimeouts t_;
  std::string schema_;
};

void ignore_notice(void*, const PGresult*) {}

}  // namespace

bool is_postgresql_uri(const std::string& text) {
  return text.rfind("postgresql://", 0) == 0 || text.rfind("postgres://", 0) == 0;
}

bool describe_conninfo(const std::string& conninfo, std::string& server, std::string& error) {
  if (conninfo.empty()) {
    error = "the connection string is empty";
    return false;
  }
  const ConninfoOptions o(conninfo);
  if (!o.options) {
    // libpq's message quotes the part it could not read, which may be the password: never shown.
    error = "libpq cannot read the connection string (its text is not shown: it may hold a password)";
    return false;
  }
  if (const auto t = o.get("connect_timeout")) {
    char* end = nullptr;
    const long v = std::strtol(t->c_str(), &end, 10);
    if (!end || *end != '\0' || v <= 0) {
      error =
          "connect_timeout=" + *t +
          " would wait for the server without end; give a number of seconds of 2 or more, or leave it out "
          "(10 s)";
      return false;
    }
  }
  // libpq's defaults where a part is not given: the environment, then the local socket, port 5432, and a
  // database named as the user.
  const std::string host = o.get("host").value_or(o.get("hostaddr").value_or(env_or("PGHOST", "localhost")));
  const std::string port = o.get("port").value_or(env_or("PGPORT", "5432"));
  const std::string user = o.get("user").value_or(env_or("PGUSER", "(the login name)"));
  const std::string db = o.get("dbname").value_or(env_or("PGDATABASE", user));
  server = "postgresql://" + host + ":" + port + "/" + db;
  return true;
}

namespace {

// Connects with our deadlines (our connect_timeout unless the string names a shorter one): the connection,
// with `server` as libpq connected to it, or nullptr with a sentence in `error` naming the server.
PGconn* connect(const std::string& conninfo, const PgTimeouts& timeouts, std::string& server,
                std::string& error) {
  if (!describe_conninfo(conninfo, server, error)) return nullptr;
  // The string's own connect_timeout is kept only when it is shorter than ours: our deadline holds whatever
  // the string says (a lab string with 15 s held a session's end that long: the hostile review).
  bool has_timeout = false;
  {
    const ConninfoOptions o(conninfo);
    if (const auto t = o.get("connect_timeout"))
      has_timeout = std::strtol(t->c_str(), nullptr, 10) <= timeouts.connect_timeout_s;
  }
  // expand_dbname = 1: the first "dbname" is the whole connection string; the keywords after it override it.
  const std::string timeout = std::to_string(timeouts.connect_timeout_s);
  std::vector<const char*> keys = {"dbname", "client_encoding", "fallback_application_name"};
  std::vector<const char*> values = {conninfo.c_str(), "UTF8", "loadtrim"};
  if (!has_timeout) {
    keys.push_back("connect_timeout");
    values.push_back(timeout.c_str());
  }
  keys.push_back(nullptr);
  values.push_back(nullptr);
  PGconn* c = PQconnectdbParams(keys.data(), values.data(), 1);
  if (!c) {
    error = server + ": cannot connect: out of memory";
    return nullptr;
  }
  if (PQstatus(c) != CONNECTION_OK) {
    error = server + ": cannot connect to the store's server: " + one_line(PQerrorMessage(c)) +
            " (nothing was changed)";
    PQfinish(c);
    return nullptr;
  }
  PQsetNoticeReceiver(c, &ignore_notice, nullptr);
  // The server as libpq connected to it (host, port and database actually used).
  const char* h = PQhost(c);
  const char* p = PQport(c);
  const char* d = PQdb(c);
  server = std::string("postgresql://") + (h ? h : "") + ":" + (p ? p : "") + "/" + (d ? d : "");
  return c;
}

// A bench schema name: loadtrim_bench_ and then lower-case letters, digits and _ only.
bool is_bench_schema_name(const std::string& name) {
  const std::string prefix = "loadtrim_bench_";
  if (name.rfind(prefix, 0) != 0 || name.size() == prefix.size() || name.size() > 63) return false;
  for (char ch : name)
    if (!((ch >= 'a' && ch <= 'z') || (ch >= '0' && ch <= '9') || ch == '_')) return false;
  return true;
}

}  // namespace

std::unique_ptr<Store> open_postgresql(const std::string& conninfo, OpenMode mode, std::string& error,
                                       const PgTimeouts& timeouts) {
  std::string server;
  PGconn* c = connect(conninfo, timeouts, server, error);
  if (!c) return nullptr;
  auto store = std::make_unique<PgStore>(c, server, timeouts);
  try {
    store->configure();
    const int have = store->version();
    const int known = schema::step_count();
    if (have > known) {
      error = store->newer_message(have);
      return nullptr;
    }
    if (mode == OpenMode::use && have == 0) {
      error = store->location() +
              ": holds no loadtrim store; create it with `loadtrim store migrate` (nothing was changed)";
      return nullptr;
    }
    if (mode == OpenMode::use && have < known) {
      error = store->location() + ": the store's schema is version " + std::to_string(have) +
              "; this loadtrim needs " + std::to_string(known) +
              ": run `loadtrim store migrate` first (nothing was changed)";
      return nullptr;
    }
  } catch (const std::exception& e) {
    error = store->location() + ": " + e.what();
    return nullptr;
  }
  return store;
}

bool pg_bench_schema(const std::string& conninfo, const std::string& name, bool create, std::string& error) {
  if (!is_bench_schema_name(name)) {
    error = "\"" + name + "\" is not a bench schema name (loadtrim_bench_ then a-z, 0-9 or _; at most 63)";
    return false;
  }
  std::string server;
  PGconn* c = connect(conninfo, PgTimeouts{}, server, error);
  if (!c) return false;
  PgStore s(c, server, PgTimeouts{});
  try {
    s.configure();
    // An identifier cannot be a bound parameter: the name was checked above to hold nothing but a-z, 0-9, _.
    s.run_script(create ? "CREATE SCHEMA " + name : "DROP SCHEMA IF EXISTS " + name + " CASCADE");
  } catch (const std::exception& e) {
    error =
        server + ": " + (create ? "cannot create schema " : "cannot drop schema ") + name + ": " + e.what();
    return false;
  }
  return true;
}

std::string pg_conninfo_with_schema(const std::string& conninfo, const std::string& name) {
  if (is_postgresql_uri(conninfo))
    return conninfo + (conninfo.find('?') == std::string::npos ? "?" : "&") + "options=-csearch_path%3D" +
           name;
  return conninfo + " options='-csearch_path=" + name + "'";
}

}  // namespace loadtrim::store
