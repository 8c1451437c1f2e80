// What the polling adapters (framed, Modbus) share: the pacer that spaces polls at a fixed rate of wall time
// without bursts after a stall, and the fault name a status report gives for the controller's flags. Header
// only; no I/O besides sleeping until a poll is due.
#pragma once

#include <chrono>
#include <cstdint>
#include <optional>
#include <string>
#include <thread>

#include "controller/controller.hpp"

namespace loadtrim::adapters {

// Polls at `rate_hz` of wall time from start(). A poll that falls behind (the host stalled, a reply was slow)
// is not caught up with a burst: the next one is a whole period after the late one.
class PollPacer {
 public:
  using Clock = std::chrono::steady_clock;
  struct Turn {
    Clock::time_point due;  // when this poll was due
    Clock::time_point now;  // when it was taken (after sleeping until `due`)
  };

  void start(Clock::time_point now = Clock::now()) {
    active_ = true;
    next_ = now;
  }
  void stop() { active_ = false; }
  bool active() const { return active_; }

  // Sleeps until the next poll is due and returns its turn, or returns nothing (without sleeping) when it is
  // due after `deadline`.
  std::optional<Turn> wait_turn(Clock::time_point deadline, double rate_hz) {
    if (!active_ || next_ > deadline) return std::nullopt;
    const auto period =
        std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(1.0 / rate_hz));
    std::this_thread::sleep_until(next_);
    const Turn t{next_, Clock::now()};
    next_ += period;
    if (next_ < t.now) next_ = t.now + period;  // fell behind: no burst to catch up
    return t;
  }

 private:
  bool active_ = false;
  Clock::time_point next_{};
};

// The fault a status report names for these flags (controller::kFlag*): the emergency stop first (the one
// that must never be taken for a watchdog stop, as controller::Controller::status names them), then the
// watchdog;
// "" when none is set.
inline std::string fault_name(std::uint32_t flags) {
  return (flags & controller::kFlagEstop)      ? "ESTOP"
         : (flags & controller::kFlagWatchdog) ? "WATCHDOG"
         : (flags & controller::kFlagFault)    ? "FAULT"
                                               : "";
}

}  // namespace loadtrim::adapters
