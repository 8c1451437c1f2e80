// The record store's schema (docs/store.md, "Schema" and "Migrations"): the numbered migration steps, written
// once for both engines. Where the two SQL dialects differ in a column's type, the step's text holds a
// placeholder that schema::step_sql() fills for the engine:
//   {id_column}  a row id assigned by the database: SQLite "INTEGER PRIMARY KEY" (an alias of the rowid),
//   PostgreSQL
//                "BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY" (an identity column, SQL:2003)
//   {real}       an IEEE 754 binary64 number: SQLite "REAL" (its 8-byte float); PostgreSQL "DOUBLE PRECISION"
//                (PostgreSQL's own REAL is a 4-byte float and would round every coefficient)
//   {int64}      a 64-bit integer (a record's seq, a reference to a row id): SQLite "INTEGER"; PostgreSQL
//   "BIGINT"
// Everything else (TEXT, INTEGER for counts and 0/1 flags with their CHECK, UNIQUE, REFERENCES ... ON DELETE
// CASCADE, the indexes) is the same text on both. The SQLite expansion is byte for byte the text these steps
// were released with; a released step is never edited (a change to the schema is a new step).
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "store/store.hpp"

namespace loadtrim::store::schema {

enum class Dialect { sqlite, postgresql };

// The number of steps: a store at this version is current.
int step_count();
// Step `version` (1..step_count()): its one-line name (a row of schema_migrations) and its SQL for `dialect`,
// one or more statements without parameters.
const char* step_name(int version);
std::string step_sql(int version, Dialect dialect);

// `history`'s two queries, the same on both engines: their columns in the order history_session_row() and
// history_check_row() read them. The sessions' query adds one last column, the approving reviewers as one
// text, which each dialect aggregates its own way (SQLite group_concat, PostgreSQL string_agg).
extern const char* const kHistorySessionColumns;  // alias s = sessions
extern const char* const kHistoryCheckColumns;    // alias s = checks
// One row of a result, read by column index through the engine's own API.
class ResultRow {
 public:
  virtual ~ResultRow() = default;
  virtual bool is_null(int column) const = 0;
  virtual std::string text(int column) const = 0;
  virtual std::int64_t integer(int column) const = 0;
  virtual double real(int column) const = 0;
};
HistoryRow history_session_row(const ResultRow& row);
HistoryRow history_check_row(const ResultRow& row);

// --- the lab overview (step 3): the same three queries on both engines, without parameters (nothing in
// them comes from a user); the engines differ only in how they run them. Columns in the order latest_row()
// and running_row() read them.
extern const char* const kLatestSessionSql;
extern const char* const kLatestCheckSql;
extern const char* const kRunningSql;
LatestRow latest_row(const ResultRow& row, const char* what);
RunningEntry running_row(const ResultRow& row);
// The three results as one list per cell, cells in name order.
std::vector<CellOverview> assemble_overview(const std::vector<LatestRow>& sessions,
                                            const std::vector<LatestRow>& checks,
                                            const std::vector<RunningEntry>& running);

// --- the history first setting: the same two queries on both engines, each given its parameters as the
// engine writes them (SQLite "?1", "?2"; PostgreSQL "$1", "$2"): the vehicle, or the two cells. Their rows
// are read by accepted_session_row().
std::string accepted_sessions_sql(const std::string& first_parameter);
std::string cell_pairs_sql(const std::string& first_parameter, const std::string& second_parameter);
AcceptedSession accepted_session_row(const ResultRow& row);
// Pairs the rows of cell_pairs_sql() (ordered by vehicle, then cell) into one row per vehicle.
std::vector<CellPairRow> pair_rows(const std::vector<AcceptedSession>& rows, const std::string& cell_a,
                                   const std::string& cell_b);

}  // namespace loadtrim::store::schema
