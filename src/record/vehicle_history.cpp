#include "record/vehicle_history.hpp"

#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

#include "record/session_folder.hpp"

namespace loadtrim::record {

namespace fs = std::filesystem;

namespace {
// The record format's road-load members (session::to_json writes the same; events_test checks that a history
// file reads back through session::road_load_from_json). record/ lies below session/, so it spells them here.
nlohmann::json road_load_json(const core::RoadLoad& c) {
  return {{"f0_n", c.f0_n}, {"f1_n_per_kmh", c.f1_n_per_kmh}, {"f2_n_per_kmh2", c.f2_n_per_kmh2}};
}
core::RoadLoad road_load_of(const nlohmann::json& j) {
  return {j.at("f0_n").get<double>(), j.at("f1_n_per_kmh").get<double>(),
          j.at("f2_n_per_kmh2").get<double>()};
}
}  // namespace

std::string vehicle_history_file(const std::string& dir, const std::string& cell_name,
                                 const std::string& vehicle_id) {
  return (fs::path(dir) / identity_name(cell_name) / (safe_name(vehicle_id) + ".json")).string();
}

std::optional<core::HistoryEntry> load_vehicle_history(const std::string& file, std::string* error) {
  std::ifstream in(file);
  if (!in) return std::nullopt;
  try {
    const auto j = nlohmann::json::parse(in);
    core::HistoryEntry h;
    h.utc = j.at("utc").get<std::string>();
    h.target = road_load_of(j.at("target"));
    h.final_set = road_load_of(j.at("final_set"));
    return h;
  } catch (const std::exception& e) {
    if (error) *error = e.what();
    return std::nullopt;
  }
}

bool save_vehicle_history(const std::string& file, const std::string& vehicle_id, const std::string& session,
                          const core::RoadLoad& target, const core::RoadLoad& final_set, std::string& error) {
  std::error_code ec;
  fs::create_directories(fs::path(file).parent_path(), ec);
  const nlohmann::json j = {{"utc", utc_now()},
                            {"vehicle", vehicle_id},
                            {"session", session},
                            {"target", road_load_json(target)},
                            {"final_set", road_load_json(final_set)}};
  return write_durable(file, j.dump(2) + "\n", error);
}

}  // namespace loadtrim::record
