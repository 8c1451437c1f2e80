// The simulator's dialect-neutral core and its front ends without a process: each cause of a refusal has the
// code its dialect's specification gives it, on every front end; each cause arises from the refusal the
// specification describes and reaches the wire as that code; a latched fault comes out as a typed event and
// as the documented EVT line; a free coast is reported as idle.
#include <gtest/gtest.h>

#include <algorithm>
#include <string>
#include <vector>

#include "config/loaders.hpp"
#include "config/toml_reader.hpp"
#include "framed/framed_dialect.hpp"
#include "line/line_protocol.hpp"
#include "sim/framed_front_end.hpp"
#include "sim/line_front_end.hpp"
#include "sim/modbus_server.hpp"
#include "sim/sim_controller.hpp"

using namespace loadtrim;
using sim::Cause;

namespace {

struct Expected {
  Cause cause;
  int line_code;      // docs/protocol.md section 10, the table of ERR codes
  int framed_status;  // docs/framed.md section 1, the table of status digits
  int modbus_error;   // docs/modbus.md, the "error" register: the line protocol's codes (section 10)
};

// Every cause of sim::Cause, with the row of each specification that describes it.
const Expected kExpected[] = {
    // protocol.md: "21 bad argument"; framed.md: "2 unknown code, channel or argument".
    {Cause::bad_argument, 21, 2, 21},
    // protocol.md: "30 outside the controller's limits (speed, force, inertia)"; framed.md: "3 outside the
    // device's limits".
    {Cause::out_of_limits, 30, 3, 30},
    // protocol.md: "31 not allowed in the current state (... during road-load simulation, rollers turning)";
    // framed.md: "4 not allowed now".
    {Cause::wrong_state, 31, 4, 31},
    // protocol.md: "40 a fault is latched: CLEAR first"; framed.md: "5 a fault is latched: clear it first".
    {Cause::fault_active, 40, 5, 40},
};

// The line protocol front end, spoken to in whole lines (docs/protocol.md section 1).
struct LineClient {
  sim::LineFrontEnd fe;
  std::uint32_t seq = 1;
  double wall_s = 0.0;
  explicit LineClient(sim::SimSettings s = {}) : fe(physics::Truth{}, std::move(s)) {}
  // The decoded replies (and any EVT lines) to one request.
  std::vector<line::Message> ask(const std::string& type, std::vector<std::string> fields = {}) {
    std::string l = line::encode({seq++, type, std::move(fields)});
    l.pop_back();  // the '\n'
    std::vector<std::string> out;
    fe.on_line(l, wall_s, out);
    return decode_all(out);
  }
  static std::vector<line::Message> decode_all(const std::vector<std::string>& out) {
    std::vector<line::Message> r;
    for (auto l : out) {
      l.pop_back();
      const line::Decoded d = line::decode(l);
      EXPECT_TRUE(d.ok()) << l;
      r.push_back(d.message);
    }
    return r;
  }
  // The error code of an ERR reply, or -1.
  int err(const std::vector<line::Message>& replies) {
    if (replies.size() != 1 || replies[0].type != line::kTypeErr || replies[0].fields.size() < 2) return -1;
    return std::stoi(replies[0].fields[1]);
  }
};

framed::Table shipped_table() {
  auto r = config::TomlReader::from_file(std::string(LOADTRIM_SOURCE_DIR) + "/config/cells/sim-framed.toml");
  return framed::read_table(r);
}

// The framed front end with the shipped table (config/cells/sim-framed.toml), spoken to in frames
// (docs/framed.md section 1).
struct FramedClient {
  framed::Table table = shipped_table();
  sim::FramedFrontEnd fe{physics::Truth{}, sim::SimSettings{}, table};
  double wall_s = 0.0;
  // The reply's words (code, status, values).
  std::vector<std::string> ask(std::vector<std::string> words) {
    std::vector<std::string> out;
    fe.on_bytes(framed::encode_frame(words, table.checksum), wall_s, out);
    if (out.size() != 1) return {"<" + std::to_string(out.size()) + " replies>"};
    const std::string& f = out[0];
    const framed::Decoded d =
        framed::decode_payload(std::string_view(f).substr(1, f.size() - 2), table.checksum);
    return d.ok() ? d.words : std::vector<std::string>{d.error};
  }
  int status(std::vector<std::string> words) {
    const auto r = ask(std::move(words));
    return r.size() >= 2 ? std::stoi(r[1]) : -1;
  }
};

}  // namespace

