// The Modbus register map of a controller: for each quantity its table, address, type, word order, scale and
// unit. Read from the [modbus] table of a cell file (config::load_register_map) and validated in full before
// connecting. Pure: encoding and decoding of register words, no I/O.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <vector>

#include "controller/controller.hpp"
#include "core/problem.hpp"

namespace loadtrim::modbus {

enum class Table : std::uint8_t { holding, input, coil };
enum class Type : std::uint8_t { int16, uint16, int32, uint32, float32 };
enum class WordOrder : std::uint8_t { big, little };  // big: the high word at the lower address

struct Register {
  bool present = false;
  Table table = Table::holding;
  int address = 0;
  Type type = Type::uint16;
  WordOrder order = WordOrder::big;
  double scale = 1.0;  // physical value = raw × scale
  std::string unit;
  int words() const {
    return table == Table::coil                                                     ? 1
           : (type == Type::int32 || type == Type::uint32 || type == Type::float32) ? 2
                                                                                    : 1;
  }
};

// Command and mode codes (ours): what the command register takes and the mode register reports.
inline constexpr int kCommandIdle = 0, kCommandHold = 1, kCommandRoadLoad = 2, kCommandStop = 3,
                     kCommandClearFault = 4;

// The codes of the dyno checks' modes, which controllers number differently and not every one offers: from
// the map's [modbus.modes] table (keys constant_force, free_coast); -1 = the map does not name it, so the
// adapter does not offer the mode. A constant force also needs the force_setpoint register.
struct ModeCodes {
  int constant_force = -1;
  int free_coast = -1;
};

struct Quantity {
  const char* name;
  const char* unit;  // expected unit ("" = a plain number or bit field)
  bool required;
  bool writable;  // the tool writes it (holding register or coil)
};
// The quantities a map may name, in a fixed order (index = position in RegisterMap::regs).
inline constexpr std::array<Quantity, 20> kQuantities = {{
    {"speed", "km/h", true, false},
    {"force", "N", true, false},
    {"time", "s", false, false},
    {"mode", "", true, false},
    {"status", "", true, false},
    {"error", "", false, false},
    {"inertia", "kg", true, true},
    {"f0", "N", true, true},
    {"f1", "N/(km/h)", true, true},
    {"f2", "N/(km/h)^2", true, true},
    {"hold_speed", "km/h", true, true},
    {"command", "", true, true},
    {"strobe", "", true, true},
    {"heartbeat", "", true, true},
    {"roller_diameter", "m", true, false},
    {"base_inertia", "kg", true, false},
    {"max_speed", "km/h", true, false},
    {"max_force", "N", true, false},
    // The controller's clock rate (controller seconds per wall second): absent means 1, as for any real dyno.
    {"time_scale", "", false, false},
    // The constant force of the base-inertia check (controller::Mode::constant_force), with
    // modes.constant_force.
    {"force_setpoint", "N", false, true},
}};
enum Q : std::size_t {
  speed,
  force,
  time,
  mode,
  status,
  error,
  inertia,
  f0,
  f1,
  f2,
  hold_speed,
  command,
  strobe,
  heartbeat,
  roller_diameter,
  base_inertia,
  max_speed,
  max_force,
  time_scale,
  force_setpoint
};

struct RegisterMap {
  int unit_id = 1;
  double poll_rate_hz = 50.0;
  std::array<Register, kQuantities.size()> regs{};
  ModeCodes modes;
  const Register& operator[](Q q) const { return regs[q]; }
};

// Every problem at once, keys "modbus.<quantity>.<field>" and "modbus.modes.<mode>".
core::Problems validate(const RegisterMap& m);

// "" when the map lets the adapter command `mode`, else which keys it lacks ("the register map has no
// modbus.modes.free_coast"). The modes of a setting session (idle, hold, road load, stop) are always there.
std::string missing_for(const RegisterMap& m, controller::Mode mode);
// The command register's code for `mode` (-1 when the map has none).
int command_code(const RegisterMap& m, controller::Mode mode);

// Raw words ↔ physical value, per the register's type, word order and scale. encode refuses (returns false
// and writes nothing) a value that is not finite or does not fit the register's type after scaling: a
// setpoint is never clamped or wrapped silently.
double decode(const Register& r, const std::uint16_t* words);
bool encode(const Register& r, double value, std::uint16_t* words);

// Reply values in the controller's terms. Each returns "" or what is wrong with the value (the controller
// sent a mode code we do not define, a status that is not a whole number of 0..2^32-1, an error code out of
// range).
// With the map's mode codes, the mode register also reports constant_force; the free-coast code reads as idle
// (the motor lets go: nothing is controlled), as the interface states for every controller.
std::string decode_mode(double value, controller::Mode& out, const ModeCodes& codes = {});
std::string decode_flags(double value, std::uint32_t& out);
std::string decode_error_code(double value, int& out);

const char* to_string(Table t);
const char* to_string(Type t);

}  // namespace loadtrim::modbus
