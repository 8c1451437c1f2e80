#include "record/vehicle_history.hpp"

#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

#include "record/road_load_json.hpp"
#include "record/session_folder.hpp"

namespace loadtrim::record {

namespace fs = std::filesystem;

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
    h.target = road_load_from_json(j.at("target"));
    h.final_set = road_load_from_json(j.at("final_set"));
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
