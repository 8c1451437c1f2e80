#pragma once
// The one JSON spelling of a road-load curve in every record, history file and result the tool writes:
// {"f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"} (N, N/(km/h), N/(km/h)²). Everything that writes or reads a curve
// as JSON goes through these, so the member names are spelt once.
#include <array>
#include <nlohmann/json_fwd.hpp>
#include <string_view>

#include "core/road_load.hpp"

namespace loadtrim::record {

// The members, in the order f0, f1, f2 (for readers that trace a value to its record path).
inline constexpr std::array<std::string_view, 3> kRoadLoadMembers{"f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"};

nlohmann::json road_load_json(const core::RoadLoad& c);
// Its inverse; throws nlohmann::json::exception when a member is missing or not a number.
core::RoadLoad road_load_from_json(const nlohmann::json& j);
// True when j is an object holding the three members as numbers.
bool is_road_load_json(const nlohmann::json& j);

// The member of a coast-down record that holds its measured coefficients (As, Bs, Cs; the standard's
// "simulated"): "measured", or "simulated" in folders written before the name was unified.
std::string_view measured_member(const nlohmann::json& coastdown_record);

}  // namespace loadtrim::record
