// The vehicle history: per cell and vehicle, the target and the accepted final setting of the latest accepted
// session, which the "history" first-setting strategy (core/strategy.hpp) turns into a loss estimate. One
// JSON file per vehicle: <dir>/<identity_name(cell)>/<safe_name(vehicle id)>.json with the members utc,
// vehicle, session, target, final_set and, when known, measured (from an iterative session) and warm_up (the
// session's initial warm-up hold) (road loads as {"f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"}, the
// spelling of session::to_json; docs/records.md). Storage only: what is stored and when is the caller's.
#pragma once

#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "core/road_load.hpp"
#include "core/strategy.hpp"

namespace loadtrim::record {

// The file of a vehicle on a cell under the history folder `dir`: the id itself when a file name holds it,
// else its safe_name, "~" and a short hash of the id (two ids that differ only in characters a file name
// cannot hold, or an id spelled like another's hashed name, get two files). Written there.
std::string vehicle_history_file(const std::string& dir, const std::string& cell_name,
                                 const std::string& vehicle_id);
// The file to read: the one above, or, when it does not exist, the name earlier versions wrote (safe_name,
// which two such ids shared: its entry's `vehicle` member decides whose it is, load_vehicle_history).
std::string vehicle_history_file_to_read(const std::string& dir, const std::string& cell_name,
                                         const std::string& vehicle_id);

// The entry in `file`: nullopt when there is no file, or (with `error` set when given) when it cannot be
// read, lacks a member, or is not believable: written for another vehicle than `vehicle_id` (when given), a
// coefficient not finite, or a loss (target − final set, measured − final set) beyond the safe envelope's
// vehicle-loss limit over 0–130 km/h (core::EnvelopeLimits, 1000 N: a coarse filter of the file; the setting
// made from it still meets the envelope up to the profile's start speed before anything is written). A
// warm-up hold whose windows are not finite, not in time order or at a speed outside 10–250 km/h is left out
// (the rest of the entry reads).
std::optional<core::HistoryEntry> load_vehicle_history(const std::string& file, std::string* error = nullptr,
                                                       const std::string& vehicle_id = "");

// Writes the entry durably (creating the folders), utc = now; `measured` (the last coast-down's curve at
// final_set, given only for an iterative session) as the member "measured" and `warm_up` (the session's first
// warm-up hold) as "warm_up" {"speed_kmh", "windows": [{"t_s", "force_n"}]} when given. False with `error`
// when it cannot.
bool save_vehicle_history(const std::string& file, const std::string& vehicle_id, const std::string& session,
                          const core::RoadLoad& target, const core::RoadLoad& final_set, std::string& error,
                          const std::optional<core::RoadLoad>& measured = std::nullopt,
                          const std::optional<core::WarmUpRecord>& warm_up = std::nullopt);

// The one JSON spelling of warm-up windows, in the "warm_up" record and the history file alike:
// [{"t_s", "force_n"}, ...]; warm_up_from_json reads it back.
nlohmann::json warm_up_windows_json(const std::vector<core::DriftPoint>& windows);
// A "warm_up" record's (or the history file's "warm_up" member's) speed and windows; nullopt when it has no
// "windows" member or any window is not a pair of numbers (a record written before the windows were kept). An
// empty list is a record with no window (which the day-to-day correction does not use).
std::optional<core::WarmUpRecord> warm_up_from_json(const nlohmann::json& r);
// A "warm_up" record's hold when the record says "initial": true (the session's initial hold), else nullopt.
std::optional<core::WarmUpRecord> initial_warm_up_from_record(const nlohmann::json& r);
// The initial warm-up hold of a session folder's events.jsonl: its first "warm_up" record when that is the
// initial hold (nullopt: none, not initial, or the log cannot be read).
std::optional<core::WarmUpRecord> first_warm_up_of(const std::string& folder);

}  // namespace loadtrim::record
