#include "record/vehicle_history.hpp"

#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

#include "record/event_log.hpp"
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
    if (j.contains("measured")) h.measured = road_load_from_json(j.at("measured"));
    if (j.contains("warm_up")) h.warm_up = warm_up_from_json(j.at("warm_up"));
    return h;
  } catch (const std::exception& e) {
    if (error) *error = e.what();
    return std::nullopt;
  }
}

bool save_vehicle_history(const std::string& file, const std::string& vehicle_id, const std::string& session,
                          const core::RoadLoad& target, const core::RoadLoad& final_set, std::string& error,
                          const std::optional<core::RoadLoad>& measured,
                          const std::optional<core::WarmUpRecord>& warm_up) {
  std::error_code ec;
  fs::create_directories(fs::path(file).parent_path(), ec);
  nlohmann::json j = {{"utc", utc_now()},
                      {"vehicle", vehicle_id},
                      {"session", session},
                      {"target", road_load_json(target)},
                      {"final_set", road_load_json(final_set)}};
  if (measured) j["measured"] = road_load_json(*measured);
  if (warm_up)
    j["warm_up"] = {{"speed_kmh", warm_up->speed_kmh}, {"windows", warm_up_windows_json(warm_up->windows)}};
  return write_durable(file, j.dump(2) + "\n", error);
}

nlohmann::json warm_up_windows_json(const std::vector<core::DriftPoint>& windows) {
  nlohmann::json out = nlohmann::json::array();
  for (const auto& w : windows) out.push_back({{"t_s", w.t_s}, {"force_n", w.force_n}});
  return out;
}

std::optional<core::WarmUpRecord> warm_up_from_json(const nlohmann::json& r) {
  if (!r.is_object() || !r.contains("windows") || !r["windows"].is_array() || !r.contains("speed_kmh") ||
      !r["speed_kmh"].is_number())
    return std::nullopt;
  core::WarmUpRecord out;
  out.speed_kmh = r["speed_kmh"].get<double>();
  for (const auto& w : r["windows"]) {
    if (!w.is_object() || !w.contains("t_s") || !w.contains("force_n") || !w["t_s"].is_number() ||
        !w["force_n"].is_number())
      return std::nullopt;
    out.windows.push_back({w["t_s"].get<double>(), w["force_n"].get<double>()});
  }
  return out;
}

std::optional<core::WarmUpRecord> initial_warm_up_from_record(const nlohmann::json& r) {
  if (!r.is_object() || !r.contains("initial") || !r["initial"].is_boolean() || !r["initial"].get<bool>())
    return std::nullopt;
  return warm_up_from_json(r);
}

std::optional<core::WarmUpRecord> first_warm_up_of(const std::string& folder) {
  std::vector<nlohmann::json> records;
  read_log((fs::path(folder) / "events.jsonl").string(), &records);
  for (const auto& r : records)
    if (r.is_object() && r.contains("type") && r["type"] == "warm_up") return initial_warm_up_from_record(r);
  return std::nullopt;
}

}  // namespace loadtrim::record
