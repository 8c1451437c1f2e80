#include "config/cell_loader.hpp"

#include <algorithm>

#include "config/toml_reader.hpp"

namespace loadtrim::config {

namespace {

std::chrono::milliseconds ms(TomlReader& r, const char* key, double fallback, double lo, double hi) {
  return std::chrono::milliseconds(static_cast<long long>(r.number_or(key, fallback, lo, hi, "ms")));
}

controller::CellConfig read_cell(TomlReader& r, const AdapterSections& adapters) {
  controller::CellConfig c;
  c.name = r.string("name");
  // The cell's name keys its folders, locks and records: an empty one is refused, as a profile's is.
  if (r.has("name") && c.name.empty()) r.error("name", "is empty: the cell's name, a non-empty text");
  if (adapters.names.empty() || !adapters.read) {
    // A caller that passes no registry cannot have a cell file read: say so as a problem of the file rather
    // than guess.
    r.error("controller.adapter", "cannot be checked: no adapters are known to this program");
  } else {
    c.adapter = r.choice("controller.adapter", adapters.names);
    // An unknown name comes back as the first choice (the error is recorded): its keys are read as before,
    // so the messages match whichever adapter the file named.
    c.adapter_settings = adapters.read(c.adapter, r);
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
  // Standstill (docs/safety.md §3): a speed at or below limits.standstill_kmh. Its default is 5 × the speed
  // signal's stated noise (dyno.speed_noise_kmh, one standard deviation at rest; 0.1 km/h when not stated),
  // so that noise at rest is never taken for motion (a reading 5 σ out is about 1 in 3.5 million for Gaussian
  // noise: textbook normal tail). Never exactly zero. Lab policy, common practice, no source.
  c.speed_noise_kmh = r.number_or("dyno.speed_noise_kmh", 0.1, 0.0, 1.0, "km/h");
  c.standstill_kmh =
      r.number_or("limits.standstill_kmh", std::max(0.05, 5.0 * c.speed_noise_kmh), 0.05, 5.0, "km/h");
  if (r.has("limits.standstill_kmh") && c.standstill_kmh < 3.0 * c.speed_noise_kmh)
    r.error("limits.standstill_kmh", "is " + core::num(c.standstill_kmh) +
                                         " km/h, below 3 × dyno.speed_noise_kmh (" +
                                         core::num(3.0 * c.speed_noise_kmh) +
                                         " km/h): the speed signal's noise at rest would read as motion");
  c.max_time_scale = r.number_or("controller.max_time_scale", 1.0, 1.0, 10000.0, "");
  c.roller_diameter_m = r.number("dyno.roller_diameter_m", 0.2, 3.0, "m");
  c.base_inertia_kg = r.number("dyno.base_inertia_kg", 50.0, 10000.0, "kg");
  c.roller_diameter_tolerance_m = r.number_or("dyno.roller_diameter_tolerance_m", 0.002, 0.0, 0.1, "m");
  c.base_inertia_tolerance_kg = r.number_or("dyno.base_inertia_tolerance_kg", 5.0, 0.0, 500.0, "kg");
  core::parse(r.choice("dyno.axles", {"single-axle", "two-axle"}), c.axles);
  // Who accelerates the vehicle (GTR 15 Annex 4 §8.1.3.4): required, never defaulted.
  c.run_up =
      r.choice("dyno.run_up", {"dyno", "vehicle"}) == "vehicle" ? core::RunUp::vehicle : core::RunUp::dyno;
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
  c.notify_command = r.strings_or_none("notify.command");
  if (!c.notify_command.empty() && c.notify_command[0][0] != '/')
    r.error("notify.command", "[0] must be the program's absolute path (it is run without a shell), not \"" +
                                  c.notify_command[0] + "\"");
  c.notify_mail_to = r.string_or("notify.mail_to", "");
  if (!c.notify_mail_to.empty() &&
      (c.notify_mail_to.find('@') == std::string::npos || c.notify_mail_to[0] == '-' ||
       c.notify_mail_to.find_first_of(" \t\r\n,;<>") != std::string::npos))
    r.error("notify.mail_to",
            "must be one e-mail address like name@example.org, not \"" + c.notify_mail_to + "\"");
  c.notify_mailer = r.string_or("notify.mailer", "/usr/sbin/sendmail");
  if (c.notify_mailer.empty() || c.notify_mailer[0] != '/')
    r.error("notify.mailer", "must be the mailer's absolute path, not \"" + c.notify_mailer + "\"");
  c.notify_timeout_s = r.number_or("notify.timeout_s", 10.0, 1.0, 120.0, "s");
  return c;
}

}  // namespace

controller::CellConfig load_cell(const std::string& path, const AdapterSections& adapters,
                                 core::Problems* w) {
  TomlReader r = TomlReader::from_file(path);
  auto c = read_cell(r, adapters);
  auto ws = r.finish();
  if (w) w->insert(w->end(), ws.begin(), ws.end());
  return c;
}

controller::CellConfig parse_cell(const std::string& text, const std::string& name,
                                  const AdapterSections& adapters, core::Problems* w) {
  TomlReader r = TomlReader::from_text(text, name);
  auto c = read_cell(r, adapters);
  auto ws = r.finish();
  if (w) w->insert(w->end(), ws.begin(), ws.end());
  return c;
}

}  // namespace loadtrim::config
