// Motion: the one library that moves the rollers and waits for them, used by setting sessions, the dyno's own
// checks and link-check alike. Above the controller interface, below the procedures.
//
// Every wait here has two deadlines and returns a Result (never throws):
//   - a budget in controller time, counted from the first sample of the step: a sample read after the step's
//     command was acknowledged (Sample::epoch), in one of the step's modes. The standard times the test by
//     the measuring system's clock, so this is the budget the profile states;
//   - a deadline on the tool's own monotonic clock from the moment the wait begins: the budget divided by the
//     controller's stated clock rate and the slowest rate its clock may run at (Rules::min_clock_rate), plus
//     a slack. The controller's clock is checked against that same minimum rate (controller/clock_guard.hpp),
//     so an honest step always ends on its controller budget first; a controller whose replies, clock or
//     stream misbehave in a way no other check names still cannot hold the tool longer than this.
// On every sample, before any filtering by epoch, mode or time (so a fault never hides behind a controller
// clock that is behind):
//   - a fault, emergency-stop or watchdog flag on a sample read after the last fault clear ends the step
//   (fatal);
//   - the at-limit flag (controller::kFlagLimit) ends the step (fatal);
//   - a speed above the limit plus the margin ends the step (fatal);
//   - the operator's stop flag ends a stoppable step (Result code kInterrupted).
// Results: ok; retryable (the link: no sample within the cell's sample gap, a dropped connection); fatal,
// with code kTooSlow when the controller budget ran out, kWallDeadline when the wall deadline passed,
// kInterrupted, or 0.
//
// Warnings: the controller's (Controller::warn: undefined status bits, retried exceptions, late replies) are
// handed to on_warning during every step and at its end.
//
// Threading: the thread that drives the controller calls these; they renew the controller's keep-alive lease
// only by calling it (a stalled caller lets the controller's watchdog trip).
#pragma once

#include <atomic>
#include <chrono>
#include <functional>
#include <initializer_list>
#include <string>
#include <vector>

#include "controller/controller.hpp"

