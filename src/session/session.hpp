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
#include <cstdint>
#include <functional>
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
#include "core/warm_up_drift.hpp"
#include "motion/motion.hpp"
#include "session/events.hpp"
#include "session/pause.hpp"
#include "session/resume.hpp"

namespace loadtrim::session {

struct Options {
  core::FirstSetting first_setting = core::FirstSetting::loss_map;
  std::optional<core::FleetLossModel> fleet;  // for FirstSetting::fleet, and as a fallback
  std::optional<core::HistoryEntry> history;  // for FirstSetting::history, and as a fallback
  // Where the history was looked for (the store or the history file) and the rows not used, for the
  // first_setting record when the history is requested or used (docs/store.md); null: not said.
  nlohmann::json history_lookup;
  double sample_rate_hz = 100.0;
  double resume_warm_up_s = -1.0;  // warm-up after a resume; < 0: the profile's full warm-up
  std::string operator_note;
  std::chrono::milliseconds record_budget{30000};  // a durable record write (fsync) may take this long (wall)
  double stop_budget_s = 300.0;                    // controller seconds for the rollers to stop
  // Wall seconds a coast-down's analysis may take before the session stops (docs/safety.md: every wait has a
  // deadline on the tool's own clock). An analysis takes far less; 60 s is margin for a loaded host and a
  // sanitizer build (common practice, no source).
  double analysis_wall_limit_s = 60.0;
  // Tests only: runs on the analysis worker before it analyses (a slow analysis, to show the deadline above).
  std::function<void()> before_analysis;
  core::EnvelopeLimits envelope;  // max_force_n and top_speed_kmh are filled from the cell and profile
  bool whole_trace_estimator =
      true;  // the independent estimate beside the band method (benchmarks may skip it)
  // Pause and continue (session/pause.hpp); none: the session cannot be paused. A pause waits at most
  // max_pause_s of the tool's own time for its continue, then ends the session as interrupted (resumable).
  PauseControl* pause = nullptr;
  double max_pause_s = 3600.0;  // an hour: common practice, no source (docs/session.md)
};

struct Inputs {
  controller::CellConfig cell;
  core::Profile profile;  // with the vehicle's reference speeds (core::plan_reference_speeds)
  core::VehicleTarget vehicle;
  std::vector<core::DroppedSpeed> dropped_reference_speeds;  // what the plan dropped, and why
};
// The inputs of a session for this vehicle: the profile's reference speeds planned for it
// (core::plan_reference_speeds; `run`, `resume`, the demo and the benchmark all start here). A plan that
// leaves too few speeds keeps the profile's list: check_combination refuses such a vehicle before this.
Inputs plan_inputs(controller::CellConfig cell, const core::Profile& profile, core::VehicleTarget vehicle);

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
  // Delivers one event, complete, with the session's stamp; false when the record could not hold it.
  bool emit(Payload event, const std::vector<controller::Sample>* trace = nullptr);
  void progress(double speed_kmh, double band_kmh = 0.0);
  void transition(State to, const std::string& why = "");
  bool stop_requested() const { return stop_flag_ && stop_flag_->load(); }
  void on_sample(const controller::Sample& s);
  // A discarded run, a stop or a re-warm: the passes so far are not consecutive with what follows (logged).
  void reset_passes(int run, const std::string& why);
  // A step of the current epoch (samples read after the last command's acknowledgement).
  motion::Step step(const std::string& what, double budget_s, std::vector<controller::Mode> modes = {}) const;
  controller::Result hold_and_wait(double speed_kmh, const char* what);
  bool recover_link(const std::string& why);
  bool settle_and_clear(const std::string& when);
  std::optional<Stop> run_states(const ResumePoint* resume);
  std::optional<Stop> write_set_checked(int run);

