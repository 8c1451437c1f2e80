// Loaders for the input files: standard profiles (config/profiles), vehicle targets (samples/targets) and
// simulator truths (samples/truths). Each validates the whole file and throws InputError listing every
// problem with file, key, line and allowed range; warnings come back to the caller to show.
#pragma once

#include <string>
#include <vector>

#include "core/dyno_checks.hpp"
#include "core/problem.hpp"
#include "core/profile.hpp"
#include "core/vehicle.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::config {

core::Profile load_profile(const std::string& path, core::Problems* warnings = nullptr);
// `profile_names`, when given: the names a target's `profile` may give as a bare name (the files of
// config/profiles); another bare name is an error naming them. A path (with '/' or ending in .toml) is not
// checked here.
core::VehicleTarget load_target(const std::string& path, core::Problems* warnings = nullptr,
                                const std::vector<std::string>& profile_names = {});
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

// The range of each road-load coefficient a target file may give, in the order f0 f1 f2 ([target] and
// [initial_set]: N, N/(km/h), N/(km/h)²) and A B C ([target_us] and [initial_set_us]: lbf, lbf/mph,
// lbf/mph²). `loadtrim target --metric` and `--us` check the coefficients typed against the same ranges.
struct CoefficientRange {
  const char* key;   // in the file's table
  const char* name;  // as the operator gives it: f0, f1, f2 or A, B, C
  double lo, hi;
  const char* unit;
};
inline constexpr CoefficientRange kMetricCoefficients[3] = {{"f0_n", "f0", -5000.0, 5000.0, "N"},
                                                            {"f1_n_per_kmh", "f1", -50.0, 50.0, "N/(km/h)"},
                                                            {"f2_n_per_kmh2", "f2", -1.0, 1.0, "N/(km/h)²"}};
// The US ranges are the metric ones converted with the exact NIST SP 811 factors (core/units.hpp) and rounded
// inward by us_bound: ±5000 N is ±1124.04 lbf, ±50 N/(km/h) ±18.0897 lbf/mph, ±1 N/(km/h)² ±0.582252
// lbf/mph² (config_test checks each against us_bound of its metric range).
inline constexpr CoefficientRange kUsCoefficients[3] = {
    {"a_lbf", "A", -1124.04, 1124.04, "lbf"},
    {"b_lbf_per_mph", "B", -18.0897, 18.0897, "lbf/mph"},
    {"c_lbf_per_mph2", "C", -0.582252, 0.582252, "lbf/mph²"}};

// A bound of a range in a US unit, from the metric bound the tool enforces converted exactly: rounded to 6
// significant digits towards the inside of the range (a lower bound up, an upper bound down), so that the
// range a message prints (core::num, 6 significant digits) is the range checked, and every value inside it
// also passes the metric check. At 6 digits a value typed with up to 6 significant digits is accepted exactly
// when the metric check accepts it: the exact edge converted and rounded to the nearest 5 digits (6.2137 mph
// for 10 km/h) passes, where 4 digits (6.213) would refuse it.
double us_bound(double converted, bool lower);

// The findings of core::plausibility (and core::check_target) on the coefficients of a target the operator
// gave in US units, said in those units: a finding on target.f0_n, f1_n_per_kmh or f2_n_per_kmh2 is named
// `names[0..2]` (the US keys, "target_us.a_lbf", or the options, "--us A") and its range is in lbf, lbf/mph,
// lbf/mph², the metric bounds converted (us_bound). C above that printed bound is refused here as well, so
// what is printed is what is checked. `typed`: the coefficients as given. Other findings pass unchanged.
core::Problems in_us_units(const core::Problems& metric_findings, const core::RoadLoadUs& typed,
                           const std::string (&names)[3]);

// Finds a profile by name in a directory of profiles (name.toml), for a target's `profile = "..."`.
std::string profile_path(const std::string& profiles_dir, const std::string& name);

}  // namespace loadtrim::config
