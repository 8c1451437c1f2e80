// The Modbus register map's entries for the dyno's own checks (docs/modbus.md): the force setpoint register
// and the [modbus.modes] codes of the constant force and the free coast. Their encoding, the mode register's
// decoding with the map's codes, what a map without them says, and the validation messages (file, key,
// range). No link, no process.
#include <gtest/gtest.h>

#include <cmath>
#include <fstream>
#include <iterator>

#include "config/cell_loader.hpp"
#include "config/input_error.hpp"
#include "controller/clock_guard.hpp"
#include "modbus/modbus_controller.hpp"
#include "modbus/register_map.hpp"
#include "registry.hpp"

using namespace loadtrim;
using namespace loadtrim::modbus;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;
const std::string kCell = kSrc + "/config/cells/sim-modbus.toml";

std::string shipped() {
  std::ifstream in(kCell);
  return std::string(std::istreambuf_iterator<char>(in), {});
}

// The shipped cell file with `from` replaced by `to` (which must occur).
std::string variant(const std::string& from, const std::string& to) {
  std::string t = shipped();
  const auto p = t.find(from);
  EXPECT_NE(p, std::string::npos) << from;
  if (p != std::string::npos) t.replace(p, from.size(), to);
  return t;
}

// The shipped file without the checks' entries (everything from their comment on).
std::string without_check_entries() {
  std::string t = shipped();
  const auto p = t.find("# The dyno's own checks");
  EXPECT_NE(p, std::string::npos);
  return t.substr(0, p);
}

RegisterMap map_of(const std::string& text) {
  const auto c = config::parse_cell(text, "map.toml", adapters::production().sections());
  return std::any_cast<const Settings&>(c.adapter_settings).map;
}

std::string refusal(const std::string& text) {
  try {
    config::parse_cell(text, "bad-map.toml", adapters::production().sections());
  } catch (const config::InputError& e) {
    return e.what();
  }
  return "";
}
}  // namespace

TEST(ModbusMap, ShippedMapNamesTheChecksEntries) {
  const RegisterMap m = map_of(shipped());
  const Register& f = m[Q::force_setpoint];
  ASSERT_TRUE(f.present);
  EXPECT_EQ(f.table, Table::holding);
  EXPECT_EQ(f.address, 13);
  EXPECT_EQ(f.type, Type::int16);
  EXPECT_DOUBLE_EQ(f.scale, 0.5);
  EXPECT_EQ(f.unit, "N");
  EXPECT_EQ(m.modes.constant_force, 5);
  EXPECT_EQ(m.modes.free_coast, 6);
  EXPECT_EQ(missing_for(m, controller::Mode::constant_force), "");
  EXPECT_EQ(missing_for(m, controller::Mode::free_coast), "");
  EXPECT_EQ(command_code(m, controller::Mode::constant_force), 5);
  EXPECT_EQ(command_code(m, controller::Mode::free_coast), 6);
  EXPECT_EQ(command_code(m, controller::Mode::road_load), kCommandRoadLoad);
  const ModbusController c(config::parse_cell(shipped(), "map.toml", adapters::production().sections()));
  EXPECT_EQ(c.unavailable(controller::Mode::constant_force), "");
  EXPECT_EQ(c.unavailable(controller::Mode::free_coast), "");
}

// The force setpoint as the shipped map encodes it: int16, 1 count = 0.5 N. Check values from the definition
// of 16-bit two's complement: -200 counts = 0xFF38, the range -32768..32767 counts = -16384..16383.5 N.
TEST(ModbusMap, ForceSetpointEncodingUsesTheScaleAndNeverClamps) {
  const RegisterMap m = map_of(shipped());  // the map outlives the reference into it
  const Register& f = m[Q::force_setpoint];
  std::uint16_t w[2] = {0, 0};
  ASSERT_TRUE(encode(f, 559.0, w));
  EXPECT_EQ(w[0], 1118);
  EXPECT_DOUBLE_EQ(decode(f, w), 559.0);
  ASSERT_TRUE(encode(f, 558.8, w));  // rounds to the nearest count: within half a count (0.25 N)
  EXPECT_EQ(w[0], 1118);
  ASSERT_TRUE(encode(f, -100.0, w));
  EXPECT_EQ(w[0], 0xFF38);
  EXPECT_DOUBLE_EQ(decode(f, w), -100.0);
  ASSERT_TRUE(encode(f, 16383.5, w));
  EXPECT_EQ(w[0], 0x7FFF);
  w[0] = 0x1234;
  EXPECT_FALSE(encode(f, 16384.0, w));  // one count too many: refused, nothing written
  EXPECT_EQ(w[0], 0x1234);
  EXPECT_FALSE(encode(f, -16384.5, w));
  EXPECT_FALSE(encode(f, std::nan(""), w));
}

