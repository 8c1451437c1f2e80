// The Modbus adapter against the simulated controller's Modbus server (TCP on loopback, RTU over a socat
// pseudo-terminal pair), an independent Modbus client from Debian (mbpoll) reading the documented registers,
// and a full setting session over Modbus TCP.
#include <gtest/gtest.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <limits>
#include <thread>

#include "config/cell_loader.hpp"
#include "config/input_error.hpp"
#include "modbus/modbus_controller.hpp"
#include "modbus/register_map.hpp"
#include "process/child_process.hpp"
#include "record/event_log.hpp"
#include "registry.hpp"
#include "support/modbus_lying_proxy.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;
using loadtrim::process::run_command;
using loadtrim::testing::SimProcess;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;
const std::string kCell = kSrc + "/config/cells/sim-modbus.toml";

controller::CellConfig load_cell() {
  return config::load_cell(kCell, adapters::production().sections());
}

modbus::Settings& settings(controller::CellConfig& c) {
  return std::any_cast<modbus::Settings&>(c.adapter_settings);
}

controller::CellConfig cell_for(unsigned port) {
  auto c = load_cell();
  adapters::production().override_link(c, {port, ""});
  return c;
}

std::vector<controller::Sample> poll_until(controller::Controller& c,
                                           const std::function<bool(const controller::Sample&)>& pred,
                                           int max_samples) {
  std::vector<controller::Sample> all;
  while (static_cast<int>(all.size()) < max_samples) {
    std::vector<controller::Sample> got;
    if (!c.receive_samples(got).ok()) break;
    all.insert(all.end(), got.begin(), got.end());
    if (!all.empty() && pred(all.back())) break;
  }
  return all;
}
}  // namespace

// Reply decoding and setpoint encoding without a link. Check values: the ranges of 16-bit two's-complement
// and unsigned integers, and the IEEE 754 single-precision quiet NaN 0x7FC00000 (definitions of the formats).
TEST(Modbus, ReplyValuesAreCheckedAndSetpointsAreNeverClamped) {
  using namespace loadtrim::modbus;
  Register f32;
  f32.present = true;
  f32.type = Type::float32;
  const std::uint16_t nan_words[2] = {0x7FC0, 0x0000};
  EXPECT_TRUE(std::isnan(decode(f32, nan_words)));
  controller::Mode m = controller::Mode::speed_hold;
  EXPECT_NE(decode_mode(std::nan(""), m), "");
  EXPECT_NE(decode_mode(1.5, m), "");
  EXPECT_NE(decode_mode(4.0, m), "");
  EXPECT_NE(decode_mode(-1.0, m), "");
  EXPECT_EQ(decode_mode(2.0, m), "");
  EXPECT_EQ(m, controller::Mode::road_load);
  std::uint32_t flags = 0;
  EXPECT_NE(decode_flags(-1.0, flags), "");
  EXPECT_NE(decode_flags(4294967296.0, flags), "");
  EXPECT_EQ(decode_flags(4294967295.0, flags), "");
  EXPECT_EQ(flags, 0xFFFFFFFFu);
  int code = 0;
  EXPECT_NE(decode_error_code(std::numeric_limits<double>::infinity(), code), "");
  Register i16;
  i16.present = true;
  i16.type = Type::int16;
  i16.scale = 0.01;
  std::uint16_t w[2] = {0xAAAA, 0xAAAA};
  EXPECT_TRUE(encode(i16, 327.67, w));  // raw 32767, the largest int16
  EXPECT_EQ(w[0], 0x7FFF);
  EXPECT_TRUE(encode(i16, -327.68, w));  // raw -32768, the smallest
  EXPECT_EQ(w[0], 0x8000);
  w[0] = 0x1234;
  EXPECT_FALSE(encode(i16, 327.69, w));  // raw 32769: refused, not clamped to 32767
  EXPECT_FALSE(encode(i16, std::nan(""), w));
  EXPECT_EQ(w[0], 0x1234);  // nothing written
  Register u16;
  u16.present = true;
  u16.type = Type::uint16;
  EXPECT_FALSE(encode(u16, -1.0, w));
  EXPECT_FALSE(encode(u16, 65536.0, w));
  EXPECT_FALSE(encode(f32, 1e39, w));  // beyond the largest float32 (about 3.4e38)
}

