#include "config/loaders.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>

#include "config/input_error.hpp"
#include "config/toml_reader.hpp"
#include "core/problem.hpp"
#include "core/units.hpp"

namespace loadtrim::config {

namespace {

core::Profile read_profile(TomlReader& r) {
  core::Profile p;
  p.name = r.string("name");
  p.standard = r.string_or("standard", "");
  p.method = r.choice("method.kind", {"iterative", "fixed-run"}) == "fixed-run"
                 ? core::SettingMethod::fixed_run
                 : core::SettingMethod::iterative;
  // Speeds in km/h, or in mph for US-style profiles (converted exactly, NIST SP 811).
  const bool mph = r.has("bands.reference_speeds_mph") || r.has("bands.half_width_mph");
  if (mph ? r.has("bands.reference_speeds_kmh") || r.has("bands.half_width_kmh") ||
                r.has("bands.crossing_fit_half_width_kmh")
          : r.has("bands.crossing_fit_half_width_mph"))
    r.error("bands", "give speeds in km/h or in mph, not both");
  if (mph) {
    // The ranges core::validate enforces in km/h (below), said and checked in mph: converted exactly and
    // rounded inward (us_bound), so a value these let through passes the metric check too, whose km/h
    // findings on these keys are then not shown (the operator typed mph).
    namespace u = core::units;
    const double half_mph = r.number("bands.half_width_mph", us_bound(u::kmh_to_mph(1.0), true),
                                     us_bound(u::kmh_to_mph(10.0), false), "mph");
    p.band_half_width_kmh = u::mph_to_kmh(half_mph);
    // Each reference speed at least the half width + 4 km/h above standstill (the band's lower edge 4 km/h
    // up), at most 250 km/h.
    const double lowest_mph =
        us_bound(u::kmh_to_mph(std::isfinite(half_mph) ? p.band_half_width_kmh + 4.0 : 5.0), true);
    for (double v :
         r.numbers("bands.reference_speeds_mph", lowest_mph, us_bound(u::kmh_to_mph(250.0), false), "mph"))
      p.reference_speeds_kmh.push_back(u::mph_to_kmh(v));
    p.crossing_fit_half_width_kmh = u::mph_to_kmh(
        r.number_or("bands.crossing_fit_half_width_mph", u::kmh_to_mph(2.5),
                    us_bound(u::kmh_to_mph(1.0), true), us_bound(u::kmh_to_mph(10.0), false), "mph"));
  } else {
    p.reference_speeds_kmh = r.numbers("bands.reference_speeds_kmh", 1.0, 250.0, "km/h");
    p.band_half_width_kmh = r.number("bands.half_width_kmh", 1.0, 10.0, "km/h");
    p.crossing_fit_half_width_kmh = r.number_or("bands.crossing_fit_half_width_kmh", 2.5, 1.0, 10.0, "km/h");
  }
  p.tolerance_n = r.number("acceptance.tolerance_n", 0.1, 1000.0, "N");
  p.consecutive_passes = r.integer_or("acceptance.consecutive_passes", 2, 1, 10);
  // docs/standards.md §3.11: the standard's simple acceptance by default; a guard band only as lab policy.
  if (r.choice("acceptance.decision_rule", {"simple", "guard-band"}, std::string("simple")) == "guard-band")
    p.decision_rule.kind = core::DecisionRule::Kind::guard_band;
  p.decision_rule.coverage_k = r.number_or("acceptance.guard_band_k", 2.0, 1.0, 3.0, "");
  p.whole_trace_confirms = r.boolean_or("acceptance.whole_trace_confirms", false);
  p.estimator_disagreement_n = r.number_or("acceptance.estimator_disagreement_n", 5.0, 0.0, 1000.0, "N");
  p.adjust_from = r.choice("method.adjust_from", {"band-regression", "whole-trace"},
                           std::string("band-regression")) == "whole-trace"
                      ? core::Profile::AdjustFrom::whole_trace
                      : core::Profile::AdjustFrom::band_regression;
  p.fixed_runs = r.integer_or("method.fixed_runs", 4, 2, 10);
  p.fixed_run_verification_runs = r.integer_or("method.fixed_run_verification_runs", 1, 0, 5);
  p.run_up_margin_kmh = r.number("run.run_up_margin_kmh", 0.0, 30.0, "km/h");
  p.mass.rotating_fraction = r.number_or("mass.rotating_fraction", 0.03, 0.0, 0.2, "");
  p.mass.rotating_offset_kg = r.number_or("mass.rotating_offset_kg", 25.0, 0.0, 500.0, "kg");
  p.mass.single_axle_inertia_share = r.number_or("mass.single_axle_inertia_share", 0.5, 0.0, 1.0, "");
  p.initial.f0_factor_single_axle = r.number_or("initial_setting.f0_factor_single_axle", 0.5, -1.0, 2.0, "");
  p.initial.f0_factor_two_axle = r.number_or("initial_setting.f0_factor_two_axle", 0.1, -1.0, 2.0, "");
  p.initial.f1_factor = r.number_or("initial_setting.f1_factor", 0.2, -1.0, 2.0, "");
  p.initial.f2_factor = r.number_or("initial_setting.f2_factor", 1.0, -1.0, 2.0, "");
  p.rounding.f0_decimals = r.integer_or("rounding.f0_decimals", 1, 0, 9);
  p.rounding.f1_decimals = r.integer_or("rounding.f1_decimals", 3, 0, 9);
  p.rounding.f2_decimals = r.integer_or("rounding.f2_decimals", 5, 0, 9);
  p.max_coastdowns = r.integer_or("limits.max_coastdowns", 10, 2, 100);
  p.max_unusable_runs = r.integer_or("limits.max_unusable_runs", 3, 1, 100);
  p.max_gap_after_warmup_s = r.number_or("timing.max_gap_after_warmup_s", 120.0, 0.0, 3600.0, "s");
  p.warm_up.drift_rule = r.choice("warm_up.drift_rule", {"warn", "require"}, std::string("warn")) == "require"
                             ? core::WarmUp::DriftRule::require
                             : core::WarmUp::DriftRule::warn;
  p.warm_up.drift_threshold_n = r.number_or("warm_up.drift_threshold_n", 3.0, 0.1, 100.0, "N");
  p.warm_up.check_fully_warm = r.boolean_or("warm_up.check_fully_warm", false);
  p.warm_up.anticipate_drift = r.boolean_or("warm_up.anticipate_drift", false);
  p.warm_up.predict_next_pass = r.boolean_or("warm_up.predict_next_pass", false);
  p.warm_up.next_pass_risk = r.number_or("warm_up.next_pass_risk", 0.5, 0.01, 0.99, "");
  p.warm_up.anticipate_for =
      r.choice("warm_up.anticipate_for", {"next", "passes"}, std::string("next")) == "passes"
          ? core::WarmUp::AnticipateFor::passes
          : core::WarmUp::AnticipateFor::next;
  p.late_start = r.choice("timing.late_start", {"repeat", "finding"}, std::string("repeat")) == "finding"
                     ? core::Profile::LateStart::finding
                     : core::Profile::LateStart::repeat;
  p.late_start_rewarm_s = r.number_or("timing.late_start_rewarm_s", 300.0, 0.0, 3600.0, "s");
  p.warm_up.speed_kmh = r.number_or("warm_up.speed_kmh", p.warm_up.speed_kmh, 10.0, 250.0, "km/h");
  p.warm_up.duration_s = r.number_or("warm_up.duration_s", p.warm_up.duration_s, 0.0, 14400.0, "s");
  p.warm_up.stable_within_n =
      r.number_or("warm_up.stable_within_n", p.warm_up.stable_within_n, 0.0, 100.0, "N");
  p.warm_up.stable_window_s =
      r.number_or("warm_up.stable_window_s", p.warm_up.stable_window_s, 5.0, 1200.0, "s");
  p.warm_up.max_extra_s = r.number_or("warm_up.max_extra_s", p.warm_up.max_extra_s, 0.0, 7200.0, "s");
  p.warm_up.stable_by = r.choice("warm_up.stable_by", {"windows", "trend"}, std::string("windows")) == "trend"
                            ? core::WarmUp::StableBy::trend
                            : core::WarmUp::StableBy::windows;
  if (r.has("loss_map.speeds_kmh"))
    p.loss_map.speeds_kmh = r.numbers("loss_map.speeds_kmh", 5.0, 250.0, "km/h");
  p.loss_map.settle_s = r.number_or("loss_map.settle_s", p.loss_map.settle_s, 0.5, 120.0, "s");
  p.loss_map.average_s = r.number_or("loss_map.average_s", p.loss_map.average_s, 0.5, 120.0, "s");
  p.loss_map.coast_between_holds = r.boolean_or("loss_map.coast_between_holds", false);
  // Cross-field rules (ordering, run-up margin against Δv, fixed-run counts) live in the core validator.
  core::Problems ps = core::validate(p);
  if (mph) {
    // The band keys were checked above in mph against the same ranges: their km/h findings would name keys
    // and units the file does not have. What is left on the speeds (how many, their order) is renamed.
    std::erase_if(ps, [](const core::Problem& q) {
      return q.key == "bands.half_width_kmh" || q.key == "bands.crossing_fit_half_width_kmh" ||
             q.key.rfind("bands.reference_speeds_kmh[", 0) == 0;
    });
    for (auto& q : ps)
      if (q.key == "bands.reference_speeds_kmh") q.key = "bands.reference_speeds_mph";
  }
  r.add(ps);
  return p;
}

// `typed_us`: the coefficients as the [us_table] gives them, when it is the one given.
core::RoadLoad read_coefficients(TomlReader& r, const std::string& table, const std::string& us_table,
                                 bool& present, core::RoadLoadUs* typed_us = nullptr) {
  const bool metric = r.has(table), us = r.has(us_table);
  present = metric || us;
  if (metric && us) {
    r.error(table, "give [" + table + "] (N, N/(km/h), N/(km/h)²) or [" + us_table +
                       "] (lbf, lbf/mph, lbf/mph²), not both");
    return {};
  }
  if (!metric && !us) return {};
  const std::string& t = metric ? table : us_table;
  double c[3];
  for (int i = 0; i < 3; ++i) {
    const CoefficientRange& k = (metric ? kMetricCoefficients : kUsCoefficients)[i];
    c[i] = r.number(t + "." + k.key, k.lo, k.hi, k.unit);
  }
  if (metric) return {c[0], c[1], c[2]};
  if (typed_us) *typed_us = {c[0], c[1], c[2]};
  return core::to_metric({c[0], c[1], c[2]});
}

// `profile_names`: the profiles a bare name may give (empty: not checked here; the profile file is then
// looked for as it is named).
core::VehicleTarget read_target(TomlReader& r, const std::vector<std::string>& profile_names) {
  core::VehicleTarget v;
  v.id = r.string("vehicle.id");
  v.description = r.string_or("vehicle.description", "");
  if (r.has("vehicle.test_mass_kg") && r.has("vehicle.test_mass_lb"))
    r.error("vehicle", "give test_mass_kg or test_mass_lb, not both");
  if (r.has("vehicle.test_mass_lb"))
    v.test_mass_kg =
        core::units::lb_to_kg(r.number("vehicle.test_mass_lb", core::units::kg_to_lb(core::kMinTestMass_kg),
                                       core::units::kg_to_lb(core::kMaxTestMass_kg), "lb"));
  else
    v.test_mass_kg = r.number("vehicle.test_mass_kg", core::kMinTestMass_kg, core::kMaxTestMass_kg, "kg");
  v.rotating_mass_kg = r.maybe_number("vehicle.rotating_mass_kg", 0.0, 4000.0, "kg");
  v.mass_in_running_order_kg = r.maybe_number("vehicle.mass_in_running_order_kg", 0.5 * core::kMinTestMass_kg,
                                              core::kMaxTestMass_kg, "kg");
  v.mass_in_running_order_estimated = r.boolean_or("vehicle.mass_in_running_order_estimated", false);
  if (v.mass_in_running_order_estimated && !v.mass_in_running_order_kg)
    r.error("vehicle.mass_in_running_order_estimated", "is true, but no mass_in_running_order_kg is given");
  core::parse(r.choice("vehicle.drive", {"front", "rear", "all"}), v.drive);
  v.two_wheel_drive_mode = r.boolean_or("vehicle.two_wheel_drive_mode", false);
  v.max_speed_kmh = r.number("vehicle.max_speed_kmh", 30.0, 400.0, "km/h");
  v.cycle_max_speed_kmh = r.maybe_number("vehicle.cycle_max_speed_kmh", 10.0, 400.0, "km/h");
  v.profile = r.string("profile");
  // A bare name is a profile of the installation's config/profiles; a misspelt one is refused here, with
  // the names there, rather than as a profile file that cannot be opened.
  if (!profile_names.empty() && r.has("profile") && v.profile.find('/') == std::string::npos &&
      !v.profile.ends_with(".toml") &&
      std::find(profile_names.begin(), profile_names.end(), v.profile) == profile_names.end()) {
    std::string list;
    for (const auto& n : profile_names) list += (list.empty() ? "\"" : ", \"") + n + "\"";
    r.add({{core::Problem::Severity::error, "profile",
            "is \"" + v.profile + "\", not a known profile: allowed " + list +
                " (config/profiles), or the path of a profile file ending in .toml"}});
  }
  bool present = false;
  core::RoadLoadUs typed_us;
  v.target = read_coefficients(r, "target", "target_us", present, &typed_us);
  v.target_given_in_us = r.has("target_us") && !r.has("target");
  if (!present)
    r.error("target",
            "is missing: give [target] with f0_n, f1_n_per_kmh, f2_n_per_kmh2 or [target_us] with a_lbf, "
            "b_lbf_per_mph, c_lbf_per_mph2");
  bool initial = false;
  const core::RoadLoad init = read_coefficients(r, "initial_set", "initial_set_us", initial);
  if (initial) v.initial_set = init;
  // A [target_us] table's findings name its keys, with ranges in its units.
  static const std::string us_keys[3] = {"target_us.a_lbf", "target_us.b_lbf_per_mph",
                                         "target_us.c_lbf_per_mph2"};
  r.add(v.target_given_in_us ? in_us_units(core::plausibility(v), typed_us, us_keys) : core::plausibility(v));
  return v;
}

physics::Truth read_truth(TomlReader& r) {
  physics::Truth t;
  auto& v = t.vehicle;
  v.name = r.string_or("vehicle.name", "unnamed");
  v.test_mass_kg = r.number("vehicle.test_mass_kg", 300.0, 20000.0, "kg");
  v.rotating_mass_on_rollers_kg =
      r.number_or("vehicle.rotating_mass_on_rollers_kg", v.rotating_mass_on_rollers_kg, 0.0, 2000.0, "kg");
  v.tyre_radius_m = r.number_or("vehicle.tyre_radius_m", v.tyre_radius_m, 0.15, 1.0, "m");
  v.tyre_loss_flat_n = r.number_or("vehicle.tyre_loss_flat_n", v.tyre_loss_flat_n, 0.0, 2000.0, "N");
  v.tyre_loss_flat_n_per_kmh =
      r.number_or("vehicle.tyre_loss_flat_n_per_kmh", v.tyre_loss_flat_n_per_kmh, -5.0, 5.0, "N/(km/h)");
  v.drivetrain_loss_n = r.number_or("vehicle.drivetrain_loss_n", v.drivetrain_loss_n, 0.0, 2000.0, "N");
  v.drivetrain_loss_n_per_kmh2 =
      r.number_or("vehicle.drivetrain_loss_n_per_kmh2", v.drivetrain_loss_n_per_kmh2, 0.0, 0.2, "N/(km/h)²");
  v.drivetrain_cold_excess =
      r.number_or("vehicle.drivetrain_cold_excess", v.drivetrain_cold_excess, 0.0, 2.0, "");
  v.warm_up_time_constant_s =
      r.number_or("vehicle.warm_up_time_constant_s", v.warm_up_time_constant_s, 1.0, 36000.0, "s");
  v.cool_down_time_constant_s =
      r.number_or("vehicle.cool_down_time_constant_s", v.cool_down_time_constant_s, 1.0, 360000.0, "s");
  v.initial_warmth = r.number_or("vehicle.initial_warmth", v.initial_warmth, 0.0, 1.0, "");
  v.brake_drag_n = r.number_or("vehicle.brake_drag_n", v.brake_drag_n, 0.0, 500.0, "N");
  v.hold_bias_n = r.number_or("vehicle.hold_bias_n", v.hold_bias_n, -100.0, 100.0, "N");
  // Absent (a truth file from before it existed): 0, a constant steady-versus-coasting difference.
  v.hold_bias_n_per_kmh2 = r.number_or("vehicle.hold_bias_n_per_kmh2", 0.0, -0.02, 0.02, "N/(km/h)²");
  auto& d = t.dyno;
  d.roller_diameter_m = r.number_or("dyno.roller_diameter_m", d.roller_diameter_m, 0.2, 3.0, "m");
  d.base_inertia_kg = r.number_or("dyno.base_inertia_kg", d.base_inertia_kg, 50.0, 10000.0, "kg");
  if (r.has("dyno.stated_base_inertia_kg"))
    d.stated_base_inertia_kg = r.number("dyno.stated_base_inertia_kg", 50.0, 10000.0, "kg");
  d.inertia_simulation_error =
      r.number_or("dyno.inertia_simulation_error", d.inertia_simulation_error, -0.2, 0.2, "");
  d.parasitic_f0_n = r.number_or("dyno.parasitic_f0_n", d.parasitic_f0_n, 0.0, 1000.0, "N");
  d.parasitic_f1_n_per_kmh =
      r.number_or("dyno.parasitic_f1_n_per_kmh", d.parasitic_f1_n_per_kmh, -10.0, 10.0, "N/(km/h)");
  d.parasitic_f2_n_per_kmh2 =
      r.number_or("dyno.parasitic_f2_n_per_kmh2", d.parasitic_f2_n_per_kmh2, 0.0, 0.1, "N/(km/h)²");
  d.parasitic_compensation_error =
      r.number_or("dyno.parasitic_compensation_error", d.parasitic_compensation_error, -1.0, 1.0, "");
  d.parasitic_excess = r.number_or("dyno.parasitic_excess", d.parasitic_excess, -0.5, 2.0, "");
  d.speed_noise_kmh = r.number_or("dyno.speed_noise_kmh", d.speed_noise_kmh, 0.0, 5.0, "km/h");
  d.force_noise_n = r.number_or("dyno.force_noise_n", d.force_noise_n, 0.0, 500.0, "N");
  // Absent (a truth file from before they existed): an exact load cell, gain 1 and offset 0.
  d.load_cell_gain = r.number_or("dyno.load_cell_gain", 1.0, 0.8, 1.2, "");
  d.load_cell_offset_n = r.number_or("dyno.load_cell_offset_n", 0.0, -200.0, 200.0, "N");
  d.motoring_accel_mps2 = r.number_or("dyno.motoring_accel_mps2", d.motoring_accel_mps2, 0.1, 10.0, "m/s²");
  d.stop_decel_mps2 = r.number_or("dyno.stop_decel_mps2", d.stop_decel_mps2, 0.1, 10.0, "m/s²");
  d.force_loop_gain = r.number_or("dyno.force_loop_gain", d.force_loop_gain, 0.5, 1.5, "");
  d.force_loop_time_constant_s =
      r.number_or("dyno.force_loop_time_constant_s", d.force_loop_time_constant_s, 0.0, 2.0, "s");
  d.force_loop_damping = r.number_or("dyno.force_loop_damping", d.force_loop_damping, 0.05, 5.0, "");
  t.noise_seed = static_cast<std::uint64_t>(r.integer_or("noise_seed", 1, 0, 2147483647));
  // [driver]: who accelerates the vehicle when the driver display asks (physics::DriverTruth; the defaults
  // are assumptions, no source).
  auto& dr = t.driver;
  dr.reaction_time_s = r.number_or("driver.reaction_time_s", dr.reaction_time_s, 0.0, 10.0, "s");
  dr.throttle_ramp_s = r.number_or("driver.throttle_ramp_s", dr.throttle_ramp_s, 0.0, 30.0, "s");
  dr.max_tractive_force_n =
      r.number_or("driver.max_tractive_force_n", dr.max_tractive_force_n, 50.0, 50000.0, "N");
  dr.max_power_w = r.number_or("driver.max_power_w", dr.max_power_w, 500.0, 2000000.0, "W");
  dr.overshoot_kmh = r.number_or("driver.overshoot_kmh", dr.overshoot_kmh, 0.0, 20.0, "km/h");
  dr.hold_gain_per_s = r.number_or("driver.hold_gain_per_s", dr.hold_gain_per_s, 0.05, 20.0, "1/s");
  dr.neutral_jitter_s = r.number_or("driver.neutral_jitter_s", dr.neutral_jitter_s, 0.0, 10.0, "s");
  dr.late_release_probability =
      r.number_or("driver.late_release_probability", dr.late_release_probability, 0.0, 1.0, "");
  dr.late_release_extra_s =
      r.number_or("driver.late_release_extra_s", dr.late_release_extra_s, 0.0, 120.0, "s");
  dr.early_release_probability =
      r.number_or("driver.early_release_probability", dr.early_release_probability, 0.0, 1.0, "");
  dr.early_release_below_kmh =
      r.number_or("driver.early_release_below_kmh", dr.early_release_below_kmh, 0.5, 100.0, "km/h");
  dr.seed = static_cast<std::uint64_t>(r.integer_or("driver.seed", 1, 0, 2147483647));
  t.vehicle_on_rollers = r.boolean_or("vehicle_on_rollers", true);
  return t;
}

std::vector<std::string> check_names() {
  std::vector<std::string> out;
  for (core::CheckKind k : core::kAllChecks) out.push_back(core::to_string(k));
  return out;
}

std::vector<core::CheckKind> check_kinds(TomlReader& r, const std::string& key) {
  std::vector<core::CheckKind> out;
  for (const auto& s : r.choices(key, check_names())) {
    core::CheckKind k;
    if (core::parse(s, k)) out.push_back(k);
  }
  return out;
}

// The due table (CFR 1066.215 Table 1): one [due.<check>] table per check the profile tracks.
void read_due(TomlReader& r, core::CheckProfile& p) {
  if (r.has("intervals"))
    r.error("intervals",
            "is replaced by one [due.<check>] table per check (interval_days, after_maintenance, "
            "after_failure_of) and [due] required: see config/checks/cfr1066.toml and docs/dyno-checks.md");
  p.due.rules.clear();
  constexpr double kDay = 86400.0;
  for (core::CheckKind k : core::kAllChecks) {
    const std::string t = std::string("due.") + core::to_string(k);
    if (!r.has(t)) continue;
    core::DueRule row;
    row.kind = k;
    row.clause = r.string_or(t + ".clause", std::string("1066.215 Table 1; ") + core::clause_of(k));
    row.interval_s = kDay * r.number(t + ".interval_days", 0.0, 3650.0, "days (0: no interval)");
    row.after_maintenance = r.boolean_or(t + ".after_maintenance", false);
    if (r.has(t + ".after_failure_of")) row.after_failure_of = check_kinds(r, t + ".after_failure_of");
    p.due.rules.push_back(std::move(row));
  }
  if (p.due.rules.empty())
    r.error("due",
            "is missing: give one [due.<check>] table per check (e.g. [due.coastdown] interval_days = 7)");
  p.required = check_kinds(r, "due.required");
  for (std::size_t i = 0; i < p.required.size(); ++i)
    if (!p.due.find(p.required[i]))
      r.error("due.required[" + std::to_string(i) + "]",
              std::string("\"") + core::to_string(p.required[i]) + "\" has no [due." +
                  core::to_string(p.required[i]) + "] row: a required check needs its rule");
}

core::CheckProfile read_check_profile(TomlReader& r) {
  core::CheckProfile p;
  p.name = r.string("name");
  p.standard = r.string_or("standard", "");
  read_due(r, p);
  auto& pa = p.parasitic;
  pa.speeds_kmh = r.numbers("parasitic.speeds_kmh", 5.0, 250.0, "km/h");
  if (pa.speeds_kmh.size() < 4)
    r.error("parasitic.speeds_kmh", "needs at least 4 speeds for a quadratic fit");
  pa.half_band_kmh = r.number("parasitic.half_band_kmh", 1.0, 20.0, "km/h");
  pa.tolerance_n = r.number("parasitic.tolerance_n", 0.0, 1000.0, "N");
  pa.tolerance_fraction = r.number("parasitic.tolerance_fraction", 0.0, 1.0, "");
  p.parasitic_run_up_margin_kmh = r.number("parasitic.run_up_margin_kmh", 0.0, 50.0, "km/h");
  auto& c = p.coastdown;
  c.v_start_mph = r.number("coastdown.start_mph", 10.0, 150.0, "mph");
  c.v_end_mph = r.number("coastdown.end_mph", 2.0, 100.0, "mph");
  c.interval_mph = r.number("coastdown.interval_mph", 1.0, 50.0, "mph");
  if (c.v_end_mph + c.interval_mph > c.v_start_mph + 1e-9)
    r.error("coastdown.end_mph", "must be at least one interval below start_mph");
  c.tolerance_n = r.number("coastdown.tolerance_n", 0.0, 1000.0, "N");
  c.tolerance_fraction = r.number("coastdown.tolerance_fraction", 0.0, 1.0, "");
  p.coastdown_run_up_margin_mph = r.number("coastdown.run_up_margin_mph", 0.0, 30.0, "mph");
  p.settle_s = r.number("coastdown.settle_s", 0.0, 120.0, "s");
  auto coef = [&](const std::string& t) {
    return core::RoadLoad{r.number(t + ".f0_n", 0.0, 2000.0, "N"),
                          r.number(t + ".f1_n_per_kmh", -10.0, 20.0, "N/(km/h)"),
                          r.number(t + ".f2_n_per_kmh2", 0.0, 0.5, "N/(km/h)²")};
  };
  p.smallest_inertia_setting = coef("coastdown.smallest_inertia");
  p.largest_inertia_setting = coef("coastdown.largest_inertia");

  // 1066.250 base inertia: both directions at rate pairs.
  auto& in = p.inertia;
  for (const char* old : {"inertia.tolerance_fraction", "inertia.accel_mph_per_s"})
    if (r.has(old))
      r.error(old,
              "is replaced: the base-inertia check times both directions at rate pairs "
              "(accel_rates_mph_per_s, decel_rates_mph_per_s, sets_per_rate_pair) with a per-set and a mean "
              "tolerance (set_tolerance_fraction, mean_tolerance_fraction), CFR 1066.250");
  in.v_low_mph = r.number("inertia.low_mph", 1.0, 100.0, "mph");
  in.v_high_mph = r.number("inertia.high_mph", 2.0, 150.0, "mph");
  if (in.v_high_mph <= in.v_low_mph) r.error("inertia.high_mph", "must be above inertia.low_mph");
  in.start_mph = r.number_or("inertia.start_mph", in.start_mph, 1.0, 100.0, "mph");
  if (in.start_mph >= in.v_low_mph) r.error("inertia.start_mph", "must be below inertia.low_mph");
  in.margin_mph = r.number_or("inertia.margin_mph", in.margin_mph, 0.5, 20.0, "mph");
  if (in.v_low_mph - in.margin_mph <= 0.0)
    r.error("inertia.margin_mph", "must leave the run's turn-round speed above 0 (below inertia.low_mph)");
  in.accel_rates_mph_per_s = r.numbers("inertia.accel_rates_mph_per_s", 0.1, 10.0, "(mph)/s");
  in.decel_rates_mph_per_s = r.numbers("inertia.decel_rates_mph_per_s", 0.1, 10.0, "(mph)/s");
  if (in.accel_rates_mph_per_s.size() != in.decel_rates_mph_per_s.size() || in.accel_rates_mph_per_s.empty())
    r.error("inertia.decel_rates_mph_per_s",
            "must give one deceleration rate per acceleration rate (the rate pairs), at least one pair");
  in.sets_per_rate_pair = r.integer_or("inertia.sets_per_rate_pair", in.sets_per_rate_pair, 1, 20);
  // The text's limits are the loosest a profile may give (a lab may be stricter): the defaults of
  // core::InertiaCheckOptions are CFR 1066.250's ±1.0 % and ±0.20 %.
  const core::InertiaCheckOptions text_in;
  in.set_tolerance_fraction = r.number("inertia.set_tolerance_fraction", 0.0, text_in.set_tolerance_fraction,
                                       "(CFR 1066.250 [text])");
  in.mean_tolerance_fraction = r.number("inertia.mean_tolerance_fraction", 0.0,
                                        text_in.mean_tolerance_fraction, "(CFR 1066.250 [text])");

  // 1066.260 friction compensation.
  auto& fr = p.friction;
  fr.speed_mph = r.number_or("friction.speed_mph", fr.speed_mph, 5.0, 100.0, "mph");
  fr.coast_s = r.number_or("friction.coast_s", fr.coast_s, 5.0, 600.0, "s");
  fr.above_20000_lb_gvwr = r.boolean_or("friction.above_20000_lb_gvwr", fr.above_20000_lb_gvwr);

  // 1066.265 acceleration and deceleration.
  auto& ad = p.accel_decel;
  ad.v_low_mph = r.number_or("accel_decel.low_mph", ad.v_low_mph, 1.0, 100.0, "mph");
  ad.v_high_mph = r.number_or("accel_decel.high_mph", ad.v_high_mph, 2.0, 150.0, "mph");
  if (ad.v_high_mph <= ad.v_low_mph) r.error("accel_decel.high_mph", "must be above accel_decel.low_mph");
  ad.start_mph = r.number_or("accel_decel.start_mph", ad.start_mph, 1.0, 100.0, "mph");
  if (ad.start_mph >= ad.v_low_mph) r.error("accel_decel.start_mph", "must be below accel_decel.low_mph");
  ad.margin_mph = r.number_or("accel_decel.margin_mph", ad.margin_mph, 0.5, 20.0, "mph");
  if (ad.v_low_mph - ad.margin_mph <= 0.0)
    r.error("accel_decel.margin_mph", "must leave the run's turn-round speed above 0 (below low_mph)");
  ad.highest_test_rate_mph_per_s = r.number_or("accel_decel.highest_test_rate_mph_per_s",
                                               ad.highest_test_rate_mph_per_s, 0.1, 20.0, "(mph)/s");
  ad.runs_per_rate = r.integer_or("accel_decel.runs_per_rate", ad.runs_per_rate, 1, 20);
  ad.tolerance_fraction = r.number_or("accel_decel.tolerance_fraction", ad.tolerance_fraction, 0.0,
                                      core::AccelDecelOptions{}.tolerance_fraction,  // the text's ±1.0 %
                                      "(CFR 1066.265 [text])");
  if (r.has("accel_decel.inertias_kg"))
    ad.inertias_kg = r.numbers("accel_decel.inertias_kg", 100.0, 20000.0, "kg");

  // 1066.245 response time.
  auto& rs = p.response;
  if (r.has("response.rates_mph_per_s"))
    rs.rates_mph_per_s = r.numbers("response.rates_mph_per_s", 0.1, 20.0, "(mph)/s");
  rs.start_mph = r.number_or("response.start_mph", rs.start_mph, 1.0, 100.0, "mph");
  rs.window_s = r.number_or("response.window_s", rs.window_s, 0.2, 10.0, "s");
  const core::ResponseOptions text_rs;  // CFR 1066.245's 100 ms and ±10 %: a profile may only be stricter
  rs.limit_s = r.number_or("response.limit_s", rs.limit_s, 0.001, text_rs.limit_s, "s (CFR 1066.245 [text])");
  rs.band_fraction = r.number_or("response.band_fraction", rs.band_fraction, 0.001, text_rs.band_fraction,
                                 "(CFR 1066.245 [text])");
  rs.max_sample_period_s =
      r.number_or("response.max_sample_period_s", rs.max_sample_period_s, 0.0001, 1.0, "s");
  rs.sample_rate_hz = r.number_or("response.sample_rate_hz", rs.sample_rate_hz, 10.0, 1000.0, "Hz");
  if (1.0 / rs.sample_rate_hz > rs.max_sample_period_s + 1e-12)
    r.error("response.sample_rate_hz", "gives samples " + core::num(1000.0 / rs.sample_rate_hz) +
                                           " ms apart, more than response.max_sample_period_s allows");
  if (rs.window_s <= rs.limit_s) r.error("response.window_s", "must be longer than response.limit_s");
  return p;
}

template <class T, class F>
T load_with(TomlReader r, core::Problems* warnings, F read) {
  T value = read(r);
  core::Problems w = r.finish();  // throws on any error
  if (warnings) warnings->insert(warnings->end(), w.begin(), w.end());
  return value;
}

}  // namespace

double us_bound(double converted, bool lower) {
  if (converted == 0.0 || !std::isfinite(converted)) return converted;
  const double scale = std::pow(10.0, 5.0 - std::floor(std::log10(std::abs(converted))));
  return (lower ? std::ceil(converted * scale) : std::floor(converted * scale)) / scale;
}

core::Problems in_us_units(const core::Problems& metric_findings, const core::RoadLoadUs& typed,
                           const std::string (&names)[3]) {
  namespace u = core::units;
  using core::num;
  const auto E = core::Problem::Severity::error;
  const double per_mph2 = u::kKmhPerMph * u::kKmhPerMph;
  // core::plausibility's bounds (core/vehicle.hpp) in US units; A's upper bound is the file's
  // (kUsCoefficients).
  const double a_max = kUsCoefficients[0].hi;
  const double c_max = us_bound(u::n_to_lbf(core::kMaxTargetF2_n_per_kmh2 * per_mph2), false);
  const double b_usual = us_bound(u::n_to_lbf(core::kUsualTargetF1_n_per_kmh * u::kKmhPerMph), false);
  const double c_usual = us_bound(u::n_to_lbf(core::kUsualMinTargetF2_n_per_kmh2 * per_mph2), true);
  const std::string metric[3] = {"target.f0_n", "target.f1_n_per_kmh", "target.f2_n_per_kmh2"};
  const double value[3] = {typed.a_lbf, typed.b_lbf_per_mph, typed.c_lbf_per_mph2};
  core::Problems out;
  bool c_refused = false;
  for (const core::Problem& p : metric_findings) {
    int i = 0;
    while (i < 3 && p.key != metric[i]) ++i;
    if (i == 3) {
      out.push_back(p);
      continue;
    }
    const bool error = p.severity == E;
    const std::string is = "is " + num(value[i]);
    std::string key = names[i], msg;
    if (i == 0 && error)
      msg = is + ", must not be negative (allowed 0 to " + num(a_max) + " lbf)";
    else if (i == 1 && !error)
      msg = is + ", outside the usual ±" + num(b_usual) + " lbf/mph: check units";
    else if (i == 2 && error) {
      msg = is + (value[2] < 0.0 ? ", must be positive (allowed 0 to " + num(c_max) + " lbf/mph²)"
                                 : ", allowed 0 to " + num(c_max) + " lbf/mph²");
      c_refused = true;
    } else if (i == 2 && !error && value[2] > 0.0)
      msg = is + ", below the usual " + num(c_usual) + "–" + num(c_max) +
            " lbf/mph²: given per (km/h)² or per (m/s)²?";
    else {
      // A finding with no range of these keys in it (F0/(TM·g); C = 0): as it is, with the metric key it
      // speaks of when it names a metric unit.
      msg = p.message;
      if (msg.find("N/(km/h)") != std::string::npos) key += " (" + metric[i] + ")";
    }
    out.push_back({p.severity, key, msg});
  }
  // C between the printed bound and the metric one converted (the rounding): refused as printed (the 1e-12
  // lets through a C at the bound that was converted to metric and back, and so differs in its last digit).
  if (!c_refused && value[2] > c_max * (1.0 + 1e-12))
    out.push_back({E, names[2], "is " + num(value[2]) + ", allowed 0 to " + num(c_max) + " lbf/mph²"});
  return out;
}

core::Profile load_profile(const std::string& path, core::Problems* w) {
  return load_with<core::Profile>(TomlReader::from_file(path), w, read_profile);
}
core::VehicleTarget load_target(const std::string& path, core::Problems* w,
                                const std::vector<std::string>& profile_names) {
  return load_with<core::VehicleTarget>(TomlReader::from_file(path), w,
                                        [&](TomlReader& r) { return read_target(r, profile_names); });
}
physics::Truth load_truth(const std::string& path, core::Problems* w) {
  return load_with<physics::Truth>(TomlReader::from_file(path), w, read_truth);
}
core::CheckProfile load_check_profile(const std::string& path, core::Problems* w) {
  return load_with<core::CheckProfile>(TomlReader::from_file(path), w, read_check_profile);
}
core::CheckProfile parse_check_profile(const std::string& text, const std::string& name, core::Problems* w) {
  return load_with<core::CheckProfile>(TomlReader::from_text(text, name), w, read_check_profile);
}
core::Profile parse_profile(const std::string& text, const std::string& name, core::Problems* w) {
  return load_with<core::Profile>(TomlReader::from_text(text, name), w, read_profile);
}
core::VehicleTarget parse_target(const std::string& text, const std::string& name, core::Problems* w) {
  return load_with<core::VehicleTarget>(TomlReader::from_text(text, name), w,
                                        [](TomlReader& r) { return read_target(r, {}); });
}
physics::Truth parse_truth(const std::string& text, const std::string& name, core::Problems* w) {
  return load_with<physics::Truth>(TomlReader::from_text(text, name), w, read_truth);
}

std::string profile_path(const std::string& profiles_dir, const std::string& name) {
  return (std::filesystem::path(profiles_dir) / (name + ".toml")).string();
}

}  // namespace loadtrim::config