TEST(SimCore, EachRefusalCauseHasItsDialectsCodeOnEveryFrontEnd) {
  for (const Expected& x : kExpected) {
    EXPECT_EQ(static_cast<int>(sim::line_error_code(x.cause)), x.line_code) << static_cast<int>(x.cause);
    EXPECT_EQ(sim::framed_status(x.cause), x.framed_status) << static_cast<int>(x.cause);
    EXPECT_EQ(sim::modbus_error_code(x.cause), x.modbus_error) << static_cast<int>(x.cause);
  }
}

TEST(SimCore, EachCauseArisesFromItsRefusalAndReachesTheLineProtocolsWire) {
  LineClient c;
  ASSERT_EQ(c.ask(line::kVerbHello, {"version=1"})[0].type, line::kTypeOk);
  // A negative hold speed is no speed (docs/protocol.md section 5: MODE HOLD <km/h>): bad argument, 21.
  EXPECT_EQ(c.err(c.ask(line::kVerbMode, {line::kModeHold, "-5"})), 21);
  // The documented example of section 10: MODE HOLD 250 above a 200 km/h limit, 30, with its text.
  const auto over = c.ask(line::kVerbMode, {line::kModeHold, "250"});
  EXPECT_EQ(c.err(over), 30);
  ASSERT_EQ(over[0].fields.size(), 7u);
  EXPECT_EQ(over[0].fields[2] + " " + over[0].fields[3], "speed above");
  // Section 4: no inertia setting during road-load simulation: 31.
  ASSERT_EQ(c.ask(line::kVerbMode, {line::kModeRoadLoad})[0].type, line::kTypeOk);
  EXPECT_EQ(c.err(c.ask(line::kVerbInertia, {line::kArgSet, "1500"})), 31);
  // Section 8: the watchdog trips in road-load simulation after a quiet second (the default window), sends
  // EVT FAULT kind=WATCHDOG (section 9), and motoring is refused until CLEAR: 40.
  std::vector<std::string> out;
  c.fe.check_watchdog(5.0, out);
  const auto evt = LineClient::decode_all(out);
  ASSERT_EQ(evt.size(), 1u);
  EXPECT_EQ(evt[0].type, line::kTypeEvent);
  ASSERT_EQ(evt[0].fields.size(), 4u);
  EXPECT_EQ(evt[0].fields[0], "FAULT");
  EXPECT_EQ(evt[0].fields[1], "kind=WATCHDOG");
  // Section 9's example, whose detail is this one's first words.
  EXPECT_EQ(evt[0].fields[2].rfind("detail=no_request_within_the_watchdog_window", 0), 0u)
      << evt[0].fields[2];
  EXPECT_EQ(evt[0].fields[3], line::kv("time_s", c.fe.time_s()));
  c.wall_s = 5.0;
  EXPECT_EQ(c.err(c.ask(line::kVerbMode, {line::kModeHold, "50"})), 40);
}

TEST(SimCore, EachCauseArisesFromItsRefusalAndReachesTheFramedWire) {
  FramedClient c;
  // The shipped table: MD H <km/h × 100>, MD R, WI <kg × 10>.
  EXPECT_EQ(c.status({"MD", "1", "H", "-500"}), 2);   // a negative hold speed: bad argument
  EXPECT_EQ(c.status({"MD", "1", "H", "25000"}), 3);  // 250 km/h above the 200 km/h limit
  EXPECT_EQ(c.status({"MD", "1", "R"}), 0);
  EXPECT_EQ(c.status({"WI", "1", "15000"}), 4);  // no inertia setting during road-load simulation
  // The watchdog trips after a quiet second in road-load simulation; motoring is refused until cleared. The
  // dialect has no events: the simulator notes the fault for its operator as the line protocol's EVT.
  std::vector<std::string> out, notes;
  c.fe.tick(0.0, 5.0, out, notes);
  EXPECT_TRUE(out.empty());
  ASSERT_EQ(notes.size(), 1u);
  EXPECT_EQ(notes[0].rfind("framed EVT FAULT kind=WATCHDOG detail=", 0), 0u) << notes[0];
  c.wall_s = 5.0;
  EXPECT_EQ(c.status({"MD", "1", "H", "5000"}), 5);
}