TEST(ModbusMap, ModeRegisterReadsTheMapsCodes) {
  const ModeCodes codes{5, 6};
  controller::Mode m = controller::Mode::speed_hold;
  EXPECT_EQ(decode_mode(5.0, m, codes), "");
  EXPECT_EQ(m, controller::Mode::constant_force);
  m = controller::Mode::speed_hold;
  EXPECT_EQ(decode_mode(6.0, m, codes), "");  // the motor lets go: the interface reads idle
  EXPECT_EQ(m, controller::Mode::idle);
  EXPECT_EQ(decode_mode(2.0, m, codes), "");
  EXPECT_EQ(m, controller::Mode::road_load);
  const std::string bad = decode_mode(7.0, m, codes);
  EXPECT_NE(bad.find("5 constant force, 6 free coast"), std::string::npos) << bad;
  EXPECT_NE(decode_mode(5.0, m), "");         // a map without the codes: 5 is no mode code
  EXPECT_NE(decode_mode(4.0, m, codes), "");  // 4 clears a fault; no mode reads 4
}

TEST(ModbusMap, MapWithoutTheChecksEntriesLoadsAndNamesWhatIsMissing) {
  const std::string text = without_check_entries();
  const RegisterMap m = map_of(text);  // a valid map for setting sessions
  EXPECT_FALSE(m[Q::force_setpoint].present);
  EXPECT_EQ(m.modes.constant_force, -1);
  EXPECT_EQ(missing_for(m, controller::Mode::road_load), "");
  const std::string force = missing_for(m, controller::Mode::constant_force);
  EXPECT_NE(force.find("modbus.modes.constant_force and modbus.force_setpoint"), std::string::npos) << force;
  const std::string free = missing_for(m, controller::Mode::free_coast);
  EXPECT_NE(free.find("modbus.modes.free_coast"), std::string::npos) << free;
  EXPECT_EQ(command_code(m, controller::Mode::constant_force), -1);
  const ModbusController c(config::parse_cell(text, "map.toml", adapters::production().sections()));
  EXPECT_EQ(c.unavailable(controller::Mode::free_coast), free);
  EXPECT_EQ(c.unavailable(controller::Mode::road_load), "");
}

TEST(ModbusMap, BadChecksEntriesAreRefusedWithFileKeyAndRange) {
  struct Case {
    std::string text, must;
  };
  const Case cases[] = {
      {variant("constant_force = 5", "constant_force = 3"), "modbus.modes.constant_force (line"},
      {variant("constant_force = 5", "constant_force = 70000"), "modbus.modes.constant_force (line"},
      {variant("free_coast = 6", "free_coast = 5"), "the same code as modbus.modes.constant_force"},
      {variant("[modbus.force_setpoint]", "[modbus.not_a_force_setpoint]"),
       "modbus.force_setpoint: is missing: modbus.modes.constant_force needs"},
      {variant("constant_force = 5", "# none"), "modbus.modes.constant_force: is missing"},
      {variant("address = 13\ntype = \"int16\"\nscale = 0.5             # 1 count = 0.5 N (so -16384 N to "
               "16383.5 N), read back after the strobe\nunit = \"N\"",
               "address = 13\ntype = \"int16\"\nscale = 0.5\nunit = \"kN\""),
       "modbus.force_setpoint.unit"},
      {variant("[modbus.force_setpoint]\ntable = \"holding\"", "[modbus.force_setpoint]\ntable = \"input\""),
       "modbus.force_setpoint.table"},
      {variant("[modbus.force_setpoint]\ntable = \"holding\"\naddress = 13",
               "[modbus.force_setpoint]\ntable = \"holding\"\naddress = 12"),
       "overlaps heartbeat at holding register 12"},
  };
  for (const auto& c : cases) {
    const std::string msg = refusal(c.text);
    EXPECT_NE(msg.find("bad-map.toml"), std::string::npos) << msg;
    EXPECT_NE(msg.find(c.must), std::string::npos) << "expected: " << c.must << "\ngot: " << msg;
  }
  // A code that does not fit the command register (validated on the map itself, as the fuzzer builds them).
  RegisterMap m = map_of(shipped());
  m.regs[Q::command].type = Type::int16;
  m.regs[Q::command].scale = 0.0001;  // 3.2767 at most
  const core::Problems ps = validate(m);
  bool named = false;
  for (const auto& p : ps)
    named |= p.key == "modbus.modes.constant_force" && p.message.find("does not fit") != std::string::npos;
  EXPECT_TRUE(named);
}

