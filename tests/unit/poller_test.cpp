// The pacer the polling adapters share (dyno-adapters/poller.hpp; framed and Modbus poll through it): polls a
// whole period apart from the start, none when the next is due after the caller's deadline, and no burst to
// catch up after a stall (the next poll a whole period after the late one). The check values are the period
// of the rate asked (1/100 Hz = 10 ms, exact in the clock's nanoseconds) and the time points the test passes
// in; the flags' names are those the controller interface defines (src/controller/controller.hpp).
#include "poller.hpp"

#include <gtest/gtest.h>

#include <chrono>
#include <optional>

using loadtrim::adapters::fault_name;
using loadtrim::adapters::PollPacer;
using namespace std::chrono_literals;

TEST(Poller, PollsAreAWholePeriodApartFromTheStart) {
  PollPacer p;
  EXPECT_FALSE(p.active());
  const auto t0 = PollPacer::Clock::now();
  p.start(t0);
  ASSERT_TRUE(p.active());
  const auto far = t0 + 10s;
  std::optional<PollPacer::Turn> prev;
  for (int i = 0; i < 5; ++i) {
    const auto turn = p.wait_turn(far, 100.0);
    ASSERT_TRUE(turn) << i;
    EXPECT_GE(turn->now, turn->due) << "a poll is never taken before it is due";
    if (!prev) {
      EXPECT_EQ(turn->due, t0);
    } else if (prev->due + 10ms >= prev->now) {
      // The previous poll was on time: this one keeps the schedule (the period after it was due, not after
      // the host woke for it).
      EXPECT_EQ(turn->due, prev->due + 10ms) << i;
    } else {
      // The host woke more than a period late: the schedule restarts a period after that poll.
      EXPECT_EQ(turn->due, prev->now + 10ms) << i;
    }
    prev = turn;
  }
}

TEST(Poller, NoPollWhenTheNextIsDueAfterTheDeadline) {
  PollPacer p;
  const auto now = PollPacer::Clock::now();
  p.start(now + 5s);  // the first poll due in 5 s
  const auto before = PollPacer::Clock::now();
  EXPECT_FALSE(p.wait_turn(now + 1s, 100.0)) << "due after the deadline";
  EXPECT_LT(PollPacer::Clock::now() - before, 1s) << "and without sleeping until it is due";
  p.stop();
  EXPECT_FALSE(p.active());
  EXPECT_FALSE(p.wait_turn(now + 10s, 100.0)) << "stopped: no poll at all";
}

TEST(Poller, AStalledPollerDoesNotBurstToCatchUp) {
  PollPacer p;
  // Started 1 s ago at 100 Hz: 100 polls are overdue. The first is taken at once; the next is a whole period
  // after it, not the 99 others back to back.
  const auto t0 = PollPacer::Clock::now() - 1s;
  p.start(t0);
  const auto late = p.wait_turn(t0 + 10s, 100.0);
  ASSERT_TRUE(late);
  EXPECT_EQ(late->due, t0);
  EXPECT_GE(late->now - late->due, 1s);
  const auto next = p.wait_turn(t0 + 10s, 100.0);
  ASSERT_TRUE(next);
  EXPECT_EQ(next->due, late->now + 10ms);
  // Its deadline passed, a poll already due is still taken (the controller layer's drain after a command);
  // one not yet due is not.
  const auto third_due = next->due + 10ms;
  if (PollPacer::Clock::now() < third_due) {
    EXPECT_FALSE(p.wait_turn(third_due - 1ms, 100.0));
  }
}

// The emergency stop is named first, whatever else the flags show (docs/protocol.md section 7;
// docs/safety.md, "Faults the tool clears": an emergency stop must never be named as a watchdog stop), then
// the watchdog.
TEST(Poller, FaultNamesTheEmergencyStopFirst) {
  using namespace loadtrim::controller;
  EXPECT_EQ(fault_name(0), "");
  EXPECT_EQ(fault_name(kFlagLimit | kFlagAtSetpoint), "") << "at a limit or at setpoint is no fault name";
  EXPECT_EQ(fault_name(kFlagFault), "FAULT");
  EXPECT_EQ(fault_name(kFlagFault | kFlagEstop), "ESTOP");
  EXPECT_EQ(fault_name(kFlagFault | kFlagWatchdog), "WATCHDOG");
  EXPECT_EQ(fault_name(kFlagFault | kFlagEstop | kFlagWatchdog), "ESTOP")
      << "an emergency stop with the watchdog flag set too was named a watchdog stop";
}
