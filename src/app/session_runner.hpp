// What `run`, `resume` and `demo` share: loading and validating every input before anything connects, the
// operator's confirmation, signal handling, the session folder and its record, history, and the exit code.
#pragma once

#include <atomic>
#include <optional>
#include <string>
#include <vector>

#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "core/strategy.hpp"
#include "core/vehicle.hpp"
#include "physics/roller_model.hpp"
#include "record/data_root.hpp"
#include "record/seal.hpp"
#include "report/report.hpp"
#include "session/console.hpp"
#include "session/session.hpp"

namespace loadtrim::app {

struct RunRequest {
  std::string cell_file, target_file,
      profile;           // profile: a name in config/profiles or a file; empty = the target's
  std::string data_dir;  // --data-dir; "" = LOADTRIM_DATA_DIR, the system file, the per-user default
  std::string
      operator_name;  // --operator; "" = the cell file's records.operator, else asked, else the login name
  std::string sessions_dir;  // "" = <data root>/sessions
  std::string first_setting = "loss-map";
  std::string fleet_csv;    // default: samples/data's EPA file
  std::string history_dir;  // "" = <data root>/history
  bool unattended = false;
  bool simulator = false;  // the cell is a simulator this process started: no rollers move
  session::Console::Mode console = session::Console::Mode::normal;
  std::string note;
  int port = 0;  // overrides of the cell file
  std::string device;
  double resume_warm_up_s = -1.0;
  double max_pause_s = 3600.0;
  std::string units;  // the console's: "metric", "us", "both", or "" for as the target was given  // a pause
                      // waits this long for its continue, then ends the session (resumable)
  std::optional<physics::Truth> inprocess_truth;  // in-process simulated controller with this truth
  std::string checks_dir;                         // the cells' dyno-check histories; "" = <data root>/checks
  std::string check_profile;                      // default: config/checks/cfr1066.toml
  std::string override_checks;  // non-empty: start although required checks are due; the reason is logged
  report::CsvFormat csv;        // how the session's CSV exports are written (--csv-decimal-comma, --csv-us)
  bool live = false;            // serve the live status page (docs/live.md) while the session runs
  std::string live_bind = "127.0.0.1:0";  // --live-bind HOST:PORT; the token is LOADTRIM_LIVE_TOKEN
};

// Loads and validates every input of the request (throws config::InputError listing every problem).
void check_inputs(const RunRequest& req);
// The lab's data root (docs/records.md): resolves it (--data-dir, LOADTRIM_DATA_DIR,
// /etc/loadtrim/loadtrim.toml, the per-user default), creates its layout, and fills the request's empty
// folders from it. False, with the reason on stderr, when it cannot.
bool resolve_lab(RunRequest& req, record::DataRoot& root);
// Who runs it, for the record: --operator, else the cell file's records.operator, else asked at the console,
// else the login name (said so). {"name", "from"}.
nlohmann::json operator_identity(const RunRequest& req, const controller::CellConfig& cell);
// The cell's signing key when its file names one (records.public_key): false, with the reason on stderr, when
// it cannot be loaded or does not match (the session or check must not start). No key named: true, `key`
// empty.
bool cell_signing_key(const record::DataRoot& root, const controller::CellConfig& cell,
                      std::optional<record::SigningKey>& key);
// Loads and validates, asks for confirmation, creates the folder, runs, and returns the exit code.
int run_new_session(const RunRequest& req, std::string* folder_out = nullptr);
// Continues the session in `folder` from its log.
int resume_session(const std::string& folder, const RunRequest& overrides);

int exit_code_for(session::Outcome o);

// The fleet loss model from an EPA-format CSV (nullopt, with a message on stderr, when it cannot be fitted),
// and the history of a vehicle on a cell (nullopt when there is none, or when its entry is not believable:
// why_not says why) — as the session's first-setting strategies use them.
std::optional<core::FleetLossModel> fleet_model(const std::string& csv);
std::optional<core::HistoryEntry> history_for(const std::string& history_dir,
                                              const controller::CellConfig& cell,
                                              const core::VehicleTarget& v, std::string* why_not = nullptr);
std::string default_fleet_csv();
// A standard profile given by name (config/profiles/NAME.toml) or as a file path; the default dyno check
// profile.
std::string profile_file(const std::string& name_or_path);
// The names profile_file resolves (config/profiles/*.toml, sorted); empty when that folder cannot be read.
std::vector<std::string> profile_names();
std::string default_check_profile();
// The operator's permission to motor the rollers: the explicit unattended flag, or the cautions on stderr and
// `word` typed on the terminal. Returns how it was given (for the record), or "" when refused.
std::string ask_to_motor(bool unattended, const char* cautions, const std::string& word,
                         const std::string& prompt, const std::string& given_as);

// Installs SIGINT/SIGTERM handlers that ask the session (or check) to stop safely; the flag they set.
void install_stop_handlers();
const std::atomic<bool>& stop_flag();

}  // namespace loadtrim::app
