#include "app/overview.hpp"

#include <cstdio>

#include "checks/cell_history.hpp"
#include "report/svg_plot.hpp"

namespace loadtrim::app {

namespace {

using report::xml_escape;

// "running" or "stale" for a running row of cell `c`, against the time the view was read. Stale: a start that
// is not a UTC time (never written so by loadtrim), older than v.stale_after_s, more than a minute in the
// future (a clock not to be believed), or followed by a later start on the same cell (a cell runs one session
// or check at a time, so an earlier one without an end crashed or lost its end: the hostile review saw a
// killed session shown as running beside the cell's next, accepted session).
const char* running_state(const store::CellOverview& c, const store::RunningEntry& r, const OverviewView& v) {
  const auto now = checks::parse_utc_s(v.now_utc);
  const auto started = checks::parse_utc_s(r.started_utc);
  if (!now || !started) return "stale";
  if (*now - *started > v.stale_after_s || *started - *now > 60.0) return "stale";
  auto later = [&](const std::string& utc) {
    const auto t = checks::parse_utc_s(utc);
    return t && *t > *started;
  };
  if ((c.session && later(c.session->started_utc)) || (c.check && later(c.check->started_utc)))
    return "stale";
  for (const auto& o : c.running)
    if (&o != &r && later(o.started_utc)) return "stale";
  return "running";
}

const char* cell_state(const store::CellOverview& c, const OverviewView& v) {
  const char* state = "idle";
  for (const auto& r : c.running) {
    if (std::string(running_state(c, r, v)) == "running") return "running";
    state = "stale";
  }
  return state;
}

// Text for a terminal: control characters from the store (escape sequences, line breaks) shown as '?'.
std::string printable(std::string s) {
  for (char& ch : s)
    if (static_cast<unsigned char>(ch) < 0x20 || ch == 0x7f) ch = '?';
  return s;
}

nlohmann::json latest_json(const std::optional<store::LatestRow>& r) {
  if (!r) return nullptr;
  nlohmann::json j = {{"what", r->what},
                      {"name", r->name},
                      {"kind", r->kind},
                      {"vehicle", r->vehicle},
                      {"started_utc", r->started_utc},
                      {"result", r->result},
                      {"accepted", r->accepted},
                      {"detail", r->detail},
                      {"folder", r->folder},
                      {"verify_outcome", r->verify_outcome}};
  j["final_set"] = r->final_set ? nlohmann::json{{"f0_n", r->final_set->f0_n},
                                                 {"f1_n_per_kmh", r->final_set->f1_n_per_kmh},
                                                 {"f2_n_per_kmh2", r->final_set->f2_n_per_kmh2}}
                                : nlohmann::json();
  return j;
}

std::string fixed(double v, int decimals) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

std::string set_text(const std::optional<core::RoadLoad>& s) {
  if (!s) return "-";
  return fixed(s->f0_n, 2) + " N, " + fixed(s->f1_n_per_kmh, 4) + " N/(km/h), " + fixed(s->f2_n_per_kmh2, 5) +
         " N/(km/h)^2";
}

// One running row in words: "running since ..., live page at ..." or "no end indexed (stale?)".
std::string running_words(const store::CellOverview& c, const store::RunningEntry& r, const OverviewView& v) {
  const std::string what = r.what + " " + r.name + (r.vehicle.empty() ? "" : " (" + r.vehicle + ")");
  if (std::string(running_state(c, r, v)) == "stale")
    return what + ": started " + r.started_utc + ", no end indexed (stale?)";
  return what + ": running since " + r.started_utc +
         (r.live_url.empty() ? std::string() : ", live page at " + r.live_url);
}

std::string latest_words(const store::LatestRow& r) {
  std::string s = r.what + " " + r.name + " (" + r.kind + (r.vehicle.empty() ? "" : ", " + r.vehicle) +
                  "), started " + r.started_utc + ": " + r.result;
  // The result's own word says it already ("accepted", "not-accepted"); otherwise the verdict is added.
  if (r.what == "session" && r.result != (r.accepted ? "accepted" : "not-accepted"))
    s += std::string(r.accepted ? ", accepted" : ", not accepted");
  if (r.what == "session") s += "; final set " + set_text(r.final_set);
  if (!r.detail.empty()) s += "; " + r.detail;
  return s + "; seal " + r.verify_outcome;
}

}  // namespace

nlohmann::json overview_json(const OverviewView& v) {
  nlohmann::json cells = nlohmann::json::array();
  for (const auto& c : v.cells) {
    nlohmann::json running = nlohmann::json::array();
    for (const auto& r : c.running)
      running.push_back({{"what", r.what},
                         {"name", r.name},
                         {"kind", r.kind},
                         {"vehicle", r.vehicle},
                         {"started_utc", r.started_utc},
                         {"live_url", r.live_url},
                         {"folder", r.folder},
                         {"state", running_state(c, r, v)}});
    cells.push_back({{"cell", c.cell},
                     {"state", cell_state(c, v)},
                     {"running", running},
                     {"session", latest_json(c.session)},
                     {"check", latest_json(c.check)}});
  }
  return {{"store", v.store},
          {"engine", v.engine},
          {"utc", v.now_utc},
          {"stale_after_s", v.stale_after_s},
          {"cells", cells}};
}

std::string overview_text(const OverviewView& v) {
  std::string out = "lab overview from " + v.store + " at " + v.now_utc + "\n";
  if (v.cells.empty()) return out + "no cell has an indexed session, check or running entry\n";
  for (const auto& c : v.cells) {
    out += "cell " + printable(c.cell) + ": " + cell_state(c, v) + "\n";
    for (const auto& r : c.running) out += "  now:           " + printable(running_words(c, r, v)) + "\n";
    out += "  last session:  " + printable(c.session ? latest_words(*c.session) : "none indexed") + "\n";
    out += "  last check:    " + printable(c.check ? latest_words(*c.check) : "none indexed") + "\n";
  }
  return out;
}

namespace {

const char* kStyle =
    "body{font-family:sans-serif;margin:1.2em;color:#1b1b1b;background:#fafaf7}"
    "h1{font-size:1.3em}table{border-collapse:collapse}td,th{border:1px solid #bbb;padding:.25em .5em;"
    "vertical-align:top;text-align:left}.running{color:#1f4e9c;font-weight:bold}.stale{color:#b35c00}"
    ".fail{color:#a00000;font-weight:bold}.pass{color:#0a5a0a}.small{color:#555;font-size:.85em}";

std::string head(int refresh_s) {
  return std::string(
             "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>loadtrim lab "
             "overview</title>") +
         (refresh_s > 0 ? "<meta http-equiv=\"refresh\" content=\"" + std::to_string(refresh_s) + "\">"
                        : "") +
         "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><style>" + kStyle +
         "</style></head><body>\n";
}

std::string latest_cell(const std::optional<store::LatestRow>& r) {
  if (!r) return "<td class=\"small\">none indexed</td>";
  const bool good = r->accepted;
  std::string s = "<td><span class=\"" + std::string(good ? "pass" : "fail") + "\">" + xml_escape(r->result) +
                  "</span> " + xml_escape(r->what) + " " + xml_escape(r->name) + " (" + xml_escape(r->kind) +
                  (r->vehicle.empty() ? "" : ", " + xml_escape(r->vehicle)) +
                  ")<br><span class=\"small\">started " + xml_escape(r->started_utc) + "; seal " +
                  xml_escape(r->verify_outcome) + "</span>";
  if (r->what == "session") s += "<br>final set " + xml_escape(set_text(r->final_set));
  if (!r->detail.empty()) s += "<br><span class=\"small\">" + xml_escape(r->detail) + "</span>";
  return s + "<br><span class=\"small\">" + xml_escape(r->folder) + "</span></td>";
}

}  // namespace

std::string overview_html(const OverviewView& v, int refresh_s) {
  std::string out = head(refresh_s);
  out += "<h1>Lab overview</h1>\n<p class=\"small\">from " + xml_escape(v.store) + " (" +
         xml_escape(v.engine) + ") at " + xml_escape(v.now_utc) +
         "; read-only: it reads the lab's record store and never commands a dyno" +
         (refresh_s > 0 ? "; refreshed every " + std::to_string(refresh_s) + " s" : std::string()) + "</p>\n";
  if (v.cells.empty())
    return out + "<p>No cell has an indexed session, check or running entry.</p></body></html>\n";
  out +=
      "<table id=\"cells\"><tr><th>cell</th><th>now</th><th>last session</th><th>last dyno check</th></tr>\n";
  for (const auto& c : v.cells) {
    const std::string state = cell_state(c, v);
    out += "<tr data-cell=\"" + xml_escape(c.cell) + "\" data-state=\"" + state + "\"><td>" +
           xml_escape(c.cell) + "</td><td>";
    if (c.running.empty()) out += "<span class=\"small\">idle</span>";
    for (const auto& r : c.running) {
      const bool stale = std::string(running_state(c, r, v)) == "stale";
      out += "<div class=\"" + std::string(stale ? "stale" : "running") + "\">" +
             xml_escape(running_words(c, r, v));
      // The live page's address as a link only when it is an http address the tool itself printed.
      if (!stale && r.live_url.rfind("http://", 0) == 0)
        out += " <a href=\"" + xml_escape(r.live_url) + "\">open</a>";
      out += "</div>";
    }
    out += "</td>" + latest_cell(c.session) + latest_cell(c.check) + "</tr>\n";
  }
  return out + "</table></body></html>\n";
}

std::string overview_error_html(const std::string& sentence, int refresh_s) {
  return head(refresh_s) + "<h1>Lab overview</h1><p class=\"fail\">" + xml_escape(sentence) +
         "</p></body></html>\n";
}

}  // namespace loadtrim::app
