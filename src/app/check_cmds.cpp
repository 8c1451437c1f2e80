// `loadtrim check ...`: the dyno's own checks with no vehicle on the rollers (parasitic, coastdown,
// readiness, inertia, friction, accel-decel, response), the due table (due), logging a check performed
// outside loadtrim (record) and major maintenance (maintenance). Thin: the procedures are in src/checks, the
// computations in src/core/dyno_checks; the outcome → exit-code mapping is here, with the other commands'.

#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <iostream>
#include <memory>

#include "app/cell_locks.hpp"
#include "app/exit_codes.hpp"
#include "app/live_page.hpp"
#include "app/notify.hpp"
#include "app/session_runner.hpp"
#include "app/store_hook.hpp"
#include "app/subcommands.hpp"
#include "checks/cell_history.hpp"
#include "checks/check_runner.hpp"
#include "config/cell_loader.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "inprocess/sim_rows.hpp"
#include "record/session_folder.hpp"
#include "registry.hpp"
#include "session/console.hpp"

namespace loadtrim::app {

namespace {

const char* kCheckCautions =
    "Before the rollers move for a dyno check (the lab's own safety rules, local codes and licensed practice "
    "come first):\n"
    "  - NO vehicle on the rollers; roller locks released; nothing loose in the pit;\n"
    "  - nobody in the roller area; guards, interlocks and emergency stops work;\n"
    "  - the cell's speed and force limits in the cell file are right; loadtrim never commands more.\n";

// A check's end as the process exit code (the README's table; app/exit_codes.hpp).
ExitCode exit_code_for(checks::CheckResult::End e) {
  switch (e) {
    case checks::CheckResult::End::passed:
      return kAccepted;
    case checks::CheckResult::End::failed:
      return kNotAccepted;
    case checks::CheckResult::End::refused:
      return kBadInput;
    case checks::CheckResult::End::controller_fault:
      return kControllerFault;
    case checks::CheckResult::End::interrupted:
      return kInterrupted;
    case checks::CheckResult::End::record_failure:
      return kRecordFailure;
  }
  return kInternalError;
}

struct CheckOptions {
  std::string kind;
  std::string cell, profile, checks, note, now, data_dir, operator_name, result;
  int port = 0;
  std::string device;
  bool unattended = false, accept_new_curve = false, json = false;
  bool live = false;                      // --live: the read-only live page (docs/live.md)
  std::string live_bind = "127.0.0.1:0";  // --live-bind; the token is LOADTRIM_LIVE_TOKEN
  record::DataRoot root;
};

// The lab's data root (docs/records.md): the check histories default to <data root>/checks, whatever the
// current folder, so `check due` run anywhere sees the same state.
bool lab(CheckOptions& o) {
  RunRequest r;
  r.data_dir = o.data_dir;
  r.checks_dir = o.checks;
  if (!resolve_lab(r, o.root)) return false;
  o.checks = r.checks_dir;
  return true;
}

std::string confirm_check(bool unattended) {
  return ask_to_motor(
      unattended, kCheckCautions, "EMPTY",
      "Type EMPTY to confirm there is no vehicle on the rollers and let loadtrim motor them: ",
      "interactive confirmation (rollers empty)");
}

struct Loaded {
  controller::CellConfig cell;
  core::CheckProfile profile;
  std::string profile_file;
};

Loaded load(const CheckOptions& o) {
  Loaded l;
  core::Problems w;
  l.cell = config::load_cell(o.cell, adapters::tool_registry().sections(), &w);
  if (!w.empty()) std::cerr << config::format_problems(o.cell, w);
  l.profile_file = o.profile.empty() ? default_check_profile() : o.profile;
  core::Problems pw;
  l.profile = config::load_check_profile(l.profile_file, &pw);
  if (!pw.empty()) std::cerr << config::format_problems(l.profile_file, pw);
  adapters::tool_registry().override_link(l.cell,
                                          {o.port > 0 ? static_cast<unsigned>(o.port) : 0u, o.device});
  return l;
}

int run_one(const CheckOptions& o) {
  core::CheckKind kind;
  if (!core::parse(o.kind, kind)) return kBadInput;
  if (o.live && !live_bind_usable(o.live_bind)) return kBadInput;
  const Loaded l = load(o);  // throws InputError: nothing started
  // One procedure per cell: a busy cell is refused at once (the check's folder is not known yet: the lock
  // names the command and the pid).
  std::optional<record::FileLock> cell_lock;
  std::string lock_msg;
  if (!lock_cell(l.cell, record::LockMode::exclusive, "check " + o.kind,
                 "(a dyno check of " + l.cell.name + ")", cell_lock, lock_msg)) {
    std::cerr << "loadtrim: refusing to start: " << lock_msg << "\n";
    return kBadInput;
  }
  if (!lock_msg.empty()) std::cerr << "loadtrim: " << lock_msg << "\n";
  std::optional<record::SigningKey> key;
  if (!cell_signing_key(o.root, l.cell, key)) return kBadInput;
  RunRequest who_req;
  who_req.operator_name = o.operator_name;
  who_req.unattended = o.unattended;
  const nlohmann::json who = operator_identity(who_req, l.cell);
  const std::string confirmation = confirm_check(o.unattended);
  if (confirmation.empty()) {
    std::cerr << "loadtrim: not confirmed: nothing was started\n";
    return kBadInput;
  }
  install_stop_handlers();
  checks::CheckRequest req;
  req.kind = kind;
  req.cell = l.cell;
  req.cell_file = o.cell;
  req.profile = l.profile;
  req.profile_file = l.profile_file;
  req.checks_root = o.checks;
  req.confirmation = confirmation;
  req.accept_new_curve = o.accept_new_curve;
  req.key = key ? &*key : nullptr;
  req.operator_id = who;
  req.software = {{"version", LOADTRIM_VERSION}, {"build", LOADTRIM_BUILD_ID}};
  req.note = o.note;
  // The steps as they happen, for the operator; --json keeps its one line (scripts read it).
  session::Console console(session::Console::Mode::normal);
  if (!o.json) req.observers.push_back(&console);
  // The live page (docs/live.md): a view like the console, read-only; one that cannot bind is said and the
  // check goes on without it.
  std::unique_ptr<LivePage> live;
  if (o.live) {
    live = serve_live_page(o.live_bind, "loadtrim live: check " + o.kind + " on cell " + l.cell.name,
                           kCheckCautions, o.json, "check");
    if (live) req.observers.push_back(live.get());
  }
  // The lab overview learns that the check runs once its folder exists (docs/store.md "The lab overview").
  RunningNote running;
  req.on_folder = [&](const std::string& folder) {
    running = RunningNote::start(o.root,
                                 {"check", folder, std::filesystem::path(folder).filename().string(),
                                  l.cell.name, "", o.kind, record::utc_now(), live ? live->url() : "", ""},
                                 false);
  };
  auto c = adapters::tool_registry().make_controller(l.cell);
  const checks::CheckResult r = checks::run_check(*c, req, &stop_flag());
  // A check that ran and was recorded is indexed in the lab's store, or queued for it (docs/store.md); a
  // folder the seal did not close is refused by the store's ingest and set aside, said on stderr.
  const bool indexed = !r.folder.empty() && r.end != checks::CheckResult::End::refused &&
                       r.end != checks::CheckResult::End::record_failure;
  running.end(indexed, !o.json);
  if (indexed) index_finished_folder(o.root, r.folder, "check", !o.json);
  if (o.json) {
    std::printf("%s\n", nlohmann::json({{"type", "check"},
                                        {"check", o.kind},
                                        {"end", checks::to_string(r.end)},
                                        {"verdict", r.verdict},
                                        {"folder", r.folder}})
                            .dump()
                            .c_str());
  } else {
    std::printf("check %s: %s\n%s\nfolder: %s\n", o.kind.c_str(), checks::to_string(r.end), r.verdict.c_str(),
                r.folder.c_str());
  }
  const int code = exit_code_for(r.end);
  // The cell's notifiers (docs/notify.md): they never change the exit code.
  notify_end(l.cell, o.root,
             end_message("check", l.cell.name, r.folder, checks::to_string(r.end), code, r.result),
             &stop_flag());
  return code;
}

int run_due(const CheckOptions& o) {
  const Loaded l = load(o);
  const checks::CellHistory h(o.checks, l.cell.name);
  double now = 0.0;
  if (!o.now.empty()) {
    const auto t = checks::parse_utc_s(o.now);
    if (!t) {
      std::cerr << "--now: \"" << o.now << "\" is not a UTC time like 2026-12-01T08:00:00Z\n";
      return kBadInput;
    }
    now = *t;
  } else {
    now = *checks::parse_utc_s(record::utc_now());
  }
  const checks::Readiness r = checks::readiness(h, l.profile, now, l.cell.adapter);
  if (o.json) {
    std::printf("%s\n", checks::to_json(r).dump().c_str());
  } else {
    std::printf("dyno checks for cell %s at %s (%s), profile %s:\n", l.cell.name.c_str(),
                checks::utc_from_s(now).c_str(), h.log_path().c_str(), l.profile.name.c_str());
    if (!r.history_ok) std::printf("  HISTORY BROKEN: %s\n", r.history_error.c_str());
    for (const auto& it : r.items) {
      const bool required = std::find(l.profile.required.begin(), l.profile.required.end(), it.kind) !=
                            l.profile.required.end();
      std::printf(
          "  %-11s %-26s last pass %-24s %s%s\n", core::to_string(it.kind), core::to_string(it.state),
          it.last_pass_utc_s ? checks::utc_from_s(*it.last_pass_utc_s).c_str() : "never",
          it.valid_until_utc_s ? ("valid until " + checks::utc_from_s(*it.valid_until_utc_s)).c_str() : "",
          required ? "" : "  (not required by the profile)");
      std::printf("  %-11s rule (%s): %s\n", "", it.clause.c_str(), it.rule.c_str());
      if (!it.why.empty()) std::printf("  %-11s due because: %s\n", "", it.why.c_str());
    }
    std::printf("sessions %s: %s\n", r.may_start() ? "may start" : "REFUSED", r.summary().c_str());
  }
  return r.may_start() ? kAccepted : kNotAccepted;
}

// A check performed outside loadtrim (speed, speed linearity: they need a reference it does not have), logged
// with its result so the due table counts it. The record says it was logged, not run here.
int run_record(const CheckOptions& o) {
  const Loaded l = load(o);
  core::CheckKind kind;
  if (!core::parse(o.kind, kind) || core::runs_in_loadtrim(kind)) {
    std::cerr << "loadtrim check record: \"" << o.kind
              << "\" is not a check performed outside loadtrim (speed, linearity); loadtrim runs the others "
                 "itself\n";
    return kBadInput;
  }
  if (o.note.empty()) {
    std::cerr
        << "--note: say how and by whom it was performed, and where its record is (it goes in the cell's "
           "history)\n";
    return kBadInput;
  }
  checks::CellHistory h(o.checks, l.cell.name);
  const bool passed = o.result == "passed";
  const std::string verdict = std::string(passed ? "pass" : "FAIL") + " (40 CFR " + core::clause_of(kind) +
                              "), performed outside loadtrim and logged: " + o.note;
  const bool appended = h.append("check",
                                 {{"kind", core::to_string(kind)},
                                  {"passed", passed},
                                  {"verdict", verdict},
                                  {"logged", true},
                                  {"operator", o.operator_name}},
                                 record::utc_now());
  if (!h.repaired().empty()) std::cerr << "loadtrim: note: " << h.repaired() << "\n";
  if (!appended) {
    std::cerr << "loadtrim: " << h.error() << "\n";
    return kRecordFailure;
  }
  std::printf("check %s logged for cell %s: %s\n", core::to_string(kind), l.cell.name.c_str(),
              verdict.c_str());
  return kAccepted;
}

int run_maintenance(const CheckOptions& o) {
  const Loaded l = load(o);
  if (o.note.empty()) {
    std::cerr << "--note: say what was done (it goes in the cell's history)\n";
    return kBadInput;
  }
  checks::CellHistory h(o.checks, l.cell.name);
  const bool appended = h.append("maintenance", {{"note", o.note}}, record::utc_now());
  if (!h.repaired().empty()) std::cerr << "loadtrim: note: " << h.repaired() << "\n";
  if (!appended) {
    std::cerr << "loadtrim: " << h.error() << "\n";
    return kRecordFailure;
  }
  std::string again;
  for (const auto& rule : l.profile.due.rules)
    if (rule.after_maintenance) again += std::string(again.empty() ? "" : ", ") + core::to_string(rule.kind);
  std::printf("maintenance logged for cell %s: due again by the profile's table: %s\n", l.cell.name.c_str(),
              again.empty() ? "none" : again.c_str());
  return kAccepted;
}

}  // namespace

void register_check_commands(CLI::App& app, Runner& run) {
  auto o = std::make_shared<CheckOptions>();
  auto* sub =
      app.add_subcommand("check", "the dyno's own checks with no vehicle on the rollers, and which are due");
  sub->require_subcommand(1);
  auto common = [&](CLI::App* s) {
    s->add_option("--cell", o->cell, "cell configuration (TOML)")->required();
    s->add_option("--profile", o->profile, "check profile (default: config/checks/cfr1066.toml)");
    s->add_option("--data-dir", o->data_dir,
                  "the lab's data root (default: as for run; see loadtrim run --help)");
    s->add_option("--checks", o->checks,
                  "where the cells' check histories and check folders are (default: <data root>/checks)");
  };
  const struct {
    const char* name;
    const char* help;
  } kinds[] = {
      {"parasitic",
       "determine the parasitic loss curve (free coast of the empty rollers) and compare it with the stored "
       "one (1066.255)"},
      {"coastdown", "unloaded coast-down (1066.270) at the smallest and the largest inertia"},
      {"readiness",
       "daily readiness (1066.275): the unloaded coast-down at the smallest inertia only (the most sensitive "
       "end)"},
      {"inertia",
       "base inertia (1066.250): constant force, 10 → 40 mph and 40 → 10 mph at three rate pairs, the loss "
       "cancelling"},
      {"friction",
       "friction compensation (1066.260): base inertia, A = B = C = 0, 50 mph hold then a 60 s coast"},
      {"accel-decel",
       "acceleration/deceleration (1066.265): road-load simulation at a set force, 10 ↔ 40 mph at 1 (mph)/s "
       "steps"},
      {"response",
       "response time (1066.245): force steps at base inertia, settling within ±10 % under 100 ms"},
  };
  for (const auto& k : kinds) {
    auto* s = sub->add_subcommand(k.name, k.help);
    common(s);
    s->add_flag("--unattended", o->unattended,
                "motor the empty rollers without asking (the lab's rules must allow it)");
    s->add_option("--port", o->port, "override the cell file's TCP port")->check(CLI::Range(1, 65535));
    s->add_option("--device", o->device, "override the cell file's serial device");
    s->add_option("--note", o->note, "operator note for the record");
    s->add_option("--operator", o->operator_name,
                  "who runs it, for the record (default: the cell file's records.operator, else asked, else "
                  "the login name)");
    s->add_flag("--json", o->json, "print the result as one JSON line");
    s->add_flag("--live", o->live,
                "serve the read-only live status page while the check runs (docs/live.md; the address is "
                "printed)");
    s->add_option(
        "--live-bind", o->live_bind,
        "where the live page listens, HOST:PORT (port 0: any free port); not a loopback address only "
        "with LOADTRIM_LIVE_TOKEN set");
    if (std::string(k.name) == "parasitic")
      s->add_flag(
          "--accept-new-curve", o->accept_new_curve,
          "store the determined curve even when it differs from the stored one (after maintenance; logged)");
    const std::string name = k.name;
    s->callback([o, &run, name] {
      o->kind = name;
      run = [o] { return lab(*o) ? run_one(*o) : static_cast<int>(kBadInput); };
    });
  }
  auto* rec = sub->add_subcommand(
      "record",
      "log a check performed outside loadtrim (speed 1066.235, linearity 1066.220) with its result");
  common(rec);
  rec->add_option("kind", o->kind, "speed or linearity")->required();
  rec->add_option("--result", o->result, "passed or failed")
      ->required()
      ->check(CLI::IsMember({"passed", "failed"}));
  rec->add_option("--note", o->note, "how and by whom it was performed, where its record is")->required();
  rec->add_option("--operator", o->operator_name, "who logs it, for the record");
  rec->callback([o, &run] { run = [o] { return lab(*o) ? run_record(*o) : static_cast<int>(kBadInput); }; });
  auto* due = sub->add_subcommand(
      "due", "which dyno checks are due for the cell, each with its rule (40 CFR 1066.215 Table 1)");
  common(due);
  due->add_option("--now", o->now, "evaluate at this UTC time instead of now (e.g. 2026-12-08T08:00:00Z)");
  due->add_flag("--json", o->json, "print the view as JSON");
  due->callback([o, &run] { run = [o] { return lab(*o) ? run_due(*o) : static_cast<int>(kBadInput); }; });
  auto* mnt = sub->add_subcommand(
      "maintenance",
      "log major maintenance of the dyno (makes the checks due that the profile's table names)");
  common(mnt);
  mnt->add_option("--note", o->note, "what was done")->required();
  mnt->callback(
      [o, &run] { run = [o] { return lab(*o) ? run_maintenance(*o) : static_cast<int>(kBadInput); }; });
}

}  // namespace loadtrim::app