namespace loadtrim::motion {

using controller::Result;
using controller::Sample;

// Result::code values of the motion library's own endings (controller error codes are positive).
inline constexpr int kInterrupted = -2;
// The controller-time budget of a step that has no better bound of its own: reaching and settling at a speed,
// a constant-force run, a stop. A healthy roller cell reaches 140 km/h or stops from it in well under a
// minute; ten minutes is a generous multiple that still ends a step whose condition never comes (common
// practice, no source).
inline constexpr double kDefaultStepBudgetS = 600.0;
inline constexpr int kTooSlow = -3;       // the step's controller-time budget ran out before its condition
inline constexpr int kWallDeadline = -4;  // the step's deadline on the tool's own clock passed
inline constexpr int kPaused = -5;        // the operator asked for a pause (Motion::set_pause_flag)
// Commanded to stop, the rollers did not slow (Rules::stop_progress_*).
inline constexpr int kNotSlowing = -6;
// The controller stayed in a mode other than the step's (Rules::mode_entry_s).
inline constexpr int kWrongMode = -7;

struct Rules {
  double speed_limit_kmh = 0.0;  // > 0: a sample above this plus the margin ends the step
  double overspeed_margin_kmh = 2.0;
  double standstill_kmh = 0.5;  // at or below: the rollers stand still (every stop and start check)
  // A stop seen in the samples must hold this long in controller time: one sample of an encoder dropout
  // is not a standstill (common practice, no source).
  double standstill_hold_s = 1.0;
  double min_clock_rate =
      0.25;  // the slowest the controller's clock may run, × its stated rate (as the clock guard)
  std::chrono::milliseconds wall_slack{20000};
  // How often the steps also ask the controller's status (its clock is checked against the samples' there,
  // and an error or a fault it names ends the step): after this much wall time or status_every_controller_s
  // of controller time, whichever comes first, counted across steps; 0 = never.
  std::chrono::milliseconds status_every{1000};
  double status_every_controller_s = 30.0;
  // How often a step hands the controller's warnings on (Motion::on_warning): a flaky link raising one
  // per poll becomes one record a second with its count, not one per poll (common practice, no source).
  std::chrono::milliseconds warning_every{1000};
  // A step with modes must see them: samples read after the last command acknowledged before the wait that
  // stay in another mode (a quarter of mode_entry_s back in it resets that) for mode_entry_s of the
  // controller's time, or of the tool's clock at the stated time scale (never less than
  // stop_progress_min_wall; judged after a batch), end the step (kWrongMode): a controller that acknowledged
  // road-load simulation and stayed in speed hold was taken for a coast-down with too little retarding force,
  // its setting changed on that, while the vehicle was motored at the start speed. 40 CFR 1066.245 asks a
  // dyno to settle within 100 ms; 2 s is twenty times that (common practice, no source).
  double mode_entry_s = 2.0;
  // A stop must show progress: once commanded to stop, rollers not yet standing still must come
  // stop_progress_kmh slower than at the last such step (a reading at rest is no step of its own) within
  // stop_progress_s of controller time, judged after each batch of samples, as
  // the tool's own clock measures it (divided by the controller's stated time scale, never less than
  // stop_progress_min_wall): a controller that acknowledges the stop and holds the speed, with a clock that
  // is frozen or slow, must not keep the tool waiting (and feeding its watchdog) for the whole stop budget.
  // 1 km/h in 10 s is 0.028 m/s², far below any controlled stop (common practice, no source).
  double stop_progress_kmh = 1.0;
  double stop_progress_s = 10.0;
  std::chrono::milliseconds stop_progress_min_wall{2000};
};

struct Step {
  std::string what;                       // named in every message: "warm-up", "run-up", "the stop", ...
  double budget_s = kDefaultStepBudgetS;  // controller seconds from the step's first sample
  std::vector<controller::Mode> modes;    // the step's samples are in one of these (empty: any)
  std::uint64_t since_epoch = 0;          // samples read before this epoch belong to the phase before
  bool stoppable = true;                  // the operator's stop flag ends it (false for stopping itself)
  bool pausable = true;  // and the pause flag (false where nothing moves and no pause is taken)
  // Judged after each batch of samples (when given): a failure ends the step with it.
  std::function<Result()> after_batch;
};

// A run-up under the vehicle's own power, then its coast (Motion::vehicle_run): the dyno simulates the road
// load at the current setting while the driver, prompted on the controller's driver display, accelerates to
// the start speed and, prompted again, shifts to neutral.
struct VehicleRunPlan {
  double start_kmh = 0.0;  // prompted; "neutral" is prompted once the speed is at or above it
  double end_kmh = 0.0;    // the coast ends at the first sample below this
  // Controller seconds from the "accelerate" prompt to the start speed (as a dyno's speed hold gets), and
  // from the "neutral" prompt to the release: a driver who never gets there ends the run (common practice, no
  // source).
  double run_up_budget_s = kDefaultStepBudgetS;
  double release_budget_s = 30.0;
  double coast_budget_s = kDefaultStepBudgetS;
  // Whether the controller states the vehicle-in-neutral signal (capability "neutral",
  // controller::kFlagNeutral); else the release is found in the speed trace (core::ReleaseDetector).
  bool neutral_signal = false;
};
struct VehicleRunOutcome {
  enum class Ending : std::uint8_t { coasted, early_release, not_reached, no_release };
  Ending ending = Ending::not_reached;
  std::vector<Sample> run_up;  // from the "accelerate" prompt to the release (exclusive)
  std::vector<Sample> coast;   // from the release until below end_kmh
  double prompt_s = -1.0, reached_s = -1.0, neutral_prompt_s = -1.0, release_s = -1.0;
  double peak_kmh = 0.0, release_kmh = 0.0;
  std::string detected_by;  // "neutral signal" or "speed trace"
  std::string why;          // for the endings other than coasted
};

class Motion {
 public:
  Motion(controller::Controller& c, Rules rules, const std::atomic<bool>* stop = nullptr);
  void set_rules(const Rules& r) { rules_ = r; }
  const Rules& rules() const { return rules_; }

  // Called with every sample that passed the safety checks (any epoch), e.g. for the clock and progress.
  std::function<void(const Sample&)> on_sample;
  // Called with the controller's warnings (Controller::take_warnings), oldest first: during a step at most
  // once per warning_every of wall time (repeats in between are counted in Warning::count), and at every
  // step's end. Without it the warnings stay in the controller's bounded queue.
  std::function<void(const controller::Warning&)> on_warning;
  // Hands the controller's warnings to on_warning now (callers do so after their own controller calls).
  void drain_warnings();

