#include "app/cell_locks.hpp"

#include <unistd.h>

#include <filesystem>

#include "inprocess/sim_rows.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"

namespace loadtrim::app {

namespace fs = std::filesystem;

std::string endpoint_key(const controller::CellConfig& cell) {
  return adapters::tool_registry().link_key(cell);
}

namespace {

record::LockHolder me(const std::string& command, const std::string& folder) {
  record::LockHolder h;
  h.pid = static_cast<long>(::getpid());
  h.command = command;
  h.folder = folder;
  h.utc = record::utc_now();
  char host[256] = "";
  if (::gethostname(host, sizeof host - 1) == 0) h.host = host;
  return h;
}

bool take(const std::string& path, record::LockMode mode, const record::LockHolder& who,
          const std::string& what, std::optional<record::FileLock>& held, std::string& message) {
  std::string busy, stale;
  held = record::FileLock::try_acquire(path, mode, who, what, busy, &stale);
  message = held ? stale : busy;
  return held.has_value();
}

}  // namespace

bool lock_cell(const controller::CellConfig& cell, record::LockMode mode, const std::string& command,
               const std::string& folder, std::optional<record::FileLock>& held, std::string& message) {
  held.reset();
  message.clear();
  const std::string key = endpoint_key(cell);
  if (key.empty()) return true;
  try {
    return take(record::cell_lock_path(record::lock_dir(), key), mode, me(command, folder), "cell", held,
                message);
  } catch (const std::exception& e) {
    message = std::string("cannot lock the cell: ") + e.what();
    return false;
  }
}

namespace {
// The folder's name in the lock directory: "folder-" and the first 32 hex digits of its canonical path's
// hash.
std::string folder_stem(const std::string& folder, std::string* abs_out = nullptr) {
  std::error_code ec;
  const std::string abs = fs::weakly_canonical(folder, ec).string();
  if (abs_out) *abs_out = ec ? folder : abs;
  return (fs::path(record::lock_dir()) / ("folder-" + record::sha256_hex(ec ? folder : abs).substr(0, 32)))
      .string();
}
}  // namespace

std::string folder_request_path(const std::string& folder) {
  return folder_stem(folder) + ".request";
}

bool lock_folder(const std::string& folder, const std::string& command, std::optional<record::FileLock>& held,
                 std::string& message) {
  held.reset();
  message.clear();
  try {
    std::string abs;
    const std::string path = folder_stem(folder, &abs) + ".lock";
    return take(path, record::LockMode::exclusive, me(command, abs), "folder", held, message);
  } catch (const std::exception& e) {
    message = std::string("cannot lock the folder: ") + e.what();
    return false;
  }
}

}  // namespace loadtrim::app
