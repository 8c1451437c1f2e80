// The unattended setting session as an explicit state machine above the controller interface.
//
// States and transitions (each change is reported to the observers, and so logged):
//
//   connect ──► check_limits ──► set_inertia ──► warm_up ──► write_set ──► run_up ──► coast_down ──► analyse
//      │             │                              │            ▲                                    │
//      │             │                              │            └──────── next set / repeat ─────────┤
//      ▼             ▼                              ▼                                                 ▼
//   safe_stop ◄── (fault, lost link beyond the reconnect policy, interruption, record failure) ◄── decided
//      │
//      ▼
//   finished (outcome: accepted | not_accepted | refused | controller_fault | interrupted | record_failure)
//
//   connect       connect and identify; the controller's roller diameter and base inertia must match the cell
//   check_limits  top reference speed + run-up margin below the cell's and the vehicle's limits (and the
//                 controller's); warm-up and loss-map speeds too; the motoring-time budget
//   set_inertia   per the profile's rule (EU SA4 §2.5.3), written and read back
//   warm_up       speed hold for the profile's time (optionally until the hold force is stable), then the
//   loss
//                 map when the first-setting strategy uses it; the first coast-down must be released within
//                 timing.max_gap_after_warmup_s of the warm-up's end (logged when it could not)
//   write_set     set coefficients written and read back
//   run_up        speed hold at the start speed until at the setpoint, then released into road-load
//   simulation coast_down    the trace recorded until below the lowest band analyse       band analysis,
//   regression, whole-trace estimate, tolerance, and the method's decision safe_stop     controlled stop to
//   zero speed (or, with the link lost, the controller's watchdog does it)
//
// A lost link inside a run discards that run: reconnect within the cell's policy, wait for the rollers to
// stop, clear the watchdog fault, re-warm if needed and repeat the run. The test is timed from the
// controller's sample timestamps, which the controller layer checks against the tool's own clock; every wait
// (motion/motion.hpp) also has a deadline on the tool's own clock. Threading: run() blocks the calling
// thread, which alone drives the controller; each coast-down's analysis runs on a worker thread meanwhile so
// heartbeats go on. The stop flag may be set from a signal handler.
//
// Safety (docs/safety.md): every set curve is checked against the envelope (core/envelope.hpp) before it is
// written, and a loop whose deviation does not shrink stops as "the controller does not follow the setting".
// The safe stop runs on every path out of run(), exceptions included; the summary says whether standstill was
// confirmed (rollers_stopped), and a session that could not confirm it ends with the controller-fault exit
// code. Observers cannot throw into the session: only a critical observer (the record) that fails stops it
// (record_failure); any other failing observer is logged and dropped.
#pragma once

#include <atomic>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "core/envelope.hpp"
#include "core/evaluation.hpp"
#include "core/profile.hpp"
#include "core/strategy.hpp"
#include "core/vehicle.hpp"
#include "motion/motion.hpp"

namespace loadtrim::session {

enum class State : std::uint8_t {
  connect,
  check_limits,
  set_inertia,
  warm_up,
  write_set,
  run_up,
  coast_down,
  analyse,
  safe_stop,
  finished
};
const char* to_string(State s);

enum class Outcome : std::uint8_t {
  accepted,
  not_accepted,
  refused,
  controller_fault,
  interrupted,
  record_failure
};
const char* to_string(Outcome o);
// A final result is a verdict (accepted, not accepted, refused): the session is over and its folder is
// sealed. The others (a controller fault, an interruption, a record failure) leave a session that `resume`
// may continue.
bool is_final(Outcome o);
bool is_final(const std::string& result);  // as to_string(Outcome) writes it

struct Options {
  core::FirstSetting first_setting = core::FirstSetting::loss_map;
  std::optional<core::FleetLossModel> fleet;  // for FirstSetting::fleet, and as a fallback
  std::optional<core::HistoryEntry> history;  // for FirstSetting::history, and as a fallback
  double sample_rate_hz = 100.0;
  double resume_warm_up_s = -1.0;  // warm-up after a resume; < 0: the profile's full warm-up
  std::string operator_note;
  std::chrono::milliseconds record_budget{30000};  // a durable record write (fsync) may take this long (wall)
  double stop_budget_s = 300.0;                    // controller seconds for the rollers to stop
  core::EnvelopeLimits envelope;  // max_force_n and top_speed_kmh are filled from the cell and profile
  bool whole_trace_estimator =
      true;  // the independent estimate beside the band method (benchmarks may skip it)
};

// What the session hands its observers. `trace` is set on "coastdown" events only.
struct Event {
  std::string type;
  nlohmann::json data;
  const std::vector<controller::Sample>* trace = nullptr;
};

struct Progress {
  State state = State::connect;
  int coastdown = 0;
  double speed_kmh = 0.0;
  double band_kmh = 0.0;     // reference speed whose band the coast is in (0 = none)
  double cell_time_s = 0.0;  // controller time since the session started
  double remaining_estimate_s = 0.0;
};

// Observers: the record writer, the console, anything else. on_event returning false (or throwing) means the
// observer could not do its job. For a critical observer (the record: an event that could not be made
// durable) the session stops safely with Outcome::record_failure, and the non-critical observers do not see
// that event (the console never shows a result whose record was not written). Any other observer that fails
// is logged and dropped. While an observer runs, the controller's keep-alive goes on for at most
// record_budget (critical) or the cell's progress grace (others): an observer that hangs longer lets the
// controller's watchdog stop the rollers.
class Observer {
 public:
  virtual ~Observer() = default;
  virtual bool on_event(const Event& e) = 0;
  virtual void on_progress(const Progress&) {}
  virtual std::string error() const { return {}; }
  virtual bool critical() const { return false; }
  virtual std::string name() const { return "an observer"; }
};

struct Inputs {
  controller::CellConfig cell;
  core::Profile profile;
  core::VehicleTarget vehicle;
};

// The per-coast-down record (also the "coastdown" event's data).
struct CoastdownRecord {
  int run = 0;
  core::RoadLoad set;
  core::CoastdownEvaluation evaluation;
  core::Decision decision;
  double release_time_s = 0.0;  // controller time
  double duration_s = 0.0;
  double run_up_s = 0.0;
  bool verifying = false;
};
nlohmann::json to_json(const CoastdownRecord& r, const core::Profile& p);

// What a resumed session takes over from its log.
struct ResumePoint {
  std::vector<nlohmann::json> completed;  // "coastdown" records, in order
  int unusable = 0;
  std::optional<int> discarded_run;  // a run started but not completed
  core::RoadLoad next_set;
  bool have_next_set = false;
  std::string strategy;
  double cell_time_s = 0.0;    // controller time used before the interruption
  int malformed = 0;           // records that could not be read as this version writes them
  std::string malformed_note;  // the first of them: "record N (type): what is missing"; resume refuses
  // A result the record already holds (the method's verdict in a coast-down record, a refusal, or a final
  // "finished" record) when the process ended before the folder was sealed: resume finalises it without
  // motoring and never runs another coast-down.
  std::optional<Outcome> verdict;
  std::string verdict_reason;
  std::optional<core::RoadLoad> final_set;  // as the decision gave it (not yet rounded)
  bool finished_recorded = false;  // the final "finished" record (and summary.json) is already written
  int iterations = 0;              // distinct settings written
};

struct Summary {
  Outcome outcome = Outcome::not_accepted;
  std::string stop_reason;
  int iterations = 0;  // distinct settings tried
  int coastdowns = 0;
  int usable_coastdowns = 0;
  double cell_time_s = 0.0;
  std::optional<core::RoadLoad> final_set;
  std::optional<core::RoadLoad> measured;
  std::vector<core::SpeedDeviation> deviations;
  std::string first_setting;
  bool rollers_stopped = false;  // standstill confirmed by the controller at the end
  std::string stop_note;         // how the rollers were stopped, or why that could not be confirmed
};
nlohmann::json to_json(const Summary& s);

class Session {
 public:
  Session(Inputs inputs, Options options, controller::Controller& controller,
          std::vector<Observer*> observers, const std::atomic<bool>* stop_flag = nullptr);
  // A fresh session, or one continuing from its log.
  Summary run(const ResumePoint* resume = nullptr);

