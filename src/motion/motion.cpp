#include "motion/motion.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <thread>

#include "core/problem.hpp"
#include "core/run_up.hpp"

namespace loadtrim::motion {

using controller::Clock;
using controller::Mode;
using core::num;

namespace {
constexpr std::uint32_t kFaultFlags =
    controller::kFlagFault | controller::kFlagEstop | controller::kFlagWatchdog;

std::string flags_hex(std::uint32_t f) {
  char b[16];
  std::snprintf(b, sizeof b, "0x%02X", f);
  return b;
}

double seconds(Clock::duration d) {
  return std::chrono::duration<double>(d).count();
}
}  // namespace

std::string describe(const Sample& s) {
  std::string d = num(s.speed_kmh, 1) + " km/h, " + controller::to_string(s.mode);
  if (s.flags) d += ", flags " + flags_hex(s.flags);
  return d;
}

Motion::Motion(controller::Controller& c, Rules rules, const std::atomic<bool>* stop)
    : c_(c), rules_(rules), stop_(stop) {}

Clock::duration Motion::wall_budget(double budget_s) const {
  const double rate = std::max(1.0, c_.time_scale()) * std::max(1e-3, rules_.min_clock_rate);
  const double s = std::clamp(budget_s / rate, 0.0, 1e7);
  return std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(s)) + rules_.wall_slack;
}

namespace {
// controller_s of controller time on the tool's clock at the stated time scale, never less than min_wall.
Clock::duration scaled_window(double controller_s, double time_scale, Clock::duration min_wall) {
  const double s = std::clamp(controller_s / std::max(1.0, time_scale), 0.0, 1e7);
  return std::max<Clock::duration>(
      std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(s)), min_wall);
}
}  // namespace

Clock::duration Motion::stop_progress_window() const {
  return scaled_window(rules_.stop_progress_s, c_.time_scale(), rules_.stop_progress_min_wall);
}

Clock::duration Motion::mode_entry_window() const {
  return scaled_window(rules_.mode_entry_s, c_.time_scale(), rules_.stop_progress_min_wall);
}

void Motion::drain_warnings() {
  last_warnings_ = Clock::now();
  if (!on_warning) return;
  for (const controller::Warning& w : c_.take_warnings()) on_warning(w);
}

void Motion::drain_warnings_if_due() {
  if (Clock::now() - last_warnings_ >= rules_.warning_every) drain_warnings();
}

namespace {
// Drains the warnings when a step ends, however it ends.
struct DrainAtEnd {
  Motion& m;
  ~DrainAtEnd() {
    try {
      m.drain_warnings();
    } catch (...) {  // a warning's observer never throws out of a step's end
    }
  }
};
}  // namespace

