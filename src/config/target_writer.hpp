// Writes a vehicle target file (the format config::load_target reads), e.g. for targets prepared from other
// forms.
#pragma once

#include <string>

#include "core/vehicle.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::config {

// The TOML text; `header` lines are written as comments at the top.
std::string target_toml(const core::VehicleTarget& v, const std::string& header);
// A simulator truth file (the format config::load_truth reads).
std::string truth_toml(const physics::Truth& t, const std::string& header);

}  // namespace loadtrim::config
