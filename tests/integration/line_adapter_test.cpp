// The line adapter against the simulated controller process on an ephemeral loopback port (and a
// pseudo-terminal), started and stopped by PID per test.
#include <gtest/gtest.h>

#include <chrono>
#include <thread>

#include "controller/cell.hpp"
#include "line/line_controller.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
using controller::Mode;
using controller::Result;
using loadtrim::testing::SimProcess;

namespace {
// Standstill as every stop check in the tool judges it (docs/safety.md §3): the cell's threshold, 5 × the
// stated speed noise (0.5 km/h for these cells), never an exact zero: the encoder reads its noise at rest.
constexpr double kStandstillKmh = 0.5;

controller::Timeouts fast_timeouts() {
  controller::Timeouts t;
  t.connect = std::chrono::milliseconds(2000);
  t.reply = std::chrono::milliseconds(1000);
  t.sample_gap = std::chrono::milliseconds(800);
  t.heartbeat_interval = std::chrono::milliseconds(100);
  return t;
}

std::unique_ptr<line::LineController> tcp(const SimProcess& sim, controller::Timeouts t = fast_timeouts()) {
  return std::make_unique<line::LineController>(line::make_tcp_transport("127.0.0.1", sim.port()), t,
                                                controller::Limits{160.0, 0.0, 10000.0});
}

// Streams until pred(sample) holds or the controller-time budget is spent; returns the samples.
template <class Pred>
std::vector<controller::Sample> stream_until(controller::Controller& c, Pred pred, double budget_s,
                                             Result* last = nullptr) {
  std::vector<controller::Sample> all;
  double t0 = -1;
  for (;;) {
    std::vector<controller::Sample> got;
    const Result r = c.receive_samples(got);
    if (last) *last = r;
    if (!r.ok()) return all;
    all.insert(all.end(), got.begin(), got.end());
    if (t0 < 0) t0 = all.front().time_s;
    if (pred(all.back()) || all.back().time_s - t0 > budget_s) return all;
  }
}

void full_exchange(controller::Controller& c) {
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  EXPECT_EQ(info.name, "loadtrim-sim");
  EXPECT_DOUBLE_EQ(info.roller_diameter_m, 1.2192);  // samples/truths/demo-hatchback.toml
  EXPECT_DOUBLE_EQ(info.base_inertia_kg, 1250.0);
  EXPECT_TRUE(info.has("watchdog"));
  // Set and read back, exactly.
  ASSERT_TRUE(c.set_inertia(1491.075).ok());
  const core::RoadLoad set{42.38, 0.3135, 0.03013};
  ASSERT_TRUE(c.set_coefficients(set).ok());
  core::RoadLoad back;
  ASSERT_TRUE(c.read_coefficients(back).ok());
  EXPECT_EQ(back, set);
  // Speed hold: reaches the setpoint, flagged at setpoint.
  ASSERT_TRUE(c.start_stream(100.0).ok());
  ASSERT_TRUE(c.hold_speed(142.0).ok());
  auto hold = stream_until(
      c, [](const controller::Sample& s) { return (s.flags & controller::kFlagAtSetpoint) != 0; }, 200.0);
  ASSERT_FALSE(hold.empty());
  EXPECT_NEAR(hold.back().speed_kmh, 142.0, 0.5);
  EXPECT_EQ(hold.back().mode, Mode::speed_hold);
  // A full coast-down at 100 Hz: consecutive indices, controller time strictly increasing by 10 ms.
  ASSERT_TRUE(c.release_road_load().ok());
  auto coast = stream_until(
      c, [](const controller::Sample& s) { return s.speed_kmh < 10.0; }, 600.0);
  ASSERT_GT(coast.size(), 10000u);  // ~200 s of controller time at 100 Hz
  EXPECT_LT(coast.back().speed_kmh, 10.0);
  for (std::size_t i = 1; i < coast.size(); ++i) {
    ASSERT_EQ(coast[i].index, coast[i - 1].index + 1) << i;
    ASSERT_NEAR(coast[i].time_s - coast[i - 1].time_s, 0.01, 1e-3) << i;
  }
  EXPECT_EQ(c.stats().samples_lost, 0u);
  EXPECT_EQ(c.stats().lines_lost, 0u);
  EXPECT_EQ(c.stats().lines_rejected, 0u);
  // Controlled stop: to zero speed, then idle.
  ASSERT_TRUE(c.controlled_stop().ok());
  auto stop = stream_until(
      c, [](const controller::Sample& s) { return s.speed_kmh <= kStandstillKmh && s.mode == Mode::idle; },
      60.0);
  ASSERT_FALSE(stop.empty());
  EXPECT_EQ(stop.back().mode, Mode::idle);
  controller::StatusReport st;
  ASSERT_TRUE(c.status(st).ok());
  EXPECT_LE(st.speed_kmh, kStandstillKmh);
  EXPECT_TRUE(st.fault.empty());
}

}  // namespace