// ---- The time counter (docs/modbus.md, "The time counter") ----
// Check values from the definition of an n-bit unsigned counter (it counts modulo 2^n): 2^16 ms = 65.536 s;
// 2^32 ms = 4,294,967.296 s (49.7 days); 2^64 × 1 µs.
TEST(ModbusTimeCounter, PeriodIsTwoToTheWidthTimesTheScale) {
  Register t;
  t.present = true;
  t.table = Table::input;
  t.scale = 0.001;
  t.type = Type::uint16;
  EXPECT_DOUBLE_EQ(counter_period_s(t), 65.536);
  t.type = Type::uint32;
  EXPECT_DOUBLE_EQ(counter_period_s(t), 4294967.296);
  t.type = Type::int32;  // a signed counter wraps after the same 2^32 counts
  EXPECT_DOUBLE_EQ(counter_period_s(t), 4294967.296);
  t.type = Type::uint64;
  t.scale = 1e-6;
  EXPECT_DOUBLE_EQ(counter_period_s(t), std::ldexp(1e-6, 64));
  t.type = Type::float32;
  EXPECT_EQ(counter_period_s(t), 0.0);  // not a counter
}

// uint64 words (four, highest first in big word order): 2^40 + 5 = 0x0000_0100_0000_0005 (hand).
TEST(ModbusTimeCounter, Uint64WordsInBothOrders) {
  Register r;
  r.present = true;
  r.table = Table::input;
  r.type = Type::uint64;
  ASSERT_EQ(r.words(), 4);
  std::uint16_t w[4] = {0, 0, 0, 0};
  ASSERT_TRUE(encode(r, std::ldexp(1.0, 40) + 5.0, w));
  EXPECT_EQ(w[0], 0x0000);
  EXPECT_EQ(w[1], 0x0100);
  EXPECT_EQ(w[2], 0x0000);
  EXPECT_EQ(w[3], 0x0005);
  EXPECT_DOUBLE_EQ(decode(r, w), std::ldexp(1.0, 40) + 5.0);
  r.order = WordOrder::little;
  const std::uint16_t le[4] = {0x0005, 0x0000, 0x0100, 0x0000};
  EXPECT_DOUBLE_EQ(decode(r, le), std::ldexp(1.0, 40) + 5.0);
  EXPECT_FALSE(encode(r, -1.0, w));
  EXPECT_FALSE(encode(r, std::ldexp(1.0, 64), w));  // one count beyond 2^64 - 1
}

// A uint32 ms counter read every 20 ms across its wrap: 4,294,967.280 s, ... 4,294,967.296 s reads 0 (2^32 ms
// mod 2^32), and the unwrapped time keeps counting; the clock guard (controller/clock_guard.hpp) sees an
// honest clock. Then a step back by 1 s is a step back (the guard names it), not a wrap forward.
TEST(ModbusTimeCounter, AWrapAtTheCountersLimitIsUnwrappedAndAStepBackIsNot) {
  const double p = 4294967.296;
  TimeCounter tc;
  tc.reset(p, 1.0);
  controller::ClockGuard guard;
  double true_s = p - 0.1, wall = 0.0, last = 0.0;
  for (int i = 0; i < 20; ++i, true_s += 0.02, wall += 0.02) {
    const double raw = std::fmod(true_s, p);  // what the register reads
    last = tc.read(raw, wall);
    EXPECT_NEAR(last, true_s, 1e-6) << i;
    EXPECT_FALSE(guard.on_sample(last, wall, 0)) << i;
  }
  EXPECT_EQ(tc.wraps(), 1u);
  EXPECT_GT(last, p);
  // The counter steps back by 1 s (not a wrap: 1 s back, a period minus 1 s forward would be 49.7 days).
  const double back = tc.read(std::fmod(true_s - 1.0, p), wall);
  EXPECT_NEAR(back, true_s - 1.0, 1e-6);
  const auto v = guard.on_sample(back, wall, 0);
  ASSERT_TRUE(v);
  EXPECT_NE(v->find("ran backwards"), std::string::npos) << *v;
}

