#include "app/store_hook.hpp"

#include <chrono>
#include <cstdio>
#include <filesystem>
#include <thread>

#include "store/history_source.hpp"
#include "store/index.hpp"
#include "store/pg_store.hpp"
#include "store/queue.hpp"
#include "store/sqlite_store.hpp"

namespace loadtrim::app {

namespace fs = std::filesystem;

namespace {

// How long the end of a session may spend indexing, and how long one open waits for another writer's lock.
// Common practice, no source: short against a session's tens of minutes, long enough for a busy store.
constexpr double kEndBudgetS = 10.0;
constexpr int kBusyTimeoutMs = 2000;
// A server at a session's end: 3 s to connect, 4 s per statement, 1 s more for its answer.
constexpr store::PgTimeouts kEndPgTimeouts{3, 4000, 1000};

void log_line(const record::DataRoot& root, const std::string& line) {
  std::string err;
  if (!store::log_store_line(root.path, line, err))
    std::fprintf(stderr, "loadtrim: store log not written: %s\n", err.c_str());
}

record::VerifyOptions verify_options(const record::DataRoot& root) {
  record::VerifyOptions opt;
  opt.keys_dir = root.keys();
  opt.checks_root = root.checks();
  return opt;
}

}  // namespace

int drain_store_queue(const record::DataRoot& root, const store::StorePath& where, double budget_s,
                      bool say) {
  if (!root.ok() || store::queued_entries(root.path).empty()) return 0;
  try {
    const store::StoreOpener open = [&](std::string& error) -> std::unique_ptr<store::Store> {
      if (!where.ok()) {
        error = where.error;
        return nullptr;
      }
      // A server is given its own connect and statement deadlines (pg_store.hpp); a file waits at most the
      // busy timeout for another writer.
      return where.engine == "postgresql"
                 ? store::open_postgresql(where.path, store::OpenMode::use, error, kEndPgTimeouts)
                 : store::open_sqlite(where.path, store::OpenMode::use, error, kBusyTimeoutMs);
    };
    const auto deadline =
        std::chrono::steady_clock::now() + std::chrono::duration_cast<std::chrono::steady_clock::duration>(
                                               std::chrono::duration<double>(budget_s));
    const store::DrainResult r = store::drain_queue(root.path, open, verify_options(root), deadline);
    for (const auto& m : r.messages) {
      log_line(root, m);
      if (!r.store_ok || m.starts_with("set aside"))
        std::fprintf(stderr, "loadtrim: store: %s\n", m.c_str());
      else if (say)
        std::printf("store: %s\n", m.c_str());
    }
    if (r.remaining > 0 && (say || !r.store_ok))
      std::fprintf(stderr,
                   "loadtrim: store: %d folder(s) queued in %s for the store (%s); "
                   "`loadtrim store import --queued` indexes them when it is back\n",
                   r.remaining, (fs::path(root.path) / store::kQueueDirName).string().c_str(),
                   where.ok() ? where.shown().c_str() : where.error.c_str());
    if (!r.store_ok) return -1;
    return r.set_aside > 0 && r.remaining == 0 ? -2 : r.remaining;
  } catch (const std::exception& e) {
    // Nothing here may end a session that was sealed: said, logged, and the queue left for later.
    std::fprintf(stderr, "loadtrim: store: the queue was not drained: %s\n", e.what());
    log_line(root, std::string("queue not drained: ") + e.what());
    return -1;
  }
}

bool ensure_demo_store(const record::DataRoot& root, bool say) {
  if (!root.ok()) return false;
  try {
    const store::StorePath where = store::find_store_path("", root.path);
    std::error_code ec;
    if (!where.ok() || !where.data_root_default || fs::exists(where.path, ec)) return true;
    std::string err;
    auto s = store::open_sqlite(where.path, store::OpenMode::migrate, err, kBusyTimeoutMs);
    if (!s || !s->migrate(err)) {
      std::fprintf(stderr,
                   "loadtrim demo: the lab's record store could not be made (%s); the session is not "
                   "indexed\n",
                   err.c_str());
      return false;
    }
    log_line(root, "made the store " + where.path + " for the demo (schema version " +
                       std::to_string(store::known_schema_version()) + ")");
    if (say)
      std::printf("demo: made the lab's record store %s (`loadtrim history` lists the session afterwards)\n",
                  where.path.c_str());
    return true;
  } catch (const std::exception& e) {
    std::fprintf(stderr, "loadtrim demo: the lab's record store could not be made (%s)\n", e.what());
    return false;
  }
}

void index_finished_folder(const record::DataRoot& root, const std::string& folder, const std::string& what,
                           bool say, bool simulated) {
  if (!root.ok()) return;
  try {
    const store::StorePath where = store::find_store_path("", root.path);
    std::error_code ec;
    const bool configured = !where.ok() || !where.data_root_default;
    // A lab that never made a store is not using one: nothing is queued and nothing said (docs/store.md).
    if (!configured && !fs::exists(where.path, ec)) return;
    // A session against a simulator that this command started (the demo) never goes into a store the lab
    // configured: it is not a record of the lab's cells.
    if (simulated && configured) {
      if (say)
        std::printf("store: not indexed: a simulated session stays out of the lab's configured store\n");
      return;
    }
    const std::string abs = fs::absolute(folder, ec).lexically_normal().string();
    std::string err;
    if (!store::enqueue(root.path, abs, what, err)) {
      std::fprintf(stderr,
                   "loadtrim: store: %s not queued for the store: %s (`loadtrim store import` indexes it)\n",
                   abs.c_str(), err.c_str());
      log_line(root, "not queued " + abs + ": " + err);
      return;
    }
    log_line(root, "queued " + what + " " + abs);
    drain_store_queue(root, where, kEndBudgetS, say);
  } catch (const std::exception& e) {
    std::fprintf(stderr, "loadtrim: store: %s not indexed: %s (`loadtrim store import` indexes it)\n",
                 folder.c_str(), e.what());
  }
}

// --- the lab overview ---
struct RunningNote::Impl {
  record::DataRoot root;
  store::StorePath where;
  std::string folder;
  std::thread drain;
  bool ended = false;
  void join() {
    if (drain.joinable()) drain.join();
  }
  ~Impl() { join(); }
};

RunningNote::RunningNote() = default;
RunningNote::~RunningNote() = default;  // Impl's destructor waits for the drain
RunningNote::RunningNote(RunningNote&&) noexcept = default;
RunningNote& RunningNote::operator=(RunningNote&&) noexcept = default;

RunningNote RunningNote::start(const record::DataRoot& root, const store::RunningEntry& entry,
                               bool simulated) {
  RunningNote note;
  if (!root.ok()) return note;
  try {
    store::StorePath where = store::find_store_path("", root.path);
    std::error_code ec;
    const bool configured = !where.ok() || !where.data_root_default;
    // The same rule as at the end (index_finished_folder): no store, nothing; a simulated session stays out
    // of a store the lab configured.
    if (!configured && !fs::exists(where.path, ec)) return note;
    if (simulated && configured) return note;
    store::RunningEntry e = entry;
    e.folder = fs::absolute(entry.folder, ec).lexically_normal().string();
    std::string err;
    if (!store::enqueue_started(root.path, e, err)) {
      std::fprintf(stderr,
                   "loadtrim: store: the start of %s not queued (the overview will not show it): %s\n",
                   e.folder.c_str(), err.c_str());
      log_line(root, "start not queued " + e.folder + ": " + err);
      return note;
    }
    log_line(root, "queued start of " + e.what + " " + e.folder);
    auto impl = std::make_unique<Impl>();
    impl->root = root;
    impl->where = where;
    impl->folder = e.folder;
    // Its own thread: the session goes on at once; what it says goes to the store log (and stderr when the
    // store is down), never between the console's lines.
    Impl* p = impl.get();
    impl->drain = std::thread([p] { drain_store_queue(p->root, p->where, kEndBudgetS, false); });
    note.impl_ = std::move(impl);
  } catch (const std::exception& ex) {
    std::fprintf(stderr, "loadtrim: store: the start was not queued: %s\n", ex.what());
  }
  return note;
}

void RunningNote::end(bool indexed, bool say) {
  if (!impl_ || impl_->ended) return;
  impl_->ended = true;
  impl_->join();
  if (indexed) return;
  try {
    std::string err;
    if (!store::enqueue(impl_->root.path, impl_->folder, "ended", err)) {
      std::fprintf(stderr, "loadtrim: store: the end of %s not queued: %s\n", impl_->folder.c_str(),
                   err.c_str());
      return;
    }
    log_line(impl_->root, "queued end without a seal " + impl_->folder);
    drain_store_queue(impl_->root, impl_->where, kEndBudgetS, say);
  } catch (const std::exception& ex) {
    std::fprintf(stderr, "loadtrim: store: the end was not queued: %s\n", ex.what());
  }
}

// --- the history first setting (docs/store.md, "The history first setting") ---
HistoryFound find_history(
    const record::DataRoot& root, const std::string& cell, const std::string& vehicle,
    const std::string& history_file,
    const std::function<std::optional<core::HistoryEntry>(std::string& why_not)>& from_file) {
  HistoryFound out;
  nlohmann::json lookup = {{"looked", "store"}, {"store", ""}, {"not_used", nlohmann::json::array()}};
  std::string why_not_store;
  try {
    const store::StorePath where = root.ok() ? store::find_store_path("", root.path) : store::StorePath{};
    std::error_code ec;
    if (!root.ok()) {
      why_not_store = "no data root (" + root.describe() + ")";
    } else if (!where.ok()) {
      why_not_store = where.error;
    } else if (where.data_root_default && !fs::exists(where.path, ec)) {
      why_not_store = "the lab has no record store (none configured, no " + where.path + ")";
    } else {
      lookup["store"] = where.shown();
      std::string err;
      auto s = where.engine == "postgresql"
                   ? store::open_postgresql(where.path, store::OpenMode::use, err, kEndPgTimeouts)
                   : store::open_sqlite(where.path, store::OpenMode::use, err, kBusyTimeoutMs);
      store::StoreHistoryLookup found;
      if (!s) {
        why_not_store = "the store could not be used: " + err;
      } else if (!store::lookup_store_history(*s, vehicle, cell, verify_options(root), found, err)) {
        why_not_store = "the store could not be read: " + err;
      } else {
        for (const auto& n : found.not_used)
          lookup["not_used"].push_back({{"session", n.session}, {"folder", n.folder}, {"why", n.why}});
        if (found.entry && found.entry->basis) found.entry->basis->where = where.shown();
        lookup["note"] = found.entry
                             ? found.entry->basis->note
                             : (found.sessions_found > 0
                                    ? "no accepted session of this vehicle in the store whose folder still "
                                      "verifies: no history"
                                    : "no accepted session of this vehicle in the store: no history");
        out.entry = std::move(found.entry);
        out.lookup = std::move(lookup);
        return out;
      }
    }
  } catch (const std::exception& e) {
    why_not_store = std::string("the store could not be used: ") + e.what();
  }
  // The store unavailable: the per-cell history file, as before the store (said in the record).
  lookup["looked"] = "file";
  lookup["file"] = history_file;
  std::string file_why_not;
  out.entry = from_file(file_why_not);
  if (out.entry) {
    core::HistoryBasis b;
    b.source = "file";
    b.where = history_file;
    b.source_cell = cell;
    b.same_cell = true;
    b.note = "the history file of this vehicle on this cell: not corrected; " +
             core::history_loss_note(out.entry->measured.has_value());
    out.entry->basis = std::move(b);
  }
  lookup["note"] = why_not_store + "; the history file was read" +
                   (out.entry              ? ""
                    : file_why_not.empty() ? ": no entry there"
                                           : ": its entry was not used: " + file_why_not);
  out.lookup = std::move(lookup);
  return out;
}

}  // namespace loadtrim::app