Result Motion::collect(const Step& step, const std::function<bool(const Sample&)>& done,
                       std::vector<Sample>* keep) {
  const DrainAtEnd drain{*this};
  const auto began = Clock::now();
  const auto wall_end = began + wall_budget(step.budget_s);
  const std::uint64_t clear_epoch = c_.clear_epoch();
  const bool stopping = !step.stoppable;
  double t_first = -1.0, t_last = -1.0;
  Sample last{};
  std::vector<Sample> got;
  // The wall time the step's samples left its modes (when out_of_mode), judged at the end of each batch so
  // that a batch read late, with the old mode's samples first, is not taken for a controller that stays out.
  bool out_of_mode = false;
  Clock::time_point out_of_mode_since{};
  double out_of_mode_since_c = 0.0;
  double in_mode_since_c = std::numeric_limits<double>::quiet_NaN();
  const Clock::duration mode_window = mode_entry_window();
  // Only samples read after the last command acknowledged before this wait judge the mode: a step may take
  // samples from an earlier epoch (read before its command's acknowledgement, the old mode's among them).
  const std::uint64_t mode_epoch = std::max(step.since_epoch, c_.epoch());
  const auto wrong_mode = [&] {
    std::string want;
    for (const Mode m : step.modes)
      want += (want.empty() ? "" : " or ") + std::string(controller::to_string(m));
    return Result::fail("the controller did not enter " + want + " for " + step.what + ": its samples stay " +
                            describe(last) + " for " + num(last.time_s - out_of_mode_since_c, 1) +
                            " s of its time (" + num(seconds(Clock::now() - out_of_mode_since), 1) +
                            " s of the tool's) after the command was acknowledged; " +
                            num(rules_.mode_entry_s, 1) + " s allowed",
                        kWrongMode);
  };
  for (;;) {
    if (!stopping && rules_.status_every.count() > 0 &&
        (Clock::now() - last_status_ >= rules_.status_every ||
         (have_time_ && last_time_s_ - last_status_c_ >= rules_.status_every_controller_s))) {
      last_status_ = Clock::now();
      last_status_c_ = last_time_s_;
      controller::StatusReport st;
      if (Result r = c_.status(st); !r.ok()) {
        r.message += " (during " + step.what + ")";
        return r;
      }
      // A fault the status names (or its flags show: Controller::status) ends the step as a fault flag on a
      // sample does (docs/safety.md), whether or not the samples carry it.
      if (!st.fault.empty())
        return Result::fail("the controller's status reports fault \"" + st.fault + "\" during " + step.what);
    }
    if (step.stoppable && stop_requested())
      return Result::fail("interrupted by the operator during " + step.what, kInterrupted);
    if (step.stoppable && step.pausable && pause_ && pause_->load())
      return Result::fail("paused by the operator during " + step.what, kPaused);
    if (Clock::now() >= wall_end)
      return Result::fail(step.what + " did not complete within " + num(seconds(wall_end - began), 1) +
                              " s of wall time (the controller's clock advanced " +
                              num(t_first >= 0 ? t_last - t_first : 0.0, 1) + " s meanwhile; its budget is " +
                              num(step.budget_s) + " s)",
                          kWallDeadline);
    got.clear();
    drain_warnings_if_due();
    if (Result r = c_.receive_samples(got); !r.ok()) {
      r.message += " (during " + step.what + ")";
      return r;
    }
    for (const Sample& s : got) {
      // Safety first, whatever the sample's epoch or time: a fault latched after the last clear, or
      // over-speed. While stopping, a latched fault (a watchdog stop, an emergency stop) is what is being
      // waited out.
      if (!stopping && s.epoch >= clear_epoch && (s.flags & kFaultFlags))
        return Result::fail("the controller reports a fault (flags " + flags_hex(s.flags) + ") during " +
                            step.what);
      // The controller says it is at one of its limits (speed, force, power, travel): not a state to go on
      // measuring in. A live state, not latched: whatever the epoch.
      if (!stopping && (s.flags & controller::kFlagLimit))
        return Result::fail("the controller reports that it is at a limit (flags " + flags_hex(s.flags) +
                            ") during " + step.what);
      if (!stopping && rules_.speed_limit_kmh > 0.0 &&
          s.speed_kmh > rules_.speed_limit_kmh + rules_.overspeed_margin_kmh)
        return Result::fail("speed " + num(s.speed_kmh, 1) + " km/h above the limit of " +
                            num(rules_.speed_limit_kmh) + " km/h during " + step.what);
      last_time_s_ = s.time_s;
      have_time_ = true;
      if (on_sample) on_sample(s);
      if (s.epoch < step.since_epoch) continue;  // read before the step's command was acknowledged
      if (t_first < 0.0) t_first = s.time_s;
      t_last = s.time_s;
      last = s;
      const bool in_mode =
          step.modes.empty() || std::find(step.modes.begin(), step.modes.end(), s.mode) != step.modes.end();
      if (in_mode) {
        // Back in the step's modes for a quarter of mode_entry_s of the controller's time: one in-mode
        // reading slipped in now and then does not make a controller that stays out look as if it followed.
        if (std::isnan(in_mode_since_c)) in_mode_since_c = s.time_s;
        if (s.time_s - in_mode_since_c >= 0.25 * rules_.mode_entry_s) out_of_mode = false;
        if (keep) keep->push_back(s);
        if (done(s)) return Result::success();
      } else {
        in_mode_since_c = std::numeric_limits<double>::quiet_NaN();
        if (!out_of_mode && s.epoch >= mode_epoch) {
          out_of_mode = true;
          out_of_mode_since = Clock::now();
          out_of_mode_since_c = s.time_s;
        }
        // Samples read after the acknowledgement were made after the command: out of the step's modes for
        // mode_entry_s of the controller's time is a controller that did not follow it.
        if (out_of_mode && s.time_s - out_of_mode_since_c > rules_.mode_entry_s) return wrong_mode();
      }
      if (s.time_s - t_first > step.budget_s)
        return Result::fail(step.what + " did not complete within " + num(step.budget_s) +
                                " s of controller time (last sample: " + describe(last) + ")",
                            kTooSlow);
    }
    // ... or of the tool's clock at the stated rate (a frozen clock), judged at the end of a batch. Only a
    // batch with samples: a stream gone quiet is the sample gap's (a lost link, tried again), not these
    // rules'.
    if (!got.empty()) {
      if (out_of_mode && Clock::now() - out_of_mode_since > mode_window) return wrong_mode();
      if (step.after_batch)
        if (Result r = step.after_batch(); !r.ok()) return r;
    }
  }
}