TEST(Modbus, TcpHandshakeReadBackCoastdownAt50HzPolling) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "20"});
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  EXPECT_NEAR(info.roller_diameter_m, 1.2192, 1e-6);  // samples/truths/demo-hatchback.toml, float32 register
  EXPECT_NEAR(info.base_inertia_kg, 1250.0, 1e-3);
  ASSERT_TRUE(c.set_inertia(1491.075).ok());
  ASSERT_TRUE(c.set_coefficients({42.38, 0.3135, 0.03013}).ok());
  core::RoadLoad back;
  ASSERT_TRUE(c.read_coefficients(back).ok());
  EXPECT_NEAR(back.f2_n_per_kmh2, 0.03013, 1e-8);  // float32, the little-endian word order register
  ASSERT_TRUE(c.start_stream(50.0).ok());
  ASSERT_TRUE(c.hold_speed(100.0).ok());
  auto hold = poll_until(
      c,
      [](const controller::Sample& s) {
        return s.speed_kmh > 99.5 && s.mode == controller::Mode::speed_hold;
      },
      5000);
  ASSERT_FALSE(hold.empty());
  EXPECT_GT(hold.back().speed_kmh, 99.5);
  ASSERT_TRUE(c.release_road_load().ok());
  auto coast = poll_until(
      c, [](const controller::Sample& s) { return s.speed_kmh < 30.0; }, 20000);
  ASSERT_GT(coast.size(), 50u);
  EXPECT_LT(coast.back().speed_kmh, 30.0);
  for (std::size_t i = 1; i < coast.size(); ++i) {
    ASSERT_EQ(coast[i].index, coast[i - 1].index + 1);
    ASSERT_GE(coast[i].time_s, coast[i - 1].time_s);  // the controller's time register (ms)
  }
  // Speed falls through the coast (up to the 0.05 km/h encoder noise at each end).
  EXPECT_GT(coast.front().speed_kmh, coast.back().speed_kmh + 60.0);
  EXPECT_EQ(coast.back().mode, controller::Mode::road_load);
  ASSERT_TRUE(c.controlled_stop().ok());
}

// A controller that acknowledges a setting (strobe cleared, error 0, setpoint registers holding what was
// written) but does not apply it (loadtrim-sim --modbus-coefficients-not-applied): read back from the
// applied-value registers, the second setting is refused; read back from the setpoint registers alone (a map
// accepted with modbus.accept_setpoint_readback), the same lie passes unseen, which is why a map must name
// the applied values or say that it cannot.
TEST(Modbus, ASettingAcknowledgedButNotAppliedIsRefusedByTheAppliedValues) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "5", "--modbus-coefficients-not-applied"});
  {
    modbus::ModbusController c(cell_for(sim.port()));
    ASSERT_TRUE(c.connect().ok());
    controller::ControllerInfo info;
    ASSERT_TRUE(c.identify(info).ok());
    EXPECT_FALSE(info.has("readback-setpoint-only"));
    ASSERT_TRUE(c.set_coefficients({42.38, 0.3135, 0.03013}).ok());  // the first is applied
    const auto r = c.set_coefficients({50.0, 0.25, 0.031});
    EXPECT_EQ(r.status, controller::Result::Status::fatal);
    EXPECT_NE(
        r.message.find("read-back of the applied values the controller reports (input registers from 20)"),
        std::string::npos)
        << r.message;
    EXPECT_NE(r.message.find("differs from what was written"), std::string::npos) << r.message;
    core::RoadLoad applied;  // still the first setting (float32 registers: 1.2e-7 relative)
    ASSERT_TRUE(c.read_coefficients(applied).ok());
    EXPECT_NEAR(applied.f0_n, 42.38, 42.38 * 1.2e-7);
    c.disconnect();
  }
  auto cell = cell_for(sim.port());
  auto& m = settings(cell).map;
  for (modbus::Q q : modbus::kApplied) m.regs[q].present = false;
  m.accept_setpoint_readback = true;
  modbus::ModbusController c(cell);
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  EXPECT_TRUE(info.has("readback-setpoint-only"));  // logged with the controller in every session
  EXPECT_TRUE(c.set_coefficients({60.0, 0.2, 0.032}).ok()) << "the setpoint registers cannot see the lie";
}

// The controller has been up 2^32 ms - 2 s when the simulation starts (loadtrim-sim --modbus-clock-offset-s):
// the example map's uint32 ms time register wraps to 0 within the first 2 s of controller time (0.1 s of wall
// time at 20x). The adapter's samples keep counting across it, and the clock guard sees an honest clock.
TEST(Modbus, TheTimeCounterWrapsAtItsLimitAndTheSamplesCountOn) {
  const double period = 4294967.296;  // 2^32 ms (definition of a 32-bit counter)
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "20", "--modbus-clock-offset-s", "4294965.296"});
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  ASSERT_TRUE(c.start_stream(50.0).ok());
  std::vector<controller::Sample> all;
  while (all.size() < 60) {  // about 1.2 s of wall time at 50 Hz: 24 s of controller time
    std::vector<controller::Sample> got;
    const auto r = c.receive_samples(got);
    ASSERT_TRUE(r.ok()) << r.message;
    all.insert(all.end(), got.begin(), got.end());
  }
  ASSERT_LT(all.front().time_s, period);
  EXPECT_GT(all.back().time_s, period);
  for (std::size_t i = 1; i < all.size(); ++i) ASSERT_GE(all[i].time_s, all[i - 1].time_s) << i;
  controller::StatusReport st;
  const auto r = c.status(st);
  ASSERT_TRUE(r.ok()) << r.message;
  EXPECT_GT(st.time_s, period);
}

