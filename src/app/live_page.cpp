#include "app/live_page.hpp"

#include <arpa/inet.h>
#include <httplib.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdio>
#include <cstdlib>
#include <deque>
#include <iostream>
#include <mutex>
#include <nlohmann/json.hpp>
#include <thread>

#include "session/event_text.hpp"

namespace loadtrim::app {

namespace {

// How much the page keeps: the last sentences, and trace points at least this far apart in controller time
// (a 300 s coast-down is 1200 points). Common practice, no source: enough to read, small enough to resend.
constexpr std::size_t kMaxLines = 200;
constexpr double kTracePointSpacingS = 0.25;
constexpr std::size_t kMaxTracePoints = 4000;
// How often a stream sends at most, and how long it waits before a keep-alive comment (wall time).
constexpr auto kStreamPeriod = std::chrono::milliseconds(250);
constexpr auto kKeepAlive = std::chrono::seconds(5);

bool same_token(const std::string& a, const std::string& b) {
  // Constant-time for equal lengths (the length of a token is not a secret worth hiding).
  if (a.size() != b.size()) return false;
  unsigned char d = 0;
  for (std::size_t i = 0; i < a.size(); ++i) d |= static_cast<unsigned char>(a[i] ^ b[i]);
  return d == 0;
}

const char* kPage = R"PAGE(<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>loadtrim live</title>
<meta name="viewport" content="width=device-width, initial-scale=1">
<style>
body{font-family:sans-serif;margin:1.2em;color:#1b1b1b;background:#fafaf7}
h1{font-size:1.3em;margin:0 0 .4em}
#caution{border:2px solid #b35c00;background:#fff4e5;padding:.5em .8em;white-space:pre-wrap;font-size:.9em}
.facts span{display:inline-block;margin-right:1.5em}
.facts b{font-size:1.2em}
svg{background:#fff;border:1px solid #999}
table{border-collapse:collapse;margin:.4em 0}td,th{border:1px solid #bbb;padding:.15em .5em;text-align:right}
.fail{color:#a00000;font-weight:bold}.pass{color:#0a5a0a}
#lines{font-family:monospace;font-size:.85em;max-height:22em;overflow:auto;background:#fff;border:1px solid #ccc;padding:.4em}
#link{color:#555;font-size:.85em}
</style></head><body>
<h1 id="title"></h1>
<div id="caution"></div>
<p class="facts"><span>State: <b id="state">waiting for the session</b></span><span>Coast-down: <b id="run">-</b></span>
<span>Speed: <b id="speed">-</b> km/h</span><span>Time left (estimate): <b id="left">-</b></span>
<span>Cell time: <b id="celltime">-</b></span></p>
<p id="link">read-only page: it shows the session, it never commands the dyno. <span id="conn">connecting…</span></p>
<h2>Coast-down <span id="trace-run">-</span>: speed over time</h2>
<svg id="trace" width="720" height="260" viewBox="0 0 720 260" data-points="0"><polyline id="trace-line" fill="none" stroke="#1f4e9c" stroke-width="1.5" points=""/></svg>
<div id="session-part"><h2>Deviations at the reference speeds</h2><div id="coastdowns">none yet</div></div>
<div id="check-part" hidden><h2>Results as they come</h2><div id="results">none yet</div></div>
<h2>What happened</h2><div id="lines"></div>
<script>
"use strict";
const $ = (id) => document.getElementById(id);
let version = -1;
function fmt(s){ if(!(s>=0)) return "-"; s=Math.round(s); const h=Math.floor(s/3600), m=Math.floor(s%3600/60), x=s%60;
  return h+":"+String(m).padStart(2,"0")+":"+String(x).padStart(2,"0"); }
function draw(t){
  const pts = t.points || []; const svg = $("trace"); svg.setAttribute("data-points", String(pts.length));
  $("trace-run").textContent = t.run ? String(t.run) : "-";
  if(!pts.length){ $("trace-line").setAttribute("points",""); return; }
  const t0 = pts[0][0], t1 = Math.max(pts[pts.length-1][0], t0 + 1);
  let vmax = 10; for(const p of pts) vmax = Math.max(vmax, p[1]);
  $("trace-line").setAttribute("points", pts.map(p => ((p[0]-t0)/(t1-t0)*700+10).toFixed(1)+","+(250-p[1]/vmax*240).toFixed(1)).join(" "));
}
function tables(list){
  const box = $("coastdowns"); if(!list.length) return; box.textContent = "";
  for(const c of list){
    const h = document.createElement("p"); h.textContent = "Coast-down " + c.run + (c.usable ? (c.pass ? ": within tolerance" : ": outside tolerance") : ": not usable (" + c.why + ")");
    h.className = c.usable ? (c.pass ? "pass" : "fail") : "fail"; box.appendChild(h);
    if(!c.rows || !c.rows.length) continue;
    const tb = document.createElement("table"); const hr = tb.insertRow();
    for(const k of ["speed km/h","target N","measured N","deviation N","limit N",""]) { const th=document.createElement("th"); th.textContent=k; hr.appendChild(th); }
    for(const r of c.rows){ const tr = tb.insertRow();
      for(const v of [r.speed_kmh.toFixed(0), r.target_n.toFixed(1), r.measured_n.toFixed(1), r.deviation_n.toFixed(1), r.limit_n.toFixed(1)]) tr.insertCell().textContent = v;
      const cell = tr.insertCell(); cell.textContent = r.pass ? "pass" : "FAIL"; cell.className = r.pass ? "pass" : "fail"; }
    box.appendChild(tb);
  }
}
function num(v){ if(typeof v !== "number") return v === null || v === undefined ? "" : String(v);
  return Math.abs(v) >= 100 || Number.isInteger(v) ? v.toFixed(Number.isInteger(v) ? 0 : 1) : v.toPrecision(4); }
function results(list){
  const box = $("results"); if(!list.length) return; box.textContent = "";
  for(const r of list){
    const h = document.createElement("p"); h.textContent = r.title + (r.verdict ? ": " + r.verdict : "");
    if(r.passed !== null) h.className = r.passed ? "pass" : "fail"; box.appendChild(h);
    if(!r.rows.length) continue;
    const tb = document.createElement("table"); tb.className = "result"; const hr = tb.insertRow();
    for(const k of r.columns){ const th=document.createElement("th"); th.textContent=k; hr.appendChild(th); }
    for(const row of r.rows){ const tr = tb.insertRow();
      for(const v of row){ const c = tr.insertCell(); c.textContent = typeof v === "boolean" ? (v ? "pass" : "FAIL") : num(v);
        if(typeof v === "boolean") c.className = v ? "pass" : "fail"; } }
    box.appendChild(tb);
  }
}
function show(s){
  if(s.version === version) return; version = s.version;
  $("title").textContent = s.title; $("caution").textContent = s.cautions;
  const check = s.what === "check";
  $("session-part").hidden = check; $("check-part").hidden = !check;
  $("state").textContent = (check && !s.finished && s.step ? s.step : s.state_words) + (s.finished ? " (" + s.result + ")" : "");
  $("state").setAttribute("data-state", s.state);
  $("run").textContent = s.coastdown ? String(s.coastdown) : "-";
  $("speed").textContent = s.speed_kmh.toFixed(1); $("left").textContent = s.finished ? "0:00:00" : fmt(s.remaining_s);
  $("celltime").textContent = fmt(s.cell_time_s);
  draw(s.trace); if(check) results(s.results); else tables(s.coastdowns);
  const box = $("lines"); box.textContent = "";
  for(const l of s.lines){ const d = document.createElement("div"); d.textContent = l; box.appendChild(d); }
  box.scrollTop = box.scrollHeight;
}
const first = /*SNAPSHOT*/null;
if (first) show(first);
const es = new EventSource("events" + location.search);
es.onopen = () => { $("conn").textContent = "live"; };
es.onerror = () => { $("conn").textContent = "no connection to the tool (the session may have ended)"; };
es.onmessage = (m) => { try { show(JSON.parse(m.data)); } catch(e) {} };
</script></body></html>
)PAGE";

// A dyno check's "analysed" record as the page shows it: a title, the pass and verdict when it has them, and
// the rows of its first table (the parasitic curve's points, the coast-down's intervals, the inertia sets,
// the rate runs, the response steps) with their plain members as columns.
nlohmann::json result_rows(const nlohmann::json& j) {
  nlohmann::json out = {
      {"title", j.contains("run") && j["run"].is_number()
                    ? "coast-down " + std::to_string(j["run"].get<int>())
                    : std::string("result")},
      {"passed", j.contains("passed") && j["passed"].is_boolean() ? j["passed"] : nlohmann::json()},
      {"verdict", j.value("verdict", std::string())},
      {"columns", nlohmann::json::array()},
      {"rows", nlohmann::json::array()}};
  for (const char* key : {"points", "intervals", "sets", "runs", "steps"}) {
    if (!j.contains(key) || !j[key].is_array() || j[key].empty() || !j[key][0].is_object()) continue;
    std::vector<std::string> columns;
    for (const auto& [k, v] : j[key][0].items())
      if (v.is_primitive() && k != "message" && k != "reason") columns.push_back(k);
    for (const auto& c : columns) out["columns"].push_back(c);
    for (const auto& row : j[key]) {
      nlohmann::json r = nlohmann::json::array();
      for (const auto& c : columns)
        r.push_back(row.is_object() && row.contains(c) ? row[c] : nlohmann::json());
      out["rows"].push_back(r);
    }
    break;
  }
  return out;
}

// Who may read a page (the live page, the overview): with a token, a request that carries it; without one
// (loopback only), a request that names this host as loopback.
bool request_allowed(const httplib::Request& req, const std::string& token) {
  if (token.empty()) {
    // Without a token the page is on loopback: a request must name this host as loopback (a web page
    // elsewhere that rebinds its own name to 127.0.0.1 gets nothing).
    const std::string h = req.get_header_value("Host");
    const std::string name = h.substr(0, h.rfind(':'));
    in_addr a{};
    return name == "localhost" ||
           (::inet_pton(AF_INET, name.c_str(), &a) == 1 && (ntohl(a.s_addr) >> 24) == 127);
  }
  if (req.has_param("token") && same_token(req.get_param_value("token"), token)) return true;
  const std::string auth = req.get_header_value("Authorization");
  return auth.rfind("Bearer ", 0) == 0 && same_token(auth.substr(7), token);
}

}  // namespace

struct LivePage::Impl {
  std::string host, token, title, cautions, what = "session";
  int port = 0;
  httplib::Server server;
  std::thread thread;
  std::atomic<bool> stopping{false};
  std::atomic<int> streams{0};  // /events connections open

  std::mutex mutex;
  std::condition_variable changed;
  std::uint64_t version = 0;
  session::State state = session::State::connect;
  int coastdown = 0;
  double speed_kmh = 0.0, cell_time_s = 0.0, remaining_s = 0.0;
  bool finished = false;
  std::string result;
  std::deque<std::string> lines;
  int trace_run = 0;
  std::vector<std::pair<double, double>> trace;  // (cell time s, km/h) of the running or last coast-down
  nlohmann::json coastdowns = nlohmann::json::array();
  std::string step;                                  // a check's step in words
  nlohmann::json results = nlohmann::json::array();  // a check's analysed results, as they come
  session::TextContext text_context;

  std::string snapshot() {
    std::lock_guard<std::mutex> lock(mutex);
    nlohmann::json pts = nlohmann::json::array();
    for (const auto& [t, v] : trace)
      pts.push_back({std::round(t * 100.0) / 100.0, std::round(v * 100.0) / 100.0});
    nlohmann::json ls = nlohmann::json::array();
    for (const auto& l : lines) ls.push_back(l);
    return nlohmann::json{{"version", version},
                          {"what", what},
                          {"step", step},
                          {"results", results},
                          {"title", title},
                          {"cautions", cautions},
                          {"state", session::to_string(state)},
                          {"state_words", session::state_words(state)},
                          {"coastdown", coastdown},
                          {"speed_kmh", speed_kmh},
                          {"cell_time_s", cell_time_s},
                          {"remaining_s", remaining_s},
                          {"finished", finished},
                          {"result", result},
                          {"trace", {{"run", trace_run}, {"points", pts}}},
                          {"coastdowns", coastdowns},
                          {"lines", ls}}
        .dump(-1, ' ', false, nlohmann::json::error_handler_t::replace);
  }

  bool allowed(const httplib::Request& req) const { return request_allowed(req, token); }
};

namespace {

bool parse_bind(const std::string& bind, std::string& host, int& port, bool& loopback, std::string& error) {
  const auto colon = bind.rfind(':');
  const std::string form = "HOST:PORT with a numeric IPv4 host and a port 0-65535, e.g. 127.0.0.1:8080";
  if (colon == std::string::npos || colon == 0 || colon + 1 == bind.size()) {
    error = "\"" + bind + "\" is not " + form;
    return false;
  }
  host = bind.substr(0, colon);
  const std::string p = bind.substr(colon + 1);
  in_addr a{};
  if (::inet_pton(AF_INET, host.c_str(), &a) != 1 || p.size() > 5 ||
      !std::all_of(p.begin(), p.end(), [](char c) { return c >= '0' && c <= '9'; }) || std::stoi(p) > 65535) {
    error = "\"" + bind + "\" is not " + form;
    return false;
  }
  port = std::stoi(p);
  loopback = (ntohl(a.s_addr) >> 24) == 127;
  return true;
}

// The rules every page of ours follows: a request that request_allowed() refuses gets 401 before any route.
void guard(httplib::Server& server, const std::string& token) {
  server.set_pre_routing_handler([token](const httplib::Request& req, httplib::Response& res) {
    if (request_allowed(req, token)) return httplib::Server::HandlerResponse::Unhandled;
    res.status = 401;
    res.set_content("this page needs its access token\n", "text/plain");
    return httplib::Server::HandlerResponse::Handled;
  });
}

void page_headers(httplib::Response& res) {
  res.set_header("Cache-Control", "no-store");
  res.set_header("X-Content-Type-Options", "nosniff");
  // A token given as ?token= never leaves in a Referer header (the page links only to itself anyway).
  res.set_header("Referrer-Policy", "no-referrer");
  res.set_header(
      "Content-Security-Policy",
      "default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; connect-src 'self'");
}

// Binds (port 0: any free port, then `port` is the one taken) and serves on a thread of its own.
bool listen(httplib::Server& server, const std::string& host, int& port, const std::string& bind,
            std::thread& thread, std::string& error) {
  server.set_keep_alive_max_count(10);
  // A connection that says nothing is dropped within a second, so that idle sockets cannot hold the end of a
  // session (the server finishes the connections it has before it stops).
  server.set_read_timeout(1, 0);
  server.set_keep_alive_timeout(1);
  if (port == 0) {
    port = server.bind_to_any_port(host);
    if (port <= 0) {
      error = "the page could not bind to " + host;
      return false;
    }
  } else if (!server.bind_to_port(host, port)) {
    error = "the page could not bind to " + bind + " (in use, or not an address of this host)";
    return false;
  }
  thread = std::thread([&server] { server.listen_after_bind(); });
  return true;
}

}  // namespace

LiveOptions live_options_for(const std::string& bind) {
  const char* token = std::getenv("LOADTRIM_LIVE_TOKEN");
  return {bind, token ? token : ""};
}

bool check_live_options(const LiveOptions& options, std::string& error) {
  std::string host;
  int port = 0;
  bool loopback = true;
  if (!parse_bind(options.bind, host, port, loopback, error)) return false;
  if (!loopback && options.token.empty()) {
    error = "the live page on " + options.bind +
            " (not a loopback address) needs an access token: set LOADTRIM_LIVE_TOKEN (docs/live.md)";
    return false;
  }
  return true;
}

std::unique_ptr<LivePage> LivePage::start(const LiveOptions& options, const std::string& title,
                                          const std::string& cautions, std::string& error,
                                          const std::string& what) {
  auto impl = std::make_unique<Impl>();
  bool loopback = true;
  if (!check_live_options(options, error) ||
      !parse_bind(options.bind, impl->host, impl->port, loopback, error))
    return nullptr;
  impl->token = options.token;
  impl->what = what;
  impl->title = title;
  impl->cautions = cautions;
  Impl* p = impl.get();
  guard(p->server, p->token);
  const auto headers = page_headers;
  p->server.Get("/", [p, headers](const httplib::Request&, httplib::Response& res) {
    headers(res);
    // The page carries the state at the time it was served, so it shows the session before the stream's first
    // message. Every "<", ">" and "&" in the JSON is written as its JSON unicode escape, so that no text in
    // it can end or re-open the script element (HTML's script-data states); the JSON means the same.
    std::string snap;
    for (const char c : p->snapshot()) {
      if (c == '<')
        snap += "\\u003c";
      else if (c == '>')
        snap += "\\u003e";
      else if (c == '&')
        snap += "\\u0026";
      else
        snap += c;
    }
    std::string page = kPage;
    const std::string mark = "/*SNAPSHOT*/null";
    page.replace(page.find(mark), mark.size(), snap);
    res.set_content(page, "text/html; charset=utf-8");
  });
  p->server.Get("/state", [p, headers](const httplib::Request&, httplib::Response& res) {
    headers(res);
    res.set_content(p->snapshot(), "application/json");
  });
  p->server.Get("/events", [p, headers](const httplib::Request&, httplib::Response& res) {
    headers(res);
    res.set_chunked_content_provider(
        "text/event-stream", [p, sent = std::uint64_t(-1)](std::size_t, httplib::DataSink& sink) mutable {
          {
            std::unique_lock<std::mutex> lock(p->mutex);
            p->changed.wait_for(lock, kKeepAlive, [&] { return p->version != sent || p->stopping.load(); });
            if (p->version == sent) {
              if (p->stopping) return false;  // nothing new since the last message: the stream ends
              lock.unlock();
              static const char ping[] = ": keep-alive\n\n";
              return sink.write(ping, sizeof ping - 1);
            }
            sent = p->version;
          }
          // What changed is sent, also when the page is stopping: the end's state (a result that came moments
          // before the end) is the last message, then the stream ends.
          const std::string msg = "data: " + p->snapshot() + "\n\n";
          if (!sink.write(msg.data(), msg.size())) return false;
          if (!p->stopping) std::this_thread::sleep_for(kStreamPeriod);
          return true;
        },
        [p](bool) { --p->streams; });
    ++p->streams;
  });
  // Nothing else: no route changes anything (httplib answers other methods and paths with 404/405).
  if (!listen(p->server, p->host, p->port, options.bind, p->thread, error)) return nullptr;
  return std::unique_ptr<LivePage>(new LivePage(std::move(impl)));
}

LivePage::LivePage(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}

LivePage::~LivePage() {
  impl_->stopping = true;
  impl_->changed.notify_all();
  // An open stream is given one stream period to send the end's state (its last message) before the server
  // stops; bounded, so a client that does not read cannot hold the end.
  const auto until = std::chrono::steady_clock::now() + kStreamPeriod;
  while (impl_->streams > 0 && std::chrono::steady_clock::now() < until)
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  impl_->server.stop();
  if (impl_->thread.joinable()) impl_->thread.join();
}

std::string LivePage::url() const {
  return "http://" + impl_->host + ":" + std::to_string(impl_->port) + "/";
}

bool LivePage::on_event(const session::Event& e) {
  const nlohmann::json j = session::record_json(e);
  const std::string type = session::type_of(e);
  std::string sentence;
  try {
    sentence = session::event_sentence(e, impl_->text_context);
  } catch (const std::exception&) {
    sentence = type;
  }
  {
    std::lock_guard<std::mutex> lock(impl_->mutex);
    if (type == "controller") impl_->text_context.connected = true;
    if (std::holds_alternative<session::ev::StateChanged>(e.payload)) {
      impl_->state = std::get<session::ev::StateChanged>(e.payload).to;
    }
    if (type == "coastdown") {
      nlohmann::json c = {{"run", j.value("run", 0)},
                          {"usable", j.value("usable", false)},
                          {"why", j.value("unusable_reason", std::string())}};
      const auto& check = j.contains("check") ? j["check"] : nlohmann::json();
      c["pass"] = check.is_object() && check.value("pass", false);
      nlohmann::json rows = nlohmann::json::array();
      if (check.is_object() && check.contains("rows") && check["rows"].is_array())
        for (const auto& r : check["rows"])
          rows.push_back({{"speed_kmh", r.value("speed_kmh", 0.0)},
                          {"target_n", r.value("target_n", 0.0)},
                          {"measured_n", r.value("measured_n", 0.0)},
                          {"deviation_n", r.value("deviation_n", 0.0)},
                          {"limit_n", r.value("limit_n", 0.0)},
                          {"pass", r.value("pass", false)}});
      c["rows"] = rows;
      impl_->coastdowns.push_back(c);
    }
    if (type == "finished") {
      impl_->finished = true;
      impl_->result = j.value("result", std::string());
    }
    if (type == "analysed") impl_->results.push_back(result_rows(j));
    if (type == "check_finished") {
      impl_->finished = true;
      impl_->state = session::State::finished;
      impl_->result = j.value("end", std::string());
    }
    impl_->lines.push_back(sentence);
    while (impl_->lines.size() > kMaxLines) impl_->lines.pop_front();
    ++impl_->version;
  }
  impl_->changed.notify_all();
  return true;
}

void LivePage::on_progress(const session::Progress& p) {
  {
    std::lock_guard<std::mutex> lock(impl_->mutex);
    impl_->state = p.state;
    impl_->coastdown = p.coastdown;
    impl_->speed_kmh = p.speed_kmh;
    impl_->cell_time_s = p.cell_time_s;
    impl_->remaining_s = p.remaining_estimate_s;
    if (!p.step.empty()) impl_->step = p.step;
    if (p.state == session::State::coast_down) {
      if (impl_->trace_run != p.coastdown) {
        impl_->trace_run = p.coastdown;
        impl_->trace.clear();
      }
      if ((impl_->trace.empty() || p.cell_time_s - impl_->trace.back().first >= kTracePointSpacingS) &&
          impl_->trace.size() < kMaxTracePoints)
        impl_->trace.emplace_back(p.cell_time_s, p.speed_kmh);
    }
    ++impl_->version;
  }
  impl_->changed.notify_all();
}

bool live_bind_usable(const std::string& bind) {
  std::string err;
  if (check_live_options(live_options_for(bind), err)) return true;
  std::cerr << "--live-bind: " << err << "\nrefused: nothing was started.\n";
  return false;
}

std::unique_ptr<LivePage> serve_live_page(const std::string& bind, const std::string& title,
                                          const std::string& cautions, bool json, const std::string& what) {
  std::string err;
  const LiveOptions options = live_options_for(bind);
  auto live = LivePage::start(options, title, cautions, err, what);
  if (!live) {
    std::cerr << "loadtrim: the live page is not served: " << err << " (the " << what << " goes on)\n";
    return nullptr;
  }
  if (json)
    std::printf("%s\n", nlohmann::json({{"type", "live_page"}, {"url", live->url()}}).dump().c_str());
  else
    std::printf("live page: %s (read-only; open it in a browser on this computer%s)\n", live->url().c_str(),
                options.token.empty() ? "" : ", with ?token=...");
  std::fflush(stdout);
  return live;
}

// --- the lab overview's page ---
struct OverviewServer::Impl {
  std::string host;
  int port = 0;
  httplib::Server server;
  std::thread thread;
  std::mutex mutex;  // one store read at a time
};

std::unique_ptr<OverviewServer> OverviewServer::start(const LiveOptions& options, Page page,
                                                      std::string& error) {
  auto impl = std::make_unique<Impl>();
  bool loopback = true;
  if (!check_live_options(options, error) ||
      !parse_bind(options.bind, impl->host, impl->port, loopback, error))
    return nullptr;
  Impl* p = impl.get();
  guard(p->server, options.token);
  auto answer = [p, page](bool json, httplib::Response& res) {
    page_headers(res);
    std::pair<int, std::string> r;
    {
      std::lock_guard<std::mutex> lock(p->mutex);
      r = page(json);
    }
    res.status = r.first;
    res.set_content(r.second, json ? "application/json" : "text/html; charset=utf-8");
  };
  p->server.Get("/", [answer](const httplib::Request&, httplib::Response& res) { answer(false, res); });
  p->server.Get("/overview.json",
                [answer](const httplib::Request&, httplib::Response& res) { answer(true, res); });
  // Nothing else: no route changes anything.
  if (!listen(p->server, p->host, p->port, options.bind, p->thread, error)) return nullptr;
  return std::unique_ptr<OverviewServer>(new OverviewServer(std::move(impl)));
}

OverviewServer::OverviewServer(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}

OverviewServer::~OverviewServer() {
  impl_->server.stop();
  if (impl_->thread.joinable()) impl_->thread.join();
}

std::string OverviewServer::url() const {
  return "http://" + impl_->host + ":" + std::to_string(impl_->port) + "/";
}

}  // namespace loadtrim::app
