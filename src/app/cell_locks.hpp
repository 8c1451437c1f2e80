// One session per cell, one process per folder (docs/safety.md): the locks `run`, `resume` and `check` take
// on the cell's controller (exclusive) and `link-check` shares, and the lock on a session folder. Each is
// tried once and never waited for: a busy cell or folder is refused at once with who holds it; a lock left by
// a killed process is recognised as stale, taken over and said so.
#pragma once

#include <optional>
#include <string>

#include "controller/cell.hpp"
#include "record/lock.hpp"

namespace loadtrim::app {

// The controller a cell reaches, as one string: "tcp-<host>-<port>", "serial-<device, symlinks resolved>"; ""
// for a controller simulated inside the tool's own process (no lock needed).
std::string endpoint_key(const controller::CellConfig& cell);

// Takes the cell's lock into `held`. Returns false when refused, with `message` naming the holder ("cell
// busy: session FOLDER, pid N (run since UTC)"); on success `message` is empty or names a stale lock taken
// over (for the record). A cell simulated in-process needs no lock: true, `held` left empty.
bool lock_cell(const controller::CellConfig& cell, record::LockMode mode, const std::string& command,
               const std::string& folder, std::optional<record::FileLock>& held, std::string& message);
// The lock on one session folder (held by `run` for its session, by `resume`, and by `approve` across its
// verify, read and append; approve alone retries for a while, docs/safety.md §7); the lock file lives in the
// lock directory, never inside the folder (the folder's files are all evidence).
bool lock_folder(const std::string& folder, const std::string& command, std::optional<record::FileLock>& held,
                 std::string& message);
// Where `pause` and `continue` leave a request for the session running in `folder`: beside the folder's lock
// (<lock dir>/folder-<hash>.request), never inside the folder.
std::string folder_request_path(const std::string& folder);

}  // namespace loadtrim::app
