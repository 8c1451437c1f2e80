// A test cell: which adapter reaches its controller, the timeouts, the cell's limits and the dyno facts the
// controller must confirm. Loaded from config/cells/*.toml and validated in full before anything connects
// (config::load_cell). How the adapter reaches the controller (address, serial line, register map, ...) is
// the adapter's own business: its registry row reads those keys into adapter_settings, which this layer never
// looks inside, so the controller interface depends on no adapter.
#pragma once

#include <any>
#include <string>
#include <vector>

#include "controller/controller.hpp"
#include "core/mode.hpp"
#include "core/problem.hpp"
#include "core/profile.hpp"

namespace loadtrim::controller {

struct ReconnectPolicy {
  int attempts = 3;                      // after a lost link; 0 = never reconnect
  std::chrono::milliseconds delay{500};  // between attempts
};

struct CellConfig {
  std::string name;
  std::string adapter;  // controller.adapter: a row of the adapter registry (dyno-adapters/registry.hpp)
  // What that row read from the cell file for its adapter (e.g. a TCP address, a serial line and a Modbus
  // register map), only ever read back by the same row. std::any keeps the settings' type with them while
  // CellConfig stays a plain copyable value that names no adapter type.
  std::any adapter_settings;
  Timeouts timeouts;
  ReconnectPolicy reconnect;
  double max_speed_kmh = 0.0;
  double max_force_n = 0.0;
  double max_motoring_s = 0.0;  // one continuous motoring period (warm-up included)
  // The speed signal's noise at rest (one standard deviation, km/h), as the dyno's documentation states it
  // (dyno.speed_noise_kmh); the standstill threshold's default is 5 × this.
  double speed_noise_kmh = 0.1;
  double standstill_kmh =
      0.5;  // at or below this speed the rollers count as stopped (every stop and start check)
  double max_time_scale = 1.0;  // the fastest controller clock accepted (controller seconds per wall second);
                                // > 1 for simulators only
  double roller_diameter_m = 0.0;
  double base_inertia_kg = 0.0;
  double roller_diameter_tolerance_m = 0.002;
  double base_inertia_tolerance_kg = 5.0;
  core::AxleLayout axles = core::AxleLayout::single_axle;
  core::RunUp run_up = core::RunUp::dyno;  // dyno.run_up (required): who accelerates the vehicle
  double sample_rate_hz = 100.0;
  double min_inertia_kg = 0.0;  // the dyno's simulated inertia range; 0 = not given
  double max_inertia_kg = 0.0;
  bool enforce_checks =
      true;  // sessions refuse to start while a required dyno check is due (override: logged)
  // [records] (docs/records.md): the cell's signing key for seals: public_key a "sha256:" fingerprint or a
  // .pub.pem path; private_key "" = <data root>/keys/cell-<name>.key.pem. Both empty: folders are sealed
  // unsigned.
  std::string records_public_key, records_private_key;
  std::string operator_name;  // records.operator: who runs this cell when the command does not say
  // [notify] (docs/notify.md): told when a session or dyno check ends or faults. command: a program (absolute
  // path) and its arguments, never through a shell, the end's summary on its standard input; mail_to: an
  // address the system's mailer (mailer, default /usr/sbin/sendmail) gets the same summary for. Each waits at
  // most timeout_s; a notifier that fails is logged and never changes the session.
  std::vector<std::string> notify_command;
  std::string notify_mail_to, notify_mailer = "/usr/sbin/sendmail";
  double notify_timeout_s = 10.0;
};

// What the controller reports against what the cell file says: problems with key "dyno.*" when they differ.
core::Problems check_identity(const CellConfig& cell, const ControllerInfo& info);

}  // namespace loadtrim::controller
