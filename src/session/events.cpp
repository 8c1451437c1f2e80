// The JSON form of every event: the record format of events.jsonl (docs/session.md, docs/records.md). Each
// mapping writes exactly the members (names, JSON number kinds) earlier versions wrote, so folders written
// before and after read alike; tests/unit/events_test.cpp pins them.
#include "session/events.hpp"

#include <algorithm>
#include <cmath>

#include "record/road_load_json.hpp"
#include "record/vehicle_history.hpp"

namespace loadtrim::session {

const char* to_string(State s) {
  switch (s) {
    case State::connect:
      return "connect";
    case State::check_limits:
      return "check_limits";
    case State::set_inertia:
      return "set_inertia";
    case State::warm_up:
      return "warm_up";
    case State::write_set:
      return "write_set";
    case State::run_up:
      return "run_up";
    case State::coast_down:
      return "coast_down";
    case State::analyse:
      return "analyse";
    case State::paused:
      return "paused";
    case State::safe_stop:
      return "safe_stop";
    case State::finished:
      return "finished";
  }
  return "unknown";
}

const char* to_string(Outcome o) {
  switch (o) {
    case Outcome::accepted:
      return "accepted";
    case Outcome::not_accepted:
      return "not-accepted";
    case Outcome::refused:
      return "refused";
    case Outcome::controller_fault:
      return "controller-fault";
    case Outcome::interrupted:
      return "interrupted";
    case Outcome::record_failure:
      return "record-failure";
  }
  return "unknown";
}

bool is_final(Outcome o) {
  return o == Outcome::accepted || o == Outcome::not_accepted || o == Outcome::refused;
}
bool is_final(const std::string& r) {
  const std::optional<Outcome> o = outcome_from_string(r);
  return o && is_final(*o);
}

std::optional<Outcome> outcome_from_string(const std::string& s) {
  for (Outcome o : {Outcome::accepted, Outcome::not_accepted, Outcome::refused, Outcome::controller_fault,
                    Outcome::interrupted, Outcome::record_failure})
    if (s == to_string(o)) return o;
  return std::nullopt;
}

nlohmann::json to_json(const core::RoadLoad& c) {
  return record::road_load_json(c);
}

core::RoadLoad road_load_from_json(const nlohmann::json& j) {
  return record::road_load_from_json(j);
}

core::RoadLoad measured_of(const nlohmann::json& r) {
  return road_load_from_json(r.at(std::string(record::measured_member(r))));
}

core::RoadLoad adjust_basis_of(const nlohmann::json& r) {
  if (r.contains("adjustment")) return road_load_from_json(r.at("adjustment").at("measured"));
  return measured_of(r);
}

namespace {

nlohmann::json deviations_json(const std::vector<core::SpeedDeviation>& rows) {
  nlohmann::json out = nlohmann::json::array();
  for (const auto& d : rows)
    out.push_back({{"speed_kmh", d.speed_kmh},
                   {"target_n", d.target_n},
                   {"measured_n", d.measured_n},
                   {"deviation_n", d.deviation_n},
                   {"u_n", d.u_n},
                   {"limit_n", d.limit_n},
                   {"pass", d.pass}});
  return out;
}

// The warming anticipated in a setting (docs/standards.md §3.16): enough to recompute it (the setting is
// target − loss·(1 + ratio)) and to check the change against the curve (A·(e^(−to/τ) − e^(−from/τ))).
nlohmann::json anticipation_json(const core::Anticipation& a) {
  nlohmann::json curve = nlohmann::json::object();
  if (a.curve.ok)
    curve = {{"settled_n", a.curve.settled_n}, {"amplitude_n", a.curve.amplitude_n},
             {"tau_s", a.curve.tau_s},         {"rms_residual_n", a.curve.rms_residual_n},
             {"windows", a.curve.points},      {"tau_at_bound", a.curve.tau_at_bound}};
  else
    curve = {{"windows", a.curve.points}, {"why", a.curve.why}};
  return {{"used", a.used},
          {"change_n", a.change_n},
          {"ratio", a.ratio},
          {"from_s", a.from_s},
          {"to_s", a.to_s},
          {"aimed", a.aimed},
          {"to_last_s", a.to_last_s},
          {"epoch_s", a.epoch_s},
          {"loss", to_json(a.loss)},
          {"curve", curve},
          {"why", a.why}};
}

nlohmann::json dropped_json(const std::vector<core::DroppedSpeed>& dropped) {
  nlohmann::json a = nlohmann::json::array();
  for (const auto& d : dropped) a.push_back({{"speed_kmh", d.speed_kmh}, {"why", d.why}});
  return a;
}

nlohmann::json common_json(const ev::StartCommon& c) {
  return {{"vehicle", c.vehicle},
          {"cell", c.cell},
          {"profile", c.profile},
          {"dyno_checks", c.dyno_checks},
          {"operator", c.operator_id},
          {"data_root", {{"path", c.data_root_path}, {"from", c.data_root_from}}},
          {"signing_key", c.signing_key},
          {"confirmation", c.confirmation},
          {"target", to_json(c.target)},
          {"vehicle_description", c.vehicle_description},
          {"test_mass_kg", c.test_mass_kg},
          {"standard", c.standard},
          {"tolerance_n", c.tolerance_n},
          {"reference_speeds_kmh", c.reference_speeds_kmh},
          {"dropped_reference_speeds", dropped_json(c.dropped_reference_speeds)},
          {"software", {{"version", c.software_version}, {"build", c.software_build}}},
          {"operator_note", c.operator_note},
          {"first_setting_requested", c.first_setting_requested},
          {"history_file", c.history_file},
          {"history_available", c.history_available}};
}

// One overload per event: the record's data. Members are those earlier versions wrote, with their JSON kinds
// (an int stays an int, a size stays unsigned), because the report and resume read them back.
struct Mapper {
  nlohmann::json operator()(const ev::SessionStarted& e) const {
    nlohmann::json j = common_json(e.common);
    j["method"] = e.method;
    j["files"] = e.files;
    j["overrides"] = {{"port", e.port_override}, {"device", e.device_override}};
    j["inprocess"] = e.inprocess;
    j["combination_warnings"] = e.combination_warnings;
    j["two_wheel_drive_mode"] = e.two_wheel_drive_mode;
    j["cell_lock"] = {{"endpoint", e.cell_lock_endpoint}, {"stale_lock_taken_over", e.stale_lock_taken_over}};
    return j;
  }
  nlohmann::json operator()(const ev::ResumeStarted& e) const {
    nlohmann::json j = common_json(e.common);
    j["records_before"] = e.records_before;
    j["completed_coastdowns"] = e.completed_coastdowns;
    j["folder_verified"] = e.folder_verified;
    return j;
  }
  nlohmann::json operator()(const ev::StateChanged& e) const {
    return {{"from", to_string(e.from)}, {"to", to_string(e.to)}, {"why", e.why}};
  }
  nlohmann::json operator()(const ev::ControllerIdentified& e) const {
    const auto& i = e.info;
    return {{"name", i.name},
            {"protocol_version", i.protocol_version},
            {"capabilities", i.capabilities},
            {"roller_diameter_m", i.roller_diameter_m},
            {"base_inertia_kg", i.base_inertia_kg},
            {"max_speed_kmh", i.max_speed_kmh},
            {"max_force_n", i.max_force_n}};
  }
  nlohmann::json operator()(const ev::ControllerStateOnConnect& e) const {
    return {{"fault", e.fault}, {"speed_kmh", e.speed_kmh}, {"mode", controller::to_string(e.mode)}};
  }
  nlohmann::json operator()(const ev::Refused& e) const { return {{"why", e.why}}; }
  nlohmann::json operator()(const ev::Limits& e) const {
    return {{"speed_limit_kmh", e.speed_limit_kmh},
            {"start_speed_kmh", e.start_speed_kmh},
            {"end_speed_kmh", e.end_speed_kmh},
            {"cell_max_speed_kmh", e.cell_max_speed_kmh},
            {"vehicle_max_speed_kmh", e.vehicle_max_speed_kmh},
            {"controller_max_speed_kmh", e.controller_max_speed_kmh},
            {"max_motoring_s", e.max_motoring_s}};
  }
  nlohmann::json operator()(const ev::InertiaSet& e) const {
    return {{"test_mass_kg", e.test_mass_kg},    {"rotating_mass_kg", e.rotating_mass_kg},
            {"force_mass_kg", e.force_mass_kg},  {"inertia_kg", e.inertia_kg},
            {"axles", core::to_string(e.axles)}, {"read_back", "matches"}};
  }
  nlohmann::json operator()(const ev::WarmUpStarted& e) const {
    return {{"speed_kmh", e.speed_kmh},
            {"duration_s", e.duration_s},
            {"loss_map_planned_s", e.loss_map_planned_s},
            {"motoring_since_s", e.motoring_since_s}};
  }
  nlohmann::json operator()(const ev::WarmUpHeld& e) const {
    return {{"speed_kmh", e.speed_kmh},
            {"held_s", e.held_s},
            {"stability", e.stability},
            {"stability_threshold_n", e.stability_threshold_n},
            {"last_window_force_n",
             e.last_window_force_n ? nlohmann::json(*e.last_window_force_n) : nlohmann::json(nullptr)},
            {"windows", record::warm_up_windows_json(e.windows)},
            {"initial", e.initial}};
  }
  nlohmann::json operator()(const ev::LossMapSkipped& e) const { return {{"why", e.why}}; }
  nlohmann::json operator()(const ev::LossMapPointSkipped& e) const {
    return {{"speed_kmh", e.speed_kmh}, {"why", e.why}};
  }
  nlohmann::json operator()(const ev::LossMapPoint& e) const {
    return {{"speed_kmh", e.point.speed_kmh},
            {"force_n", e.point.force_n},
            {"force_sd_n", e.point.force_sd_n},
            {"samples", e.point.samples}};
  }
  nlohmann::json operator()(const ev::LossMapCoastStarted& e) const {
    return {{"from_kmh", e.from_kmh}, {"to_kmh", e.to_kmh}, {"set", to_json(e.set)}};
  }
  nlohmann::json operator()(const ev::LossMapCoast& e) const {
    nlohmann::json pts = nlohmann::json::array();
    for (const auto& x : e.points)
      pts.push_back({{"speed_kmh", x.speed_kmh},
                     {"band_force_n", x.band_force_n},
                     {"set_force_n", x.set_force_n},
                     {"coasting_loss_n", x.coasting_loss_n}});
    return {{"from_kmh", e.from_kmh},
            {"to_kmh", e.to_kmh},
            {"set", to_json(e.set)},
            {"points", pts},
            {"note", e.note}};
  }
  nlohmann::json operator()(const ev::WarmUpEnded&) const { return nlohmann::json::object(); }
  nlohmann::json operator()(const ev::FirstSetting& e) const {
    nlohmann::json inputs = nlohmann::json::object();
    if (e.history_utc) inputs["history_utc"] = *e.history_utc;
    if (e.loss_map_fit) inputs["loss_map_fit"] = to_json(*e.loss_map_fit);
    if (e.loss_map_residual_sd_n) inputs["loss_map_residual_sd_n"] = *e.loss_map_residual_sd_n;
    if (e.loss) inputs["loss"] = to_json(*e.loss);
    if (e.coast_correction) {
      const core::CoastCorrection& k = *e.coast_correction;
      inputs["coast_correction"] = {{"used", k.ok},
                                    {"points", k.points},
                                    {"d0_n", k.d0_n},
                                    {"d2_n_per_kmh2", k.d2_n_per_kmh2},
                                    {"residual_sd_n", k.residual_sd_n},
                                    {"why", k.why}};
    }
    if (e.anticipation) inputs["anticipation"] = anticipation_json(*e.anticipation);
    if (e.day_scale) {
      const core::DayScale& d = *e.day_scale;
      inputs["history_day_scale"] = {{"used", d.used},
                                     {"why", d.why},
                                     {"ratio", d.ratio},
                                     {"at_s", d.at_s},
                                     {"then_n", d.then_n},
                                     {"now_n", d.now_n},
                                     {"windows_then", d.windows_then},
                                     {"windows_now", d.windows_now}};
    }
    if (e.history) {
      const core::HistoryBasis& b = *e.history;
      nlohmann::json pairs = nlohmann::json::array();
      for (const auto& p : b.pairs)
        pairs.push_back({{"vehicle", p.vehicle},
                         {"this_cell", {{"session", p.here.id}, {"folder", p.here.folder}}},
                         {"other_cell", {{"session", p.there.id}, {"folder", p.there.folder}}}});
      nlohmann::json correction = to_json(b.correction);
      correction["pairs"] = b.pairs.size();
      inputs["history"] = {{"source", b.source},
                           {"where", b.where},
                           {"session", b.session_id},
                           {"folder", b.session_folder},
                           {"cell", b.source_cell},
                           {"same_cell", b.same_cell},
                           {"pairs_available", b.pairs_available},
                           {"pairs", pairs},
                           {"correction", correction},
                           {"note", b.note}};
    }
    nlohmann::json out = {{"requested", e.requested},
                          {"strategy", e.strategy},
                          {"fallback_reason", e.fallback_reason},
                          {"set", to_json(e.set)},
                          {"inputs", inputs}};
    if (!e.history_lookup.is_null()) out["history_lookup"] = e.history_lookup;
    return out;
  }
  nlohmann::json operator()(const ev::EnvelopeRefused& e) const {
    return {{"run", e.run}, {"set", to_json(e.set)}, {"why", e.why}};
  }
  nlohmann::json operator()(const ev::SetWritten& e) const {
    return {{"run", e.run}, {"set", to_json(e.set)}, {"read_back", "matches"}, {"iteration", e.iteration}};
  }
  nlohmann::json operator()(const ev::CoastdownStarted& e) const {
    return {{"run", e.run}, {"set", to_json(e.set)}, {"start_speed_kmh", e.start_speed_kmh}};
  }
  nlohmann::json operator()(const ev::ReleaseTiming& e) const {
    nlohmann::json j = {{"rule", e.rule}, {"gap_s", e.gap_s}, {"within", e.within}};
    if (!e.within) j["action"] = e.action;
    return j;
  }
  nlohmann::json operator()(const ev::PassesReset& e) const {
    return {{"run", e.run}, {"passes", e.passes}, {"why", e.why}};
  }
  nlohmann::json operator()(const ev::WarmUpDrift& e) const {
    nlohmann::json j = {{"run", e.run},         {"since_warm_up_s", e.t_s},
                        {"rule", e.rule},       {"threshold_n", e.threshold_n},
                        {"verdict", e.verdict}, {"points", e.curve.points}};
    if (e.curve.ok) {
      j["remaining_drift_n"] = e.curve.remaining_drift_n(e.t_s);
      j["settled_n"] = e.curve.settled_n;
      j["amplitude_n"] = e.curve.amplitude_n;
      j["tau_s"] = e.curve.tau_s;
      j["tau_at_bound"] = e.curve.tau_at_bound;
      j["rms_residual_n"] = e.curve.rms_residual_n;
    } else {
      j["why"] = e.curve.why;
    }
    if (e.fully_warm) {
      const auto& o = *e.fully_warm;
      nlohmann::json fw = {{"predicted", o.predicted}, {"why", o.why}, {"within", o.within}};
      if (o.predicted) {
        fw["change_n"] = o.change_n;
        fw["from_s"] = o.from_s;
        fw["speed_kmh"] = o.speed_kmh;
        nlohmann::json rows = nlohmann::json::array();
        for (const auto& r : o.rows)
          rows.push_back({{"speed_kmh", r.speed_kmh},
                          {"deviation_n", r.deviation_n},
                          {"limit_n", r.limit_n},
                          {"low_n", r.low_n},
                          {"high_n", r.high_n},
                          {"within", r.within}});
        fw["rows"] = std::move(rows);
        if (!o.within) fw["aimable"] = o.aimable;
        if (!o.not_aimable_why.empty()) fw["not_aimable_why"] = o.not_aimable_why;
        if (!o.not_adjusted_why.empty()) fw["not_adjusted_why"] = o.not_adjusted_why;
        if (o.aimable) fw["warm_setting"] = to_json(o.warm_setting);
      }
      j["fully_warm"] = std::move(fw);
    }
    return j;
  }
  nlohmann::json operator()(const ev::RunUpPlan& e) const {
    nlohmann::json j = {{"run_up", core::to_string(e.run_up)}, {"rule", e.rule}};
    if (!e.release_detection.empty()) j["release_detection"] = e.release_detection;
    return j;
  }
  nlohmann::json operator()(const ev::DriverPromptShown& e) const {
    return {
        {"run", e.run}, {"prompt", core::to_string(e.prompt)}, {"speed_kmh", e.speed_kmh}, {"text", e.text}};
  }
  nlohmann::json operator()(const ev::RunUpChecked& e) const {
    nlohmann::json j = {{"run", e.run},
                        {"ending", e.ending},
                        {"start_speed_kmh", e.start_speed_kmh},
                        {"peak_speed_kmh", e.peak_speed_kmh},
                        {"detected_by", e.detected_by},
                        {"min_av_m2ps3", e.min_av_m2ps3},
                        {"meets", e.meets},
                        {"run_up_s", e.run_up_s}};
    if (e.figure_ok) {
      j["mean_av_m2ps3"] = e.mean_av_m2ps3;
      j["peak_av_m2ps3"] = e.peak_av_m2ps3;
    }
    if (e.ending == "coasted" || e.ending == "early_release") j["release_speed_kmh"] = e.release_speed_kmh;
    if (e.ending == "coasted") j["release_delay_s"] = e.release_delay_s;
    if (!e.why.empty()) j["why"] = e.why;
    return j;
  }
  nlohmann::json operator()(const ev::ConsecutiveTiming& e) const {
    return {{"rule", e.rule}, {"gap_since_last_coast_s", e.gap_since_last_coast_s}};
  }
  nlohmann::json operator()(const ev::Coastdown& e) const { return to_json(e.record); }
  nlohmann::json operator()(const ev::CoastdownDiscarded& e) const {
    nlohmann::json j = {{"run", e.run}, {"why", e.why}};
    if (e.next_set) j["next_set"] = to_json(*e.next_set);
    if (e.note) j["note"] = *e.note;
    return j;
  }
  nlohmann::json operator()(const ev::Diverging& e) const { return {{"run", e.run}, {"why", e.why}}; }
  nlohmann::json operator()(const ev::LinkLost& e) const {
    return {{"why", e.why},
            {"incident", e.incident},
            {"note", "the controller's watchdog takes the rollers to a stop"}};
  }
  nlohmann::json operator()(const ev::Reconnect& e) const {
    nlohmann::json j = {{"attempt", e.attempt}, {"of", e.of}, {"message", e.message}};
    if (e.ok) j["ok"] = *e.ok;
    return j;
  }
  nlohmann::json operator()(const ev::NotSettled& e) const {
    return {{"when", e.when}, {"message", e.message}};
  }
  nlohmann::json operator()(const ev::FaultCleared& e) const {
    return {
        {"fault", e.fault}, {"when", e.when}, {"rollers", "stopped"}, {"ok", e.ok}, {"message", e.message}};
  }
  nlohmann::json operator()(const ev::LinkRestored& e) const {
    return {{"attempt", e.attempt}, {"rollers", "stopped"}};
  }
  nlohmann::json operator()(const ev::Fault& e) const {
    return {{"during", e.during},
            {"message", e.message},
            {"status", controller::to_string(e.status)},
            {"code", e.code}};
  }
  nlohmann::json operator()(const ev::Interrupted& e) const { return {{"during", e.during}}; }
  nlohmann::json operator()(const ev::Paused& e) const {
    return {{"run", e.run},
            {"during", e.during},
            {"by", e.by},
            {"why", e.why},
            {"source", e.source},
            {"rollers_stopped", e.rollers_stopped},
            {"max_pause_s", e.max_pause_s}};
  }
  nlohmann::json operator()(const ev::Continued& e) const {
    return {{"run", e.run},           {"by", e.by},
            {"why", e.why},           {"source", e.source},
            {"paused_s", e.paused_s}, {"rewarm_s", e.rewarm_s}};
  }
  nlohmann::json operator()(const ev::Resumed& e) const {
    nlohmann::json j = {{"completed_coastdowns", e.completed_coastdowns}, {"note", e.note}};
    if (const auto* c = std::get_if<ev::Resumed::Continued>(&e.how)) {
      j["unusable"] = c->unusable;
      j["next_set"] = to_json(c->next_set);
      j["discarded_run"] = c->discarded_run ? nlohmann::json(*c->discarded_run) : nlohmann::json(nullptr);
    } else {
      const auto& f = std::get<ev::Resumed::Finalised>(e.how);
      j["rollers_stopped"] = f.rollers_stopped;
      j["stop_note"] = f.stop_note;
    }
    return j;
  }
  nlohmann::json operator()(const ev::SafeStopReconnect& e) const {
    return {{"ok", e.ok}, {"message", e.message}};
  }
  nlohmann::json operator()(const ev::SafeStop& e) const {
    nlohmann::json j = {{"how", e.how}, {"rollers_stopped", e.rollers_stopped}};
    if (e.seen) {
      j["speed_kmh"] = e.seen->speed_kmh;
      j["mode"] = controller::to_string(e.seen->mode);
      j["standstill_threshold_kmh"] = e.seen->standstill_threshold_kmh;
      j["note"] = e.seen->note;
    }
    return j;
  }
  nlohmann::json operator()(const ev::ObserverDropped& e) const { return {{"why", e.why}}; }
  nlohmann::json operator()(const ev::ControllerWarning& e) const {
    return {{"code", e.code}, {"text", e.text}, {"count", e.count}};
  }
  nlohmann::json operator()(const ev::Finished& e) const { return to_json(e.summary); }

