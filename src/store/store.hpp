// The lab's record store (issue 19, docs/store.md): an index of sealed session and dyno-check folders that
// answers "what happened to this vehicle / on this cell / since that day". The folder stays the evidence; a
// row is only what a verified folder said when it was indexed, and `store check` compares the two again.
//
// One schema (schema.hpp), two engines behind the abstract Store: SQLite (sqlite_store.hpp) is the embedded
// default; PostgreSQL (pg_store.hpp) serves a lab whose cells share one server. Migrations are numbered steps
// held in the code; a store is migrated only by `loadtrim store migrate` (Store::migrate), never when it is
// opened.
//
// Nothing here throws across the API: failures are `false` / an empty optional with a sentence in `error`.
#pragma once

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "core/road_load.hpp"
#include "core/strategy.hpp"

namespace loadtrim::store {

// One reference speed of a coast-down's check (the coastdown record's check.rows).
struct SpeedDeviation {
  double speed_kmh = 0.0, target_n = 0.0, measured_n = 0.0, deviation_n = 0.0, limit_n = 0.0;
  std::optional<double> u_n;
  bool pass = false;
};

// One coast-down record of a session folder.
struct CoastdownEntry {
  std::uint64_t seq = 0;  // the record's seq in events.jsonl
  int run = 0;
  bool usable = false;
  std::string unusable_reason;
  std::optional<core::RoadLoad> set, measured;
  std::optional<bool> passed;  // the check's verdict; empty when the run was not judged
  std::optional<double> worst_abs_deviation_n, cell_time_s;
  std::vector<SpeedDeviation> deviations;
};

// What every indexed folder has: where it is, its identity and its seal, and what verify said.
struct FolderFacts {
  std::string folder;  // absolute path when indexed
  std::string name;    // the folder's own name: the session's or check's id
  std::string origin;  // SHA-256 of record 0's line (docs/records.md): the folder's identity
  std::string cell;
  std::string operator_name;
  std::string started_utc;  // record 0's utc
  std::string sealed_utc;   // the seal's utc
  std::string chain_head, seal_sha256, signer;
  std::string verify_outcome;  // record::to_string(outcome) at indexing
};

struct Review {
  std::uint64_t seq = 0;
  std::string reviewer, utc, statement;
  bool signature_checked = false;
};

struct SessionEntry {
  FolderFacts facts;
  std::string vehicle, vehicle_description, profile, standard, method;
  std::string first_setting_requested, first_setting_strategy, first_setting_fallback;
  std::string result, stop_reason;
  bool accepted = false;
  core::RoadLoad target;
  std::optional<core::RoadLoad> final_set, measured;
  std::optional<double> tolerance_n, test_mass_kg, cell_time_s;
  int coastdowns = 0, usable_coastdowns = 0, iterations = 0;
  std::vector<SpeedDeviation> final_deviations;  // summary.json's deviations
  std::vector<CoastdownEntry> coastdown_records;
  std::vector<Review> reviews;
  // The initial warm-up hold's speed and windows: the first "warm_up" record when it says "initial": true
  // (nullopt: none, interrupted before it, or written before the windows were kept).
  std::optional<core::WarmUpRecord> warm_up;
};

struct CheckEntry {
  FolderFacts facts;
  std::string kind;  // parasitic, coastdown, readiness, ...
  std::string end;   // check_finished's end
  bool passed = false;
  std::string verdict;  // check_finished's verdict sentence
};

// One line of `loadtrim history`: a session or a check.
struct HistoryRow {
  std::string what;  // "session" or "check"
  std::string kind;  // the check's kind; the session's method
  std::string utc;   // when it started (record 0)
  std::string cell, vehicle, operator_name, result,
      detail;             // detail: a session's stop reason, a check's verdict
  bool accepted = false;  // a session accepted / a check passed
  std::optional<core::RoadLoad> final_set;
  int coastdowns = 0;
  std::optional<double> cell_time_s;
  std::string reviewer;  // the reviewers who approved, comma-separated
  std::string folder, verify_outcome;
};

struct HistoryQuery {
  std::string vehicle;  // "" = any (a vehicle filter leaves out the checks, which have none)
  std::string cell;     // "" = any
  std::string since;    // "YYYY-MM-DD" (UTC, inclusive), "" = from the start
};

// A row of the store as `store check` needs it.
struct IndexedFolder {
  std::string what;  // "session" or "check"
  std::string folder, origin, seal_sha256, verify_outcome;
};

// A session or check that has started and whose end is not indexed yet (the overview's "running").
struct RunningEntry {
  std::string what;                 // "session" or "check"
  std::string folder;               // absolute, as the end's queue entry will name it
  std::string name, cell, vehicle;  // vehicle: "" for a check
  std::string kind;                 // the session's method, the check's kind
  std::string started_utc;
  std::string live_url;   // the live page's address when the command serves one, else ""
  std::string noted_utc;  // when the store noted it (read back; ignored by note_running)
};

// The latest session or check of a cell, as the overview shows it.
struct LatestRow {
  std::string what;  // "session" or "check"
  std::string name;  // the folder's name: the session's or check's id
  std::string kind;  // the session's method, the check's kind
  std::string cell, vehicle, started_utc;
  std::string result;     // a session's result, a check's end
  std::string detail;     // a session's stop reason, a check's verdict
  bool accepted = false;  // a session accepted / a check passed
  std::optional<core::RoadLoad> final_set;
  std::string folder, verify_outcome;
};

struct CellOverview {
  std::string cell;
  std::optional<LatestRow> session, check;
  std::vector<RunningEntry> running;  // oldest first
};

// --- the history first setting (docs/store.md, "The history first setting") ---
// An accepted session with its final set, as indexed.
struct AcceptedSession {
  std::string name;  // the session id (the folder's name)
  std::string folder, origin, seal_sha256;
  std::string cell, vehicle;
  std::string started_utc;
  core::RoadLoad target, final_set;
};
// A vehicle accepted on two cells: its latest accepted session on each.
struct CellPairRow {
  std::string vehicle;
  AcceptedSession on_a, on_b;
};

enum class PutResult {
  indexed,    // a new row
  refreshed,  // the same folder and seal were indexed before: its path, verify outcome and reviews updated
  conflict    // the store holds this folder (same origin) with another seal: nothing changed
};

class Store {
 public:
  virtual ~Store() = default;
  virtual std::string engine() const = 0;    // "sqlite" or "postgresql"
  virtual std::string location() const = 0;  // the file, or the server as host:port/dbname (no password)
  // The highest migration applied (0 for an empty store). -1 with error when it cannot be read.
  virtual int schema_version(std::string& error) = 0;
  // Applies every step above the current version, each in its own transaction, up to `up_to` (0 = all).
  // `applied` gets "N name" per step. Refuses a store newer than this tool.
  virtual bool migrate(std::string& error, std::vector<std::string>* applied = nullptr, int up_to = 0) = 0;
  virtual bool put_session(const SessionEntry& e, PutResult& result, std::string& error) = 0;
  virtual bool put_check(const CheckEntry& e, PutResult& result, std::string& error) = 0;
  // Newest first.
  virtual bool history(const HistoryQuery& q, std::vector<HistoryRow>& rows, std::string& error) = 0;
  virtual bool folders(std::vector<IndexedFolder>& rows, std::string& error) = 0;

