#include "store/schema.hpp"

#include <iterator>
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

}  // namespace loadtrim::store::schema