  nlohmann::json operator()(const ev::CheckStarted& e) const {
    nlohmann::json j = {{"check", e.check},
                        {"cell", e.cell},
                        {"files", e.files},
                        {"confirmation", e.confirmation},
                        {"note", e.note},
                        {"vehicle_on_rollers", false},
                        {"operator", e.operator_id},
                        {"signing_key", e.signing_key}};
    if (e.stored_parasitic_curve)
      j["stored_parasitic_curve"] = {{"curve", to_json(*e.stored_parasitic_curve)},
                                     {"utc", e.stored_parasitic_utc}};
    return j;
  }
  nlohmann::json operator()(const ev::CheckIdentified& e) const {
    return {{"name", e.name},
            {"roller_diameter_m", e.roller_diameter_m},
            {"base_inertia_kg", e.base_inertia_kg},
            {"problems", e.problems}};
  }
  nlohmann::json operator()(const ev::FreeCoastStarted& e) const {
    return {{"from_kmh", e.from_kmh}, {"simulation", "off (free coast of the empty rollers)"}};
  }
  nlohmann::json operator()(const ev::CheckCoastStarted& e) const {
    return {{"run", e.run}, {"inertia_kg", e.inertia_kg}, {"set", to_json(e.set)}, {"from_kmh", e.from_kmh}};
  }
  nlohmann::json operator()(const ev::ForceApplied& e) const {
    return {
        {"force_n", e.force_n}, {"stated_base_inertia_kg", e.stated_base_inertia_kg}, {"simulation", "off"}};
  }
  nlohmann::json operator()(const ev::RateRunStarted& e) const {
    return {{"inertia_kg", e.inertia_kg},
            {"rate_mph_per_s", e.rate_mph_per_s},
            {"run", e.run},
            {"direction", e.rising ? "acceleration" : "deceleration"},
            {"set", to_json(e.set)},
            {"from_kmh", e.from_kmh}};
  }
  nlohmann::json operator()(const ev::ParasiticAnalysed& e) const {
    const auto& d = e.determination;
    nlohmann::json bands = nlohmann::json::array();
    for (const auto& b : d.bands)
      bands.push_back({{"speed_kmh", b.reference_speed_kmh},
                       {"ok", b.ok()},
                       {"reason", b.reason},
                       {"delta_t_s", b.delta_t_s},
                       {"force_n", b.force_n}});
    nlohmann::json points = nlohmann::json::array();
    for (const auto& p : d.points)
      points.push_back({{"speed_kmh", p.speed_kmh},
                        {"measured_n", p.measured_n},
                        {"stored_n", p.stored_n},
                        {"deviation_n", p.deviation_n},
                        {"limit_n", p.limit_n},
                        {"passed", p.passed}});
    nlohmann::json j = {{"base_inertia_kg", e.base_inertia_kg},
                        {"bands", bands},
                        {"points", points},
                        {"have_stored", d.have_stored},
                        {"mean_ratio", d.mean_ratio},
                        {"files", nlohmann::json::array({e.file})}};
    if (d.ok) {
      j["curve"] = to_json(d.fit.coefficients);
      j["residual_sd_n"] = d.fit.residual_sd_n;
    }
    if (e.stored) j["stored_curve"] = to_json(*e.stored);
    return j;
  }
  nlohmann::json operator()(const ev::UnloadedCoastdownAnalysed& e) const {
    nlohmann::json iv = nlohmann::json::array();
    for (const auto& i : e.result.intervals)
      iv.push_back({{"from_mph", i.v_high_mph},
                    {"to_mph", i.v_low_mph},
                    {"delta_t_s", i.delta_t_s},
                    {"expected_delta_t_s", i.expected_delta_t_s},
                    {"mean_force_n", i.mean_force_n},
                    {"expected_force_n", i.expected_force_n},
                    {"deviation_n", i.deviation_n},
                    {"limit_n", i.limit_n},
                    {"passed", i.passed},
                    {"reason", i.reason}});
    return {{"run", e.run},
            {"inertia_kg", e.inertia_kg},
            {"set", to_json(e.set)},
            {"intervals", iv},
            {"passed", e.result.passed},
            {"verdict", e.result.verdict},
            {"files", nlohmann::json::array({e.file})}};
  }
  nlohmann::json operator()(const ev::InertiaAnalysed& e) const {
    const auto& r = e.result;
    auto run = [](const core::ConstantForceRun& x) {
      return nlohmann::json{{"ok", x.ok},
                            {"message", x.message},
                            {"t_low_s", x.t_low_s},
                            {"t_high_s", x.t_high_s},
                            {"delta_t_s", x.delta_t_s},
                            {"delta_v_mps", x.delta_v_mps},
                            {"mean_force_n", x.mean_force_n},
                            {"accel_mps2", x.accel_mps2},
                            {"apparent_inertia_kg", x.apparent_inertia_kg}};
    };
    nlohmann::json sets = nlohmann::json::array();
    for (const auto& s : r.sets)
      sets.push_back({{"rate_pair", s.rate_pair},
                      {"set", s.set},
                      {"accel_rate_mph_per_s", s.accel_rate_mph_per_s},
                      {"decel_rate_mph_per_s", s.decel_rate_mph_per_s},
                      {"ok", s.ok},
                      {"inertia_kg", s.inertia_kg},
                      {"error_fraction", s.error_fraction},
                      {"passed", s.passed},
                      {"accel", run(s.accel)},
                      {"decel", run(s.decel)}});
    return {{"stated_kg", r.stated_kg},
            {"sets", sets},
            {"mean_kg", r.mean_kg},
            {"mean_error_fraction", r.mean_error_fraction},
            {"worst_set_error_fraction", r.worst_set_error_fraction},
            {"sets_outside", r.sets_outside},
            {"set_tolerance_fraction", r.set_tolerance_fraction},
            {"mean_tolerance_fraction", r.mean_tolerance_fraction},
            {"complete", r.complete},
            {"passed", r.passed},
            {"verdict", r.verdict},
            {"files", e.files}};
  }
  nlohmann::json operator()(const ev::FrictionAnalysed& e) const {
    const auto& r = e.result;
    return {{"speed_mph", e.speed_mph},
            {"base_inertia_kg", r.base_inertia_kg},
            {"ok", r.ok},
            {"message", r.message},
            {"duration_s", r.duration_s},
            {"v_start_mph", r.v_start_mph},
            {"v_end_mph", r.v_end_mph},
            {"power_w", r.power_w},
            {"power_hp", r.power_hp},
            {"force_n", r.force_n},
            {"tolerance_hp", r.tolerance_hp},
            {"passed", r.passed},
            {"verdict", r.verdict},
            {"files", nlohmann::json::array({e.file})}};
  }
  nlohmann::json operator()(const ev::AccelDecelAnalysed& e) const {
    const auto& r = e.result;
    nlohmann::json runs = nlohmann::json::array();
    for (const auto& x : r.runs)
      runs.push_back({{"inertia_kg", x.inertia_kg},
                      {"nominal_mph_per_s", x.nominal_mph_per_s},
                      {"run", x.run},
                      {"direction", x.rising ? "acceleration" : "deceleration"},
                      {"ok", x.ok},
                      {"message", x.message},
                      {"t_low_s", x.t_low_s},
                      {"t_high_s", x.t_high_s},
                      {"delta_t_s", x.delta_t_s},
                      {"measured_mph_per_s", x.measured_mph_per_s},
                      {"error_fraction", x.error_fraction},
                      {"passed", x.passed}});
    return {{"runs", runs},
            {"tolerance_fraction", r.tolerance_fraction},
            {"worst_error_fraction", r.worst_error_fraction},
            {"runs_outside", r.runs_outside},
            {"complete", r.complete},
            {"not_run", r.not_run},
            {"passed", r.passed},
            {"verdict", r.verdict},
            {"files", e.files}};
  }
  nlohmann::json operator()(const ev::ResponseAnalysed& e) const {
    const auto& r = e.result;
    nlohmann::json steps = nlohmann::json::array();
    for (const auto& x : r.steps)
      steps.push_back({{"rate_mph_per_s", x.rate_mph_per_s},
                       {"force_n", x.force_n},
                       {"ok", x.ok},
                       {"message", x.message},
                       {"t_before_s", x.t_before_s},
                       {"final_n", x.final_n},
                       {"settling_s", x.settling_s},
                       {"overshoot_fraction", x.overshoot_fraction},
                       {"max_sample_period_s", x.max_sample_period_s},
                       {"passed", x.passed}});
    return {{"steps", steps},     {"limit_s", e.limit_s}, {"band_fraction", e.band_fraction},
            {"passed", r.passed}, {"verdict", r.verdict}, {"files", e.files}};
  }
  nlohmann::json operator()(const ev::CheckFinished& e) const {
    return {{"check", e.check},
            {"end", e.end},
            {"passed", e.passed},
            {"verdict", e.verdict},
            {"files", nlohmann::json::array({e.file})}};
  }
};

struct Typer {
  const char* operator()(const ev::SessionStarted&) const { return "session_started"; }
  const char* operator()(const ev::ResumeStarted&) const { return "resume_started"; }
  const char* operator()(const ev::StateChanged&) const { return "state"; }
  const char* operator()(const ev::ControllerIdentified&) const { return "controller"; }
  const char* operator()(const ev::ControllerStateOnConnect&) const { return "controller_state_on_connect"; }
  const char* operator()(const ev::Refused&) const { return "refused"; }
  const char* operator()(const ev::Limits&) const { return "limits"; }
  const char* operator()(const ev::InertiaSet&) const { return "inertia"; }
  const char* operator()(const ev::WarmUpStarted&) const { return "warm_up_started"; }
  const char* operator()(const ev::WarmUpHeld&) const { return "warm_up"; }
  const char* operator()(const ev::LossMapSkipped&) const { return "loss_map_skipped"; }
  const char* operator()(const ev::LossMapPointSkipped&) const { return "loss_map_point_skipped"; }
  const char* operator()(const ev::LossMapPoint&) const { return "loss_map_point"; }
  const char* operator()(const ev::LossMapCoastStarted&) const { return "loss_map_coast_started"; }
  const char* operator()(const ev::LossMapCoast&) const { return "loss_map_coast"; }
  const char* operator()(const ev::WarmUpEnded&) const { return "warm_up_ended"; }
  const char* operator()(const ev::FirstSetting&) const { return "first_setting"; }
  const char* operator()(const ev::EnvelopeRefused&) const { return "envelope_refused"; }
  const char* operator()(const ev::SetWritten&) const { return "set_written"; }
  const char* operator()(const ev::CoastdownStarted&) const { return "coastdown_started"; }
  const char* operator()(const ev::ReleaseTiming& e) const {
    return e.within ? "timing" : "timing_rule_missed";
  }
  const char* operator()(const ev::PassesReset&) const { return "passes_reset"; }
  const char* operator()(const ev::WarmUpDrift&) const { return "warm_up_drift"; }
  const char* operator()(const ev::ConsecutiveTiming&) const { return "timing"; }
  const char* operator()(const ev::RunUpPlan&) const { return "run_up"; }
  const char* operator()(const ev::DriverPromptShown&) const { return "driver_prompt"; }
  const char* operator()(const ev::RunUpChecked&) const { return "run_up_checked"; }
  const char* operator()(const ev::Coastdown&) const { return "coastdown"; }
  const char* operator()(const ev::CoastdownDiscarded&) const { return "coastdown_discarded"; }
  const char* operator()(const ev::Diverging&) const { return "diverging"; }
  const char* operator()(const ev::LinkLost&) const { return "link_lost"; }
  const char* operator()(const ev::Reconnect&) const { return "reconnect"; }
  const char* operator()(const ev::NotSettled&) const { return "not_settled"; }
  const char* operator()(const ev::FaultCleared&) const { return "fault_cleared"; }
  const char* operator()(const ev::LinkRestored&) const { return "link_restored"; }
  const char* operator()(const ev::Fault&) const { return "fault"; }
  const char* operator()(const ev::Interrupted&) const { return "interrupted"; }
  const char* operator()(const ev::Paused&) const { return "paused"; }
  const char* operator()(const ev::Continued&) const { return "continued"; }
  const char* operator()(const ev::Resumed&) const { return "resumed"; }
  const char* operator()(const ev::SafeStopReconnect&) const { return "safe_stop_reconnect"; }
  const char* operator()(const ev::SafeStop&) const { return "safe_stop"; }
  const char* operator()(const ev::ObserverDropped&) const { return "observer_dropped"; }
  const char* operator()(const ev::ControllerWarning&) const { return "controller_warning"; }
  const char* operator()(const ev::Finished&) const { return "finished"; }
  const char* operator()(const ev::CheckStarted&) const { return "check_started"; }
  const char* operator()(const ev::CheckIdentified&) const { return "identified"; }
  const char* operator()(const ev::FreeCoastStarted&) const { return "coast_started"; }
  const char* operator()(const ev::CheckCoastStarted&) const { return "coast_started"; }
  const char* operator()(const ev::ForceApplied&) const { return "force_applied"; }
  const char* operator()(const ev::ParasiticAnalysed&) const { return "analysed"; }
  const char* operator()(const ev::UnloadedCoastdownAnalysed&) const { return "analysed"; }
  const char* operator()(const ev::RateRunStarted&) const { return "rate_run_started"; }
  const char* operator()(const ev::InertiaAnalysed&) const { return "analysed"; }
  const char* operator()(const ev::FrictionAnalysed&) const { return "analysed"; }
  const char* operator()(const ev::AccelDecelAnalysed&) const { return "analysed"; }
  const char* operator()(const ev::ResponseAnalysed&) const { return "analysed"; }
  const char* operator()(const ev::CheckFinished&) const { return "check_finished"; }
};

}  // namespace

nlohmann::json to_json(const CoastdownRecord& r) {
  const auto& e = r.evaluation;
  nlohmann::json bands = nlohmann::json::array();
  for (std::size_t i = 0; i < e.bands.size(); ++i) {
    const auto& b = e.bands[i];
    nlohmann::json jb = {{"speed_kmh", b.reference_speed_kmh}, {"status", core::to_string(b.status)}};
    if (b.ok()) {
      jb["t_upper_s"] = b.t_upper_s;
      jb["t_lower_s"] = b.t_lower_s;
      jb["delta_t_s"] = b.delta_t_s;
      jb["force_n"] = b.force_n;
    } else {
      jb["reason"] = b.reason;
    }
    // The prediction goes beside the measurement of a usable run only (what the rollers should have done).
    if (e.usable && i < r.predicted_delta_t_s.size() && r.predicted_delta_t_s[i])
      jb["predicted_delta_t_s"] = *r.predicted_delta_t_s[i];
    bands.push_back(jb);
  }
  nlohmann::json j = {{"run", r.run},
                      {"set", to_json(r.set)},
                      {"usable", e.usable},
                      {"bands", bands},
                      {"release_time_s", r.release_time_s},
                      {"duration_s", r.duration_s},
                      {"run_up_s", r.run_up_s},
                      {"verifying", r.verifying}};
  if (!e.usable) {
    j["unusable_reason"] = e.unusable_reason;
    return j;
  }
  j["measured"] = to_json(e.fit.coefficients);
  j["measured_std_error"] = to_json(core::RoadLoad{std::sqrt(std::max(0.0, e.fit.covariance(0, 0))),
                                                   std::sqrt(std::max(0.0, e.fit.covariance(1, 1))),
                                                   std::sqrt(std::max(0.0, e.fit.covariance(2, 2)))});
  j["regression_residual_sd_n"] = e.fit.residual_sd_n;
  if (e.whole_trace.ok)
    j["whole_trace"] = {{"coefficients", to_json(e.whole_trace.coefficients)},
                        {"converged", e.whole_trace.converged},
                        {"rms_residual_kmh", e.whole_trace.rms_residual_kmh},
                        {"evaluations", e.whole_trace.evaluations}};
  else
    j["whole_trace"] = {{"failed", e.whole_trace.message}};
  j["estimator_disagreement_n"] = e.estimator_disagreement_n;
  j["estimators_disagree"] = e.estimators_disagree;
  if (!e.adjust_why.empty())
    j["adjustment"] = {{"from", e.adjust_from_whole_trace ? "whole-trace" : "band-regression"},
                       {"measured", to_json(e.adjust_basis)},
                       {"why", e.adjust_why}};
  if (e.adjust_band_equivalent) j["adjustment"]["band_equivalent"] = to_json(*e.adjust_band_equivalent);
  j["check"] = {{"pass", e.check.pass},
                {"worst_abs_deviation_n", e.check.worst_abs_deviation_n},
                {"tolerance_n", r.tolerance_n},
                {"decision_rule", core::to_string(e.check.rule.kind)},
                {"rows", deviations_json(e.check.rows)}};
  if (e.check.rule.kind == core::DecisionRule::Kind::guard_band)
    j["check"]["coverage_k"] = e.check.rule.coverage_k;
  if (!e.confirmation.empty()) {
    j["check"]["whole_trace_confirmation"] = {{"text", e.confirmation},
                                              {"refused_a_pass", e.confirmation_refused}};
    if (e.whole_trace_check)
      j["check"]["whole_trace_confirmation"]["rows"] = deviations_json(e.whole_trace_check->rows);
  }
  j["decision"] = {{"kind", core::to_string(r.decision.kind)},
                   {"reason", r.decision.reason},
                   {"next_set", to_json(r.decision.next_set)}};
  if (!r.decision.anticipation.why.empty())
    j["decision"]["anticipation"] = anticipation_json(r.decision.anticipation);
  if (const auto& np = r.decision.next_pass) {
    // A pass's prediction of the next coast-down (warm_up.predict_next_pass, docs/standards.md §3.19).
    nlohmann::json n = {{"predicted", np->predicted},
                        {"why", np->why},
                        {"likely_to_fail", np->likely_to_fail},
                        {"adjusted", np->adjusted}};
    if (np->predicted) {
      n["change_n"] = np->warming.change_n;
      n["ratio"] = np->warming.ratio;
      n["from_s"] = np->warming.from_s;
      n["to_s"] = np->warming.to_s;
      n["fail_probability"] = np->fail_probability;
      n["risk"] = np->risk;
      n["anticipation"] = anticipation_json(np->warming);
      if (np->adjusted_fail_probability) n["adjusted_fail_probability"] = *np->adjusted_fail_probability;
      nlohmann::json rows = nlohmann::json::array();
      for (const auto& row : np->rows)
        rows.push_back({{"speed_kmh", row.speed_kmh},
                        {"deviation_n", row.deviation_n},
                        {"change_n", row.change_n},
                        {"predicted_n", row.predicted_n},
                        {"u_n", row.u_n},
                        {"limit_n", row.limit_n},
                        {"fail_probability", row.fail_probability}});
      n["rows"] = std::move(rows);
    }
    if (!np->not_adjusted_why.empty()) n["not_adjusted_why"] = np->not_adjusted_why;
    j["decision"]["next_pass"] = std::move(n);
  }
  return j;
}

nlohmann::json to_json(const Summary& s) {
  nlohmann::json j = {{"result", to_string(s.outcome)},
                      {"accepted", s.outcome == Outcome::accepted},
                      {"stop_reason", s.stop_reason},
                      {"iterations", s.iterations},
                      {"coastdowns", s.coastdowns},
                      {"usable_coastdowns", s.usable_coastdowns},
                      {"cell_time_s", s.cell_time_s},
                      {"first_setting", s.first_setting},
                      {"rollers_stopped", s.rollers_stopped},
                      {"stop_note", s.stop_note},
                      {"findings", s.findings}};
  if (s.final_set) j["final_set"] = to_json(*s.final_set);
  if (s.measured) j["measured"] = to_json(*s.measured);
  j["deviations"] = deviations_json(s.deviations);
  return j;
}

const char* type_of(const Payload& p) {
  return std::visit(Typer{}, p);
}
nlohmann::json to_json(const Payload& p) {
  return std::visit(Mapper{}, p);
}
const char* type_of(const Event& e) {
  return type_of(e.payload);
}

nlohmann::json record_json(const Event& e) {
  nlohmann::json j = to_json(e.payload);
  if (e.stamp) {
    j["state"] = to_string(e.stamp->state);
    if (e.stamp->t_s) j["t_s"] = *e.stamp->t_s;
    if (e.stamp->cell_time_s) j["cell_time_s"] = *e.stamp->cell_time_s;
  }
  return j;
}

Observers::Observers(const std::vector<Observer*>& list) {
  bool have_critical = false;
  for (Observer* o : list) {
    if (!o) continue;
    bool critical = false;
    try {
      critical = o->critical();
    } catch (...) {
      critical = false;
    }
    critical = critical && !have_critical;
    have_critical = have_critical || critical;
    list_.push_back({o, critical});
  }
}

Observers::Delivery Observers::deliver(const Event& e, const std::function<void(bool)>& before_each) {
  Delivery d;
  for (auto it = list_.begin(); it != list_.end();) {
    Observer* o = it->observer;
    const bool critical = it->critical;
    if (d.critical_failed && !critical) {  // nothing is shown that the record does not hold
      ++it;
      continue;
    }
    if (before_each) before_each(critical);
    bool ok = false;
    std::string err;
    try {
      ok = o->on_event(e);
      if (!ok) err = o->error();
    } catch (const std::exception& ex) {
      err = std::string("threw: ") + ex.what();
    } catch (...) {
      err = "threw an unknown exception";
    }
    if (!ok && critical) {
      if (!d.critical_failed) d.critical_error = err.empty() ? "the record could not be written" : err;
      d.critical_failed = true;
    } else if (!ok) {
      // A view that fails is a view lost, not a session lost: said once, and never asked again.
      std::string name;
      try {
        name = o->name();
      } catch (...) {
        name = "an observer";
      }
      d.dropped.push_back(name + " failed on a \"" + type_of(e) +
                          "\" event and was dropped: " + (err.empty() ? "no reason given" : err));
      it = list_.erase(it);
      continue;
    }
    ++it;
  }
  return d;
}

void Observers::progress(const Progress& p) {
  for (const Entry& e : list_) {
    try {
      e.observer->on_progress(p);
    } catch (...) {  // progress is a view: a failing one never stops the session
    }
  }
}

}  // namespace loadtrim::session
