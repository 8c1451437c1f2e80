#include "checks/check_runner.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <functional>
#include <optional>
#include <sstream>

#include "checks/cell_history.hpp"
#include "core/problem.hpp"
#include "core/units.hpp"
#include "motion/motion.hpp"
#include "record/event_log.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "report/svg_plot.hpp"

namespace loadtrim::checks {

namespace fs = std::filesystem;
namespace u = core::units;
using controller::Result;
using controller::Sample;
using core::num;

const char* to_string(CheckResult::End e) {
  switch (e) {
    case CheckResult::End::passed:
      return "passed";
    case CheckResult::End::failed:
      return "failed";
    case CheckResult::End::refused:
      return "refused";
    case CheckResult::End::controller_fault:
      return "controller-fault";
    case CheckResult::End::interrupted:
      return "interrupted";
    case CheckResult::End::record_failure:
      return "record-failure";
  }
  return "unknown";
}

int exit_code(CheckResult::End e) {
  switch (e) {
    case CheckResult::End::passed:
      return 0;
    case CheckResult::End::failed:
      return 1;
    case CheckResult::End::refused:
      return 2;
    case CheckResult::End::controller_fault:
      return 3;
    case CheckResult::End::interrupted:
      return 4;
    case CheckResult::End::record_failure:
      return 5;
  }
  return 70;
}

namespace {

namespace ev = session::ev;

struct Abort {
  CheckResult::End end;
  std::string why;
};

class Procedure {
 public:
  Procedure(controller::Controller& c, const CheckRequest& req, record::EventLog& log, std::string folder,
            const std::atomic<bool>* stop)
      : c_(c),
        req_(req),
        log_(log),
        folder_(std::move(folder)),
        motion_(c, rules(req), stop),
        observers_(req.observers) {}

  static motion::Rules rules(const CheckRequest& req) {
    motion::Rules r;
    r.speed_limit_kmh = req.cell.max_speed_kmh;
    r.standstill_kmh = req.cell.standstill_kmh;
    return r;
  }
  motion::Motion& motion() { return motion_; }

  // A step's event: into the log first (the record), then to the observers, which therefore never show a
  // step the record does not hold. Throws Abort when the record cannot hold it.
  void record(session::Payload event) {
    if (!log_event(std::move(event))) throw Abort{CheckResult::End::record_failure, log_.error()};
  }
  // The same without throwing: false when the log could not hold the event.
  bool log_event(session::Payload event) {
    const session::Event e{std::move(event), std::nullopt, nullptr};
    if (!log_.append(session::type_of(e), session::to_json(e.payload), record::utc_now())) return false;
    // The console is quick: the controller's keep-alive goes on for the cell's progress grace meanwhile.
    const auto d = observers_.deliver(e, [this](bool) { c_.lease(req_.cell.timeouts.progress_grace); });
    for (const auto& why : d.dropped) {
      std::fprintf(stderr, "loadtrim: %s\n", why.c_str());
      const session::Payload dropped = ev::ObserverDropped{why};
      if (!log_.append(session::type_of(dropped), session::to_json(dropped), record::utc_now())) return false;
    }
    // A view that calls itself critical is still a view here: the check's record is its log.
    return true;
  }

  void must(const Result& r, const char* what) {
    if (r.ok()) return;
    throw Abort{CheckResult::End::controller_fault, std::string(what) + ": " + r.message};
  }

  // A step's result as the check's end: the controller budget running out is the check failing; the
  // operator's stop is an interruption; anything else (a fault, over-speed, the clock, the link, the wall
  // deadline) a controller fault.
  void must_step(const Result& r) {
    if (r.ok()) return;
    const auto end = r.code == motion::kTooSlow       ? CheckResult::End::failed
                     : r.code == motion::kInterrupted ? CheckResult::End::interrupted
                                                      : CheckResult::End::controller_fault;
    throw Abort{end, r.message};
  }

  // Receives samples of the step just commanded until `done` says so (motion/motion.hpp: deadlines in
  // controller and wall time; fault flags and over-speed checked on every sample first).
  void collect(std::vector<Sample>& out, const std::function<bool(const Sample&)>& done,
               double max_controller_s, const char* step, std::initializer_list<controller::Mode> modes) {
    motion::Step st;
    st.what = step;
    st.budget_s = max_controller_s;
    st.modes = modes;
    st.since_epoch = c_.epoch();
    must_step(motion_.collect(st, done, &out));
  }

