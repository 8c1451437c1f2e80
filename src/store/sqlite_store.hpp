// The record store on SQLite (the Debian libsqlite3 C API): one file, nothing to install or start. The
// schema and its numbered migrations are docs/store.md's; they live in sqlite_store.cpp as SQL steps, and
// the steps applied are rows of the table schema_migrations.
#pragma once

#include <memory>
#include <string>

#include "store/store.hpp"

namespace loadtrim::store {

// Opens the store at `path`. Refused (nullptr, with a sentence naming the file in `error`) when: the file is
// missing (use), is not an SQLite database, holds tables but no schema_migrations (not a loadtrim store),
// holds a schema newer than this tool knows (either mode), or, in `use`, an older one ("run loadtrim store
// migrate"). Waits for another process's lock at most `busy_timeout_ms` (sqlite3_busy_timeout).
std::unique_ptr<Store> open_sqlite(const std::string& path, OpenMode mode, std::string& error,
                                   int busy_timeout_ms = 5000);

}  // namespace loadtrim::store
