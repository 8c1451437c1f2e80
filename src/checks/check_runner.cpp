#include "checks/check_runner.hpp"

#include <filesystem>
#include <optional>

#include "checks/cell_history.hpp"
#include "checks/procedure.hpp"
#include "core/problem.hpp"
#include "motion/motion.hpp"
#include "record/event_log.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"

namespace loadtrim::checks {

namespace fs = std::filesystem;
using controller::Result;

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

namespace ev = session::ev;

namespace {
// The controller mode a check needs beyond speed hold and road-load simulation.
std::optional<controller::Mode> needed_mode(core::CheckKind k) {
  switch (k) {
    case core::CheckKind::parasitic:
      return controller::Mode::free_coast;
    case core::CheckKind::inertia:
    case core::CheckKind::response:
      return controller::Mode::constant_force;
    default:
      return std::nullopt;
  }
}
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
  const std::optional<core::RoadLoad> stored = hist.parasitic_curve(&stored_utc, req.cell.adapter);
  try {
    res.folder = record::create_session_folder(hist.dir(), core::to_string(req.kind));
  } catch (const std::exception& e) {
    res.end = CheckResult::End::record_failure;
    res.verdict = e.what();
    return res;
  }
  if (req.on_folder) {
    try {
      req.on_folder(res.folder);
    } catch (const std::exception&) {  // a view of the check (the overview), never its end
    }
  }
  record::EventLog log((fs::path(res.folder) / "events.jsonl").string());
  log.set_signer(req.key);  // every record signed with the cell's key, like a session's (docs/records.md)
  Procedure p(c, req, log, res.folder, stop);
  nlohmann::json result = {{"check", core::to_string(req.kind)},
                           {"clause", std::string("40 CFR ") + core::clause_of(req.kind)},
                           {"cell", req.cell.name},
                           {"adapter", req.cell.adapter},
                           {"profile", req.profile.name},
                           {"standard", req.profile.standard},
                           {"software", req.software}};
  bool passed = false;
  std::string verdict;
  std::optional<core::RoadLoad> new_curve;
  bool moved = false;
  std::string controller_name = "not identified";  // as the controller names itself at identify
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
    const std::optional<controller::Mode> mode = needed_mode(req.kind);
    if (mode)
      if (const std::string why = c.unavailable(*mode); !why.empty())
        throw Abort{CheckResult::End::refused, std::string("this check needs the ") +
                                                   controller::to_string(*mode) + " mode, but " + why};
    if (!core::runs_in_loadtrim(req.kind))
      throw Abort{CheckResult::End::refused,
                  std::string("the ") + core::to_string(req.kind) + " check (40 CFR " +
                      core::clause_of(req.kind) +
                      ") needs a reference loadtrim does not have: perform it outside and log it with "
                      "`loadtrim check record`"};
    // The response time is read from the samples' own times: an adapter that polls times them by its poll.
    if (req.kind == core::CheckKind::response && !c.streams())
      throw Abort{CheckResult::End::refused,
                  "the response time (40 CFR 1066.245) needs the controller's own samples at most " +
                      core::num(1000.0 * req.profile.response.max_sample_period_s, 1) +
                      " ms apart, and this cell's adapter polls its samples (their times are the poll's)"};
    // The friction compensation error (40 CFR 1066.260) is measured against the parasitic curve of 1066.255:
    // refused, before anything connects, without a current one (none stored, the latest determination
    // failed, or it is due again).
    if (req.kind == core::CheckKind::friction) {
      if (!stored)
        throw Abort{
            CheckResult::End::refused,
            "the friction compensation check (40 CFR 1066.260) follows the parasitic loss "
            "determination (1066.255), and the cell's history holds no parasitic curve: run `loadtrim "
            "check parasitic` first"};
      const auto now_s = parse_utc_s(record::utc_now());
      for (const auto& it : readiness(hist, req.profile, now_s.value_or(0.0), req.cell.adapter).items)
        if (it.kind == core::CheckKind::parasitic && it.due())
          throw Abort{CheckResult::End::refused,
                      "the friction compensation check (40 CFR 1066.260) is measured against the parasitic "
                      "loss curve (1066.255), and the parasitic check is " +
                          std::string(core::to_string(it.state)) + " (" + it.why +
                          "): pass `loadtrim check parasitic` first"};
    }
    const controller::KeepAlive keep_alive(c);
    p.must(c.connect(), "connect");
    controller::ControllerInfo info;
    p.must(c.identify(info), "identify");
    controller_name = info.name;
    const core::Problems id = controller::check_identity(req.cell, info);
    p.record(ev::CheckIdentified{info.name, info.roller_diameter_m, info.base_inertia_kg, id.size()});
    if (core::has_errors(id))
      throw Abort{CheckResult::End::refused,
                  "the controller is not the cell file's dyno: " + id.front().key + " " + id.front().message};
    // The free coast and the constant force are not every controller's: refuse before anything moves.
    const char* need = mode == controller::Mode::free_coast       ? "free"
                       : mode == controller::Mode::constant_force ? "force"
                                                                  : nullptr;
    if (need && !info.has(need))
      throw Abort{CheckResult::End::refused,
                  std::string("the controller does not offer the '") + need +
                      "' capability this check needs (it lists: " + info.capabilities + ")"};
    p.must(c.start_stream(req.cell.sample_rate_hz), "start stream");
    moved = true;
    switch (req.kind) {
      case core::CheckKind::parasitic:
        result["parasitic"] = run_parasitic(p, stored, passed, verdict, new_curve);
        break;
      case core::CheckKind::coastdown:
        result["coastdown"] = run_coastdowns(p, false, passed, verdict);
        break;
      case core::CheckKind::readiness:
        result["coastdown"] = run_coastdowns(p, true, passed, verdict);
        break;
      case core::CheckKind::inertia:
        result["inertia"] = run_base_inertia(p, passed, verdict);
        break;
      case core::CheckKind::friction:
        result["friction"] = run_friction(p, stored, passed, verdict);
        break;
      case core::CheckKind::accel_decel:
        result["accel_decel"] = run_accel_decel(p, passed, verdict);
        break;
      case core::CheckKind::response:
        result["response"] = run_response(p, passed, verdict);
        break;
      case core::CheckKind::speed:
      case core::CheckKind::linearity:
        break;  // refused above
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
    const double stop_budget_s = p.stop_budget_s();
    const Result sr = p.motion().stop_and_wait(stop_budget_s, stopped);
    controller::StatusReport st;
    if (!stopped) stopped = p.motion().settle_by_status(stop_budget_s, st).ok();
    c.stop_stream();
    if (!stopped) {
      res.end = CheckResult::End::controller_fault;
      verdict += "; rollers not confirmed stopped: " + sr.message +
                 "; the controller's watchdog is the remaining safeguard";
    }
    result["rollers_stopped"] = stopped;
  }
  p.motion().drain_warnings();  // the controller's last warnings, before the check's end
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
  std::vector<std::string> repairs;  // torn last lines cut from a log on the way: said, never silent
  if (wrote && logged) {
    record::SealRequest sr;
    sr.cell = req.cell.name;
    sr.result = result;
    sr.key = req.key;
    record::SealInfo info;
    sealed = seal_and_log(res.folder, sr, req.checks_root, core::to_string(req.kind), &info, seal_err);
    repairs = info.notes;
  }
  const bool counts = res.end == CheckResult::End::passed || res.end == CheckResult::End::failed;
  bool hist_ok = true;
  if (counts)
    hist_ok = hist.append("check",
                          {{"kind", core::to_string(req.kind)},
                           {"passed", res.end == CheckResult::End::passed},
                           {"verdict", verdict},
                           {"folder", fs::path(res.folder).filename().string()},
                           {"adapter", req.cell.adapter},
                           {"controller", controller_name}},
                          now);
  if (counts && !hist.repaired().empty()) repairs.push_back(hist.repaired());
  if (store_curve && hist_ok) {
    nlohmann::json curve = session::to_json(*new_curve);  // the cell log keeps the curve's members at its top
    curve["folder"] = fs::path(res.folder).filename().string();
    curve["adapter"] = req.cell.adapter;
    curve["accepted_by_operator"] = res.end == CheckResult::End::failed;
    hist_ok = hist.append("parasitic_curve", curve, now);
    if (!hist.repaired().empty()) repairs.push_back(hist.repaired());
  }
  if (!wrote || !logged || !sealed || !hist_ok) {
    res.end = CheckResult::End::record_failure;
    res.verdict += std::string(res.verdict.empty() ? "" : "; ") + "record failure: " +
                   (!wrote    ? err
                    : !logged ? log.error()
                    : !sealed ? "the folder could not be sealed: " + seal_err
                              : hist.error());
  }
  for (const auto& r : repairs) res.verdict += "; note: " + r;
  std::string rerr;
  if (!write_check_report(res.folder, rerr)) res.verdict += "; report not written: " + rerr;
  return res;
}

}  // namespace loadtrim::checks