  void hold_and_settle(double v_kmh) {
    if (v_kmh > req_.cell.max_speed_kmh)
      throw Abort{CheckResult::End::refused, "start speed " + num(v_kmh) + " km/h is above the cell limit"};
    must_step(motion_.hold(v_kmh, req_.profile.settle_s, "settling at the start speed", 600.0));
  }

  void stop_rollers() {
    bool stopped = false;
    must_step(motion_.stop_and_wait(600.0, stopped));
  }

  // Writes a trace file and returns its record entry.
  nlohmann::json write_trace(const std::string& name, const std::vector<Sample>& tr) {
    const std::string rel = "traces/" + name + ".csv";
    const std::string csv = record::trace_csv(tr);
    std::string err;
    if (!record::write_durable((fs::path(folder_) / rel).string(), csv, err))
      throw Abort{CheckResult::End::record_failure, err};
    return {{"path", rel}, {"sha256", record::sha256_hex(csv)}, {"samples", tr.size()}};
  }

  static void split(const std::vector<Sample>& tr, std::vector<double>& t, std::vector<double>& v,
                    std::vector<double>* f = nullptr) {
    for (const auto& s : tr) {
      t.push_back(s.time_s);
      v.push_back(s.speed_kmh);
      if (f) f->push_back(s.force_n);
    }
  }

  nlohmann::json parasitic(const std::optional<core::RoadLoad>& stored, bool& passed, std::string& verdict,
                           std::optional<core::RoadLoad>& new_curve) {
    const auto& o = req_.profile.parasitic;
    const double top = *std::max_element(o.speeds_kmh.begin(), o.speeds_kmh.end()) + o.half_band_kmh +
                       req_.profile.parasitic_run_up_margin_kmh;
    const double bottom = *std::min_element(o.speeds_kmh.begin(), o.speeds_kmh.end()) - o.half_band_kmh - 2.0;
    hold_and_settle(top);
    record(ev::FreeCoastStarted{top});
    must(c_.free_coast(), "free coast");
    std::vector<Sample> tr;
    collect(tr, [&](const Sample& x) { return x.speed_kmh < bottom; }, 7200.0, "the free coast",
            {controller::Mode::idle});
    stop_rollers();
    const auto file = write_trace("free-coast", tr);
    std::vector<double> t, v;
    split(tr, t, v);
    const core::ParasiticDetermination d =
        core::determine_parasitic({t, v}, req_.cell.base_inertia_kg, stored, o);
    passed = d.passed;
    verdict = d.verdict;
    if (d.ok) new_curve = d.fit.coefficients;
    session::Payload analysed = ev::ParasiticAnalysed{req_.cell.base_inertia_kg, d, stored, file};
    nlohmann::json j = session::to_json(analysed);  // also the check's part of result.json
    record(std::move(analysed));
    return j;
  }

  nlohmann::json coastdowns(bool readiness, bool& passed, std::string& verdict) {
    const auto& cell = req_.cell;
    if (!(cell.min_inertia_kg > 0.0 && cell.max_inertia_kg > 0.0))
      throw Abort{CheckResult::End::refused,
                  "the cell file gives no dyno.min_inertia_kg / dyno.max_inertia_kg: the unloaded coast-down "
                  "runs at both"};
    std::vector<std::pair<double, core::RoadLoad>> runs;
    // The daily readiness check runs at the smallest inertia only: there the same force error is the largest
    // share of the force, so uncompensated losses and inertia errors show first.
    runs.push_back({cell.min_inertia_kg, req_.profile.smallest_inertia_setting});
    if (!readiness) runs.push_back({cell.max_inertia_kg, req_.profile.largest_inertia_setting});
    const auto& o = req_.profile.coastdown;
    const double start = u::mph_to_kmh(o.v_start_mph + req_.profile.coastdown_run_up_margin_mph);
    const double end = u::mph_to_kmh(o.v_end_mph) - 2.0;
    nlohmann::json out = nlohmann::json::array();
    passed = true;
    verdict.clear();
    int n = 0;
    for (const auto& [inertia, setting] : runs) {
      ++n;
      must(c_.set_inertia(inertia), "set inertia");
      must(c_.set_coefficients(setting), "set coefficients");
      hold_and_settle(start);
      record(ev::CheckCoastStarted{n, inertia, setting, start});
      must(c_.release_road_load(), "road-load simulation");
      std::vector<Sample> tr;
      collect(tr, [&](const Sample& x) { return x.speed_kmh < end; }, 3600.0, "the coast-down",
              {controller::Mode::road_load});
      stop_rollers();
      const auto file = write_trace("coastdown-" + std::to_string(n), tr);
      std::vector<double> t, v;
      split(tr, t, v);
      const core::UnloadedCoastdown r = core::check_unloaded_coastdown({t, v}, inertia, setting, o);
      session::Payload analysed = ev::UnloadedCoastdownAnalysed{n, inertia, setting, r, file};
      out.push_back(session::to_json(analysed));  // also the check's part of result.json
      record(std::move(analysed));
      passed = passed && r.passed;
      verdict += (verdict.empty() ? "" : "; ") + r.verdict;
    }
    return {{"runs", out}};
  }