Result Motion::hold(double v_kmh, double settle_s, const std::string& what, double budget_s,
                    double tolerance_kmh) {
  if (Result r = c_.hold_speed(v_kmh); !r.ok()) return r;
  Step st;
  st.what = what;
  st.budget_s = budget_s;
  st.modes = {Mode::speed_hold};
  st.since_epoch = c_.epoch();
  // At the setpoint, then settle_s more (speed noise may cross the tolerance meanwhile without restarting
  // it).
  double reached = -1.0;
  return collect(st, [&](const Sample& s) {
    if (reached < 0.0 && std::abs(s.speed_kmh - v_kmh) < tolerance_kmh) reached = s.time_s;
    return reached >= 0.0 && s.time_s - reached >= settle_s;
  });
}

Result Motion::vehicle_run(const VehicleRunPlan& plan, VehicleRunOutcome& out,
                           const std::function<void(controller::DriverPrompt, double)>& on_prompt,
                           const std::function<void()>& on_release) {
  using controller::DriverPrompt;
  using Ending = VehicleRunOutcome::Ending;
  out = VehicleRunOutcome{};
  out.detected_by = plan.neutral_signal ? "neutral signal" : "speed trace";
  if (Result r = c_.release_road_load(); !r.ok()) return r;
  Step st;
  st.what = "vehicle run-up";
  st.budget_s = plan.run_up_budget_s + plan.release_budget_s + plan.coast_budget_s;
  st.modes = {Mode::road_load};
  if (Result r = c_.prompt_driver(DriverPrompt::accelerate, plan.start_kmh); !r.ok()) return r;
  st.since_epoch = c_.epoch();  // samples read after the prompt was acknowledged
  if (on_prompt) on_prompt(DriverPrompt::accelerate, plan.start_kmh);
  enum class Phase : std::uint8_t { accelerating, awaiting_release, coasting };
  Phase phase = Phase::accelerating;
  bool in_gear_seen = false;
  // The release budget runs from the first sample read after the "neutral" prompt was acknowledged: samples
  // already buffered when it was sent are older than the prompt (a tool behind a fast stream would otherwise
  // count its own lag against the driver).
  std::uint64_t neutral_epoch = 0;
  bool neutral_acknowledged = false;
  double release_deadline_from_s = 0.0;
  Result prompt_failed = Result::success();
  bool coast_too_slow = false;
  core::ReleaseDetector detector;
  std::vector<Sample> seen;  // every sample of the run-up (the detector's indices point into it)
  auto released = [&](std::size_t at) {
    out.run_up.assign(seen.begin(), seen.begin() + static_cast<std::ptrdiff_t>(at));
    out.coast.assign(seen.begin() + static_cast<std::ptrdiff_t>(at), seen.end());
    out.release_s = seen[at].time_s;
    out.release_kmh = seen[at].speed_kmh;
  };
  Result r = collect(st, [&](const Sample& s) {
    if (out.prompt_s < 0.0) out.prompt_s = s.time_s;
    if (phase == Phase::coasting) {
      out.coast.push_back(s);
      // The coast has its own budget (too little retarding force: the dyno nearly drives the car).
      if (s.time_s - out.release_s > plan.coast_budget_s) {
        coast_too_slow = true;
        return true;
      }
      return s.speed_kmh < plan.end_kmh;
    }
    seen.push_back(s);
    out.peak_kmh = std::max(out.peak_kmh, s.speed_kmh);
    bool release = false;
    std::size_t at = seen.size() - 1;
    if (plan.neutral_signal) {
      const bool neutral = (s.flags & controller::kFlagNeutral) != 0;
      if (!neutral) in_gear_seen = true;
      release = neutral && in_gear_seen;
    } else if (detector.feed(s.time_s, s.speed_kmh)) {
      release = true;
      at = *detector.release_index();
    }
    if (phase == Phase::accelerating) {
      if (release) {
        released(at);
        out.ending = Ending::early_release;
        out.why = "the vehicle was shifted to neutral at " + num(out.release_kmh, 1) +
                  " km/h, below the start speed of " + num(plan.start_kmh) + " km/h (found from the " +
                  out.detected_by + ")";
        return true;
      }
      if (s.speed_kmh >= plan.start_kmh) {
        out.reached_s = s.time_s;
        phase = Phase::awaiting_release;
        if (Result pr = c_.prompt_driver(DriverPrompt::neutral); !pr.ok()) {
          prompt_failed = pr;
          return true;
        }
        out.neutral_prompt_s = s.time_s;
        neutral_epoch = c_.epoch();
        if (on_prompt) on_prompt(DriverPrompt::neutral, plan.start_kmh);
        return false;
      }
      if (s.time_s - out.prompt_s > plan.run_up_budget_s) {
        out.ending = Ending::not_reached;
        out.why = "the vehicle did not reach the start speed of " + num(plan.start_kmh) + " km/h within " +
                  num(plan.run_up_budget_s) + " s of the prompt to accelerate (highest speed " +
                  num(out.peak_kmh, 1) + " km/h)";
        return true;
      }
      return false;
    }
    // awaiting_release
    if (!neutral_acknowledged && s.epoch >= neutral_epoch) {
      neutral_acknowledged = true;
      release_deadline_from_s = s.time_s;  // the recorded prompt time stays the sample that triggered it
    }
    if (release) {
      released(at);
      phase = Phase::coasting;
      if (on_release) on_release();
      return !out.coast.empty() && out.coast.back().speed_kmh < plan.end_kmh;
    }
    if (neutral_acknowledged && s.time_s - release_deadline_from_s > plan.release_budget_s) {
      out.ending = Ending::no_release;
      out.why = "no release to neutral was seen within " + num(plan.release_budget_s) +
                " s of the prompt to shift to neutral (found from the " + out.detected_by + ")";
      return true;
    }
    return false;
  });
  if (phase != Phase::coasting && out.run_up.empty() && out.coast.empty()) out.run_up = seen;  // not released
  if (!prompt_failed.ok()) return prompt_failed;
  if (!r.ok()) return r;
  if (coast_too_slow)
    return Result::fail("the coast-down did not reach " + num(plan.end_kmh) + " km/h within " +
                            num(plan.coast_budget_s) + " s of the release",
                        kTooSlow);
  if (phase == Phase::coasting) out.ending = Ending::coasted;
  return Result::success();
}