  // --- the lab overview (docs/store.md "The lab overview"; schema step 3) ---
  // Notes a session or check that has started (a "started" queue entry): one row per folder, kept until the
  // folder is indexed or an "ended" entry clears it; noted again (a resume), it takes the new start, page and
  // time. Not noted (`noted` false, no error) when the folder is indexed already: a late start entry never
  // shows an indexed folder as running.
  virtual bool note_running(const RunningEntry& e, bool& noted, std::string& error) = 0;
  // Clears the folder's running row, if any (its end was queued without a seal to index).
  virtual bool clear_running(const std::string& folder, std::string& error) = 0;
  // Per cell: the latest session, the latest check, and the running rows whose folder is not indexed yet.
  // Cells in name order; every cell that has a session, a check or a running row.
  virtual bool overview(std::vector<CellOverview>& cells, std::string& error) = 0;

  // --- the history first setting (docs/store.md, "The history first setting") ---
  // The accepted sessions of `vehicle` that have a final set, on every cell: by cell, newest first in each.
  virtual bool accepted_sessions(const std::string& vehicle, std::vector<AcceptedSession>& rows,
                                 std::string& error) = 0;
  // The vehicles with an accepted session (with a final set) on both `cell_a` and `cell_b`, each with its
  // latest accepted session on either cell; by vehicle. Empty when the two cells are one.
  virtual bool cell_pairs(const std::string& cell_a, const std::string& cell_b,
                          std::vector<CellPairRow>& rows, std::string& error) = 0;
};

// How a store is opened. `use`: it must exist and be at exactly known_schema_version(), else refused with
// nothing changed. `migrate` (only `loadtrim store migrate`): an SQLite file is created when missing, an
// empty PostgreSQL schema is accepted, and any version up to known_schema_version() is accepted. A newer
// schema is refused by both.
enum class OpenMode { use, migrate };

// The migrations this tool knows: the store's version must be exactly this to be used.
int known_schema_version();

// Whether `date` is a calendar date written YYYY-MM-DD (ISO 8601 calendar date, proleptic Gregorian).
bool is_iso_date(const std::string& date);

}  // namespace loadtrim::store
