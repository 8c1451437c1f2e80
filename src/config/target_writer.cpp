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
  if (s.find_first_of(".eE") == std::string::npos && s.find("inf") == std::string::npos && s.find("nan") == std::string::npos) s += ".0";
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
  if (v.mass_in_running_order_kg) o += "mass_in_running_order_kg = " + num(*v.mass_in_running_order_kg) + "\n";
  o += std::string("drive = \"") + core::to_string(v.drive) + "\"\n";
  o += "max_speed_kmh = " + num(v.max_speed_kmh) + "\n\n[target]\n";
  o += "f0_n = " + num(v.target.f0_n) + "\nf1_n_per_kmh = " + num(v.target.f1_n_per_kmh) + "\nf2_n_per_kmh2 = " + num(v.target.f2_n_per_kmh2) + "\n";
  if (v.initial_set)
    o += "\n[initial_set]\nf0_n = " + num(v.initial_set->f0_n) + "\nf1_n_per_kmh = " + num(v.initial_set->f1_n_per_kmh) +
         "\nf2_n_per_kmh2 = " + num(v.initial_set->f2_n_per_kmh2) + "\n";
  return o;
}

}  // namespace loadtrim::config