namespace {
// Whether a stop makes progress (Rules::stop_progress_*): the rollers, not yet standing still, come step_kmh
// slower than at the last such step within the window of the tool's own clock; standing still (no slower to
// come), the stop must be confirmed within the window.
class StopProgress {
 public:
  StopProgress(double step_kmh, Clock::duration window) : step_kmh_(step_kmh), window_(window) {}
  // Takes a reading: progress when the rollers, not yet standing still, are step_kmh slower than at the last
  // progress. A reading at rest is no progress of its own (a controller slipping one "at rest" reading in
  // now and then must not keep the window open): the standstill hold ends an honest stop within it.
  void observe(double speed_kmh, controller::Mode mode, bool standing, Clock::time_point now) {
    last_kmh_ = speed_kmh;
    last_mode_ = mode;
    last_standing_ = standing;
    if (!started_ || (!standing && speed_kmh <= mark_kmh_ - step_kmh_)) {
      started_ = true;
      mark_kmh_ = speed_kmh;
      mark_wall_ = now;
    }
  }
  // Judged after a batch of readings (a batch read late, after a stall of the tool, brings its own progress
  // first): empty while the stop makes progress; else the failure's message.
  std::string judge(Clock::time_point now) const {
    if (!started_ || now - mark_wall_ <= window_) return {};
    if (last_standing_)
      return std::string("commanded to stop, the controller still reports ") +
             controller::to_string(last_mode_) + " at " + num(last_kmh_, 1) + " km/h after " +
             num(seconds(window_), 1) + " s of the tool's clock";
    return "commanded to stop, the rollers did not slow by " + num(step_kmh_, 1) + " km/h from " +
           num(mark_kmh_, 1) + " km/h within " + num(seconds(window_), 1) + " s of the tool's clock (now " +
           num(last_kmh_, 1) + " km/h, " + controller::to_string(last_mode_) + ")";
  }

