#include "modbus/map_file.hpp"

#include "config/toml_reader.hpp"

namespace loadtrim::modbus {

RegisterMap read_register_map(config::TomlReader& r) {
  RegisterMap m;
  m.unit_id = r.integer_or("modbus.unit_id", 1, 0, 247);
  m.poll_rate_hz = r.number_or("modbus.poll_rate_hz", 50.0, 10.0, 1000.0, "Hz");
  m.retry.attempts = static_cast<int>(r.integer_or("modbus.retry_attempts", 3, 0, 20));
  m.retry.within_ms = static_cast<int>(r.number_or("modbus.retry_within_ms", 500, 10, 10000, "ms"));
  m.retry.delay_ms = static_cast<int>(r.number_or("modbus.retry_delay_ms", 20, 0, 1000, "ms"));
  m.retry.byte_timeout_ms = static_cast<int>(r.number_or("modbus.byte_timeout_ms", 100, 1, 1000, "ms"));
  for (std::size_t i = 0; i < kQuantities.size(); ++i) {
    const std::string k = std::string("modbus.") + kQuantities[i].name;
    if (!r.has(k)) continue;
    Register& reg = m.regs[i];
    reg.present = true;
    const std::string table = r.choice(k + ".table", {"holding", "input", "coil"});
    reg.table = table == "input" ? Table::input : table == "coil" ? Table::coil : Table::holding;
    reg.address = r.integer_or(k + ".address", -1, 0, 65535);
    if (!r.has(k + ".address")) r.error(k + ".address", "is missing, allowed 0 to 65535");
    const std::string type =
        r.choice(k + ".type", {"int16", "uint16", "int32", "uint32", "float32", "uint64"});
    reg.type = type == "int16"    ? Type::int16
               : type == "uint16" ? Type::uint16
               : type == "int32"  ? Type::int32
               : type == "uint32" ? Type::uint32
               : type == "uint64" ? Type::uint64
                                  : Type::float32;
    reg.order = r.choice(k + ".word_order", {"big", "little"}, std::string("big")) == "little"
                    ? WordOrder::little
                    : WordOrder::big;
    reg.scale = r.number_or(k + ".scale", 1.0, -1e9, 1e9, "");
    reg.unit = r.string_or(k + ".unit", "");
  }
  // The checks' mode codes (register_map.hpp ModeCodes): absent = the controller does not offer the mode.
  if (r.has("modbus.modes.constant_force"))
    m.modes.constant_force = static_cast<int>(r.integer_or("modbus.modes.constant_force", -1, 5, 65535));
  if (r.has("modbus.modes.free_coast"))
    m.modes.free_coast = static_cast<int>(r.integer_or("modbus.modes.free_coast", -1, 5, 65535));
  m.accept_setpoint_readback = r.boolean_or("modbus.accept_setpoint_readback", false);
  // The vehicle-in-neutral bit of the status register (register_map.hpp RegisterMap::neutral_bit): a whole
  // number in range here; a single bit that the status register can hold in validate.
  if (r.has("modbus.status_bits.neutral"))
    m.neutral_bit =
        static_cast<std::uint32_t>(r.integer_or("modbus.status_bits.neutral", 0, 32, kHighestNeutralBit));
  r.add(validate(m));
  return m;
}

RegisterMap load_register_map(const std::string& path, core::Problems* w) {
  config::TomlReader r = config::TomlReader::from_file(path);
  auto m = read_register_map(r);
  const core::Problems ws = r.finish();  // throws InputError on any error in the map
  if (w)
    for (const auto& p : ws)
      if (p.key.rfind("modbus", 0) == 0) w->push_back(p);
  return m;
}

}  // namespace loadtrim::modbus