TEST(Modbus, WatchdogWatchesTheHeartbeatCounter) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "20", "--watchdog-ms", "400"});
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  ASSERT_TRUE(c.set_inertia(1491.0).ok());
  ASSERT_TRUE(c.hold_speed(60.0).ok());
  // Reads keep coming, but the heartbeat counter stops: the watchdog must trip anyway.
  controller::StatusReport st;
  for (int i = 0; i < 20; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
    ASSERT_TRUE(c.status(st).ok());
  }
  EXPECT_EQ(st.fault, "WATCHDOG");
  EXPECT_TRUE(st.mode == controller::Mode::controlled_stop || st.mode == controller::Mode::idle);
  // Motoring is refused until the fault is cleared with the rollers stopped (error register, code 40).
  const auto r = c.hold_speed(60.0);
  EXPECT_EQ(r.status, controller::Result::Status::fatal);
  EXPECT_NE(r.message.find("error register 40"), std::string::npos) << r.message;
}

// A controller left idle longer than its watchdog window must still take the first motoring command: the
// watchdog sees a beat only as a change of the heartbeat counter, so the adapter beats just before such a
// command, and goes on from the counter's value (a second tool after one that left after a single beat would
// otherwise write the same value, which is no beat). The simulator's watchdog (300 ms here) latches WATCHDOG
// when motoring with no beat for longer (src/sim, --watchdog-ms).
TEST(Modbus, AControllerIdleLongerThanItsWatchdogTakesTheFirstMotoringCommand) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "5", "--watchdog-ms", "300"});
  {
    modbus::ModbusController first(cell_for(sim.port()));  // an earlier tool: one beat, then gone
    ASSERT_TRUE(first.connect().ok());
    controller::ControllerInfo info;
    ASSERT_TRUE(first.identify(info).ok());
    ASSERT_TRUE(first.heartbeat().ok());
    first.disconnect();
  }
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  std::this_thread::sleep_for(std::chrono::milliseconds(700));  // idle, no beat: over twice the window
  const auto r = c.hold_speed(20.0);
  ASSERT_TRUE(r.ok()) << r.message;
  controller::StatusReport st;
  const auto s = c.status(st);  // well within the window after the command's beat
  ASSERT_TRUE(s.ok()) << s.message;
  EXPECT_EQ(st.fault, "") << "the watchdog tripped on the first motoring command";
  EXPECT_EQ(st.flags & controller::kFlagWatchdog, 0u);
  EXPECT_EQ(st.mode, controller::Mode::speed_hold);
  c.controlled_stop();
}

// Without a time register the host clock stands in for the controller's (docs/modbus.md, "Quantities"), for
// samples and status alike and at the rate the controller states (its time_scale register: the simulator's
// --time-scale 5): the status's time agrees with the samples' (the clock guard refuses a status more than the
// stated rate × 1 s behind the last sample, controller/clock_guard.hpp), and the samples' clock runs at 5×
// the wall clock.
TEST(Modbus, WithoutATimeRegisterSamplesAndStatusShareOneClock) {
  std::string text;
  {
    std::ifstream in(kCell);
    text.assign(std::istreambuf_iterator<char>(in), {});
  }
  const auto from = text.find("[modbus.time]");
  ASSERT_NE(from, std::string::npos);
  const auto to = text.find("[modbus.", from + 1);
  ASSERT_NE(to, std::string::npos);
  text.erase(from, to - from);
  std::string dir = (fs::temp_directory_path() / "loadtrim-notime-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  const std::string path = dir + "/cell.toml";
  std::ofstream(path) << text;
  SimProcess sim({"--modbus-map", path, "--time-scale", "5", "--watchdog-ms", "60000"});
  auto cell = config::load_cell(path, adapters::production().sections());
  ASSERT_FALSE(settings(cell).map[modbus::Q::time].present);
  adapters::production().override_link(cell, {sim.port(), ""});
  modbus::ModbusController c(cell);
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  ASSERT_EQ(info.time_scale, 5.0);
  ASSERT_TRUE(c.start_stream(50.0).ok());
  std::vector<controller::Sample> all;
  const auto w0 = std::chrono::steady_clock::now();
  while (std::chrono::steady_clock::now() - w0 < std::chrono::milliseconds(1500)) {
    std::vector<controller::Sample> got;
    const auto r = c.receive_samples(got);
    ASSERT_TRUE(r.ok()) << r.message;
    all.insert(all.end(), got.begin(), got.end());
  }
  const double wall_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - w0).count();
  ASSERT_GE(all.size(), 20u);
  const double span_s = all.back().time_s - all.front().time_s;
  EXPECT_GT(span_s, 5.0 * (wall_s - 0.3)) << "the samples' clock runs at the stated 5x";
  EXPECT_LT(span_s, 5.0 * (wall_s + 0.3));
  controller::StatusReport st;
  const auto r = c.status(st);
  ASSERT_TRUE(r.ok()) << r.message;
  EXPECT_GE(st.time_s, all.back().time_s) << "read after the last sample, on the same clock";
  EXPECT_LT(st.time_s, all.back().time_s + 5.0 * 0.5);
  c.stop_stream();
  fs::remove_all(dir);
}

TEST(Modbus, ExceptionReplySurfacesAsAClearError) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "5"});
  auto cell = cell_for(sim.port());
  settings(cell).map.regs[modbus::Q::f0].address = 900;  // beyond what the controller serves
  modbus::ModbusController c(cell);
  ASSERT_TRUE(c.connect().ok());
  const auto r = c.set_coefficients({40.0, 0.3, 0.03});
  EXPECT_EQ(r.status, controller::Result::Status::fatal);
  EXPECT_NE(r.message.find("write f0 (holding 900)"), std::string::npos) << r.message;
  EXPECT_NE(r.message.find("Modbus exception 2 from the controller: Illegal data address"), std::string::npos)
      << r.message;
}