  // Receives until done(s) holds for a sample of the step; the step's samples go to `keep` when given.
  Result collect(const Step& step, const std::function<bool(const Sample&)>& done,
                 std::vector<Sample>* keep = nullptr);
  // Speed hold at v_kmh, then wait until the speed has stayed within ±tolerance of it for settle_s
  // (controller time).
  Result hold(double v_kmh, double settle_s, const std::string& what, double budget_s = kDefaultStepBudgetS,
              double tolerance_kmh = 0.5);
  // Road-load simulation, the driver prompted to accelerate to the start speed, then to shift to neutral; the
  // run-up and coast samples go to `out`. on_prompt is called after each prompt was acknowledged,
  // on_release when the release is found. Ok with out.ending coasted, early_release (a release below the
  // start speed: the run is unusable), not_reached or no_release (each with out.why); else as collect.
  Result vehicle_run(const VehicleRunPlan& plan, VehicleRunOutcome& out,
                     const std::function<void(controller::DriverPrompt, double)>& on_prompt,
                     const std::function<void()>& on_release);
  // Controlled stop, then wait (not stoppable by the operator: stopping is what is wanted) for standstill:
  // speed at or below the standstill threshold in idle or controlled-stop mode. `stopped` says whether it was
  // confirmed.
  Result stop_and_wait(double budget_s, bool& stopped);
  // Without a stream: poll the status until the rollers stand still (commanding a stop whenever they are not
  // at rest and not already stopping), every poll bounded; `last` gets the final status, and `read` (when
  // given) says whether `last` is a status the controller layer accepted.
  Result settle_by_status(double budget_s, controller::StatusReport& last, bool* read = nullptr);
  // A pause at standstill (no stream): polls the status every poll of wall time, keeping the link's
  // heartbeat, until resume() says go on (success). Ends early when the rollers are found moving or not at
  // rest (failure naming it), on a controller error, on the operator's stop flag (kInterrupted), or when
  // max_wall of the tool's own time has passed (kWallDeadline).
  Result wait_at_rest(const std::function<bool()>& resume, std::chrono::steady_clock::duration max_wall,
                      const std::string& what,
                      std::chrono::milliseconds poll = std::chrono::milliseconds(200));
  // While *pause is true, every stoppable step ends with kPaused (the session stops the rollers and waits).
  void set_pause_flag(const std::atomic<bool>* pause) { pause_ = pause; }
  // The wall deadline a step of this controller budget gets.
  std::chrono::steady_clock::duration wall_budget(double budget_s) const;
  bool standstill(double speed_kmh) const { return speed_kmh <= rules_.standstill_kmh; }
  // At rest: standing still in a mode that holds nothing (idle or controlled stop; docs/safety.md).
  bool at_rest(double speed_kmh, controller::Mode mode) const {
    return standstill(speed_kmh) &&
           (mode == controller::Mode::idle || mode == controller::Mode::controlled_stop);
  }
  // The wall window a stop has to show its progress in (Rules::stop_progress_*).
  std::chrono::steady_clock::duration stop_progress_window() const;
  // The same for a step's mode (Rules::mode_entry_s).
  std::chrono::steady_clock::duration mode_entry_window() const;
  double last_time_s() const { return last_time_s_; }
  bool have_time() const { return have_time_; }

 private:
  bool stop_requested() const { return stop_ && stop_->load(); }
  controller::Controller& c_;
  Rules rules_;
  const std::atomic<bool>* stop_;
  const std::atomic<bool>* pause_ = nullptr;
  double last_time_s_ = 0.0;
  bool have_time_ = false;
  std::chrono::steady_clock::time_point last_status_{};
  std::chrono::steady_clock::time_point last_warnings_{};
  // Drains when warning_every has passed since the last drain.
  void drain_warnings_if_due();
  double last_status_c_ = -1e300;
};

// A short description of a sample for messages: "82.3 km/h, road-load, flags 0x02".
std::string describe(const Sample& s);

}  // namespace loadtrim::motion
