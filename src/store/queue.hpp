// The store's queue (issue 19, docs/store.md "Indexed when it ends"): a finished session or dyno check is
// indexed when it ends, but the store being down or slow never stops or slows the session. Every folder to
// index is first written as an entry in <data root>/queue/ (record::DataRoot::queue()) (one small JSON file,
// written whole and renamed into place); the queue is then drained within a deadline on this process's
// monotonic clock. An entry leaves the queue only when its folder is indexed (or was indexed before), or is
// set aside in queue/refused/ when its folder does not verify or is not a finished folder (never retried
// forever). Each step is a line in <data root>/store.log (append-only, flushed per line): queued, indexed,
// set aside, store unavailable.
#pragma once

#include <chrono>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "record/verify.hpp"
#include "store/store.hpp"

namespace loadtrim::store {

inline constexpr const char* kQueueDirName = "queue";  // record::DataRoot::queue()
inline constexpr const char* kStoreLogName = "store.log";

// One line appended to the file `path` with the UTC time first: one write (O_APPEND) and an fsync, so lines
// of several processes never interleave and a line logged is on disk. Newlines in `line` become spaces.
// False (error set) when it cannot be.
bool append_utc_line(const std::string& path, const std::string& line, std::string& error);
// The same to <data_root>/store.log.
bool log_store_line(const std::string& data_root, const std::string& line, std::string& error);

// Writes the queue entry for `folder` (absolute), "session" or "check" (or "ended": the folder ended without
// a seal and is not indexed; its running row is cleared). The entry's file name is the folder's own name (ids
// are unique per lab); an entry already queued for the same folder is kept as it is.
bool enqueue(const std::string& data_root, const std::string& folder, const std::string& what,
             std::string& error);

// The queued entries' files, oldest name first.
std::vector<std::string> queued_entries(const std::string& data_root);

struct DrainResult {
  int indexed = 0;       // indexed now (new or refreshed)
  int set_aside = 0;     // moved to queue/refused/ (the folder does not verify / is not finished)
  int remaining = 0;     // still queued (the store unavailable, or the deadline reached)
  bool store_ok = true;  // false when the store could not be opened or written
  std::vector<std::string> messages;  // one sentence per step, as logged
};

// Opens the store for one drain; nullptr with `error` when it cannot be (missing, locked past its timeout,
// server down). Called at most once per drain, and only when the queue holds an entry.
using StoreOpener = std::function<std::unique_ptr<Store>(std::string& error)>;

// Ingests the queued entries oldest first until the queue is empty, the store fails, or `deadline` passes
// (checked before each entry; one ingest is bounded by the engine's own timeouts).
DrainResult drain_queue(const std::string& data_root, const StoreOpener& open,
                        const record::VerifyOptions& options, std::chrono::steady_clock::time_point deadline);

// --- the lab overview (docs/store.md "The lab overview") ---
// A start entry for the folder `e.folder` (absolute): drained into Store::note_running, so the overview shows
// the session or check as running. The folder's end entry (enqueue with "session"/"check", or "ended" for an
// end without a seal, which drains into Store::clear_running) removes a start entry still queued.
bool enqueue_started(const std::string& data_root, const RunningEntry& e, std::string& error);

}  // namespace loadtrim::store
