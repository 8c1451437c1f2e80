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