  std::optional<Stop> do_connect();
  std::optional<Stop> do_check_limits();
  // The session's speed limit applied to the controller layer and the motion rules, and recorded.
  void apply_speed_limit();
  std::optional<Stop> do_set_inertia();
  std::optional<Stop> do_warm_up(double duration_s, bool measure_loss_map);
  std::optional<Stop> do_run(int run);  // write_set → run_up → coast_down → analyse
  // After a pass that is not yet the last in a row (warm_up.predict_next_pass, docs/standards.md §3.19): the
  // next coast-down predicted; when the warming will likely take it outside and the adjusted setting is
  // likelier to pass, the setting is adjusted now and the passes start again, unless too few coast-downs or
  // too little motoring time are left or the envelope refuses it (it coasts on, said in rec.decision).
  void judge_next_pass(int run, CoastdownRecord& rec, const core::WarmingOutlook& outlook);
  // A setting about to be accepted (docs/standards.md §3.12, §3.18): the warming still to come judged by the
  // drift rule (recorded as warm_up_drift), and a settled vehicle's setting once fully warm; rec.decision may
  // become an adjustment, coasting on, a rejection, or stay accepted with a finding.
  void judge_warm_acceptance(int run, CoastdownRecord& rec);
  // The operator's pause (r.code == motion::kPaused, or asked between steps): a run in progress discarded,
  // the pass count reset, the rollers stopped, the wait at rest for a continue. Nothing (go on: the caller
  // re-warms for rewarm_s) or how the session ends.
  std::optional<Stop> do_pause(const std::string& during, bool run_in_progress, double rewarm_s);
  // After the rollers stood (a pause, a lost link): the warming curve's windows and the session's initial
  // hold are forgotten; the re-warm's windows start the curve again (docs/standards.md §3.12).
  void forget_warming();
  // Why a new setting could not pass the consecutive passes (the coast-down limit, or the cell's motoring
  // time at the last measured cycle); empty when it could. `what` names the setting in the sentence.
  std::string room_for_passes(const std::string& what) const;
  bool pause_asked() const { return opt_.pause && opt_.pause->flag().load(); }
  // Clears the driver display when a prompt may still show (every way out of a vehicle run-up, the safe stop,
  // a pause); the record says whether the controller took it. Never throws; false when it could not.
  bool clear_driver_prompt(int run, const std::string& why);
  bool prompt_shown_ = false;
  bool pause_held_ = false;  // a pause was taken and not yet continued  // a driver prompt other than "off"
                             // was acknowledged and not yet cleared
  double rewarm_s() const;   // after a lost link or a pause: --resume-warm-up-s, else the profile's warm-up
  // The loss map's coast from one hold down to the next (loss_map.coast_between_holds): recorded as a
  // loss_map_coast event, its points kept for the first setting; a motion or link failure is returned.
  controller::Result coast_to_next_hold(double from_kmh, double to_kmh);
  // After a run-up under the vehicle's own power: the display cleared, the run-up's check recorded.
  std::optional<Stop> after_vehicle_run(int run, const motion::VehicleRunOutcome& out, double start_kmh);
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
  Observers observers_;
  const std::atomic<bool>* stop_flag_;
  State state_ = State::connect;
  controller::ControllerInfo info_;
  double m_r_kg_ = 0.0, force_mass_kg_ = 0.0, inertia_kg_ = 0.0, speed_limit_kmh_ = 0.0;
  double t_start_ = -1.0, t_now_ = 0.0, t_warm_end_ = -1.0, t_last_coast_end_ = -1.0;
  // The continuous motoring period (the cell's limits.max_motoring_s), on the controller's clock from the
  // first sample after the command that started the rollers (-1: they stand). The clock guard keeps that
  // clock within about 10 s of wall time of the truth over the whole period (controller/clock_guard.hpp: a
  // clock that runs slow is found once its lag passes the guard's window;
  // tests/integration/lying_controller_test.cpp clock_runs_slow). motoring_epoch_ is the controller's epoch
  // before the command while its first sample is awaited (on_sample).
  double t_motoring_from_ = -1.0;
  std::optional<std::uint64_t> motoring_epoch_;
  double motoring_used_s() const { return t_motoring_from_ < 0.0 ? 0.0 : t_now_ - t_motoring_from_; }
  double cell_time_before_ = 0.0;
  bool link_up_ = false;
  bool neutral_signal_ = false;  // the controller states "neutral" (vehicle run-ups find the release by it)
  core::RoadLoad set_;
  std::unique_ptr<core::SettingMethodState> method_;
  std::vector<core::HoldPoint> loss_map_;
  // The warming outlook from now_abs_s to next_abs_s (controller clock) on the warm-up's curve so far
  // (docs/standards.md §3.16).
  core::WarmingOutlook warming_outlook(double now_abs_s, double next_abs_s) const;
  double map_from_s_ = -1.0, map_to_s_ = -2.0;  // the loss map's span on the controller's clock
  std::vector<core::CoastPoint>
      coast_points_;             // the coasts between the map's holds (loss_map.coast_between_holds)
  int run_ = 0;                  // the run in progress or last run (0 before the first)
  double cycle_s_ = 0.0;         // the last coast-down's cycle (end to end, or its run-up and coast), s
  bool cycle_measured_ = false;  // cycle_s_ measured end to end (the run followed one of the same warm-up)
  // For the progress line's estimate: the warm-up being held (its length and start) and the run's start.
  double warm_asked_s_ = -1.0, warm_from_s_ = -1.0, run_from_s_ = -1.0;
  int coastdowns_ = 0, unusable_ = 0, discarded_ = 0, link_losses_ = 0, iterations_ = 0;
  std::optional<core::RoadLoad> last_written_;
  std::string first_setting_;
  std::optional<CoastdownRecord> last_;
  // The setting the last usable coast-down adjusted to (decision "run again"), restored by a resume: the
  // envelope's refusal of the first adjustment names the first setting (do_run).
  std::optional<core::RoadLoad> last_adjusted_to_;
  std::optional<core::RoadLoad> final_set_;
  bool record_failed_ = false;
  std::string record_error_;
  std::vector<std::string> dropped_observers_;
  std::vector<std::string> findings_;  // for page one (Summary::findings)
  // The warm-up hold windows (controller time since the first motoring, mean force) for the drift estimate.
  std::vector<core::DriftPoint> drift_points_;
  double drift_t0_ = -1.0;
  // The initial warm-up hold (not resumed, no pause before the first setting, force reported in speed hold):
  // the history's day-to-day correction compares it (docs/store.md, "The history first setting").
  bool initial_hold_ = false;
  std::optional<core::WarmUpRecord> initial_warm_up_;
  bool first_after_warm_up_ = true;  // the next release is the first after a (re-)warm-up: the 120 s rule
  bool safe_stop_done_ = false, rollers_stopped_ = false, motion_commanded_ = false;
  // identified_: the controller answered IDENT; controller_reached_: and it is the cell's (the safe stop then
  // commands a stop and confirms it by the controller).
  bool identified_ = false, controller_reached_ = false;
  std::string stop_note_;
  // Why the link could not be recovered for good (a fault the tool may not clear, another controller): the
  // session's fault, in place of the lost link's message. Empty otherwise.
  std::string held_fault_;
  double last_progress_s_ = -1e300;
  std::optional<core::DivergenceWatch> divergence_;
};

}  // namespace loadtrim::session
