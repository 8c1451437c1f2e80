// Verifying a record folder (a session's or a dyno check's): what `loadtrim verify` runs, what the report
// shows, and what resume and approve rely on. docs/records.md explains each outcome.
//
// In order, stopping at the first finding that makes the folder broken:
//   1. events.jsonl read without leaving the folder (record/inside.hpp); the hash chain and seq of every
//   line;
//      a partial last line is a note in an unsealed folder and a break in a sealed one.
//   2. Every "files" entry of every record: a safe relative path (never opened otherwise), present, and with
//   the
//      SHA-256 the record holds.
//   3. At most one seal; after it only approvals. No seal: the cell log (when given) must not know a seal for
//      this folder (else it was cut back); outcome not_finished. Sealed, and the cell log (when given,
//      present and intact) holds no seal for it: a finding (FolderVerdict::findings), the outcome unchanged.
//   4. The seal: exactly its fields, its line in canonical form, chain_head == prev; its files list sorted,
//      unique and safe; every file present in the folder covered, none missing, none extra except the derived
//      files; each hash matching; the folder's summary.json (else result.json) agreeing with every member of
//      the sealed result; the cell log's entry for this folder (when given) naming this very seal.
//   5. The seal's signature: unsigned → outcome unsigned_seal; signed by a key given in the options or found
//   as
//      <keys_dir>/cell-<name>.pub.pem → the signature must verify (else broken); signed by another key when
//      the cell's key is known → broken (not made with the cell's key); no key known for the cell →
//      key_unknown.
//   4a. Record signatures: when record 0 carries one, every record before the seal must, each verifying with
//      the key record 0 names ("record_signer"), which must be the cell's trusted key when one is known. When
//      record 0 carries none, none may; and an unfinished folder of a cell with a trusted key must carry them
//      (else its records were re-chained without the key). Checked before the seal (sealed or not).
//   6. Each approval: its fields, canonical line, approving this folder's seal, signed by the reviewer's key
//      (given, or <keys_dir>/reviewer-<name>.pub.pem); unknown reviewer key → key_unknown.
// Never opens a path the folder names outside the folder, and never follows a link inside it. Never throws.
#pragma once

#include <cstdint>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "record/seal.hpp"

namespace loadtrim::record {

enum class Outcome {
  verified,       // chain, files, seal coverage and signatures all check against trusted keys
  broken,         // tampered or damaged: the record or file is named
  not_finished,   // intact so far, but no seal: the session or check did not finish (or is still running)
  unsigned_seal,  // sealed without a signature: intact as far as anyone can tell, but anyone could have
                  // sealed it
  key_unknown     // signed, but no trusted key for the signer (cell or reviewer) was available to check it
};
const char* to_string(Outcome o);

// `loadtrim verify` exit codes (docs/records.md): verified 0, broken 5, not_finished 6, unsigned_seal and
// key_unknown 7. A folder that cannot be found is refused by the command with 2 before verify runs.
inline constexpr int kVerifyExitVerified = 0;
inline constexpr int kVerifyExitBroken = 5;
inline constexpr int kVerifyExitNotFinished = 6;
inline constexpr int kVerifyExitUnsigned = 7;
int verify_exit_code(Outcome o);

struct VerifyOptions {
  std::vector<PublicKey> cell_keys;      // trusted for seals, whatever the cell (e.g. --public-key)
  std::vector<PublicKey> reviewer_keys;  // trusted for approvals, whatever the reviewer
  std::string keys_dir;     // a data root's keys/: cell-<name>.pub.pem, reviewer-<name>.pub.pem ("" = none)
  std::string checks_root;  // a data root's checks/: <cell>/cell-log.jsonl is consulted ("" = not consulted)
};

struct SealView {
  std::uint64_t seq = 0;
  std::string utc, cell, chain_head, seal_sha256, signer;
  bool is_signed = false;
  bool signature_checked = false;  // verified against a trusted key
  std::string key_source;          // where the trusted key came from
  std::size_t files = 0;
  nlohmann::json result;
};

struct ApprovalView {
  std::uint64_t seq = 0;
  std::string utc, reviewer, statement, signer;
  bool signature_checked = false;
  std::string key_source;
};

struct FolderVerdict {
  Outcome outcome = Outcome::broken;
  std::string message;        // one sentence: what is wrong, or what was checked
  std::int64_t record = -1;   // the record named by the finding (seq), -1 when none
  std::string file;           // the file named by the finding, "" when none
  std::uint64_t records = 0;  // records read (up to the first bad one)
  std::size_t recorded_files = 0;
  std::string cell, origin;  // the cell's name (seal, else record 0) and the hash of record 0's line
  std::optional<SealView> seal;
  std::vector<ApprovalView> approvals;
  // Record signatures (record/event_log.hpp): whether the records carry them, and whether they were checked
  // against a trusted key of the cell (every one verified) — unchecked when no trusted key was available.
  bool records_signed = false, records_signature_checked = false;
  std::string records_signer;
  std::vector<std::string> notes;
  // What an intact folder's verdict does not show but the lab must act on (the outcome and exit code are not
  // changed by it): a sealed folder whose cell log (consulted, intact) holds no seal for it.
  std::vector<std::string> findings;
  bool cell_log_lacks_seal = false;  // that finding: the folder is sealed and its cell log has no seal for it
  bool ok() const { return outcome == Outcome::verified; }
  // Intact as far as the folder itself shows (anything but broken).
  bool intact() const { return outcome != Outcome::broken; }
  nlohmann::json to_json() const;
};

FolderVerdict verify_folder(const std::string& folder, const VerifyOptions& options = {});
// The same, handing back the records of events.jsonl as this one reading parsed them (up to the first bad
// one; a torn last line left out), so that a caller (resume) reads the log once: what it acts on is what was
// verified.
FolderVerdict verify_folder(const std::string& folder, const VerifyOptions& options,
                            std::vector<nlohmann::json>* records);

// Whether a result to be sealed agrees with the folder's summary: summary.json, else result.json, when
// present, must hold every member of `result` with an equal value. "" when it agrees (or there is no
// summary); else a sentence, with *file set to the summary's name.
std::string result_disagreement(const std::string& folder, const nlohmann::json& result,
                                std::string* file = nullptr);

}  // namespace loadtrim::record