  nlohmann::json inertia(bool& passed, std::string& verdict) {
    const auto& o = req_.profile.inertia;
    const double stated = req_.cell.base_inertia_kg;
    const double force =
        stated * req_.profile.inertia_accel_mph_per_s * u::kMpsPerMph;  // F = m·a, about 1 mph/s
    const double stop_at = u::mph_to_kmh(o.v_high_mph) + 3.0;
    if (stop_at > req_.cell.max_speed_kmh)
      throw Abort{CheckResult::End::refused, "the check's top speed is above the cell limit"};
    record(ev::ForceApplied{force, stated});
    must(c_.apply_force(force), "constant force");
    std::vector<Sample> tr;
    collect(tr, [&](const Sample& x) { return x.speed_kmh > stop_at; }, 600.0, "the constant-force run",
            {controller::Mode::constant_force});
    stop_rollers();
    const auto file = write_trace("constant-force", tr);
    std::vector<double> t, v, f;
    split(tr, t, v, &f);
    const core::InertiaCheck r = core::check_base_inertia({t, v}, f, stated, o);
    passed = r.ok && r.passed;
    verdict = r.ok ? r.verdict : "FAIL: " + r.message;
    session::Payload analysed = ev::InertiaAnalysed{force, r, stated, o.tolerance_fraction, passed, file};
    nlohmann::json j = session::to_json(analysed);  // also the check's part of result.json
    record(std::move(analysed));
    return j;
  }