TEST(LineAdapter, TcpHandshakeSetHoldCoastStop) {
  SimProcess sim({"--time-scale", "100"});
  auto c = tcp(sim);
  full_exchange(*c);
}

TEST(LineAdapter, SerialOverPseudoTerminalAt115200) {
  SimProcess sim({"--time-scale", "100"}, /*pty=*/true);
  ASSERT_FALSE(sim.device().empty());
  line::SerialSettings s;
  s.device = sim.device();
  s.baud = 115200;
  auto c = std::make_unique<line::LineController>(line::make_serial_transport(s), fast_timeouts(),
                                                  controller::Limits{160.0, 0.0, 10000.0});
  full_exchange(*c);
}

TEST(LineAdapter, RefusesSpeedsAboveTheLimitBeforeSending) {
  SimProcess sim({"--time-scale", "10"});
  auto c = tcp(sim);
  ASSERT_TRUE(c->connect().ok());
  const Result r = c->hold_speed(161.0);
  EXPECT_EQ(r.status, Result::Status::fatal);
  EXPECT_NE(r.message.find("above the limit of 160 km/h"), std::string::npos) << r.message;
  controller::StatusReport st;
  ASSERT_TRUE(c->status(st).ok());
  EXPECT_EQ(st.mode, Mode::idle);  // nothing was sent
  // The controller's own refusals come back as fatal with its code.
  const Result e = c->set_inertia(-3.0);
  EXPECT_EQ(e.status, Result::Status::fatal);
}

TEST(LineAdapter, CorruptedLineIsRejectedNeverActedOn) {
  // Line 2 the simulator sends is the reply to IDENT: corrupted, it is dropped (never acted on), counted, and
  // the request is asked once more when its deadline passes; the answer then comes from the intact second
  // reply.
  SimProcess sim({"--corrupt-line", "2"});
  auto c = tcp(sim);
  ASSERT_TRUE(c->connect().ok());
  controller::ControllerInfo info;
  const auto t0 = std::chrono::steady_clock::now();
  const Result r = c->identify(info);
  ASSERT_TRUE(r.ok()) << r.message;
  EXPECT_GE(std::chrono::steady_clock::now() - t0,
            std::chrono::milliseconds(900));  // waited out the first deadline
  EXPECT_EQ(info.name, "loadtrim-sim");
  EXPECT_DOUBLE_EQ(info.roller_diameter_m, 1.2192);
  EXPECT_EQ(c->stats().lines_rejected, 1u);
  EXPECT_NE(c->stats().last_rejected.find("CRC"), std::string::npos) << c->stats().last_rejected;
  EXPECT_EQ(c->stats().lines_lost, 1u);  // the gap in the controller's line sequence
  // A corrupted stream: every 97th line damaged; samples in them are counted lost, none is taken.
  SimProcess sim2({"--corrupt-every", "97", "--time-scale", "50"});
  auto c2 = tcp(sim2);
  ASSERT_TRUE(c2->connect().ok());
  ASSERT_TRUE(c2->start_stream(100.0).ok());
  auto s = stream_until(
      *c2, [](const controller::Sample&) { return false; }, 30.0);
  EXPECT_GT(c2->stats().lines_rejected, 10u);
  EXPECT_GT(c2->stats().samples_lost, 10u);
  for (std::size_t i = 1; i < s.size(); ++i) ASSERT_GT(s[i].index, s[i - 1].index);
}

