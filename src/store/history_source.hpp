// The history first setting from the lab's record store (issue 19; docs/store.md, "The history first
// setting"): the vehicle's accepted sessions on every cell and, for another cell, the vehicles accepted on
// both, each row used only after its folder has been verified again (it must still be there, verify intact
// and sealed, and carry the seal the store indexed). The estimate itself is the core's
// (core::history_from_store); this reads, checks and says what it did not use and why.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "core/strategy.hpp"
#include "record/verify.hpp"
#include "store/store.hpp"

namespace loadtrim::store {

// A row the estimate did not use.
struct HistoryRowNotUsed {
  std::string session, folder;
  std::string why;  // a sentence: the folder is missing, no longer verifies, carries another seal, ...
};
struct StoreHistoryLookup {
  std::optional<core::HistoryEntry> entry;  // basis->source "store", where the store's location()
  std::vector<HistoryRowNotUsed> not_used;
  int sessions_found = 0;  // accepted sessions of the vehicle in the store, before the folders were checked
};

// False (with a sentence naming the store in `error`) when the store could not be read; true otherwise,
// `out.entry` empty when no accepted session of the vehicle is usable. At most `max_pairs` verified pairs per
// other cell are looked for (the newest first).
bool lookup_store_history(Store& store, const std::string& vehicle, const std::string& cell,
                          const record::VerifyOptions& options, StoreHistoryLookup& out, std::string& error,
                          int max_pairs = core::kMaxCellPairs);

}  // namespace loadtrim::store
