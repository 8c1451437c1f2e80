// The Modbus register map of a controller: for each quantity its table, address, type, word order, scale and
// unit. Read from the [modbus] table of a cell file (config::load_register_map) and validated in full before
// connecting. Pure: encoding and decoding of register words, no I/O.
#pragma once

#include <array>
#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "controller/controller.hpp"
#include "core/problem.hpp"

namespace loadtrim::modbus {

enum class Table : std::uint8_t { holding, input, coil };
enum class Type : std::uint8_t { int16, uint16, int32, uint32, float32, uint64 };
// big: the high word at the lower address (for uint64, the highest of its four words first)
enum class WordOrder : std::uint8_t { big, little };

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
           : type == Type::uint64                                                   ? 4
           : (type == Type::int32 || type == Type::uint32 || type == Type::float32) ? 2
                                                                                    : 1;
  }
  // An integer register's width in bits (16, 32, 64); 0 for float32 and coils.
  int bits() const { return table == Table::coil || type == Type::float32 ? 0 : 16 * words(); }
};

// Command and mode codes (ours): what the command register takes and the mode register reports.
inline constexpr int kCommandIdle = 0, kCommandHold = 1, kCommandRoadLoad = 2, kCommandStop = 3,
                     kCommandClearFault = 4;

// The driver-prompt register's codes (ours): what the driver display shows.
inline constexpr int kPromptOff = 0, kPromptAccelerate = 1, kPromptNeutral = 2;
int prompt_code(controller::DriverPrompt p);
// The prompt a code stands for; nothing for a code that is none of the three.
std::optional<controller::DriverPrompt> prompt_of(double code);

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
inline constexpr std::array<Quantity, 26> kQuantities = {{
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
    // What the controller reports it is running (docs/modbus.md, "Applied values"): read back after every
    // strobe instead of the setpoint registers just written, which prove only that the write arrived.
    // Required unless the cell file says modbus.accept_setpoint_readback = true.
    {"applied_inertia", "kg", false, false},
    {"applied_f0", "N", false, false},
    {"applied_f1", "N/(km/h)", false, false},
    {"applied_f2", "N/(km/h)^2", false, false},
    // The driver display (docs/modbus.md, "Driver prompts"): the prompt code (kPromptOff, kPromptAccelerate,
    // kPromptNeutral) and the speed to accelerate to, taken with the strobe and read back after it. Both or
    // neither; without them a run-up under the vehicle's own power cannot be prompted over this map.
    {"driver_prompt", "", false, true},
    {"prompt_speed", "km/h", false, true},
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
  force_setpoint,
  applied_inertia,
  applied_f0,
  applied_f1,
  applied_f2,
  driver_prompt,
  prompt_speed
};
inline constexpr std::array<Q, 4> kApplied = {Q::applied_inertia, Q::applied_f0, Q::applied_f1,
                                              Q::applied_f2};

// Modbus exceptions by meaning (docs/modbus.md, "Exceptions"): 06 "server device busy", 0A "gateway path
// unavailable" and 0B "gateway target device failed to respond" say "not now", not "no": the request is sent
// again, at most `attempts` more times and only while less than `within_ms` has passed since it first failed,
// `delay_ms` apart. Every other exception is the controller's refusal and fatal.
struct RetryPolicy {
  int attempts = 3;     // modbus.retry_attempts, 0 to 20
  int within_ms = 500;  // modbus.retry_within_ms, 10 to 10000
  int delay_ms = 20;    // modbus.retry_delay_ms, 0 to 1000
  int byte_timeout_ms =
      100;  // modbus.byte_timeout_ms, 1 to 1000: the longest gap between two bytes of a reply
};
// Whether a Modbus exception code is worth sending the request again for (busy, gateway), per RetryPolicy.
bool retryable_exception(int code);
// The status bits the map defines (docs/modbus.md): fault, emergency stop, watchdog, at a limit, at setpoint.
inline constexpr std::uint32_t kDefinedStatusBits = 0x1F;
// The highest bit modbus.status_bits.neutral may name (2^30; lower for a 16-bit or float32 status register).
inline constexpr int kHighestNeutralBit = 1 << 30;

struct RegisterMap {
  int unit_id = 1;
  double poll_rate_hz = 50.0;
  RetryPolicy retry;
  std::array<Register, kQuantities.size()> regs{};
  ModeCodes modes;
  // modbus.accept_setpoint_readback: the cell file accepts a map without the applied-value registers; the
  // read-back is then of the setpoint registers only (it proves the write, not that the controller runs it),
  // which every session logs (the controller's capability "readback-setpoint-only") and the report shows.
  bool accept_setpoint_readback = false;
  // modbus.status_bits.neutral: the status register's bit (its value, a power of two above 16) that says the
  // vehicle is in neutral while a driver prompt is shown; 0 = the map names none, and the release is found in
  // the speed trace. The adapter reports it as controller::kFlagNeutral.
  std::uint32_t neutral_bit = 0;
  const Register& operator[](Q q) const { return regs[q]; }
  bool reads_applied() const { return regs[Q::applied_inertia].present; }
  bool has_driver_display() const { return regs[Q::driver_prompt].present && regs[Q::prompt_speed].present; }
  // The status bits the map defines: kDefinedStatusBits and the neutral bit.
  std::uint32_t defined_status_bits() const { return kDefinedStatusBits | neutral_bit; }
};

// Every problem at once, keys "modbus.<quantity>.<field>" and "modbus.modes.<mode>".
core::Problems validate(const RegisterMap& m);

// The most registers one read may ask for (function codes 03 and 04: 1 to 125, the Modbus application
// protocol specification).
inline constexpr int kMaxReadRegisters = 125;
// The one read that carries every register of a sample (speed, force, mode, status, and time when the map
// names it): their table and the span from the lowest address to the end of the highest register, when they
// are all in one table (input or holding), the span is at most kMaxReadRegisters long and every register in
// it is named by the map (a read never asks for an address the controller may not define). Nothing otherwise:
// the sample is then read register by register (docs/modbus.md, "One sample, one moment").
struct Block {
  Table table = Table::input;
  int address = 0;
  int count = 0;
};
std::optional<Block> sample_block(const RegisterMap& m);

// "" when the map lets the adapter command `mode`, else which keys it lacks ("the register map has no
// modbus.modes.free_coast"). The modes of a setting session (idle, hold, road load, stop) are always there.
std::string missing_for(const RegisterMap& m, controller::Mode mode);
// The command register's code for `mode` (-1 when the map has none).
int command_code(const RegisterMap& m, controller::Mode mode);
// "" when the map carries a driver display (driver_prompt and prompt_speed), else which keys it lacks ("the
// register map has no modbus.driver_prompt and modbus.prompt_speed ...").
std::string missing_for_driver(const RegisterMap& m);
// The status register's raw bits as every adapter reports them (controller::kFlag*): the map's neutral bit
// becomes controller::kFlagNeutral; a raw 0x20 that is not the map's neutral bit is dropped (it would read
// as the neutral signal). The other bits pass as they are.
std::uint32_t controller_flags(const RegisterMap& m, std::uint32_t raw);
// The other way (the simulated controller): controller::kFlagNeutral becomes the map's neutral bit, or is
// dropped when the map has none.
std::uint32_t status_register_bits(const RegisterMap& m, std::uint32_t flags);

// Raw words ↔ physical value, per the register's type, word order and scale. encode refuses (returns false
// and writes nothing) a value that is not finite or does not fit the register's type after scaling: a
// setpoint is never clamped or wrapped silently. `words` holds Register::words() words (at most 4).
double decode(const Register& r, const std::uint16_t* words);
bool encode(const Register& r, double value, std::uint16_t* words);

// The heartbeat counter (docs/modbus.md, "Heartbeat"): a count of raw register units (the register's scale
// plays no part: only a change is looked for) that goes up by one at every beat and wraps at the register's
// width — after 2^16 counts for int16 and uint16 (int16 goes from 32767 to -32768, uint16 from 65535 to 0),
// 2^32 for int32 and uint32, 2^64 for uint64; float32 counts 0 to 65535 (whole numbers a float holds
// exactly) and wraps to 0. The count is kept as the register's raw bits, so every step is a change and none
// is out of the register's range.
//
// The count a register's words hold, or nothing when they hold no count (a float32 that is not a whole number
// from 0 to 65535).
std::optional<std::uint64_t> heartbeat_count(const Register& r, const std::uint16_t* words);
// The count after `count`, wrapped at the register's width.
std::uint64_t next_heartbeat(const Register& r, std::uint64_t count);
// The words that write `count` (taken modulo the register's width) to the register.
void heartbeat_words(const Register& r, std::uint64_t count, std::uint16_t* words);

// The controller's clock as a counter (docs/modbus.md, "The time counter"): an integer time register counts
// in units of its scale and wraps to 0 after 2^bits counts (a uint32 of milliseconds after 49.7 days of
// controller uptime; a uint16 of milliseconds after 65.536 s). This is that period in seconds; 0 for float32
// (read as it is, no wrap).
double counter_period_s(const Register& time);

// Unwraps the time counter into a time that keeps counting past each wrap. Pure: the tool's own monotonic
// time of each read is passed in. How far the counter moved since the last read is known only modulo its
// period; the tool's clock says which multiple it was:
//   - reads less than half a period apart (in controller time at the stated rate, by the tool's clock): a
//     forward movement of up to half a period is the counter advancing (across a wrap or not); more than
//     half a period forward is the counter having stepped BACK by the rest, and is reported as such (the
//     unwrapped time goes down, and the clock guard names a clock that ran backwards);
//   - reads further apart (the tool paused): the movement plus the whole number of periods nearest to what
//     the tool's clock says elapsed (a backwards step cannot be told from a wrap then: a counter whose period
//     is short against the tool's pauses should be wider) — but whole periods are counted only when the
//     counter moved at all and the total agrees with the tool's clock within kPauseAgreement of the elapsed
//     time plus kPauseSlackWallS (at the stated rate); else none is, so a counter frozen across a pause reads
//     as frozen (the clock guard names it stopped), never as one that advanced by whole periods.
// Stops, crawls, jumps and races of the unwrapped clock are the clock guard's to judge
// (controller/clock_guard.hpp): this only undoes the wrap.
class TimeCounter {
 public:
  // How closely a movement across a pause must agree with the tool's clock for whole periods to be counted:
  // 10 % of the elapsed time (a clock off by more is broken anyway) plus 1 s of the tool's time (a read's
  // latency, the clock guard's slack). Lab policy, common practice, no source.
  static constexpr double kPauseAgreement = 0.10;
  static constexpr double kPauseSlackWallS = 1.0;
  // period_s: counter_period_s of the register; rate: controller seconds per wall second (the stated rate).
  void reset(double period_s, double rate);
  // A raw reading (the register decoded: counts × scale) and the tool's monotonic time of the read, s.
  double read(double raw_s, double wall_s);
  std::uint64_t wraps() const { return wraps_; }

 private:
  double period_s_ = 0.0, rate_ = 1.0;
  bool have_ = false;
  double last_raw_s_ = 0.0, last_wall_s_ = 0.0;
  std::int64_t periods_ = 0;  // whole periods counted since the first reading
  std::uint64_t wraps_ = 0;
};

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