TEST(Modbus, IndependentClientReadsTheDocumentedRegisters) {
  // mbpoll (Debian package mbpoll), references 1-based: input register reference 11 = address 10.
  // One client at a time, like many controllers: the adapter lets go before mbpoll asks; a long watchdog
  // keeps the hold going meanwhile.
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "20", "--watchdog-ms", "60000"});
  const std::string port = std::to_string(sim.port());
  std::string out;
  ASSERT_EQ(run_command({"/usr/bin/mbpoll", "-m", "tcp", "-p", port, "-a", "1", "-t", "3:float", "-B", "-r",
                         "11", "-c", "4", "-1", "127.0.0.1"},
                        &out),
            0)
      << out;
  EXPECT_NE(out.find("[11]: \t1.2192"), std::string::npos) << out;  // roller diameter, m
  EXPECT_NE(out.find("[13]: \t1250"), std::string::npos) << out;    // base inertia, kg
  EXPECT_NE(out.find("[15]: \t200"), std::string::npos) << out;     // speed limit, km/h
  // Command a speed hold through our adapter, then read the speed register raw: 1 count = 0.01 km/h.
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  ASSERT_TRUE(c.set_inertia(1491.0).ok());
  ASSERT_TRUE(c.hold_speed(50.0).ok());
  for (int i = 0; i < 40; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
    c.heartbeat();
  }
  c.disconnect();
  std::this_thread::sleep_for(std::chrono::milliseconds(100));
  ASSERT_EQ(run_command({"/usr/bin/mbpoll", "-m", "tcp", "-p", port, "-a", "1", "-t", "3", "-r", "1", "-c",
                         "1", "-1", "127.0.0.1"},
                        &out),
            0);
  const auto pos = out.find("[1]: \t");
  ASSERT_NE(pos, std::string::npos) << out;
  const int raw = std::stoi(out.substr(pos + 6));
  EXPECT_NEAR(raw * 0.01, 50.0, 0.3) << out;
  // The inertia the adapter wrote, as holding register reference 1 (float32, big-endian words).
  ASSERT_EQ(run_command({"/usr/bin/mbpoll", "-m", "tcp", "-p", port, "-a", "1", "-t", "4:float", "-B", "-r",
                         "1", "-c", "1", "-1", "127.0.0.1"},
                        &out),
            0);
  EXPECT_NE(out.find("[1]: \t1491"), std::string::npos) << out;
  ASSERT_TRUE(c.connect().ok());
  c.controlled_stop();
}

// The force setpoint's documented encoding (docs/modbus.md: holding register 13, int16, 1 count = 0.5 N) and
// the constant-force mode code (5) in the mode register, read by mbpoll after our adapter commanded the
// force.
TEST(Modbus, IndependentClientReadsTheForceSetpointScaling) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "5", "--watchdog-ms", "60000", "--empty-rollers"});
  const std::string port = std::to_string(sim.port());
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  EXPECT_TRUE(info.has("force"));
  EXPECT_TRUE(info.has("free"));
  const auto r = c.apply_force(558.8);  // 1117.6 counts: the controller holds 1118 counts, 559 N
  ASSERT_TRUE(r.ok()) << r.message;
  c.disconnect();
  std::this_thread::sleep_for(std::chrono::milliseconds(100));
  std::string out;
  // Holding register reference 14 = address 13, signed 16-bit.
  ASSERT_EQ(run_command({"/usr/bin/mbpoll", "-m", "tcp", "-p", port, "-a", "1", "-t", "4", "-r", "14", "-c",
                         "1", "-1", "127.0.0.1"},
                        &out),
            0)
      << out;
  auto pos = out.find("[14]: \t");
  ASSERT_NE(pos, std::string::npos) << out;
  EXPECT_EQ(std::stoi(out.substr(pos + 6)), 1118) << out;  // × 0.5 N = 559 N
  // Input register reference 5 = address 4, the mode: 5 = constant force (the map's modes.constant_force).
  ASSERT_EQ(run_command({"/usr/bin/mbpoll", "-m", "tcp", "-p", port, "-a", "1", "-t", "3", "-r", "5", "-c",
                         "1", "-1", "127.0.0.1"},
                        &out),
            0)
      << out;
  pos = out.find("[5]: \t");
  ASSERT_NE(pos, std::string::npos) << out;
  EXPECT_EQ(std::stoi(out.substr(pos + 5)), 5) << out;
  ASSERT_TRUE(c.connect().ok());
  EXPECT_TRUE(c.free_coast().ok());  // code 6: the motor lets go, the mode register reads idle
  controller::StatusReport st;
  ASSERT_TRUE(c.status(st).ok());
  EXPECT_EQ(st.mode, controller::Mode::idle);
  c.controlled_stop();
}

