// A test cell: which adapter reaches its controller and how, the timeouts, the cell's limits and the dyno
// facts the controller must confirm. Loaded from config/cells/*.toml and validated in full before anything
// connects (config::load_cell).
#pragma once

#include <string>

#include "controller/controller.hpp"
#include "core/problem.hpp"
#include "core/profile.hpp"
#include "modbus/register_map.hpp"

namespace loadtrim::controller {

struct ReconnectPolicy {
  int attempts = 3;                      // after a lost link; 0 = never reconnect
  std::chrono::milliseconds delay{500};  // between attempts
};

struct SerialConfig {
  std::string device;
  unsigned baud = 115200;
  std::string parity = "none";  // none, odd, even
  unsigned stop_bits = 1;       // 1 or 2
  unsigned data_bits = 8;       // 7 or 8
};

struct CellConfig {
  std::string name;
  std::string adapter;  // "line-tcp", "line-serial", "modbus-tcp", "modbus-rtu", "inprocess-sim"
                        // (dyno-adapters/registry.hpp)
  std::string host = "127.0.0.1";
  unsigned port = 0;
  SerialConfig serial;
  std::string inprocess_truth;  // inprocess-sim only: the truth file of the simulated vehicle and dyno
  Timeouts timeouts;
  ReconnectPolicy reconnect;
  double max_speed_kmh = 0.0;
  double max_force_n = 0.0;
  double max_motoring_s = 0.0;  // one continuous motoring period (warm-up included)
  double standstill_kmh =
      0.5;  // at or below this speed the rollers count as stopped (every stop and start check)
  double max_time_scale = 1.0;  // the fastest controller clock accepted (controller seconds per wall second);
                                // > 1 for simulators only
  double roller_diameter_m = 0.0;
  double base_inertia_kg = 0.0;
  double roller_diameter_tolerance_m = 0.002;
  double base_inertia_tolerance_kg = 5.0;
  core::AxleLayout axles = core::AxleLayout::single_axle;
  double sample_rate_hz = 100.0;
  double min_inertia_kg = 0.0;  // the dyno's simulated inertia range; 0 = not given
  double max_inertia_kg = 0.0;
  bool enforce_checks =
      true;  // sessions refuse to start while a required dyno check is due (override: logged)
  // [records] (docs/records.md): the cell's signing key for seals: public_key a "sha256:" fingerprint or a
  // .pub.pem path; private_key "" = <data root>/keys/cell-<name>.key.pem. Both empty: folders are sealed
  // unsigned.
  std::string records_public_key, records_private_key;
  std::string operator_name;         // records.operator: who runs this cell when the command does not say
  modbus::RegisterMap register_map;  // modbus-* adapters
};

// What the controller reports against what the cell file says: problems with key "dyno.*" when they differ.
core::Problems check_identity(const CellConfig& cell, const ControllerInfo& info);

}  // namespace loadtrim::controller