TEST(LineAdapter, DroppedConnectionIsReportedWithinTheDeadline) {
  SimProcess sim({"--time-scale", "50", "--drop-in-mode", "ROADLOAD", "--drop-after-s", "5"});
  auto t = fast_timeouts();
  auto c = tcp(sim, t);
  ASSERT_TRUE(c->connect().ok());
  ASSERT_TRUE(c->set_inertia(1491.0).ok());
  ASSERT_TRUE(c->start_stream(100.0).ok());
  ASSERT_TRUE(c->hold_speed(100.0).ok());
  stream_until(
      *c, [](const controller::Sample& s) { return s.speed_kmh > 99.0; }, 100.0);
  ASSERT_TRUE(c->release_road_load().ok());
  // Receive until the link fails; the failure must come within the sample-gap deadline (800 ms) of the last
  // sample that arrived, plus scheduling slack.
  Result last;
  std::size_t received = 0;
  auto last_ok = std::chrono::steady_clock::now();
  for (int i = 0; i < 100000; ++i) {
    std::vector<controller::Sample> got;
    last = c->receive_samples(got);
    if (!last.ok()) break;
    received += got.size();
    last_ok = std::chrono::steady_clock::now();
  }
  const double late_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - last_ok).count();
  EXPECT_EQ(last.status, Result::Status::retryable) << last.message;
  EXPECT_GT(received, 0u);
  EXPECT_LT(late_s, 0.8 + 0.5);
  EXPECT_NE(last.message.find("closed"), std::string::npos) << last.message;
  // Reconnect works, and the rollers are still turning under the controller until its watchdog stops them.
  ASSERT_TRUE(c->connect().ok());
}

TEST(LineAdapter, StalledStreamIsReportedAfterTheSampleGap) {
  SimProcess sim({"--time-scale", "20", "--stall-at-s", "1"});
  auto c = tcp(sim);
  ASSERT_TRUE(c->connect().ok());
  ASSERT_TRUE(c->start_stream(100.0).ok());
  Result last;
  const auto t0 = std::chrono::steady_clock::now();
  stream_until(
      *c, [](const controller::Sample&) { return false; }, 100.0, &last);
  const double waited = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  EXPECT_EQ(last.status, Result::Status::retryable);
  EXPECT_NE(last.message.find("no sample for 800 ms"), std::string::npos) << last.message;
  EXPECT_LT(waited, 0.8 + 1.0);
}

TEST(LineAdapter, WatchdogStopsTheRollers) {
  SimProcess sim({"--time-scale", "20", "--watchdog-ms", "300"});
  auto c = tcp(sim);
  ASSERT_TRUE(c->connect().ok());
  ASSERT_TRUE(c->set_inertia(1491.0).ok());
  ASSERT_TRUE(c->hold_speed(60.0).ok());
  // The tool goes silent (no heartbeat) for longer than the watchdog window.
  std::this_thread::sleep_for(std::chrono::milliseconds(700));
  controller::StatusReport st;
  ASSERT_TRUE(c->status(st).ok());
  EXPECT_EQ(st.fault, "WATCHDOG");
  EXPECT_TRUE(st.flags & controller::kFlagWatchdog);
  EXPECT_TRUE(st.mode == Mode::controlled_stop || st.mode == Mode::idle);
  // Motoring is refused while the fault is latched; the rollers reach zero.
  EXPECT_EQ(c->hold_speed(60.0).status, Result::Status::fatal);
  for (int i = 0; i < 100 && st.speed_kmh > kStandstillKmh; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
    ASSERT_TRUE(c->status(st).ok());
  }
  EXPECT_LE(st.speed_kmh, kStandstillKmh);
  EXPECT_EQ(st.mode, Mode::idle);
  ASSERT_TRUE(c->clear_fault().ok());
  ASSERT_TRUE(c->status(st).ok());
  EXPECT_TRUE(st.fault.empty());
  // The controller also said so in an event line (read by the time the clear was acknowledged).
  EXPECT_GE(c->stats().events, 1u);
  EXPECT_NE(c->stats().last_event.find("kind=WATCHDOG"), std::string::npos) << c->stats().last_event;
}
