#include "report/report.hpp"

#include <sys/wait.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <optional>
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
.meta td{border:none;padding:1pt 8pt 1pt 0;vertical-align:top} .meta td:first-child{white-space:nowrap}
.note{font-size:9.5pt;color:#333}
.session-id{font-size:10pt;color:#333;margin:0 0 6pt}
#page-one ul{margin:2pt 0;padding-left:16pt} #page-one li{margin:1pt 0} li.bad{color:#a33c00;font-weight:bold}
table.sign td{border:none;padding:10pt 8pt 2pt 0} table.sign td.line{border-bottom:1px solid #111;width:70mm}
svg.plot{display:block;margin:6pt 0 12pt;max-width:100%;height:auto}
@media print{body{margin:0} h2{break-after:avoid} svg.plot,table{break-inside:avoid} #page-one{break-after:page}}
)";

// The printed page: every page carries the session id, the result and its number (CSS page margin boxes,
// which headless Chromium prints; the text is escaped for a CSS string).
std::string css_string(const std::string& s) {
  std::string o = "\"";
  for (char c : s) {
    if (c == '"' || c == '\\') o += '\\';
    if (c == '\n') {
      o += ' ';
      continue;
    }
    o += c;
  }
  return o + "\"";
}
std::string page_css(const std::string& session_id, const std::string& result) {
  return "@page{size:A4;margin:16mm 14mm 16mm 14mm;"
         "@top-left{content:" +
         css_string("Session " + session_id) +
         ";font:9pt sans-serif;color:#333}"
         "@top-right{content:" +
         css_string("Result: " + result) +
         ";font:9pt sans-serif;color:#333}"
         "@bottom-left{content:\"loadtrim road-load setting report\";font:8pt sans-serif;color:#555}"
         "@bottom-right{content:\"page \" counter(page) \" of \" counter(pages);font:9pt sans-serif}}\n";
}

// Tolerant readers for the facts the report states when the record holds them: absent, or of another type,
// they read as "not recorded" (older folders lack some), never as an exception.
std::string sv(const json& j, const char* k, const std::string& d = "") {
  return j.is_object() && j.contains(k) && j[k].is_string() ? j[k].get<std::string>() : d;
}
std::optional<double> nv(const json& j, const char* k) {
  if (j.is_object() && j.contains(k) && j[k].is_number()) return j[k].get<double>();
  return std::nullopt;
}
std::optional<bool> bv(const json& j, const char* k) {
  if (j.is_object() && j.contains(k) && j[k].is_boolean()) return j[k].get<bool>();
  return std::nullopt;
}
const json& ov(const json& j, const char* k) {
  static const json none;
  return j.is_object() && j.contains(k) ? j[k] : none;
}
std::string num_or(const std::optional<double>& v, int decimals, const std::string& unit) {
  return v ? fmt(*v, decimals) + (unit.empty() ? "" : " " + unit) : std::string("not recorded");
}

// Who ran it, as recorded: {"name", "from"}.
std::string operator_text(const json& op) {
  const std::string name = sv(op, "name");
  if (name.empty()) return "not recorded";
  const std::string from = sv(op, "from");
  return name + (from.empty() ? "" : " (" + from + ")");
}

// The dyno-check gate as the start record holds it (app::dyno_check_gate).
std::string gate_text(const json& g, bool& overridden) {
  overridden = false;
  if (!g.is_object() || !bv(g, "enforced")) return "not recorded";
  if (!*bv(g, "enforced")) return "exempt: " + sv(g, "why", "no reason recorded");
  const std::string summary = sv(ov(g, "readiness"), "summary");
  if (bv(g, "overridden").value_or(false)) {
    overridden = true;
    return "OVERRIDDEN by the operator, who gave the reason \u201c" + sv(g, "override_reason") +
           "\u201d; the checks were not current" + (summary.empty() ? "" : ": " + summary);
  }
  return "enforced: the cell's required dyno checks were current" +
         (summary.empty() ? "" : " (" + summary + ")");
}

std::string session_id_of(const std::string& folder) {
  fs::path p = fs::path(folder).lexically_normal();
  if (p.filename().empty()) p = p.parent_path();
  return p.filename().string();
}

// The CSV exports (CsvFormat): a field separator and a decimal mark a spreadsheet of either setting reads.
class CsvTable {
 public:
  explicit CsvTable(const CsvFormat& f) : f_(f) {}
  CsvTable& text(const std::string& s) {
    sep();
    if (s.find_first_of(std::string(1, f_.decimal_comma ? ';' : ',') + "\"\n\r") == std::string::npos) {
      out_ += s;
    } else {
      out_ += '"';
      for (char c : s) out_ += c == '"' ? std::string("\"\"") : std::string(1, c);
      out_ += '"';
    }
    return *this;
  }
  CsvTable& number(double v, int decimals) {
    sep();
    if (!std::isfinite(v)) return *this;  // an empty cell, never "nan"
    std::string t = fmt(v, decimals);
    if (f_.decimal_comma)
      for (char& c : t)
        if (c == '.') c = ',';
    out_ += t;
    return *this;
  }
  void end_row() {
    out_ += "\n";
    first_ = true;
  }
  const std::string& str() const { return out_; }

 private:
  void sep() {
    if (!first_) out_ += f_.decimal_comma ? ';' : ',';
    first_ = false;
  }
  CsvFormat f_;
  std::string out_;
  bool first_ = true;
};

}  // namespace

// Why the log is not a session's ("" when it is). A session's log starts with session_started; its records
// carry seq, prev and type, so one whose first line is damaged is still a session's (the report says the
// chain is broken). A dyno check's log starts with check_started: its folder holds the check's own
// report.html.
static std::string not_a_session_log(const std::string& log) {
  bool chained = false;
  std::istringstream in(log);
  for (std::string l; std::getline(in, l);) {
    const json j = json::parse(l, nullptr, false);
    if (!j.is_object() || !j.contains("type") || !j["type"].is_string()) continue;
    const std::string type = j["type"].get<std::string>();
    if (type == "session_started") return "";
    if (type == "check_started")
      return "is a dyno check's log (check_started), whose folder has the check's own report";
    if (j.contains("seq") && j.contains("prev")) chained = true;
  }
  return chained ? "" : "holds no loadtrim record (a line with seq, prev and type)";
}

// The report of a session folder whose log is `log`; "" when written, else why not (the caller removes what
// an earlier report left).
static std::string write_report_body(const std::string& folder, const std::string& log,
                                     const std::string& software_version,
                                     const record::VerifyOptions& options, const CsvFormat& csv_format,
                                     ReportFiles& out) {
  const record::FolderVerdict verdict = record::verify_folder(folder, options);
  out.chain_ok = verdict.intact();
  out.verify_outcome = record::to_string(verdict.outcome);
  // Every record that parses, whether or not the chain holds: the report shows what is there and says which
  // part is not vouched for.
  std::vector<json> recs;
  {
    std::istringstream in(log);
    for (std::string l; std::getline(in, l);) {
      auto j = record::parse_record_json(l);  // a line nested too deep is not a record (verify says so)
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
       controller_rec = json::object(), inertia_rec = json::object(), limits_rec = json::object();
  std::vector<json> runs, resumes, warm_ups, loss_points, loss_skips, loss_coasts, drifts, stops, discards,
      resets, interruptions, starts, pauses;
  std::map<int, json> release_timing, consecutive_timing, run_up_checks, sets_written;
  std::string t_first, t_last;
  int current_run = 0;
  for (const auto& r : recs) {
    const std::string type = r.value("type", "");
    if (t_first.empty()) t_first = r.value("utc", "");
    t_last = r.value("utc", "");
    const int run = nv(r, "run") ? static_cast<int>(*nv(r, "run")) : current_run;
    if (type == "session_started") {
      started = r;
      starts.push_back(r);
    } else if (type == "resume_started") {
      resumes.push_back(r);
      starts.push_back(r);
    } else if (type == "finished")
      finished = r;
    else if (type == "first_setting")
      first = r;
    else if (type == "controller")
      controller_rec = r;
    else if (type == "inertia")
      inertia_rec = r;
    else if (type == "limits")
      limits_rec = r;
    else if (type == "coastdown")
      runs.push_back(r);
    else if (type == "coastdown_started")
      current_run = run;
    else if (type == "set_written")
      sets_written[run] = r;
    else if (type == "warm_up_started" || type == "warm_up")
      warm_ups.push_back(r);
    else if (type == "loss_map_point")
      loss_points.push_back(r);
    else if (type == "loss_map_coast")
      loss_coasts.push_back(r);
    else if (type == "loss_map_skipped" || type == "loss_map_point_skipped")
      loss_skips.push_back(r);
    else if (type == "timing" || type == "timing_rule_missed")
      (r.contains("within") ? release_timing : consecutive_timing)[current_run] = r;
    else if (type == "run_up_checked")
      run_up_checks[run] = r;
    else if (type == "warm_up_drift")
      drifts.push_back(r);
    else if (type == "safe_stop")
      stops.push_back(r);
    else if (type == "coastdown_discarded")
      discards.push_back(r);
    else if (type == "passes_reset")
      resets.push_back(r);
    else if (type == "interrupted")
      interruptions.push_back(r);
    else if (type == "paused" || type == "continued")
      pauses.push_back(r);
  }
  const core::RoadLoad target = started.contains("target") ? coef(started["target"]) : core::RoadLoad{};
  const double tol = started.value("tolerance_n", 10.0);
  const bool accepted = finished.value("accepted", false);
  const std::string session_id = session_id_of(folder);
  const std::string result_word =
      finished.empty() ? std::string("not finished") : finished.value("result", std::string("not recorded"));

  std::string h = "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>loadtrim report " +
                  esc(session_id) + " \u2014 " + esc(result_word) + "</title><style>" + kCss +
                  page_css(session_id, result_word) + "</style></head><body>\n";

  // ---- Page one: what the signing engineer needs, on one printed page. ----
  h += "<section id=\"page-one\">\n<h1>Road-load setting report</h1>\n";
  h += "<p class=\"session-id\" id=\"session-id\">Session " + esc(session_id) + " \u00b7 vehicle " +
       esc(started.value("vehicle", "")) + " \u00b7 cell " + esc(started.value("cell", "")) + " \u00b7 " +
       esc(t_first) + " to " + esc(t_last) + " (UTC)</p>\n";
  if (!verdict.intact()) {
    h += "<div class=\"banner bad\" id=\"chain-status\">LOG CHAIN BROKEN: " + esc(verdict.message) +
         ". The records from the first broken one on are not vouched for by the log; do not use this setting "
         "without investigating.</div>\n";
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
       esc(finished.empty() ? std::string("session not finished") : finished.value("result", "")) +
       " \u2014 " + esc(finished.value("stop_reason", "")) + "</div>\n";
  if (finished.contains("final_set")) {
    const core::RoadLoad fs = coef(finished["final_set"]);
    const core::RoadLoadUs u = core::to_us(fs);
    h += "<p id=\"final-set\">Final set coefficients: f0 " + fmt(fs.f0_n, 1) + " N, f1 " +
         fmt(fs.f1_n_per_kmh, 3) + " N/(km/h), f2 " + fmt(fs.f2_n_per_kmh2, 5) + " N/(km/h)\u00b2 (A " +
         fmt(u.a_lbf, 2) + " lbf, B " + fmt(u.b_lbf_per_mph, 4) + " lbf/mph, C " + fmt(u.c_lbf_per_mph2, 5) +
         " lbf/mph\u00b2); shown rounded, the record holds every digit.</p>\n";
  }
  h += "<table class=\"meta\" id=\"page-one-facts\">";
  auto meta = [&](const std::string& k, const std::string& v, const std::string& id = "") {
    h += "<tr" + (id.empty() ? std::string() : " id=\"" + id + "\"") + "><td><b>" + esc(k) + "</b></td><td>" +
         esc(v) + "</td></tr>";
  };
  // The decision rule each coast-down was judged by (docs/standards.md §3.11); folders written before the
  // rule was recorded were judged by the simple rule.
  std::string rule_text =
      "simple acceptance (the standard's: each deviation within the tolerance as measured)";
  for (const auto& r : runs)
    if (r.value("usable", false) && r.contains("check") &&
        r["check"].value("decision_rule", "simple") == "guard-band")
      rule_text = "guard band (lab policy): |deviation| \u2264 tolerance \u2212 " +
                  fmt(r["check"].value("coverage_k", 2.0), 1) + " \u00d7 u";
  for (const auto& r : runs)
    if (r.value("usable", false) && r.contains("check") && r["check"].contains("whole_trace_confirmation")) {
      rule_text += "; a pass also needs the whole-trace curve within the tolerance (lab policy)";
      break;
    }
  meta("Decision rule", rule_text + "; tolerance \u00b1" + fmt(tol, 1) + " N at each reference speed",
       "decision-rule");
  meta("Standard and method", started.value("standard", "") + " \u2014 " + started.value("method", "") +
                                  " method, profile " + started.value("profile", ""));
  {
    std::string gates;
    bool any_override = false;
    for (std::size_t i = 0; i < starts.size(); ++i) {
      bool o = false;
      const std::string g = gate_text(ov(starts[i], "dyno_checks"), o);
      any_override = any_override || o;
      gates += (gates.empty() ? "" : "; ") +
               (i == 0 && sv(starts[i], "type") == "session_started" ? std::string("at the start")
                                                                     : "at resume " + std::to_string(i)) +
               ": " + g;
    }
    h += std::string("<tr id=\"check-gate\"") + (any_override ? " class=\"overridden\"" : "") +
         "><td><b>Dyno-check gate</b></td><td" + (any_override ? " class=\"fail\"" : "") + ">" +
         esc(gates.empty() ? std::string("not recorded") : gates) + "</td></tr>";
  }
  if (!resumes.empty()) {
    std::string rs;
    for (const auto& r : resumes)
      rs += (rs.empty() ? "" : "; ") + std::string("resumed ") + sv(r, "utc") + " after " +
            std::to_string(static_cast<int>(nv(r, "completed_coastdowns").value_or(0))) +
            " completed coast-down(s), folder " + sv(r, "folder_verified", "not recorded") + " at the resume";
    meta("Resumed", rs, "resumed");
  }
  h += "</table>\n";

  // Safety and timing findings, each stated even when there is nothing to report.
  h += "<div id=\"findings\"><b>Safety and timing findings</b><ul>";
  auto item = [&](bool bad, const std::string& text) {
    h += std::string("<li") + (bad ? " class=\"bad\"" : "") + ">" + esc(text) + "</li>";
  };
  if (finished.empty()) {
    item(true,
         "The session has no final record: whether the rollers were stopped at its end is not recorded.");
  } else if (!finished.contains("rollers_stopped") || !finished["rollers_stopped"].is_boolean()) {
    item(true, "Whether the rollers were stopped at the end is not recorded.");
  } else if (finished.value("rollers_stopped", false)) {
    item(false,
         "Rollers confirmed stopped at the end: " + finished.value("stop_note", std::string("")) + ".");
  } else {
    item(true,
         "ROLLERS NOT CONFIRMED STOPPED at the end: " + finished.value("stop_note", std::string("")) + ".");
  }
  for (const auto& s : stops)
    if (!bv(s, "rollers_stopped").value_or(false))
      item(true, "A safe stop (record " + std::to_string(s.value("seq", -1)) +
                     ") did not confirm standstill: " + sv(s, "note", sv(s, "how")) + ".");
  // The warnings the input files (cell, target, profile) and their combination gave when the session started:
  // the operator saw them on the console; the reviewer sees them here.
  if (started.contains("combination_warnings") && started["combination_warnings"].is_array())
    for (const auto& w : started["combination_warnings"])
      if (w.is_string()) item(true, "Input warning when the session started: " + w.get<std::string>());
  if (release_timing.empty()) {
    item(false, "120 s rule: no coast-down released after a warm-up was recorded.");
  } else {
    for (const auto& [run, t] : release_timing) {
      const bool within = bv(t, "within").value_or(false);
      item(!within, "120 s rule, coast-down " + std::to_string(run) + ": released " +
                        num_or(nv(t, "gap_s"), 1, "s") + " after the warm-up's end \u2014 " +
                        (within ? "met" : "MISSED (" + sv(t, "action", "no action recorded") + ")") + " (" +
                        sv(t, "rule") + ").");
    }
  }
  {
    int checked = 0;
    double min_av = 0.0;
    for (const auto& [run, c] : run_up_checks) {
      ++checked;
      min_av = nv(c, "min_av_m2ps3").value_or(min_av);
      if (!bv(c, "meets").value_or(false))
        item(true, "Run-up of coast-down " + std::to_string(run) + " too slow: " +
                       sv(c, "why", "mean a\u00b7v " + num_or(nv(c, "mean_av_m2ps3"), 1, "m\u00b2/s\u00b3")) +
                       ".");
    }
    bool all_met = true;
    for (const auto& [run, c] : run_up_checks) all_met = all_met && bv(c, "meets").value_or(false);
    if (checked == 0)
      item(false,
           "Run-up speed: no run-up check recorded (the dyno motored the run-ups, or an older folder).");
    else if (all_met)
      item(false, "Run-up speed: all " + std::to_string(checked) +
                      " run-ups checked met the minimum a\u00b7v of " + fmt(min_av, 1) + " m\u00b2/s\u00b3.");
  }
  if (drifts.empty()) {
    item(false, std::string("Warm-up drift at acceptance: ") +
                    (accepted ? "not recorded" : "not estimated (no setting reached acceptance)") + ".");
  } else {
    for (const auto& d : drifts) {
      const std::string v = sv(d, "verdict", "not recorded");
      // A record is written each time a setting is due to be accepted; only the last one of an accepted
      // session is at its acceptance (with the drift rule "require" the earlier ones coasted on).
      const bool at_acceptance = accepted && &d == &drifts.back();
      // The fully-warm check's sentence (docs/session.md, "The setting once fully warm"), when it was made.
      const std::string warm = d.contains("fully_warm") && d["fully_warm"].is_object()
                                   ? "; " + sv(d["fully_warm"], "why", "fully-warm check not recorded")
                                   : std::string();
      item(v.rfind("still warming", 0) == 0 || v.rfind("settled, but", 0) == 0,
           std::string(at_acceptance ? "Warm-up drift at acceptance"
                                     : "Warm-up drift when the setting was due to be accepted") +
               " (coast-down " + std::to_string(static_cast<int>(nv(d, "run").value_or(0))) + "): " + v +
               (nv(d, "remaining_drift_n")
                    ? "; estimated remaining drift " + fmt(*nv(d, "remaining_drift_n"), 2) + " N"
                    : std::string()) +
               " (threshold " + num_or(nv(d, "threshold_n"), 1, "N") + ", rule \"" + sv(d, "rule") + "\")" +
               warm + ".");
    }
  }
  for (const auto& d : discards)
    item(true, "Coast-down " + std::to_string(static_cast<int>(nv(d, "run").value_or(0))) +
                   " discarded: " + sv(d, "why") + ".");
  for (const auto& r : resets)
    item(false, "Consecutive passes reset after coast-down " +
                    std::to_string(static_cast<int>(nv(r, "run").value_or(0))) + ": " + sv(r, "why") + ".");
  for (const auto& r : interruptions)
    item(true, "Interrupted by the operator during " + sv(r, "during") + ".");
  // Each pause: who asked, why, during which step, whether the rollers were stopped; each continue.
  for (const auto& r : pauses) {
    if (sv(r, "type") == "paused")
      item(!bv(r, "rollers_stopped").value_or(false),
           "Paused during " + sv(r, "during") + " by " + sv(r, "by") + " (" + sv(r, "source") + ")" +
               (sv(r, "why").empty() ? std::string() : ": " + sv(r, "why")) + "; rollers " +
               (bv(r, "rollers_stopped").value_or(false) ? "confirmed stopped" : "NOT confirmed stopped") +
               ".");
    else
      item(false, "Continued by " + sv(r, "by") + " (" + sv(r, "source") + ") after " +
                      num_or(nv(r, "paused_s"), 0, "s") + " paused; re-warmed " +
                      num_or(nv(r, "rewarm_s"), 0, "s") + " and the pass count started again" +
                      (sv(r, "why").empty() ? std::string() : ": " + sv(r, "why")) + ".");
  }
  if (const json f = finished.value("findings", json::array()); f.is_array())
    for (const auto& x : f)
      if (x.is_string()) item(true, "Finding kept by the session: " + x.get<std::string>() + ".");
  h += "</ul></div>\n";

  // The sign-off block: who ran it, and the reviewer's approval or lines to sign on paper.
  h += "<div id=\"sign-off\"><h2>Sign-off</h2><table class=\"meta\">";
  {
    std::string ops;
    for (std::size_t i = 0; i < starts.size(); ++i)
      ops += (ops.empty() ? "" : "; ") + operator_text(ov(starts[i], "operator")) +
             (i == 0 ? std::string() : " (resume " + std::to_string(i) + ")");
    meta("Operated by", ops.empty() ? std::string("not recorded") : ops, "operated-by");
  }
  {
    std::string ap;
    for (const auto& a : verdict.approvals)
      ap += esc(a.reviewer) + ", " + esc(a.utc) + ": \u201c" + esc(a.statement) + "\u201d (record " +
            std::to_string(a.seq) + ", key " + esc(a.signer) +
            (a.signature_checked ? ", signature verified" : ", signature NOT checked: reviewer key unknown") +
            ")<br>";
    h += "<tr id=\"approval\"><td><b>Reviewer approval</b></td><td>" +
         (ap.empty() ? std::string("none recorded in the folder") : ap) + "</td></tr>";
  }
  h += "</table>\n";
  if (verdict.approvals.empty())
    h += "<table class=\"sign\" id=\"paper-sign-off\"><tr><td>Reviewed by (name)</td><td class=\"line\"></td>"
         "</tr><tr><td>Signature</td><td class=\"line\"></td></tr><tr><td>Date</td><td class=\"line\"></td>"
         "</tr></table>\n";
  h += "</div>\n</section>\n";

  // ---- The facts behind page one. ----
  h += "<h2>Session</h2>\n<table class=\"meta\" id=\"session-facts\">";
  meta("Vehicle",
       started.value("vehicle", "") + (started.value("vehicle_description", "").empty()
                                           ? ""
                                           : " \u2014 " + started.value("vehicle_description", "")));
  meta("Test mass", fmt(started.value("test_mass_kg", 0.0), 1) + " kg");
  {
    // The target's source: the copy in the folder (its hash is in the first record) and where it was copied
    // from; a file `loadtrim target` prepared says what it was prepared from in its first comment line.
    std::string src = "not recorded";
    for (const auto& f : ov(started, "files"))
      if (sv(f, "path") == "inputs/target.toml") {
        src = "the target file " + sv(f, "source", "(path not recorded)") + ", copied to inputs/target.toml";
        const record::InsideFile t = record::read_inside(folder, "inputs/target.toml");
        if (t.status == record::InsideStatus::ok) {
          const std::string tag = "# Prepared by loadtrim target from ";
          const auto at = t.content.find(tag);
          if (at != std::string::npos && (at == 0 || t.content[at - 1] == '\n'))
            src += "; prepared by loadtrim target from " +
                   t.content.substr(at + tag.size(), t.content.find('\n', at) - at - tag.size());
          else
            src += "; as written by hand (the file names no other source)";
        }
      }
    meta("Target source", src, "target-source");
  }
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
  // The history's sessions, when its loss was used (docs/store.md, "The history first setting").
  if (const json hist = first.value("inputs", json::object()).value("history", json()); hist.is_object()) {
    std::string text = hist.value("source", std::string()) == "store"
                           ? "session " + hist.value("session", std::string()) + " on cell " +
                                 hist.value("cell", std::string()) + " (" +
                                 hist.value("folder", std::string()) + ")"
                           : "the history file " + hist.value("where", std::string());
    for (const auto& p : hist.value("pairs", json::array()))
      if (p.is_object())
        text += "; pair " + p.value("vehicle", std::string()) + ": " +
                p.value("this_cell", json::object()).value("session", std::string()) + " here, " +
                p.value("other_cell", json::object()).value("session", std::string()) + " there";
    const json c = hist.value("correction", json::object());
    if (c.value("pairs", 0) > 0 && c.value("f0_n", json()).is_number() &&
        c.value("f1_n_per_kmh", json()).is_number() && c.value("f2_n_per_kmh2", json()).is_number())
      text += "; correction f0 " + fmt(c["f0_n"].get<double>(), 2) + " N, f1 " +
              fmt(c["f1_n_per_kmh"].get<double>(), 4) + " N/(km/h), f2 " +
              fmt(c["f2_n_per_kmh2"].get<double>(), 6) + " N/(km/h)²";
    text += ". " + hist.value("note", std::string());
    // The day-to-day correction from the two warm-ups (docs/store.md, "The history first setting").
    if (const json d = first.value("inputs", json::object()).value("history_day_scale", json());
        d.is_object()) {
      if (d.value("used", false) && d.value("ratio", json()).is_number() &&
          d.value("at_s", json()).is_number() && d.value("then_n", json()).is_number() &&
          d.value("now_n", json()).is_number())
        text += ". Day-to-day correction: the loss scaled by " + fmt(d["ratio"].get<double>(), 4) +
                " (this warm-up's " + fmt(d["now_n"].get<double>(), 1) + " N over the earlier " +
                fmt(d["then_n"].get<double>(), 1) + " N, at " + fmt(d["at_s"].get<double>(), 0) +
                " s of each warm-up)";
      else
        text += ". Day-to-day correction not made: " + d.value("why", std::string());
    }
    meta("History used", text, "history-used");
  }
  meta("Started / last record (UTC)", t_first + " / " + t_last);
  const json sw = started.value("software", json::object());
  meta("Software",
       "loadtrim " + sw.value("version", software_version) + ", build " + sw.value("build", "unknown"));
  meta("Operator note", started.value("operator_note", ""));
  meta("Confirmation", started.value("confirmation", ""));
  meta("Coast-downs", std::to_string(finished.value("coastdowns", static_cast<int>(runs.size()))) +
                          ", cell time " + fmt(finished.value("cell_time_s", 0.0) / 60.0, 1) +
                          " min (controller clock)");
  h += "</table>\n";

  // Cell and controller: what the controller stated at identify (checked against the cell file) and the
  // inertia written and read back.
  h += "<h2>Cell and controller</h2>\n<table class=\"meta\" id=\"cell-controller\">";
  meta("Cell", started.value("cell", ""));
  meta("Controller", controller_rec.empty()
                         ? std::string("not recorded (no controller answered)")
                         : sv(controller_rec, "name", "not recorded") + ", protocol version " +
                               num_or(nv(controller_rec, "protocol_version"), 0, "") +
                               "; capabilities: " + sv(controller_rec, "capabilities", "not recorded"));
  meta("Firmware", "not recorded (the controller protocol does not report a firmware version)");
  meta("Roller diameter", num_or(nv(controller_rec, "roller_diameter_m"), 4, "m") +
                              " (as the controller states it; identify checks it against the cell file)");
  meta("Base inertia",
       num_or(nv(controller_rec, "base_inertia_kg"), 1, "kg") + " (as the controller states it)");
  meta("Inertia set", inertia_rec.empty()
                          ? std::string("not recorded")
                          : num_or(nv(inertia_rec, "inertia_kg"), 1, "kg") + " for the test mass " +
                                num_or(nv(inertia_rec, "test_mass_kg"), 1, "kg") + " and rotating mass " +
                                num_or(nv(inertia_rec, "rotating_mass_kg"), 2, "kg") + " (" +
                                sv(inertia_rec, "axles", "axles not recorded") + ")");
  meta("Inertia read back",
       inertia_rec.empty() ? std::string("not recorded")
                           : sv(inertia_rec, "read_back", "not recorded") +
                                 " (the value read back is compared with the one written and the session "
                                 "refuses to go on on a mismatch; the value itself is not recorded)");
  if (!limits_rec.empty())
    meta("Speed limit", num_or(nv(limits_rec, "speed_limit_kmh"), 0, "km/h") + " (cell " +
                            num_or(nv(limits_rec, "cell_max_speed_kmh"), 0, "km/h") + ", vehicle " +
                            num_or(nv(limits_rec, "vehicle_max_speed_kmh"), 0, "km/h") + ", controller " +
                            num_or(nv(limits_rec, "controller_max_speed_kmh"), 0, "km/h") + ")");
  // A Modbus map without the applied-value registers, accepted by the cell file (docs/modbus.md).
  if (controller_rec.value("capabilities", "").find("readback-setpoint-only") != std::string::npos)
    meta("Read-back",
         "SETPOINT REGISTERS ONLY (accepted by the cell file): the controller did not report "
         "the values it applied");
  h += "</table>\n";

  // Warm-up and loss map.
  h += "<h2>Warm-up and loss map</h2>\n<table id=\"warm-up\"><tr><th>warm-up</th><th>speed "
       "km/h</th><th>planned "
       "s</th><th>held s</th><th>stability</th></tr>\n";
  {
    int k = 0;
    json pending;
    auto row = [&](const json& s, const json& held) {
      h += "<tr><td>" + std::string(k == 0 ? "first" : "re-warm " + std::to_string(k)) +
           "</td><td class=\"num\">" + num_or(nv(s, "speed_kmh"), 0, "") + "</td><td class=\"num\">" +
           num_or(nv(s, "duration_s"), 0, "") + "</td><td class=\"num\">" +
           (held.is_null() ? std::string("not recorded") : num_or(nv(held, "held_s"), 0, "")) + "</td><td>" +
           esc(held.is_null() ? std::string("not recorded")
                              : sv(held, "stability", "not recorded") +
                                    (nv(held, "stability_threshold_n").value_or(0.0) > 0.0
                                         ? " (threshold " + fmt(*nv(held, "stability_threshold_n"), 1) + " N)"
                                         : std::string())) +
           "</td></tr>\n";
      ++k;
    };
    for (const auto& w : warm_ups) {
      if (sv(w, "type") == "warm_up_started") {
        if (!pending.is_null()) row(pending, json());
        pending = w;
      } else {
        row(pending.is_null() ? w : pending, w);
        pending = json();
      }
    }
    if (!pending.is_null()) row(pending, json());
    if (k == 0) h += "<tr><td colspan=\"5\">no warm-up recorded</td></tr>\n";
  }
  h += "</table>\n";
  if (loss_points.empty() && loss_skips.empty()) {
    h += "<p id=\"loss-map\">Loss map: none measured (first setting: " +
         esc(first.value("strategy", "not recorded")) + ").</p>\n";
  } else {
    h += "<table id=\"loss-map\"><tr><th>speed km/h</th><th>force to hold N</th><th>s.d. "
         "N</th><th>samples</th></tr>\n";
    for (const auto& p : loss_points)
      h += "<tr><td class=\"num\">" + num_or(nv(p, "speed_kmh"), 0, "") + "</td><td class=\"num\">" +
           num_or(nv(p, "force_n"), 1, "") + "</td><td class=\"num\">" + num_or(nv(p, "force_sd_n"), 2, "") +
           "</td><td class=\"num\">" + num_or(nv(p, "samples"), 0, "") + "</td></tr>\n";
    for (const auto& p : loss_skips)
      h += "<tr><td class=\"num\">" +
           (nv(p, "speed_kmh") ? fmt(*nv(p, "speed_kmh"), 0) : std::string("all")) +
           "</td><td colspan=\"3\">skipped: " + esc(sv(p, "why")) + "</td></tr>\n";
    h += "</table>\n";
  }
  // The coasts between the holds (docs/standards.md §3.15) and the difference taken off the map.
  if (!loss_coasts.empty()) {
    h += "<table id=\"loss-map-coasts\"><tr><th>coast km/h</th><th>speed km/h</th><th>band force "
         "N</th><th>set "
         "force N</th><th>coasting loss N</th></tr>\n";
    for (const auto& k : loss_coasts) {
      const std::string span = num_or(nv(k, "from_kmh"), 0, "") + " \u2192 " + num_or(nv(k, "to_kmh"), 0, "");
      const json pts = k.contains("points") && k["points"].is_array() ? k["points"] : json::array();
      for (const auto& p : pts)
        h += "<tr><td>" + span + "</td><td class=\"num\">" + num_or(nv(p, "speed_kmh"), 0, "") +
             "</td><td class=\"num\">" + num_or(nv(p, "band_force_n"), 1, "") + "</td><td class=\"num\">" +
             num_or(nv(p, "set_force_n"), 1, "") + "</td><td class=\"num\">" +
             num_or(nv(p, "coasting_loss_n"), 1, "") + "</td></tr>\n";
      if (!sv(k, "note").empty())
        h += "<tr><td>" + span + "</td><td colspan=\"4\">" + esc(sv(k, "note")) + "</td></tr>\n";
    }
    h += "</table>\n";
    if (first.contains("inputs") && first["inputs"].contains("coast_correction")) {
      const json& c = first["inputs"]["coast_correction"];
      h += "<p id=\"loss-map-correction\">Steady-versus-coasting difference (lab policy): " +
           (bv(c, "used").value_or(false)
                ? "d(v) = " + num_or(nv(c, "d0_n"), 2, "N") + " + " + num_or(nv(c, "d2_n_per_kmh2"), 6, "") +
                      " \u00b7 v\u00b2 (km/h) from " + num_or(nv(c, "points"), 0, "") +
                      " coast points, taken off the loss map"
                : "not used (" + esc(sv(c, "why")) + ")") +
           ".</p>\n";
    }
  }
  // The warming the first setting anticipated (docs/standards.md §3.16); each adjustment's is in its reason.
  if (first.contains("inputs") && first["inputs"].contains("anticipation")) {
    const json& a = first["inputs"]["anticipation"];
    h += "<p id=\"first-setting-anticipation\">Warming anticipated in the first setting (lab policy): " +
         (bv(a, "used").value_or(false)
              ? "the map's loss scaled by 1 + " + num_or(nv(a, "ratio"), 4, "") + " (a change of " +
                    num_or(nv(a, "change_n"), 1, "N") + " predicted at the warm-up speed from " +
                    num_or(nv(a, "from_s"), 0, "s") + " to " + num_or(nv(a, "to_s"), 0, "s") +
                    (nv(a, "aimed").value_or(1.0) > 1.0
                         ? ", the mean over the " + num_or(nv(a, "aimed"), 0, "") +
                               " coast-downs it must pass, the last at " + num_or(nv(a, "to_last_s"), 0, "s")
                         : std::string()) +
                    ")"
              : "none (" + esc(sv(a, "why")) + ")") +
         ".</p>\n";
  }

  // Each coast-down: its quality and timing, and both estimators.
  h += "<h2>Coast-downs</h2>\n<table id=\"coastdown-quality\"><tr><th>run</th><th>usable</th><th>duration "
       "s</th><th>run-up</th><th>release timing</th><th>regression residual s.d. N</th><th>u(f0) N (standard "
       "uncertainty)</th><th>worst "
       "|dev| N</th></tr>\n";
  for (const auto& r : runs) {
    const int n = r.value("run", 0);
    std::string timing = "not recorded";
    if (release_timing.count(n)) {
      const json& t = release_timing[n];
      timing = num_or(nv(t, "gap_s"), 1, "s") + " after the warm-up: 120 s rule " +
               (bv(t, "within").value_or(false) ? "met" : "MISSED");
    } else if (consecutive_timing.count(n)) {
      timing = num_or(nv(consecutive_timing[n], "gap_since_last_coast_s"), 1, "s") +
               " after the previous coast (consecutive)";
    }
    std::string runup = "not checked";
    if (run_up_checks.count(n)) {
      const json& c = run_up_checks[n];
      runup = num_or(nv(c, "run_up_s"), 1, "s") + ", mean a\u00b7v " +
              num_or(nv(c, "mean_av_m2ps3"), 1, "m\u00b2/s\u00b3") +
              (bv(c, "meets").value_or(true) ? "" : " TOO SLOW");
    }
    const bool usable = r.value("usable", false);
    h += "<tr><td class=\"num\">" + std::to_string(n) + "</td><td>" +
         (usable ? std::string("yes") : "no: " + esc(r.value("unusable_reason", ""))) +
         "</td><td class=\"num\">" + num_or(nv(r, "duration_s"), 1, "") + "</td><td>" + esc(runup) +
         "</td><td" + (timing.find("MISSED") != std::string::npos ? " class=\"fail\"" : "") + ">" +
         esc(timing) + "</td>" +
         (nv(r, "regression_residual_sd_n") ? cell(r, "regression_residual_sd_n", 3)
                                            : std::string("<td>not recorded</td>")) +
         (nv(ov(r, "measured_std_error"), "f0_n") ? cell(r, "measured_std_error.f0_n", 3)
                                                  : std::string("<td>not recorded</td>")) +
         (usable ? cell(r, "check.worst_abs_deviation_n", 2) : std::string("<td>\u2014</td>")) + "</tr>\n";
  }
  h += "</table>\n<p class=\"note\">The band-time regression (the standard's: the mean deceleration force in "
       "each speed band, fitted F = f0 + f1\u00b7v + f2\u00b7v\u00b2) and the whole-trace fit (the speed "
       "trace integrated against a road-load curve) estimate the same coefficients independently; the "
       "difference is the largest |F<sub>band</sub>(v) \u2212 F<sub>whole</sub>(v)| over the reference "
       "speeds.</p>\n";
  h += "<table id=\"estimators\"><tr><th>run</th><th>estimator</th><th>f0 N</th><th>f1 N/(km/h)</th><th>f2 "
       "N/(km/h)\u00b2</th><th>largest difference N</th></tr>\n";
  for (const auto& r : runs) {
    if (!r.value("usable", false)) continue;
    const std::string n = std::to_string(r.value("run", 0));
    const std::string mk(record::measured_member(r));
    const bool whole = record::is_road_load_json(ov(ov(r, "whole_trace"), "coefficients"));
    const std::string diff = nv(r, "estimator_disagreement_n")
                                 ? cell(r, "estimator_disagreement_n", 2, "",
                                        bv(r, "estimators_disagree").value_or(false) ? "fail" : "")
                                 : std::string("<td>not recorded</td>");
    h += "<tr><td class=\"num\" rowspan=\"" + std::string(whole ? "2" : "1") + "\">" + n +
         "</td><td>band-time regression</td>" + cell(r, coef_path(mk, 0), 2) + cell(r, coef_path(mk, 1), 4) +
         cell(r, coef_path(mk, 2), 5) + (whole ? "<td rowspan=\"2\"" + diff.substr(3) : diff) + "</tr>\n";
    if (whole)
      h += "<tr><td>whole-trace fit</td>" + cell(r, "whole_trace.coefficients.f0_n", 2) +
           cell(r, "whole_trace.coefficients.f1_n_per_kmh", 4) +
           cell(r, "whole_trace.coefficients.f2_n_per_kmh2", 5) + "</tr>\n";
  }
  h += "</table>\n";

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
  // The CSV exports: metric (with A, B, C beside) by default; every table in US units on request.
  CsvTable coef_csv(csv_format), dev_csv(csv_format);
  if (csv_format.us_units)
    for (const char* c : {"run", "what", "a_lbf", "b_lbf_per_mph", "c_lbf_per_mph2"}) coef_csv.text(c);
  else
    for (const char* c :
         {"run", "what", "f0_n", "f1_n_per_kmh", "f2_n_per_kmh2", "a_lbf", "b_lbf_per_mph", "c_lbf_per_mph2"})
      coef_csv.text(c);
  coef_csv.end_row();
  auto csv_coef = [&](const std::string& run, const std::string& what, const core::RoadLoad& c) {
    const core::RoadLoadUs u = core::to_us(c);
    coef_csv.text(run).text(what);
    if (!csv_format.us_units) coef_csv.number(c.f0_n, 4).number(c.f1_n_per_kmh, 6).number(c.f2_n_per_kmh2, 7);
    coef_csv.number(u.a_lbf, 4).number(u.b_lbf_per_mph, 6).number(u.c_lbf_per_mph2, 7).end_row();
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
  h +=
      "<h2>Forces at the reference speeds (tolerance ±" + fmt(tol, 1) +
      " N)</h2>\n<p>Decision rule: " + esc(rule_text) +
      ". u is the standard uncertainty of the regressed force at the speed (least-squares covariance).</p>\n";
  static const char* const kDevUs[] = {"run",          "speed_mph",     "target_lbf",
                                       "measured_lbf", "deviation_lbf", "pass"};
  static const char* const kDevSi[] = {"run", "speed_kmh", "target_n", "measured_n", "deviation_n", "pass"};
  for (const char* c : csv_format.us_units ? kDevUs : kDevSi) dev_csv.text(c);
  dev_csv.end_row();
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
      const double v = rows[i].value("speed_kmh", 0.0), t = rows[i].value("target_n", 0.0),
                   m = rows[i].value("measured_n", 0.0), d = rows[i].value("deviation_n", 0.0);
      dev_csv.text(n);
      if (csv_format.us_units)
        dev_csv.number(core::units::kmh_to_mph(v), 4)
            .number(core::units::n_to_lbf(t), 4)
            .number(core::units::n_to_lbf(m), 4)
            .number(core::units::n_to_lbf(d), 4);
      else
        dev_csv.number(v, 1).number(t, 3).number(m, 3).number(d, 3);
      dev_csv.text(pass ? "pass" : "fail").end_row();
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
    // The band is a few pixels high at this scale: its edges are drawn, and the deviation panel below shows
    // it at a readable scale.
    Band band{"target ± " + fmt(tol, 0) + " N (see the deviation panel)", vs, {}, {}, "#009E73", true};
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
    Band band{"tolerance ± " + fmt(tol, 0) + " N", {}, {}, {}, "#009E73", true};
    p.include_y(1.3 * tol);  // the band's edges inside the frame, with a margin
    p.include_y(-1.3 * tol);
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
    // The coast-downs of a converged session lie on top of each other: each has its own colour and dash, and
    // they are drawn from the last to the first, the later ones wider, so coast-down 1 stays visible on top.
    static const char* const kDash[] = {"7,4", "", "2,3", "10,3,2,3"};
    std::vector<Series> drawn;
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
      Series s{"coast-down " + std::to_string(r.value("run", 0)), {}, {}, kPalette[k % 6], 1.5};
      s.dash = kDash[k % 4];
      ++k;
      const std::size_t step = std::max<std::size_t>(1, t.size() / 600);
      for (std::size_t i = 0; i < t.size(); i += step) {
        s.x.push_back(t[i] - t.front());
        s.y.push_back(v[i]);
      }
      drawn.push_back(std::move(s));
    }
    for (std::size_t i = drawn.size(); i-- > 0;) {
      drawn[i].width = 1.4 + 1.0 * static_cast<double>(i);
      p.add(drawn[i]);
    }
    h += p.render();
  }
  {
    SvgPlot p("plot-convergence", "Worst deviation from the target per coast-down", "coast-down",
              "worst |deviation| (N)", 720, 300);
    Series s{"worst |deviation|", {}, {}, "#0072B2", 2.0, true};
    Series line{"tolerance " + fmt(tol, 0) + " N", {}, {}, "#D55E00", 1.5, false, true};
    line.cls = "tolerance";
    p.integer_x();  // coast-downs are counted
    for (const auto& r : runs)
      if (r.value("usable", false)) {
        s.x.push_back(r.value("run", 0));
        s.y.push_back(r["check"].value("worst_abs_deviation_n", 0.0));
      }
    if (!s.x.empty()) {
      line.x = {s.x.front() - 0.5, s.x.back() + 0.5};
      line.y = {tol, tol};
    }
    // The y axis starts at 0 N and reaches above the tolerance line and the largest point, so neither sits on
    // the frame.
    p.include_y(0.0);
    double top = tol;
    for (double y : s.y) top = std::max(top, y);
    p.include_y(1.15 * top);
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
      !record::write_durable(out.coefficients_csv, coef_csv.str(), err) ||
      !record::write_durable(out.deviations_csv, dev_csv.str(), err))
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
  return write_report(folder, software_version, options, CsvFormat{});
}

ReportFiles write_report(const std::string& folder, const std::string& software_version,
                         const CsvFormat& csv) {
  return write_report(folder, software_version, default_verify_options(), csv);
}

ReportFiles write_report(const std::string& folder, const std::string& software_version,
                         const record::VerifyOptions& options, const CsvFormat& csv) {
  ReportFiles out;
  // Whether the folder is a session folder is settled before anything is written or removed: only where
  // events.jsonl holds a session's log is a report written, or an earlier one removed when none can be.
  // Nothing else is ever touched: files of the same names in another folder are not ours to remove. Read
  // without leaving the folder (record/inside.hpp).
  const record::InsideFile ev = record::read_inside(folder, "events.jsonl");
  if (ev.status == record::InsideStatus::missing) {
    out.not_a_session_folder = true;
    out.error = folder +
                " is not a session folder: it has no events.jsonl (the session's log); nothing was " +
                "written or removed";
    return out;
  }
  if (ev.status != record::InsideStatus::ok) {
    out.error = "no readable events.jsonl in " + folder + ": " + ev.error +
                " (no report was written; nothing was removed)";
    return out;
  }
  if (const std::string not_session = not_a_session_log(ev.content); !not_session.empty()) {
    out.not_a_session_folder = true;
    out.error = folder + " is not a session folder: its events.jsonl " + not_session +
                "; nothing was written or removed";
    return out;
  }
  std::string why;
  try {
    why = write_report_body(folder, ev.content, software_version, options, csv, out);
  } catch (const std::exception& e) {
    why = "cannot make the report of " + folder + ": " + e.what();
  }
  if (why.empty()) return out;
  remove_stale(folder);
  out.ok = false;
  out.error = why +
              " (no report was written; an earlier report's report.html, report.pdf, coefficients.csv and "
              "deviations.csv, if any, were removed so that none looks current)";
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
