// Between the folders and the store (issue 19, docs/store.md): what a sealed folder says (read from its
// events.jsonl and summary.json, never from anywhere else), ingesting a folder only after
// record::verify_folder has found it intact and sealed, checking every row against its folder again, and
// where the store file is. Engine-neutral: everything here goes through the abstract Store.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "record/verify.hpp"
#include "store/store.hpp"

namespace loadtrim::store {

// --- reading a folder ---
// A folder's entry, from its records as verify_folder returned them (`verdict` gives the origin, the seal and
// the approvals). Exactly one of session / check is set; error says what is missing otherwise (a record
// without a member the index needs, or a record 0 that is neither session_started nor check_started).
struct FolderEntry {
  std::optional<SessionEntry> session;
  std::optional<CheckEntry> check;
  std::string error;
};
FolderEntry read_folder(const std::string& folder, const record::FolderVerdict& verdict);

// --- ingest ---
enum class IngestStatus {
  indexed,      // a new row
  refreshed,    // indexed before (same origin and seal): path, verify outcome and reviews brought up to date
  refused,      // not a folder, not finished (no seal), or not a session or check folder: exit 2
  broken,       // verify found it broken, or the store holds this folder with another seal: exit 5
  store_failed  // the store could not be written: exit 5
};
struct IngestResult {
  IngestStatus status = IngestStatus::refused;
  std::string what;     // "session" / "check" when read
  std::string message;  // one sentence: what was indexed, or why not
  int exit_code() const;
};
// Verifies the folder (record::verify_folder with `options`) and indexes it when it is sealed and intact
// (verified, or sealed unsigned / by a key the lab has not registered: the outcome is kept in the row and
// shown by `history`). Refuses a broken folder (naming the record or file verify named) and an unfinished
// one.
IngestResult ingest_folder(Store& store, const std::string& folder, const record::VerifyOptions& options);

// --- store check ---
struct CheckFinding {
  IndexedFolder row;
  std::string problem;  // "missing", "broken", "not finished", "another seal", "another folder"
  std::string message;  // a sentence naming the folder and what verify found
};
// One row against its folder (as check_store does for each): the finding, or nullopt when the folder is
// there, verifies intact and sealed, and carries the indexed origin and seal.
std::optional<CheckFinding> check_row(const IndexedFolder& row, const record::VerifyOptions& options);
// An accepted session's row as the history first setting uses it, in two steps so that a folder is verified
// and read once however many rows name it, and every row is still compared with it:
// - verify_accepted_folder: check_row, then the folder read as a session;
// - compare_accepted_row: the folder must say the same name, start time, vehicle, cell, accepted result,
//   target and final set as the row (the row is not the evidence: the hostile review changed a row's final
//   set, vehicle and cell and saw them used). A difference is the finding "differs".
// The history takes the target, final set, measured curve, method and warm-up hold from `session`, never from
// the row.
struct VerifiedSession {
  std::optional<CheckFinding> finding;  // the folder failed check_row, or is not a session
  std::optional<SessionEntry> session;  // its own facts, when it passed
};
VerifiedSession verify_accepted_folder(const AcceptedSession& a, const record::VerifyOptions& options);
std::optional<CheckFinding> compare_accepted_row(const AcceptedSession& a, const VerifiedSession& folder);
// Every row of the store against its folder: the folder must exist, verify intact and sealed, and carry the
// indexed origin and seal. rows_checked gets the number of rows looked at.
bool check_store(Store& store, const record::VerifyOptions& options, std::vector<CheckFinding>& findings,
                 std::size_t& rows_checked, std::string& error);

// --- where the store is ---
inline constexpr const char* kStoreFileName = "store.sqlite";
struct StorePath {
  std::string engine = "sqlite";  // "sqlite" or "postgresql"
  // sqlite: the file, absolute; postgresql: the libpq connection string (it may hold a password: never print
  // it)
  std::string path;
  // postgresql: the server as postgresql://host:port/dbname, for messages (no user, no password)
  std::string server;
  std::string source;  // how it was chosen
  bool data_root_default =
      false;          // <data root>/store.sqlite because nothing chose another (a lab may have none)
  std::string error;  // a sentence naming the file and key (or the option), when it could not be resolved
  bool ok() const { return error.empty() && !path.empty(); }
  // What to print: the file, or the server (never the connection string itself).
  const std::string& shown() const { return engine == "postgresql" ? server : path; }
};
// In order: `option` (--store: a libpq URI when it starts with postgresql:// or postgres://, else an SQLite
// file relative to cwd); the lab's system configuration's [store] table (its text `system_config`, read from
// `system_config_path`): `postgresql = "CONNINFO"` (a libpq connection string or URI) or `sqlite = "PATH"` (a
// relative path is taken from the data root), never both; <data_root>/store.sqlite. A key that is present but
// not a one-line non-empty string, a connection string libpq cannot read, or both keys given is an error
// naming the file and the key, never a fall-through. Pure (libpq only parses the connection string).
StorePath resolve_store_path(const std::string& option, const std::string& cwd,
                             const std::optional<std::string>& system_config,
                             const std::string& system_config_path, const std::string& data_root);
// The same from this process (its current folder and /etc/loadtrim/loadtrim.toml).
StorePath find_store_path(const std::string& option, const std::string& data_root);

}  // namespace loadtrim::store