TEST(Modbus, RtuOverAPseudoTerminalPair) {
  // socat (Debian) links two pseudo-terminals: the simulator serves RTU on one, the adapter opens the other.
  std::string dir = (fs::temp_directory_path() / "loadtrim-rtu-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  const std::string a = dir + "/controller-end", b = dir + "/tool-end";
  loadtrim::process::ChildProcess socat(
      {"/usr/bin/socat", "pty,raw,echo=0,link=" + a, "pty,raw,echo=0,link=" + b});
  for (int i = 0; i < 100 && !(fs::exists(a) && fs::exists(b)); ++i)
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  ASSERT_TRUE(fs::exists(a) && fs::exists(b)) << "socat did not create the pseudo-terminal pair";
  SimProcess sim({"--modbus-map", kCell, "--modbus-rtu", a, "--time-scale", "20"}, false);
  auto cell = load_cell();
  adapters::SerialLine line;
  line.device = b;
  line.baud = 115200;
  settings(cell).link = line;  // the map of the TCP cell, over RTU
  modbus::ModbusController c(cell);
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  const auto r = c.identify(info);
  ASSERT_TRUE(r.ok()) << r.message;
  EXPECT_NEAR(info.roller_diameter_m, 1.2192, 1e-6);
  ASSERT_TRUE(c.set_coefficients({42.38, 0.3135, 0.03013}).ok());
  ASSERT_TRUE(c.start_stream(20.0).ok());
  auto s = poll_until(
      c, [](const controller::Sample&) { return false; }, 10);
  EXPECT_EQ(s.size(), 10u);
  // The device goes away (socat ends and removes its links, as an unplugged adapter's node goes): the next
  // request fails, retryable, naming the device's path.
  socat.stop();
  ASSERT_FALSE(fs::exists(b));
  controller::StatusReport st;
  const auto gone = c.status(st);
  EXPECT_EQ(gone.status, controller::Result::Status::retryable) << gone.message;
  EXPECT_NE(gone.message.find("the RTU device " + b + " is gone"), std::string::npos) << gone.message;
  c.disconnect();
  fs::remove_all(dir);
}

// RTU frames carry no transaction id: a reply that arrives after the tool's reply timeout would pass for the
// reply to whatever the tool asks next if it has the same function and length. The proxy holds the first
// reply to a read of the mode register back 1.5 s (the reply timeout is 1 s) and then delivers it; the tool,
// 0.7 s after giving up on it, asks for the status again. The late frame (mode 1, speed hold) would read as a
// speed of 0.01 km/h and push every later reply one request on (the speed's reply read as a mode code, …);
// the adapter gives the line one more reply timeout after a timeout and flushes it, so the next status is
// right.
TEST(Modbus, RtuALateReplyIsNeverTakenForTheNextRequestsReply) {
  auto cell = load_cell();
  const auto map = settings(cell).map;
  loadtrim::testing::ModbusLyingProxy proxy(map, loadtrim::testing::ModbusLie::late_reply,
                                            loadtrim::testing::ModbusTrigger::start());
  SimProcess sim({"--modbus-map", kCell, "--modbus-rtu", proxy.controller_device(), "--time-scale", "5",
                  "--watchdog-ms", "60000"},
                 false);
  adapters::SerialLine line;
  line.device = proxy.tool_device();
  line.baud = 115200;
  settings(cell).link = line;
  modbus::ModbusController c(cell);
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  ASSERT_TRUE(c.set_inertia(1491.0).ok());
  ASSERT_TRUE(c.hold_speed(40.0).ok());
  controller::StatusReport st;
  const auto late = c.status(st);
  EXPECT_EQ(late.status, controller::Result::Status::retryable) << late.message;
  EXPECT_NE(late.message.find("read mode (input 4)"), std::string::npos) << late.message;
  EXPECT_TRUE(proxy.lie_began());
  // The held-back reply reached the tool's line and was thrown away, counted and named: a read reply of one
  // register over RTU is 7 bytes (unit, function, byte count, 2 data bytes, CRC-16: the RTU frame format).
  EXPECT_EQ(proxy.stats().late_replies_delivered, 1u);
  EXPECT_NE(late.message.find("7 bytes that came after the failure (a late reply) discarded"),
            std::string::npos)
      << late.message;
  EXPECT_EQ(c.stats().lines_rejected, 1u);
  EXPECT_NE(c.stats().last_rejected.find("read mode (input 4): 7 bytes"), std::string::npos)
      << c.stats().last_rejected;
  std::this_thread::sleep_for(std::chrono::milliseconds(700));
  const auto next = c.status(st);
  ASSERT_TRUE(next.ok()) << next.message;
  EXPECT_EQ(st.mode, controller::Mode::speed_hold);
  EXPECT_EQ(st.flags & controller::kFlagFault, 0u);
  EXPECT_GT(st.speed_kmh, 0.5);  // the rollers are on their way to 40 km/h, not at the stale frame's 0.01
  c.controlled_stop();
}

// The whole-reply bound (docs/modbus.md, "Exceptions"): a reply whose bytes each come within the byte timeout
// of the last but that takes longer than timeouts.reply_ms in all is no reply: a retryable timeout named as
// such, never a slow link that passes. The lying proxy delivers the tool-bound bytes one per 150 ms; with
// modbus.byte_timeout_ms = 1000 no single gap ends the wait, so only the whole-reply bound can. The first
// read of identify (roller_diameter, float32: two registers) is answered over TCP in 13 bytes (7 of MBAP
// header, function code, byte count, 4 data bytes: the Modbus TCP frame format), so about 12 × 150 ms = 1.8
// s, past reply_ms = 1000.
TEST(Modbus, AReplyTricklingInSlowerThanTheWholeReplyBoundIsATimeout) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "5", "--watchdog-ms", "60000"});
  auto cell = load_cell();
  const auto map = settings(cell).map;
  loadtrim::testing::ModbusLyingProxy proxy(sim.port(), map, loadtrim::testing::ModbusLie::trickle,
                                            loadtrim::testing::ModbusTrigger::start());
  adapters::production().override_link(cell, {proxy.port(), ""});
  ASSERT_EQ(cell.timeouts.reply, std::chrono::milliseconds(1000)) << "the shipped reply_ms";
  settings(cell).map.retry.byte_timeout_ms = 1000;
  modbus::ModbusController c(cell);
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  const auto t0 = std::chrono::steady_clock::now();
  const auto r = c.identify(info);
  const double took_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  EXPECT_EQ(r.status, controller::Result::Status::retryable) << r.message;
  EXPECT_NE(r.message.find("read roller_diameter (input 10): no complete reply within timeouts.reply_ms = "
                           "1000 ms: it took "),
            std::string::npos)
      << r.message;
  EXPECT_NE(r.message.find("modbus.byte_timeout_ms = 1000 ms"), std::string::npos) << r.message;
  EXPECT_TRUE(proxy.lie_began());
  // The whole reply came (about 1.8 s) and was refused then: one request, not the rest of identify's reads.
  EXPECT_GT(took_s, 1.0) << r.message;
  EXPECT_LT(took_s, 4.0);
  c.disconnect();
}

