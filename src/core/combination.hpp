// A vehicle against a cell and a profile, before anything connects (issue 13): every limit that the three
// files settle between them. Pure: no I/O. The files have each been validated on their own (config::load_*);
// this checks how they combine. Problems are sorted by the file whose key they name, so a loader can add the
// file name.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "core/envelope.hpp"
#include "core/mode.hpp"
#include "core/problem.hpp"
#include "core/profile.hpp"
#include "core/vehicle.hpp"

namespace loadtrim::core {

// What the cell file says that matters here (controller::CellConfig carries these; the core does not see it).
struct CellFacts {
  double max_speed_kmh = 0;                       // limits.max_speed_kmh
  double max_force_n = 0;                         // limits.max_force_n
  double max_motoring_s = 0;                      // limits.max_motoring_s: one continuous motoring period
  AxleLayout axles = AxleLayout::single_axle;     // dyno.axles
  double min_inertia_kg = 0, max_inertia_kg = 0;  // dyno.min_inertia_kg / dyno.max_inertia_kg; 0 = not given
  std::optional<RunUp> run_up;                    // dyno.run_up; nullopt = no cell given (not checked)
};

// Problems per file: `cell` keys as in the cell file, `target` as in the target file, `profile` as in the
// profile.
struct CombinationProblems {
  Problems cell, target, profile;
  bool any_error() const { return has_errors(cell) || has_errors(target) || has_errors(profile); }
};

// The longest continuous motoring of the warm-up, s (check_combination and, through limits_refusal, the
// session's limit check): the run-up from standstill to the warm-up speed (planned_run_up_s),
// warm_up.duration_s, plus warm_up.max_extra_s when the stability rule is on (stable_within_n > 0), plus
// (settle + average + 30 s) for each loss-map speed.
double planned_motoring_s(const Profile& p);
// The run-up from standstill to the warm-up speed at an assumed motoring rate (kHoldRampMps2, 1.5 m/s²: a
// cell file does not state its own; a cell that ramps slower motors longer than planned, and the session's
// check before each setting is written counts what it did) plus the 2 s the session settles at the speed.
double planned_run_up_s(const Profile& p);

// The speed and time rules, each written once: check_combination (before anything connects) and
// limits_refusal (the session, after connecting, with the controller's own limit) both use them. Every
// comparison is written so that a NaN fails it.
// The profile's start speed (top reference speed + run-up margin) must lie strictly below a speed limit.
bool start_speed_below(const Profile& p, double limit_kmh);
// The warm-up speed may reach a speed limit but not exceed it.
bool warm_up_speed_within(const Profile& p, double limit_kmh);
// GTR 15 §2.2 (from memory; docs/standards.md §2): a reference speed v with v + 14 km/h ≥ the vehicle's
// maximum speed is dropped by the standard. A fixed profile cannot drop it, so true means the point may stay.
inline constexpr double kReferenceSpeedMarginKmh = 14.0;
bool reference_speed_kept(double reference_kmh, double vehicle_max_speed_kmh);
// The session's reference speeds, one rule for `target`, `run`, the demo and the benchmark (docs/standards.md
// §2.1; GTR 15 §2.2, from memory): from the profile's list, drop every point above the one just above the
// test cycle's maximum speed (when the target gives that speed), then every point v with v + 14 km/h ≥ the
// vehicle's maximum speed. A quadratic needs three points: fewer left is a refusal (arithmetic). The run-up
// margin above the new top point is the profile's; the cell's and controller's limits are checked on the
// result, not used to drop points (a cell too slow for the standard's speeds is refused, not worked around).
struct DroppedSpeed {
  double speed_kmh = 0;
  std::string why;
};
struct ReferenceSpeedPlan {
  std::vector<double> kept_kmh;  // ascending
  std::vector<DroppedSpeed> dropped;
  std::optional<std::string> refusal;  // fewer than kMinReferenceSpeeds kept
};
inline constexpr std::size_t kMinReferenceSpeeds = 3;
ReferenceSpeedPlan plan_reference_speeds(const Profile& p, double vehicle_max_speed_kmh,
                                         std::optional<double> cycle_max_speed_kmh);
// The profile with the plan's speeds (unchanged when the plan is a refusal).
Profile with_reference_speeds(Profile p, const ReferenceSpeedPlan& plan);

// The warm-up's motoring fits the cell's limit of one continuous motoring period (planned_motoring_s).
bool motoring_within(const Profile& p, double max_motoring_s);
// The session's speed limit: the lowest of the cell's, the vehicle's and the controller's.
double session_speed_limit_kmh(double cell_max_kmh, double vehicle_max_kmh, double controller_max_kmh);

// The session's check once the controller has told its own limit (session.cpp do_check_limits): the first
// rule broken, as one line for the "refused" record, in this order: start speed against the cell, the
// vehicle and the controller; warm-up speed against the session's speed limit; each reference speed against
// the vehicle's maximum (GTR 15 §2.2); the warm-up's motoring against limits.max_motoring_s. nullopt = none.
std::optional<std::string> limits_refusal(const Profile& p, double cell_max_kmh, double vehicle_max_kmh,
                                          double controller_max_kmh, double cell_max_motoring_s);

// Checks, each a Problem naming the key and the allowed range, filed under the file whose key it names:
// - cell: limits.max_speed_kmh above the profile's start speed; limits.max_motoring_s at least
//   planned_motoring_s; dyno.min_inertia_kg ≤ the inertia the session will set ≤ dyno.max_inertia_kg when
//   given (dyno_inertia_kg(TM, resolved m_r, dyno.axles, the profile's mass rule), EU SA4 §2.5.3).
// - cell: dyno.run_up "dyno" with the iterative method is an error naming the fixed-run method (GTR 15 Annex
// 4
//   §8.1.3.4, text: when the dyno accelerates the vehicle only the fixed-run method may be used; when the
//   vehicle accelerates itself, either; docs/standards.md §3.3).
// - target: vehicle.max_speed_kmh above the start speed; vehicle.drive "all" on a single-axle cell is an
//   error unless vehicle.two_wheel_drive_mode (then a warning: the mode is a condition of the test and is
//   logged); check_target with EnvelopeLimits{limits.max_force_n, start speed}, whose force-limit error names
//   limits.max_force_n.
// - profile: warm_up.speed_kmh at most both maximum speeds (cell and vehicle); bands.reference_speeds_kmh:
//   fewer than three points left by plan_reference_speeds is an error. The start-speed checks above use the
//   planned speeds: callers pass the profile as given and check_combination plans it the same way.
CombinationProblems check_combination(const VehicleTarget& vehicle, const Profile& profile,
                                      const CellFacts& cell);

}  // namespace loadtrim::core
