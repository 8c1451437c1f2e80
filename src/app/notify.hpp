// Telling people (issue 19, docs/notify.md): when a session or dyno check ends or faults, the cell's
// configured notifiers run with the end's summary: `[notify] command` (a program and its arguments, never a
// shell; the summary as one JSON object on its standard input) and `[notify] mail_to` (the system's mailer,
// the summary as a plain-text message). Each is bounded by notify.timeout_s on our own monotonic clock and
// stopped (SIGKILL) when it overruns. A notifier that fails, overruns or cannot start is logged in
// <data root>/notify.log and on stderr; it never changes the session's result, record or exit code.
#pragma once

#include <atomic>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "controller/cell.hpp"
#include "record/data_root.hpp"

namespace loadtrim::app {

struct NotifierRun {
  bool ok = false;
  std::string message;  // one sentence: how it ended
};

// Runs `argv` (argv[0] an absolute path) with `input` on its standard input and `env` added to this process's
// environment; waits at most `timeout_s`. Standard output is discarded; the first line of standard error is
// kept for the message.
// `stop` (the tool's interrupt flag, may be null) ends the wait early: the notifier is stopped and it is
// said.
NotifierRun run_notifier(const std::vector<std::string>& argv, const std::string& input,
                         const std::vector<std::string>& env, double timeout_s,
                         const std::atomic<bool>* stop = nullptr);

// What the notifiers get: {"what", "event" (ended / interrupted / fault), "cell", "id", "folder", "result",
// "exit_code", "summary"}.
nlohmann::json end_message(const std::string& what, const std::string& cell, const std::string& folder,
                           const std::string& result, int exit_code, const nlohmann::json& summary);

// Runs the cell's notifiers, if any, for `message` and logs each outcome. Never throws.
void notify_end(const controller::CellConfig& cell, const record::DataRoot& root,
                const nlohmann::json& message, const std::atomic<bool>* stop = nullptr);

}  // namespace loadtrim::app
