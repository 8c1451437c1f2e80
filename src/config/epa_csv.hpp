// Reader for road-load CSV files with the columns of the public US EPA Test Car List extract
// (samples/data/README.md). Uses the SI columns; rows that do not parse are reported, not dropped silently.
#pragma once

#include <string>
#include <vector>

#include "core/problem.hpp"
#include "core/road_load.hpp"
#include "core/strategy.hpp"
#include "core/vehicle.hpp"

namespace loadtrim::config {

struct EpaRow {
  int line = 0;    // line in the file
  std::string id;  // model year / test vehicle id / configuration
  std::string drive_code;
  double etw_kg = 0.0;
  core::RoadLoad target;
  core::RoadLoad set;  // what the lab used
};

// A row that cannot be used: its line, the column at fault and what is wrong with what is allowed.
struct EpaSkipped {
  int line = 0;
  std::string column;
  std::string id;       // as EpaRow::id, when the row has its id cells ("" otherwise)
  std::string message;  // e.g. "is \"f\", allowed \"F\" (2WD front), ..."
};

struct EpaFile {
  std::vector<EpaRow> rows;
  std::vector<EpaSkipped> skipped;  // every row not used, with why
  int last_line = 1;                // the file's last line (the header is line 1)
};

// The drive_system_code values a row may give (samples/data/README.md), as a message lists them.
inline constexpr const char* kEpaDriveCodes =
    "\"F\" (2WD front), \"R\" (2WD rear), \"A\" (AWD), \"4\" (4WD), \"P\" (part-time 4WD)";

// A row's mass in running order is estimated as its equivalent test weight less this (common practice, no
// source: US test weight adds a nominal load to the curb mass; target_from_epa).
inline constexpr double kEpaLoadAllowance_kg = 100.0;
// The equivalent test weights a row may give: its estimated mass in running order at least the lowest a
// target file takes (vehicle.mass_in_running_order_kg, half of core::kMinTestMass_kg: 25 kg), so at least
// 125 kg; at most core::kMaxTestMass_kg. A lighter row would give a mass in running order of zero or below.
inline constexpr double kEpaMinEtw_kg = kEpaLoadAllowance_kg + 0.5 * core::kMinTestMass_kg;

// Throws InputError when the file cannot be read or lacks a required column. A row that cannot be used (too
// few cells, a number column that is not a finite number, a drive_system_code not one of kEpaDriveCodes, an
// etw_kg outside kEpaMinEtw_kg to core::kMaxTestMass_kg) is not guessed at: it is listed in `skipped` with
// its line and column. Spaces around a value are not part of it.
EpaFile read_epa_csv(const std::string& path);

// "PATH: line N, column C: MESSAGE; the row is not used" for the first `most` skipped rows, one a line, and
// how many more; "" when every row was read.
std::string skipped_rows_note(const std::string& path, const EpaFile& f, std::size_t most = 5);

// The errors of a target made from a row (core::plausibility's), each named by the row's line and the CSV
// column it came from (etw_kg for the test mass, target_f0_N ... for the coefficients): a row that cannot
// give a target.
core::Problems row_errors(const EpaRow& row, const core::Problems& target_problems);

// The row's driven wheels from its drive_system_code (one read_epa_csv accepted): F front, R rear, A, 4 and
// P all wheels.
core::Drive drive_of(const EpaRow& row);

// The rows as the fleet loss model takes them (core::fit_fleet_loss): ETW as test mass, the layout of the
// row's drive (core::axle_layout_for(drive_of(row))), the target and the lab's set curve.
std::vector<core::FleetRow> fleet_rows(const EpaFile& f);

// A vehicle target from a row: test mass = ETW; mass in running order taken as ETW − kEpaLoadAllowance_kg
// (100 kg); drive code F/R single axle, A/4/P all wheels.
core::VehicleTarget target_from_epa(const EpaRow& row, const std::string& profile,
                                    double max_speed_kmh = 180.0);

}  // namespace loadtrim::config
