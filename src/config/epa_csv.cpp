#include "config/epa_csv.hpp"

#include <charconv>
#include <cmath>
#include <fstream>
#include <map>

#include "config/input_error.hpp"

namespace loadtrim::config {

namespace {
std::vector<std::string> split_csv(const std::string& line) {
  std::vector<std::string> out;
  std::string cur;
  bool quoted = false;
  for (char c : line) {
    if (c == '"')
      quoted = !quoted;
    else if (c == ',' && !quoted) {
      out.push_back(cur);
      cur.clear();
    } else if (c != '\r')
      cur += c;
  }
  out.push_back(cur);
  return out;
}

// The value without the spaces around it.
std::string trimmed(const std::string& s) {
  const auto b = s.find_first_not_of(' ');
  if (b == std::string::npos) return "";
  return s.substr(b, s.find_last_not_of(' ') - b + 1);
}

bool to_double(const std::string& s, double& out) {
  const std::string t = trimmed(s);
  const char* b = t.data();
  const char* e = t.data() + t.size();
  auto r = std::from_chars(b, e, out);
  return !t.empty() && r.ec == std::errc() && r.ptr == e && std::isfinite(out);
}
}  // namespace

EpaFile read_epa_csv(const std::string& path) {
  std::ifstream in(path);
  if (!in) throw InputError(path, {{core::Problem::Severity::error, "", "cannot open the file"}});
  std::string line;
  if (!std::getline(in, line))
    throw InputError(path, {{core::Problem::Severity::error, "", "the file is empty"}});
  const auto header = split_csv(line);
  std::map<std::string, std::size_t> col;
  for (std::size_t i = 0; i < header.size(); ++i) col[header[i]] = i;
  const std::vector<std::string> required = {
      "model_year", "test_vehicle_id",  "test_veh_config_num", "drive_system_code",
      "etw_kg",     "target_f0_N",      "target_f1_N_per_kmh", "target_f2_N_per_kmh2",
      "set_f0_N",   "set_f1_N_per_kmh", "set_f2_N_per_kmh2"};
  core::Problems missing;
  for (const auto& r : required)
    if (!col.count(r))
      missing.push_back({core::Problem::Severity::error, "header", "missing column \"" + r + "\""});
  if (!missing.empty()) throw InputError(path, missing);

  EpaFile f;
  int lineno = 1;
  while (std::getline(in, line)) {
    ++lineno;
    if (line.empty() || line == "\r") continue;
    const auto cells = split_csv(line);
    if (cells.size() < header.size()) {
      const auto c1 = col["model_year"], c2 = col["test_vehicle_id"], c3 = col["test_veh_config_num"];
      const std::string id = std::max({c1, c2, c3}) < cells.size()
                                 ? cells[c1] + "/" + cells[c2] + "/" + cells[c3]
                                 : std::string();
      f.skipped.push_back({lineno, header[cells.size()], id,
                           "is missing: the row has " + std::to_string(cells.size()) + " cells, the header " +
                               std::to_string(header.size())});
      continue;
    }
    EpaRow row;
    row.line = lineno;
    row.id = cells[col["model_year"]] + "/" + cells[col["test_vehicle_id"]] + "/" +
             cells[col["test_veh_config_num"]];
    // The drive decides single- or two-axle: a code not in the list is not taken for any of them.
    row.drive_code = trimmed(cells[col["drive_system_code"]]);
    if (row.drive_code != "F" && row.drive_code != "R" && row.drive_code != "A" && row.drive_code != "4" &&
        row.drive_code != "P") {
      f.skipped.push_back(
          {lineno, "drive_system_code", row.id,
           (row.drive_code.empty() ? std::string("is empty") : "is \"" + row.drive_code + "\"") +
               ", allowed " + kEpaDriveCodes});
      continue;
    }
    double v[7];
    const char* names[7] = {"etw_kg",   "target_f0_N",      "target_f1_N_per_kmh", "target_f2_N_per_kmh2",
                            "set_f0_N", "set_f1_N_per_kmh", "set_f2_N_per_kmh2"};
    const char* units[7] = {"kg", "N", "N/(km/h)", "N/(km/h)²", "N", "N/(km/h)", "N/(km/h)²"};
    bool ok = true;
    for (int k = 0; k < 7 && ok; ++k)
      if (!to_double(cells[col[names[k]]], v[k])) {
        f.skipped.push_back(
            {lineno, names[k], row.id,
             "is \"" + cells[col[names[k]]] + "\", not a number: allowed a finite number in " + units[k]});
        ok = false;
      }
    if (!ok) continue;
    // The weight is the test mass, and less the load allowance the mass in running order: a row too light for
    // either (or too heavy) is not used.
    if (!(v[0] >= kEpaMinEtw_kg && v[0] <= core::kMaxTestMass_kg)) {
      f.skipped.push_back(
          {lineno, "etw_kg", row.id,
           "is " + core::num(v[0]) + ", allowed " + core::num(kEpaMinEtw_kg) + " to " +
               core::num(core::kMaxTestMass_kg) +
               " kg (the test mass; the mass in running order is estimated as the weight less " +
               core::num(kEpaLoadAllowance_kg) + " kg and must be at least " +
               core::num(kEpaMinEtw_kg - kEpaLoadAllowance_kg) + " kg)"});
      continue;
    }
    row.etw_kg = v[0];
    row.target = {v[1], v[2], v[3]};
    row.set = {v[4], v[5], v[6]};
    f.rows.push_back(row);
  }
  f.last_line = lineno;
  return f;
}

std::string skipped_rows_note(const std::string& path, const EpaFile& f, std::size_t most) {
  std::string out;
  for (std::size_t i = 0; i < f.skipped.size() && i < most; ++i)
    out += path + ": line " + std::to_string(f.skipped[i].line) + ", column " + f.skipped[i].column + ": " +
           f.skipped[i].message + "; the row is not used\n";
  if (f.skipped.size() > most)
    out += path + ": and " + std::to_string(f.skipped.size() - most) + " more row(s) not used\n";
  return out;
}

core::Problems row_errors(const EpaRow& row, const core::Problems& target_problems) {
  // The target's keys that come from the row, and the columns they come from.
  static const std::map<std::string, std::string> column = {
      {"vehicle.test_mass_kg", "etw_kg (the equivalent test weight is the test mass)"},
      {"target.f0_n", "target_f0_N"},
      {"target.f1_n_per_kmh", "target_f1_N_per_kmh"},
      {"target.f2_n_per_kmh2", "target_f2_N_per_kmh2"},
      {"target", "target_f0_N, target_f1_N_per_kmh, target_f2_N_per_kmh2"}};
  core::Problems out;
  for (const auto& p : target_problems) {
    if (p.severity != core::Problem::Severity::error) continue;
    const auto c = column.find(p.key);
    out.push_back({p.severity,
                   "line " + std::to_string(row.line) +
                       (c != column.end() ? ", column " + c->second : " (the target's " + p.key + ")"),
                   p.message});
  }
  return out;
}

core::Drive drive_of(const EpaRow& row) {
  return row.drive_code == "F"   ? core::Drive::front
         : row.drive_code == "R" ? core::Drive::rear
                                 : core::Drive::all;
}

std::vector<core::FleetRow> fleet_rows(const EpaFile& f) {
  std::vector<core::FleetRow> rows;
  rows.reserve(f.rows.size());
  for (const auto& r : f.rows)
    rows.push_back({r.etw_kg, core::axle_layout_for(drive_of(r)), r.target, r.set});
  return rows;
}

core::VehicleTarget target_from_epa(const EpaRow& row, const std::string& profile, double max_speed_kmh) {
  core::VehicleTarget t;
  t.id = row.id;
  t.description = "US EPA Test Car List row at line " + std::to_string(row.line);
  t.test_mass_kg = row.etw_kg;
  // The list gives the equivalent test weight only: its mass in running order is an estimate (the weight
  // less kEpaLoadAllowance_kg, 100 kg; common practice, no source) and says so wherever the target goes
  // (target file, record).
  t.mass_in_running_order_kg = row.etw_kg - kEpaLoadAllowance_kg;
  t.mass_in_running_order_estimated = true;
  t.drive = drive_of(row);
  t.max_speed_kmh = max_speed_kmh;
  t.target = row.target;
  t.profile = profile;
  return t;
}

}  // namespace loadtrim::config
