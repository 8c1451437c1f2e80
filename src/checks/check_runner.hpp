// Runs one dyno check with no vehicle on the rollers, unattended, against the controller interface: connect
// and verify the controller's identity against the cell file, drive the rollers through the check's
// procedure, record every trace, analyse it with the pure core (core/dyno_checks.hpp), stop the rollers, and
// write the check's folder (hash-chained log, traces, result.json, report.html) and its line in the cell's
// history.
//
// A sequential procedure, not a state machine: each step either completes or ends the check in the safe stop.
// Each step is a typed event (session/events.hpp): written to the check's log, then shown to the observers.
#pragma once

#include <atomic>
#include <functional>
#include <nlohmann/json.hpp>
#include <string>

#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "core/dyno_checks.hpp"
#include "record/seal.hpp"
#include "session/events.hpp"

namespace loadtrim::checks {

struct CheckRequest {
  core::CheckKind kind = core::CheckKind::coastdown;
  controller::CellConfig cell;
  std::string cell_file;
  core::CheckProfile profile;
  std::string profile_file;
  std::string checks_root = "checks";
  std::string confirmation;       // how the operator allowed the rollers to move
  bool accept_new_curve = false;  // parasitic: store the determined curve even when it differs from the
                                  // stored one (after major maintenance, when the difference is understood)
  std::string note;
  const record::SigningKey* key = nullptr;  // the cell's signing key for the seal; nullptr: sealed unsigned
  nlohmann::json operator_id = nlohmann::json::object();  // {"name", "from"}
  // The software that runs the check, for its report: {"version", "build"} (the app knows them).
  nlohmann::json software = nlohmann::json::object();
  // Views of the check's steps (the console): each gets every event after its record is durable. The
  // check's record is its own log: an observer that fails or throws is dropped (said on stderr and in an
  // "observer_dropped" record), never the end of the check.
  std::vector<session::Observer*> observers;
  // Called once with the check's folder as soon as it exists (the app notes the check as running for the
  // lab's overview, docs/store.md). Must be quick; an exception from it is ignored.
  std::function<void(const std::string& folder)> on_folder;
};

struct CheckResult {
  enum class End { passed, failed, refused, controller_fault, interrupted, record_failure };
  End end = End::failed;
  std::string verdict;  // one line naming the finding
  std::string folder;
  nlohmann::json result;
};
const char* to_string(CheckResult::End e);  // the process exit codes are the app's (src/app/check_cmds.cpp)

CheckResult run_check(controller::Controller& c, const CheckRequest& req,
                      const std::atomic<bool>* stop = nullptr);

// The check's report.html, from its folder alone (result.json, the log's first record and the traces): a
// header with the date and time, the software version, the operator and the cell, and the record's state said
// once.
bool write_check_report(const std::string& folder, std::string& error);

}  // namespace loadtrim::checks
