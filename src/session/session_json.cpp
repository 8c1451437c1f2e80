// JSON forms of the session's records (the log, the summary, the report all read these).
#include <cmath>
#include <stdexcept>
#include <string>

#include "core/predict.hpp"
#include "core/setting.hpp"
#include "session/session.hpp"

namespace loadtrim::session {

nlohmann::json coefficients_json(const core::RoadLoad& c) {
  return {{"f0_n", c.f0_n}, {"f1_n_per_kmh", c.f1_n_per_kmh}, {"f2_n_per_kmh2", c.f2_n_per_kmh2}};
}

core::RoadLoad coefficients_from_json(const nlohmann::json& j) {
  return {j.at("f0_n").get<double>(), j.at("f1_n_per_kmh").get<double>(),
          j.at("f2_n_per_kmh2").get<double>()};
}

nlohmann::json to_json(const CoastdownRecord& r, const core::Profile& p) {
  const auto& e = r.evaluation;
  nlohmann::json bands = nlohmann::json::array();
  for (const auto& b : e.bands) {
    nlohmann::json jb = {{"speed_kmh", b.reference_speed_kmh}, {"status", core::to_string(b.status)}};
    if (b.ok()) {
      jb["t_upper_s"] = b.t_upper_s;
      jb["t_lower_s"] = b.t_lower_s;
      jb["delta_t_s"] = b.delta_t_s;
      jb["force_n"] = b.force_n;
    } else {
      jb["reason"] = b.reason;
    }
    bands.push_back(jb);
  }
  nlohmann::json j = {{"run", r.run},
                      {"set", coefficients_json(r.set)},
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
  j["simulated"] = coefficients_json(e.fit.coefficients);
  j["simulated_std_error"] = {{"f0_n", std::sqrt(std::max(0.0, e.fit.covariance(0, 0)))},
                              {"f1_n_per_kmh", std::sqrt(std::max(0.0, e.fit.covariance(1, 1)))},
                              {"f2_n_per_kmh2", std::sqrt(std::max(0.0, e.fit.covariance(2, 2)))}};
  j["regression_residual_sd_n"] = e.fit.residual_sd_n;
  if (e.whole_trace.ok)
    j["whole_trace"] = {{"coefficients", coefficients_json(e.whole_trace.coefficients)},
                        {"rms_residual_kmh", e.whole_trace.rms_residual_kmh},
                        {"evaluations", e.whole_trace.evaluations}};
  else
    j["whole_trace"] = {{"failed", e.whole_trace.message}};
  j["estimator_disagreement_n"] = e.estimator_disagreement_n;
  j["estimators_disagree"] = e.estimators_disagree;
  nlohmann::json rows = nlohmann::json::array();
  for (const auto& d : e.check.rows)
    rows.push_back({{"speed_kmh", d.speed_kmh},
                    {"target_n", d.target_n},
                    {"measured_n", d.measured_n},
                    {"deviation_n", d.deviation_n},
                    {"pass", d.pass}});
  j["check"] = {{"pass", e.check.pass},
                {"worst_abs_deviation_n", e.check.worst_abs_deviation_n},
                {"tolerance_n", p.tolerance_n},
                {"rows", rows}};
  j["decision"] = {{"kind", core::to_string(r.decision.kind)},
                   {"reason", r.decision.reason},
                   {"next_set", coefficients_json(r.decision.next_set)}};
  return j;
}

nlohmann::json to_json(const Summary& s) {
  nlohmann::json j = {{"result", to_string(s.outcome)},       {"accepted", s.outcome == Outcome::accepted},
                      {"stop_reason", s.stop_reason},         {"iterations", s.iterations},
                      {"coastdowns", s.coastdowns},           {"usable_coastdowns", s.usable_coastdowns},
                      {"cell_time_s", s.cell_time_s},         {"first_setting", s.first_setting},
                      {"rollers_stopped", s.rollers_stopped}, {"stop_note", s.stop_note}};
  if (s.final_set) j["final_set"] = coefficients_json(*s.final_set);
  if (s.measured) j["measured"] = coefficients_json(*s.measured);
  nlohmann::json rows = nlohmann::json::array();
  for (const auto& d : s.deviations)
    rows.push_back({{"speed_kmh", d.speed_kmh},
                    {"target_n", d.target_n},
                    {"measured_n", d.measured_n},
                    {"deviation_n", d.deviation_n},
                    {"pass", d.pass}});
  j["deviations"] = rows;
  return j;
}

ResumePoint resume_point(const std::vector<nlohmann::json>& records) {
  ResumePoint p;
  std::optional<int> pending;
  for (const auto& r : records) try {
      const std::string type = r.value("type", "");
      if (r.contains("cell_time_s") && r["cell_time_s"].is_number())
        p.cell_time_s = std::max(p.cell_time_s, r["cell_time_s"].get<double>());
      if (type == "first_setting") {
        p.strategy = r.value("strategy", "");
        p.next_set = coefficients_from_json(r.at("set"));
        p.have_next_set = true;
      } else if (type == "set_written") {
        p.iterations = std::max(p.iterations, r.value("iteration", 0));
      } else if (type == "resumed") {
        pending
            .reset();  // a run this resume found half-recorded is discarded: it is not discarded again later
      } else if (type == "refused") {
        p.verdict = Outcome::refused;
        p.verdict_reason = r.value("why", "");
      } else if (type == "finished" && is_final(r.value("result", ""))) {
        const std::string res = r.value("result", "");
        p.verdict = res == to_string(Outcome::accepted)  ? Outcome::accepted
                    : res == to_string(Outcome::refused) ? Outcome::refused
                                                         : Outcome::not_accepted;
        p.verdict_reason = r.value("stop_reason", "");
        p.finished_recorded = true;
        if (r.contains("final_set")) p.final_set = coefficients_from_json(r.at("final_set"));
      } else if (type == "coastdown_started") {
        pending = r.at("run").get<int>();
      } else if (type == "coastdown_discarded") {
        pending.reset();
        if (r.contains("next_set")) {
          p.next_set = coefficients_from_json(r.at("next_set"));
          p.have_next_set = true;
        }
      } else if (type == "coastdown") {
        pending.reset();
        // Every field resume, the summary and the report read: a record without one is refused by name, never
        // read as a default (a missing "usable" is not "unusable").
        (void)r.at("run").get<int>();
        (void)coefficients_from_json(r.at("set"));
        if (!r.at("usable").is_boolean()) throw std::invalid_argument("\"usable\" is not true or false");
        if (r.at("usable").get<bool>()) {
          (void)coefficients_from_json(r.at("simulated"));
          (void)r.at("check").at("rows").size();
          (void)r.at("decision").at("kind").get<std::string>();
        }
        p.completed.push_back(r);
        if (!r.value("usable", false)) {
          ++p.unusable;
          p.next_set = coefficients_from_json(r.at("set"));
        } else {
          p.next_set = coefficients_from_json(r.at("decision").at("next_set"));
          const std::string kind = r.at("decision").value("kind", "");
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

Summary summary_from_record(const ResumePoint& p, const core::Profile& profile) {
  Summary s;
  s.outcome = p.verdict.value_or(Outcome::not_accepted);
  s.stop_reason = p.verdict_reason;
  s.iterations = p.iterations;
  s.coastdowns = static_cast<int>(p.completed.size());
  s.usable_coastdowns = s.coastdowns - p.unusable;
  s.cell_time_s = p.cell_time_s;
  s.first_setting = p.strategy;
  if (p.final_set) s.final_set = core::rounded(*p.final_set, profile.rounding);
  try {
    for (auto it = p.completed.rbegin(); it != p.completed.rend(); ++it)
      if (it->value("usable", false) && it->contains("simulated")) {
        s.measured = coefficients_from_json(it->at("simulated"));
        for (const auto& row : it->at("check").at("rows"))
          s.deviations.push_back({row.value("speed_kmh", 0.0), row.value("target_n", 0.0),
                                  row.value("measured_n", 0.0), row.value("deviation_n", 0.0),
                                  row.value("pass", false)});
        break;
      }
  } catch (
      const nlohmann::json::exception&) {  // a record without those fields: the summary goes without them
    s.measured.reset();
    s.deviations.clear();
  }
  return s;
}

}  // namespace loadtrim::session