 private:
  double step_kmh_;
  Clock::duration window_;
  bool started_ = false;
  double mark_kmh_ = 0.0;
  Clock::time_point mark_wall_{};
  double last_kmh_ = 0.0;
  controller::Mode last_mode_ = controller::Mode::idle;
  bool last_standing_ = false;
};

// While stopping, the controller's earlier faults and clock no longer end a call (Controller::set_stopping).
struct Stopping {
  controller::Controller& c;
  explicit Stopping(controller::Controller& x) : c(x) { c.set_stopping(true); }
  ~Stopping() { c.set_stopping(false); }
  Stopping(const Stopping&) = delete;
  Stopping& operator=(const Stopping&) = delete;
};
}  // namespace

Result Motion::stop_and_wait(double budget_s, bool& stopped) {
  const Stopping stopping(c_);
  stopped = false;
  if (Result r = c_.controlled_stop(); !r.ok()) return r;
  Step st;
  st.what = "the stop";
  st.budget_s = budget_s;
  st.since_epoch = c_.epoch();
  st.stoppable = false;
  // Held for standstill_hold_s of controller time, or of the tool's own time when the controller's clock
  // does not move (a frozen clock must not keep the stop from being confirmed, nor confirm it at once). The
  // clock guard is off while stopping, so the controller's time alone never confirms it faster than half the
  // hold at the rate the controller stated (a clock that jumps ahead must not either; a controller simulated
  // in the tool's own process has no wall-related clock). The half is margin for a clock a little fast
  // against the wall (common practice, no source).
  double still_since = std::numeric_limits<double>::quiet_NaN();
  Clock::time_point still_wall{};
  StopProgress progress(rules_.stop_progress_kmh, stop_progress_window());
  st.after_batch = [&] {
    const std::string why = progress.judge(Clock::now());
    return why.empty() ? Result::success() : Result::fail(why, kNotSlowing);
  };
  Result r = collect(st, [&](const Sample& s) {
    progress.observe(s.speed_kmh, s.mode, standstill(s.speed_kmh), Clock::now());
    if (!at_rest(s.speed_kmh, s.mode)) {
      still_since = std::numeric_limits<double>::quiet_NaN();
      return false;
    }
    if (std::isnan(still_since)) {
      still_since = s.time_s;
      still_wall = Clock::now();
    }
    const double wall_s = seconds(Clock::now() - still_wall);
    return (s.time_s - still_since >= rules_.standstill_hold_s &&
            (!c_.limits().clock_wall_related ||
             wall_s * c_.time_scale() >= 0.5 * rules_.standstill_hold_s)) ||
           wall_s >= rules_.standstill_hold_s;
  });
  stopped = r.ok();
  return r;
}

