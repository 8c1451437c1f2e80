#include "report/report.hpp"

#include <sys/wait.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "core/road_load.hpp"
#include "core/units.hpp"
#include "record/data_root.hpp"
#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/road_load_json.hpp"
#include "record/session_folder.hpp"
#include "record/verify.hpp"
#include "report/svg_plot.hpp"

namespace loadtrim::report {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

std::string fmt(double v, int decimals) {
  char b[48];
  std::snprintf(b, sizeof b, "%.*f", decimals, v);
  return b;
}

// A table cell traced to its record: the value at `key` (dot path, numeric parts index arrays) of record
// `seq`. `convert` names a unit conversion applied for display: "", "lbf", "lbf/mph", "lbf/mph2".
std::string cell(const json& rec, const std::string& key, int decimals, const std::string& convert = "",
                 const std::string& cls = "") {
  const json* v = &rec;
  std::size_t p = 0;
  while (p <= key.size()) {
    const auto q = key.find('.', p);
    const std::string part = key.substr(p, q == std::string::npos ? std::string::npos : q - p);
    if (v->is_array())
      v = &(*v)[std::stoul(part)];
    else
      v = &(*v)[part];
    if (q == std::string::npos) break;
    p = q + 1;
  }
  double x = v->is_number() ? v->get<double>() : NAN;
  if (convert == "lbf")
    x = core::units::n_to_lbf(x);
  else if (convert == "lbf/mph")
    x = core::units::n_to_lbf(x * core::units::kKmhPerMph);
  else if (convert == "lbf/mph2")
    x = core::units::n_to_lbf(x * core::units::kKmhPerMph * core::units::kKmhPerMph);
  return "<td class=\"num" + (cls.empty() ? "" : " " + cls) + "\" data-record=\"" +
         std::to_string(rec.value("seq", -1)) + "\" data-key=\"" + key + "\"" +
         (convert.empty() ? "" : " data-convert=\"" + convert + "\"") + ">" + fmt(x, decimals) + "</td>";
}

std::string esc(const std::string& s) {
  return xml_escape(s);
}

// A road-load member the record checks below have passed; 0 for a member that is absent.
core::RoadLoad coef(const json& j) {
  return record::is_road_load_json(j) ? record::road_load_from_json(j) : core::RoadLoad{};
}

// The record path of one coefficient of a road-load member: "set.f0_n" for ("set", 0).
std::string coef_path(const std::string& member, std::size_t k) {
  return member + "." + std::string(record::kRoadLoadMembers[k]);
}

// What the report reads from each record, so that a record that chains correctly but lacks a member (or has
// one of another type) gives a sentence naming the record and the member, never an exception. 'n' number, 'b'
// bool, 's' string, 'o' object, 'a' array; a trailing '?' allows the member to be absent.
struct Need {
  std::string path;
  const char* kind;
};

std::string check_needs(const json& r, const std::vector<Need>& needs) {
  for (const auto& n : needs) {
    const json* v = &r;
    std::string path = n.path;
    std::size_t p = 0;
    bool absent = false;
    while (true) {
      const auto q = path.find('.', p);
      const std::string part = path.substr(p, q == std::string::npos ? std::string::npos : q - p);
      if (!v->is_object() || !v->contains(part)) {
        absent = true;
        break;
      }
      v = &(*v)[part];
      if (q == std::string::npos) break;
      p = q + 1;
    }
    const bool optional = n.kind[1] == '?';
    if (absent) {
      if (optional) continue;
      return "lacks " + path;
    }
    const bool ok = (n.kind[0] == 'n' && v->is_number()) || (n.kind[0] == 'b' && v->is_boolean()) ||
                    (n.kind[0] == 's' && v->is_string()) || (n.kind[0] == 'o' && v->is_object()) ||
                    (n.kind[0] == 'a' && v->is_array());
    if (!ok) return "has a " + path + " of the wrong type";
  }
  return "";
}

// A road-load member and its three coefficients, as numbers; `kind` "o" required, "o?" optional.
std::vector<Need> curve_needs(const std::string& member, const char* kind) {
  const char* n = kind[1] == '?' ? "n?" : "n";
  return {{member, kind}, {coef_path(member, 0), n}, {coef_path(member, 1), n}, {coef_path(member, 2), n}};
}

// The first problem with a record the report uses, "" when none.
std::string record_problem(const json& r) {
  if (const std::string p = check_needs(r, {{"type", "s?"}, {"utc", "s?"}, {"seq", "n?"}}); !p.empty())
    return p;
  const std::string type = r.value("type", "");
  if (type == "session_started") {
    if (const std::string p = check_needs(r, curve_needs("target", "o?")); !p.empty()) return p;
    return check_needs(r, {{"tolerance_n", "n?"},
                           {"vehicle", "s?"},
                           {"vehicle_description", "s?"},
                           {"test_mass_kg", "n?"},
                           {"cell", "s?"},
                           {"profile", "s?"},
                           {"method", "s?"},
                           {"standard", "s?"},
                           {"software", "o?"},
                           {"software.version", "s?"},
                           {"software.build", "s?"},
                           {"operator_note", "s?"},
                           {"confirmation", "s?"}});
  }
  if (type == "finished") {
    if (const std::string p = check_needs(r, curve_needs("final_set", "o?")); !p.empty()) return p;
    return check_needs(r, {{"accepted", "b?"},
                           {"result", "s?"},
                           {"stop_reason", "s?"},
                           {"coastdowns", "n?"},
                           {"cell_time_s", "n?"}});
  }
  if (type == "first_setting") return check_needs(r, {{"strategy", "s?"}, {"fallback_reason", "s?"}});
  if (type != "coastdown") return "";
  std::string p = check_needs(r, {{"run", "n"}, {"usable", "b"}, {"unusable_reason", "s?"}, {"files", "a?"}});
  if (p.empty()) p = check_needs(r, curve_needs("set", "o"));
  if (!p.empty() || !r["usable"].get<bool>()) return p;
  // Older folders wrote the measured coefficients as "simulated".
  p = check_needs(r, curve_needs(std::string(record::measured_member(r)), "o"));
  if (!p.empty()) return p;
  p = check_needs(r, {{"check", "o"},
                      {"check.pass", "b"},
                      {"check.worst_abs_deviation_n", "n"},
                      {"check.rows", "a"},
                      {"decision", "o"},
                      {"decision.reason", "s"},
                      {"bands", "a"}});
  if (!p.empty()) return p;
  std::size_t i = 0;
  for (const auto& row : r["check"]["rows"]) {
    const std::string q = check_needs(row, {{"speed_kmh", "n"},
                                            {"target_n", "n"},
                                            {"measured_n", "n"},
                                            {"deviation_n", "n"},
                                            {"u_n", "n?"},
                                            {"limit_n", "n?"},
                                            {"pass", "b"}});
    if (!q.empty()) return "has check.rows." + std::to_string(i) + " that " + q;
    ++i;
  }
  i = 0;
  for (const auto& b : r["bands"]) {
    const std::string q = check_needs(b, {{"predicted_delta_t_s", "n?"}, {"delta_t_s", "n?"}});
    if (!b.is_object() || !q.empty()) return "has bands." + std::to_string(i) + " that is malformed";
    ++i;
  }
  if (r.contains("files") && (r["files"].empty() || !r["files"][0].is_object() ||
                              !r["files"][0].contains("path") || !r["files"][0]["path"].is_string()))
    return "has a files list without a trace path";
  return "";
}

// Removes what an earlier `report` wrote, so a failed report never leaves a stale one that looks current.
void remove_stale(const std::string& folder) {
  std::error_code ec;
  for (const auto& f : record::derived_files()) {
    fs::remove(fs::path(folder) / f, ec);
    fs::remove(fs::path(folder) / (f + ".tmp"), ec);
  }
}

const char* kCss = R"(
body{font-family:sans-serif;font-size:11pt;color:#111;margin:18mm;max-width:180mm}
h1{font-size:18pt;margin:0 0 4pt} h2{font-size:13pt;margin:16pt 0 6pt;border-bottom:1px solid #999}
table{border-collapse:collapse;margin:4pt 0 10pt} th,td{border:1px solid #bbb;padding:2pt 6pt;font-size:9.5pt}
th{background:#f0f0f0;text-align:left} td.num{text-align:right;font-variant-numeric:tabular-nums}
td.fail,span.fail{background:#D55E00;color:#fff;font-weight:bold} td.pass{color:#006b4f}
.banner{padding:8pt;margin:8pt 0;border:2px solid #111;font-weight:bold}
.banner.bad{background:#D55E00;color:#fff;border-color:#D55E00} .banner.good{background:#e8f4ee;border-color:#009E73}
.meta td{border:none;padding:1pt 8pt 1pt 0} .note{font-size:9.5pt;color:#333}
svg.plot{display:block;margin:6pt 0 12pt;max-width:100%;height:auto}
@media print{body{margin:12mm} h2{break-after:avoid} svg.plot,table{break-inside:avoid}}
)";

}  // namespace

// The report; "" when written, else why not (the caller removes what an earlier report left).
static std::string write_report_body(const std::string& folder, const std::string& software_version,
                                     const record::VerifyOptions& options, ReportFiles& out) {
  const record::FolderVerdict verdict = record::verify_folder(folder, options);
  out.chain_ok = verdict.intact();
  out.verify_outcome = record::to_string(verdict.outcome);
  // Every record that parses, whether or not the chain holds: the report shows what is there and says which
  // part is not vouched for. Read without leaving the folder (record/inside.hpp).
  std::vector<json> recs;
  {
    const record::InsideFile ev = record::read_inside(folder, "events.jsonl");
    if (ev.status != record::InsideStatus::ok)
      return "no readable events.jsonl in " + folder + ": " + ev.error;
    std::istringstream in(ev.content);
    for (std::string l; std::getline(in, l);) {
      auto j = json::parse(l, nullptr, false);
      if (j.is_object()) recs.push_back(std::move(j));
    }
  }
  for (const auto& r : recs)
    if (const std::string p = record_problem(r); !p.empty())
      return "record " + (r.contains("seq") ? r["seq"].dump() : std::string("?")) + " (" +
             (r.contains("type") && r["type"].is_string() ? r["type"].get<std::string>()
                                                          : std::string("no type")) +
             ") " + p + "; the report cannot be made from it";
  json started = json::object(), finished = json::object(), first = json::object(),
       controller_rec = json::object();
  std::vector<json> runs;
  std::string t_first, t_last;
  for (const auto& r : recs) {
    const std::string type = r.value("type", "");
    if (t_first.empty()) t_first = r.value("utc", "");
    t_last = r.value("utc", "");
    if (type == "session_started")
      started = r;
    else if (type == "finished")
      finished = r;
    else if (type == "first_setting")
      first = r;
    else if (type == "controller")
      controller_rec = r;
    else if (type == "coastdown")
      runs.push_back(r);
  }
  const core::RoadLoad target = started.contains("target") ? coef(started["target"]) : core::RoadLoad{};
  const double tol = started.value("tolerance_n", 10.0);
  const bool accepted = finished.value("accepted", false);

  std::string h = "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>loadtrim report " +
                  esc(started.value("vehicle", "")) + "</title><style>" + kCss + "</style></head><body>\n";
  h += "<h1>Road-load setting report</h1>\n";
  if (!verdict.intact()) {
    h += "<div class=\"banner bad\" id=\"chain-status\">LOG CHAIN BROKEN: " + esc(verdict.message) +
         ". The records from the first broken one on are not vouched for by the log; do not use this setting "
         "without "
         "investigating.</div>\n";
  } else {
    h += "<div class=\"banner good\" id=\"chain-status\">Log chain verified: " + esc(verdict.message) +
         ".</div>\n";
    std::string seal;
    bool good = false;
    switch (verdict.outcome) {
      case record::Outcome::verified:
        good = true;
        seal = "Sealed (record " + std::to_string(verdict.seal->seq) + ") and signed with the cell's key " +
               verdict.seal->signer + ".";
        break;
      case record::Outcome::not_finished:
        seal = "NOT FINISHED: the folder has no seal; its result is not final.";
        break;
      case record::Outcome::unsigned_seal:
        seal =
            "SEALED WITHOUT A SIGNATURE: no cell key was configured, so the seal does not show who made it.";
        break;
      case record::Outcome::key_unknown:
        seal = "SIGNATURE NOT CHECKED: " + verdict.message.substr(verdict.message.rfind("; ") + 2) + ".";
        break;
      case record::Outcome::broken:
        break;
    }
    h += std::string("<div class=\"banner ") + (good ? "good" : "bad") + "\" id=\"seal-status\">" +
         esc(seal) + "</div>\n";
  }
  h += std::string("<div class=\"banner ") + (accepted ? "good" : "bad") + "\" id=\"result\">Result: " +
       esc(finished.empty() ? std::string("session not finished") : finished.value("result", "")) + " — " +
       esc(finished.value("stop_reason", "")) + "</div>\n";
  // Timing and validity findings the session kept (a late first coast-down kept by the profile's policy).
  if (const json f = finished.value("findings", json::array()); f.is_array() && !f.empty()) {
    h += "<div class=\"banner bad\" id=\"findings\"><b>Findings</b><ul>";
    for (const auto& x : f)
      if (x.is_string()) h += "<li>" + esc(x.get<std::string>()) + "</li>";
    h += "</ul></div>\n";
  }
  h += "<table class=\"meta\">";
  auto meta = [&](const std::string& k, const std::string& v) {
    h += "<tr><td><b>" + esc(k) + "</b></td><td>" + esc(v) + "</td></tr>";
  };
  meta("Vehicle", started.value("vehicle", "") + (started.value("vehicle_description", "").empty()
                                                      ? ""
                                                      : " — " + started.value("vehicle_description", "")));
  meta("Test mass", fmt(started.value("test_mass_kg", 0.0), 1) + " kg");
  meta("Cell", started.value("cell", ""));
  meta("Profile and method", started.value("profile", "") + ", " + started.value("method", "") + " method (" +
                                 started.value("standard", "") + ")");
  {
    // The vehicle's reference speeds and those the standard's rules dropped (core::plan_reference_speeds).
    std::string speeds;
    for (const auto& v : started.value("reference_speeds_kmh", json::array()))
      if (v.is_number()) speeds += (speeds.empty() ? "" : ", ") + fmt(v.get<double>(), 0);
    std::string dropped;
    for (const auto& d : started.value("dropped_reference_speeds", json::array()))
      if (d.is_object() && d.value("speed_kmh", json()).is_number())
        dropped += (dropped.empty() ? "" : "; ") + fmt(d["speed_kmh"].get<double>(), 0) +
                   " km/h dropped: " + d.value("why", std::string());
    meta("Reference speeds", speeds + " km/h" + (dropped.empty() ? std::string() : " (" + dropped + ")"));
  }
  meta("First setting",
       first.value("strategy", "") + (first.value("fallback_reason", "").empty()
                                          ? ""
                                          : " (" + first.value("fallback_reason", "") + ")"));
  meta("Started / last record (UTC)", t_first + " / " + t_last);
  const json sw = started.value("software", json::object());
  meta("Software",
       "loadtrim " + sw.value("version", software_version) + ", build " + sw.value("build", "unknown"));
  meta("Operator note", started.value("operator_note", ""));
  meta("Confirmation", started.value("confirmation", ""));
  meta("Coast-downs", std::to_string(finished.value("coastdowns", static_cast<int>(runs.size()))) +
                          ", cell time " + fmt(finished.value("cell_time_s", 0.0) / 60.0, 1) +
                          " min (controller clock)");
  // A Modbus map without the applied-value registers, accepted by the cell file (docs/modbus.md).
  if (controller_rec.value("capabilities", "").find("readback-setpoint-only") != std::string::npos)
    meta("Read-back",
         "SETPOINT REGISTERS ONLY (accepted by the cell file): the controller did not report "
         "the values it applied");
  h += "</table>\n";
  if (verdict.seal) {
    h += "<table class=\"meta\" id=\"sign-off\"><tr><td><b>Sign-off</b></td><td>";
    if (verdict.approvals.empty()) h += "no approval recorded";
    for (const auto& a : verdict.approvals)
      h += esc(a.reviewer) + ", " + esc(a.utc) + ": \u201c" + esc(a.statement) + "\u201d (record " +
           std::to_string(a.seq) + ", key " + esc(a.signer) +
           (a.signature_checked ? ", signature verified" : ", signature NOT checked: reviewer key unknown") +
           ")<br>";
    h += "</td></tr></table>\n";
  }
  if (finished.contains("final_set")) {
    const core::RoadLoad fs = coef(finished["final_set"]);
    h += "<p>Final set coefficients: f0 " + fmt(fs.f0_n, 1) + " N, f1 " + fmt(fs.f1_n_per_kmh, 3) +
         " N/(km/h), f2 " + fmt(fs.f2_n_per_kmh2, 5) + " N/(km/h)²</p>\n";
  }

  // Coefficients table.
  h += "<h2>Coefficients</h2>\n<table id=\"coefficients\"><tr><th>what</th><th>f0 N</th><th>f1 "
       "N/(km/h)</th><th>f2 N/(km/h)²</th>"
       "<th>A lbf</th><th>B lbf/mph</th><th>C lbf/mph²</th></tr>\n";
  auto coef_row = [&](const std::string& what, const json& rec, const std::string& base) {
    h += "<tr><td>" + esc(what) + "</td>" + cell(rec, coef_path(base, 0), 2) +
         cell(rec, coef_path(base, 1), 4) + cell(rec, coef_path(base, 2), 5) +
         cell(rec, coef_path(base, 0), 2, "lbf") + cell(rec, coef_path(base, 1), 4, "lbf/mph") +
         cell(rec, coef_path(base, 2), 5, "lbf/mph2") + "</tr>\n";
  };
  if (started.contains("target")) coef_row("target", started, "target");
  std::string coef_csv = "run,what,f0_n,f1_n_per_kmh,f2_n_per_kmh2,a_lbf,b_lbf_per_mph,c_lbf_per_mph2\n";
  auto csv_coef = [&](const std::string& run, const std::string& what, const core::RoadLoad& c) {
    const core::RoadLoadUs u = core::to_us(c);
    char b[256];
    std::snprintf(b, sizeof b, "%s,%s,%.4f,%.6f,%.7f,%.4f,%.6f,%.7f\n", run.c_str(), what.c_str(), c.f0_n,
                  c.f1_n_per_kmh, c.f2_n_per_kmh2, u.a_lbf, u.b_lbf_per_mph, u.c_lbf_per_mph2);
    coef_csv += b;
  };
  csv_coef("", "target", target);
  for (const auto& r : runs) {
    const std::string n = std::to_string(r.value("run", 0));
    coef_row("coast-down " + n + ": set", r, "set");
    csv_coef(n, "set", coef(r["set"]));
    if (r.value("usable", false)) {
      const std::string mk(record::measured_member(r));
      coef_row("coast-down " + n + ": measured", r, mk);
      csv_coef(n, "measured", coef(r[mk]));
    }
  }
  h += "</table>\n";

  // Per reference speed, every coast-down.
  // The decision rule each coast-down was judged by (docs/standards.md §3.11); folders written before the
  // rule was recorded were judged by the simple rule.
  std::string rule_text =
      "simple acceptance (the standard's: each deviation within the tolerance as measured)";
  for (const auto& r : runs)
    if (r.value("usable", false) && r.contains("check") &&
        r["check"].value("decision_rule", "simple") == "guard-band")
      rule_text = "guard band (lab policy): |deviation| ≤ tolerance − " +
                  fmt(r["check"].value("coverage_k", 2.0), 1) + " × u";
  h +=
      "<h2>Forces at the reference speeds (tolerance ±" + fmt(tol, 1) +
      " N)</h2>\n<p id=\"decision-rule\">Decision rule: " + esc(rule_text) +
      ". u is the standard uncertainty of the regressed force at the speed (least-squares covariance).</p>\n";
  std::string dev_csv = "run,speed_kmh,target_n,measured_n,deviation_n,pass\n";
  for (const auto& r : runs) {
    const std::string n = std::to_string(r.value("run", 0));
    if (!r.value("usable", false)) {
      h += "<p>Coast-down " + n + ": <span class=\"fail\">unusable</span> — " +
           esc(r.value("unusable_reason", "")) + "</p>\n";
      continue;
    }
    h += "<table class=\"speeds\" id=\"speeds-" + n + "\"><tr><th colspan=\"7\">coast-down " + n +
         (r["check"].value("pass", false) ? " — within tolerance" : " — OUTSIDE tolerance") +
         "; decision: " + esc(r["decision"].value("reason", "")) +
         "</th></tr>\n<tr><th>v km/h</th><th>target N</th><th>measured N</th><th>deviation "
         "N</th><th>u N</th><th>limit ±N</th><th>result</th></tr>\n";
    const auto& rows = r["check"]["rows"];
    for (std::size_t i = 0; i < rows.size(); ++i) {
      const std::string k = "check.rows." + std::to_string(i);
      const bool pass = rows[i].value("pass", false);
      h += "<tr>" + cell(r, k + ".speed_kmh", 0) + cell(r, k + ".target_n", 2) +
           cell(r, k + ".measured_n", 2) + cell(r, k + ".deviation_n", 2, "", pass ? "" : "fail") +
           (rows[i].contains("u_n") ? cell(r, k + ".u_n", 2) + cell(r, k + ".limit_n", 2)
                                    : std::string("<td>—</td><td>—</td>")) +
           "<td class=\"" + (pass ? "pass" : "fail") + "\">" + (pass ? "pass" : "FAIL") + "</td></tr>\n";
      char b[160];
      std::snprintf(b, sizeof b, "%s,%.1f,%.3f,%.3f,%.3f,%s\n", n.c_str(), rows[i].value("speed_kmh", 0.0),
                    rows[i].value("target_n", 0.0), rows[i].value("measured_n", 0.0),
                    rows[i].value("deviation_n", 0.0), pass ? "pass" : "fail");
      dev_csv += b;
    }
    h += "</table>\n";
  }

  // Plots.
  h += "<h2>Plots</h2>\n";
  std::vector<double> vs;
  for (double v = 15.0; v <= 135.0; v += 1.0) vs.push_back(v);
  {
    SvgPlot p("plot-force", "Road load against speed: target ± tolerance, and each coast-down",
              "speed (km/h)", "force (N)");
    Band band{"target ± " + fmt(tol, 0) + " N", vs, {}, {}, "#009E73"};
    Series tgt{"target", vs, {}, "#000000", 1.2, false, true};
    for (double v : vs) {
      band.lo.push_back(target.force_n(v) - tol);
      band.hi.push_back(target.force_n(v) + tol);
      tgt.y.push_back(target.force_n(v));
    }
    p.add(band);
    p.add(tgt);
    const json* last = nullptr;
    for (const auto& r : runs)
      if (r.value("usable", false)) last = &r;
    int k = 0;
    for (const auto& r : runs) {
      if (!r.value("usable", false)) continue;
      const core::RoadLoad c = coef(r[std::string(record::measured_member(r))]);
      Series s{&r == last ? "final: coast-down " + std::to_string(r.value("run", 0))
                          : "coast-down " + std::to_string(r.value("run", 0)),
               vs,
               {},
               &r == last ? "#D55E00" : kPalette[(k++) % 4],
               &r == last ? 3.0 : 1.2};
      for (double v : vs) s.y.push_back(c.force_n(v));
      p.add(s);
    }
    h += p.render();
  }
  {
    SvgPlot p("plot-deviation", "Deviation from the target at each reference speed, per coast-down",
              "speed (km/h)", "measured − target (N)", 720, 320);
    Band band{"tolerance ± " + fmt(tol, 0) + " N", {}, {}, {}, "#009E73"};
    for (double v : {15.0, 135.0}) {
      band.x.push_back(v);
      band.lo.push_back(-tol);
      band.hi.push_back(tol);
    }
    p.add(band);
    int k = 0;
    for (const auto& r : runs) {
      if (!r.value("usable", false)) continue;
      Series s{"coast-down " + std::to_string(r.value("run", 0)), {}, {}, kPalette[(k++) % 6], 1.5};
      for (const auto& row : r["check"]["rows"]) {
        s.x.push_back(row.value("speed_kmh", 0.0));
        s.y.push_back(row.value("deviation_n", 0.0));
      }
      p.add(s);
      Series pts = s;
      pts.label.clear();
      pts.points = true;
      p.add(pts);
    }
    h += p.render();
  }
  {
    SvgPlot p("plot-speed", "Speed against time for each coast-down (from its trace)",
              "time after release (s)", "speed (km/h)");
    int k = 0;
    for (const auto& r : runs) {
      if (!r.contains("files")) continue;
      std::vector<double> t, v;
      std::string err;
      // The trace's path comes from the record: read it only inside the folder.
      const std::string rel = r["files"][0].value("path", "");
      const record::InsideFile tf = record::read_inside(folder, rel);
      if (tf.status != record::InsideStatus::ok || !record::parse_trace_csv(tf.content, rel, t, v, err) ||
          t.empty())
        continue;
      Series s{"coast-down " + std::to_string(r.value("run", 0)), {}, {}, kPalette[(k++) % 6], 1.5};
      const std::size_t step = std::max<std::size_t>(1, t.size() / 600);
      for (std::size_t i = 0; i < t.size(); i += step) {
        s.x.push_back(t[i] - t.front());
        s.y.push_back(v[i]);
      }
      p.add(s);
    }
    h += p.render();
  }
  {
    SvgPlot p("plot-convergence", "Worst deviation from the target per coast-down", "coast-down",
              "worst |deviation| (N)", 720, 300);
    Series s{"worst |deviation|", {}, {}, "#0072B2", 2.0, true};
    Series line{"tolerance " + fmt(tol, 0) + " N", {}, {}, "#D55E00", 1.5, false, true};
    for (const auto& r : runs)
      if (r.value("usable", false)) {
        s.x.push_back(r.value("run", 0));
        s.y.push_back(r["check"].value("worst_abs_deviation_n", 0.0));
      }
    if (!s.x.empty()) {
      line.x = {s.x.front() - 0.5, s.x.back() + 0.5};
      line.y = {tol, tol};
    }
    // An invisible point at zero so the y axis starts at 0 N.
    Series zero{"", {line.x.empty() ? 0.0 : line.x.front()}, {0.0}, "#ffffff", 0.1, true};
    p.add(zero);
    p.add(line);
    p.add(s);
    h += p.render();
  }
  {
    SvgPlot p("plot-times", "Band times: measured against predicted for the target",
              "predicted Δt for the target (s)", "measured Δt (s)", 720, 360);
    Series eq{"measured = predicted", {}, {}, "#000000", 1.0, false, true};
    int k = 0;
    double mx = 0.0;
    for (const auto& r : runs) {
      if (!r.value("usable", false)) continue;
      Series s{"coast-down " + std::to_string(r.value("run", 0)), {}, {}, kPalette[(k++) % 6], 1.0, true};
      for (const auto& b : r["bands"])
        if (b.contains("predicted_delta_t_s") && b.contains("delta_t_s")) {
          s.x.push_back(b["predicted_delta_t_s"].get<double>());
          s.y.push_back(b["delta_t_s"].get<double>());
          mx = std::max(mx, s.x.back());
        }
      p.add(s);
    }
    eq.x = {0.0, mx};
    eq.y = {0.0, mx};
    p.add(eq);
    h += p.render();
  }

  h += "<h2>Safety and validity notes</h2>\n<div class=\"note\"><p>This report was made by loadtrim from the "
       "session folder's log and "
       "traces. The setting follows " +
       esc(started.value("standard", "the profile named above")) +
       " as configured in the profile; values the profile marks as recalled from memory must be checked "
       "against the regulation in "
       "force. loadtrim did not check: the track coast-down and its corrections to reference conditions, the "
       "vehicle's preparation, "
       "tyre pressures and restraint, the dyno's calibration, parasitic-loss compensation and daily checks, "
       "the cell's safety "
       "systems, or the lab's own acceptance criteria. Whether this setting may be used for a regulated test "
       "is for the lab's "
       "procedures and its responsible engineer to decide.</p><p>Rotating rollers, a restrained vehicle at "
       "speed, exhaust and heat can "
       "injure: the lab's safety rules, local codes and licensed practice take precedence over anything in "
       "this report.</p></div>\n";
  h += "</body></html>\n";

  std::string err;
  out.html = (fs::path(folder) / "report.html").string();
  out.coefficients_csv = (fs::path(folder) / "coefficients.csv").string();
  out.deviations_csv = (fs::path(folder) / "deviations.csv").string();
  if (!record::write_durable(out.html, h, err) ||
      !record::write_durable(out.coefficients_csv, coef_csv, err) ||
      !record::write_durable(out.deviations_csv, dev_csv, err))
    return err;
  out.ok = true;
  return "";
}

record::VerifyOptions default_verify_options() {
  record::VerifyOptions o;
  const record::DataRoot root = record::find_data_root("");
  if (root.ok()) {
    o.keys_dir = root.keys();
    o.checks_root = root.checks();
  }
  return o;
}

ReportFiles write_report(const std::string& folder, const std::string& software_version) {
  return write_report(folder, software_version, default_verify_options());
}

ReportFiles write_report(const std::string& folder, const std::string& software_version,
                         const record::VerifyOptions& options) {
  ReportFiles out;
  std::string why;
  try {
    why = write_report_body(folder, software_version, options, out);
  } catch (const std::exception& e) {
    why = "cannot make the report of " + folder + ": " + e.what();
  }
  if (why.empty()) return out;
  remove_stale(folder);
  out.ok = false;
  out.error = why + " (no report was written; an earlier report.html, if any, was removed)";
  return out;
}

bool print_pdf(const std::string& folder, std::string& error) {
  const std::string html = fs::absolute(fs::path(folder) / "report.html").string();
  const std::string pdf = fs::absolute(fs::path(folder) / "report.pdf").string();
  const std::string profile = (fs::temp_directory_path() / "loadtrim-chromium-profile").string();
  const std::string cmd =
      "chromium --headless --no-sandbox --disable-gpu --disable-quic --no-first-run "
      "--disable-background-networking --disable-component-update --disable-sync --user-data-dir='" +
      profile + "' --no-pdf-header-footer --print-to-pdf='" + pdf + "' 'file://" + html + "' >/dev/null 2>&1";
  const int rc = std::system(cmd.c_str());
  if (rc != 0 || !fs::exists(pdf)) {
    std::error_code ec;
    fs::remove(pdf, ec);  // never leave an older PDF that looks like this report's
    error = "headless Chromium did not print the PDF (is the Debian package chromium installed?)";
    return false;
  }
  return true;
}

}  // namespace loadtrim::report
