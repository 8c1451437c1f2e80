#include "app/session_runner.hpp"

#include <pwd.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <csignal>
#include <filesystem>
#include <fstream>
#include <functional>
#include <iostream>
#include <iterator>
#include <sstream>
#include <thread>

#include "app/cell_locks.hpp"
#include "app/exit_codes.hpp"
#include "app/live_page.hpp"
#include "app/notify.hpp"
#include "app/pause_watch.hpp"
#include "app/store_hook.hpp"
#include "app/subcommands.hpp"
#include "checks/cell_history.hpp"
#include "checks/check_runner.hpp"
#include "config/cell_loader.hpp"
#include "config/epa_csv.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "core/combination.hpp"
#include "inprocess/sim_rows.hpp"
#include "motion/motion.hpp"
#include "record/event_log.hpp"
#include "record/session_folder.hpp"
#include "record/vehicle_history.hpp"
#include "record/verify.hpp"
#include "report/report.hpp"
#include "session/record_writer.hpp"

namespace loadtrim::app {

namespace fs = std::filesystem;

namespace {
std::atomic<bool> g_stop{false};
extern "C" void on_stop_signal(int) {
  g_stop.store(true);
}

const char* kCautions =
    "Before the rollers move (the lab's own safety rules, local codes and licensed practice come first):\n"
    "  - the vehicle is restrained as the cell's rules require; tyres checked;\n"
    "  - nobody is in the roller area; guards, interlocks and emergency stops work;\n"
    "  - cooling fan and exhaust extraction are on; hood and doors as the cell requires;\n"
    "  - the cell's and the vehicle's speed limits in the files are right; loadtrim never commands more.\n";

}  // namespace

std::string default_check_profile() {
  return data_dir() + "/config/checks/cfr1066.toml";
}

std::string profile_file(const std::string& p) {
  return p.find('/') != std::string::npos || p.ends_with(".toml")
             ? p
             : config::profile_path(data_dir() + "/config/profiles", p);
}

std::vector<std::string> profile_names() {
  std::vector<std::string> names;
  std::error_code ec;
  for (fs::directory_iterator it(data_dir() + "/config/profiles", ec), end; !ec && it != end;
       it.increment(ec))
    if (it->path().extension() == ".toml") names.push_back(it->path().stem().string());
  std::sort(names.begin(), names.end());
  return names;
}

namespace {

void warn(const std::string& file, const core::Problems& w) {
  if (!w.empty()) std::cerr << config::format_problems(file, w);
}

struct Loaded {
  session::Inputs inputs;
  std::string profile_path;
  // Every warning the input files gave (each file's own, with its line, and their combination's), for the
  // record: the session_started record's combination_warnings.
  nlohmann::json warnings = nlohmann::json::array();
};

// Every file's problems at once: all but the last are printed here, the last is thrown (main prints it and
// "refused: nothing was started").
[[noreturn]] void throw_all(std::vector<config::InputError>& errors) {
  for (std::size_t i = 0; i + 1 < errors.size(); ++i) std::cerr << errors[i].what();
  throw errors.back();
}

Loaded load_all(const std::string& cell_file, const std::string& target_file,
                const std::string& profile_override, const RunRequest& req) {
  Loaded l;
  std::vector<config::InputError> errors;
  auto load = [&](const std::string& file, const auto& fn) {
    core::Problems w;
    try {
      fn(w);
      warn(file, w);
      std::istringstream lines(config::format_problems(file, w));
      for (std::string line; std::getline(lines, line);)
        if (!line.empty()) l.warnings.push_back(line);
    } catch (const config::InputError& e) {
      errors.push_back(e);
    }
  };
  load(cell_file, [&](core::Problems& w) {
    l.inputs.cell = config::load_cell(cell_file, adapters::tool_registry().sections(), &w);
  });
  bool have_target = false;
  load(target_file, [&](core::Problems& w) {
    // The target's own profile, when no other is given, must be one there is (a misspelt name is named with
    // the known ones).
    l.inputs.vehicle = config::load_target(
        target_file, &w, profile_override.empty() ? profile_names() : std::vector<std::string>{});
    have_target = true;
  });
  if (have_target || !profile_override.empty()) {
    l.profile_path = profile_file(profile_override.empty() ? l.inputs.vehicle.profile : profile_override);
    load(l.profile_path,
         [&](core::Problems& w) { l.inputs.profile = config::load_profile(l.profile_path, &w); });
  }
  if (!errors.empty()) throw_all(errors);
  adapters::tool_registry().override_link(l.inputs.cell,
                                          {req.port > 0 ? static_cast<unsigned>(req.port) : 0u, req.device});
  // How the three files combine (core/combination.hpp): every limit that needs no controller is checked now,
  // before anything connects.
  const auto& cell = l.inputs.cell;
  const core::CellFacts facts{cell.max_speed_kmh,  cell.max_force_n,    cell.max_motoring_s, cell.axles,
                              cell.min_inertia_kg, cell.max_inertia_kg, cell.run_up};
  const core::CombinationProblems cp = core::check_combination(l.inputs.vehicle, l.inputs.profile, facts);
  if (cp.any_error())
    std::cerr << "loadtrim: the cell file " << cell_file << ", the target " << target_file
              << " and the profile " << l.profile_path << " do not fit together:\n";
  for (const auto& [file, ps] : {std::pair{cell_file, cp.cell}, std::pair{target_file, cp.target},
                                 std::pair{l.profile_path, cp.profile}}) {
    core::Problems errs, warns;
    for (const auto& p : ps) (p.severity == core::Problem::Severity::error ? errs : warns).push_back(p);
    warn(file, warns);
    for (const auto& p : warns) l.warnings.push_back(file + ": " + p.key + ": " + p.message);
    if (!errs.empty()) errors.emplace_back(file, errs);
  }
  if (!errors.empty()) throw_all(errors);
  // The session runs the vehicle's reference speeds (the same rule check_combination applied above).
  l.inputs = session::plan_inputs(std::move(l.inputs.cell), l.inputs.profile, std::move(l.inputs.vehicle));
  return l;
}

std::optional<core::FleetLossModel> load_fleet(const std::string& csv) {
  try {
    const config::EpaFile f = config::read_epa_csv(csv);
    std::cerr << config::skipped_rows_note(csv, f, 1);  // the fit leaves out rows that cannot be used
    auto m = core::fit_fleet_loss(config::fleet_rows(f));
    if (m.ok()) return m;
  } catch (const config::InputError& e) {
    std::cerr << "fleet data not used: " << e.what();
  }
  return std::nullopt;
}

std::string history_file(const std::string& dir, const controller::CellConfig& cell,
                         const core::VehicleTarget& v) {
  return record::vehicle_history_file_to_read(dir, cell.name, v.id);
}

std::optional<core::HistoryEntry> load_history(const std::string& file, const std::string& vehicle_id,
                                               std::string* why_not = nullptr) {
  std::string err;
  auto h = record::load_vehicle_history(file, &err, vehicle_id);
  if (!h && !err.empty()) std::cerr << file << ": history entry not used: " << err << "\n";
  if (why_not) *why_not = err;
  return h;
}

void save_history(const std::string& file, const core::VehicleTarget& v, const session::Summary& s,
                  const std::string& folder, core::SettingMethod method) {
  if (!s.final_set) return;
  std::string err;
  // The last measured curve only from an iterative session, whose last coast-down is at the accepted
  // setting (docs/store.md, "The history first setting").
  // Its first warm-up hold, read back from the record, for the next session's day-to-day correction.
  if (!record::save_vehicle_history(file, v.id, folder, v.target, *s.final_set, err,
                                    method == core::SettingMethod::iterative ? s.measured : std::nullopt,
                                    record::first_warm_up_of(folder)))
    std::cerr << "history not saved: " << err << "\n";
}

// Interactive confirmation, or the explicit unattended flag. Returns the way it was given, or empty =
// refused.
std::string confirm(const RunRequest& req) {
  if (req.simulator) return "simulated controller started by this command: no rollers move";
  return ask_to_motor(req.unattended, kCautions, "YES",
                      "Type YES to let loadtrim motor the rollers: ", "interactive confirmation");
}

// Blocks the session's thread for good at an event: a record type, or "state:<name>" for entering a state
// (test hook only; see execute()).
class FreezeForTest : public session::Observer {
 public:
  explicit FreezeForTest(std::string state) : state_(std::move(state)) {}
  bool on_event(const session::Event& e) override {
    const auto* st = std::get_if<session::ev::StateChanged>(&e.payload);
    if (session::type_of(e) == state_ ||
        (st && "state:" + std::string(session::to_string(st->to)) == state_)) {
      std::fprintf(stderr, "loadtrim: test hook: the session thread freezes at %s\n", state_.c_str());
      for (;;) std::this_thread::sleep_for(std::chrono::hours(1));
    }
    return true;
  }
  std::string name() const override { return "the freeze test hook"; }

