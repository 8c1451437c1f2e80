// Reading a session's log back (session/resume.hpp): the inverse of the event mappings in events.cpp, for
// the records resume needs.
#include "session/resume.hpp"

#include <algorithm>
#include <stdexcept>
#include <string>

#include "core/setting.hpp"

namespace loadtrim::session {

ResumePoint resume_point(const std::vector<nlohmann::json>& records) {
  ResumePoint p;
  std::optional<int> pending;
  for (const auto& r : records) try {
      const std::string type = r.value("type", "");
      if (r.contains("cell_time_s") && r["cell_time_s"].is_number())
        p.cell_time_s = std::max(p.cell_time_s, r["cell_time_s"].get<double>());
      if (type == "first_setting") {
        p.strategy = r.value("strategy", "");
        p.next_set = road_load_from_json(r.at("set"));
        p.have_next_set = true;
      } else if (type == "set_written") {
        p.iterations = std::max(p.iterations, r.value("iteration", 0));
        p.last_written = road_load_from_json(r.at("set"));
      } else if (type == "resumed") {
        pending
            .reset();  // a run this resume found half-recorded is discarded: it is not discarded again later
      } else if (type == "refused") {
        p.verdict = Outcome::refused;
        p.verdict_reason = r.value("why", "");
      } else if (type == "finished" && is_final(r.value("result", ""))) {
        p.verdict = outcome_from_string(r.value("result", ""));  // a final one: is_final read it
        p.verdict_reason = r.value("stop_reason", "");
        p.finished_recorded = true;
        if (r.contains("final_set")) p.final_set = road_load_from_json(r.at("final_set"));
      } else if (type == "passes_reset") {
        p.passes_reset_before.push_back(p.completed.size());
      } else if (type == "coastdown_started") {
        pending = r.at("run").get<int>();
        p.last_run = std::max(p.last_run, *pending);
      } else if (type == "coastdown_discarded") {
        pending.reset();
        // A run the operator's pause cut short counts against nothing (as in the session that paused it).
        if (r.value("why", "").rfind(ev::kPausedDiscardWhy, 0) != 0) {
          ++p.unusable;
          ++p.discarded;
        }
        p.last_run = std::max(p.last_run, r.at("run").get<int>());
        if (r.contains("next_set")) {
          p.next_set = road_load_from_json(r.at("next_set"));
          p.have_next_set = true;
        }
      } else if (type == "coastdown") {
        pending.reset();
        // Every field resume, the summary and the report read: a record without one is refused by name, never
        // read as a default (a missing "usable" is not "unusable").
        p.last_run = std::max(p.last_run, r.at("run").get<int>());
        (void)road_load_from_json(r.at("set"));
        if (!r.at("usable").is_boolean()) throw std::invalid_argument("\"usable\" is not true or false");
        if (r.at("usable").get<bool>()) {
          (void)measured_of(r);
          (void)adjust_basis_of(r);
          (void)r.at("check").at("rows").size();
          if (!r.at("check").at("pass").is_boolean())
            throw std::invalid_argument("\"check.pass\" is not true or false");
          (void)r.at("decision").at("kind").get<std::string>();
        }
        p.completed.push_back(r);
        // last_adjusted_to: an unusable record leaves it, as it leaves the session's last usable record.
        if (!r.value("usable", false)) {
          ++p.unusable;
          p.next_set = road_load_from_json(r.at("set"));
        } else {
          p.next_set = road_load_from_json(r.at("decision").at("next_set"));
          const std::string kind = r.at("decision").value("kind", "");
          p.last_adjusted_to.reset();
          if (kind == core::to_string(core::Decision::Kind::run_again)) p.last_adjusted_to = p.next_set;
          if (kind == core::to_string(core::Decision::Kind::accepted)) {
            p.verdict = Outcome::accepted;
            p.verdict_reason = r.at("decision").value("reason", "");
            p.final_set = p.next_set;
          } else if (kind == core::to_string(core::Decision::Kind::rejected)) {
            p.verdict = Outcome::not_accepted;
            p.verdict_reason = r.at("decision").value("reason", "");
          }
        }
        p.have_next_set = true;
      }
    } catch (const std::exception& e) {
      // A record whose fields are not what this version writes: counted and named (resume refuses the
      // folder), never a crash.
      if (p.malformed++ == 0)
        p.malformed_note =
            "record " + std::to_string(r.value("seq", -1)) + " (" + r.value("type", "?") + "): " + e.what();
    }
  p.discarded_run = pending;
  return p;
}

void replay_method(const ResumePoint& p, core::SettingMethodState& method) {
  std::size_t next_reset = 0;
  auto resets_up_to = [&](std::size_t completed) {
    for (; next_reset < p.passes_reset_before.size() && p.passes_reset_before[next_reset] <= completed;
         ++next_reset)
      (void)method.reset_passes();
  };
  for (std::size_t i = 0; i < p.completed.size(); ++i) {
    resets_up_to(i);
    const auto& r = p.completed[i];
    if (!r.value("usable", false)) continue;
    const core::RoadLoad set = road_load_from_json(r.at("set"));
    (void)method.on_coastdown(set, adjust_basis_of(r), r.at("check").at("pass").get<bool>());
    // A pass whose next setting differs was given up when the setting moved (its passes_reset record comes
    // before the coast-down's own): the passes count at one setting.
    if (!(road_load_from_json(r.at("decision").at("next_set")) == set)) (void)method.reset_passes();
  }
  resets_up_to(p.completed.size());
}

Summary summary_from_record(const ResumePoint& p, const core::Profile& profile) {
  Summary s;
  s.outcome = p.verdict.value_or(Outcome::not_accepted);
  s.stop_reason = p.verdict_reason;
  s.iterations = p.iterations;
  s.coastdowns = static_cast<int>(p.completed.size());
  s.usable_coastdowns = s.coastdowns - (p.unusable - p.discarded);
  s.cell_time_s = p.cell_time_s;
  s.first_setting = p.strategy;
  if (p.final_set) s.final_set = core::rounded(*p.final_set, profile.rounding);
  try {
    for (auto it = p.completed.rbegin(); it != p.completed.rend(); ++it)
      if (it->value("usable", false) && (it->contains("measured") || it->contains("simulated"))) {
        s.measured = measured_of(*it);
        for (const auto& row : it->at("check").at("rows"))
          s.deviations.push_back({.speed_kmh = row.value("speed_kmh", 0.0),
                                  .target_n = row.value("target_n", 0.0),
                                  .measured_n = row.value("measured_n", 0.0),
                                  .deviation_n = row.value("deviation_n", 0.0),
                                  .u_n = row.value("u_n", 0.0),
                                  .limit_n = row.value("limit_n", it->at("check").value("tolerance_n", 0.0)),
                                  .pass = row.value("pass", false)});
        break;
      }
  } catch (
      const nlohmann::json::exception&) {  // a record without those fields: the summary goes without them
    s.measured.reset();
    s.deviations.clear();
  }
  return s;
}

std::optional<std::string> missing_adjustment(const ResumePoint& rp, const core::Profile& profile) {
  if (profile.adjust_from != core::Profile::AdjustFrom::whole_trace) return std::nullopt;
  for (const auto& r : rp.completed)
    if (r.value("usable", false) && !r.contains("adjustment"))
      return "coast-down " + std::to_string(r.value("run", 0)) +
             "'s record has no \"adjustment\" though the profile takes the loss from the whole-trace curve: "
             "the folder is damaged";
  return std::nullopt;
}

}  // namespace loadtrim::session
