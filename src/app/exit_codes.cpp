#include "app/exit_codes.hpp"

namespace loadtrim::app {

const char* describe(ExitCode c) {
  switch (c) {
    case kAccepted:
      return "accepted";
    case kNotAccepted:
      return "not accepted";
    case kBadInput:
      return "bad input";
    case kControllerFault:
      return "controller or link fault";
    case kInterrupted:
      return "interrupted";
    case kRecordFailure:
      return "record failure";
    case kInternalError:
      return "internal error";
  }
  return "unknown";
}

}  // namespace loadtrim::app
