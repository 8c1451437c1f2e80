#include "record/vehicle_history.hpp"

#include <cmath>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

#include "core/envelope.hpp"
#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/road_load_json.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"

namespace loadtrim::record {

namespace fs = std::filesystem;

namespace {

// A history entry is under 2 kB, and under 20 kB with the most warm-up windows a 4-hour warm-up
// (warm_up.duration_s's highest) records; a file larger than 1 MiB is not one and is not read (common
// practice, no source).
constexpr std::uint64_t kMaxVehicleHistoryBytes = std::uint64_t{1} << 20;

// The file named `name` in the cell's folder under the history folder `dir`.
std::string in_cell_folder(const std::string& dir, const std::string& cell_name, const std::string& name) {
  return (fs::path(dir) / identity_name(cell_name) / (name + ".json")).string();
}

}  // namespace

std::string vehicle_history_file(const std::string& dir, const std::string& cell_name,
                                 const std::string& vehicle_id) {
  // An id a file name holds as it is keeps its name; any other gets a short hash of it after "~", a character
  // safe_name never keeps, so no id's name can be another's.
  const std::string safe = safe_name(vehicle_id);
  return in_cell_folder(dir, cell_name,
                        safe == vehicle_id ? safe : safe + "~" + sha256_hex(vehicle_id).substr(0, 8));
}

std::string vehicle_history_file_to_read(const std::string& dir, const std::string& cell_name,
                                         const std::string& vehicle_id) {
  const std::string now = vehicle_history_file(dir, cell_name, vehicle_id);
  const std::string before = in_cell_folder(dir, cell_name, safe_name(vehicle_id));
  std::error_code ec;
  return !fs::exists(now, ec) && fs::exists(before, ec) ? before : now;
}

std::optional<core::HistoryEntry> load_vehicle_history(const std::string& file, std::string* error,
                                                       const std::string& vehicle_id) {
  std::error_code ec;
  if (!fs::exists(file, ec)) return std::nullopt;
  auto refuse = [&](const std::string& why) -> std::optional<core::HistoryEntry> {
    if (error) *error = why;
    return std::nullopt;
  };
  const InsideFile f = read_file_whole(file, kMaxVehicleHistoryBytes);
  if (f.status == InsideStatus::missing) return std::nullopt;
  if (f.status != InsideStatus::ok) return refuse(f.error);
  try {
    const auto j = nlohmann::json::parse(f.content);
    core::HistoryEntry h;
    h.utc = j.at("utc").get<std::string>();
    if (!vehicle_id.empty()) {
      const std::string written = j.at("vehicle").get<std::string>();
      if (written != vehicle_id)
        return refuse("the entry is for vehicle \"" + written + "\", not \"" + vehicle_id + "\"");
    }
    h.target = road_load_from_json(j.at("target"));
    h.final_set = road_load_from_json(j.at("final_set"));
    if (j.contains("measured")) h.measured = road_load_from_json(j.at("measured"));
    // The losses the entry gives (a file without "measured" gives none from it).
    const std::pair<const char*, core::RoadLoad> losses[] = {
        {"target − final set", h.target - h.final_set},
        {"measured − final set", h.measured ? *h.measured - h.final_set : core::RoadLoad{}}};
    // JSON holds no infinity, but two huge finite values can make one: each loss is checked too.
    for (const core::RoadLoad& c :
         {h.target, h.final_set, h.measured.value_or(core::RoadLoad{}), losses[0].second, losses[1].second})
      if (!c.finite()) return refuse("a coefficient, or a loss computed from them, is not a finite number");
    // The same limit the envelope puts on every setting written (docs/safety.md): a loss no credible vehicle
    // has is a damaged or foreign file, not an estimate.
    const double limit_n = core::EnvelopeLimits{}.max_vehicle_loss_n;
    for (const auto& [name, loss] : losses)
      if (const core::CurvePoint m = core::max_abs_on(loss, 0.0, 130.0); !(std::abs(m.force_n) <= limit_n))
        return refuse(std::string("its loss (") + name + ") is " + core::num(m.force_n) + " N at " +
                      core::num(m.speed_kmh) + " km/h, beyond the vehicle-loss limit of ±" +
                      core::num(limit_n) + " N");
    if (j.contains("warm_up")) h.warm_up = warm_up_from_json(j.at("warm_up"));
    return h;
  } catch (const std::exception& e) {
    return refuse(e.what());
  }
}

bool save_vehicle_history(const std::string& file, const std::string& vehicle_id, const std::string& session,
                          const core::RoadLoad& target, const core::RoadLoad& final_set, std::string& error,
                          const std::optional<core::RoadLoad>& measured,
                          const std::optional<core::WarmUpRecord>& warm_up) {
  // The history folder and the cell's folder in it, when new, are fsync'd into their parents: the entry's
  // own durable write would otherwise sit in a directory a power loss could lose.
  if (std::string err; !make_directories_durably(fs::path(file).parent_path().string(), err)) {
    error = "cannot make the history folder for " + file + ": " + err;
    return false;
  }
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
  if (!(out.speed_kmh >= 10.0 && out.speed_kmh <= 250.0)) return std::nullopt;  // warm_up.speed_kmh's range
  for (const auto& w : r["windows"]) {
    if (!w.is_object() || !w.contains("t_s") || !w.contains("force_n") || !w["t_s"].is_number() ||
        !w["force_n"].is_number())
      return std::nullopt;
    const core::DriftPoint p{w["t_s"].get<double>(), w["force_n"].get<double>()};
    // Windows in time order with finite values, as the session writes them.
    if (!std::isfinite(p.t_s) || !std::isfinite(p.force_n) ||
        (!out.windows.empty() && !(p.t_s > out.windows.back().t_s)))
      return std::nullopt;
    out.windows.push_back(p);
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
