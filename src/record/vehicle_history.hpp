// The vehicle history: per cell and vehicle, the target and the accepted final setting of the latest accepted
// session, which the "history" first-setting strategy (core/strategy.hpp) turns into a loss estimate. One
// JSON file per vehicle: <dir>/<identity_name(cell)>/<safe_name(vehicle id)>.json with the members utc,
// vehicle, session, target and final_set (road loads as {"f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"}, the
// spelling of session::to_json; docs/records.md). Storage only: what is stored and when is the caller's.
#pragma once

#include <optional>
#include <string>

#include "core/road_load.hpp"
#include "core/strategy.hpp"

namespace loadtrim::record {

// The file of a vehicle on a cell under the history folder `dir`.
std::string vehicle_history_file(const std::string& dir, const std::string& cell_name,
                                 const std::string& vehicle_id);

// The entry in `file`: nullopt when there is no file, or (with `error` set when given) when it cannot be read
// or lacks a member.
std::optional<core::HistoryEntry> load_vehicle_history(const std::string& file, std::string* error = nullptr);

// Writes the entry durably (creating the folders), utc = now. False with `error` when it cannot.
bool save_vehicle_history(const std::string& file, const std::string& vehicle_id, const std::string& session,
                          const core::RoadLoad& target, const core::RoadLoad& final_set, std::string& error);

}  // namespace loadtrim::record
