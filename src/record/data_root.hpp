// The lab's data root: one place for sessions, dyno checks, histories, keys and the queue, so that every
// command, run from any folder, sees the same state.
//
// Where it is, first match wins:
//   1. the --data-dir option (relative to the current folder)
//   2. the environment variable LOADTRIM_DATA_DIR (non-empty; relative to the current folder)
//   3. `data_dir = "..."` at the top of the system configuration file /etc/loadtrim/loadtrim.toml (absolute)
//   4. $XDG_DATA_HOME/loadtrim, when XDG_DATA_HOME is set to an absolute path (the XDG base directory rule:
//      relative values are ignored)
//   5. $HOME/.local/share/loadtrim
// A system file that exists but whose data_dir is not an absolute path string is an error, not a
// fall-through: a lab that configured a root must not silently get another one.
//
// Layout (made on first use by ensure_data_root):
//   sessions/  session folders            checks/   <cell>/cell-log.jsonl and the check folders
//   history/   vehicle histories          keys/     key pairs and trusted public keys (mode 0700)
//   queue/     work waiting to be done
//
// resolve_data_root is pure (everything it reads is passed in) and unit-tested; find_data_root gathers those
// inputs from the process and the file system.
#pragma once

#include <optional>
#include <string>
#include <vector>

namespace loadtrim::record {

inline constexpr const char* kSystemConfigPath = "/etc/loadtrim/loadtrim.toml";
inline constexpr const char* kDataDirEnv = "LOADTRIM_DATA_DIR";

struct DataRootInputs {
  std::string option;                        // --data-dir, "" when not given
  std::optional<std::string> env;            // LOADTRIM_DATA_DIR
  std::optional<std::string> system_config;  // the text of the system file, nullopt when it does not exist
  std::string system_config_path = kSystemConfigPath;
  std::optional<std::string> xdg_data_home;  // XDG_DATA_HOME
  std::optional<std::string> home;           // HOME
  std::string cwd;                           // the current folder, for relative values
};

struct DataRoot {
  std::string path;    // absolute, normalised; "" when it could not be resolved
  std::string source;  // how it was chosen, for --help and the record, e.g. "--data-dir", "LOADTRIM_DATA_DIR"
  std::string error;   // why it could not be resolved
  bool ok() const { return error.empty() && !path.empty(); }
  std::string sessions() const { return path + "/sessions"; }
  std::string checks() const { return path + "/checks"; }
  std::string history() const { return path + "/history"; }
  std::string keys() const { return path + "/keys"; }
  std::string queue() const { return path + "/queue"; }
  std::string describe() const;  // "<path> (from <source>)" or the error
};

DataRoot resolve_data_root(const DataRootInputs& in);
// The same, from this process: its environment, the system file, its current folder. Never throws.
DataRoot find_data_root(const std::string& option);

// Creates what is missing of the layout; keys/ gets mode 0700, and an existing keys/ that others may enter is
// narrowed to 0700 (noted in *notes). False with error when a folder cannot be made.
bool ensure_data_root(const DataRoot& root, std::string& error, std::vector<std::string>* notes = nullptr);

// The string value of `key` in `table` ("" = the top level, before any [table] header) of a TOML text, for
// the few keys the record layer reads (data_dir, [records] public_key) without a TOML library: basic strings
// with the TOML escapes and literal strings, one per line, comments allowed. nullopt when the key is absent;
// an *error (and nullopt) when it is present but not a one-line string.
std::optional<std::string> toml_string_value(const std::string& text, const std::string& table,
                                             const std::string& key, std::string* error = nullptr);

}  // namespace loadtrim::record
