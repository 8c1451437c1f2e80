#include "store/history_source.hpp"

#include <algorithm>
#include <map>
#include <set>

#include "core/profile.hpp"
#include "store/index.hpp"

namespace loadtrim::store {

namespace {

// The row's identity (compared with its folder), and from the verified folder alone its target, final set,
// the last measured curve of an iterative session and the initial warm-up hold: no number of the row reaches
// the loss.
core::StoredSession to_core(const AcceptedSession& a, const SessionEntry& folder) {
  const bool iterative = folder.method == core::to_string(core::SettingMethod::iterative);
  return {a.name,
          a.folder,
          a.cell,
          a.vehicle,
          a.started_utc,
          folder.target,
          folder.final_set.value_or(a.final_set),  // compare_accepted_row required it equal to the row's
          iterative ? folder.measured : std::nullopt,
          folder.warm_up};
}

// Each folder verified and read at most once per lookup (a session on this cell may pair with several other
// cells); every row that names it is still compared with what it says (a forged row naming a folder already
// verified for another row is not believed).
class FolderChecks {
 public:
  FolderChecks(const record::VerifyOptions& options, std::vector<HistoryRowNotUsed>& not_used)
      : options_(options), not_used_(not_used) {}
  // The folder's own facts when the row passes; nullptr (and the row named as not used) when not.
  const SessionEntry* usable(const AcceptedSession& a) {
    const std::string key = a.folder + '\n' + a.origin + '\n' + a.seal_sha256;
    auto it = seen_.find(key);
    if (it == seen_.end()) it = seen_.emplace(key, verify_accepted_folder(a, options_)).first;
    if (const auto finding = compare_accepted_row(a, it->second)) {
      if (reported_.insert(a.name + '\n' + key).second)
        not_used_.push_back({a.name, a.folder, finding->message});
      return nullptr;
    }
    return &*it->second.session;
  }

 private:
  const record::VerifyOptions& options_;
  std::vector<HistoryRowNotUsed>& not_used_;
  std::map<std::string, VerifiedSession> seen_;
  std::set<std::string> reported_;  // each row not used is named once
};

}  // namespace

bool lookup_store_history(Store& store, const std::string& vehicle, const std::string& cell,
                          const record::VerifyOptions& options, StoreHistoryLookup& out, std::string& error,
                          int max_pairs) {
  out = {};
  std::vector<AcceptedSession> rows;
  if (!store.accepted_sessions(vehicle, rows, error)) return false;
  out.sessions_found = static_cast<int>(rows.size());
  FolderChecks checks(options, out.not_used);
  // Per cell, the newest session whose folder still verifies (rows: by cell, newest first in each).
  std::vector<core::StoredSession> latest;
  for (const auto& r : rows)
    if (latest.empty() || latest.back().cell != r.cell)
      if (const SessionEntry* folder = checks.usable(r)) latest.push_back(to_core(r, *folder));
  const bool on_this_cell =
      std::any_of(latest.begin(), latest.end(), [&](const core::StoredSession& s) { return s.cell == cell; });
  std::vector<core::CellPair> pairs;
  std::map<std::string, int> available;  // pairs between this cell and each other, before any was checked
  if (!on_this_cell) {
    for (const auto& other : latest) {
      std::vector<CellPairRow> found;
      if (!store.cell_pairs(cell, other.cell, found, error)) return false;
      available[other.cell] = static_cast<int>(found.size());
      // The newest pairs first (the later of a pair's two sessions; ties by vehicle), as the core orders
      // them.
      std::sort(found.begin(), found.end(), [](const CellPairRow& a, const CellPairRow& b) {
        const std::string& ta = std::max(a.on_a.started_utc, a.on_b.started_utc);
        const std::string& tb = std::max(b.on_a.started_utc, b.on_b.started_utc);
        return ta != tb ? ta > tb : a.vehicle < b.vehicle;
      });
      int used = 0;
      for (std::size_t i = 0; i < found.size() && used < max_pairs; ++i) {
        const SessionEntry* here = checks.usable(found[i].on_a);
        const SessionEntry* there = checks.usable(found[i].on_b);
        if (here && there) {
          pairs.push_back({found[i].vehicle, to_core(found[i].on_a, *here), to_core(found[i].on_b, *there)});
          ++used;
        }
      }
    }
  }
  out.entry = core::history_from_store(cell, latest, pairs, max_pairs);
  if (out.entry && out.entry->basis) {
    auto& b = *out.entry->basis;
    b.source = "store";
    b.where = store.location();
    if (!b.same_cell) b.pairs_available = available[b.source_cell];
    if (!b.same_cell && b.pairs.empty() && b.pairs_available > 0)
      b.note = "from cell " + b.source_cell + ", not corrected: " + std::to_string(b.pairs_available) +
               " vehicle(s) run on both cells, none whose folders still verify (see not_used)";
  }
  // A bounded record: the first kMaxNotUsed rows not used, and how many more.
  constexpr std::size_t kMaxNotUsed = 20;
  if (out.not_used.size() > kMaxNotUsed) {
    const std::size_t more = out.not_used.size() - kMaxNotUsed;
    out.not_used.resize(kMaxNotUsed);
    out.not_used.push_back({"", "", "and " + std::to_string(more) + " more rows not used"});
  }
  return true;
}

}  // namespace loadtrim::store
