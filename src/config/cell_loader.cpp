#include "config/cell_loader.hpp"

#include <filesystem>

#include "config/toml_reader.hpp"

namespace loadtrim::config {

namespace {

std::chrono::milliseconds ms(TomlReader& r, const char* key, double fallback, double lo, double hi) {
  return std::chrono::milliseconds(static_cast<long long>(r.number_or(key, fallback, lo, hi, "ms")));
}

controller::CellConfig read_cell(TomlReader& r) {
  controller::CellConfig c;
  c.name = r.string("name");
  c.adapter = r.choice("controller.adapter", {"line-tcp", "line-serial", "inprocess-sim"});
  if (c.adapter == "line-tcp") {
    c.host = r.string_or("controller.host", "127.0.0.1");
    c.port = static_cast<unsigned>(r.integer_or("controller.port", 0, 1, 65535));
    if (!r.has("controller.port")) r.error("controller.port", "is missing, allowed 1 to 65535");
  } else if (c.adapter == "line-serial") {
    c.serial.device = r.string("controller.device");
    c.serial.baud = static_cast<unsigned>(r.integer_or("controller.baud", 115200, 1200, 4000000));
    c.serial.parity = r.choice("controller.parity", {"none", "odd", "even"}, std::string("none"));
    c.serial.stop_bits = static_cast<unsigned>(r.integer_or("controller.stop_bits", 1, 1, 2));
    c.serial.data_bits = static_cast<unsigned>(r.integer_or("controller.data_bits", 8, 7, 8));
  } else {
    c.inprocess_truth = r.string("controller.truth");
    if (!c.inprocess_truth.empty() && std::filesystem::path(c.inprocess_truth).is_relative())
      c.inprocess_truth = (std::filesystem::path(r.file()).parent_path() / c.inprocess_truth).lexically_normal().string();
  }
  c.timeouts.connect = ms(r, "timeouts.connect_ms", 3000, 10, 600000);
  c.timeouts.reply = ms(r, "timeouts.reply_ms", 1000, 10, 600000);
  c.timeouts.sample_gap = ms(r, "timeouts.sample_gap_ms", 1000, 10, 600000);
  c.timeouts.heartbeat_interval = ms(r, "timeouts.heartbeat_interval_ms", 200, 10, 60000);
  if (c.timeouts.heartbeat_interval >= c.timeouts.sample_gap)
    r.error("timeouts.heartbeat_interval_ms", "must be shorter than timeouts.sample_gap_ms");
  c.reconnect.attempts = r.integer_or("reconnect.attempts", 3, 0, 100);
  c.reconnect.delay = ms(r, "reconnect.delay_ms", 500, 0, 600000);
  c.max_speed_kmh = r.number("limits.max_speed_kmh", 20.0, 300.0, "km/h");
  c.max_force_n = r.number("limits.max_force_n", 100.0, 100000.0, "N");
  c.max_motoring_s = r.number("limits.max_motoring_s", 60.0, 86400.0, "s");
  c.roller_diameter_m = r.number("dyno.roller_diameter_m", 0.2, 3.0, "m");
  c.base_inertia_kg = r.number("dyno.base_inertia_kg", 50.0, 10000.0, "kg");
  c.roller_diameter_tolerance_m = r.number_or("dyno.roller_diameter_tolerance_m", 0.002, 0.0, 0.1, "m");
  c.base_inertia_tolerance_kg = r.number_or("dyno.base_inertia_tolerance_kg", 5.0, 0.0, 500.0, "kg");
  core::parse(r.choice("dyno.axles", {"single-axle", "two-axle"}), c.axles);
  c.sample_rate_hz = r.number_or("controller.sample_rate_hz", 100.0, 10.0, 1000.0, "Hz");
  return c;
}

}  // namespace

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
