#include "modbus/register_map.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <map>
#include <sstream>

namespace loadtrim::modbus {

using core::Problem;

const char* to_string(Table t) {
  return t == Table::holding ? "holding" : t == Table::input ? "input" : "coil";
}
const char* to_string(Type t) {
  switch (t) {
    case Type::int16:
      return "int16";
    case Type::uint16:
      return "uint16";
    case Type::int32:
      return "int32";
    case Type::uint32:
      return "uint32";
    case Type::float32:
      return "float32";
    case Type::uint64:
      return "uint64";
  }
  return "?";
}

core::Problems validate(const RegisterMap& m) {
  core::Problems ps;
  auto err = [&](const std::string& k, const std::string& msg) {
    ps.push_back({Problem::Severity::error, k, msg});
  };
  if (m.unit_id < 0 || m.unit_id > 247)
    err("modbus.unit_id", "is " + std::to_string(m.unit_id) + ", allowed 0 to 247");
  // At least 10 Hz: the speed signal's minimum rate (GTR 15 §3.1, docs/standards.md §2.7).
  if (!(m.poll_rate_hz >= 10.0 && m.poll_rate_hz <= 1000.0))
    err("modbus.poll_rate_hz", "is " + core::num(m.poll_rate_hz) + ", allowed 10 to 1000 Hz");
  std::map<Table, std::map<int, std::string>> used;  // address → quantity, per table
  for (std::size_t i = 0; i < kQuantities.size(); ++i) {
    const Quantity& q = kQuantities[i];
    const Register& r = m.regs[i];
    const std::string key = std::string("modbus.") + q.name;
    if (!r.present) {
      if (q.required) err(key, "is missing: the map must name this quantity");
      continue;
    }
    if (r.address < 0 || r.address + r.words() > 65536)
      err(key + ".address",
          "is " + std::to_string(r.address) + ", allowed 0 to " + std::to_string(65536 - r.words()));
    if (!(std::isfinite(r.scale) && r.scale != 0.0))
      err(key + ".scale", "is " + core::num(r.scale) + ", must be a finite non-zero number");
    if (r.unit != q.unit)
      err(key + ".unit", "is \"" + r.unit + "\", must be \"" + q.unit +
                             "\" (convert with scale; SI and km/h inside loadtrim)");
    if (q.writable && r.table == Table::input)
      err(key + ".table", "is \"input\", but loadtrim writes this quantity: use \"holding\"");
    if (r.table == Table::coil && std::string(q.name) != "strobe")
      err(key + ".table", "is \"coil\"; only the strobe may be a coil");
    if (r.table == Table::coil && r.type != Type::uint16)
      err(key + ".type", "a coil is one bit: use \"uint16\"");
    for (int w = 0; w < r.words(); ++w) {
      auto& slot = used[r.table][r.address + w];
      if (!slot.empty())
        err(key + ".address",
            "overlaps " + slot + " at " + to_string(r.table) + " register " + std::to_string(r.address + w));
      else
        slot = q.name;
    }
  }
  // Applied values: all four, or none with the cell file's explicit acceptance of setpoint-only read-back.
  {
    std::vector<std::string> missing;
    for (Q q : kApplied)
      if (!m.regs[q].present) missing.push_back(std::string("modbus.") + kQuantities[q].name);
    if (!missing.empty() && missing.size() < kApplied.size())
      err(missing.front(),
          "is missing: the applied values are read back together (applied_inertia, "
          "applied_f0, applied_f1, applied_f2), so the map names all four or none");
    else if (!missing.empty() && !m.accept_setpoint_readback)
      err("modbus.applied_inertia",
          "is missing (with applied_f0, applied_f1, applied_f2): the map must name where the controller "
          "reports the inertia and coefficients it applies, or the cell file must accept a read-back of the "
          "setpoint registers alone with modbus.accept_setpoint_readback = true (docs/modbus.md)");
  }
  // The controller's clock: a counter with a positive unit (its period is what tells a wrap from a step
  // back).
  if (const Register& t = m.regs[Q::time]; t.present) {
    if (!(t.scale > 0.0))
      err("modbus.time.scale", "is " + core::num(t.scale) + ", must be positive (seconds per count)");
    else if (const double p = counter_period_s(t); p > 0.0 && p < 10.0)
      err("modbus.time.type",
          std::string("is \"") + to_string(t.type) + "\" with scale " + core::num(t.scale) +
              ": the counter wraps every " + core::num(p) +
              " s, which cannot be told from a clock stepping back between reads; at least 10 s is needed "
              "(a wider type or a coarser scale)");
    // Every poll must read a time of its own: two samples with one time are no trace (the analysis needs time
    // strictly ascending). A count coarser than the poll period makes successive polls read the same time; a
    // float32's resolution is 2^-23 of the time it holds (24 significant bits, IEEE 754 binary32), so it
    // falls with the controller's uptime until it is coarser than any poll period.
    const bool rate_ok = m.poll_rate_hz >= 10.0 && m.poll_rate_hz <= 1000.0;
    if (t.type == Type::float32 && rate_ok)
      err("modbus.time.type",
          "is \"float32\": its resolution is 2^-23 of the time it holds, so it falls with the controller's "
          "uptime and is coarser than the poll period of " +
              core::num(1.0 / m.poll_rate_hz) + " s (modbus.poll_rate_hz = " + core::num(m.poll_rate_hz) +
              ") after about " + core::num(std::ldexp(1.0 / m.poll_rate_hz, 23) / 3600.0, 1) +
              " h of uptime: successive polls would then read one time; use an integer counter (e.g. uint32 "
              "with scale 0.001, milliseconds)");
    else if (rate_ok && t.scale > 1.0 / m.poll_rate_hz)
      err("modbus.time.scale",
          "is " + core::num(t.scale) + " s per count, coarser than the poll period of " +
              core::num(1.0 / m.poll_rate_hz) + " s (modbus.poll_rate_hz = " + core::num(m.poll_rate_hz) +
              "): successive polls would read the same time; allowed at most " +
              core::num(1.0 / m.poll_rate_hz) + " s per count (a finer count, or a lower poll_rate_hz)");
  }
  // The checks' mode codes: distinct from ours (0 to 4) and from each other, and sendable through the command
  // register; a constant force goes with its setpoint register.
  const auto code = [&](const char* name, int c) {
    const std::string key = std::string("modbus.modes.") + name;
    if (c < 0) return;
    if (c > 65535) return err(key, "is " + std::to_string(c) + ", allowed 5 to 65535");
    if (c <= kCommandClearFault)
      return err(key, "is " + std::to_string(c) +
                          ", which is taken (0 idle, 1 speed hold, 2 road load, 3 stop, 4 clear fault): "
                          "allowed 5 to 65535");
    std::uint16_t w[2] = {0, 0};
    if (m.regs[Q::command].present && !encode(m.regs[Q::command], c, w))
      err(key, "is " + std::to_string(c) + ", which does not fit the command register (" +
                   to_string(m.regs[Q::command].type) + ", scale " + core::num(m.regs[Q::command].scale) +
                   ")");
  };
  code("constant_force", m.modes.constant_force);
  code("free_coast", m.modes.free_coast);
  if (m.modes.constant_force >= 0 && m.modes.constant_force == m.modes.free_coast)
    err("modbus.modes.free_coast",
        "is " + std::to_string(m.modes.free_coast) + ", the same code as modbus.modes.constant_force");
  if (m.modes.constant_force >= 0 && !m.regs[Q::force_setpoint].present)
    err("modbus.force_setpoint",
        "is missing: modbus.modes.constant_force needs the register the force is written to (unit N)");
  if (m.modes.constant_force < 0 && m.regs[Q::force_setpoint].present)
    err("modbus.modes.constant_force",
        "is missing: modbus.force_setpoint is written only with the constant-force command code, "
        "allowed 5 to 65535");
  // The driver display: both registers or neither, a prompt register that carries the codes 0 to 2, and a
  // neutral bit only with a display (it is read only while a prompt is shown).
  const bool prompt = m.regs[Q::driver_prompt].present, speed = m.regs[Q::prompt_speed].present;
  if (prompt != speed)
    err(prompt ? "modbus.prompt_speed" : "modbus.driver_prompt",
        "is missing: the driver display is written together (driver_prompt: 0 off, 1 accelerate, 2 neutral; "
        "prompt_speed: the speed to accelerate to, km/h), so the map names both or neither");
  if (prompt) {
    std::uint16_t w[4] = {0, 0, 0, 0};
    const Register& r = m.regs[Q::driver_prompt];
    for (int c : {kPromptOff, kPromptAccelerate, kPromptNeutral})
      if (!encode(r, c, w) || decode(r, w) != c) {
        err("modbus.driver_prompt.type", std::string("is \"") + to_string(r.type) + "\" with scale " +
                                             core::num(r.scale) + ", which cannot carry the prompt code " +
                                             std::to_string(c) + " (0 off, 1 accelerate, 2 neutral)");
        break;
      }
  }
  if (m.neutral_bit != 0) {
    const Register& st = m.regs[Q::status];
    // The highest bit the status register can report as a bit field (decode_flags): a signed type's sign bit
    // reads negative, and float32 holds whole numbers exactly up to 2^24.
    const int width = !st.present || st.type == Type::float32 ? 24
                      : st.type == Type::int16                ? 15
                      : st.type == Type::uint16               ? 16
                                                              : 31;
    const std::uint64_t highest =
        std::min<std::uint64_t>(kHighestNeutralBit, std::uint64_t{1} << (width - 1));
    const bool single = (m.neutral_bit & (m.neutral_bit - 1)) == 0;
    if (!single || m.neutral_bit <= kDefinedStatusBits || m.neutral_bit > highest)
      err("modbus.status_bits.neutral", "is " + std::to_string(m.neutral_bit) +
                                            ", allowed a single bit (a power of two) from 32 to " +
                                            std::to_string(highest) + " (the status register is " +
                                            to_string(st.type) + "; 1 to 16 are the defined bits)");
    else if (!prompt)
      err("modbus.status_bits.neutral",
          "is given, but the map has no driver display (modbus.driver_prompt, modbus.prompt_speed): the "
          "neutral signal is read only while a driver prompt is shown");
  }
  return ps;
}

int prompt_code(controller::DriverPrompt p) {
  switch (p) {
    case controller::DriverPrompt::accelerate:
      return kPromptAccelerate;
    case controller::DriverPrompt::neutral:
      return kPromptNeutral;
    case controller::DriverPrompt::off:
      return kPromptOff;
  }
  return kPromptOff;
}

std::optional<controller::DriverPrompt> prompt_of(double code) {
  if (code == kPromptOff) return controller::DriverPrompt::off;
  if (code == kPromptAccelerate) return controller::DriverPrompt::accelerate;
  if (code == kPromptNeutral) return controller::DriverPrompt::neutral;
  return std::nullopt;
}

std::string missing_for_driver(const RegisterMap& m) {
  std::vector<std::string> keys;
  if (!m.regs[Q::driver_prompt].present) keys.push_back("modbus.driver_prompt");
  if (!m.regs[Q::prompt_speed].present) keys.push_back("modbus.prompt_speed");
  if (keys.empty()) return "";
  std::string s = "the register map has no " + keys[0];
  if (keys.size() > 1) s += " and " + keys[1];
  return s + " (the driver display, docs/modbus.md \"Driver prompts\")";
}

std::uint32_t controller_flags(const RegisterMap& m, std::uint32_t raw) {
  std::uint32_t out = raw & ~controller::kFlagNeutral & ~m.neutral_bit;
  if (m.neutral_bit != 0 && (raw & m.neutral_bit) != 0) out |= controller::kFlagNeutral;
  return out;
}

std::uint32_t status_register_bits(const RegisterMap& m, std::uint32_t flags) {
  std::uint32_t out = flags & ~controller::kFlagNeutral;
  if (m.neutral_bit != 0 && (flags & controller::kFlagNeutral) != 0) out |= m.neutral_bit;
  return out;
}

std::string missing_for(const RegisterMap& m, controller::Mode mode) {
  std::vector<std::string> keys;
  if (mode == controller::Mode::constant_force) {
    if (m.modes.constant_force < 0) keys.push_back("modbus.modes.constant_force");
    if (!m.regs[Q::force_setpoint].present) keys.push_back("modbus.force_setpoint");
  } else if (mode == controller::Mode::free_coast) {
    if (m.modes.free_coast < 0) keys.push_back("modbus.modes.free_coast");
  }
  if (keys.empty()) return "";
  std::string s = std::string("the register map has no ") + keys[0];
  for (std::size_t i = 1; i < keys.size(); ++i) s += (i + 1 == keys.size() ? " and " : ", ") + keys[i];
  return s + " (docs/modbus.md): " + controller::to_string(mode) + " cannot be commanded over it";
}

int command_code(const RegisterMap& m, controller::Mode mode) {
  switch (mode) {
    case controller::Mode::idle:
      return kCommandIdle;
    case controller::Mode::speed_hold:
      return kCommandHold;
    case controller::Mode::road_load:
      return kCommandRoadLoad;
    case controller::Mode::controlled_stop:
      return kCommandStop;
    case controller::Mode::constant_force:
      return missing_for(m, mode).empty() ? m.modes.constant_force : -1;
    case controller::Mode::free_coast:
      return m.modes.free_coast;
  }
  return -1;
}

double decode(const Register& r, const std::uint16_t* w) {
  if (r.type == Type::uint64 && r.table != Table::coil) {
    std::uint64_t v = 0;
    for (int i = 0; i < 4; ++i) v = (v << 16) | w[r.order == WordOrder::big ? i : 3 - i];
    return static_cast<double>(v) * r.scale;
  }
  std::uint32_t v32 = 0;
  if (r.words() == 2)
    v32 = r.order == WordOrder::big ? (std::uint32_t(w[0]) << 16) | w[1] : (std::uint32_t(w[1]) << 16) | w[0];
  double raw = 0.0;
  switch (r.type) {
    case Type::int16:
      raw = static_cast<std::int16_t>(w[0]);
      break;
    case Type::uint16:
      raw = w[0];
      break;
    case Type::int32:
      raw = static_cast<std::int32_t>(v32);
      break;
    case Type::uint32:
      raw = v32;
      break;
    case Type::float32: {
      float f;
      std::memcpy(&f, &v32, sizeof f);
      raw = f;
      break;
    }
    case Type::uint64:
      break;  // above
  }
  return raw * r.scale;
}

bool encode(const Register& r, double value, std::uint16_t* w) {
  if (!std::isfinite(value) || !(r.scale != 0.0)) return false;
  const double raw = value / r.scale;
  std::uint32_t v32 = 0;
  const auto fits = [&](double lo, double hi) {
    return std::isfinite(raw) && std::round(raw) >= lo && std::round(raw) <= hi;
  };
  switch (r.type) {
    case Type::int16:
      if (!fits(-32768.0, 32767.0)) return false;
      w[0] = static_cast<std::uint16_t>(static_cast<std::int16_t>(std::lround(raw)));
      return true;
    case Type::uint16:
      if (!fits(0.0, 65535.0)) return false;
      w[0] = static_cast<std::uint16_t>(std::lround(raw));
      return true;
    case Type::int32:
      if (!fits(-2147483648.0, 2147483647.0)) return false;
      v32 = static_cast<std::uint32_t>(static_cast<std::int32_t>(std::llround(raw)));
      break;
    case Type::uint32:
      if (!fits(0.0, 4294967295.0)) return false;
      v32 = static_cast<std::uint32_t>(std::llround(raw));
      break;
    case Type::float32: {
      if (!std::isfinite(raw) || std::abs(raw) > static_cast<double>(std::numeric_limits<float>::max()))
        return false;
      const float f = static_cast<float>(raw);
      std::memcpy(&v32, &f, sizeof f);
      break;
    }
    case Type::uint64: {
      // 2^64 itself is one count too many (a double cannot hold 2^64 - 1: the largest below is 2^64 - 2048).
      if (!(std::isfinite(raw) && std::round(raw) >= 0.0 && std::round(raw) < 18446744073709551616.0))
        return false;
      auto v = static_cast<std::uint64_t>(std::round(raw));
      for (int i = 3; i >= 0; --i, v >>= 16)
        w[r.order == WordOrder::big ? i : 3 - i] = static_cast<std::uint16_t>(v & 0xFFFF);
      return true;
    }
  }
  if (r.order == WordOrder::big) {
    w[0] = static_cast<std::uint16_t>(v32 >> 16);
    w[1] = static_cast<std::uint16_t>(v32 & 0xFFFF);
  } else {
    w[1] = static_cast<std::uint16_t>(v32 >> 16);
    w[0] = static_cast<std::uint16_t>(v32 & 0xFFFF);
  }
  return true;
}

namespace {
// The heartbeat counter's modulus minus one (all ones for uint64).
std::uint64_t heartbeat_mask(const Register& r) {
  if (r.type == Type::float32) return 0xFFFF;
  const int bits = r.bits();
  return bits >= 64 ? ~std::uint64_t{0} : bits <= 0 ? 0xFFFF : (std::uint64_t{1} << bits) - 1;
}
}  // namespace

std::optional<std::uint64_t> heartbeat_count(const Register& r, const std::uint16_t* w) {
  if (r.type == Type::float32) {
    Register raw = r;
    raw.scale = 1.0;  // the count is the register's raw value
    const double v = decode(raw, w);
    if (!(std::isfinite(v) && v == std::floor(v) && v >= 0.0 && v <= 65535.0)) return std::nullopt;
    return static_cast<std::uint64_t>(v);
  }
  // The raw bits, high word first in the register's word order.
  const int n = r.words();
  std::uint64_t v = 0;
  for (int i = 0; i < n; ++i) v = (v << 16) | w[r.order == WordOrder::big ? i : n - 1 - i];
  return v & heartbeat_mask(r);
}

std::uint64_t next_heartbeat(const Register& r, std::uint64_t count) {
  return (count + 1) & heartbeat_mask(r);
}

void heartbeat_words(const Register& r, std::uint64_t count, std::uint16_t* w) {
  count &= heartbeat_mask(r);
  if (r.type == Type::float32) {
    const float f = static_cast<float>(count);
    std::uint32_t v32 = 0;
    std::memcpy(&v32, &f, sizeof f);
    w[r.order == WordOrder::big ? 0 : 1] = static_cast<std::uint16_t>(v32 >> 16);
    w[r.order == WordOrder::big ? 1 : 0] = static_cast<std::uint16_t>(v32 & 0xFFFF);
    return;
  }
  const int n = r.words();
  for (int i = n - 1; i >= 0; --i, count >>= 16)
    w[r.order == WordOrder::big ? i : n - 1 - i] = static_cast<std::uint16_t>(count & 0xFFFF);
}

namespace {
// A register value that must be a whole number in [lo, hi] (codes and bit fields).
bool whole_in(double v, double lo, double hi) {
  return std::isfinite(v) && v == std::floor(v) && v >= lo && v <= hi;
}
std::string shown(double v) {
  std::ostringstream o;
  o << v;
  return o.str();
}
}  // namespace

std::string decode_mode(double value, controller::Mode& out, const ModeCodes& codes) {
  const bool ours = whole_in(value, 0.0, 3.0);
  const bool force = codes.constant_force >= 0 && value == codes.constant_force;
  const bool free = codes.free_coast >= 0 && value == codes.free_coast;
  if (!ours && !force && !free) {
    std::string allowed = "0 idle, 1 hold, 2 road load, 3 stop";
    if (codes.constant_force >= 0) allowed += ", " + std::to_string(codes.constant_force) + " constant force";
    if (codes.free_coast >= 0) allowed += ", " + std::to_string(codes.free_coast) + " free coast";
    return "mode register value " + shown(value) + " is not a mode code (allowed: " + allowed + ")";
  }
  if (force) return out = controller::Mode::constant_force, "";
  if (free) return out = controller::Mode::idle, "";
  const int m = static_cast<int>(value);
  out = m == kCommandHold       ? controller::Mode::speed_hold
        : m == kCommandRoadLoad ? controller::Mode::road_load
        : m == kCommandStop     ? controller::Mode::controlled_stop
                                : controller::Mode::idle;
  return "";
}

std::string decode_flags(double value, std::uint32_t& out) {
  if (!whole_in(value, 0.0, 4294967295.0))
    return "status register value " + shown(value) + " is not a bit field (allowed: 0 to 4294967295)";
  out = static_cast<std::uint32_t>(value);
  return "";
}

std::string decode_error_code(double value, int& out) {
  if (!whole_in(value, -2147483648.0, 2147483647.0))
    return "error register value " + shown(value) + " is not an error code";
  out = static_cast<int>(value);
  return "";
}

std::optional<Block> sample_block(const RegisterMap& m) {
  const Q parts[] = {Q::speed, Q::force, Q::mode, Q::status, Q::time};
  Block b;
  int lo = 1 << 20, hi = -1;
  bool first = true;
  for (Q q : parts) {
    const Register& r = m.regs[q];
    if (!r.present) {
      if (q == Q::time) continue;
      return std::nullopt;
    }
    if (r.table == Table::coil) return std::nullopt;
    if (first) b.table = r.table, first = false;
    if (r.table != b.table) return std::nullopt;
    lo = std::min(lo, r.address);
    hi = std::max(hi, r.address + r.words());
  }
  if (first || hi - lo > kMaxReadRegisters || lo < 0) return std::nullopt;
  // Every address of the span named by some register of the map in that table.
  std::vector<bool> named(static_cast<std::size_t>(hi - lo), false);
  for (const Register& r : m.regs) {
    if (!r.present || r.table != b.table) continue;
    for (int w = 0; w < r.words(); ++w)
      if (r.address + w >= lo && r.address + w < hi)
        named[static_cast<std::size_t>(r.address + w - lo)] = true;
  }
  if (std::find(named.begin(), named.end(), false) != named.end()) return std::nullopt;
  b.address = lo;
  b.count = hi - lo;
  return b;
}

bool retryable_exception(int code) {
  return code == 0x06 || code == 0x0A || code == 0x0B;
}

double counter_period_s(const Register& time) {
  const int bits = time.bits();
  return bits > 0 ? std::ldexp(std::abs(time.scale), bits) : 0.0;
}

void TimeCounter::reset(double period_s, double rate) {
  period_s_ = period_s;
  rate_ = rate > 0.0 && std::isfinite(rate) ? rate : 1.0;
  have_ = false;
  last_raw_s_ = last_wall_s_ = 0.0;
  periods_ = 0;
  wraps_ = 0;
}

double TimeCounter::read(double raw_s, double wall_s) {
  if (!(period_s_ > 0.0) || !std::isfinite(raw_s)) return raw_s;  // not a counter (float32), or not a time
  const double p = period_s_;
  // The counter's position in [0, p): a signed register's negative half is the upper half of its period.
  double r = std::fmod(raw_s, p);
  if (r < 0.0) r += p;
  if (!have_) {
    have_ = true;
    last_raw_s_ = r;
    last_wall_s_ = wall_s;
    periods_ = 0;
    return r;
  }
  double d = r - last_raw_s_;  // forward movement modulo the period, in [0, p)
  if (d < 0.0) d += p;
  const double expected = rate_ * std::max(0.0, wall_s - last_wall_s_);
  // Whole periods are counted apart from the position, so the time is exact (no sum of steps drifting).
  std::int64_t k = 0;
  if (expected < p / 2.0) {
    if (d <= p / 2.0)
      k = r < last_raw_s_ ? 1 : 0;  // forward, across the wrap or not
    else
      k = r > last_raw_s_ ? -1 : 0;  // more than half a period forward = a step BACK by the rest
  } else {
    // The tool paused: the whole number of periods that brings the movement nearest to what the tool's clock
    // says elapsed, counted only when the counter moved at all and the total then agrees with the tool's
    // clock (kPauseAgreement of the elapsed time, plus kPauseSlackWallS at the stated rate). Otherwise no
    // whole period is counted, and the clock guard judges the movement as read: a counter frozen across the
    // pause reads as stopped, never as one that advanced by whole periods.
    const auto n = static_cast<std::int64_t>(std::max(0.0, std::round((expected - d) / p)));
    const double total = d + static_cast<double>(n) * p;
    const bool agrees =
        d > 0.0 && std::abs(total - expected) <= kPauseAgreement * expected + rate_ * kPauseSlackWallS;
    k = (agrees ? n : 0) + (r < last_raw_s_ ? 1 : 0);
  }
  periods_ += k;
  if (k > 0) wraps_ += static_cast<std::uint64_t>(k);
  last_raw_s_ = r;
  last_wall_s_ = wall_s;
  // A step back below the first reading's period reads 0: lower than before, so the clock guard names it a
  // clock that ran backwards (a negative time would be named "not a time" instead).
  return std::max(0.0, static_cast<double>(periods_) * p + r);
}

}  // namespace loadtrim::modbus
