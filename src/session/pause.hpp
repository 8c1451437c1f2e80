// Pause and continue, asked from outside the session's thread (a console line, a signal, the `pause` and
// `continue` commands from another terminal: src/app/pause_watch.*), taken by the session at its next step
// (docs/session.md "Pause and continue").
//
// A pause is a controlled stop to standstill: the session discards a run in progress, stops the rollers,
// records who asked and why, and waits at rest (link kept, within Options::max_pause_s of the tool's own
// time) for a continue; it then re-warms, resets the pass count and goes on. Thread-safe: any thread may ask;
// only the session takes.
#pragma once

#include <atomic>
#include <mutex>
#include <optional>
#include <string>

namespace loadtrim::session {

struct PauseRequest {
  std::string by;      // who asked: a name the operator gave, or the user a signal came from
  std::string why;     // the reason given ("" when none was given to a continue)
  std::string source;  // "console", "signal", "command", ...
};

class PauseControl {
 public:
  // A pause while none is pending or held; false (and nothing changes) otherwise.
  bool request_pause(PauseRequest r);
  // A continue while a pause is pending or held; false otherwise.
  bool request_continue(PauseRequest r);
  // Set from a pause request until the session takes the continue: motion steps end on it.
  const std::atomic<bool>& flag() const { return paused_; }
  // The session's side.
  std::optional<PauseRequest> pause_request() const;  // the pending or held pause
  std::optional<PauseRequest> take_continue();        // clears the pause when a continue was asked

 private:
  mutable std::mutex m_;
  std::atomic<bool> paused_{false};
  std::optional<PauseRequest> pause_, continue_;
};

}  // namespace loadtrim::session