// A 16-bit ms counter (period 65.536 s): a signed one passes from +32.767 s to -32.768 s, one count on; a
// tool that paused 200 s (rate 1) finds the counter 3 periods and 4.392 s on (201 - 3 × 65.536 = 4.392,
// hand); a frozen counter read promptly stays frozen (for the guard to name it).
TEST(ModbusTimeCounter, SignedCountersLongPausesAndFrozenCounters) {
  TimeCounter tc;
  tc.reset(65.536, 1.0);
  EXPECT_NEAR(tc.read(32.767, 0.0), 32.767, 1e-9);
  EXPECT_NEAR(tc.read(-32.768, 0.001), 32.768, 1e-9);
  tc.reset(65.536, 1.0);
  EXPECT_NEAR(tc.read(1.0, 0.0), 1.0, 1e-9);
  EXPECT_NEAR(tc.read(4.392, 200.0), 201.0, 1e-9);
  EXPECT_EQ(tc.wraps(), 3u);
  for (int i = 1; i <= 10; ++i) EXPECT_NEAR(tc.read(4.392, 200.0 + 0.02 * i), 201.0, 1e-9);
  // At a stated rate of 20× the same wall pause is 20 times the controller time: 4000 s.
  tc.reset(65.536, 20.0);
  tc.read(1.0, 0.0);
  const double expect = 1.0 + 4000.0;
  EXPECT_NEAR(tc.read(std::fmod(expect, 65.536), 200.0), expect, 1e-6);
}

// A counter frozen across a long pause of the tool is frozen, not a counter that advanced by whole periods
// (issue 21 review): a 16-bit ms counter (period 65.536 s) reads 10 s, the tool pauses 65 s (rate 1) and
// reads 10 s again. The nearest whole number of periods would be 1 (65 / 65.536 rounds to 1), making it
// 75.536 s; with no movement at all none is counted, so the time stays 10 s and the clock guard
// (controller/clock_guard.hpp) names a clock that stopped. Likewise a counter that moved 10 s in a 100 s
// pause (one period more would make 75.536 s, 24.5 s from the 100 s elapsed: more than 10 % + 1 s, the
// agreement TimeCounter requires) is not given a period it cannot have run. An honest counter 5 % slow across
// 200 s (190 s: 2 periods and 58.928 s, by hand) still is.
TEST(ModbusTimeCounter, AFrozenCounterAfterALongPauseIsNotUnwrappedAsAdvancing) {
  TimeCounter tc;
  tc.reset(65.536, 1.0);
  controller::ClockGuard guard;
  EXPECT_NEAR(tc.read(10.0, 0.0), 10.0, 1e-9);
  EXPECT_FALSE(guard.on_sample(10.0, 0.0, 0));
  const double after = tc.read(10.0, 65.0);
  EXPECT_NEAR(after, 10.0, 1e-9) << "a frozen counter unwrapped as advancing";
  EXPECT_EQ(tc.wraps(), 0u);
  const auto v = guard.on_sample(after, 65.0, 1);
  ASSERT_TRUE(v) << "the guard must see a clock that did not move in 65 s";
  EXPECT_NE(v->find("stopped"), std::string::npos) << *v;
  // Two periods' worth of pause (131.072 s), frozen still: still 10 s.
  EXPECT_NEAR(tc.read(10.0, 131.072), 10.0, 1e-9);
  // Far less movement than the pause: no whole period made up for it.
  tc.reset(65.536, 1.0);
  tc.read(10.0, 0.0);
  EXPECT_NEAR(tc.read(20.0, 100.0), 20.0, 1e-9);
  EXPECT_EQ(tc.wraps(), 0u);
  // Honest but 5 % slow across 200 s: 1 s + 190 s = 191 s, read as 191 - 2 × 65.536 = 59.928 s.
  tc.reset(65.536, 1.0);
  tc.read(1.0, 0.0);
  EXPECT_NEAR(tc.read(59.928, 200.0), 191.0, 1e-9);
  EXPECT_EQ(tc.wraps(), 2u);
}

TEST(ModbusTimeCounter, ACounterThatWrapsTooOftenOrCountsBackIsRefused) {
  // uint16 at 0.1 ms wraps every 6.5536 s: too short to tell a wrap from a step back.
  std::string text = variant("type = \"uint32\"         # uint16", "type = \"uint16\"         # uint16");
  EXPECT_EQ(refusal(text), "") << "65.536 s is enough";
  const std::string ms = "scale = 0.001           # ms";
  text.replace(text.find(ms), ms.size(), "scale = 0.0001");
  std::string msg = refusal(text);
  EXPECT_NE(msg.find("modbus.time.type"), std::string::npos) << msg;
  EXPECT_NE(msg.find("wraps every 6.5536 s"), std::string::npos) << msg;
  msg = refusal(variant("scale = 0.001           # ms", "scale = -0.001"));
  EXPECT_NE(msg.find("modbus.time.scale"), std::string::npos) << msg;
}

