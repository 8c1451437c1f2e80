#include "config/cell_loader.hpp"

#include <filesystem>

#include "config/toml_reader.hpp"

namespace loadtrim::config {

namespace {

std::chrono::milliseconds ms(TomlReader& r, const char* key, double fallback, double lo, double hi) {
  return std::chrono::milliseconds(static_cast<long long>(r.number_or(key, fallback, lo, hi, "ms")));
}

}  // namespace

modbus::RegisterMap read_register_map(TomlReader& r) {
  modbus::RegisterMap m;
  m.unit_id = r.integer_or("modbus.unit_id", 1, 0, 247);
  m.poll_rate_hz = r.number_or("modbus.poll_rate_hz", 50.0, 1.0, 1000.0, "Hz");
  for (std::size_t i = 0; i < modbus::kQuantities.size(); ++i) {
    const std::string k = std::string("modbus.") + modbus::kQuantities[i].name;
    if (!r.has(k)) continue;
    modbus::Register& reg = m.regs[i];
    reg.present = true;
    const std::string table = r.choice(k + ".table", {"holding", "input", "coil"});
    reg.table = table == "input"  ? modbus::Table::input
                : table == "coil" ? modbus::Table::coil
                                  : modbus::Table::holding;
    reg.address = r.integer_or(k + ".address", -1, 0, 65535);
    if (!r.has(k + ".address")) r.error(k + ".address", "is missing, allowed 0 to 65535");
    const std::string type = r.choice(k + ".type", {"int16", "uint16", "int32", "uint32", "float32"});
    reg.type = type == "int16"    ? modbus::Type::int16
               : type == "uint16" ? modbus::Type::uint16
               : type == "int32"  ? modbus::Type::int32
               : type == "uint32" ? modbus::Type::uint32
                                  : modbus::Type::float32;
    reg.order = r.choice(k + ".word_order", {"big", "little"}, std::string("big")) == "little"
                    ? modbus::WordOrder::little
                    : modbus::WordOrder::big;
    reg.scale = r.number_or(k + ".scale", 1.0, -1e9, 1e9, "");
    reg.unit = r.string_or(k + ".unit", "");
  }
  r.add(modbus::validate(m));
  return m;
}

namespace {

controller::CellConfig read_cell(TomlReader& r) {
  controller::CellConfig c;
  c.name = r.string("name");
  c.adapter = r.choice("controller.adapter",
                       {"line-tcp", "line-serial", "modbus-tcp", "modbus-rtu", "inprocess-sim"});
  if (c.adapter == "line-tcp" || c.adapter == "modbus-tcp") {
    c.host = r.string_or("controller.host", "127.0.0.1");
    c.port = static_cast<unsigned>(r.integer_or("controller.port", 0, 1, 65535));
    if (!r.has("controller.port")) r.error("controller.port", "is missing, allowed 1 to 65535");
  } else if (c.adapter == "line-serial" || c.adapter == "modbus-rtu") {
    c.serial.device = r.string("controller.device");
    c.serial.baud = static_cast<unsigned>(r.integer_or("controller.baud", 115200, 1200, 4000000));
    c.serial.parity = r.choice("controller.parity", {"none", "odd", "even"}, std::string("none"));
    c.serial.stop_bits = static_cast<unsigned>(r.integer_or("controller.stop_bits", 1, 1, 2));
    c.serial.data_bits = static_cast<unsigned>(r.integer_or("controller.data_bits", 8, 7, 8));
  } else {
    c.inprocess_truth = r.string("controller.truth");
    if (!c.inprocess_truth.empty() && std::filesystem::path(c.inprocess_truth).is_relative())
      c.inprocess_truth =
          (std::filesystem::path(r.file()).parent_path() / c.inprocess_truth).lexically_normal().string();
  }
  c.timeouts.connect = ms(r, "timeouts.connect_ms", 3000, 10, 600000);
  c.timeouts.reply = ms(r, "timeouts.reply_ms", 1000, 10, 600000);
  c.timeouts.sample_gap = ms(r, "timeouts.sample_gap_ms", 1000, 10, 600000);
  c.timeouts.heartbeat_interval = ms(r, "timeouts.heartbeat_interval_ms", 200, 10, 60000);
  c.timeouts.progress_grace = ms(r, "timeouts.progress_grace_ms", 2000, 100, 600000);
  if (c.timeouts.heartbeat_interval >= c.timeouts.sample_gap)
    r.error("timeouts.heartbeat_interval_ms", "must be shorter than timeouts.sample_gap_ms");
  c.reconnect.attempts = r.integer_or("reconnect.attempts", 3, 0, 100);
  c.reconnect.delay = ms(r, "reconnect.delay_ms", 500, 0, 600000);
  c.max_speed_kmh = r.number("limits.max_speed_kmh", 20.0, 300.0, "km/h");
  c.max_force_n = r.number("limits.max_force_n", 100.0, 100000.0, "N");
  c.max_motoring_s = r.number("limits.max_motoring_s", 60.0, 86400.0, "s");
  c.standstill_kmh = r.number_or("limits.standstill_kmh", 0.5, 0.0, 5.0, "km/h");
  c.max_time_scale = r.number_or("controller.max_time_scale", 1.0, 1.0, 10000.0, "");
  c.roller_diameter_m = r.number("dyno.roller_diameter_m", 0.2, 3.0, "m");
  c.base_inertia_kg = r.number("dyno.base_inertia_kg", 50.0, 10000.0, "kg");
  c.roller_diameter_tolerance_m = r.number_or("dyno.roller_diameter_tolerance_m", 0.002, 0.0, 0.1, "m");
  c.base_inertia_tolerance_kg = r.number_or("dyno.base_inertia_tolerance_kg", 5.0, 0.0, 500.0, "kg");
  core::parse(r.choice("dyno.axles", {"single-axle", "two-axle"}), c.axles);
  // The inertia range the dyno simulates (the unloaded coast-down runs at both ends); optional for sessions.
  c.min_inertia_kg = r.number_or("dyno.min_inertia_kg", 0.0, 0.0, 20000.0, "kg");
  c.max_inertia_kg = r.number_or("dyno.max_inertia_kg", 0.0, 0.0, 20000.0, "kg");
  if (c.min_inertia_kg > 0.0 && c.max_inertia_kg > 0.0 && c.max_inertia_kg < c.min_inertia_kg)
    r.error("dyno.max_inertia_kg", "must not be below dyno.min_inertia_kg");
  c.enforce_checks = r.boolean_or("checks.enforce", true);
  c.records_public_key = r.string_or("records.public_key", "");
  c.records_private_key = r.string_or("records.private_key", "");
  c.operator_name = r.string_or("records.operator", "");
  c.sample_rate_hz = r.number_or("controller.sample_rate_hz", 100.0, 10.0, 1000.0, "Hz");
  if (c.adapter.rfind("modbus", 0) == 0) c.register_map = read_register_map(r);
  return c;
}

}  // namespace

modbus::RegisterMap load_register_map(const std::string& path, core::Problems* w) {
  TomlReader r = TomlReader::from_file(path);
  auto m = read_register_map(r);
  // Only the map is read here: the rest of the file is the cell's business, not unknown keys.
  const core::Problems ws = r.finish();  // throws InputError on any error in the map
  if (w)
    for (const auto& p : ws)
      if (p.key.rfind("modbus", 0) == 0) w->push_back(p);
  return m;
}

controller::CellConfig load_cell(const std::string& path, core::Problems* w) {
  TomlReader r = TomlReader::from_file(path);
  auto c = read_cell(r);
  auto ws = r.finish();
  if (w) w->insert(w->end(), ws.begin(), ws.end());
  return c;
}

controller::CellConfig parse_cell(const std::string& text, const std::string& name, core::Problems* w) {
  TomlReader r = TomlReader::from_text(text, name);
  auto c = read_cell(r);
  auto ws = r.finish();
  if (w) w->insert(w->end(), ws.begin(), ws.end());
  return c;
}

}  // namespace loadtrim::config
