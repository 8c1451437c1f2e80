// A cell's own history, for the dyno checks and the sessions that depend on them:
//   <checks root>/<cell>/cell-log.jsonl   hash-chained, fsync'd, append-only (record/event_log.hpp). Records:
//     "check"            {kind, passed, verdict, folder, adapter, controller}   one per finished check; or
//                        {kind, passed, verdict, logged: true, operator}   one per check performed outside
//                        loadtrim (speed, linearity) and logged with `loadtrim check record`
//     "parasitic_curve"  {f0_n, f1_n_per_kmh, f2_n_per_kmh2, folder, adapter}   the stored curve, latest wins
//     "maintenance"      {note}                                major maintenance (makes checks due again)
//     "seal"             {kind, folder, origin, chain_head, seal, seal_seq, signer}   one per sealed session
//     or
//                        check folder (record/seal.hpp): origin is the SHA-256 of the folder's record 0 (its
//                        identity wherever it is moved), seal the SHA-256 of its seal line. verify looks a
//                        folder up by origin, so a folder cut back to an earlier state, or sealed again, no
//                        longer matches.
//   <checks root>/<cell>/<utc>-<kind>/     one folder per check run, verifiable like a session folder
// A broken chain is never read past: the history is then refused as a whole (nothing is assumed current).
#pragma once

#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "core/dyno_checks.hpp"
#include "core/road_load.hpp"
#include "record/seal.hpp"
#include "record/verify.hpp"

namespace loadtrim::checks {

// "2026-12-01T19:39:30.123Z" → seconds since the Unix epoch; nullopt when malformed.
std::optional<double> parse_utc_s(const std::string& iso);
std::string utc_from_s(double epoch_s);  // the same format, to the millisecond

class CellHistory {
 public:
  CellHistory(const std::string& checks_root, const std::string& cell_name);
  bool ok() const { return error_.empty(); }
  const std::string& error() const { return error_; }
  const std::string& dir() const { return dir_; }
  const std::string& log_path() const { return log_path_; }

  // A check run through one adapter does not count for a cell reached through another: a run over the
  // in-process simulator, say, never makes the real dyno's checks current. `adapter` (the cell file's
  // controller.adapter) keeps the records made through it, and those that name none (logged with `check
  // record`, or written before records named their adapter); "" keeps all.
  std::vector<core::CheckRecord> checks(const std::string& adapter = "") const;
  std::optional<core::RoadLoad> parasitic_curve(std::string* utc = nullptr,
                                                const std::string& adapter = "") const;
  std::optional<double> maintenance_utc_s() const;
  const std::vector<nlohmann::json>& records() const { return records_; }

  // Appends (durably) with the given UTC (normally now); false with error() when it could not. The cell's
  // directory, when it is made, is fsync'd into its parent.
  bool append(const std::string& type, nlohmann::json payload, const std::string& utc);
  // What the last append repaired, for the caller to report: a torn last line (a write a crash cut short)
  // that opening the log cut off; "" when nothing.
  const std::string& repaired() const { return repaired_; }
  // Appends a "seal" record for a folder sealed by record::seal_folder; kind is "session" or the check's
  // kind.
  bool append_seal(const record::SealInfo& seal, const std::string& kind, const std::string& utc);

 private:
  std::string dir_, log_path_, error_, repaired_;
  std::vector<nlohmann::json> records_;
};

// The seq of the cell log's "seal" record for the folder whose record 0 hashes to `origin`; nullopt when
// none.
std::optional<std::uint64_t> logged_seal(const CellHistory& h, const std::string& origin);

// The cell-log entry of a sealed folder, added when the cell log lacks it: seal_and_log seals the folder and
// then appends to the cell log, and a crash in between leaves a sealed folder the log does not know (its
// cut-back would then read as not finished instead of broken; docs/records.md, "The cell log"). `v` is the
// folder's verdict, made with the cell log consulted; the seal must be signed and its signature checked
// against a trusted key of the cell (else false with error, nothing written: an unsigned seal could have been
// made by anyone who can write the folder). The caller holds the folder's lock. added says whether an entry
// was written; note, a torn cell-log line the append cut. True with added false when the log already has it.
bool log_sealed_folder(const std::string& checks_root, const std::string& folder,
                       const record::FolderVerdict& v, bool& added, std::string& note, std::string& error);

// What a session needs from the history: the due list under a check profile, and whether it may start.
struct Readiness {
  bool history_ok = true;
  std::string history_error;
  std::vector<core::DueItem> items;
  std::vector<core::DueItem> blocking;  // due items among the profile's required checks
  bool may_start() const { return history_ok && blocking.empty(); }
  std::string summary() const;  // one line per blocking item (or "all required checks current")
};
// `adapter`: the cell file's controller.adapter (CellHistory::checks).
Readiness readiness(const CellHistory& h, const core::CheckProfile& profile, double now_utc_s,
                    const std::string& adapter);

// What a finished session or dyno check calls last, after its final record and its last write to any file of
// the folder: seals the folder (record::seal_folder, with the cell's key or unsigned) and appends the seal to
// the cell's log under checks_root (<checks_root>/<cell>/cell-log.jsonl, the same log CellHistory reads).
// False with error when either step failed; *info->seal_sha256 is non-empty when the folder itself was sealed
// (then only the cell-log append failed, and the error says so). info->notes lists the repairs made on the
// way (a torn last line cut from the folder's log or the cell log), for the caller to report.
bool seal_and_log(const std::string& folder, const record::SealRequest& request,
                  const std::string& checks_root, const std::string& kind, record::SealInfo* info,
                  std::string& error);
nlohmann::json to_json(const Readiness& r);

}  // namespace loadtrim::checks