// ---- Applied values (docs/modbus.md, "Applied values") ----
TEST(ModbusMap, AppliedValueRegistersOrAnExplicitAcceptanceOfSetpointReadBack) {
  const RegisterMap m = map_of(shipped());
  EXPECT_TRUE(m.reads_applied());
  EXPECT_EQ(m[Q::applied_inertia].table, Table::input);
  EXPECT_EQ(m[Q::applied_f2].address, 26);
  // Without them: refused, naming the keys and the way out.
  std::string text = shipped();
  const auto from = text.find("[modbus.applied_inertia]"), to = text.find("# Setpoints and commands");
  ASSERT_NE(from, std::string::npos);
  ASSERT_NE(to, std::string::npos);
  text.erase(from, to - from);
  std::string msg = refusal(text);
  EXPECT_NE(msg.find("modbus.applied_inertia: is missing"), std::string::npos) << msg;
  EXPECT_NE(msg.find("modbus.accept_setpoint_readback = true"), std::string::npos) << msg;
  // Accepted explicitly: the map reads back its setpoint registers.
  std::string accepted = text;
  accepted.replace(accepted.find("poll_rate_hz = 50.0"), 19,
                   "poll_rate_hz = 50.0\naccept_setpoint_readback = true");
  EXPECT_FALSE(map_of(accepted).reads_applied());
  // Some but not all: refused, whatever the acceptance says.
  std::string partial = accepted;
  partial.replace(
      partial.find("# Setpoints and commands"), 0,
      "[modbus.applied_inertia]\ntable = \"input\"\naddress = 20\ntype = \"float32\"\nunit = \"kg\"\n");
  msg = refusal(partial);
  EXPECT_NE(msg.find("names all four or none"), std::string::npos) << msg;
}

// The retry policy's keys (docs/modbus.md, "Exceptions"): defaults, and out-of-range values refused with key
// and range. Exception codes and meanings: Modbus Application Protocol Specification V1.1b3, section 7
// (from memory).
TEST(ModbusMap, RetryPolicyKeysAndTheirRanges) {
  const RegisterMap m = map_of(shipped());
  EXPECT_EQ(m.retry.attempts, 3);
  EXPECT_EQ(m.retry.within_ms, 500);
  EXPECT_EQ(m.retry.delay_ms, 20);
  EXPECT_EQ(m.retry.byte_timeout_ms, 100);
  EXPECT_TRUE(retryable_exception(0x06));   // server device busy
  EXPECT_TRUE(retryable_exception(0x0A));   // gateway path unavailable
  EXPECT_TRUE(retryable_exception(0x0B));   // gateway target device failed to respond
  EXPECT_FALSE(retryable_exception(0x02));  // illegal data address: a refusal
  EXPECT_FALSE(retryable_exception(0x04));  // server device failure
  const std::string msg = refusal(
      variant("poll_rate_hz = 50.0", "poll_rate_hz = 50.0\nretry_attempts = 50\nbyte_timeout_ms = 0"));
  EXPECT_NE(msg.find("modbus.retry_attempts"), std::string::npos) << msg;
  EXPECT_NE(msg.find("modbus.byte_timeout_ms"), std::string::npos) << msg;
}

