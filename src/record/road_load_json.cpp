#include "record/road_load_json.hpp"

#include <nlohmann/json.hpp>
#include <string>

namespace loadtrim::record {

namespace {
const std::string kF0(kRoadLoadMembers[0]), kF1(kRoadLoadMembers[1]), kF2(kRoadLoadMembers[2]);
}  // namespace

nlohmann::json road_load_json(const core::RoadLoad& c) {
  return {{kF0, c.f0_n}, {kF1, c.f1_n_per_kmh}, {kF2, c.f2_n_per_kmh2}};
}

core::RoadLoad road_load_from_json(const nlohmann::json& j) {
  return {j.at(kF0).get<double>(), j.at(kF1).get<double>(), j.at(kF2).get<double>()};
}

bool is_road_load_json(const nlohmann::json& j) {
  if (!j.is_object()) return false;
  for (const std::string* k : {&kF0, &kF1, &kF2})
    if (!j.contains(*k) || !j.at(*k).is_number()) return false;
  return true;
}

std::string_view measured_member(const nlohmann::json& r) {
  return r.is_object() && !r.contains("measured") && r.contains("simulated") ? "simulated" : "measured";
}

}  // namespace loadtrim::record
