// loadtrim-sim: a simulated roller-dyno controller speaking the loadtrim line protocol, for tests, demos and
// training. It runs the same physics as loadtrim's predictions with a hidden truth file. It is not a dyno.
#include <CLI/CLI.hpp>
#include <iostream>
#include <utility>

#include "config/cli_number.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "framed/framed_dialect.hpp"
#include "line/line_protocol.hpp"
#include "modbus/map_file.hpp"
#include "sim/framed_front_end.hpp"
#include "sim/modbus_server.hpp"
#include "sim/sim_server.hpp"

int main(int argc, char** argv) {
  using namespace loadtrim;
  CLI::App app{
      "loadtrim-sim: simulated roller-dyno controller (line protocol or framed ASCII over TCP or a "
      "pseudo-terminal, or Modbus)"};
  std::string truth_file;
  sim::SimSettings s;
  sim::ServerSettings srv;
  double watchdog_ms = 1000.0, warmth = -1.0;
  std::string drop_in_mode;
  double drop_at = -1, stall_at = -1, estop_at = -1, report_dia = -1, report_inertia = -1;
  long long corrupt_line = -1;
  app.add_option("--truth", truth_file, "the simulated vehicle and dyno (TOML); the tool never sees it")
      ->required();
  app.add_option("--bind", srv.bind, "address to listen on")->capture_default_str();
  app.add_option("--port", srv.port, "TCP port, 0 = pick a free one and print it")->capture_default_str();
  bool empty = false;
  app.add_flag("--empty-rollers", empty,
               "no vehicle on the rollers (the dyno's own checks): only the truth's [dyno] part acts");
  app.add_flag("--pty", srv.pty, "serve on a new pseudo-terminal instead of TCP and print its path");
  app.add_option("--time-scale", srv.time_scale, "simulated seconds per wall second")
      ->check(config::number_in(0.01, 10000.0))
      ->capture_default_str();
  app.add_option("--watchdog-ms", watchdog_ms, "no request for this long while motoring → controlled stop")
      ->check(config::number_in(50.0, 600000.0, "ms"))
      ->capture_default_str();
  app.add_option("--max-speed-kmh", s.max_speed_kmh, "the controller's speed limit")
      ->check(config::finite_number())
      ->capture_default_str();
  app.add_option("--name", s.name, "controller name reported by IDENT (no spaces)")->capture_default_str();
  app.add_option("--initial-warmth", warmth,
                 "override the truth's initial drivetrain warmth (0 cold .. 1 warm)")
      ->check(config::number_in(0.0, 1.0));
  std::string modbus_map, modbus_rtu;
  app.add_option("--modbus-map", modbus_map,
                 "serve Modbus instead of the line protocol, with the [modbus] map of this cell file");
  app.add_option("--modbus-rtu", modbus_rtu,
                 "with --modbus-map: serve Modbus RTU on this serial device (115200 8N1) instead of TCP");
  std::string framed_table;
  app.add_option(
      "--framed-table", framed_table,
      "serve the framed ASCII dialect instead of the line protocol (TCP, or --pty), with the [framed] "
      "command table of this cell file");
  app.add_option("--exit-after-s", srv.exit_after_s,
                 "exit after this many wall seconds (a safety net for tests)")
      ->check(config::finite_number());
  auto* f = app.add_option_group("faults", "fault injection");
  f->add_option("--drop-at-s", drop_at, "drop the connection once at this simulated time")
      ->check(config::finite_number());
  f->add_option(
      "--drop-in-mode", drop_in_mode,
      "drop the connection once this mode (IDLE, HOLD, ROADLOAD, STOP, FORCE) has lasted --drop-after-s");
  f->add_option("--drop-after-s", s.faults.drop_after_s, "see --drop-in-mode (simulated seconds)")
      ->check(config::finite_number());
  f->add_option("--corrupt-line", corrupt_line, "corrupt the Nth line sent (1-based), once");
  f->add_option("--corrupt-every", s.faults.corrupt_every, "corrupt every Nth line sent");
  f->add_option("--stall-at-s", stall_at, "stop the sample stream at this simulated time")
      ->check(config::finite_number());
  f->add_option("--delay-replies-ms", s.faults.delay_replies_ms, "hold every reply back this long (wall)")
      ->check(config::finite_number());
  f->add_option("--refuse", s.faults.refuse, "answer this verb with ERR 41 (repeatable)");
  f->add_option("--estop-at-s", estop_at, "raise an emergency stop at this simulated time")
      ->check(config::finite_number());
  f->add_option("--report-roller-diameter-m", report_dia,
                "IDENT reports this roller diameter instead of the truth")
      ->check(config::finite_number());
  f->add_option("--report-base-inertia-kg", report_inertia,
                "IDENT reports this base inertia instead of the truth")
      ->check(config::finite_number());
  sim::ModbusOptions mb_opt;
  app.add_option(
         "--modbus-clock-offset-s", mb_opt.clock_offset_s,
         "Modbus: the controller's uptime when the simulation starts (its time counter starts there and "
         "wraps at the register's width)")
      ->check(config::number_in(0.0, 1e15, "s"));
  f->add_flag("--modbus-coefficients-not-applied", mb_opt.coefficients_not_applied,
              "Modbus: acknowledge every coefficient setting after the first without applying it");
  f->add_flag(
      "--modbus-prompt-not-shown", mb_opt.prompt_not_shown,
      "Modbus: acknowledge every driver prompt without showing it (the prompt registers read back the "
      "prompt shown before)");
  f->add_option("--modbus-status-bits", mb_opt.extra_status_bits,
                "Modbus: the status register also sets these bits (e.g. 64: a bit the map does not define)")
      ->check(CLI::Range(0u, 65535u));
  // Faults of the dyno's own checks (docs/dyno-checks.md): each overrides the truth's [dyno] key of its name.
  double loop_gain = -1, loop_tau = -1, loop_damping = -1, friction_error = -2;
  f->add_option("--force-loop-gain", loop_gain,
                "the motor applies this × the force asked (dyno.force_loop_gain; fails 1066.265)")
      ->check(config::number_in(0.5, 1.5));
  f->add_option(
       "--force-loop-time-constant-s", loop_tau,
       "the constant force follows its demand with this second-order lag (dyno.force_loop_time_constant_s; "
       "fails 1066.245)")
      ->check(config::number_in(0.0, 2.0, "s"));
  f->add_option("--force-loop-damping", loop_damping,
                "the force loop's damping, below 1 it overshoots (dyno.force_loop_damping)")
      ->check(config::number_in(0.05, 5.0));
  f->add_option("--friction-compensation-error", friction_error,
                "the share of the parasitic loss the compensation misses (dyno.parasitic_compensation_error; "
                "fails 1066.260)")
      ->check(config::number_in(-1.0, 1.0));
  // The driver (the truth's [driver] keys; each option overrides its key).
  bool hide_neutral = false;
  double driver_power_w = -1, driver_force_n = -1, driver_early = -1, driver_late = -1;
  long long driver_seed = -1;
  f->add_flag(
      "--hide-neutral", hide_neutral,
      "leave out the vehicle-in-neutral signal (flag 0x20, capability \"neutral\"): the tool must find "
      "the driver's release in the speed trace");
  f->add_option("--driver-max-power-w", driver_power_w,
                "the driver's most tractive power (driver.max_power_w; low: a too slow run-up)")
      ->check(config::number_in(500.0, 2000000.0, "W"));
  f->add_option(
       "--driver-early-release", driver_early,
       "probability of a shift to neutral below the prompted speed (driver.early_release_probability)")
      ->check(config::number_in(0.0, 1.0));
  f->add_option("--driver-max-force-n", driver_force_n,
                "the driver's most tractive force (driver.max_tractive_force_n; low: a too slow run-up)")
      ->check(config::number_in(50.0, 50000.0, "N"));
  f->add_option("--driver-late-release", driver_late,
                "probability of a late shift to neutral (driver.late_release_probability)")
      ->check(config::number_in(0.0, 1.0));
  f->add_option("--driver-seed", driver_seed, "the driver model's seed (driver.seed)")
      ->check(CLI::Range(0LL, 2147483647LL));
  // A refused option exits 2, as a refused truth file does (README, "Exit codes"); --help exits 0.
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    return app.exit(e) == 0 ? 0 : 2;
  }
  physics::Truth truth;
  try {
    core::Problems w;
    truth = config::load_truth(truth_file, &w);
    if (!w.empty()) std::cerr << config::format_problems(truth_file, w);
  } catch (const config::InputError& e) {
    std::cerr << e.what();
    return 2;
  }
  if (warmth >= 0.0) truth.vehicle.initial_warmth = warmth;
  if (loop_gain > 0.0) truth.dyno.force_loop_gain = loop_gain;
  if (loop_tau >= 0.0) truth.dyno.force_loop_time_constant_s = loop_tau;
  if (loop_damping > 0.0) truth.dyno.force_loop_damping = loop_damping;
  if (friction_error >= -1.0) truth.dyno.parasitic_compensation_error = friction_error;
  if (empty) truth.vehicle_on_rollers = false;
  if (driver_power_w > 0) truth.driver.max_power_w = driver_power_w;
  if (driver_force_n > 0) truth.driver.max_tractive_force_n = driver_force_n;
  if (driver_early >= 0) truth.driver.early_release_probability = driver_early;
  if (driver_late >= 0) truth.driver.late_release_probability = driver_late;
  if (driver_seed >= 0) truth.driver.seed = static_cast<std::uint64_t>(driver_seed);
  s.hide_neutral = hide_neutral;
  s.watchdog_s = watchdog_ms / 1000.0;
  s.time_scale = srv.time_scale;
  if (drop_at >= 0) s.faults.drop_at_s = drop_at;
  if (!drop_in_mode.empty()) {
    // In the line protocol's words for the modes a controller reports (docs/protocol.md section 5).
    const std::pair<const char*, controller::Mode> words[] = {
        {line::kModeIdle, controller::Mode::idle},
        {line::kModeHold, controller::Mode::speed_hold},
        {line::kModeRoadLoad, controller::Mode::road_load},
        {line::kModeStop, controller::Mode::controlled_stop},
        {line::kModeForce, controller::Mode::constant_force}};
    for (const auto& [word, mode] : words)
      if (drop_in_mode == word) s.faults.drop_in_mode = mode;
    if (!s.faults.drop_in_mode) {
      std::cerr << "loadtrim-sim: --drop-in-mode " << drop_in_mode
                << ": allowed IDLE, HOLD, ROADLOAD, STOP or FORCE\n";
      return 2;
    }
  }
  if (corrupt_line > 0) s.faults.corrupt_line = static_cast<std::uint64_t>(corrupt_line);
  if (stall_at >= 0) s.faults.stall_at_s = stall_at;
  if (estop_at >= 0) s.faults.estop_at_s = estop_at;
  if (report_dia > 0) s.faults.report_roller_diameter_m = report_dia;
  if (report_inertia > 0) s.faults.report_base_inertia_kg = report_inertia;
  if (!modbus_map.empty()) {
    modbus::RegisterMap map;
    try {
      core::Problems w;
      map = modbus::load_register_map(modbus_map, &w);
      if (!w.empty()) std::cerr << config::format_problems(modbus_map, w);
    } catch (const config::InputError& e) {
      std::cerr << e.what();
      return 2;
    }
    mb_opt.rtu_device = modbus_rtu;
    return sim::run_modbus_server(truth, s, srv, map, mb_opt,
                                  [](const std::string& line) { std::cout << line << std::endl; });
  }
  if (!framed_table.empty()) {
    framed::Table table;
    try {
      core::Problems w;
      table = framed::load_table(framed_table, &w);
      if (!w.empty()) std::cerr << config::format_problems(framed_table, w);
    } catch (const config::InputError& e) {
      std::cerr << e.what();
      return 2;
    }
    try {
      sim::FramedFrontEnd fe(truth, s, std::move(table));
      return sim::run_server(fe, srv, [](const std::string& line) { std::cout << line << std::endl; });
    } catch (const std::exception& e) {
      std::cerr << "loadtrim-sim: " << e.what() << "\n";
      return 1;
    }
  }
  try {
    return sim::run_server(truth, s, srv, [](const std::string& line) { std::cout << line << std::endl; });
  } catch (const std::exception& e) {
    std::cerr << "loadtrim-sim: " << e.what() << "\n";
    return 1;
  }
}