// The driver display over Modbus TCP (docs/modbus.md, "Driver prompts"): the prompts written with the strobe
// and read back, the driver (the simulator's driver model) accelerating the vehicle in road-load simulation,
// and the map's neutral bit reported as the neutral flag, only while a prompt is shown.
TEST(Modbus, DriverPromptsAreReadBackAndTheNeutralBitIsReported) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "20"});
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  EXPECT_TRUE(info.has("driver")) << info.capabilities;
  EXPECT_TRUE(info.has("neutral")) << info.capabilities;
  ASSERT_TRUE(c.set_inertia(1491.075).ok());
  ASSERT_TRUE(c.set_coefficients({42.38, 0.3135, 0.03013}).ok());
  ASSERT_TRUE(c.start_stream(50.0).ok());
  ASSERT_TRUE(c.release_road_load().ok());
  const controller::Result acc = c.prompt_driver(controller::DriverPrompt::accelerate, 60.0);
  ASSERT_TRUE(acc.ok()) << acc.message;
  // Before the driver engages a gear the vehicle is in neutral (the flag is set); then in gear up to 60 km/h.
  bool in_gear = false;
  const auto up = poll_until(
      c,
      [&](const controller::Sample& s) {
        in_gear = in_gear || (s.flags & controller::kFlagNeutral) == 0;
        return in_gear && s.speed_kmh >= 60.0;
      },
      5000);
  ASSERT_FALSE(up.empty());
  ASSERT_GE(up.back().speed_kmh, 60.0);
  EXPECT_EQ(up.back().flags & controller::kFlagNeutral, 0u);
  EXPECT_EQ(up.back().mode, controller::Mode::road_load);
  const controller::Result neu = c.prompt_driver(controller::DriverPrompt::neutral);
  ASSERT_TRUE(neu.ok()) << neu.message;
  const auto shift = poll_until(
      c, [](const controller::Sample& s) { return (s.flags & controller::kFlagNeutral) != 0; }, 5000);
  ASSERT_FALSE(shift.empty());
  EXPECT_NE(shift.back().flags & controller::kFlagNeutral, 0u);
  // The status reply reads the same register: the same flag.
  controller::StatusReport st;
  ASSERT_TRUE(c.status(st).ok());
  EXPECT_NE(st.flags & controller::kFlagNeutral, 0u);
  // Cleared: no prompt shown, no neutral signal.
  ASSERT_TRUE(c.prompt_driver(controller::DriverPrompt::off).ok());
  const auto off = poll_until(
      c, [](const controller::Sample& s) { return (s.flags & controller::kFlagNeutral) == 0; }, 50);
  ASSERT_FALSE(off.empty());
  EXPECT_EQ(off.back().flags & controller::kFlagNeutral, 0u);
  ASSERT_TRUE(c.controlled_stop().ok());
}

