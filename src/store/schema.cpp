#include "store/schema.hpp"

#include <iterator>
#include <map>
#include <stdexcept>

namespace loadtrim::store::schema {

namespace {

struct Step {
  int version;
  const char* name;
  const char* sql;  // with the placeholders of schema.hpp
};

// Step N brings a store from version N-1 to N (docs/store.md, "Migrations").
constexpr Step kSteps[] = {
    {1, "sessions, coast-downs, deviations, reviews and checks", R"SQL(
CREATE TABLE sessions (
  id {id_column},
  origin TEXT NOT NULL UNIQUE,
  name TEXT NOT NULL,
  folder TEXT NOT NULL,
  cell TEXT NOT NULL,
  vehicle TEXT NOT NULL,
  vehicle_description TEXT NOT NULL,
  operator TEXT NOT NULL,
  profile TEXT NOT NULL,
  standard TEXT NOT NULL,
  method TEXT NOT NULL,
  first_setting_requested TEXT NOT NULL,
  first_setting_strategy TEXT NOT NULL,
  first_setting_fallback TEXT NOT NULL,
  result TEXT NOT NULL,
  accepted INTEGER NOT NULL CHECK (accepted IN (0, 1)),
  stop_reason TEXT NOT NULL,
  target_f0_n {real} NOT NULL,
  target_f1_n_per_kmh {real} NOT NULL,
  target_f2_n_per_kmh2 {real} NOT NULL,
  final_f0_n {real},
  final_f1_n_per_kmh {real},
  final_f2_n_per_kmh2 {real},
  measured_f0_n {real},
  measured_f1_n_per_kmh {real},
  measured_f2_n_per_kmh2 {real},
  tolerance_n {real},
  test_mass_kg {real},
  coastdowns INTEGER NOT NULL,
  usable_coastdowns INTEGER NOT NULL,
  iterations INTEGER NOT NULL,
  cell_time_s {real},
  started_utc TEXT NOT NULL,
  sealed_utc TEXT NOT NULL,
  chain_head TEXT NOT NULL,
  seal_sha256 TEXT NOT NULL,
  signer TEXT NOT NULL,
  verify_outcome TEXT NOT NULL,
  indexed_utc TEXT NOT NULL
);
CREATE TABLE session_deviations (
  session {int64} NOT NULL REFERENCES sessions(id) ON DELETE CASCADE,
  speed_kmh {real} NOT NULL,
  target_n {real} NOT NULL,
  measured_n {real} NOT NULL,
  deviation_n {real} NOT NULL,
  limit_n {real} NOT NULL,
  u_n {real},
  pass INTEGER NOT NULL CHECK (pass IN (0, 1))
);
CREATE TABLE coastdowns (
  id {id_column},
  session {int64} NOT NULL REFERENCES sessions(id) ON DELETE CASCADE,
  seq {int64} NOT NULL,
  run INTEGER NOT NULL,
  usable INTEGER NOT NULL CHECK (usable IN (0, 1)),
  unusable_reason TEXT NOT NULL,
  set_f0_n {real},
  set_f1_n_per_kmh {real},
  set_f2_n_per_kmh2 {real},
  measured_f0_n {real},
  measured_f1_n_per_kmh {real},
  measured_f2_n_per_kmh2 {real},
  passed INTEGER CHECK (passed IN (0, 1)),
  worst_abs_deviation_n {real},
  cell_time_s {real},
  UNIQUE (session, seq)
);
CREATE TABLE coastdown_deviations (
  coastdown {int64} NOT NULL REFERENCES coastdowns(id) ON DELETE CASCADE,
  speed_kmh {real} NOT NULL,
  target_n {real} NOT NULL,
  measured_n {real} NOT NULL,
  deviation_n {real} NOT NULL,
  limit_n {real} NOT NULL,
  u_n {real},
  pass INTEGER NOT NULL CHECK (pass IN (0, 1))
);
CREATE TABLE reviews (
  session {int64} NOT NULL REFERENCES sessions(id) ON DELETE CASCADE,
  seq {int64} NOT NULL,
  reviewer TEXT NOT NULL,
  utc TEXT NOT NULL,
  statement TEXT NOT NULL,
  signature_checked INTEGER NOT NULL CHECK (signature_checked IN (0, 1)),
  PRIMARY KEY (session, seq)
);
CREATE TABLE checks (
  id {id_column},
  origin TEXT NOT NULL UNIQUE,
  name TEXT NOT NULL,
  folder TEXT NOT NULL,
  cell TEXT NOT NULL,
  kind TEXT NOT NULL,
  end_state TEXT NOT NULL,
  passed INTEGER NOT NULL CHECK (passed IN (0, 1)),
  verdict TEXT NOT NULL,
  operator TEXT NOT NULL,
  started_utc TEXT NOT NULL,
  sealed_utc TEXT NOT NULL,
  chain_head TEXT NOT NULL,
  seal_sha256 TEXT NOT NULL,
  signer TEXT NOT NULL,
  verify_outcome TEXT NOT NULL,
  indexed_utc TEXT NOT NULL
);
)SQL"},
    {2, "indexes for history by vehicle, cell and time", R"SQL(
CREATE INDEX sessions_by_vehicle ON sessions (vehicle, started_utc);
CREATE INDEX sessions_by_cell ON sessions (cell, started_utc);
CREATE INDEX sessions_by_time ON sessions (started_utc);
CREATE INDEX checks_by_cell ON checks (cell, started_utc);
CREATE INDEX checks_by_time ON checks (started_utc);
CREATE INDEX session_deviations_by_session ON session_deviations (session);
CREATE INDEX coastdowns_by_session ON coastdowns (session);
CREATE INDEX coastdown_deviations_by_coastdown ON coastdown_deviations (coastdown);
)SQL"},
    {3, "running sessions and checks for the lab overview", R"SQL(
CREATE TABLE running (
  folder TEXT NOT NULL PRIMARY KEY,
  what TEXT NOT NULL CHECK (what IN ('session', 'check')),
  name TEXT NOT NULL,
  cell TEXT NOT NULL,
  vehicle TEXT NOT NULL,
  kind TEXT NOT NULL,
  started_utc TEXT NOT NULL,
  live_url TEXT NOT NULL,
  noted_utc TEXT NOT NULL
);
CREATE INDEX running_by_cell ON running (cell, started_utc);
CREATE INDEX sessions_by_folder ON sessions (folder);
CREATE INDEX checks_by_folder ON checks (folder);
)SQL"},
    // The history first setting's pairs (cell_pairs_sql): each of its subqueries finds a vehicle's sessions
    // on one cell; by (vehicle, started_utc) alone a store of 10,000 sessions took 90 s (the hostile review).
    {4, "an index for the history first setting's vehicles run on two cells", R"SQL(
CREATE INDEX sessions_by_vehicle_cell ON sessions (vehicle, cell, started_utc);
)SQL"},
};

void replace_all(std::string& text, const std::string& from, const std::string& to) {
  for (std::size_t at = text.find(from); at != std::string::npos; at = text.find(from, at + to.size()))
    text.replace(at, from.size(), to);
}

}  // namespace

int step_count() {
  return static_cast<int>(std::size(kSteps));
}

const char* step_name(int version) {
  if (version < 1 || version > step_count())
    throw std::out_of_range("no migration step " + std::to_string(version));
  return kSteps[version - 1].name;
}

std::string step_sql(int version, Dialect dialect) {
  if (version < 1 || version > step_count())
    throw std::out_of_range("no migration step " + std::to_string(version));
  std::string sql = kSteps[version - 1].sql;
  const bool pg = dialect == Dialect::postgresql;
  replace_all(sql, "{id_column}",
              pg ? "BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY" : "INTEGER PRIMARY KEY");
  replace_all(sql, "{real}", pg ? "DOUBLE PRECISION" : "REAL");
  replace_all(sql, "{int64}", pg ? "BIGINT" : "INTEGER");
  return sql;
}

const char* const kHistorySessionColumns =
    "s.method, s.started_utc, s.cell, s.vehicle, s.operator, s.result, s.stop_reason, s.accepted, "
    "s.final_f0_n, "
    "s.final_f1_n_per_kmh, s.final_f2_n_per_kmh2, s.coastdowns, s.cell_time_s, s.folder, s.verify_outcome";
const char* const kHistoryCheckColumns =
    "s.kind, s.started_utc, s.cell, s.operator, s.end_state, s.verdict, s.passed, s.folder, s.verify_outcome";

HistoryRow history_session_row(const ResultRow& c) {
  HistoryRow r;
  r.what = "session";
  r.kind = c.text(0);
  r.utc = c.text(1);
  r.cell = c.text(2);
  r.vehicle = c.text(3);
  r.operator_name = c.text(4);
  r.result = c.text(5);
  r.detail = c.text(6);
  r.accepted = c.integer(7) != 0;
  if (!c.is_null(8)) r.final_set = core::RoadLoad{c.real(8), c.real(9), c.real(10)};
  r.coastdowns = static_cast<int>(c.integer(11));
  if (!c.is_null(12)) r.cell_time_s = c.real(12);
  r.folder = c.text(13);
  r.verify_outcome = c.text(14);
  r.reviewer = c.text(15);
  return r;
}

HistoryRow history_check_row(const ResultRow& c) {
  HistoryRow r;
  r.what = "check";
  r.kind = c.text(0);
  r.utc = c.text(1);
  r.cell = c.text(2);
  r.operator_name = c.text(3);
  r.result = c.text(4);
  r.detail = c.text(5);
  r.accepted = c.integer(6) != 0;
  r.folder = c.text(7);
  r.verify_outcome = c.text(8);
  return r;
}

// --- the lab overview (step 3) ---
// The latest row per cell: the distinct cells (read from the (cell, started_utc) index), each joined with its
// newest row by started_utc (the higher id on a tie), so the work grows with the number of cells, not of
// rows.
const char* const kLatestSessionSql =
    "SELECT s.name, s.method, s.cell, s.vehicle, s.started_utc, s.result, s.stop_reason, s.accepted, "
    "s.final_f0_n, s.final_f1_n_per_kmh, s.final_f2_n_per_kmh2, s.folder, s.verify_outcome "
    "FROM (SELECT DISTINCT cell FROM sessions) c JOIN sessions s ON s.id = (SELECT s2.id FROM sessions s2 "
    "WHERE s2.cell = c.cell ORDER BY s2.started_utc DESC, s2.id DESC LIMIT 1) ORDER BY s.cell";
const char* const kLatestCheckSql =
    "SELECT s.name, s.kind, s.cell, '', s.started_utc, s.end_state, s.verdict, s.passed, "
    "NULL, NULL, NULL, s.folder, s.verify_outcome "
    "FROM (SELECT DISTINCT cell FROM checks) c JOIN checks s ON s.id = (SELECT s2.id FROM checks s2 "
    "WHERE s2.cell = c.cell ORDER BY s2.started_utc DESC, s2.id DESC LIMIT 1) ORDER BY s.cell";
// A running row whose folder has been indexed meanwhile is over, whatever cleared it or not.
const char* const kRunningSql =
    "SELECT r.what, r.folder, r.name, r.cell, r.vehicle, r.kind, r.started_utc, r.live_url, r.noted_utc "
    "FROM running r WHERE NOT EXISTS (SELECT 1 FROM sessions s WHERE s.folder = r.folder) "
    "AND NOT EXISTS (SELECT 1 FROM checks k WHERE k.folder = r.folder) ORDER BY r.cell, r.started_utc";

LatestRow latest_row(const ResultRow& c, const char* what) {
  LatestRow r;
  r.what = what;
  r.name = c.text(0);
  r.kind = c.text(1);
  r.cell = c.text(2);
  r.vehicle = c.text(3);
  r.started_utc = c.text(4);
  r.result = c.text(5);
  r.detail = c.text(6);
  r.accepted = c.integer(7) != 0;
  if (!c.is_null(8) && !c.is_null(9) && !c.is_null(10))
    r.final_set = core::RoadLoad{c.real(8), c.real(9), c.real(10)};
  r.folder = c.text(11);
  r.verify_outcome = c.text(12);
  return r;
}

RunningEntry running_row(const ResultRow& c) {
  RunningEntry r;
  r.what = c.text(0);
  r.folder = c.text(1);
  r.name = c.text(2);
  r.cell = c.text(3);
  r.vehicle = c.text(4);
  r.kind = c.text(5);
  r.started_utc = c.text(6);
  r.live_url = c.text(7);
  r.noted_utc = c.text(8);
  return r;
}

std::vector<CellOverview> assemble_overview(const std::vector<LatestRow>& sessions,
                                            const std::vector<LatestRow>& checks,
                                            const std::vector<RunningEntry>& running) {
  std::map<std::string, CellOverview> by_cell;
  auto cell = [&](const std::string& name) -> CellOverview& {
    CellOverview& c = by_cell[name];
    c.cell = name;
    return c;
  };
  for (const auto& r : sessions) cell(r.cell).session = r;
  for (const auto& r : checks) cell(r.cell).check = r;
  for (const auto& r : running) cell(r.cell).running.push_back(r);
  std::vector<CellOverview> out;
  out.reserve(by_cell.size());
  for (auto& [name, c] : by_cell) out.push_back(std::move(c));
  return out;
}

// --- the history first setting (docs/store.md, "The history first setting") ---

namespace {
constexpr const char* kAcceptedColumns =
    "s.name, s.folder, s.origin, s.seal_sha256, s.cell, s.vehicle, s.started_utc, s.target_f0_n, "
    "s.target_f1_n_per_kmh, s.target_f2_n_per_kmh2, s.final_f0_n, s.final_f1_n_per_kmh, "
    "s.final_f2_n_per_kmh2";
// An accepted session that has a final set, in the table aliased `t` (an accepted session always has one;
// the test is kept so that a row without it can never be used).
std::string accepted(const std::string& t) {
  return t + ".accepted = 1 AND " + t + ".final_f0_n IS NOT NULL AND " + t +
         ".final_f1_n_per_kmh IS NOT NULL AND " + t + ".final_f2_n_per_kmh2 IS NOT NULL";
}
}  // namespace

std::string accepted_sessions_sql(const std::string& vehicle) {
  return std::string("SELECT ") + kAcceptedColumns + " FROM sessions s WHERE s.vehicle = " + vehicle +
         " AND " + accepted("s") + " ORDER BY s.cell, s.started_utc DESC, s.id DESC";
}

std::string cell_pairs_sql(const std::string& cell_a, const std::string& cell_b) {
  // Each vehicle's latest accepted session on either cell, for the vehicles accepted on both.
  return std::string("SELECT ") + kAcceptedColumns + " FROM sessions s WHERE s.cell IN (" + cell_a + ", " +
         cell_b + ") AND " + accepted("s") +
         " AND s.started_utc = (SELECT max(t.started_utc) FROM sessions t WHERE t.vehicle = s.vehicle AND "
         "t.cell = s.cell AND " +
         accepted("t") +
         ") AND EXISTS (SELECT 1 FROM sessions a WHERE a.vehicle = s.vehicle AND a.cell = " + cell_a +
         " AND " + accepted("a") +
         ") AND EXISTS (SELECT 1 FROM sessions b WHERE b.vehicle = s.vehicle "
         "AND b.cell = " +
         cell_b + " AND " + accepted("b") + ") ORDER BY s.vehicle, s.cell, s.id DESC";
}

AcceptedSession accepted_session_row(const ResultRow& c) {
  AcceptedSession a;
  a.name = c.text(0);
  a.folder = c.text(1);
  a.origin = c.text(2);
  a.seal_sha256 = c.text(3);
  a.cell = c.text(4);
  a.vehicle = c.text(5);
  a.started_utc = c.text(6);
  a.target = core::RoadLoad{c.real(7), c.real(8), c.real(9)};
  a.final_set = core::RoadLoad{c.real(10), c.real(11), c.real(12)};
  return a;
}

std::vector<CellPairRow> pair_rows(const std::vector<AcceptedSession>& rows, const std::string& cell_a,
                                   const std::string& cell_b) {
  std::vector<CellPairRow> out;
  if (cell_a == cell_b) return out;
  for (std::size_t i = 0; i < rows.size();) {
    std::size_t j = i;
    const AcceptedSession *a = nullptr, *b = nullptr;
    // The first row of each cell (two sessions started in the same millisecond: the later indexed).
    for (; j < rows.size() && rows[j].vehicle == rows[i].vehicle; ++j) {
      if (rows[j].cell == cell_a && !a) a = &rows[j];
      if (rows[j].cell == cell_b && !b) b = &rows[j];
    }
    if (a && b) out.push_back({rows[i].vehicle, *a, *b});
    i = j;
  }
  return out;
}

}  // namespace loadtrim::store::schema