// The heartbeat counter wraps at its register's width (docs/modbus.md, "Heartbeat"), never with an error and
// never to the same value: the boundaries of two's-complement 16-bit and 32-bit integers (int16 holds -32768
// to 32767, uint16 0 to 65535, uint32 0 to 4294967295: the C++ standard's fixed-width integer types,
// [basic.fundamental]) and float32's whole numbers up to 65535 (each exact in a 24-bit significand, IEEE
// 754).
TEST(ModbusHeartbeat, TheCounterWrapsAtTheRegistersWidth) {
  const auto next_value = [](Register r, double from) {
    // The register holds `from` (written as the controller would hold it), the adapter reads its count,
    // steps it and writes the next count: what does the register then hold?
    std::uint16_t w[4] = {0, 0, 0, 0};
    EXPECT_TRUE(encode(r, from, w)) << from;
    const auto count = heartbeat_count(r, w);
    EXPECT_TRUE(count.has_value()) << from;
    std::uint16_t out[4] = {0, 0, 0, 0};
    heartbeat_words(r, next_heartbeat(r, count.value_or(0)), out);
    return decode(r, out);
  };
  Register r;
  r.present = true;
  r.type = Type::uint16;
  EXPECT_EQ(next_value(r, 0.0), 1.0);
  EXPECT_EQ(next_value(r, 32767.0), 32768.0);  // no wrap at the signed limit for a uint16
  EXPECT_EQ(next_value(r, 65534.0), 65535.0);
  EXPECT_EQ(next_value(r, 65535.0), 0.0);  // 2^16 - 1 → 0
  r.type = Type::int16;
  EXPECT_EQ(next_value(r, 32766.0), 32767.0);
  EXPECT_EQ(next_value(r, 32767.0), -32768.0);  // 0x7FFF → 0x8000, still in the register's range
  EXPECT_EQ(next_value(r, -1.0), 0.0);          // 0xFFFF → 0
  r.type = Type::uint32;
  r.order = WordOrder::little;
  EXPECT_EQ(next_value(r, 65535.0), 65536.0);  // a 32-bit counter does not wrap at 16 bits
  EXPECT_EQ(next_value(r, 4294967295.0), 0.0);
  r.type = Type::int32;
  r.order = WordOrder::big;
  EXPECT_EQ(next_value(r, 2147483647.0), -2147483648.0);
  r.type = Type::float32;
  EXPECT_EQ(next_value(r, 65534.0), 65535.0);
  EXPECT_EQ(next_value(r, 65535.0), 0.0);
  // The register's scale plays no part: the count is its raw value, so each beat is a change of one count.
  r.type = Type::uint16;
  r.scale = 0.5;
  EXPECT_EQ(next_value(r, 10.0), 10.5);  // raw 20 → 21
  // A float32 holding no whole count is no count (the adapter warns and starts from 0).
  r.type = Type::float32;
  r.scale = 1.0;
  std::uint16_t w[2] = {0, 0};
  ASSERT_TRUE(encode(r, 1.5, w));
  EXPECT_FALSE(heartbeat_count(r, w).has_value());
  ASSERT_TRUE(encode(r, 70000.0, w));
  EXPECT_FALSE(heartbeat_count(r, w).has_value());
  // Every count of a uint16 counter steps to a different value: a full turn of 2^16 beats visits each once.
  r.type = Type::uint16;
  std::uint64_t c = 0;
  for (int i = 0; i < 65536; ++i) {
    const std::uint64_t n = next_heartbeat(r, c);
    ASSERT_NE(n, c);
    c = n;
  }
  EXPECT_EQ(c, 0u);
}

// ---- The driver display (docs/modbus.md, "Driver prompts") ----
// The shipped map's driver-prompt registers and neutral bit. Check values: the prompt codes are ours (0 off,
// 1 accelerate, 2 neutral, docs/modbus.md); 142.5 km/h at 1 count = 0.01 km/h is 14250 counts (the scale's
// definition, physical = raw × scale); the neutral bit 32 = 2^5 (the status register read as a bit field).
TEST(ModbusMap, ShippedMapNamesTheDriverDisplayAndTheNeutralBit) {
  const RegisterMap m = map_of(shipped());
  ASSERT_TRUE(m.has_driver_display());
  EXPECT_EQ(m[Q::driver_prompt].table, Table::holding);
  EXPECT_EQ(m[Q::driver_prompt].address, 14);
  EXPECT_EQ(m[Q::driver_prompt].type, Type::uint16);
  EXPECT_EQ(m[Q::prompt_speed].address, 15);
  EXPECT_DOUBLE_EQ(m[Q::prompt_speed].scale, 0.01);
  EXPECT_EQ(m[Q::prompt_speed].unit, "km/h");
  EXPECT_EQ(m.neutral_bit, 32u);
  EXPECT_EQ(missing_for_driver(m), "");
  EXPECT_EQ(prompt_code(controller::DriverPrompt::off), 0);
  EXPECT_EQ(prompt_code(controller::DriverPrompt::accelerate), 1);
  EXPECT_EQ(prompt_code(controller::DriverPrompt::neutral), 2);
  EXPECT_EQ(prompt_of(2.0), controller::DriverPrompt::neutral);
  EXPECT_FALSE(prompt_of(3.0).has_value());
  EXPECT_FALSE(prompt_of(1.5).has_value());
  std::uint16_t w[4] = {0, 0, 0, 0};
  ASSERT_TRUE(encode(m[Q::prompt_speed], 142.5, w));
  EXPECT_EQ(w[0], 14250);
  // The neutral bit is reported as the controller layer's flag (0x20, docs/protocol.md) and counts as
  // defined (no status_bits warning); the other undefined bits pass as they are.
  EXPECT_EQ(controller_flags(m, 32u | 1u), controller::kFlagNeutral | controller::kFlagFault);
  EXPECT_EQ(controller_flags(m, 64u), 64u);
  EXPECT_EQ(status_register_bits(m, controller::kFlagNeutral | controller::kFlagAtSetpoint), 32u | 16u);
  EXPECT_EQ(m.defined_status_bits(), 0x3Fu);
  const ModbusController c(config::parse_cell(shipped(), "map.toml", adapters::production().sections()));
  EXPECT_EQ(c.driver_unavailable(), "");
}