 private:
  std::string state_;
};

// Seals a session folder whose result is final (docs/records.md): the last thing written to it, with the
// cell's key when its file names one, and the seal's chain head in the cell's own log. False (with the reason
// on stderr) is a record failure.
bool seal_session(const std::string& folder, const controller::CellConfig& cell,
                  const nlohmann::json& summary, const record::SigningKey* key,
                  const std::string& checks_root, bool quiet) {
  record::SealRequest sr;
  sr.cell = cell.name;
  sr.result = summary;
  sr.key = key;
  record::SealInfo info;
  std::string err;
  const bool sealed = checks::seal_and_log(folder, sr, checks_root, "session", &info, err);
  for (const auto& n : info.notes) std::cerr << "loadtrim: note: " << n << "\n";
  if (!sealed) {
    std::cerr << "loadtrim: record failure: the folder could not be sealed: " << err << "\n";
    return false;
  }
  if (!quiet)
    std::printf("sealed: %s\n",
                info.signer.empty()
                    ? "unsigned (the cell file names no signing key: loadtrim keys create --cell ...)"
                    : ("signed by " + info.signer).c_str());
  return true;
}

// What the start record says about the lab, which only the command knows.
struct LabContext {
  nlohmann::json gate;  // the dyno-check gate's finding
  nlohmann::json who;   // the operator
  record::DataRoot root;
};

// `start_record` makes the complete start record (session_started or resume_started) from the part both
// share, which only execute() can fill (the history it loaded, the options it parsed).
int execute(session::Inputs inputs, const RunRequest& req, const std::string& folder,
            const session::ResumePoint* resume, const std::string& confirmation, const LabContext& lab,
            const std::function<session::Payload(session::ev::StartCommon)>& start_record,
            const record::SigningKey* key) {
  session::RecordWriter writer(folder);
  if (!writer.ok()) {
    std::cerr << "loadtrim: " << writer.error() << "\n";
    return kRecordFailure;
  }
  // Every record signed with the cell's key, so an unfinished folder cannot be changed and re-chained by
  // someone without it (docs/records.md). A folder begun unsigned is never continued by a cell with a key
  // (resume refuses it first).
  if (!writer.log().set_signer(key)) {
    std::cerr
        << "loadtrim: record failure: the folder's records are not signed, but the cell now has a key\n";
    return kRecordFailure;
  }
  session::Console console(req.console);
  // The console speaks the target's units (a [target_us] file: US and metric), or what --units asks.
  console.set_units(req.units == "metric" ? session::Console::Units::metric
                    : req.units == "us"   ? session::Console::Units::us
                    : req.units == "both" || inputs.vehicle.target_given_in_us
                        ? session::Console::Units::both
                        : session::Console::Units::metric);
  std::unique_ptr<controller::Controller> c =
      req.inprocess_truth ? inprocess::make_controller(inputs.cell, *req.inprocess_truth)
                          : adapters::tool_registry().make_controller(inputs.cell);
  session::Options opt;
  if (!core::parse(req.first_setting, opt.first_setting)) {
    std::cerr << "--first-setting: \"" << req.first_setting
              << "\" is not one of standard, fleet, loss-map, history\n";
    return kBadInput;
  }
  opt.sample_rate_hz = inputs.cell.sample_rate_hz;
  opt.resume_warm_up_s = req.resume_warm_up_s;
  // Pause and continue from the console, a signal, or `loadtrim pause` in another terminal (pause_watch.hpp).
  session::PauseControl pause_control;
  opt.pause = &pause_control;
  opt.max_pause_s = req.max_pause_s;
  opt.operator_note = req.note;
  opt.fleet =
      load_fleet(req.fleet_csv.empty() ? data_dir() + "/samples/data/epa_test_car_roadload_MY2016_2019.csv"
                                       : req.fleet_csv);
  const std::string hfile = history_file(req.history_dir, inputs.cell, inputs.vehicle);
  // The history: the lab's record store when it can be used, else the per-cell file (docs/store.md). Not
  // looked for when nothing can use it: the standard first setting, or a target file's own initial set.
  if (req.first_setting != core::to_string(core::FirstSetting::standard) && !inputs.vehicle.initial_set) {
    HistoryFound history =
        find_history(lab.root, inputs.cell.name, inputs.vehicle.id, hfile,
                     [&](std::string& why_not) { return load_history(hfile, inputs.vehicle.id, &why_not); });
    opt.history = std::move(history.entry);
    opt.history_lookup = std::move(history.lookup);
  }
  const auto& tv = inputs.vehicle;
  session::ev::StartCommon common{
      .vehicle = tv.id,
      .cell = inputs.cell.name,
      .profile = inputs.profile.name,
      .dyno_checks = lab.gate,
      .operator_id = lab.who,
      .data_root_path = lab.root.path,
      .data_root_from = lab.root.source,
      .signing_key = key ? key->fingerprint() : std::string("none: the folder will be sealed unsigned"),
      .confirmation = confirmation,
      .target = tv.target,
      .vehicle_description = tv.description,
      .test_mass_kg = tv.test_mass_kg,
      .standard = inputs.profile.standard,
      .tolerance_n = inputs.profile.tolerance_n,
      .reference_speeds_kmh = inputs.profile.reference_speeds_kmh,
      .dropped_reference_speeds = inputs.dropped_reference_speeds,
      .software_version = LOADTRIM_VERSION,
      .software_build = LOADTRIM_BUILD_ID,
      .operator_note = req.note,
      .first_setting_requested = req.first_setting,
      .history_file = hfile,
      .history_available = opt.history.has_value()};
  const session::Event start{start_record(std::move(common)), std::nullopt, nullptr};
  if (!writer.on_event(start)) {
    std::cerr << "loadtrim: " << writer.error() << "\n";
    return kRecordFailure;
  }
  if (req.console != session::Console::Mode::json)
    std::printf("session folder: %s\n", folder.c_str());
  else
    std::printf("%s\n", nlohmann::json({{"type", "session_folder"}, {"path", folder}}).dump().c_str());
  std::fflush(stdout);
  console.on_event(start);  // the target and the tolerance, before the first coast-down is compared with them
  const core::VehicleTarget vehicle = inputs.vehicle;
  std::vector<session::Observer*> observers = {&writer, &console};
  // The live status page (docs/live.md): a view like the console; one that cannot bind is said and the
  // session goes on without it (its address and token were checked before anything started).
  std::unique_ptr<LivePage> live;
  if (req.live) {
    live = serve_live_page(
        req.live_bind,
        "loadtrim live: session " + fs::path(folder).filename().string() + " on cell " + inputs.cell.name,
        std::string(req.simulator ? "Simulated controller: no rollers move.\n" : "") + kCautions,
        req.console == session::Console::Mode::json);
    if (live) observers.push_back(live.get());
  }
  // The lab overview learns that the session runs (docs/store.md "The lab overview"): a start entry in the
  // queue, drained on a thread of its own; the session never waits for the store.
  RunningNote running = RunningNote::start(
      lab.root,
      {"session", folder, fs::path(folder).filename().string(), inputs.cell.name, inputs.vehicle.id,
       core::to_string(inputs.profile.method), record::utc_now(), live ? live->url() : std::string(), ""},
      req.simulator);
  // A test hook (as LOADTRIM_TEST_FAIL_WRITES_AFTER): freeze the session's own thread at the named event, to
  // show that a stalled tool lets the controller's watchdog stop the rollers (docs/safety.md).
  std::optional<FreezeForTest> freezer;
  if (const char* st = std::getenv("LOADTRIM_TEST_FREEZE_IN_STATE"); st && *st) {
    freezer.emplace(st);
    observers.push_back(&*freezer);
  }
  // Whether a controller ever answered: a new session that never reached one moved nothing and measured
  // nothing, so its folder (the start record only) is not left behind as if it were a session.
  struct ConnectSeen : session::Observer {
    bool seen = false;
    bool on_event(const session::Event& e) override {
      if (std::holds_alternative<session::ev::ControllerIdentified>(e.payload)) seen = true;
      return true;
    }
    std::string name() const override { return "the connect watcher"; }
  } connect_seen;
  observers.push_back(&connect_seen);
  const controller::CellConfig cell = inputs.cell;
  const core::SettingMethod method = inputs.profile.method;
  session::Session s(std::move(inputs), opt, *c, observers, &g_stop);
  session::Summary sum;
  {
    const bool console_lines = req.console == session::Console::Mode::normal && ::isatty(STDIN_FILENO) != 0;
    const PauseWatch watch(pause_control, folder, lab.who.value("name", std::string("the operator")),
                           console_lines);
    if (console_lines)
      std::printf(
          "  (type \"pause <reason>\" and Enter to stop the rollers and wait; \"continue\" to go on)\n");
    sum = s.run(resume);
  }
  c->disconnect();
  // Nothing more goes into the folder: a final result is sealed (the report, a derived file, may follow).
  writer.close();
  // (An interruption while connecting keeps its folder: the operator's Ctrl-C is on record there.)
  if (!resume && !connect_seen.seen && sum.outcome == session::Outcome::controller_fault &&
      sum.rollers_stopped) {
    std::error_code ec;
    fs::remove_all(folder, ec);
    running.end(false, false);
    std::cerr
        << "loadtrim: the controller was never reached (" << sum.stop_reason
        << "): nothing was moved or measured, "
        << (ec ? "and the session folder " + folder + " could not be removed (" + ec.message() +
                     "): it holds only the start record"
               : "so no session folder was kept (" + folder + " removed)")
        << "\nCheck the cell file's address and that the controller is on, then run the command again.\n";
    return kControllerFault;
  }
  // A final result is sealed only when its record and summary.json were written: else it is a record failure,
  // and resume finishes it from what was recorded.
  if (session::is_final(sum.outcome) && (!writer.ok() || writer.summary().is_null()))
    sum.outcome = session::Outcome::record_failure;
  if (session::is_final(sum.outcome) && !seal_session(folder, cell, writer.summary(), key, req.checks_dir,
                                                      req.console == session::Console::Mode::json))
    sum.outcome = session::Outcome::record_failure;
  // Under the cell's own name, where the next session looks (`inputs` was moved into the session above: its
  // cell name is gone, and a history saved under it was never found again).
  if (sum.outcome == session::Outcome::accepted)
    save_history(record::vehicle_history_file(req.history_dir, cell.name, vehicle.id), vehicle, sum, folder,
                 method);
  // Every session ends with its report (from the record alone, so it shows what an auditor would see).
  const report::ReportFiles rep = report::write_report(folder, LOADTRIM_VERSION, req.csv);
  if (!rep.ok)
    std::cerr << "loadtrim: report not written: " << rep.error << "\n";
  else if (req.console == session::Console::Mode::normal)
    std::printf("report: %s\n", rep.html.c_str());
  if (req.console != session::Console::Mode::json) std::printf("session folder: %s\n", folder.c_str());
  // Indexed in the lab's store (or queued for it) once sealed; never changes the result (docs/store.md).
  const bool indexed = session::is_final(sum.outcome) && sum.outcome != session::Outcome::record_failure;
  running.end(indexed, req.console == session::Console::Mode::normal);
  if (indexed)
    index_finished_folder(lab.root, folder, "session", req.console == session::Console::Mode::normal,
                          req.simulator);
  if (sum.outcome == session::Outcome::record_failure && !writer.error().empty())
    std::cerr << "loadtrim: record failure: " << writer.error() << " (every record before it is intact in "
              << folder << ")\n";
  // A session that could not confirm the rollers at standstill ends with the controller-fault code, whatever
  // its result, so no script mistakes it for a clean end.
  int code = exit_code_for(sum.outcome);
  if (!sum.rollers_stopped) {
    std::cerr << "loadtrim: " << sum.stop_note << "\n";
    code = kControllerFault;
  }
  // The cell's notifiers (docs/notify.md): after everything is written; they never change the exit code.
  const nlohmann::json summary = writer.summary().is_object()
                                     ? writer.summary()
                                     : nlohmann::json{{"result", session::to_string(sum.outcome)},
                                                      {"stop_reason", sum.stop_reason},
                                                      {"rollers_stopped", sum.rollers_stopped}};
  notify_end(cell, lab.root,
             end_message("session", cell.name, folder, session::to_string(sum.outcome), code, summary),
             &g_stop);
  return code;
}

// A folder whose result the record already holds (the process ended after the verdict, before the seal) is
// finalised without motoring: the controller is asked only whether the rollers stand still, and sent to a
// controlled stop if they do not; then the "finished" record, the summary and the seal.
int finalise_recorded(const std::string& folder, const session::Inputs& in, const session::ResumePoint& rp,
                      const RunRequest& req, const record::SigningKey* key) {
  session::Summary sum = session::summary_from_record(rp, in.profile);
  if (rp.finished_recorded) {
    // Everything but the seal was written: seal what summary.json says (nothing hashed is ever rewritten).
    std::ifstream sj((fs::path(folder) / "summary.json").string());
    const nlohmann::json summary =
        record::parse_record_json(std::string(std::istreambuf_iterator<char>(sj), {}));
    if (!summary.is_object()) {
      std::cerr << "loadtrim: record failure: the finished record names summary.json, which cannot be read\n";
      return kRecordFailure;
    }
    if (!seal_session(folder, in.cell, summary, key, req.checks_dir,
                      req.console == session::Console::Mode::json))
      return kRecordFailure;
    std::printf("%s: %s (finished earlier; now sealed)\n", session::to_string(sum.outcome),
                sum.stop_reason.c_str());
    index_finished_folder(record::find_data_root(req.data_dir), folder, "session",
                          req.console == session::Console::Mode::normal);
    return summary.value("rollers_stopped", true) ? exit_code_for(sum.outcome)
                                                  : static_cast<int>(kControllerFault);
  }
  session::RecordWriter writer(folder);
  if (!writer.ok()) {
    std::cerr << "loadtrim: " << writer.error() << "\n";
    return kRecordFailure;
  }
  if (!writer.log().set_signer(key)) {
    std::cerr
        << "loadtrim: record failure: the folder's records are not signed, but the cell now has a key\n";
    return kRecordFailure;
  }
  bool stopped = false;
  std::string note;
  {
    auto c = req.inprocess_truth ? inprocess::make_controller(in.cell, *req.inprocess_truth)
                                 : adapters::tool_registry().make_controller(in.cell);
    controller::ControllerInfo info;
    controller::Result r = c->connect();
    if (r.ok()) r = c->identify(info);
    if (r.ok()) {
      motion::Rules rules;
      rules.standstill_kmh = in.cell.standstill_kmh;
      motion::Motion m(*c, rules);
      controller::StatusReport st;
      r = m.settle_by_status(300.0, st);
      stopped = r.ok();
    }
    c->disconnect();
    note = stopped ? "standstill confirmed by the controller's status (nothing was motored by this process)"
                   : "rollers not confirmed stopped: " + r.message;
  }
  sum.rollers_stopped = stopped;
  sum.stop_note = note;
  const bool ok = writer.on_event({session::ev::Resumed{rp.completed.size(),
                                                        std::string("the result was already recorded (") +
                                                            session::to_string(sum.outcome) +
                                                            "): finalised from the record without motoring",
                                                        session::ev::Resumed::Finalised{stopped, note}},
                                   std::nullopt, nullptr}) &&
                  writer.on_event({session::ev::Finished{sum}, std::nullopt, nullptr});
  if (!ok) {
    std::cerr << "loadtrim: record failure: " << writer.error() << "\n";
    return kRecordFailure;
  }
  writer.close();
  if (writer.summary().is_null() || !seal_session(folder, in.cell, writer.summary(), key, req.checks_dir,
                                                  req.console == session::Console::Mode::json))
    return kRecordFailure;
  const report::ReportFiles rep = report::write_report(folder, LOADTRIM_VERSION, req.csv);
  if (!rep.ok) std::cerr << "loadtrim: report not written: " << rep.error << "\n";
  std::printf("%s: %s (finalised from the record; no coast-down was run)\n", session::to_string(sum.outcome),
              sum.stop_reason.c_str());
  index_finished_folder(record::find_data_root(req.data_dir), folder, "session",
                        req.console == session::Console::Mode::normal);
  if (!stopped) {
    std::cerr << "loadtrim: " << note << "\n";
    return kControllerFault;
  }
  return exit_code_for(sum.outcome);
}

// A member's value for a message: compact JSON, cut at 40 characters.
std::string shown(const nlohmann::json& j) {
  std::string s = j.dump(-1, ' ', false, nlohmann::json::error_handler_t::replace);
  return s.size() > 40 ? s.substr(0, 40) + "..." : s;
}

// What resume reads from a session_started record (the first command line's choices), each member's type and
// range checked: "" when every member present is as `run` writes it (docs/records.md, "When folders are
// sealed, and resume"), else which member is wrong and what is allowed. A member an older folder lacks is
// taken from this command line, as before.
std::string started_record_problem(const nlohmann::json& r) {
  if (r.contains("first_setting_requested")) {
    const nlohmann::json& f = r["first_setting_requested"];
    core::FirstSetting parsed{};
    if (!f.is_string() || !core::parse(f.get<std::string>(), parsed))
      return "\"first_setting_requested\" is " + shown(f) +
             "; allowed: one of the strings \"standard\", \"fleet\", \"loss-map\", \"history\"";
  }
  if (!r.contains("overrides")) return "";
  const nlohmann::json& o = r["overrides"];
  if (!o.is_object())
    return "\"overrides\" is " + shown(o) + "; allowed: an object with \"port\" and \"device\"";
  if (o.contains("port")) {
    const nlohmann::json& p = o["port"];
    const bool in_range = (p.is_number_unsigned() && p.get<std::uint64_t>() <= 65535) ||
                          (p.is_number_integer() && !p.is_number_unsigned() && p.get<std::int64_t>() >= 0 &&
                           p.get<std::int64_t>() <= 65535);
    if (!in_range)
      return "\"overrides.port\" is " + shown(p) +
             "; allowed: an integer from 1 to 65535 (the --port given to run), or 0 for none";
  }
  if (o.contains("device") && !o["device"].is_string())
    return "\"overrides.device\" is " + shown(o["device"]) +
           "; allowed: a string (the --device given to run), \"\" for none";
  return "";
}

}  // namespace

int exit_code_for(session::Outcome o) {
  switch (o) {
    case session::Outcome::accepted:
      return kAccepted;
    case session::Outcome::not_accepted:
      return kNotAccepted;
    case session::Outcome::refused:
      return kBadInput;
    case session::Outcome::controller_fault:
      return kControllerFault;
    case session::Outcome::interrupted:
      return kInterrupted;
    case session::Outcome::record_failure:
      return kRecordFailure;
  }
  return kInternalError;
}

const std::atomic<bool>& stop_flag() {
  return g_stop;
}

bool resolve_lab(RunRequest& req, record::DataRoot& root) {
  root = record::find_data_root(req.data_dir);
  if (!root.ok()) {
    std::cerr << "loadtrim: the lab's data root: " << root.describe() << "\n";
    return false;
  }
  std::string err;
  if (!record::ensure_data_root(root, err)) {
    std::cerr << "loadtrim: the lab's data root " << root.path << ": " << err << "\n";
    return false;
  }
  if (req.sessions_dir.empty()) req.sessions_dir = root.sessions();
  if (req.checks_dir.empty()) req.checks_dir = root.checks();
  if (req.history_dir.empty()) req.history_dir = root.history();
  return true;
}

nlohmann::json operator_identity(const RunRequest& req, const controller::CellConfig& cell) {
  if (!req.operator_name.empty()) return {{"name", req.operator_name}, {"from", "--operator"}};
  if (!cell.operator_name.empty())
    return {{"name", cell.operator_name}, {"from", "the cell file (records.operator)"}};
  if (!req.unattended && !req.simulator && ::isatty(STDIN_FILENO)) {
    std::cerr << "Operator (your name, for the record): " << std::flush;
    std::string name;
    std::getline(std::cin, name);
    if (!name.empty()) return {{"name", name}, {"from", "asked at the console"}};
  }
  const passwd* pw = ::getpwuid(::getuid());
  return {{"name", pw && pw->pw_name ? pw->pw_name : "uid " + std::to_string(::getuid())},
          {"from", "the system account (no --operator given and no records.operator in the cell file)"}};
}

bool cell_signing_key(const record::DataRoot& root, const controller::CellConfig& cell,
                      std::optional<record::SigningKey>& key) {
  key.reset();
  if (cell.records_public_key.empty() && cell.records_private_key.empty()) return true;
  std::string err;
  key = record::load_cell_signing_key(root.path, cell.name, cell.records_public_key, cell.records_private_key,
                                      err);
  if (!key) {
    std::cerr << "loadtrim: refusing to start: the cell's signing key (records.public_key in the cell file): "
              << err << "\n";
    return false;
  }
  return true;
}

std::string ask_to_motor(bool unattended, const char* cautions, const std::string& word,
                         const std::string& prompt, const std::string& given_as) {
  if (unattended) return "--unattended flag";
  std::cerr << cautions;
  if (!::isatty(STDIN_FILENO)) {
    std::cerr << "refusing to motor the rollers: no terminal to confirm on; run interactively or pass "
                 "--unattended\n";
    return "";
  }
  std::cerr << prompt << std::flush;
  std::string answer;
  if (!std::getline(std::cin, answer)) answer.clear();
  if (answer == word) return given_as;
  // Anything but the exact word (a lower-case "yes" included) refuses: say what was expected, and that
  // nothing moved, so the operator is never left guessing why the command ended.
  std::cerr << "loadtrim: you typed \"" << answer << "\"; the confirmation is exactly " << word
            << " (in capitals). Not confirmed: nothing was done, the rollers were not moved.\n";
  return "";
}

std::optional<core::FleetLossModel> fleet_model(const std::string& csv) {
  return load_fleet(csv);
}
std::optional<core::HistoryEntry> history_for(const std::string& dir, const controller::CellConfig& cell,
                                              const core::VehicleTarget& v, std::string* why_not) {
  return load_history(history_file(dir, cell, v), v.id, why_not);
}
std::string default_fleet_csv() {
  return data_dir() + "/samples/data/epa_test_car_roadload_MY2016_2019.csv";
}

void install_stop_handlers() {
  struct sigaction sa {};
  sa.sa_handler = on_stop_signal;
  sigemptyset(&sa.sa_mask);
  ::sigaction(SIGINT, &sa, nullptr);
  ::sigaction(SIGTERM, &sa, nullptr);
  // A closed terminal or ssh session (SIGHUP) and SIGQUIT stop the session safely too, never mid-motion.
  ::sigaction(SIGHUP, &sa, nullptr);
  ::sigaction(SIGQUIT, &sa, nullptr);
  // SIGUSR1/SIGUSR2 pause and continue a running session (pause_watch.hpp, installed while one runs);
  // anywhere else (a dyno check, the confirmation) they stop safely rather than kill the process mid-motion.
  ::sigaction(SIGUSR1, &sa, nullptr);
  ::sigaction(SIGUSR2, &sa, nullptr);
  ::signal(SIGPIPE, SIG_IGN);
}

void check_inputs(const RunRequest& req) {
  load_all(req.cell_file, req.target_file, req.profile, req);
}

// Whether the cell's required dyno checks are current (loadtrim check due). A simulator this process started
// is exempt (no rollers); a cell with checks.enforce = false is exempt; otherwise a due check refuses the
// session unless the operator overrides it, and the record says which.
nlohmann::json dyno_check_gate(const RunRequest& req, const controller::CellConfig& cell, bool& refuse) {
  refuse = false;
  if (req.simulator) return {{"enforced", false}, {"why", "simulated controller started by this command"}};
  if (!cell.enforce_checks) return {{"enforced", false}, {"why", "checks.enforce = false in the cell file"}};
  const std::string pfile = req.check_profile.empty() ? default_check_profile() : req.check_profile;
  const core::CheckProfile profile = config::load_check_profile(pfile);
  const checks::CellHistory h(req.checks_dir, cell.name);
  const checks::Readiness r =
      checks::readiness(h, profile, *checks::parse_utc_s(record::utc_now()), cell.adapter);
  nlohmann::json j = {{"enforced", true},
                      {"check_profile", pfile},
                      {"history", h.log_path()},
                      {"readiness", checks::to_json(r)}};
  if (r.may_start()) return j;
  if (req.override_checks.empty()) {
    refuse = true;
    std::cerr << "loadtrim: refusing to start: the dyno's own checks are not current for cell " << cell.name
              << ":\n  " << r.summary()
              << "\nRun them first (loadtrim check due --cell ... shows which), or pass --override-checks "
                 "\"REASON\" (logged).\n";
    return j;
  }
  std::cerr << "loadtrim: WARNING: dyno checks not current (" << r.summary()
            << "); overridden by the operator: " << req.override_checks << "\n";
  j["overridden"] = true;
  j["override_reason"] = req.override_checks;
  return j;
}

// The cell's own log takes every sealed session's chain head: a damaged log would only be found at the end of
// the session (its seal could not be logged), so it refuses the session before anything connects.
bool cell_log_intact(const RunRequest& req, const controller::CellConfig& cell) {
  const checks::CellHistory h(req.checks_dir, cell.name);
  if (h.ok()) return true;
  std::cerr << "loadtrim: refusing to start: the cell's log " << h.log_path() << " is damaged: " << h.error()
            << "\n(every session's seal is recorded there; restore it from the lab's backup, see "
               "docs/records.md)\n";
  return false;
}

static bool live_options_ok(const RunRequest& req) {
  return !req.live || live_bind_usable(req.live_bind);
}

int run_new_session(const RunRequest& request, std::string* folder_out) {
  RunRequest req = request;
  record::DataRoot root;
  if (!resolve_lab(req, root)) return kBadInput;
  Loaded l =
      load_all(req.cell_file, req.target_file, req.profile, req);  // throws InputError: nothing started
  std::optional<record::SigningKey> key;
  if (!cell_signing_key(root, l.inputs.cell, key)) return kBadInput;
  if (!cell_log_intact(req, l.inputs.cell)) return kRecordFailure;
  if (!live_options_ok(req)) return kBadInput;
  if (!key && !req.simulator)
    std::cerr
        << "loadtrim: note: cell \"" << l.inputs.cell.name
        << "\" has no signing key: its folders are sealed unsigned and an unfinished one can be altered "
           "unnoticed (loadtrim keys create --cell ...; docs/records.md)\n";
  bool refuse = false;
  const nlohmann::json gate = dyno_check_gate(req, l.inputs.cell, refuse);
  if (refuse) return kBadInput;
  // One session per cell: a busy cell is refused at once, before the operator is asked anything (a probe),
  // and for good once the folder exists (the lock then names it).
  std::optional<record::FileLock> cell_lock, folder_lock;
  std::string lock_msg;
  if (!lock_cell(l.inputs.cell, record::LockMode::exclusive, "run", "", cell_lock, lock_msg)) {
    std::cerr << "loadtrim: refusing to start: " << lock_msg << "\n";
    return kBadInput;
  }
  const std::string stale_lock = lock_msg;  // a lock left by a killed process, taken over by the probe
  if (!stale_lock.empty()) std::cerr << "loadtrim: " << stale_lock << "\n";
  cell_lock.reset();
  const nlohmann::json who = operator_identity(req, l.inputs.cell);
  const std::string confirmation = confirm(req);
  if (confirmation.empty()) {
    std::cerr << "loadtrim: not confirmed: nothing was started\n";
    return kBadInput;
  }
  install_stop_handlers();
  const std::string folder = record::create_session_folder(req.sessions_dir, l.inputs.vehicle.id);
  if (!lock_cell(l.inputs.cell, record::LockMode::exclusive, "run", folder, cell_lock, lock_msg) ||
      !lock_folder(folder, "run", folder_lock, lock_msg)) {
    std::error_code ec;
    fs::remove_all(folder, ec);  // empty: nothing was recorded
    std::cerr << "loadtrim: refusing to start: " << lock_msg << "\n";
    return kBadInput;
  }
  if (folder_out) *folder_out = folder;
  nlohmann::json files = nlohmann::json::array();
  files.push_back(record::copy_input(folder, req.cell_file, "cell.toml"));
  files.push_back(record::copy_input(folder, req.target_file, "target.toml"));
  files.push_back(record::copy_input(folder, l.profile_path, "profile.toml"));
  const std::string method = core::to_string(l.inputs.profile.method);
  const bool two_wheel_drive_mode = l.inputs.vehicle.two_wheel_drive_mode;
  const std::string endpoint = endpoint_key(l.inputs.cell);
  const std::string taken_over = stale_lock.empty() ? lock_msg : stale_lock;
  return execute(
      std::move(l.inputs), req, folder, nullptr, confirmation, LabContext{gate, who, root},
      [&](session::ev::StartCommon common) -> session::Payload {
        return session::ev::SessionStarted{.common = std::move(common),
                                           .method = method,
                                           .files = files,
                                           .port_override = req.port,
                                           .device_override = req.device,
                                           .inprocess = req.inprocess_truth.has_value(),
                                           .combination_warnings = l.warnings,
                                           .two_wheel_drive_mode = two_wheel_drive_mode,
                                           .cell_lock_endpoint = endpoint,
                                           .stale_lock_taken_over = taken_over};
      },
      key ? &*key : nullptr);
}

// A sealed folder whose cell log lacks its seal (a crash between the seal and the cell-log entry): the entry
// is added, under the folder's lock, when the seal is signed and checks with the cell's trusted key
// (docs/records.md, "The cell log"). False (with the reason on stderr) when it is not there afterwards.
static bool log_missing_seal(const std::string& folder, const record::FolderVerdict& first,
                             const RunRequest& req, const record::VerifyOptions& vo) {
  if (!first.seal || !first.seal->is_signed || !first.seal->signature_checked) {
    // Anyone who can write the folder could have made a seal that no trusted key vouches for: it is not put
    // in the cell log, whose entries are what later verifies trust.
    std::cerr << "loadtrim: the cell log holds no seal for " << folder << "; not added: the seal is "
              << (first.seal && first.seal->is_signed ? "signed by a key not trusted for its cell here"
                                                      : "not signed")
              << ", so nothing vouches for it\n";
    return true;
  }
  std::optional<record::FileLock> folder_lock;
  std::string lock_msg;
  if (!lock_folder(folder, "resume", folder_lock, lock_msg)) {
    std::cerr << "loadtrim: the cell log holds no seal for " << folder
              << ", and it was not added: " << lock_msg << "\n";
    return false;
  }
  // Again under the lock: the very seal verify saw, and still missing from the cell log.
  const record::FolderVerdict v = record::verify_folder(folder, vo);
  if (!v.seal || !first.seal || v.seal->seal_sha256 != first.seal->seal_sha256) {
    std::cerr << "loadtrim: " << folder << " changed while its seal was being added to the cell log; nothing "
              << "was added\n";
    return false;
  }
  bool added = false;
  std::string note, err;
  const bool ok = checks::log_sealed_folder(req.checks_dir, folder, v, added, note, err);
  if (!note.empty()) std::cerr << "loadtrim: note: " << note << "\n";
  if (!ok) {
    std::cerr << "loadtrim: the cell log holds no seal for " << folder << ", and it was not added: " << err
              << "\n";
    return false;
  }
  if (added)
    std::cerr << "loadtrim: the cell log lacked this folder's seal (a crash between the seal and its "
                 "cell-log entry); added, so a later cut-back of the folder is seen\n";
  return true;
}

int resume_session(const std::string& folder, const RunRequest& overrides) {
  RunRequest req = overrides;
  record::DataRoot root;
  if (!resolve_lab(req, root)) return kBadInput;
  if (!fs::is_directory(folder)) {
    std::cerr << "loadtrim: cannot resume " << folder << ": no such session folder\n";
    return kBadInput;
  }
  // The folder's lock first: the log is read once, under it (verify hands back the records it read), so what
  // resume continues from is what was verified and no other process writes the folder in between.
  std::optional<record::FileLock> cell_lock, folder_lock;
  std::string lock_msg;
  if (!lock_folder(folder, "resume", folder_lock, lock_msg)) {
    std::cerr << "loadtrim: refusing to resume: " << lock_msg << "\n";
    return kBadInput;
  }
  // Resume is a function of the verified folder: the whole folder (chain, every recorded file hash, the
  // inputs) is checked before anything connects, and a folder that does not verify is refused.
  record::VerifyOptions vo;
  vo.keys_dir = root.keys();
  vo.checks_root = req.checks_dir;
  std::vector<nlohmann::json> records;
  const record::FolderVerdict verdict = record::verify_folder(folder, vo, &records);
  if (verdict.outcome == record::Outcome::broken) {
    std::cerr << "loadtrim: refusing to resume " << folder
              << ": the folder does not verify: " << verdict.message
              << (verdict.record >= 0 ? " (record " + std::to_string(verdict.record) + ")" : std::string())
              << (verdict.file.empty() ? std::string() : " (file " + verdict.file + ")") << "\n";
    return kRecordFailure;
  }
  if (verdict.records_signed && !verdict.records_signature_checked) {
    std::cerr << "loadtrim: refusing to resume " << folder << ": its records are signed by "
              << verdict.records_signer << ", but no trusted key of cell \"" << verdict.cell << "\" is in "
              << root.keys() << " to check them\n";
    return kRecordFailure;
  }
  if (verdict.seal) {
    const std::string result = verdict.seal->result.value("result", "");
    std::cerr << "loadtrim: " << folder << " is finished and sealed (" << result << "); nothing to resume\n";
    const std::optional<session::Outcome> o = session::outcome_from_string(result);
    folder_lock.reset();  // log_missing_seal takes it again for its own verify and append
    if (verdict.cell_log_lacks_seal && !log_missing_seal(folder, verdict, req, vo)) return kRecordFailure;
    return o && session::is_final(*o) ? exit_code_for(*o) : static_cast<int>(kNotAccepted);
  }
  const std::string in = (fs::path(folder) / "inputs").string();
  // The same inputs as the interrupted session: the copies in its folder (their hashes were just verified).
  Loaded l = load_all(in + "/cell.toml", in + "/target.toml", in + "/profile.toml", req);
  for (const auto& r : records)
    if (r.value("type", "") == "session_started") {
      if (const std::string why = started_record_problem(r); !why.empty()) {
        std::cerr << "loadtrim: refusing to resume " << folder << ": record " << r["seq"].get<std::uint64_t>()
                  << " (session_started): " << why << "\n";
        return kRecordFailure;
      }
      req.first_setting = r.value("first_setting_requested", req.first_setting);
      // The port or device given on the first command line, unless this one gives another.
      if (overrides.port == 0 && r.contains("overrides") && r["overrides"].value("port", 0) > 0)
        adapters::tool_registry().override_link(l.inputs.cell, {r["overrides"]["port"].get<unsigned>(), ""});
      if (overrides.device.empty() && r.contains("overrides") && !r["overrides"].value("device", "").empty())
        adapters::tool_registry().override_link(l.inputs.cell,
                                                {0, r["overrides"]["device"].get<std::string>()});
    }
  std::optional<record::SigningKey> key;
  if (!cell_signing_key(root, l.inputs.cell, key)) return kBadInput;
  if (!cell_log_intact(req, l.inputs.cell)) return kRecordFailure;
  if (!live_options_ok(req)) return kBadInput;
  // The folder's own first record names the cell its inputs describe, and a cell with a key signed every
  // record: else the folder was re-chained without the key (or begun before the cell had one) and resuming it
  // would put the cell's signature on records nobody can vouch for.
  if (verdict.cell != l.inputs.cell.name) {
    std::cerr << "loadtrim: refusing to resume " << folder << ": its first record names cell \""
              << verdict.cell << "\", its inputs/cell.toml cell \"" << l.inputs.cell.name << "\"\n";
    return kRecordFailure;
  }
  if (key && (!verdict.records_signed || verdict.records_signer != key->fingerprint())) {
    std::cerr << "loadtrim: refusing to resume " << folder << ": cell \"" << l.inputs.cell.name
              << "\" signs with " << key->fingerprint() << ", but the folder's records are "
              << (verdict.records_signed ? "signed by " + verdict.records_signer : std::string("not signed"))
              << "\n";
    return kRecordFailure;
  }
  if (!lock_cell(l.inputs.cell, record::LockMode::exclusive, "resume", folder, cell_lock, lock_msg)) {
    std::cerr << "loadtrim: refusing to resume: " << lock_msg << "\n";
    return kBadInput;
  }
  const session::ResumePoint rp = session::resume_point(records);
  if (rp.malformed > 0) {
    std::cerr << "loadtrim: refusing to resume " << folder << ": " << rp.malformed
              << " record(s) lack what this version reads; the first: " << rp.malformed_note << "\n";
    return kRecordFailure;
  }
  if (const auto why = session::missing_adjustment(rp, l.inputs.profile)) {
    std::cerr << "loadtrim: refusing to resume " << folder << ": " << *why << "\n";
    return kRecordFailure;
  }
  if (rp.verdict) return finalise_recorded(folder, l.inputs, rp, req, key ? &*key : nullptr);
  // The dyno-check gate applies to a resumed session as to a new one.
  bool refuse = false;
  const nlohmann::json gate = dyno_check_gate(req, l.inputs.cell, refuse);
  if (refuse) return kBadInput;
  const nlohmann::json who = operator_identity(req, l.inputs.cell);
  const std::string confirmation = confirm(req);
  if (confirmation.empty()) {
    std::cerr << "loadtrim: not confirmed: nothing was started\n";
    return kBadInput;
  }
  install_stop_handlers();
  const std::string verified = record::to_string(verdict.outcome);
  return execute(
      std::move(l.inputs), req, folder, &rp, confirmation, LabContext{gate, who, root},
      [&](session::ev::StartCommon common) -> session::Payload {
        return session::ev::ResumeStarted{.common = std::move(common),
                                          .records_before = records.size(),
                                          .completed_coastdowns = rp.completed.size(),
                                          .folder_verified = verified};
      },
      key ? &*key : nullptr);
}

}  // namespace loadtrim::app
