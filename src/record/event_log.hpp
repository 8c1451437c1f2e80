// The session's event log: append-only JSON Lines where every record carries the SHA-256 of the previous
// record's line (a hash chain; the first record's "prev" is 64 zeros). Each append is written, flushed and
// fsync'd before it returns, so a record that append() confirmed survives a crash or SIGKILL (a new log's
// name is fsync'd into its folder when the log is created).
//
// Record layout: {"seq": n, "utc": "...", "type": "...", ...payload..., "prev": "<hex>"}; the hash of a
// record is the SHA-256 of its line without the '\n'.
//
// Record signatures (docs/records.md). With a signer set, every record's line ends with
// ,"sig":"<128 hex>"} where the signature is Ed25519 over kRecordSigDomain + the line without that member
// (the same text with the ,"sig":"..." cut out, ending in '}'); record 0 also names the signer's fingerprint
// in "record_signer". So an unfinished folder of a cell with a key cannot be changed and re-chained by
// someone without the key: the hash chain alone only shows accidents.
#pragma once

#include <nlohmann/json.hpp>
#include <string>
#include <string_view>
#include <vector>

namespace loadtrim::record {

class SigningKey;
class PublicKey;

inline constexpr const char* kRecordSigDomain = "loadtrim-record-1\n";
// The record signature at the end of a line: the signed text (the line without it) and the signature's hex.
// False when the line carries none (or not in the exact form EventLog writes).
bool split_record_signature(const std::string& line, std::string& signed_text, std::string& sig_hex);

class EventLog {
 public:
  // Opens (creating if needed) the log; an existing log is read and its chain verified first, and appending
  // continues after its last record (resume). A partial last line (torn write) is discarded and reported.
  explicit EventLog(std::string path);
  ~EventLog();
  EventLog(const EventLog&) = delete;
  EventLog& operator=(const EventLog&) = delete;

  // Appends one record; false (with error()) when it could not be made durable. Never throws. When a write or
  // its fsync fails, whatever reached the file of that record is cut off again (the file ends at the last
  // record append() confirmed) and the log is poisoned: every later append returns false, error() still
  // naming the first failure, so no record can follow a gap or repeat a seq.
  bool append(const std::string& type, nlohmann::json payload, const std::string& utc);
  bool poisoned() const { return poisoned_; }
  const std::string& error() const { return error_; }
  std::uint64_t records() const { return next_seq_; }
  const std::string& last_hash() const { return last_hash_; }
  const std::string& path() const { return path_; }
  // Set when opening found and cut a torn last line.
  const std::string& repaired() const { return repaired_; }
  // Signs every record appended from now on with `key` (which must outlive the log). Ignored (false) when the
  // log already holds records and its record 0 is not signed: one folder is signed throughout or not at all.
  bool set_signer(const SigningKey* key);
  // Test hooks. The next appends fail as if the disk refused them (nothing written).
  void inject_write_failure(bool on) { fail_writes_ = on; }
  // The next append's write stops after `bytes` bytes of its line and then fails (a full disk mid-line).
  void inject_short_write(std::size_t bytes) { short_write_ = static_cast<long long>(bytes); }
  // The next append writes its whole line, then its fsync fails.
  void inject_sync_failure() { fail_sync_ = true; }

 private:
  std::string path_;
  int fd_ = -1;
  std::uint64_t next_seq_ = 0;
  std::string last_hash_;
  std::string error_;
  std::string repaired_;
  bool fail_writes_ = false;
  long long short_write_ = -1;
  bool fail_sync_ = false;
  bool poisoned_ = false;
  std::uint64_t good_bytes_ = 0;  // the file's length after the last record append() confirmed
  const SigningKey* signer_ = nullptr;
  bool first_signed_ = false;  // record 0 of an existing log is signed
  long long fail_after_ = -1;
  long long appended_ = 0;
  bool fail_append(const std::string& what);  // cuts the file back to good_bytes_, poisons the log
};

struct VerifyResult {
  bool ok = false;
  std::uint64_t records = 0;
  std::int64_t first_bad_record = -1;  // seq of the first record that breaks the chain, -1 when none
  std::string message;                 // what is wrong, or a summary when ok
  std::vector<std::string> notes;      // per-file findings (traces, inputs)
};

// Record lines are nested at most kMaxRecordDepth arrays and objects deep (docs/records.md, "The chain"); a
// session's records nest 5 levels (measured on a demo session's folder). A deeper line is not read as a
// record: the JSON library's serialiser, comparison and copy recurse once per level, and a line nested
// 100,000 deep overflowed the stack. 64 is a margin over the 5 seen (common practice, no source).
inline constexpr std::size_t kMaxRecordDepth = 64;
// Whether `text`'s arrays and objects nest deeper than `limit`, counted by a scan of the text's brackets
// outside strings (no parse, no recursion; an invalid text is scanned as far as it goes).
bool json_nested_deeper_than(std::string_view text, std::size_t limit);
// Parses one JSON text that a record folder or the cell log holds (a record line, summary.json, result.json):
// the parsed value, or a discarded value (is_discarded()) when the text is not valid JSON or nests deeper
// than kMaxRecordDepth; *too_deep (when given) says which. Never throws (allocation failure aside).
nlohmann::json parse_record_json(std::string_view text, bool* too_deep = nullptr);

// Reads a log, checking each record's "prev" against the hash of the line before and its "seq".
// records gets the parsed records up to (not including) the first bad one.
VerifyResult read_log(const std::string& path, std::vector<nlohmann::json>* records);

// One line of a log as parse_log read it: the parsed record, the line's text (without '\n') and its SHA-256.
struct LogLine {
  nlohmann::json record;
  std::string text;
  std::string sha256;
};
// The same checks as read_log on a log's text. lines gets the lines up to (not including) the first bad one;
// *torn is set when the text ends in a partial line (no '\n'), which is then ignored.
VerifyResult parse_log(const std::string& text, std::vector<LogLine>* lines, bool* torn = nullptr);

// Whether a session or check folder is intact as far as the folder itself shows: ok unless verify_folder
// (record/verify.hpp) finds it broken — the chain, every recorded file hash, no path outside the folder, and,
// when sealed, the seal's coverage. An unfinished or unsigned folder is ok here; `loadtrim verify` tells them
// apart. first_bad_record is the record named by the finding.
VerifyResult verify_session_folder(const std::string& folder);

}  // namespace loadtrim::record
