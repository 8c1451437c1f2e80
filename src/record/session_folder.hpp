// The session folder on disk:
//   inputs/      copies of the cell, profile and target files (their SHA-256 in the log's first record)
//   traces/      run-NNN.csv, one per coast-down (SHA-256 in the log's "coastdown" record)
//   events.jsonl the hash-chained event log (record/event_log.hpp)
//   summary.json the machine-readable result, written at the end (atomically)
//   operator.log the human-readable log
#pragma once

#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "controller/controller.hpp"

namespace loadtrim::record {

std::string utc_now();                        // 2026-12-01T19:39:30.123Z
std::string utc_compact_now();                // 20261201T193930Z, for folder names
std::string safe_name(const std::string& s);  // letters, digits, '-', '_', '.' only
// A file-system name for an identity (a cell, a reviewer): safe_name(s) when that changes nothing, else
// safe_name(s) + "-" + the first 8 hex digits of SHA-256(s), so two names that differ only in characters
// safe_name replaces ("cell (A)" and "cell [A]") never share a key, a log or a history.
std::string identity_name(const std::string& s);

// Creates <root>/<utc>-<id>/ with inputs/ and traces/; throws std::runtime_error when it cannot. Every
// directory it makes (root and its missing parents included) is fsync'd into its parent before it returns
// (make_directories_durably), so the folder's name survives a power loss (docs/records.md, "The chain").
std::string create_session_folder(const std::string& root, const std::string& id);

// fsync(2) of a directory, so that the entries made in it (a new file, a new folder) survive a power loss.
// False with error when the directory cannot be opened or synced.
bool sync_directory(const std::string& dir, std::string& error);
// Makes `dir` and every missing parent (as mkdir -p), fsyncing each new directory's parent after making it.
// An existing directory is not an error (nor is one another process made at the same moment).
bool make_directories_durably(const std::string& dir, std::string& error);

// Writes content to path durably: a temporary file, fsync, rename over the target, fsync of the directory. On
// a failure before the rename the temporary file is removed and the target is left as it was. When only the
// directory's fsync fails, the target already holds the new content, but false is returned with an error
// naming the directory: the write is not durable and must not be relied on.
bool write_durable(const std::string& path, const std::string& content, std::string& error);

// Copies an input file into folder/inputs/<name>; returns {"path", "sha256", "source"}.
nlohmann::json copy_input(const std::string& folder, const std::string& source, const std::string& name);

// A trace as CSV: index,time_s,speed_kmh,force_n,mode,flags.
std::string trace_csv(const std::vector<controller::Sample>& samples);
// Reads one back (for reports and tests): time and speed columns; false on a malformed file.
bool read_trace_csv(const std::string& path, std::vector<double>& time_s, std::vector<double>& speed_kmh,
                    std::string& error);
// The same from a trace's text (read with record::read_inside); name is used in messages.
bool parse_trace_csv(const std::string& text, const std::string& name, std::vector<double>& time_s,
                     std::vector<double>& speed_kmh, std::string& error);

}  // namespace loadtrim::record
