// Reader for road-load CSV files with the columns of the public US EPA Test Car List extract
// (samples/data/README.md). Uses the SI columns; rows that do not parse are reported, not dropped silently.
#pragma once

#include <string>
#include <vector>

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

struct EpaFile {
  std::vector<EpaRow> rows;
  std::vector<std::string> skipped;  // "line N: reason"
};

// Throws InputError when the file cannot be read or lacks a required column.
EpaFile read_epa_csv(const std::string& path);

// The row's driven wheels from its drive_system_code: F front, R rear, anything else (A, 4, P) all wheels.
core::Drive drive_of(const EpaRow& row);

// The rows as the fleet loss model takes them (core::fit_fleet_loss): ETW as test mass, the layout of the
// row's drive (core::axle_layout_for(drive_of(row))), the target and the lab's set curve.
std::vector<core::FleetRow> fleet_rows(const EpaFile& f);

// A vehicle target from a row: test mass = ETW; mass in running order taken as ETW − 100 kg (common practice,
// no source: US test weight adds a nominal load to the curb mass); drive code F/R single axle, A/4/P all
// wheels.
core::VehicleTarget target_from_epa(const EpaRow& row, const std::string& profile,
                                    double max_speed_kmh = 180.0);

}  // namespace loadtrim::config
