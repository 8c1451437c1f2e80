#include "controller/cell.hpp"

#include <cmath>

namespace loadtrim::controller {

using core::num;

core::Problems check_identity(const CellConfig& cell, const ControllerInfo& info) {
  core::Problems ps;
  // Each comparison states what passes, so that a NaN (from the controller or the file) fails it.
  if (!(std::abs(info.roller_diameter_m - cell.roller_diameter_m) <= cell.roller_diameter_tolerance_m))
    ps.push_back({core::Problem::Severity::error, "dyno.roller_diameter_m",
                  "the controller reports " + num(info.roller_diameter_m) + " m, the cell file says " +
                      num(cell.roller_diameter_m) + " m (± " + num(cell.roller_diameter_tolerance_m) +
                      " m)"});
  if (!(std::abs(info.base_inertia_kg - cell.base_inertia_kg) <= cell.base_inertia_tolerance_kg))
    ps.push_back({core::Problem::Severity::error, "dyno.base_inertia_kg",
                  "the controller reports " + num(info.base_inertia_kg) + " kg, the cell file says " +
                      num(cell.base_inertia_kg) + " kg (± " + num(cell.base_inertia_tolerance_kg) + " kg)"});
  if (!(info.max_speed_kmh >= cell.max_speed_kmh))
    ps.push_back({core::Problem::Severity::error, "limits.max_speed_kmh",
                  "is " + num(cell.max_speed_kmh) + " km/h, above the controller's own limit of " +
                      num(info.max_speed_kmh) + " km/h"});
  return ps;
}

}  // namespace loadtrim::controller
