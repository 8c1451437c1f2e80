// A vehicle's targets as the tool receives them, and their plausibility checks. Pure: no I/O.
#pragma once

#include <optional>
#include <string>

#include "core/problem.hpp"
#include "core/profile.hpp"
#include "core/road_load.hpp"

namespace loadtrim::core {

enum class Drive { front, rear, all };  // the vehicle's driven wheels
const char* to_string(Drive d);
bool parse(const std::string& s, Drive& out);
// The dyno layout a vehicle with these driven wheels needs: both axles on rollers for all-wheel drive, one
// driven axle for front or rear drive (common practice, no source; a single-axle cell takes an
// all-wheel-drive vehicle only in its two-wheel-drive mode, check_combination). The one mapping from drive to
// layout: the fleet model's rows, `loadtrim target` without a cell and the demo's choice of cell all use it.
AxleLayout axle_layout_for(Drive d);

struct VehicleTarget {
  std::string id;
  std::string description;
  double test_mass_kg = 0.0;
  std::optional<double> rotating_mass_kg;          // m_r when the file gives it, else
  std::optional<double> mass_in_running_order_kg;  // m_r from this by the profile's rule (EU SA4 §2.5.1)
  // The mass in running order is an estimate the operator accepted explicitly (`loadtrim target
  // --estimate-mass-in-running-order`), not a measurement; target key
  // vehicle.mass_in_running_order_estimated.
  bool mass_in_running_order_estimated = false;
  Drive drive = Drive::front;
  // The vehicle is run in an approved two-wheel-drive (coastdown) mode, on the road and the dyno alike
  // (EU 2018/1832 amending Sub-Annex 4 §4.2.1.8.5): lets an all-wheel-drive vehicle run on a single-axle
  // dyno (core::check_combination). Target file key vehicle.two_wheel_drive_mode, optional, default false.
  bool two_wheel_drive_mode = false;
  double max_speed_kmh = 0.0;
  // The applicable test cycle's maximum speed, when given (target key vehicle.cycle_max_speed_kmh): the top
  // reference speed is the one just above it (core::plan_reference_speeds, docs/standards.md §2.1).
  std::optional<double> cycle_max_speed_kmh;
  RoadLoad target;
  bool target_given_in_us = false;  // the file gave [target_us] (A, B, C): the console shows US units too
  std::string profile;              // name of the standard profile to follow
  std::optional<RoadLoad> initial_set;
};

// The test masses the tool accepts: from below the lightest motorcycle of CFR 86.529-98 Figure F98-9 (100 kg
// equivalent inertia, docs/standards.md §6.1) to a heavy truck. The floor's value is common practice, no
// source; the vehicle's profile sets the rest (its mass rule, inertia and bands).
inline constexpr double kMinTestMass_kg = 50.0;
inline constexpr double kMaxTestMass_kg = 20000.0;

// The target coefficients plausibility() refuses outside (errors) or questions (warnings), in metric units;
// config translates them for a target typed in US units (config::in_us_units). F0 at least 0 (CFR 86.529-98
// Figure F98-9's lightest row has A = 0), F2 from 0 (docs/standards.md §1: the aerodynamic term is
// positive) to 0.2 N/(km/h)²; the usual |F1| up to 10 N/(km/h) and F2 from 0.005 N/(km/h)² (common practice,
// no source).
inline constexpr double kMaxTargetF2_n_per_kmh2 = 0.2;
inline constexpr double kUsualTargetF1_n_per_kmh = 10.0;
inline constexpr double kUsualMinTargetF2_n_per_kmh2 = 0.005;

// m_r: as given, else from the mass in running order by the rule.
double resolved_rotating_mass_kg(const VehicleTarget& v, const MassRule& rule);

// Plausibility, every problem at once. F0 / (TM·g) outside 0.004–0.03 (common practice, no source) is a
// warning naming the likely unit mistake; negative F2 is an error (docs/standards.md §1: the aerodynamic term
// is positive).
Problems plausibility(const VehicleTarget& v);

}  // namespace loadtrim::core
