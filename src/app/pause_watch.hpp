// Where a running session's pause and continue requests come from (docs/session.md "Pause and continue"):
//   - SIGUSR1 asks for a pause, SIGUSR2 for a continue; the record names the user the signal came from;
//   - `loadtrim pause FOLDER --why ...` and `loadtrim continue FOLDER` from another terminal: a request file
//     beside the folder's lock (folder_request_path), taken and removed by the session's process;
//   - at the session's own terminal, a line "pause <reason>" or "continue" (stdin a terminal only).
// A thread polls all three every 100 ms and hands them to the session's PauseControl; the session takes them
// at its next step. A request file is checked before it is believed (size, JSON, action, lengths); a bad one
// is removed and named on stderr.
#pragma once

#include <sys/types.h>

#include <atomic>
#include <string>
#include <thread>

#include "session/pause.hpp"

namespace loadtrim::app {

// SIGUSR1 and SIGUSR2 to the pause flags (call once, before the session starts).
void install_pause_handlers();

class PauseWatch {
 public:
  // `operator_name` is who a console line is recorded as.
  PauseWatch(session::PauseControl& control, std::string folder, std::string operator_name,
             bool console_lines);
  ~PauseWatch();
  PauseWatch(const PauseWatch&) = delete;
  PauseWatch& operator=(const PauseWatch&) = delete;

 private:
  void loop();
  void take_file();
  void take_console();
  void take_signals();
  session::PauseControl& control_;
  std::string folder_, request_path_, operator_;
  bool console_;
  std::string line_;
  bool answered_ = false;  // a request file that could not be removed is answered once (dev, inode)
  dev_t answered_dev_ = 0;
  ino_t answered_ino_ = 0;
  std::atomic<bool> done_{false};
  std::thread thread_;
};

// `loadtrim pause` / `loadtrim continue`: leaves the request for the session running in `folder` and waits
// (at most 10 s of our own clock) for it to be taken. Returns the exit code; messages on stderr/stdout.
int send_pause_request(const std::string& folder, const std::string& action, const std::string& by,
                       const std::string& why);

}  // namespace loadtrim::app