Result Motion::settle_by_status(double budget_s, controller::StatusReport& st, bool* read) {
  if (read) *read = false;
  const DrainAtEnd drain{*this};
  const Stopping stopping(c_);
  const auto began = Clock::now();
  const auto wall_end = began + wall_budget(budget_s);
  double t_first = -1.0;
  StopProgress progress(rules_.stop_progress_kmh, stop_progress_window());
  for (;;) {
    drain_warnings_if_due();
    if (Result r = c_.status(st); !r.ok()) {
      if (read) *read = false;  // st may hold a part of the refused reply
      return r;
    }
    if (read) *read = true;
    if (t_first < 0.0) t_first = st.time_s;
    if (at_rest(st.speed_kmh, st.mode)) return Result::success();
    progress.observe(st.speed_kmh, st.mode, standstill(st.speed_kmh), Clock::now());
    if (std::string why = progress.judge(Clock::now()); !why.empty())
      return Result::fail(why + " (by status)", kNotSlowing);
    // Not at rest and not stopping: commanded to stop, whatever the mode says (idle at speed is a free coast
    // nobody brakes: docs/safety.md).
    if (st.mode != Mode::controlled_stop)
      if (Result r = c_.controlled_stop(); !r.ok()) return r;
    if (st.time_s - t_first > budget_s)
      return Result::fail("the rollers did not stop within " + num(budget_s) +
                              " s of controller time (status: " + num(st.speed_kmh, 1) + " km/h, " +
                              controller::to_string(st.mode) + ")",
                          kTooSlow);
    if (Clock::now() >= wall_end)
      return Result::fail("the rollers did not stop within " + num(seconds(wall_end - began), 1) +
                              " s of wall time (status: " + num(st.speed_kmh, 1) + " km/h, " +
                              controller::to_string(st.mode) + ")",
                          kWallDeadline);
    if (Result r = c_.heartbeat_if_due(); !r.ok()) return r;
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
}

Result Motion::wait_at_rest(const std::function<bool()>& resume, std::chrono::steady_clock::duration max_wall,
                            const std::string& what, std::chrono::milliseconds poll) {
  const DrainAtEnd drain{*this};
  const auto began = Clock::now();
  for (;;) {
    drain_warnings_if_due();
    controller::StatusReport st;
    if (Result r = c_.status(st); !r.ok()) {
      r.message += " (during " + what + ")";
      return r;
    }
    if (!at_rest(st.speed_kmh, st.mode) || !st.fault.empty())
      return Result::fail("the rollers are not at rest during " + what + " (status: " + num(st.speed_kmh, 1) +
                          " km/h, " + controller::to_string(st.mode) +
                          (st.fault.empty() ? std::string() : ", fault " + st.fault) + ")");
    if (stop_requested()) return Result::fail("interrupted by the operator during " + what, kInterrupted);
    if (resume()) return Result::success();
    if (Clock::now() - began >= max_wall)
      return Result::fail(what + " lasted longer than " + num(seconds(max_wall), 0) + " s", kWallDeadline);
    if (Result r = c_.heartbeat_if_due(); !r.ok()) return r;
    std::this_thread::sleep_for(poll);
  }
}

}  // namespace loadtrim::motion