// A controller that clears the strobe but does not show the prompt (its prompt register still reads "off"):
// refused at the first prompt, as a setting that reads back otherwise is (docs/modbus.md, "Driver prompts").
TEST(Modbus, APromptAcknowledgedButNotShownIsRefused) {
  SimProcess sim({"--modbus-map", kCell, "--time-scale", "20", "--modbus-prompt-not-shown"});
  modbus::ModbusController c(cell_for(sim.port()));
  ASSERT_TRUE(c.connect().ok());
  controller::ControllerInfo info;
  ASSERT_TRUE(c.identify(info).ok());
  ASSERT_TRUE(c.release_road_load().ok());
  const controller::Result r = c.prompt_driver(controller::DriverPrompt::accelerate, 60.0);
  EXPECT_FALSE(r.ok());
  EXPECT_EQ(r.status, controller::Result::Status::fatal);
  EXPECT_NE(r.message.find("reads back the driver prompt code 0 (holding 14) after the strobe, not the 1 "
                           "(accelerate) written"),
            std::string::npos)
      << r.message;
  ASSERT_TRUE(c.controlled_stop().ok());
}

// A "vehicle" cell whose map has no driver display: refused before anything connects (nothing listens on port
// 1: a connect attempt would end in a connect failure, exit 3), exit 2, naming the keys the map lacks
// (docs/session.md, "Who accelerates the vehicle").
TEST(Modbus, AVehicleCellWithoutTheDriverRegistersIsRefusedBeforeConnecting) {
  std::string dir = (fs::temp_directory_path() / "loadtrim-modbus-nodriver-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  std::string cell = [] {
    std::ifstream in(kCell);
    return std::string(std::istreambuf_iterator<char>(in), {});
  }();
  const auto from = cell.find("# The driver display"), to = cell.find("# The dyno's own checks");
  ASSERT_NE(from, std::string::npos);
  ASSERT_NE(to, std::string::npos);
  cell.erase(from, to - from);
  const std::string dyno = "run_up = \"dyno\"";
  cell.replace(cell.find(dyno), dyno.size(), "run_up = \"vehicle\"");
  std::ofstream(dir + "/cell.toml") << cell;
  std::string out, err;
  const int rc = run_command(
      {LOADTRIM_EXE, "run", "--override-checks", "integration test", "--cell", dir + "/cell.toml", "--port",
       "1", "--target", kSrc + "/samples/targets/demo-hatchback.toml", "--profile",
       kSrc + "/tests/data/wltp-fixed-run-short-warmup.toml", "--sessions", dir, "--unattended", "--quiet"},
      &out, &err);
  EXPECT_EQ(rc, 2) << out << err;
  // The session's refusal (stdout; the session folder records it too): before connect, so no connect error.
  EXPECT_NE(out.find("refused: the cell's dyno.run_up is \"vehicle\""), std::string::npos) << out << err;
  EXPECT_NE(out.find("the register map has no modbus.driver_prompt and modbus.prompt_speed"),
            std::string::npos)
      << out;
  EXPECT_EQ((out + err).find("connect"), std::string::npos) << out << err;
  if (!HasFailure()) fs::remove_all(dir);
}

TEST(Modbus, BadRegisterMapsAreRefused) {
  std::string base;
  {
    std::ifstream in(kCell);
    base.assign(std::istreambuf_iterator<char>(in), {});
  }
  auto variant = [&](const std::string& from, const std::string& to) {
    std::string t = base;
    const auto p = t.find(from);
    EXPECT_NE(p, std::string::npos) << from;
    t.replace(p, from.size(), to);
    return t;
  };
  struct Case {
    std::string text, must;
  };
  const Case cases[] = {
      {variant("[modbus.force]\ntable = \"input\"\naddress = 1",
               "[modbus.force]\ntable = \"input\"\naddress = 0"),
       "overlaps speed at input register 0"},
      {variant("[modbus.heartbeat]\ntable = \"holding\"\naddress = 12",
               "[modbus.heartbeat]\ntable = \"holding\"\naddress = 70000"),
       "modbus.heartbeat.address (line"},
      {variant("[modbus.inertia]\ntable = \"holding\"\naddress = 0\ntype = \"float32\"",
               "[modbus.inertia]\ntable = \"holding\"\naddress = 0\ntype = \"float64\""),
       "modbus.inertia.type (line"},
      {variant("unit = \"km/h\"\n[modbus.force]", "unit = \"mph\"\n[modbus.force]"), "modbus.speed.unit"},
      {variant("[modbus.f0]\ntable = \"holding\"", "[modbus.f0]\ntable = \"input\""), "modbus.f0.table"},
      {variant("[modbus.strobe]", "[modbus.not_a_strobe]"), "modbus.strobe: is missing"},
  };
  for (const auto& c : cases) {
    std::string msg;
    try {
      config::parse_cell(c.text, "bad-map.toml", adapters::production().sections());
    } catch (const config::InputError& e) {
      msg = e.what();
    }
    EXPECT_NE(msg.find(c.must), std::string::npos) << "expected: " << c.must << "\ngot: " << msg;
  }
}

