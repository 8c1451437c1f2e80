#include "core/combination.hpp"

#include <algorithm>

#include "core/strategy.hpp"

namespace loadtrim::core {

double planned_run_up_s(const Profile& p) {
  // At the motoring rate the tool assumes (kHoldRampMps2; a cell that ramps slower motors longer), then the
  // session's settle at the speed (kHoldSettleS, Session::hold_and_wait).
  return p.warm_up.speed_kmh / 3.6 / kHoldRampMps2 + kHoldSettleS;
}

double planned_motoring_s(const Profile& p) {
  // The period starts with the run-up from standstill (the session counts it: docs/safety.md). The 30 s per
  // loss-map speed is the allowance for the ramp between speeds.
  return planned_run_up_s(p) + p.warm_up.duration_s +
         p.warm_up.max_extra_s * (p.warm_up.stable_within_n > 0 ? 1 : 0) +
         static_cast<double>(p.loss_map.speeds_kmh.size()) *
             (p.loss_map.settle_s + p.loss_map.average_s + 30.0);
}

bool start_speed_below(const Profile& p, double limit_kmh) {
  return p.start_speed_kmh() < limit_kmh;
}

bool warm_up_speed_within(const Profile& p, double limit_kmh) {
  return p.warm_up.speed_kmh <= limit_kmh;
}

bool reference_speed_kept(double reference_kmh, double vehicle_max_speed_kmh) {
  return reference_kmh + kReferenceSpeedMarginKmh < vehicle_max_speed_kmh;
}

ReferenceSpeedPlan plan_reference_speeds(const Profile& p, double vehicle_max_speed_kmh,
                                         std::optional<double> cycle_max_speed_kmh) {
  ReferenceSpeedPlan out;
  std::vector<double> speeds = p.reference_speeds_kmh;
  std::sort(speeds.begin(), speeds.end());
  // The top point is the profile's highest or the one just above the cycle's maximum speed.
  std::optional<double> cycle_top;
  if (cycle_max_speed_kmh)
    for (double v : speeds)
      if (v >= *cycle_max_speed_kmh) {
        cycle_top = v;
        break;
      }
  for (double v : speeds) {
    if (cycle_top && v > *cycle_top)
      out.dropped.push_back({v, "above " + num(*cycle_top) +
                                    " km/h, the reference speed just above the test "
                                    "cycle's maximum speed of " +
                                    num(*cycle_max_speed_kmh) +
                                    " km/h (GTR 15 §2.2, from memory; docs/standards.md §2.1)"});
    else if (!reference_speed_kept(v, vehicle_max_speed_kmh))
      out.dropped.push_back({v, "v + 14 km/h reaches the vehicle's maximum speed of " +
                                    num(vehicle_max_speed_kmh) +
                                    " km/h (GTR 15 §2.2, from memory; docs/standards.md §2.1)"});
    else
      out.kept_kmh.push_back(v);
  }
  if (out.kept_kmh.size() < kMinReferenceSpeeds)
    out.refusal = "only " + std::to_string(out.kept_kmh.size()) + " of the profile's " +
                  std::to_string(speeds.size()) +
                  " reference speeds remain for this vehicle; the regression of f0, f1, f2 needs at least " +
                  std::to_string(kMinReferenceSpeeds);
  return out;
}

Profile with_reference_speeds(Profile p, const ReferenceSpeedPlan& plan) {
  if (!plan.refusal) p.reference_speeds_kmh = plan.kept_kmh;
  return p;
}

bool motoring_within(const Profile& p, double max_motoring_s) {
  return planned_motoring_s(p) <= max_motoring_s;
}

double session_speed_limit_kmh(double cell_max_kmh, double vehicle_max_kmh, double controller_max_kmh) {
  return std::min({cell_max_kmh, vehicle_max_kmh, controller_max_kmh});
}

std::optional<std::string> limits_refusal(const Profile& p, double cell_max_kmh, double vehicle_max_kmh,
                                          double controller_max_kmh, double cell_max_motoring_s) {
  const double start = p.start_speed_kmh();
  const double limit = session_speed_limit_kmh(cell_max_kmh, vehicle_max_kmh, controller_max_kmh);
  if (!start_speed_below(p, cell_max_kmh))
    return "start speed " + num(start) +
           " km/h (top reference speed + run-up margin) is not below the cell's limit of " +
           num(cell_max_kmh) + " km/h";
  if (!start_speed_below(p, vehicle_max_kmh))
    return "start speed " + num(start) + " km/h is not below the vehicle's maximum speed of " +
           num(vehicle_max_kmh) + " km/h";
  if (!start_speed_below(p, controller_max_kmh))
    return "start speed " + num(start) + " km/h is not below the controller's limit of " +
           num(controller_max_kmh) + " km/h";
  if (!warm_up_speed_within(p, limit))
    return "warm-up speed " + num(p.warm_up.speed_kmh) + " km/h is above the speed limit of " + num(limit) +
           " km/h";
  for (double v : p.reference_speeds_kmh)
    if (!reference_speed_kept(v, vehicle_max_kmh))
      return "reference speed " + num(v) + " km/h is within 14 km/h of the vehicle's maximum speed";
  if (!motoring_within(p, cell_max_motoring_s))
    return "the warm-up needs up to " + num(planned_motoring_s(p)) +
           " s of motoring, above the cell's limit of " + num(cell_max_motoring_s) + " s";
  return std::nullopt;
}

CombinationProblems check_combination(const VehicleTarget& vehicle, const Profile& given,
                                      const CellFacts& cell) {
  CombinationProblems out;
  const ReferenceSpeedPlan plan =
      plan_reference_speeds(given, vehicle.max_speed_kmh, vehicle.cycle_max_speed_kmh);
  const Profile profile = with_reference_speeds(given, plan);
  auto err = [](Problems& ps, std::string key, std::string msg) {
    ps.push_back({Problem::Severity::error, std::move(key), std::move(msg)});
  };
  auto warn = [](Problems& ps, std::string key, std::string msg) {
    ps.push_back({Problem::Severity::warning, std::move(key), std::move(msg)});
  };
  const double start = profile.start_speed_kmh();
  const std::string start_text = num(start) + " km/h (top reference speed " + num(profile.top_speed_kmh()) +
                                 " + run.run_up_margin_kmh " + num(profile.run_up_margin_kmh) + ")";

  // Who accelerates the vehicle decides the method (GTR 15 Annex 4 §8.1.3.4, docs/standards.md §3.3).
  if (cell.run_up == RunUp::dyno && profile.method == SettingMethod::iterative)
    err(out.cell, "dyno.run_up",
        "is \"dyno\" (the dyno accelerates the vehicle): only the fixed-run method may then be used "
        "(GTR 15 Annex 4 §8.1.3.4), but the profile's method.kind is \"iterative\"; use a fixed-run profile "
        "(method.kind = \"fixed-run\", e.g. config/profiles/wltp-fixed-run.toml) or a cell where the vehicle "
        "accelerates itself (dyno.run_up = \"vehicle\")");

  // Speeds. Comparisons are written so that a NaN fails them.
  if (!start_speed_below(profile, cell.max_speed_kmh))
    err(out.cell, "limits.max_speed_kmh",
        "is " + num(cell.max_speed_kmh) + " km/h; the profile starts its coast-downs at " + start_text +
            ": allowed only above " + num(start) + " km/h for this profile");
  if (!start_speed_below(profile, vehicle.max_speed_kmh))
    err(out.target, "vehicle.max_speed_kmh",
        "is " + num(vehicle.max_speed_kmh) + " km/h; the profile starts its coast-downs at " + start_text +
            ": allowed only above " + num(start) + " km/h for this profile");
  const double speed_limit = std::min(cell.max_speed_kmh, vehicle.max_speed_kmh);
  {
    // Name only the limit (or limits) the warm-up speed exceeds.
    std::string above;
    if (!warm_up_speed_within(profile, cell.max_speed_kmh))
      above = "the cell's limits.max_speed_kmh (" + num(cell.max_speed_kmh) + " km/h)";
    if (!warm_up_speed_within(profile, vehicle.max_speed_kmh))
      above += (above.empty() ? "" : " and ") + std::string("the vehicle's vehicle.max_speed_kmh (") +
               num(vehicle.max_speed_kmh) + " km/h)";
    if (!above.empty())
      err(out.profile, "warm_up.speed_kmh",
          "is " + num(profile.warm_up.speed_kmh) + " km/h, above " + above + ": allowed up to " +
              num(speed_limit) + " km/h");
  }
  // GTR 15 §2.2 (from memory): points the vehicle cannot reach are dropped (plan_reference_speeds); too few
  // left is an error.
  if (plan.refusal) {
    // Name what dropped the points: the vehicle's maximum, the cycle's, or both.
    bool by_cycle = false, by_vehicle = false;
    for (const auto& d : plan.dropped)
      (d.why.find("test cycle") != std::string::npos ? by_cycle : by_vehicle) = true;
    std::string cause;
    if (by_vehicle)
      cause = "vehicle.max_speed_kmh " + num(vehicle.max_speed_kmh) +
              " km/h: a point v is kept only while v + 14 km/h is below it";
    if (by_cycle)
      cause += (cause.empty() ? "" : "; ") + std::string("vehicle.cycle_max_speed_kmh ") +
               num(vehicle.cycle_max_speed_kmh.value_or(0.0)) +
               " km/h: no point is kept above the one just above it";
    err(out.profile, "bands.reference_speeds_kmh",
        *plan.refusal + " (" + cause + "): use a profile with reference speeds this vehicle and cycle reach");
  }

  // Motoring time.
  const double motoring = planned_motoring_s(profile);
  if (!motoring_within(profile, cell.max_motoring_s))
    err(out.cell, "limits.max_motoring_s",
        "is " + num(cell.max_motoring_s) + " s; the profile's warm-up motors the rollers for up to " +
            num(motoring) + " s (the run-up to warm_up.speed_kmh " + num(profile.warm_up.speed_kmh) +
            " km/h at an assumed " + num(kHoldRampMps2) + " m/s² plus " + num(kHoldSettleS) + " s there, " +
            num(planned_run_up_s(profile), 1) + " s, + warm_up.duration_s " +
            num(profile.warm_up.duration_s) +
            (profile.warm_up.stable_within_n > 0
                 ? " + warm_up.max_extra_s " + num(profile.warm_up.max_extra_s)
                 : std::string()) +
            " + " + std::to_string(profile.loss_map.speeds_kmh.size()) +
            " loss_map.speeds_kmh × (settle_s + average_s + 30 s)): allowed only at " + num(motoring) +
            " s or more");

  // Drive layout against the dyno's axles. The AWD-on-single-axle rule is common practice, no source; the
  // two-wheel-drive (coastdown) mode is EU 2018/1832 amending Sub-Annex 4 §4.2.1.8.5 [text].
  if (vehicle.drive == Drive::all && cell.axles == AxleLayout::single_axle) {
    if (!vehicle.two_wheel_drive_mode)
      err(out.target, "vehicle.drive",
          "is \"all\" (all-wheel drive), but the cell's dyno.axles is \"single-axle\": allowed on this "
          "cell only with vehicle.two_wheel_drive_mode = true (an approved two-wheel-drive coastdown mode, "
          "EU 2018/1832 amending Sub-Annex 4 §4.2.1.8.5); otherwise use a two-axle cell");
    else
      warn(out.target, "vehicle.two_wheel_drive_mode",
           "is true: this all-wheel-drive vehicle runs on the single-axle dyno in its two-wheel-drive "
           "(coastdown) mode (EU 2018/1832 amending Sub-Annex 4 §4.2.1.8.5); the mode must be engaged, and "
           "it is logged as a condition of this test");
  } else if (vehicle.two_wheel_drive_mode) {
    warn(out.target, "vehicle.two_wheel_drive_mode",
         std::string("is true: the vehicle (drive \"") + to_string(vehicle.drive) +
             "\") runs in its two-wheel-drive (coastdown) mode on this " + to_string(cell.axles) +
             " dyno; it is logged as a condition of this test");
  }

  // The inertia the session will set (EU SA4 §2.5.3 as amended, through the profile's mass rule).
  const double inertia_kg = dyno_inertia_kg(
      vehicle.test_mass_kg, resolved_rotating_mass_kg(vehicle, profile.mass), cell.axles, profile.mass);
  if (cell.min_inertia_kg > 0 && !(inertia_kg >= cell.min_inertia_kg))
    err(out.cell, "dyno.min_inertia_kg",
        "is " + num(cell.min_inertia_kg) + " kg; this vehicle needs an inertia of " + num(inertia_kg, 1) +
            " kg (test mass and m_r by the profile's mass rule, on a " + to_string(cell.axles) +
            " dyno): allowed only at or below that");
  if (cell.max_inertia_kg > 0 && !(inertia_kg <= cell.max_inertia_kg))
    err(out.cell, "dyno.max_inertia_kg",
        "is " + num(cell.max_inertia_kg) + " kg; this vehicle needs an inertia of " + num(inertia_kg, 1) +
            " kg (test mass and m_r by the profile's mass rule, on a " + to_string(cell.axles) +
            " dyno): allowed only at or above that");

  // The target against the cell's force limit and physics.
  EnvelopeLimits limits;
  limits.max_force_n = cell.max_force_n;
  limits.top_speed_kmh = start;
  for (auto& p : check_target(vehicle.target, profile.reference_speeds_kmh, vehicle.test_mass_kg, limits))
    out.target.push_back(std::move(p));
  return out;
}

}  // namespace loadtrim::core
