#include "config/target_writer.hpp"

#include <cstdio>

namespace loadtrim::config {

namespace {
std::string quoted(const std::string& s) {
  std::string o = "\"";
  for (char c : s) {
    if (c == '"' || c == '\\') o += '\\';
    o += c;
  }
  return o + "\"";
}
std::string num(double v) {
  char b[40];
  std::snprintf(b, sizeof b, "%.17g", v);
  std::string s = b;
  if (s.find_first_of(".eE") == std::string::npos && s.find("inf") == std::string::npos &&
      s.find("nan") == std::string::npos)
    s += ".0";
  return s;
}
}  // namespace

std::string target_toml(const core::VehicleTarget& v, const std::string& header) {
  std::string o;
  std::size_t pos = 0;
  while (pos < header.size()) {
    const auto e = header.find('\n', pos);
    o += "# " + header.substr(pos, e == std::string::npos ? std::string::npos : e - pos) + "\n";
    if (e == std::string::npos) break;
    pos = e + 1;
  }
  o += "profile = " + quoted(v.profile) + "\n\n[vehicle]\n";
  o += "id = " + quoted(v.id) + "\n";
  if (!v.description.empty()) o += "description = " + quoted(v.description) + "\n";
  o += "test_mass_kg = " + num(v.test_mass_kg) + "\n";
  if (v.rotating_mass_kg) o += "rotating_mass_kg = " + num(*v.rotating_mass_kg) + "\n";
  if (v.mass_in_running_order_kg)
    o += "mass_in_running_order_kg = " + num(*v.mass_in_running_order_kg) + "\n";
  if (v.mass_in_running_order_estimated)
    o += "mass_in_running_order_estimated = true   # an estimate accepted explicitly, not a measurement\n";
  o += std::string("drive = \"") + core::to_string(v.drive) + "\"\n";
  if (v.two_wheel_drive_mode) o += "two_wheel_drive_mode = true\n";
  o += "max_speed_kmh = " + num(v.max_speed_kmh) + "\n";
  if (v.cycle_max_speed_kmh) o += "cycle_max_speed_kmh = " + num(*v.cycle_max_speed_kmh) + "\n";
  o += "\n[target]\n";
  o += "f0_n = " + num(v.target.f0_n) + "\nf1_n_per_kmh = " + num(v.target.f1_n_per_kmh) +
       "\nf2_n_per_kmh2 = " + num(v.target.f2_n_per_kmh2) + "\n";
  if (v.initial_set)
    o += "\n[initial_set]\nf0_n = " + num(v.initial_set->f0_n) +
         "\nf1_n_per_kmh = " + num(v.initial_set->f1_n_per_kmh) +
         "\nf2_n_per_kmh2 = " + num(v.initial_set->f2_n_per_kmh2) + "\n";
  return o;
}

std::string truth_toml(const physics::Truth& t, const std::string& header) {
  std::string o = "# " + header + "\n";
  o += "noise_seed = " + std::to_string(t.noise_seed % 2147483647ULL) + "\n";
  if (!t.vehicle_on_rollers) o += "vehicle_on_rollers = false\n";
  o += "\n[vehicle]\n";
  const auto& v = t.vehicle;
  o += "name = " + quoted(v.name) + "\n";
  auto kv = [&](const char* k, double x) { o += std::string(k) + " = " + num(x) + "\n"; };
  kv("test_mass_kg", v.test_mass_kg);
  kv("rotating_mass_on_rollers_kg", v.rotating_mass_on_rollers_kg);
  kv("tyre_radius_m", v.tyre_radius_m);
  kv("tyre_loss_flat_n", v.tyre_loss_flat_n);
  kv("tyre_loss_flat_n_per_kmh", v.tyre_loss_flat_n_per_kmh);
  kv("drivetrain_loss_n", v.drivetrain_loss_n);
  kv("drivetrain_loss_n_per_kmh2", v.drivetrain_loss_n_per_kmh2);
  kv("drivetrain_cold_excess", v.drivetrain_cold_excess);
  kv("warm_up_time_constant_s", v.warm_up_time_constant_s);
  kv("cool_down_time_constant_s", v.cool_down_time_constant_s);
  kv("initial_warmth", v.initial_warmth);
  kv("brake_drag_n", v.brake_drag_n);
  kv("hold_bias_n", v.hold_bias_n);
  if (v.hold_bias_n_per_kmh2 != 0.0) kv("hold_bias_n_per_kmh2", v.hold_bias_n_per_kmh2);
  o += "\n[dyno]\n";
  const auto& d = t.dyno;
  kv("roller_diameter_m", d.roller_diameter_m);
  kv("base_inertia_kg", d.base_inertia_kg);
  if (d.stated_base_inertia_kg > 0.0) kv("stated_base_inertia_kg", d.stated_base_inertia_kg);
  kv("inertia_simulation_error", d.inertia_simulation_error);
  kv("parasitic_f0_n", d.parasitic_f0_n);
  kv("parasitic_f1_n_per_kmh", d.parasitic_f1_n_per_kmh);
  kv("parasitic_f2_n_per_kmh2", d.parasitic_f2_n_per_kmh2);
  kv("parasitic_compensation_error", d.parasitic_compensation_error);
  if (d.parasitic_excess != 0.0) kv("parasitic_excess", d.parasitic_excess);
  kv("speed_noise_kmh", d.speed_noise_kmh);
  kv("force_noise_n", d.force_noise_n);
  if (d.load_cell_gain != 1.0) kv("load_cell_gain", d.load_cell_gain);
  if (d.load_cell_offset_n != 0.0) kv("load_cell_offset_n", d.load_cell_offset_n);
  kv("motoring_accel_mps2", d.motoring_accel_mps2);
  kv("stop_decel_mps2", d.stop_decel_mps2);
  if (d.force_loop_gain != 1.0) kv("force_loop_gain", d.force_loop_gain);
  if (d.force_loop_time_constant_s != 0.0) kv("force_loop_time_constant_s", d.force_loop_time_constant_s);
  if (d.force_loop_damping != 1.0) kv("force_loop_damping", d.force_loop_damping);
  const auto& dr = t.driver;
  o += "\n[driver]\n";
  kv("reaction_time_s", dr.reaction_time_s);
  kv("throttle_ramp_s", dr.throttle_ramp_s);
  kv("max_tractive_force_n", dr.max_tractive_force_n);
  kv("max_power_w", dr.max_power_w);
  kv("overshoot_kmh", dr.overshoot_kmh);
  kv("hold_gain_per_s", dr.hold_gain_per_s);
  kv("neutral_jitter_s", dr.neutral_jitter_s);
  kv("late_release_probability", dr.late_release_probability);
  kv("late_release_extra_s", dr.late_release_extra_s);
  kv("early_release_probability", dr.early_release_probability);
  kv("early_release_below_kmh", dr.early_release_below_kmh);
  o += "seed = " + std::to_string(dr.seed % 2147483647ULL) + "\n";
  return o;
}

}  // namespace loadtrim::config
