// The check's report.html, from its folder alone (result.json and the traces): the verdict, the clause, each
// figure the verdict rests on, and which limits are the text's and which the lab's.
#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <functional>
#include <iterator>
#include <sstream>

#include "checks/check_runner.hpp"
#include "core/problem.hpp"
#include "record/event_log.hpp"
#include "record/road_load_json.hpp"
#include "record/session_folder.hpp"
#include "report/svg_plot.hpp"

namespace loadtrim::checks {

namespace fs = std::filesystem;
using core::num;

namespace {
// Where a limit comes from: the text's own figure, or the lab's (the profile loader refuses a limit looser
// than the text's, so a different figure is a stricter one).
std::string source_of(double limit, double text_limit) {
  return std::abs(limit - text_limit) <= 1e-12 * std::abs(text_limit)
             ? "[text]"
             : "[the lab's, stricter than the text's]";
}

std::string pct(double fraction, int decimals = 2) {
  return (fraction >= 0.0 ? "+" : "") + num(100.0 * fraction, decimals);
}
const char* cell_class(bool passed) {
  return passed ? "pass\">pass" : "fail\">FAIL";
}
}  // namespace

bool write_check_report(const std::string& folder, std::string& error) {
  std::ifstream in((fs::path(folder) / "result.json").string());
  const std::string text((std::istreambuf_iterator<char>(in)), {});
  bool too_deep = false;
  nlohmann::json r = record::parse_record_json(text, &too_deep);
  if (!r.is_object()) {
    error = too_deep ? "result.json nests arrays and objects deeper than " +
                           std::to_string(record::kMaxRecordDepth) + " levels"
                     : "result.json missing or malformed";
    return false;
  }
  const record::VerifyResult v = record::verify_session_folder(folder);
  using report::xml_escape;
  std::ostringstream h;
  const bool passed = r.value("passed", false);
  h << "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>loadtrim dyno check: "
    << xml_escape(r.value("check", "")) << "</title>"
    << "<style>body{font-family:sans-serif;max-width:60em;margin:1em auto;padding:0 "
       "1em}table{border-collapse:collapse}"
       "td,th{border:1px solid #999;padding:.2em "
       ".5em;text-align:right}th{background:#eee}.pass{color:#009E73}.fail{color:#D55E00;font-weight:bold}"
       ".warn{border:2px solid #D55E00;padding:.5em}table.facts th,table.facts "
       "td{text-align:left}</style></head><body>";
  h << "<h1>Dyno check: " << xml_escape(r.value("check", "")) << " (no vehicle on the rollers)</h1>";
  h << "<p class=\"" << (passed ? "pass" : "fail") << "\">" << (passed ? "PASSED" : "NOT PASSED") << ": "
    << xml_escape(r.value("verdict", "")) << "</p>";
  // The header facts: when, with which software, by whom, on which cell (the log's first record and
  // result.json; a fact an older folder lacks reads "not recorded").
  nlohmann::json started = nlohmann::json::object();
  {
    std::ifstream ev((fs::path(folder) / "events.jsonl").string());
    std::string line;
    if (std::getline(ev, line)) started = record::parse_record_json(line);
    if (!started.is_object()) started = nlohmann::json::object();
  }
  auto text_at = [](const nlohmann::json& j, const char* k) {
    return j.is_object() && j.contains(k) && j[k].is_string() ? j[k].get<std::string>() : std::string();
  };
  const std::string utc = text_at(started, "utc");
  const nlohmann::json sw = r.contains("software") ? r["software"] : nlohmann::json::object();
  const nlohmann::json op = started.contains("operator") ? started["operator"] : nlohmann::json::object();
  const std::string version = text_at(sw, "version");
  h << "<table id=\"check-facts\" class=\"facts\"><tr><th>Date and time (UTC)</th><td>"
    << xml_escape(utc.size() >= 19 ? utc.substr(0, 10) + " " + utc.substr(11, 8)
                                   : std::string("not recorded"))
    << "</td></tr><tr><th>Software</th><td>"
    << xml_escape(version.empty() ? std::string("not recorded")
                                  : "loadtrim " + version + ", build " + text_at(sw, "build"))
    << "</td></tr><tr><th>Operator</th><td>"
    << xml_escape(text_at(op, "name").empty()
                      ? std::string("not recorded")
                      : text_at(op, "name") +
                            (text_at(op, "from").empty() ? "" : " (" + text_at(op, "from") + ")"))
    << "</td></tr><tr><th>Cell</th><td>" << xml_escape(r.value("cell", "")) << "</td></tr></table>";
  h << "<p>Check profile: " << xml_escape(r.value("profile", "")) << " ("
    << xml_escape(r.value("standard", "")) << "). " << xml_escape(r.value("clause", ""))
    << ". Limits marked [text] are the clause's own; the others are the lab's settings in its check profile "
       "(docs/dyno-checks.md).</p>";
  h << "<p>Record: "
    << (v.ok ? xml_escape(v.message) : "<span class=\"fail\">BROKEN: " + xml_escape(v.message) + "</span>")
    << "</p>";
  auto trace_plot = [&](const std::string& rel, const std::string& title) {
    std::vector<double> t, s;
    std::string e;
    if (!record::read_trace_csv((fs::path(folder) / rel).string(), t, s, e) || t.empty()) return;
    const std::size_t step = std::max<std::size_t>(1, t.size() / 2000);
    report::Series ser;
    ser.label = "speed";
    for (std::size_t i = 0; i < t.size(); i += step) {
      ser.x.push_back(t[i] - t[0]);
      ser.y.push_back(s[i]);
    }
    report::SvgPlot plot("trace-" + std::to_string(std::hash<std::string>{}(rel) % 100000), title,
                         "time from start (s)", "speed (km/h)");
    plot.add(ser);
    h << plot.render();
  };
  if (r.contains("parasitic")) {
    const auto& p = r["parasitic"];
    if (p.contains("curve") && record::is_road_load_json(p["curve"])) {
      const core::RoadLoad c = record::road_load_from_json(p["curve"]);
      h << "<p>Parasitic loss curve: P(v) = " << num(c.f0_n) << " N + " << num(c.f1_n_per_kmh)
        << " N/(km/h)·v + " << num(c.f2_n_per_kmh2)
        << " N/(km/h)²·v², from the coast of the empty rollers at the base inertia "
        << num(p.value("base_inertia_kg", 0.0)) << " kg. "
        << (r.value("curve_stored", false) ? "Stored as the cell's curve." : "Not stored.") << "</p>";
    }
    h << "<p>Limits: the larger of "
      << "the profile's tolerance in N and its share of the stored loss (the lab's).</p>";
    h << "<table><tr><th>speed (km/h)</th><th>measured (N)</th><th>stored (N)</th><th>deviation "
         "(N)</th><th>limit (N)</th><th>result</th></tr>";
    for (const auto& x : p.value("points", nlohmann::json::array()))
      h << "<tr><td>" << num(x.value("speed_kmh", 0.0)) << "</td><td>" << num(x.value("measured_n", 0.0), 2)
        << "</td><td>" << num(x.value("stored_n", 0.0), 2) << "</td><td>"
        << num(x.value("deviation_n", 0.0), 2) << "</td><td>" << num(x.value("limit_n", 0.0), 2)
        << "</td><td class=\"" << (x.value("passed", false) ? "pass\">pass" : "fail\">FAIL") << "</td></tr>";
    h << "</table>";
    trace_plot("traces/free-coast.csv", "Free coast of the empty rollers");
  }
  if (r.contains("coastdown"))
    for (const auto& run : r["coastdown"].value("runs", nlohmann::json::array())) {
      h << "<h2>Unloaded coast-down at " << num(run.value("inertia_kg", 0.0))
        << " kg (40 CFR 1066.270)</h2><p>" << xml_escape(run.value("verdict", ""))
        << ". The pass/fail limit is the lab's: the text gives none.</p>";
      h << "<table><tr><th>interval (mph)</th><th>Δt (s)</th><th>expected Δt (s)</th><th>mean force "
           "(N)</th><th>expected (N)</th><th>deviation (N)</th><th>limit (N)</th><th>result</th></tr>";
      for (const auto& x : run.value("intervals", nlohmann::json::array()))
        h << "<tr><td>" << num(x.value("from_mph", 0.0)) << "→" << num(x.value("to_mph", 0.0)) << "</td><td>"
          << num(x.value("delta_t_s", 0.0), 3) << "</td><td>" << num(x.value("expected_delta_t_s", 0.0), 3)
          << "</td><td>" << num(x.value("mean_force_n", 0.0), 2) << "</td><td>"
          << num(x.value("expected_force_n", 0.0), 2) << "</td><td>" << num(x.value("deviation_n", 0.0), 2)
          << "</td><td>" << num(x.value("limit_n", 0.0), 2) << "</td><td class=\""
          << (x.value("passed", false) ? "pass\">pass" : "fail\">FAIL") << "</td></tr>";
      h << "</table>";
      trace_plot("traces/coastdown-" + std::to_string(run.value("run", 0)) + ".csv",
                 "Coast-down at " + num(run.value("inertia_kg", 0.0)) + " kg");
    }
  if (r.contains("inertia")) {
    const auto& x = r["inertia"];
    h << "<h2>Base inertia (40 CFR 1066.250)</h2><p>Constant force with no road-load inertia; each set times "
         "the 10 → 40 mph acceleration and the 40 → 10 mph deceleration; I = (F̄<sub>a</sub> − "
         "F̄<sub>d</sub>)/(a<sub>a</sub> − a<sub>d</sub>), the rollers' own loss cancelling between the two. "
         "Stated base inertia "
      << num(x.value("stated_kg", 0.0), 1) << " kg; mean " << num(x.value("mean_kg", 0.0), 1) << " kg ("
      << pct(x.value("mean_error_fraction", 0.0)) << " %, limit ±"
      << num(100.0 * x.value("mean_tolerance_fraction", 0.0), 2) << " % "
      << source_of(x.value("mean_tolerance_fraction", 0.0),
                   core::InertiaCheckOptions{}.mean_tolerance_fraction)
      << "); every set within ±" << num(100.0 * x.value("set_tolerance_fraction", 0.0), 1) << " % "
      << source_of(x.value("set_tolerance_fraction", 0.0), core::InertiaCheckOptions{}.set_tolerance_fraction)
      << (x.value("complete", false) ? "" : "; <b>fewer sets than the text's five at three rate pairs</b>")
      << ".</p>";
    h << "<table><tr><th>pair</th><th>set</th><th>rates ((mph)/s)</th><th>F̄ accel (N)</th><th>Δt accel "
         "(s)</th><th>F̄ decel (N)</th><th>Δt decel (s)</th><th>apparent I accel / decel (kg)</th><th>I "
         "(kg)</th><th>error (%)</th><th>result</th></tr>";
    for (const auto& s : x.value("sets", nlohmann::json::array())) {
      const auto& a = s["accel"];
      const auto& d = s["decel"];
      h << "<tr><td>" << s.value("rate_pair", 0) << "</td><td>" << s.value("set", 0) << "</td><td>"
        << num(s.value("accel_rate_mph_per_s", 0.0)) << " / " << num(s.value("decel_rate_mph_per_s", 0.0))
        << "</td><td>" << num(a.value("mean_force_n", 0.0), 2) << "</td><td>"
        << num(a.value("delta_t_s", 0.0), 3) << "</td><td>" << num(d.value("mean_force_n", 0.0), 2)
        << "</td><td>" << num(d.value("delta_t_s", 0.0), 3) << "</td><td>"
        << num(a.value("apparent_inertia_kg", 0.0), 1) << " / " << num(d.value("apparent_inertia_kg", 0.0), 1)
        << "</td><td>" << num(s.value("inertia_kg", 0.0), 1) << "</td><td>"
        << pct(s.value("error_fraction", 0.0)) << "</td><td class=\"" << cell_class(s.value("passed", false))
        << "</td></tr>";
    }
    h << "</table>";
    trace_plot("traces/inertia-pair1-set1-accel.csv", "Set 1: constant-force acceleration, simulation off");
    trace_plot("traces/inertia-pair1-set1-decel.csv", "Set 1: constant-force deceleration, simulation off");
  }
  if (r.contains("friction")) {
    const auto& x = r["friction"];
    h << "<h2>Friction compensation (40 CFR 1066.260)</h2><p>Base inertia "
      << num(x.value("base_inertia_kg", 0.0), 0) << " kg, A = B = C = 0, speed hold at "
      << num(x.value("speed_mph", 0.0)) << " mph, then road-load simulation for "
      << num(x.value("duration_s", 0.0), 1) << " s: the speed went from "
      << num(x.value("v_start_mph", 0.0), 3) << " to " << num(x.value("v_end_mph", 0.0), 3)
      << " mph. P = −(I/2)·d(v²)/dt = " << num(x.value("power_w", 0.0), 1)
      << " W = " << num(x.value("power_hp", 0.0), 3) << " hp (1 hp = 745.69987 W, NIST SP 811), limit ±"
      << num(x.value("tolerance_hp", 0.0), 2) << " hp [text].</p>";
    trace_plot("traces/friction-coast.csv", "The coast at base inertia with A, B, C zero");
  }
  if (r.contains("accel_decel")) {
    const auto& x = r["accel_decel"];
    h << "<h2>Acceleration and deceleration (40 CFR 1066.265)</h2><p>Road-load simulation at each inertia "
         "with a constant set force F = I·rate (no speed terms), timed 10 → 40 mph and 40 → 10 mph; limit ±"
      << num(100.0 * x.value("tolerance_fraction", 0.0), 1) << " % "
      << source_of(x.value("tolerance_fraction", 0.0), core::AccelDecelOptions{}.tolerance_fraction)
      << ". Not run: " << xml_escape(x.value("not_run", "")) << ".</p>";
    h << "<table><tr><th>inertia (kg)</th><th>nominal ((mph)/s)</th><th>run</th><th>direction</th><th>Δt "
         "(s)</th><th>measured ((mph)/s)</th><th>error (%)</th><th>result</th></tr>";
    for (const auto& s : x.value("runs", nlohmann::json::array()))
      h << "<tr><td>" << num(s.value("inertia_kg", 0.0), 0) << "</td><td>"
        << num(s.value("nominal_mph_per_s", 0.0)) << "</td><td>" << s.value("run", 0) << "</td><td>"
        << xml_escape(s.value("direction", "")) << "</td><td>" << num(s.value("delta_t_s", 0.0), 3)
        << "</td><td>" << num(s.value("measured_mph_per_s", 0.0), 4) << "</td><td>"
        << pct(s.value("error_fraction", 0.0)) << "</td><td class=\"" << cell_class(s.value("passed", false))
        << "</td></tr>";
    h << "</table>";
  }
  if (r.contains("response")) {
    const auto& x = r["response"];
    h << "<h2>Response time (40 CFR 1066.245)</h2><p>At base inertia, a step of the constant force from a "
         "speed hold; the settling time is counted from the last sample before the step until the force "
         "stays "
         "within ±"
      << num(100.0 * x.value("band_fraction", 0.0), 0) << " % "
      << source_of(x.value("band_fraction", 0.0), core::ResponseOptions{}.band_fraction)
      << " of its final value; limit " << num(1000.0 * x.value("limit_s", 0.0), 0) << " ms "
      << source_of(x.value("limit_s", 0.0), core::ResponseOptions{}.limit_s) << ".</p>";
    h << "<table><tr><th>rate ((mph)/s)</th><th>force (N)</th><th>final (N)</th><th>settling "
         "(ms)</th><th>overshoot "
         "(%)</th><th>sample spacing (ms)</th><th>result</th></tr>";
    for (const auto& s : x.value("steps", nlohmann::json::array()))
      h << "<tr><td>" << num(s.value("rate_mph_per_s", 0.0)) << "</td><td>" << num(s.value("force_n", 0.0), 1)
        << "</td><td>" << num(s.value("final_n", 0.0), 1) << "</td><td>"
        << num(1000.0 * s.value("settling_s", 0.0), 1) << "</td><td>"
        << num(100.0 * s.value("overshoot_fraction", 0.0), 1) << "</td><td>"
        << num(1000.0 * s.value("max_sample_period_s", 0.0), 1) << "</td><td class=\""
        << cell_class(s.value("passed", false)) << "</td></tr>";
    h << "</table>";
  }
  h << "<p class=\"warn\">Rotating rollers can injure. These checks run with no vehicle on the rollers and "
       "nobody in the roller area; the lab's own "
       "safety rules, local codes and licensed practice come first.</p></body></html>\n";
  return record::write_durable((fs::path(folder) / "report.html").string(), h.str(), error);
}

}  // namespace loadtrim::checks