// A neutral bit elsewhere than 0x20 (controllers number their bits differently): moved to the flag, and a raw
// 0x20 that is not the map's neutral bit never reads as the neutral signal.
TEST(ModbusMap, ANeutralBitElsewhereIsMovedToTheNeutralFlag) {
  const RegisterMap m = map_of(variant("neutral = 32", "neutral = 256"));
  EXPECT_EQ(m.neutral_bit, 256u);
  EXPECT_EQ(controller_flags(m, 256u), controller::kFlagNeutral);
  EXPECT_EQ(controller_flags(m, 32u), 0u);
  EXPECT_EQ(controller_flags(m, 256u | 8u), controller::kFlagNeutral | controller::kFlagLimit);
  EXPECT_EQ(status_register_bits(m, controller::kFlagNeutral), 256u);
  // Without a neutral bit the flag is neither reported nor served: the release is found in the trace.
  const RegisterMap none = map_of(variant("[modbus.status_bits]\nneutral = 32", ""));
  EXPECT_EQ(none.neutral_bit, 0u);
  EXPECT_TRUE(none.has_driver_display());
  EXPECT_EQ(controller_flags(none, 32u), 0u);
  EXPECT_EQ(status_register_bits(none, controller::kFlagNeutral), 0u);
}

// A map without the driver display (as every map written before it existed): it loads and drives dyno-motored
// sessions, and says which keys a "vehicle" cell needs (the session refuses such a cell before connecting
// with this text, docs/session.md).
TEST(ModbusMap, MapWithoutTheDriverEntriesLoadsAndNamesWhatIsMissing) {
  std::string text = shipped();
  const auto from = text.find("# The driver display"), to = text.find("# The dyno's own checks");
  ASSERT_NE(from, std::string::npos);
  ASSERT_NE(to, std::string::npos);
  text.erase(from, to - from);
  const RegisterMap m = map_of(text);
  EXPECT_FALSE(m.has_driver_display());
  EXPECT_EQ(m.neutral_bit, 0u);
  const std::string why = missing_for_driver(m);
  EXPECT_NE(why.find("modbus.driver_prompt and modbus.prompt_speed"), std::string::npos) << why;
  const ModbusController c(config::parse_cell(text, "map.toml", adapters::production().sections()));
  EXPECT_EQ(c.driver_unavailable(), why);
  // A prompt-speed register that cannot carry the cell's speed limit (160 km/h; uint16 × 0.001 km/h holds
  // 65.535 km/h at most): refused before connecting too, naming the key and the limit.
  const std::string narrow =
      variant("type = \"uint16\"\nscale = 0.01            # 1 count = 0.01 km/h, as the",
              "type = \"uint16\"\nscale = 0.001           # 1 count = 0.01 km/h, as the");
  const ModbusController n(config::parse_cell(narrow, "map.toml", adapters::production().sections()));
  const std::string slow = n.driver_unavailable();
  EXPECT_NE(slow.find("modbus.prompt_speed"), std::string::npos) << slow;
  EXPECT_NE(slow.find("160 km/h"), std::string::npos) << slow;
}

TEST(ModbusMap, BadDriverEntriesAreRefusedWithFileKeyAndRange) {
  struct Case {
    std::string text, must;
    std::string key = "";  // also named, when `must` does not start with it
  };
  const std::string prompt_block = "[modbus.driver_prompt]\ntable = \"holding\"\naddress = 14";
  const Case cases[] = {
      // Not a single bit; one of the defined bits; beyond a uint16 status register; not a number.
      {variant("neutral = 32", "neutral = 48"),
       "is 48, allowed a single bit (a power of two) from 32 to 32768 (the status register is uint16",
       "modbus.status_bits.neutral (line"},
      {variant("neutral = 32", "neutral = 16"), "modbus.status_bits.neutral (line"},
      {variant("neutral = 32", "neutral = 65536"), "is 65536, allowed a single bit",
       "modbus.status_bits.neutral (line"},
      {variant("neutral = 32", "neutral = \"yes\""), "modbus.status_bits.neutral (line"},
      // One register without the other.
      {variant("[modbus.prompt_speed]", "[modbus.not_a_prompt_speed]"),
       "modbus.prompt_speed: is missing: the driver display is written together"},
      {variant(prompt_block, "[modbus.not_a_driver_prompt]\ntable = \"holding\"\naddress = 14"),
       "modbus.driver_prompt: is missing: the driver display is written together"},
      {variant(prompt_block, "[modbus.not_a_driver_prompt]\ntable = \"holding\"\naddress = 14"),
       "is given, but the map has no driver display", "modbus.status_bits.neutral (line"},
      // As every quantity: unit, table, overlap; and a prompt register that cannot carry the codes.
      {variant("scale = 0.01            # 1 count = 0.01 km/h, as the speed register\nunit = \"km/h\"",
               "scale = 0.01\nunit = \"mph\""),
       "modbus.prompt_speed.unit"},
      {variant(prompt_block, "[modbus.driver_prompt]\ntable = \"input\"\naddress = 14"),
       "modbus.driver_prompt.table"},
      {variant(prompt_block, "[modbus.driver_prompt]\ntable = \"holding\"\naddress = 13"),
       "overlaps force_setpoint at holding register 13"},
      {variant(prompt_block + "\ntype = \"uint16\"", prompt_block + "\ntype = \"uint16\"\nscale = 10.0"),
       "is \"uint16\" with scale 10, which cannot carry the prompt code 1",
       "modbus.driver_prompt.type (line"},
  };
  for (const auto& c : cases) {
    const std::string msg = refusal(c.text);
    EXPECT_NE(msg.find("bad-map.toml"), std::string::npos) << msg;
    EXPECT_NE(msg.find(c.must), std::string::npos) << "expected: " << c.must << "\ngot: " << msg;
    EXPECT_NE(msg.find(c.key), std::string::npos) << "expected: " << c.key << "\ngot: " << msg;
  }
}