TEST(SimCore, CommandsAreTypedAndAFreeCoastIsReportedAsIdle) {
  sim::SimController core(physics::Truth{}, {});
  // The typed command leads to its mode; the controller interface's (mode, value) pair maps onto it with the
  // value in the unit of the mode (controller.hpp, do_command).
  const auto hold = sim::command_for(controller::Mode::speed_hold, 80.0);
  ASSERT_TRUE(std::holds_alternative<sim::cmd::HoldSpeed>(hold));
  EXPECT_EQ(std::get<sim::cmd::HoldSpeed>(hold).speed_kmh, 80.0);
  const auto force = sim::command_for(controller::Mode::constant_force, 558.8);
  ASSERT_TRUE(std::holds_alternative<sim::cmd::ApplyForce>(force));
  EXPECT_EQ(std::get<sim::cmd::ApplyForce>(force).force_n, 558.8);
  for (const auto m :
       {controller::Mode::idle, controller::Mode::speed_hold, controller::Mode::road_load,
        controller::Mode::controlled_stop, controller::Mode::constant_force, controller::Mode::free_coast})
    EXPECT_EQ(sim::mode_of(sim::command_for(m, 0.0)), m) << controller::to_string(m);
  // A force above the controller's limit (10 kN by default) is refused as out of limits (docs/protocol.md
  // section 11: error 30).
  const auto refused = core.command(sim::cmd::ApplyForce{20000.0});
  ASSERT_TRUE(refused);
  EXPECT_EQ(refused->cause, Cause::out_of_limits);
  EXPECT_FALSE(core.command(sim::cmd::HoldSpeed{150.0}));
  // docs/protocol.md section 11: the controller reports IDLE while the rollers coast freely, at speed.
  std::vector<controller::Sample> samples;
  std::vector<sim::FaultEvent> events;
  core.touch(0.0);
  core.advance_typed(120.0, samples, events);
  ASSERT_GT(core.model().speed_kmh(), 140.0);
  ASSERT_FALSE(core.command(sim::cmd::FreeCoast{}));
  EXPECT_EQ(core.model().mode(), physics::Mode::free_coast);
  EXPECT_EQ(core.status().mode, controller::Mode::idle);
  EXPECT_EQ(core.reading().mode, controller::Mode::idle);
  core.advance_typed(1.0, samples, events);
  EXPECT_LT(core.model().speed_kmh(), 150.0);  // coasting down
  EXPECT_GT(core.model().speed_kmh(), 1.0);
  EXPECT_TRUE(events.empty());
}

// The simulated controller's own over-speed protection (docs/protocol.md section 9: OVERSPEED): a constant
// force that drives the rollers past kOverspeedTripFactor times the stated maximum speed latches the fault,
// once, with a controlled stop; moving commands are then refused until a CLEAR at rest. A speed hold at the
// maximum itself never trips it. The 60 km/h maximum is the test's own.
TEST(SimCore, RollersDrivenPastTheOverSpeedTripLatchAFaultAndStop) {
  sim::SimSettings settings;
  settings.max_speed_kmh = 60.0;
  {
    sim::SimController held(physics::Truth{}, settings);
    held.touch(0.0);
    ASSERT_FALSE(held.command(sim::cmd::HoldSpeed{60.0}));
    std::vector<controller::Sample> samples;
    std::vector<sim::FaultEvent> events;
    for (int i = 0; i < 120; ++i) held.advance_typed(0.5, samples, events);
    EXPECT_NEAR(held.model().speed_kmh(), 60.0, 1e-9);
    EXPECT_TRUE(events.empty()) << "a hold at the stated maximum speed tripped";
  }
  sim::SimController core(physics::Truth{}, settings);
  core.touch(0.0);
  ASSERT_FALSE(core.stream(10.0));
  ASSERT_FALSE(core.command(sim::cmd::ApplyForce{5000.0}));
  std::vector<controller::Sample> samples;
  std::vector<sim::FaultEvent> events;
  double top_kmh = 0.0;
  for (int i = 0; i < 600 && events.empty(); ++i) {
    core.advance_typed(0.1, samples, events);
    top_kmh = std::max(top_kmh, core.model().speed_kmh());
  }
  ASSERT_EQ(events.size(), 1u) << "5 kN on the rollers for 60 s never tripped; top " << top_kmh << " km/h";
  EXPECT_EQ(events[0].kind, sim::FaultKind::overspeed);
  EXPECT_GT(top_kmh, sim::kOverspeedTripFactor * 60.0);
  EXPECT_LT(top_kmh, sim::kOverspeedTripFactor * 60.0 + 1.0) << "tripped late";
  EXPECT_NE(sim::event_text(events[0]).find("kind=OVERSPEED"), std::string::npos);
  const controller::StatusReport st = core.status();
  EXPECT_EQ(st.fault, "OVERSPEED");
  EXPECT_NE(st.flags & controller::kFlagFault, 0u);
  EXPECT_EQ(st.flags & (controller::kFlagEstop | controller::kFlagWatchdog), 0u);
  EXPECT_EQ(st.mode, controller::Mode::controlled_stop);
  const auto refused = core.command(sim::cmd::ApplyForce{100.0});
  ASSERT_TRUE(refused);
  EXPECT_EQ(refused->cause, Cause::fault_active);
  EXPECT_TRUE(core.clear()) << "cleared with the rollers still turning";
  for (int i = 0; i < 600 && core.model().speed_kmh() > 0.0; ++i) core.advance_typed(0.1, samples, events);
  EXPECT_EQ(events.size(), 1u) << "the trip latched again while stopping";
  EXPECT_FALSE(core.clear());
  EXPECT_FALSE(core.command(sim::cmd::HoldSpeed{30.0}));
}