 private:
  controller::Controller& c_;
  const CheckRequest& req_;
  record::EventLog& log_;
  std::string folder_;
  motion::Motion motion_;
  session::Observers observers_;
};

}  // namespace

CheckResult run_check(controller::Controller& c, const CheckRequest& req, const std::atomic<bool>* stop) {
  CheckResult res;
  CellHistory hist(req.checks_root, req.cell.name);
  if (!hist.ok()) {
    res.end = CheckResult::End::record_failure;
    res.verdict = "the cell's history is broken: " + hist.error();
    return res;
  }
  std::string stored_utc;
  const std::optional<core::RoadLoad> stored = hist.parasitic_curve(&stored_utc);
  try {
    res.folder = record::create_session_folder(hist.dir(), core::to_string(req.kind));
  } catch (const std::exception& e) {
    res.end = CheckResult::End::record_failure;
    res.verdict = e.what();
    return res;
  }
  record::EventLog log((fs::path(res.folder) / "events.jsonl").string());
  log.set_signer(req.key);  // every record signed with the cell's key, like a session's (docs/records.md)
  Procedure p(c, req, log, res.folder, stop);
  nlohmann::json result = {{"check", core::to_string(req.kind)},
                           {"cell", req.cell.name},
                           {"profile", req.profile.name},
                           {"standard", req.profile.standard}};
  bool passed = false;
  std::string verdict;
  std::optional<core::RoadLoad> new_curve;
  bool moved = false;
  try {
    nlohmann::json files = nlohmann::json::array();
    files.push_back(record::copy_input(res.folder, req.cell_file, "cell.toml"));
    files.push_back(record::copy_input(res.folder, req.profile_file, "checks.toml"));
    p.record(ev::CheckStarted{
        core::to_string(req.kind), req.cell.name, files, req.confirmation, req.note, req.operator_id,
        req.key ? req.key->fingerprint() : std::string("none: the folder will be sealed unsigned"), stored,
        stored_utc});
    // The free coast and the constant force are not every controller's. What the cell file alone says (a
    // register map without their keys) refuses the check before anything connects; the capabilities the
    // controller states at identify, below, before anything moves.
    const std::optional<controller::Mode> mode =
        req.kind == core::CheckKind::parasitic ? std::optional(controller::Mode::free_coast)
        : req.kind == core::CheckKind::inertia ? std::optional(controller::Mode::constant_force)
                                               : std::nullopt;
    if (mode)
      if (const std::string why = c.unavailable(*mode); !why.empty())
        throw Abort{CheckResult::End::refused, std::string("this check needs the ") +
                                                   controller::to_string(*mode) + " mode, but " + why};
    const controller::KeepAlive keep_alive(c);
    p.must(c.connect(), "connect");
    controller::ControllerInfo info;
    p.must(c.identify(info), "identify");
    const core::Problems id = controller::check_identity(req.cell, info);
    p.record(ev::CheckIdentified{info.name, info.roller_diameter_m, info.base_inertia_kg, id.size()});
    if (core::has_errors(id))
      throw Abort{CheckResult::End::refused,
                  "the controller is not the cell file's dyno: " + id.front().key + " " + id.front().message};
    // The free coast and the constant force are not every controller's: refuse before anything moves.
    const char* need = req.kind == core::CheckKind::parasitic ? "free"
                       : req.kind == core::CheckKind::inertia ? "force"
                                                              : nullptr;
    if (need && !info.has(need))
      throw Abort{CheckResult::End::refused,
                  std::string("the controller does not offer the '") + need +
                      "' capability this check needs (it lists: " + info.capabilities + ")"};
    p.must(c.start_stream(req.cell.sample_rate_hz), "start stream");
    moved = true;
    switch (req.kind) {
      case core::CheckKind::parasitic:
        result["parasitic"] = p.parasitic(stored, passed, verdict, new_curve);
        break;
      case core::CheckKind::coastdown:
        result["coastdown"] = p.coastdowns(false, passed, verdict);
        break;
      case core::CheckKind::readiness:
        result["coastdown"] = p.coastdowns(true, passed, verdict);
        break;
      case core::CheckKind::inertia:
        result["inertia"] = p.inertia(passed, verdict);
        break;
    }
    c.stop_stream();
    res.end = passed ? CheckResult::End::passed : CheckResult::End::failed;
  } catch (const Abort& a) {
    res.end = a.end;
    verdict = std::string(to_string(a.end)) + ": " + a.why;
  } catch (const std::exception& e) {
    res.end = CheckResult::End::controller_fault;
    verdict = std::string("internal error, the check was stopped: ") + e.what();
  }
  if (res.end != CheckResult::End::passed && res.end != CheckResult::End::failed && moved) {
    // The safe stop: command it and wait for standstill (the motion library's stop, bounded in both clocks);
    // with no stream to confirm it, the controller's status.
    bool stopped = false;
    const Result sr = p.motion().stop_and_wait(600.0, stopped);
    controller::StatusReport st;
    if (!stopped) stopped = p.motion().settle_by_status(600.0, st).ok();
    c.stop_stream();
    if (!stopped) {
      res.end = CheckResult::End::controller_fault;
      verdict += "; rollers not confirmed stopped: " + sr.message +
                 "; the controller's watchdog is the remaining safeguard";
    }
    result["rollers_stopped"] = stopped;
  }
  c.disconnect();
  res.verdict = verdict;
  result["end"] = to_string(res.end);
  result["passed"] = res.end == CheckResult::End::passed;
  result["verdict"] = verdict;
  // The new curve is stored when the determination passed, or when the operator accepts it explicitly.
  const bool store_curve =
      req.kind == core::CheckKind::parasitic && new_curve &&
      (res.end == CheckResult::End::passed || (req.accept_new_curve && res.end == CheckResult::End::failed));
  result["curve_stored"] = store_curve;
  if (store_curve && res.end == CheckResult::End::failed) result["curve_accepted_by_operator"] = true;
  res.result = result;
  const std::string text = result.dump(2) + "\n";
  std::string err;
  const bool wrote = record::write_durable((fs::path(res.folder) / "result.json").string(), text, err);
  const std::string now = record::utc_now();
  const bool logged =
      p.log_event(ev::CheckFinished{core::to_string(req.kind),
                                    to_string(res.end),
                                    res.end == CheckResult::End::passed,
                                    verdict,
                                    {{"path", "result.json"}, {"sha256", record::sha256_hex(text)}}});
  // The folder's last record: the seal (docs/records.md), its chain head also in the cell's log. The report,
  // a derived file, follows it.
  bool sealed = false;
  std::string seal_err;
  if (wrote && logged) {
    record::SealRequest sr;
    sr.cell = req.cell.name;
    sr.result = result;
    sr.key = req.key;
    record::SealInfo info;
    sealed = seal_and_log(res.folder, sr, req.checks_root, core::to_string(req.kind), &info, seal_err);
  }
  const bool counts = res.end == CheckResult::End::passed || res.end == CheckResult::End::failed;
  bool hist_ok = true;
  if (counts)
    hist_ok = hist.append("check",
                          {{"kind", core::to_string(req.kind)},
                           {"passed", res.end == CheckResult::End::passed},
                           {"verdict", verdict},
                           {"folder", fs::path(res.folder).filename().string()}},
                          now);
  if (store_curve && hist_ok) {
    nlohmann::json curve = session::to_json(*new_curve);  // the cell log keeps the curve's members at its top
    curve["folder"] = fs::path(res.folder).filename().string();
    curve["accepted_by_operator"] = res.end == CheckResult::End::failed;
    hist_ok = hist.append("parasitic_curve", curve, now);
  }
  if (!wrote || !logged || !sealed || !hist_ok) {
    res.end = CheckResult::End::record_failure;
    res.verdict += std::string(res.verdict.empty() ? "" : "; ") + "record failure: " +
                   (!wrote    ? err
                    : !logged ? log.error()
                    : !sealed ? "the folder could not be sealed: " + seal_err
                              : hist.error());
  }
  std::string rerr;
  if (!write_check_report(res.folder, rerr)) res.verdict += "; report not written: " + rerr;
  return res;
}

bool write_check_report(const std::string& folder, std::string& error) {
  std::ifstream in((fs::path(folder) / "result.json").string());
  nlohmann::json r = nlohmann::json::parse(in, nullptr, false);
  if (!r.is_object()) {
    error = "result.json missing or malformed";
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
       ".warn{border:2px solid #D55E00;padding:.5em}</style></head><body>";
  h << "<h1>Dyno check: " << xml_escape(r.value("check", "")) << " (no vehicle on the rollers)</h1>";
  h << "<p class=\"" << (passed ? "pass" : "fail") << "\">" << (passed ? "PASSED" : "NOT PASSED") << ": "
    << xml_escape(r.value("verdict", "")) << "</p>";
  h << "<p>Cell: " << xml_escape(r.value("cell", ""))
    << ". Check profile: " << xml_escape(r.value("profile", "")) << " ("
    << xml_escape(r.value("standard", ""))
    << "). The numeric limits are the lab's settings, not quoted from the standards.</p>";
  h << "<p>Record: "
    << (v.ok ? "chain intact, " + xml_escape(v.message)
             : "<span class=\"fail\">BROKEN: " + xml_escape(v.message) + "</span>")
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
    if (p.contains("curve"))
      h << "<p>Parasitic loss curve: P(v) = " << num(p["curve"].value("f0_n", 0.0)) << " N + "
        << num(p["curve"].value("f1_n_per_kmh", 0.0)) << " N/(km/h)·v + "
        << num(p["curve"].value("f2_n_per_kmh2", 0.0))
        << " N/(km/h)²·v², from the coast of the empty rollers at the base inertia "
        << num(p.value("base_inertia_kg", 0.0)) << " kg. "
        << (r.value("curve_stored", false) ? "Stored as the cell's curve." : "Not stored.") << "</p>";
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
      h << "<h2>Unloaded coast-down at " << num(run.value("inertia_kg", 0.0)) << " kg</h2><p>"
        << xml_escape(run.value("verdict", "")) << "</p>";
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
    h << "<table><tr><th>force (N)</th><th>Δt (s)</th><th>Δv (m/s)</th><th>mean force (N)</th><th>I = "
         "F̄·Δt/Δv (kg)</th><th>stated (kg)</th><th>error (%)</th></tr><tr><td>"
      << num(x.value("force_n", 0.0), 1) << "</td><td>" << num(x.value("delta_t_s", 0.0), 3) << "</td><td>"
      << num(x.value("delta_v_mps", 0.0), 5) << "</td><td>" << num(x.value("mean_force_n", 0.0), 2)
      << "</td><td>" << num(x.value("inertia_kg", 0.0), 1) << "</td><td>" << num(x.value("stated_kg", 0.0), 1)
      << "</td><td>" << num(100.0 * x.value("error_fraction", 0.0), 2) << "</td></tr></table>";
    trace_plot("traces/constant-force.csv", "Constant force, simulation off");
  }
  h << "<p class=\"warn\">Rotating rollers can injure. These checks run with no vehicle on the rollers and "
       "nobody in the roller area; the lab's own "
       "safety rules, local codes and licensed practice come first.</p></body></html>\n";
  return record::write_durable((fs::path(folder) / "report.html").string(), h.str(), error);
}

}  // namespace loadtrim::checks
