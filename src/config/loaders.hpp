// Loaders for the input files: standard profiles (config/profiles), vehicle targets (samples/targets) and
// simulator truths (samples/truths). Each validates the whole file and throws InputError listing every
// problem with file, key, line and allowed range; warnings come back to the caller to show.
#pragma once

#include <string>

#include "core/dyno_checks.hpp"
#include "core/problem.hpp"
#include "core/profile.hpp"
#include "core/vehicle.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::config {

core::Profile load_profile(const std::string& path, core::Problems* warnings = nullptr);
core::VehicleTarget load_target(const std::string& path, core::Problems* warnings = nullptr);
physics::Truth load_truth(const std::string& path, core::Problems* warnings = nullptr);
// The dyno checks' profile (config/checks/*.toml).
core::CheckProfile load_check_profile(const std::string& path, core::Problems* warnings = nullptr);
core::CheckProfile parse_check_profile(const std::string& text, const std::string& name,
                                       core::Problems* warnings = nullptr);

// The same from text in memory (tests, fuzzing); `name` is used as the file name in messages.
core::Profile parse_profile(const std::string& text, const std::string& name,
                            core::Problems* warnings = nullptr);
core::VehicleTarget parse_target(const std::string& text, const std::string& name,
                                 core::Problems* warnings = nullptr);
physics::Truth parse_truth(const std::string& text, const std::string& name,
                           core::Problems* warnings = nullptr);

// Finds a profile by name in a directory of profiles (name.toml), for a target's `profile = "..."`.
std::string profile_path(const std::string& profiles_dir, const std::string& name);

}  // namespace loadtrim::config
