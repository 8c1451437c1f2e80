// Process exit codes of the loadtrim command (documented in the README).
#pragma once

namespace loadtrim::app {

enum ExitCode : int {
  kAccepted = 0,     // the job done: acceptance reached (or the subcommand succeeded)
  kNotAccepted = 1,  // ran to the end without acceptance (limit reached, unusable runs); see the stop reason
  kBadInput = 2,     // an input file or option was refused before anything moved
  kControllerFault = 3,  // the controller or its link failed; the rollers were sent to a controlled stop
  kInterrupted = 4,      // Ctrl-C / SIGTERM: controlled stop, state logged
  kRecordFailure = 5,    // the session record could not be written or verified
  kInternalError = 70,   // a bug: please report it with the session folder
};

const char* describe(ExitCode c);

}  // namespace loadtrim::app