// With a map that has none of the dyno checks' entries (force setpoint, [modbus.modes]), as a map written
// before they existed: setting sessions need none of them. The simulator also sets status bit 0x40 all along,
// which the map does not define (docs/modbus.md, "Status bits"): a named warning, logged once as a
// controller_warning record, and no stop; the session ends as an honest one does. The cell is a "vehicle"
// one: every run-up is the simulated driver's, prompted through the map's driver display, the release found
// by the map's neutral bit (docs/modbus.md, "Driver prompts"; docs/session.md).
TEST(Modbus, FullSessionOverModbusTcp) {
  std::string dir = (fs::temp_directory_path() / "loadtrim-modbus-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  std::string cell = [] {
    std::ifstream in(kCell);
    return std::string(std::istreambuf_iterator<char>(in), {});
  }();
  cell.replace(cell.find("poll_rate_hz = 50.0"), 19,
               "poll_rate_hz = 400.0");  // 20 Hz of controller time at 20x
  const auto checks_part = cell.find("# The dyno's own checks");
  ASSERT_NE(checks_part, std::string::npos);
  cell.resize(checks_part);
  ASSERT_EQ(cell.find("\n[modbus.force_setpoint]"), std::string::npos);
  ASSERT_EQ(cell.find("\n[modbus.modes]"), std::string::npos);
  ASSERT_NE(cell.find("\n[modbus.driver_prompt]"), std::string::npos);
  const std::string dyno = "run_up = \"dyno\"";
  cell.replace(cell.find(dyno), dyno.size(), "run_up = \"vehicle\"");
  std::ofstream(dir + "/cell.toml") << cell;
  SimProcess sim({"--modbus-map", dir + "/cell.toml", "--time-scale", "20", "--modbus-status-bits", "64"});
  std::string out, err;
  const int rc =
      run_command({LOADTRIM_EXE, "run", "--override-checks", "integration test against the simulator",
                   "--cell", dir + "/cell.toml", "--port", std::to_string(sim.port()), "--target",
                   kSrc + "/samples/targets/demo-hatchback.toml", "--profile",
                   kSrc + "/tests/data/wltp-fixed-run-short-warmup.toml", "--sessions", dir, "--unattended",
                   "--quiet", "--rewarm-s", "60"},
                  &out, &err);
  EXPECT_EQ(rc, 0) << out << err;
  std::string folder;
  for (const auto& e : fs::directory_iterator(dir))
    if (e.is_directory() && e.path().filename() != "history") folder = e.path().string();
  const auto v = record::verify_session_folder(folder);
  EXPECT_TRUE(v.ok) << v.message;
  std::ifstream in(folder + "/summary.json");
  const auto j = nlohmann::json::parse(in);
  EXPECT_TRUE(j.value("accepted", false)) << j.dump(2);
  // Standstill by the cell's threshold with the simulator's encoder noise at rest (docs/safety.md §3).
  EXPECT_TRUE(j.value("rollers_stopped", false)) << j.dump(2);
  for (const auto& d : j["deviations"]) EXPECT_LE(std::abs(d.value("deviation_n", 99.0)), 10.0);
  // The undefined bit: one controller_warning naming it (code status_bits, the bit 0x40), before the end.
  std::ifstream log(folder + "/events.jsonl");
  int warnings = 0;
  bool finished_after = false;
  for (std::string line; std::getline(log, line);) {
    const auto e = nlohmann::json::parse(line);
    if (e.value("type", "") == "controller_warning" && e.value("code", "") == "status_bits") {
      ++warnings;
      EXPECT_NE(e.value("text", "").find("(0x40;"), std::string::npos) << line;
      EXPECT_EQ(e.value("count", 0), 1) << line;
    }
    if (e.value("type", "") == "finished") finished_after = warnings > 0;
  }
  EXPECT_EQ(warnings, 1) << "the undefined status bit is named once in the session's log";
  EXPECT_TRUE(finished_after);
  // The driver's prompts and releases in the record: each run prompted to accelerate and to shift to neutral,
  // the release found by the neutral bit at or above the start speed (GTR 15 Annex 4 §8.1.3.4: the coast
  // starts from the start speed; 0.5 km/h: the encoder noise's band, common practice, no source), and the
  // display cleared after each run.
  std::vector<nlohmann::json> rs;
  ASSERT_TRUE(record::read_log(folder + "/events.jsonl", &rs).ok);
  int accelerate = 0, neutral = 0, cleared = 0, checked = 0;
  for (const auto& e : rs) {
    if (e.value("type", "") == "run_up") {
      EXPECT_EQ(e.value("run_up", ""), "vehicle") << e.dump();
    }
    if (e.value("type", "") == "driver_prompt") {
      accelerate += e.value("prompt", "") == "accelerate";
      neutral += e.value("prompt", "") == "neutral";
      cleared += e.value("prompt", "") == "off";
    }
    if (e.value("type", "") == "run_up_checked") {
      ++checked;
      EXPECT_EQ(e.value("ending", ""), "coasted") << e.dump();
      EXPECT_EQ(e.value("detected_by", ""), "neutral signal") << e.dump();
      EXPECT_GE(e.value("release_speed_kmh", 0.0), e.value("start_speed_kmh", 1e9) - 0.5) << e.dump();
      EXPECT_GT(e.value("release_delay_s", -1.0), 0.0) << e.dump();
    }
  }
  EXPECT_GE(checked, 2) << "two consecutive passes at least (GTR 15 Annex 4 §8.1.3.4.2)";
  EXPECT_EQ(accelerate, checked);
  EXPECT_EQ(neutral, checked);
  EXPECT_EQ(cleared, checked);
  if (!HasFailure()) fs::remove_all(dir);
}
