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

bool lock_folder(const std::string& folder, const std::string& command, std::optional<record::FileLock>& held,
                 std::string& message) {
  held.reset();
  message.clear();
  std::error_code ec;
  const std::string abs = fs::weakly_canonical(folder, ec).string();
  try {
    const std::string path = (fs::path(record::lock_dir()) /
                              ("folder-" + record::sha256_hex(ec ? folder : abs).substr(0, 32) + ".lock"))
                                 .string();
    return take(path, record::LockMode::exclusive, me(command, ec ? folder : abs), "folder", held, message);
  } catch (const std::exception& e) {
    message = std::string("cannot lock the folder: ") + e.what();
    return false;
  }
}

}  // namespace loadtrim::app