// ---- One time per poll, one moment per sample (docs/modbus.md, "One sample, one moment") ----
// A time register coarser than the poll period (0.1 s per count at 50 Hz: 20 ms) or a float32 one (its
// resolution falls with the time it holds: 2^-23 of it) is refused at load, naming the key and the period.
TEST(ModbusMap, ATimeRegisterCoarserThanThePollPeriodIsRefused) {
  const std::string ms = "scale = 0.001           # ms";
  std::string msg = refusal(variant(ms, "scale = 0.1"));
  EXPECT_NE(msg.find("modbus.time.scale"), std::string::npos) << msg;
  EXPECT_NE(msg.find("coarser than the poll period of 0.02 s"), std::string::npos) << msg;
  // 20 ms per count at 50 Hz is one count per poll: allowed; at 10 Hz 0.1 s is too.
  EXPECT_EQ(refusal(variant(ms, "scale = 0.02")), "");
  std::string ten = variant(ms, "scale = 0.1");
  ten.replace(ten.find("poll_rate_hz = 50.0"), 19, "poll_rate_hz = 10.0");
  EXPECT_EQ(refusal(ten), "");
  msg = refusal(variant("type = \"uint32\"         # uint16", "type = \"float32\"        # uint16"));
  EXPECT_NE(msg.find("modbus.time.type"), std::string::npos) << msg;
  EXPECT_NE(msg.find("falls with the controller's uptime"), std::string::npos) << msg;
  // 0.02 s × 2^23 = 167,772 s = 46.6 h.
  EXPECT_NE(msg.find("46.6 h"), std::string::npos) << msg;
}

// The shipped map's sample registers (speed 0, force 1, time 2-3, mode 4, status 5: input) are one read of
// six; a gap no register names or another table makes none.
TEST(ModbusMap, TheSampleBlockIsOneReadOnlyWhenTheMapAllowsIt) {
  RegisterMap m = map_of(shipped());
  auto b = sample_block(m);
  ASSERT_TRUE(b.has_value());
  EXPECT_EQ(b->table, Table::input);
  EXPECT_EQ(b->address, 0);
  EXPECT_EQ(b->count, 6);
  m.regs[Q::mode].address = 6;  // mode and error swapped: the error register (4) is named, 0 to 6
  m.regs[Q::error].address = 4;
  b = sample_block(m);
  ASSERT_TRUE(b.has_value());
  EXPECT_EQ(b->count, 7);
  m.regs[Q::mode].address = 8;  // input 6 and 7 are named by nothing
  EXPECT_FALSE(sample_block(m).has_value());
  m.regs[Q::mode].address = 4;
  m.regs[Q::error].address = 6;
  m.regs[Q::time].table = Table::holding;
  m.regs[Q::time].address = 40;
  EXPECT_FALSE(sample_block(m).has_value());
  m.regs[Q::time].present = false;  // no time register: its addresses 2-3 are a gap now
  EXPECT_FALSE(sample_block(m).has_value());
  m.regs[Q::mode].address = 2;  // mode and status at 2 and 3: speed, force, mode, status in 0 to 3
  m.regs[Q::status].address = 3;
  b = sample_block(m);
  ASSERT_TRUE(b.has_value());
  EXPECT_EQ(b->count, 4);
}
