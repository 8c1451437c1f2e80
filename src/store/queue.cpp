#include "store/queue.hpp"

#include <fcntl.h>
#include <sys/file.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "record/inside.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "store/index.hpp"

namespace loadtrim::store {

namespace fs = std::filesystem;

namespace {

// An entry is a few hundred bytes; anything much larger is not ours.
constexpr std::uintmax_t kMaxEntryBytes = 64 * 1024;

std::string queue_dir(const std::string& data_root) {
  return (fs::path(data_root) / kQueueDirName).string();
}

// The entry's file name: the folder's own name with anything but [A-Za-z0-9._-] replaced, so that a folder
// name can never point outside the queue folder, then 16 hex digits of the SHA-256 of the whole path: two
// folders of the same name (check folders of several cells, sessions in per-cell folders) never share an
// entry.
std::string entry_name(const std::string& folder) {
  std::string n = fs::path(folder).lexically_normal().filename().string();
  if (n.empty()) n = fs::path(folder).lexically_normal().parent_path().filename().string();
  for (char& ch : n) {
    const bool ok = (ch >= 'A' && ch <= 'Z') || (ch >= 'a' && ch <= 'z') || (ch >= '0' && ch <= '9') ||
                    ch == '.' || ch == '_' || ch == '-';
    if (!ok) ch = '_';
  }
  if (n.empty() || n[0] == '.') n = "_" + n;
  return n + "-" + record::sha256_hex(folder).substr(0, 16) + ".json";
}

// The queue folder, made when missing (with any missing parent), each new directory fsync'd into its parent
// (record::make_directories_durably), so an entry confirmed in it is not lost with the folder's name on a
// power loss; false with a sentence when it cannot be.
bool make_queue_dir(const fs::path& dir, std::string& error) {
  std::string err;
  if (record::make_directories_durably(dir.string(), err)) return true;
  error = dir.string() + ": " + err;
  return false;
}

// A start or end-without-seal entry of the same folder: the same name with its own suffix, so that it never
// stands for (or is kept instead of) the folder's index entry.
std::string marker_name(const std::string& folder, const char* marker) {
  std::string n = entry_name(folder);
  return n.substr(0, n.size() - 5) + "." + marker + ".json";
}

struct Entry {
  std::string file, folder, what, queued_utc, error;
  RunningEntry running;  // what == "started"
};

Entry read_entry(const std::string& file) {
  Entry e;
  e.file = file;
  std::error_code ec;
  const auto size = fs::file_size(file, ec);
  if (ec || !fs::is_regular_file(fs::symlink_status(file, ec))) {
    e.error = file + ": not a regular file";
    return e;
  }
  if (size > kMaxEntryBytes) {
    e.error = file + ": " + std::to_string(size) + " bytes, more than a queue entry can be";
    return e;
  }
  // Read under the same limit (the file may have grown since its size was taken).
  const record::InsideFile f = record::read_file_whole(file, kMaxEntryBytes);
  if (f.status != record::InsideStatus::ok) {
    e.error = f.error;
    return e;
  }
  const auto j = nlohmann::json::parse(f.content, nullptr, false);
  if (!j.is_object() || !j.contains("folder") || !j["folder"].is_string() || !j.contains("what") ||
      !j["what"].is_string()) {
    e.error = file + ": not a queue entry (a JSON object with the strings \"folder\" and \"what\")";
    return e;
  }
  e.folder = j["folder"].get<std::string>();
  e.what = j["what"].get<std::string>();
  if (j.contains("queued_utc") && !j["queued_utc"].is_string()) {
    e.error = file + ": not a queue entry (\"queued_utc\" is not a string)";
    return e;
  }
  e.queued_utc = j.value("queued_utc", std::string("?"));
  if (e.folder.empty() || e.folder[0] != '/')
    e.error = file + ": \"folder\" is not an absolute path (" + e.folder + ")";
  if (e.error.empty() && e.what == "started") {
    // A start entry names what the overview shows: every member a string.
    const auto& r = j.contains("running") ? j["running"] : nlohmann::json();
    const char* keys[] = {"what", "name", "cell", "vehicle", "kind", "started_utc", "live_url"};
    for (const char* k : keys)
      if (!r.is_object() || !r.contains(k) || !r[k].is_string()) {
        e.error = file + ": not a start entry (\"running\" needs the string \"" + k + "\")";
        return e;
      }
    e.running = {r["what"].get<std::string>(),
                 e.folder,
                 r["name"].get<std::string>(),
                 r["cell"].get<std::string>(),
                 r["vehicle"].get<std::string>(),
                 r["kind"].get<std::string>(),
                 r["started_utc"].get<std::string>(),
                 r["live_url"].get<std::string>(),
                 ""};
    if (e.running.what != "session" && e.running.what != "check")
      e.error = file + ": not a start entry (\"running\".\"what\" is neither session nor check)";
  }
  return e;
}

// Moves an entry that will never index to queue/refused/, under a name no later one takes (its name, then
// the time it was set aside, then a count): what was set aside stays for whoever looks.
void set_aside(const std::string& data_root, const Entry& e, DrainResult& out, const std::string& why) {
  const fs::path dir = fs::path(queue_dir(data_root)) / "refused";
  std::error_code ec;
  std::string mkerr;
  if (!make_queue_dir(dir, mkerr)) out.messages.push_back("cannot make " + dir.string() + ": " + mkerr);
  const std::string stem = fs::path(e.file).stem().string();
  std::string stamp = record::utc_now();
  for (char& c : stamp)
    if (c == ':') c = '-';
  fs::path to = dir / (stem + "." + stamp + ".json");
  for (int i = 2; fs::exists(fs::symlink_status(to, ec)) && i < 1000; ++i)
    to = dir / (stem + "." + stamp + "-" + std::to_string(i) + ".json");
  fs::rename(e.file, to, ec);
  if (ec) fs::remove(e.file, ec);
  ++out.set_aside;
  out.messages.push_back("set aside " + (e.folder.empty() ? e.file : e.folder) + " (queued at " +
                         (e.queued_utc.empty() ? "?" : e.queued_utc) + "): " + why);
}

}  // namespace

bool log_store_line(const std::string& data_root, const std::string& line, std::string& error) {
  return append_utc_line((fs::path(data_root) / kStoreLogName).string(), line, error);
}

bool append_utc_line(const std::string& path, const std::string& line, std::string& error) {
  const int fd = ::open(path.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_NOFOLLOW | O_CLOEXEC, 0644);
  if (fd < 0) {
    error = path + ": " + std::strerror(errno);
    return false;
  }
  std::string text = record::utc_now() + " " + line;
  std::replace(text.begin(), text.end(), '\n', ' ');
  text += '\n';
  // One write per line with O_APPEND: lines of several processes never interleave within a line (POSIX, for
  // regular files).
  const ssize_t n = ::write(fd, text.data(), text.size());
  const bool ok = n == static_cast<ssize_t>(text.size()) && ::fsync(fd) == 0;
  if (!ok) error = path + ": " + std::strerror(errno);
  ::close(fd);
  return ok;
}

bool enqueue(const std::string& data_root, const std::string& folder, const std::string& what,
             std::string& error) {
  const fs::path dir = queue_dir(data_root);
  if (!make_queue_dir(dir, error)) return false;
  std::error_code ec;
  // The folder's end: a start entry still queued is no longer news (the end's entry clears the running row).
  fs::remove(dir / marker_name(folder, "started"), ec);
  const std::string path =
      (dir / (what == "ended" ? marker_name(folder, "ended") : entry_name(folder))).string();
  if (fs::exists(fs::symlink_status(path, ec))) return true;
  const nlohmann::json j = {{"folder", folder}, {"what", what}, {"queued_utc", record::utc_now()}};
  // A path that is not UTF-8 cannot be a JSON string: refused here, said by the caller, never thrown.
  std::string text;
  try {
    text = j.dump();
  } catch (const nlohmann::json::exception&) {
    error =
        "the folder's path is not UTF-8 text, so it cannot be queued: index it with `loadtrim store import`";
    return false;
  }
  return record::write_durable(path, text + "\n", error);
}

std::vector<std::string> queued_entries(const std::string& data_root) {
  std::vector<std::string> out;
  std::error_code ec;
  for (fs::directory_iterator it(queue_dir(data_root), ec), end; !ec && it != end; it.increment(ec)) {
    const std::string name = it->path().filename().string();
    if (name.size() > 5 && name.ends_with(".json") && name[0] != '.') out.push_back(it->path().string());
  }
  std::sort(out.begin(), out.end());
  return out;
}

DrainResult drain_queue(const std::string& data_root, const StoreOpener& open,
                        const record::VerifyOptions& options,
                        std::chrono::steady_clock::time_point deadline) {
  DrainResult out;
  // One drainer at a time per data root (several sessions may end together): a lock file in the queue folder,
  // waited for until the deadline (flock(2); released when this process closes it or exits).
  std::string mkerr;
  if (!make_queue_dir(queue_dir(data_root), mkerr)) out.messages.push_back("cannot make the queue: " + mkerr);
  const std::string lock_path = (fs::path(queue_dir(data_root)) / ".drain.lock").string();
  const int lock_fd = ::open(lock_path.c_str(), O_RDWR | O_CREAT | O_NOFOLLOW | O_CLOEXEC, 0644);
  struct Unlock {
    int fd;
    ~Unlock() {
      if (fd >= 0) ::close(fd);
    }
  } unlock{lock_fd};
  bool locked = false;
  while (lock_fd >= 0 && !(locked = ::flock(lock_fd, LOCK_EX | LOCK_NB) == 0)) {
    if (std::chrono::steady_clock::now() >= deadline) break;
    ::usleep(20000);
  }
  if (!locked) {
    out.messages.push_back(
        lock_fd < 0 ? "the queue's lock " + lock_path + " cannot be opened: " + std::strerror(errno)
                    : std::string("another process was draining the queue until the deadline"));
    out.remaining = static_cast<int>(queued_entries(data_root).size());
    return out;
  }
  const std::vector<std::string> files = queued_entries(data_root);
  std::unique_ptr<Store> store;
  for (std::size_t i = 0; i < files.size(); ++i) {
    if (std::chrono::steady_clock::now() >= deadline) {
      out.messages.push_back("the time for indexing is up: " + std::to_string(files.size() - i) +
                             " left in the queue for the next time");
      break;
    }
    // An entry gone since the list was read was taken by its folder's end (a start entry) or another drainer:
    // nothing to do and nothing to set aside.
    std::error_code gone;
    if (fs::symlink_status(files[i], gone).type() == fs::file_type::not_found) continue;
    const Entry e = read_entry(files[i]);
    if (!e.error.empty()) {
      if (fs::symlink_status(files[i], gone).type() == fs::file_type::not_found) continue;  // went meanwhile
      set_aside(data_root, e, out, e.error);
      continue;
    }
    if (!store) {
      std::string err;
      store = open(err);
      if (!store) {
        out.store_ok = false;
        out.messages.push_back("store unavailable (" + err + "): " + std::to_string(files.size() - i) +
                               " kept in the queue");
        break;
      }
    }
    if (e.what == "started" || e.what == "ended") {
      std::string err;
      bool noted = false;
      const bool ok = e.what == "started" ? store->note_running(e.running, noted, err)
                                          : store->clear_running(e.folder, err);
      if (!ok) {
        out.store_ok = false;
        out.messages.push_back("store unavailable (" + err + "): " + std::to_string(files.size() - i) +
                               " kept in the queue");
        break;
      }
      std::error_code ec;
      fs::remove(e.file, ec);
      out.messages.push_back(
          e.what == "ended" ? "ended without a seal " + e.folder + " (queued at " + e.queued_utc + ")"
          : noted ? "running " + e.running.what + " " + e.folder + " (queued at " + e.queued_utc + ")"
                  : "not noted as running (indexed before) " + e.folder);
      continue;
    }
    const IngestResult r = ingest_folder(*store, e.folder, options);
    switch (r.status) {
      case IngestStatus::indexed:
      case IngestStatus::refreshed: {
        // Its running row, if the start was noted, is over (the overview leaves it out anyway).
        std::string ignored;
        store->clear_running(e.folder, ignored);
        std::error_code ec;
        fs::remove(e.file, ec);
        ++out.indexed;
        out.messages.push_back(r.message + " (queued at " + e.queued_utc + ")");
        break;
      }
      case IngestStatus::refused:
      case IngestStatus::broken:
        set_aside(data_root, e, out, r.message);
        break;
      case IngestStatus::store_failed:
        out.store_ok = false;
        out.messages.push_back("store unavailable (" + r.message + "): " + std::to_string(files.size() - i) +
                               " kept in the queue");
        break;
    }
    if (!out.store_ok) break;
  }
  out.remaining = static_cast<int>(queued_entries(data_root).size());
  return out;
}

// --- the lab overview: start entries (docs/store.md "The lab overview") ---
bool enqueue_started(const std::string& data_root, const RunningEntry& e, std::string& error) {
  const fs::path dir = queue_dir(data_root);
  if (!make_queue_dir(dir, error)) return false;
  const nlohmann::json j = {{"folder", e.folder},
                            {"what", "started"},
                            {"queued_utc", record::utc_now()},
                            {"running",
                             {{"what", e.what},
                              {"name", e.name},
                              {"cell", e.cell},
                              {"vehicle", e.vehicle},
                              {"kind", e.kind},
                              {"started_utc", e.started_utc},
                              {"live_url", e.live_url}}}};
  std::string text;
  try {
    text = j.dump();
  } catch (const nlohmann::json::exception&) {
    error = "the folder's path or a name is not UTF-8 text, so the start cannot be queued";
    return false;
  }
  return record::write_durable((dir / marker_name(e.folder, "started")).string(), text + "\n", error);
}

}  // namespace loadtrim::store