 private:
  struct Stop {
    Outcome outcome;
    std::string reason;
  };
  bool emit(const std::string& type, nlohmann::json data,
            const std::vector<controller::Sample>* trace = nullptr);
  void progress(double speed_kmh, double band_kmh = 0.0);
  void transition(State to, const std::string& why = "");
  bool stop_requested() const { return stop_flag_ && stop_flag_->load(); }
  void on_sample(const controller::Sample& s);
  // A step of the current epoch (samples read after the last command's acknowledgement).
  motion::Step step(const std::string& what, double budget_s, std::vector<controller::Mode> modes = {}) const;
  controller::Result hold_and_wait(double speed_kmh, const char* what);
  bool recover_link(const std::string& why);
  bool settle_and_clear(const std::string& when);
  std::optional<Stop> run_states(const ResumePoint* resume);
  std::optional<Stop> write_set_checked(int run);

  std::optional<Stop> do_connect();
  std::optional<Stop> do_check_limits();
  std::optional<Stop> do_set_inertia();
  std::optional<Stop> do_warm_up(double duration_s, bool measure_loss_map);
  std::optional<Stop> do_run(int run);  // write_set → run_up → coast_down → analyse
  void do_safe_stop();
  std::optional<Stop> fault(const controller::Result& r, const std::string& during);
  // Last line of defence when run() is left by an exception: a stop command, never throwing.
  struct StopGuard {
    Session& s;
    ~StopGuard();
  };

  Inputs in_;
  Options opt_;
  controller::Controller& c_;
  motion::Motion motion_;
  std::vector<Observer*> observers_;
  const std::atomic<bool>* stop_flag_;
  State state_ = State::connect;
  controller::ControllerInfo info_;
  double m_r_kg_ = 0.0, force_mass_kg_ = 0.0, inertia_kg_ = 0.0, speed_limit_kmh_ = 0.0;
  double t_start_ = -1.0, t_now_ = 0.0, t_warm_end_ = -1.0, t_last_coast_end_ = -1.0, t_motoring_from_ = -1.0;
  double cell_time_before_ = 0.0;
  bool link_up_ = false;
  core::RoadLoad set_;
  std::unique_ptr<core::SettingMethodState> method_;
  std::vector<core::HoldPoint> loss_map_;
  int coastdowns_ = 0, unusable_ = 0, discarded_ = 0, link_losses_ = 0, iterations_ = 0;
  std::optional<core::RoadLoad> last_written_;
  std::string first_setting_;
  std::optional<CoastdownRecord> last_;
  std::optional<core::RoadLoad> final_set_;
  bool record_failed_ = false;
  std::string record_error_;
  std::vector<std::string> dropped_observers_;
  bool safe_stop_done_ = false, rollers_stopped_ = false, motion_commanded_ = false;
  std::string stop_note_;
  double last_progress_s_ = -1e300;
  std::optional<core::DivergenceWatch> divergence_;
};

// Rebuilds where a session stood from its log records (pure: the records are passed in).
ResumePoint resume_point(const std::vector<nlohmann::json>& records);
// The summary of a session whose verdict the record already holds (ResumePoint::verdict), from the record
// alone.
Summary summary_from_record(const ResumePoint& p, const core::Profile& profile);

}  // namespace loadtrim::session
