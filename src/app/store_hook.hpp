// A finished session or dyno check is indexed in the lab's record store when it ends (issue 19, docs/store.md
// "Indexed when it ends"): queued first in the data root, then the queue drained within a few seconds. The
// store down, locked or slow never changes the session's result or exit code: the entry stays queued and is
// indexed at a later end or by `loadtrim store import --queued`.
#pragma once

#include <functional>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>

#include "core/strategy.hpp"
#include "record/data_root.hpp"
#include "store/index.hpp"

namespace loadtrim::app {

// `folder` (sealed) is "session" or "check". `say` prints the outcome to the console (one line; failures go
// to stderr whatever `say`). A lab without a store (none configured, no <data root>/store.sqlite) is not
// using one: nothing is queued or said.
// `simulated`: the session ran against a simulator this command started (the demo): never indexed into a
// store the lab configured. Never throws.
void index_finished_folder(const record::DataRoot& root, const std::string& folder, const std::string& what,
                           bool say, bool simulated = false);

// The demo's lab gets a store when it has none (no [store] configured, no <data root>/store.sqlite): an empty
// SQLite store at this loadtrim's schema, so that `loadtrim history` lists the demo's sessions. Never
// migrates an existing store (that is `loadtrim store migrate`'s). False (said on stderr) when it cannot be
// made.
bool ensure_demo_store(const record::DataRoot& root, bool say);

// Drains the queue into the store at `where` (at most `budget_s` seconds) and prints what it did; the number
// left queued, -1 when the store could not be used, -2 when the queue is empty but a folder was set aside
// (it does not verify, or is gone). Never throws.
int drain_store_queue(const record::DataRoot& root, const store::StorePath& where, double budget_s, bool say);

// --- the lab overview (docs/store.md "The lab overview") ---
// A session or check noted as running in the lab's store: a start entry written to the queue now (a small
// local file), and the queue drained by a thread of its own (bounded as at an end), so the session or check
// never waits for the store. Nothing is done for a lab without a store, or (as at the end) for a simulated
// session and a store the lab configured. Never throws.
class RunningNote {
 public:
  RunningNote();
  static RunningNote start(const record::DataRoot& root, const store::RunningEntry& entry, bool simulated);
  // The command ended: waits for the start's drain (bounded by its own deadline). `indexed`: the folder's
  // index entry follows (index_finished_folder), which clears the running row; otherwise an "ended" entry is
  // queued and drained now, so the overview stops showing it as running.
  void end(bool indexed, bool say);
  ~RunningNote();  // waits for the start's drain
  RunningNote(RunningNote&&) noexcept;
  RunningNote& operator=(RunningNote&&) noexcept;

  struct Impl;

 private:
  std::unique_ptr<Impl> impl_;
};

// --- the history first setting (docs/store.md, "The history first setting") ---
// The history of `vehicle` for a session on `cell`: from the lab's record store when one can be used (the
// folders of the rows used verified again; store::lookup_store_history), else `from_file(why_not)` (the
// per-cell history file `history_file`, as before the store; why_not says why an entry there was not used).
// `lookup` says where it looked, why the store was not used, and which rows were not used and why; it goes
// into the first_setting record. Never throws.
struct HistoryFound {
  std::optional<core::HistoryEntry> entry;
  nlohmann::json lookup;
};
HistoryFound find_history(
    const record::DataRoot& root, const std::string& cell, const std::string& vehicle,
    const std::string& history_file,
    const std::function<std::optional<core::HistoryEntry>(std::string& why_not)>& from_file);

}  // namespace loadtrim::app