// The Modbus front end's watchdog watches the heartbeat counter (docs/modbus.md, "Heartbeat"): only a change
// of the register's value is a sign of life, so a master that writes the same value forever lets the
// watchdog trip (here its 1 s window, SimSettings::watchdog_s), and one that counts keeps it quiet. The wall
// times are the test's own, chosen to straddle the window.
TEST(SimCore, TheModbusWatchdogTakesOnlyAChangedHeartbeatForASignOfLife) {
  const auto run = [](bool counting) {
    sim::SimController core(physics::Truth{}, {});
    core.touch(0.0);
    EXPECT_FALSE(core.command(sim::cmd::HoldSpeed{30.0}));
    sim::HeartbeatWatch beats(0.0);
    std::vector<sim::FaultEvent> events;
    double value = 0.0;
    // A write every 100 ms of wall time for 3 s: three windows.
    for (int i = 1; i <= 30 && events.empty(); ++i) {
      const double wall_s = 0.1 * i;
      if (counting) value += 1.0;
      if (beats.changed(value)) core.touch(wall_s);
      core.check_watchdog_typed(wall_s, events);
    }
    return events;
  };
  const auto same = run(false);
  ASSERT_EQ(same.size(), 1u) << "the same value written again and again kept the watchdog quiet";
  EXPECT_EQ(same[0].kind, sim::FaultKind::watchdog);
  EXPECT_TRUE(run(true).empty()) << "a counting master tripped the watchdog";
  // The watch itself: the first look at an unchanged register is no change; every new value is one.
  sim::HeartbeatWatch w(7.0);
  EXPECT_FALSE(w.changed(7.0));
  EXPECT_TRUE(w.changed(8.0));
  EXPECT_FALSE(w.changed(8.0));
  EXPECT_TRUE(w.changed(7.0));
}

// The simulator honours a truth file's steady-versus-coasting difference and load-cell calibration
// (docs/performance.md, "Truth presets"): the same vehicle held at 80 km/h reads, with b2 = 0.001 N/(km/h)²
// (6.4 N more at 80 km/h), gain 1.02 and offset 3 N, exactly 1.02·(the reading without them + 6.4) + 3 — the
// model's stated form (physics/roller_model.hpp); without the keys the file loads with none of them.
TEST(SimCore, ATruthFilesSteadyDifferenceAndLoadCellReachTheReadings) {
  const std::string base =
      "[vehicle]\ntest_mass_kg = 1500\ninitial_warmth = 1.0\nhold_bias_n = 2.0\n%B2%"
      "[dyno]\nspeed_noise_kmh = 0.0\nforce_noise_n = 0.0\n%CELL%";
  auto with = [&](const std::string& b2, const std::string& cell) {
    std::string t = base;
    t.replace(t.find("%B2%"), 4, b2);
    t.replace(t.find("%CELL%"), 6, cell);
    return config::parse_truth(t, "sim-truth.toml");
  };
  auto held_reading = [](const physics::Truth& t) {
    sim::SimController core(t, {});
    core.touch(0.0);
    EXPECT_FALSE(core.stream(10.0));
    EXPECT_FALSE(core.command(sim::cmd::HoldSpeed{80.0}));
    std::vector<controller::Sample> samples;
    std::vector<sim::FaultEvent> events;
    core.advance_typed(120.0, samples, events);
    EXPECT_FALSE(samples.empty());
    return samples.empty() ? 0.0 : samples.back().force_n;
  };
  const double plain = held_reading(with("", ""));
  const double honoured = held_reading(
      with("hold_bias_n_per_kmh2 = 0.001\n", "load_cell_gain = 1.02\nload_cell_offset_n = 3.0\n"));
  EXPECT_GT(plain, 10.0);
  EXPECT_NEAR(honoured, 1.02 * (plain + 6.4) + 3.0, 1e-6);
}
