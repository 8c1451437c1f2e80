#include "session/session.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <future>
#include <memory>
#include <thread>

#include "core/combination.hpp"
#include "core/predict.hpp"
#include "core/problem.hpp"
#include "core/run_up.hpp"
#include "core/setting.hpp"

namespace loadtrim::session {

using controller::Mode;
using controller::Result;
using core::num;

namespace {

// What check_identity found, one clause per key, as the records and messages give it.
std::string mismatch_text(const core::Problems& mismatch) {
  std::string msg;
  for (const auto& q : mismatch) msg += (msg.empty() ? "" : "; ") + q.key + ": " + q.message;
  return msg;
}
constexpr int kInterruptedCode = motion::kInterrupted;
constexpr int kTooSlowCode = motion::kTooSlow;
// The progress line's estimate only (it moves nothing): a coast-down whose time cannot be predicted counts as
// 5 min, each run adds a minute of run-up, and before the inertia is known a mid-size car's 1500 kg stands in
// (common practice, no source).
constexpr double kUnpredictedCoastS = 300.0;
constexpr double kRunUpEstimateS = 60.0;
constexpr double kEstimateMassKg = 1500.0;
// A coast-down with no predicted time gets this much controller time at least, and never less than three
// times the predicted time (common practice, no source): longer means too little retarding force.
constexpr double kMinCoastBudgetS = 300.0;

// The samples' times and speeds as the two columns the trace analysis reads.
void split_trace(const std::vector<controller::Sample>& trace, std::vector<double>& ts,
                 std::vector<double>& vs) {
  ts.clear();
  vs.clear();
  ts.reserve(trace.size());
  vs.reserve(trace.size());
  for (const auto& s : trace) {
    ts.push_back(s.time_s);
    vs.push_back(s.speed_kmh);
  }
}
}  // namespace

Session::Session(Inputs inputs, Options options, controller::Controller& controller,
                 std::vector<Observer*> observers, const std::atomic<bool>* stop_flag)
    : in_(std::move(inputs)),
      opt_(std::move(options)),
      c_(controller),
      motion_(controller, motion::Rules{}, stop_flag),
      observers_(std::move(observers)),
      stop_flag_(stop_flag) {
  motion::Rules rules;
  rules.standstill_kmh = in_.cell.standstill_kmh;
  motion_.set_rules(rules);
  if (opt_.pause) motion_.set_pause_flag(&opt_.pause->flag());
  motion_.on_sample = [this](const controller::Sample& s) { on_sample(s); };
  // The controller's warnings (undefined status bits, retried exceptions, late replies, ...) into the log, as
  // motion hands them on during and at the end of every step.
  motion_.on_warning = [this](const controller::Warning& w) {
    emit(ev::ControllerWarning{w.code, w.text, w.count});
  };
}

Inputs plan_inputs(controller::CellConfig cell, const core::Profile& profile, core::VehicleTarget vehicle) {
  const core::ReferenceSpeedPlan plan =
      core::plan_reference_speeds(profile, vehicle.max_speed_kmh, vehicle.cycle_max_speed_kmh);
  Inputs in{std::move(cell), core::with_reference_speeds(profile, plan), std::move(vehicle), plan.dropped};
  return in;
}

bool Session::emit(Payload event, const std::vector<controller::Sample>* trace) {
  // The stamp is the session's, taken as the event leaves: its state and clocks at that moment.
  Stamp stamp{state_, std::nullopt, std::nullopt};
  if (t_start_ >= 0.0) {
    stamp.t_s = t_now_;
    stamp.cell_time_s = cell_time_before_ + (t_now_ - t_start_);
  }
  const Event e{std::move(event), stamp, trace};
  const Observers::Delivery d = observers_.deliver(e, [this](bool critical) {
    c_.lease(critical ? opt_.record_budget : in_.cell.timeouts.progress_grace);
  });
  c_.lease(in_.cell.timeouts.progress_grace);
  if (d.critical_failed && !record_failed_) {
    record_failed_ = true;
    record_error_ = d.critical_error;
  }
  for (const auto& why : d.dropped) {
    dropped_observers_.push_back(why);
    std::fprintf(stderr, "loadtrim: %s\n", why.c_str());
    emit(ev::ObserverDropped{why});
  }
  return !record_failed_;
}

void Session::on_sample(const controller::Sample& s) {
  t_now_ = std::max(t_now_, s.time_s);
  // The motoring period starts with the first sample read after the command that started the rollers.
  if (motoring_epoch_ && s.epoch > *motoring_epoch_) {
    t_motoring_from_ = s.time_s;
    motoring_epoch_.reset();
  }
  if (t_start_ < 0.0) t_start_ = s.time_s;
  if (s.time_s - last_progress_s_ < 0.5) return;
  last_progress_s_ = s.time_s;
  double band = 0.0;
  if (state_ == State::coast_down)
    for (double v : in_.profile.reference_speeds_kmh)
      if (std::abs(s.speed_kmh - v) <= in_.profile.band_half_width_kmh) band = v;
  progress(s.speed_kmh, band);
}

motion::Step Session::step(const std::string& what, double budget_s,
                           std::vector<controller::Mode> modes) const {
  motion::Step st;
  st.what = what;
  st.budget_s = budget_s;
  st.modes = std::move(modes);
  st.since_epoch = c_.epoch();
  return st;
}

void Session::progress(double speed_kmh, double band_kmh) {
  Progress p;
  p.state = state_;
  p.coastdown = run_ > 0 ? run_ : coastdowns_ + 1;  // the run's number as the record and the table give it
  p.speed_kmh = speed_kmh;
  p.band_kmh = band_kmh;
  p.cell_time_s = t_start_ >= 0.0 ? cell_time_before_ + t_now_ - t_start_ : 0.0;
  // Remaining: the runs the method still needs at least, each a run-up plus the predicted coast-down.
  const auto& pr = in_.profile;
  int runs_left = pr.method == core::SettingMethod::iterative
                      ? std::max(1, pr.consecutive_passes - (method_ ? method_->consecutive_passes() : 0))
                      : std::max(1, pr.fixed_runs + pr.fixed_run_verification_runs - coastdowns_);
  const auto coast =
      core::coastdown_time_s(in_.vehicle.target, force_mass_kg_ > 0 ? force_mass_kg_ : kEstimateMassKg,
                             pr.start_speed_kmh(), std::max(1.0, pr.end_speed_kmh()));
  const double per_run = coast.value_or(kUnpredictedCoastS) + kRunUpEstimateS;
  p.remaining_estimate_s = runs_left * per_run;
  // The warm-up still to come counts from the start (so the estimate does not leap when it begins), and
  // counts down while it is held; a run in progress counts down too (so the estimate does not freeze, then
  // drop).
  const bool before_warm_up =
      state_ == State::connect || state_ == State::check_limits || state_ == State::set_inertia;
  if (before_warm_up && t_warm_end_ < 0.0)
    p.remaining_estimate_s += warm_asked_s_ >= 0.0 ? warm_asked_s_ : pr.warm_up.duration_s;
  if (state_ == State::warm_up) {
    const double asked = warm_asked_s_ >= 0.0 ? warm_asked_s_ : pr.warm_up.duration_s;
    p.remaining_estimate_s += std::max(0.0, asked - (warm_from_s_ >= 0.0 ? t_now_ - warm_from_s_ : 0.0));
  }
  const bool in_run = state_ == State::write_set || state_ == State::run_up || state_ == State::coast_down ||
                      state_ == State::analyse;
  if (in_run && run_from_s_ >= 0.0)
    p.remaining_estimate_s -= std::min(per_run, std::max(0.0, t_now_ - run_from_s_));
  observers_.progress(p);
}

void Session::reset_passes(int run, const std::string& why) {
  if (!method_) return;
  if (const int n = method_->reset_passes(); n > 0) emit(ev::PassesReset{run, n, why});
}

void Session::transition(State to, const std::string& why) {
  const State from = state_;
  state_ = to;
  emit(ev::StateChanged{from, to, why});
}

Result Session::hold_and_wait(double speed_kmh, const char* what) {
  motion_commanded_ = true;
  // At the setpoint, then kHoldSettleS more to settle; the default step budget of controller time at most.
  return motion_.hold(speed_kmh, core::kHoldSettleS, what, motion::kDefaultStepBudgetS);
}

std::optional<Session::Stop> Session::fault(const Result& r, const std::string& during) {
  // What the controller warned of before it failed (a call outside any step) is logged before the fault.
  motion_.drain_warnings();
  if (r.code == kInterruptedCode) {
    emit(ev::Interrupted{during});
    return Stop{Outcome::interrupted, "interrupted by the operator during " + during};
  }
  emit(ev::Fault{during, r.message, r.status, r.code});
  return Stop{Outcome::controller_fault, r.message};
}

bool Session::settle_and_clear(const std::string& when) {
  // Wait for the rollers to stand still (a watchdog's controlled stop, or ours), then clear a latched fault.
  controller::StatusReport st;
  const Result settled = motion_.settle_by_status(opt_.stop_budget_s, st);
  t_now_ = std::max(t_now_, st.time_s);
  if (!settled.ok()) {
    emit(ev::NotSettled{when, settled.message});
    return false;
  }
  if (!st.fault.empty()) {
    if (!controller::tool_may_clear(st)) {
      // Not the watchdog stop the tool's own silence caused: an emergency stop or the controller's own fault
      // is the cell's to clear, by a person who knows why it latched (docs/safety.md).
      char flags[16];
      std::snprintf(flags, sizeof flags, "%02X", static_cast<unsigned>(st.flags));
      held_fault_ =
          "controller fault \"" + st.fault + "\" (flags " + flags + ") latched " + when +
          ": the tool clears only a watchdog stop it caused; an emergency stop or another fault needs "
          "the operator at the cell (find its cause, clear it at the controller, then run or resume)";
      emit(ev::FaultCleared{st.fault, when, false, "not cleared: " + held_fault_});
      return false;
    }
    const Result cr = c_.clear_fault();
    emit(ev::FaultCleared{st.fault, when, cr.ok(), cr.message});
    if (!cr.ok()) return false;
  }
  return true;
}

bool Session::recover_link(const std::string& why) {
  ++link_losses_;
  link_up_ = false;
  emit(ev::LinkLost{why, link_losses_});
  const auto& policy = in_.cell.reconnect;
  for (int attempt = 1; attempt <= policy.attempts; ++attempt) {
    if (stop_requested()) return false;
    std::this_thread::sleep_for(policy.delay);
    c_.disconnect();
    Result r = c_.connect();
    if (r.ok()) r = c_.identify(info_);
    emit(ev::Reconnect{attempt, policy.attempts, r.ok(), r.message});
    if (!r.ok()) continue;
    // The controller that answers may not be the one the session began with: checked as on connect, and the
    // session's speed limit taken again from what it states now (the lower, never the higher).
    emit(ev::ControllerIdentified{info_});
    if (const core::Problems mismatch = controller::check_identity(in_.cell, info_); !mismatch.empty()) {
      held_fault_ =
          "after the lost link the controller does not match the cell file: " + mismatch_text(mismatch);
      // Not the cell's controller: never commanded, not even the stop (docs/safety.md).
      controller_reached_ = false;
      c_.disconnect();
      return false;
    }
    const auto& p = in_.profile;
    if (const auto why = core::limits_refusal(p, in_.cell.max_speed_kmh, in_.vehicle.max_speed_kmh,
                                              info_.max_speed_kmh, in_.cell.max_motoring_s)) {
      held_fault_ = "after the lost link: " + *why;
      return false;
    }
    // The identity check above already refuses a controller stating less than the cell's speed limit, so the
    // limit cannot fall here today; were it to (a check relaxed), it is applied where every limit is (the
    // controller layer's refusal of higher speeds, the overspeed check on every sample) and recorded; a
    // higher one is never taken.
    if (const double limit = core::session_speed_limit_kmh(in_.cell.max_speed_kmh, in_.vehicle.max_speed_kmh,
                                                           info_.max_speed_kmh);
        limit < speed_limit_kmh_) {
      speed_limit_kmh_ = limit;
      apply_speed_limit();
    }
    // Settle first, stream after: no stale samples from the stopping rollers reach the next wait. A fault the
    // tool may not clear ends the attempts: reconnecting again would not clear it either.
    if (!settle_and_clear("after the lost link")) {
      if (!held_fault_.empty()) return false;
      continue;
    }
    if (!c_.start_stream(opt_.sample_rate_hz).ok()) continue;
    link_up_ = true;
    emit(ev::LinkRestored{attempt});
    return true;
  }
  return false;
}

std::optional<Session::Stop> Session::do_connect() {
  transition(State::connect);
  // A cell whose vehicle accelerates itself needs a driver display; an adapter whose configuration alone
  // rules one out is refused before anything connects.
  if (in_.cell.run_up == core::RunUp::vehicle) {
    if (const std::string why = c_.driver_unavailable(); !why.empty()) {
      const std::string msg =
          "the cell's dyno.run_up is \"vehicle\" (the driver accelerates the vehicle), but " + why +
          ": no driver can be prompted through this controller";
      emit(ev::Refused{msg});
      return Stop{Outcome::refused, msg};
    }
  }
  Result r = c_.connect();
  // The operator's stop is honoured between connect attempts (nothing moves yet: an interruption, exit 4).
  for (int attempt = 1; !r.ok() && r.status == Result::Status::retryable &&
                        attempt <= in_.cell.reconnect.attempts && !stop_requested();
       ++attempt) {
    emit(ev::Reconnect{attempt, in_.cell.reconnect.attempts, std::nullopt, r.message});
    std::this_thread::sleep_for(in_.cell.reconnect.delay);
    if (!stop_requested()) r = c_.connect();
  }
  if (!r.ok() && stop_requested()) {
    emit(ev::Interrupted{"connect"});
    return Stop{Outcome::interrupted, "interrupted by the operator during connect (" + r.message + ")"};
  }
  if (!r.ok()) return fault(r, "connect");
  if (r = c_.identify(info_); !r.ok()) return fault(r, "identify");
  identified_ = true;
  emit(ev::ControllerIdentified{info_});
  const core::Problems mismatch = controller::check_identity(in_.cell, info_);
  if (!mismatch.empty()) {
    const std::string msg = mismatch_text(mismatch);
    emit(ev::Refused{msg});
    return Stop{Outcome::refused, "controller does not match the cell file: " + msg};
  }
  // The cell's own controller: from here on the safe stop commands a stop and confirms it by the controller,
  // never assumes it (another cell's controller, refused above, is never commanded).
  controller_reached_ = true;
  // A fault latched before we came (a watchdog stop after a lost tool): only with the rollers stopped is it
  // cleared.
  controller::StatusReport st;
  if (r = c_.status(st); !r.ok()) return fault(r, "status");
  // Ready means stopped in a mode that holds nothing (docs/safety.md: idle or controlled stop), not merely
  // slow.
  if (!st.fault.empty() || !motion_.at_rest(st.speed_kmh, st.mode)) {
    emit(ev::ControllerStateOnConnect{st.fault, st.speed_kmh, st.mode});
    if (!settle_and_clear("on connect"))
      return fault(
          Result::fail(held_fault_.empty() ? "the controller did not reach a stopped, fault-free state"
                                           : held_fault_),
          "connect");
  }
  if (r = c_.start_stream(opt_.sample_rate_hz); !r.ok()) return fault(r, "start stream");
  link_up_ = true;
  // The first samples give the controller's clock.
  // (A pause asked now is taken at the warm-up's first step: nothing moves before it.)
  motion::Step first = step("the first sample", 10.0);
  first.pausable = false;
  if (r = motion_.collect(first, [](const controller::Sample&) { return true; }); !r.ok())
    return fault(r, "first sample");
  return std::nullopt;
}

std::optional<Session::Stop> Session::do_check_limits() {
  transition(State::check_limits);
  const auto& p = in_.profile;
  speed_limit_kmh_ =
      core::session_speed_limit_kmh(in_.cell.max_speed_kmh, in_.vehicle.max_speed_kmh, info_.max_speed_kmh);
  // The rules are the core's (core/combination.hpp), the same ones check_combination applied before
  // connecting; here the controller's own limit joins them.
  const std::string why = core::limits_refusal(p, in_.cell.max_speed_kmh, in_.vehicle.max_speed_kmh,
                                               info_.max_speed_kmh, in_.cell.max_motoring_s)
                              .value_or("");
  if (!why.empty()) {
    emit(ev::Refused{why});
    return Stop{Outcome::refused, why};
  }
  if (in_.cell.run_up == core::RunUp::vehicle && !info_.has("driver")) {
    const std::string msg =
        "the cell's dyno.run_up is \"vehicle\" (the driver accelerates the vehicle), but the controller does "
        "not state the capability \"driver\": it has no driver display to prompt the driver on";
    emit(ev::Refused{msg});
    return Stop{Outcome::refused, msg};
  }
  neutral_signal_ = in_.cell.run_up == core::RunUp::vehicle && info_.has("neutral");
  emit(ev::RunUpPlan{
      in_.cell.run_up,
      in_.cell.run_up == core::RunUp::vehicle ? (neutral_signal_ ? "neutral signal" : "speed trace") : "",
      in_.cell.run_up == core::RunUp::vehicle
          ? "the vehicle accelerates itself: either method may be used (GTR 15 Annex 4 §8.1.3.4)"
          : "the dyno accelerates the vehicle: the fixed-run method only (GTR 15 Annex 4 "
            "§8.1.3.4)"});
  apply_speed_limit();
  return std::nullopt;
}

void Session::apply_speed_limit() {
  const auto& p = in_.profile;
  c_.set_speed_limit(speed_limit_kmh_);
  motion::Rules rules = motion_.rules();
  rules.speed_limit_kmh = speed_limit_kmh_;
  motion_.set_rules(rules);
  emit(ev::Limits{speed_limit_kmh_, p.start_speed_kmh(), p.end_speed_kmh(), in_.cell.max_speed_kmh,
                  in_.vehicle.max_speed_kmh, info_.max_speed_kmh, in_.cell.max_motoring_s});
}

std::optional<Session::Stop> Session::do_set_inertia() {
  transition(State::set_inertia);
  const auto& p = in_.profile;
  m_r_kg_ = core::resolved_rotating_mass_kg(in_.vehicle, p.mass);
  force_mass_kg_ = core::force_mass_kg(in_.vehicle.test_mass_kg, m_r_kg_);
  inertia_kg_ = core::dyno_inertia_kg(in_.vehicle.test_mass_kg, m_r_kg_, in_.cell.axles, p.mass);
  if (Result r = c_.set_inertia(inertia_kg_); !r.ok()) return fault(r, "set inertia");
  emit(ev::InertiaSet{in_.vehicle.test_mass_kg, m_r_kg_, force_mass_kg_, inertia_kg_, in_.cell.axles});
  return std::nullopt;
}

std::optional<Session::Stop> Session::do_warm_up(double duration_s, bool measure_loss_map) {
  transition(State::warm_up, measure_loss_map ? "warm-up, then the loss map" : "warm-up");
  const auto& w = in_.profile.warm_up;
  // A pause in the warm-up or the loss map: after the continue, the whole warm-up (and map) again.
  const double asked_s = duration_s;
  warm_asked_s_ = duration_s;
  warm_from_s_ = -1.0;
  auto fault = [&](const Result& r, const std::string& during) -> std::optional<Stop> {
    if (r.code == motion::kPaused) {
      const double again_s =
          std::max(asked_s, rewarm_s());  // a short re-warm after a long stand is not enough
      if (auto s = do_pause(during, false, again_s)) return s;
      return do_warm_up(again_s, measure_loss_map);
    }
    return Session::fault(r, during);
  };
  // One continuous motoring period (the cell's limits.max_motoring_s): it starts when the rollers start from
  // standstill, with the run-up to the warm-up speed (on_sample takes its first sample's time), not again at
  // a re-warm they never stopped for (a late first coast-down's).
  const bool new_period = t_motoring_from_ < 0.0;
  // A re-warm within the period (the late first coast-down's) that the limit would cut short: not begun,
  // judged before its run-up back to the speed and again once there (the run-up's time counts too).
  auto rewarm_cut_short = [&]() -> std::optional<Stop> {
    if (new_period || !(motoring_used_s() + duration_s > in_.cell.max_motoring_s)) return std::nullopt;
    const std::string used = num(motoring_used_s(), 0) + " s of the period used";
    if (!(motoring_used_s() < in_.cell.max_motoring_s))
      return Stop{Outcome::not_accepted, "the cell's motoring-time limit of " + num(in_.cell.max_motoring_s) +
                                             " s was reached before the re-warm (" + used + ")"};
    return Stop{Outcome::not_accepted, "the cell's motoring-time limit of " + num(in_.cell.max_motoring_s) +
                                           " s would be reached in the re-warm (" + used + ", " +
                                           num(duration_s, 0) + " s of re-warm asked)"};
  };
  if (auto s = rewarm_cut_short()) return s;
  const double t_before_s = t_now_;  // the latest time read before the command: an over-count, never under
  if (new_period) motoring_epoch_ = c_.epoch();
  if (Result r = hold_and_wait(w.speed_kmh, "warm-up run-up"); !r.ok()) return fault(r, "warm-up");
  if (new_period) {
    if (motoring_epoch_) t_motoring_from_ = t_before_s;  // no sample after the command (not expected)
    motoring_epoch_.reset();
  }
  if (auto s = rewarm_cut_short()) return s;
  warm_from_s_ = t_now_;
  if (drift_t0_ < 0.0) drift_t0_ = t_now_;
  // The loss map is part of the warm-up, not added to it: the plain hold is shortened by the map's planned
  // time (ramps at the motoring rate, settle and average at each speed).
  const core::HoldPlan plan = core::plan_hold_points(in_.profile.loss_map, w.speed_kmh, speed_limit_kmh_);
  double map_s = measure_loss_map && info_.has("hold-force") ? plan.planned_s : 0.0;
  const bool coast_between = map_s > 0.0 && in_.profile.loss_map.coast_between_holds;
  if (coast_between)
    // A coast replaces the ramp between two holds: its time as a coast-down of the target itself (the
    // standard's default setting plus the vehicle's loss is about the target; an estimate, no source).
    for (std::size_t i = 0; i + 1 < plan.speeds_kmh.size(); ++i) {
      const double a = plan.speeds_kmh[i], b = plan.speeds_kmh[i + 1];
      if (!(b < a)) continue;
      map_s += core::coastdown_time_s(in_.vehicle.target, force_mass_kg_, a, b).value_or(0.0) -
               (a - b) / 3.6 / core::kHoldRampMps2;
    }
  duration_s = std::max(0.0, duration_s - map_s);
  emit(ev::WarmUpStarted{w.speed_kmh, duration_s, map_s, t_motoring_from_});
  const double t0 = t_now_;
  // Hold for the time, keeping the load-cell force of the last stability window.
  std::vector<double> window_means;
  std::vector<core::DriftPoint> windows;  // this hold's, for its record
  double sum = 0.0;
  int n = 0;
  double window_start = t0;
  bool stable = w.stable_within_n <= 0.0;
  Result r = motion_.collect(
      step("warm-up", duration_s + w.max_extra_s + 60.0, {Mode::speed_hold}),
      [&](const controller::Sample& s) {
        sum += s.force_n;
        ++n;
        if (s.time_s - window_start >= w.stable_window_s) {
          window_means.push_back(sum / std::max(1, n));
          drift_points_.push_back({0.5 * (window_start + s.time_s) - drift_t0_, window_means.back()});
          // Recorded only from a controller that reports force in speed hold (as the loss map requires).
          if (info_.has("hold-force")) windows.push_back(drift_points_.back());
          sum = 0.0;
          n = 0;
          window_start = s.time_s;
          // The latest window's verdict (not latched: an early window that looked stable does not end a
          // warm-up that has since moved).
          if (w.stable_within_n > 0.0) {
            if (w.stable_by == core::WarmUp::StableBy::trend) {
              // The warming curve across every hold window since the warm-up hold began, and the recent slope
              // carried over at least kTrendHorizonS (docs/standards.md §3.12).
              const auto left =
                  core::remaining_drift_for_end_n(drift_points_, s.time_s - drift_t0_, core::kTrendHorizonS);
              stable = left && *left < w.stable_within_n;
            } else {
              stable =
                  window_means.size() >= 2 &&
                  std::abs(window_means.back() - window_means[window_means.size() - 2]) < w.stable_within_n;
            }
          }
        }
        const double held = s.time_s - t0;
        return held >= duration_s && (stable || held >= duration_s + w.max_extra_s);
      });
  if (!r.ok()) return fault(r, "warm-up");
  // The session's initial hold (not a re-warm, not after a pause or a resume): the one the history's
  // day-to-day correction compares (docs/store.md, "The history first setting").
  const bool initial = initial_hold_;
  initial_hold_ = false;
  if (initial && windows.size() >= 2) initial_warm_up_ = core::WarmUpRecord{w.speed_kmh, windows};
  emit(ev::WarmUpHeld{w.speed_kmh, t_now_ - t0,
                      w.stable_within_n <= 0.0 ? "not checked"
                      : stable                 ? "stable"
                                               : "not stable within the extra time",
                      w.stable_within_n,
                      window_means.empty() ? std::nullopt : std::optional<double>(window_means.back()),
                      std::move(windows), initial});
  if (measure_loss_map) {
    loss_map_.clear();
    coast_points_.clear();
    map_from_s_ = t_now_;
    if (!info_.has("hold-force")) {
      emit(ev::LossMapSkipped{"the controller does not report force in speed hold"});
    } else {
      for (double v : plan.skipped_kmh) emit(ev::LossMapPointSkipped{v, "above the speed limit"});
      for (std::size_t i = 0; i < plan.speeds_kmh.size(); ++i) {
        const double v = plan.speeds_kmh[i];
        if (Result rr = hold_and_wait(v, "loss-map hold"); !rr.ok()) return fault(rr, "loss map");
        const double ts = t_now_;
        if (Result rr = motion_.collect(
                step("loss-map settle", in_.profile.loss_map.settle_s + 30.0, {Mode::speed_hold}),
                [&](const controller::Sample& s) { return s.time_s - ts >= in_.profile.loss_map.settle_s; });
            !rr.ok())
          return fault(rr, "loss map");
        std::vector<controller::Sample> avg;
        const double ta = t_now_;
        if (Result rr = motion_.collect(
                step("loss-map average", in_.profile.loss_map.average_s + 30.0, {Mode::speed_hold}),
                [&](const controller::Sample& s) { return s.time_s - ta >= in_.profile.loss_map.average_s; },
                &avg);
            !rr.ok())
          return fault(rr, "loss map");
        std::vector<double> forces;
        forces.reserve(avg.size());
        for (const auto& sm : avg) forces.push_back(sm.force_n);
        const core::HoldPoint hp = core::hold_point(v, forces);
        loss_map_.push_back(hp);
        emit(ev::LossMapPoint{hp});
        if (coast_between && i + 1 < plan.speeds_kmh.size()) {
          if (plan.speeds_kmh[i + 1] < v) {
            if (Result rr = coast_to_next_hold(v, plan.speeds_kmh[i + 1]); !rr.ok())
              return fault(rr, "loss map");
          } else {
            emit(ev::LossMapCoast{
                v, plan.speeds_kmh[i + 1], {}, {}, "not coasted: the next hold is not lower"});
          }
        }
      }
    }
  }
  if (measure_loss_map) map_to_s_ = t_now_;
  t_warm_end_ = t_now_;
  first_after_warm_up_ = true;
  emit(ev::WarmUpEnded{});  // its stamp's t_s is t_warm_end_
  return std::nullopt;
}

void Session::judge_warm_acceptance(int run, CoastdownRecord& rec) {
  const auto& p = in_.profile;
  const auto& w = p.warm_up;
  const bool require = w.drift_rule == core::WarmUp::DriftRule::require;
  ev::WarmUpDrift d{run,
                    t_now_ - drift_t0_,
                    core::fit_warm_up_curve(drift_points_),
                    require ? "require" : "warn",
                    w.drift_threshold_n,
                    "",
                    std::nullopt};
  const bool warming = d.curve.ok && !(d.curve.remaining_drift_n(d.t_s) <= w.drift_threshold_n);
  // The lab asked for a vehicle warm at acceptance and the warming could not be judged (too few windows since
  // the last stand, a poor fit): accepted as the standard accepts, and said once (docs/standards.md §3.12).
  const std::string not_applied =
      require && !d.curve.ok
          ? "the drift rule \"require\" could not be applied at acceptance: the warming was not estimated (" +
                d.curve.why + ")"
          : std::string();
  // Settled: is the setting still within tolerance once the vehicle is fully warm (docs/standards.md
  // §3.18)? The deviations are the acceptance's, the loss the adjustment's (§3.17), both of this
  // coast-down, so the change still to come is taken from its middle.
  enum class WarmAction { none, adjust, hold, reject, finding };
  WarmAction warm_action = WarmAction::none;
  std::string warm_why;  // the finding (finding), or why it is not adjusted (hold, reject)
  if (require && w.check_fully_warm && !warming) {
    if (rec.decision.next_set == set_) {
      d.fully_warm = core::fully_warm_outlook(
          rec.evaluation.check, in_.vehicle.target, rec.evaluation.adjust_basis - set_, d.curve,
          rec.release_time_s + 0.5 * rec.duration_s - drift_t0_, w.speed_kmh);
    } else {
      // A fixed-run final setting accepted without verification runs was never coasted: nothing of it
      // was measured to judge.
      d.fully_warm = core::FullyWarmOutlook{};
      d.fully_warm->why = "not predicted: the final setting was never coasted (no verification run)";
    }
    const auto& o = *d.fully_warm;
    if (!o.predicted) {
      warm_action = WarmAction::finding;
      warm_why = "the fully-warm check was not made (" + o.why + ")";
    } else if (!o.within && p.method != core::SettingMethod::iterative) {
      warm_action = WarmAction::finding;
      warm_why = "the setting is " + o.why + "; the fixed-run method keeps its final setting";
    } else if (!o.within) {
      // The iterative method: adjusted for the warm vehicle when that setting can pass (aimable, two
      // passes' room, inside the envelope); else coasting on at the accepted setting while the vehicle
      // settles further, and not accepted when no coast-down is left (the drift rule "require").
      if (!o.aimable)
        warm_why = o.not_aimable_why;
      else if (std::string room = room_for_passes("a setting aimed at the warm vehicle"); !room.empty())
        warm_why = std::move(room);
      else if (const core::SetCheck chk =
                   core::check_set(o.warm_setting, in_.vehicle.target, last_written_, opt_.envelope);
               !chk.ok)
        warm_why = "the setting aimed at the warm vehicle leaves the safe envelope (" + chk.why + ")";
      d.fully_warm->not_adjusted_why = warm_why;
      warm_action = warm_why.empty()                 ? WarmAction::adjust
                    : coastdowns_ < p.max_coastdowns ? WarmAction::hold
                                                     : WarmAction::reject;
    }
  }
  if (!d.curve.ok)
    d.verdict = "not estimated: " + d.curve.why;
  else if (warm_action == WarmAction::adjust)
    d.verdict = "settled, but outside tolerance once fully warm: adjusted for the warm vehicle";
  else if (warm_action == WarmAction::hold)
    d.verdict = "settled, but outside tolerance once fully warm: coasting again at the accepted setting";
  else if (warm_action == WarmAction::reject)
    d.verdict = "settled, but outside tolerance once fully warm: not accepted";
  else if (warm_action == WarmAction::finding && d.fully_warm->predicted)
    d.verdict = "settled, but outside tolerance once fully warm: accepted with a finding";
  else if (!warming)
    d.verdict = "settled";
  else if (require)
    d.verdict = "still warming: coasting again at the accepted setting";
  else
    d.verdict = "still warming: accepted with a finding";
  emit(d);
  if (warm_action == WarmAction::adjust) {
    rec.decision.kind = core::Decision::Kind::run_again;
    rec.decision.next_set = d.fully_warm->warm_setting;
    rec.decision.reason += "; but " + d.fully_warm->why + ": adjusted for the warm vehicle";
    reset_passes(run, "the setting is adjusted for the vehicle fully warm (" + d.fully_warm->why + ")");
  } else if (warm_action == WarmAction::hold) {
    rec.decision.kind = core::Decision::Kind::run_again;
    rec.decision.reason += "; but " + d.fully_warm->why + " and " + warm_why +
                           ": coasting the accepted setting while the vehicle settles further";
  } else if (warm_action == WarmAction::reject) {
    rec.decision.kind = core::Decision::Kind::rejected;
    rec.decision.reason += "; but " + d.fully_warm->why + ", " + warm_why +
                           " and no coast-down is left (the drift rule \"require\"): not accepted";
  } else if (warm_action == WarmAction::finding) {
    findings_.push_back(not_applied.empty() ? warm_why : warm_why + "; " + not_applied);
  } else if (warming && require) {
    rec.decision.kind = core::Decision::Kind::run_again;
    rec.decision.reason += "; but the vehicle is still warming (estimated remaining drift " +
                           num(d.curve.remaining_drift_n(d.t_s), 1) + " N above " +
                           num(w.drift_threshold_n, 1) +
                           " N): coasting the accepted setting until the vehicle settles";
  } else if (warming) {
    findings_.push_back("the vehicle was still warming at acceptance: estimated remaining drift " +
                        num(d.curve.remaining_drift_n(d.t_s), 1) + " N at the warm-up speed (threshold " +
                        num(w.drift_threshold_n, 1) + " N; warm-up curve time constant " +
                        num(d.curve.tau_s, 0) + " s); the profile's warm_up.drift_rule is \"warn\"");
  }
  // The fully-warm check's finding above carries it when that was not made either.
  if (!not_applied.empty() && warm_action != WarmAction::finding) findings_.push_back(not_applied);
}

void Session::judge_next_pass(int run, CoastdownRecord& rec, const core::WarmingOutlook& outlook) {
  const auto& p = in_.profile;
  core::NextPassOutlook np =
      core::next_pass_outlook(rec.evaluation.check, in_.vehicle.target, set_, rec.evaluation.adjust_basis,
                              outlook, p.warm_up.next_pass_risk);
  if (np.likely_to_fail) {
    core::Decision adj = method_->adjusted(set_, rec.evaluation.adjust_basis, &outlook);
    core::judge_adjusted(np, rec.evaluation.check, in_.vehicle.target, set_, rec.evaluation.adjust_basis,
                         adj.next_set, outlook);
    if (!np.adjusting_helps)
      np.not_adjusted_why =
          "the adjusted setting is not predicted likelier to pass" +
          (np.adjusted_fail_probability ? " (" + num(*np.adjusted_fail_probability * 100.0, 0) + " % to fail)"
                                        : std::string(" (not predicted)"));
    else if (std::string room = room_for_passes("an adjusted setting"); !room.empty())
      np.not_adjusted_why = std::move(room);
    else if (const core::SetCheck chk =
                 core::check_set(adj.next_set, in_.vehicle.target, last_written_, opt_.envelope);
             !chk.ok)
      np.not_adjusted_why = "the adjusted setting leaves the safe envelope (" + chk.why + ")";
    if (np.not_adjusted_why.empty()) {
      np.adjusted = true;
      reset_passes(run, "within tolerance, but " + np.why + ": adjusted now");
      adj.reason = "within tolerance, but " + np.why + ": " + adj.reason;
      rec.decision = std::move(adj);
    } else {
      rec.decision.reason += "; " + np.why + ", coasting on: " + np.not_adjusted_why;
    }
  }
  rec.decision.next_pass = std::move(np);
}

Result Session::coast_to_next_hold(double from_kmh, double to_kmh) {
  // docs/standards.md §3.15 (lab policy): from the hold at from_kmh, coast with the standard's default
  // setting to to_kmh and measure the vehicle's loss as a coast-down sees it at the reference speeds the
  // coast spans whole (2 km/h below the release for the release to settle; common practice, no source).
  const auto& p = in_.profile;
  ev::LossMapCoast rec{from_kmh,
                       to_kmh,
                       core::standard_initial_setting(in_.vehicle.target, in_.cell.axles, p.initial),
                       {},
                       ""};
  // The envelope before anything is written (the step rule is the iterations' and has no previous here).
  if (const core::SetCheck chk = core::check_set(rec.set, in_.vehicle.target, std::nullopt, opt_.envelope);
      !chk.ok) {
    rec.note = "not coasted: the standard's default setting leaves the safe envelope (" + chk.why + ")";
    emit(rec);
    return Result::success();  // the next hold ramps there as without coasts
  }
  // Recorded before anything moves: a fault, a pause or a kill from here on leaves a record of what was
  // written and released.
  emit(ev::LossMapCoastStarted{from_kmh, to_kmh, rec.set});
  if (Result r = c_.set_coefficients(rec.set); !r.ok()) return r;
  motion_commanded_ = true;
  if (Result r = c_.release_road_load(); !r.ok()) return r;
  std::vector<controller::Sample> trace;
  const double predicted =
      core::coastdown_time_s(in_.vehicle.target, force_mass_kg_, from_kmh, to_kmh).value_or(kMinCoastBudgetS);
  Result r = motion_.collect(
      step("loss-map coast", std::max(30.0, 3.0 * predicted), {Mode::road_load}),
      [&](const controller::Sample& s) { return s.speed_kmh < to_kmh; }, &trace);
  if (r.code == kTooSlowCode) {
    // Not below to_kmh within the budget (too little retarding force, a stuck speed reading): leave road-load
    // simulation at once; the hold that follows takes over. A controller that never entered road load ends
    // the step with kWrongMode instead: a controller fault, below (docs/safety.md).
    if (Result h = c_.hold_speed(to_kmh); !h.ok()) return h;
    rec.note = "not used: did not fall below " + num(to_kmh) + " km/h within the budget (" + r.message + ")";
    emit(rec);
    return Result::success();
  }
  if (!r.ok()) return r;
  // Leave road-load simulation at once, before the analysis and the record (as after a coast-down).
  if (Result h = c_.hold_speed(to_kmh); !h.ok()) return h;
  // The crossing fit of these short coasts keeps at most the earlier 2.5 km/h window, and a band is used only
  // when its window's top lies 2 km/h below the release (the release itself is never in a fit).
  core::BandOptions bo;
  bo.fit_half_width_kmh = std::min(p.crossing_fit_half_width_kmh, 2.5);
  std::vector<double> speeds;
  for (double v : p.reference_speeds_kmh)
    if (v + p.band_half_width_kmh + bo.fit_half_width_kmh <= from_kmh - 2.0 &&
        v - p.band_half_width_kmh >= to_kmh)
      speeds.push_back(v);
  std::vector<double> ts, vs;
  split_trace(trace, ts, vs);
  for (const auto& b : core::analyse_bands({ts, vs}, speeds, p.band_half_width_kmh, force_mass_kg_, bo)) {
    if (!b.ok()) {
      rec.note += (rec.note.empty() ? "" : "; ") + num(b.reference_speed_kmh) + " km/h not used: " + b.reason;
      continue;
    }
    const double set_n = rec.set.force_n(b.reference_speed_kmh);
    rec.points.push_back({b.reference_speed_kmh, b.force_n, set_n, b.force_n - set_n});
    coast_points_.push_back({b.reference_speed_kmh, b.force_n - set_n});
  }
  if (speeds.empty()) rec.note = "no reference speed lies wholly within this coast";
  emit(rec);
  return Result::success();
}

double Session::rewarm_s() const {
  return opt_.resume_warm_up_s >= 0.0 ? opt_.resume_warm_up_s : in_.profile.warm_up.duration_s;
}

std::optional<Session::Stop> Session::do_pause(const std::string& during, bool run_in_progress,
                                               double rewarm_s) {
  const PauseRequest asked = (opt_.pause ? opt_.pause->pause_request() : std::nullopt)
                                 .value_or(PauseRequest{"unknown", "", "unknown"});
  transition(State::paused, "asked by " + asked.by + " during " + during);
  pause_held_ = true;
  if (run_in_progress)  // counted neither unusable nor discarded: the operator asked (resume skips it too)
    emit(ev::CoastdownDiscarded{run_, std::string(ev::kPausedDiscardWhy) + during, std::nullopt,
                                "repeated after the pause and a re-warm"});
  reset_passes(run_, "paused by the operator during " + during);
  // The driver display says nothing while the rollers stop (a vehicle run-up may have asked for throttle).
  if (!clear_driver_prompt(run_, "paused"))
    return Stop{Outcome::controller_fault, "the driver display could not be cleared for the pause"};
  bool stopped = false;
  if (Result r = motion_.stop_and_wait(opt_.stop_budget_s, stopped); !r.ok())
    return fault(r, "the pause's stop");
  rollers_stopped_ = stopped;
  // At rest the samples stop; the wait polls the status and keeps the heartbeat.
  if (Result r = c_.stop_stream(); !r.ok()) return fault(r, "the pause");
  if (!emit(ev::Paused{run_, during, asked.by, asked.why, asked.source, stopped, opt_.max_pause_s}))
    return Stop{Outcome::record_failure, record_error_};
  const auto began = std::chrono::steady_clock::now();
  std::optional<PauseRequest> go_on;
  const Result w = motion_.wait_at_rest(
      [&] {
        go_on = opt_.pause ? opt_.pause->take_continue() : std::nullopt;
        return go_on.has_value();
      },
      std::chrono::duration_cast<std::chrono::steady_clock::duration>(
          std::chrono::duration<double>(opt_.max_pause_s)),
      "the pause");
  if (w.code == motion::kWallDeadline) {
    emit(ev::Interrupted{"the pause, which had no continue within " + num(opt_.max_pause_s) + " s"});
    return Stop{Outcome::interrupted,
                "paused longer than " + num(opt_.max_pause_s) +
                    " s without a continue; the folder can be resumed (loadtrim resume)"};
  }
  if (!w.ok()) return fault(w, "the pause");
  const double paused_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - began).count();
  pause_held_ = false;
  if (!emit(ev::Continued{run_, go_on->by, go_on->why, go_on->source, paused_s, rewarm_s}))
    return Stop{Outcome::record_failure, record_error_};
  if (Result r = c_.start_stream(opt_.sample_rate_hz); !r.ok()) return fault(r, "the continue");
  forget_warming();
  return std::nullopt;
}

std::string Session::room_for_passes(const std::string& what) const {
  const auto& p = in_.profile;
  const std::string passes = std::to_string(p.consecutive_passes) + " in a row";
  if (coastdowns_ + p.consecutive_passes > p.max_coastdowns)
    return "too few coast-downs are left for " + what + " to pass " + passes;
  // Each coast-down's setting is written only within the cell's motoring-time limit (do_run): the last of
  // the passes starts about (passes − 1) measured cycles from now.
  if (t_motoring_from_ >= 0.0 && cycle_s_ > 0.0) {
    const double used_s = motoring_used_s();
    // Not measured end to end (the first coast-down after a warm-up, whose run-up started from the warm-up
    // speed, without the analysis and the write): a quarter more (common practice, no source).
    const double cycle_s = cycle_measured_ ? cycle_s_ : 1.25 * cycle_s_;
    const double last_start_s = used_s + (p.consecutive_passes - 1) * cycle_s;
    if (!(last_start_s <= in_.cell.max_motoring_s))
      return "too little of the cell's motoring time is left for " + what + " to pass " + passes + " (" +
             num(used_s, 0) + " s of " + num(in_.cell.max_motoring_s, 0) +
             " s used, a coast-down about every " + num(cycle_s, 0) + " s)";
  }
  return "";
}

void Session::forget_warming() {
  // The rollers stood: the next warm-up starts a new motoring period.
  t_motoring_from_ = -1.0;
  motoring_epoch_.reset();
  // The vehicle cooled while it stood: the warm-up trend starts again from the re-warm.
  drift_points_.clear();
  drift_t0_ = -1.0;
  // Nor is this session's warm-up what the history's day-to-day correction compares any more.
  initial_hold_ = false;
  initial_warm_up_.reset();
}

bool Session::clear_driver_prompt(int run, const std::string& why) {
  if (!prompt_shown_) return true;
  Result r = Result::fail("not sent");
  try {
    r = c_.prompt_driver(controller::DriverPrompt::off);
  } catch (...) {
    r = Result::fail("the controller call threw");
  }
  prompt_shown_ = !r.ok();
  emit(ev::DriverPromptShown{
      run, controller::DriverPrompt::off, 0.0,
      r.ok() ? "prompt cleared: " + why : "prompt NOT cleared (" + r.message + "): " + why});
  return r.ok();
}

std::optional<Session::Stop> Session::after_vehicle_run(int run, const motion::VehicleRunOutcome& out,
                                                        double start_kmh) {
  using Ending = motion::VehicleRunOutcome::Ending;
  // The display is cleared whatever happened (a driver left with "shift to neutral" shown does nothing).
  if (!clear_driver_prompt(run, "the run-up ended"))
    return Stop{Outcome::controller_fault, "the driver display could not be cleared after the run-up"};
  ev::RunUpChecked chk;
  chk.run = run;
  chk.ending = out.ending == Ending::coasted         ? "coasted"
               : out.ending == Ending::early_release ? "early_release"
               : out.ending == Ending::not_reached   ? "not_reached"
                                                     : "no_release";
  chk.start_speed_kmh = start_kmh;
  chk.peak_speed_kmh = out.peak_kmh;
  chk.release_speed_kmh = out.release_kmh;
  chk.detected_by = out.detected_by;
  chk.min_av_m2ps3 = core::kMinRunUpAccelSpeed_m2ps3;
  // The figure over the run-up from the prompt to the start speed (or to the run's end when not reached).
  std::vector<double> ts, vs;
  for (const auto& s : out.run_up) {
    if (out.reached_s >= 0.0 && s.time_s > out.reached_s) break;
    ts.push_back(s.time_s);
    vs.push_back(s.speed_kmh);
  }
  const core::RunUpFigure fig = core::run_up_figure(ts, vs);
  chk.figure_ok = fig.ok;
  chk.mean_av_m2ps3 = fig.mean_m2ps3;
  chk.peak_av_m2ps3 = fig.peak_m2ps3;
  // Comparisons written so that a NaN fails.
  chk.meets = fig.ok && fig.mean_m2ps3 >= core::kMinRunUpAccelSpeed_m2ps3;
  const double reached = out.reached_s >= 0.0 ? out.reached_s : (ts.empty() ? out.prompt_s : ts.back());
  chk.run_up_s = reached - out.prompt_s;
  if (out.ending == Ending::coasted) chk.release_delay_s = out.release_s - out.neutral_prompt_s;
  chk.why = out.why;
  if (!chk.meets && out.ending == Ending::coasted) {
    const std::string slow = "a too slow run-up: acceleration × speed " + num(fig.mean_m2ps3, 3) +
                             " m²/s³ below the " + num(core::kMinRunUpAccelSpeed_m2ps3) +
                             " m²/s³ of GTR 15 Annex 4 §8.1.3.4, which then asks for full accelerator";
    chk.why = slow;
    findings_.push_back("coast-down " + std::to_string(run) + ": " + slow);
  }
  if (!emit(chk)) return Stop{Outcome::record_failure, record_error_};
  return std::nullopt;
}

core::WarmingOutlook Session::warming_outlook(double now_abs_s, double next_abs_s) const {
  core::WarmingOutlook o;
  o.curve = core::fit_warm_up_curve(drift_points_);
  o.change_n = [curve = o.curve](double from_s, double to_s) {
    return core::predicted_change_n(curve, from_s, to_s);
  };
  o.epoch_s = drift_t0_;
  o.speed_kmh = in_.profile.warm_up.speed_kmh;
  o.speeds_kmh = in_.profile.reference_speeds_kmh;
  o.now_s = now_abs_s - drift_t0_;
  o.next_s = next_abs_s - drift_t0_;
  return o;
}

std::optional<Session::Stop> Session::do_run(int run) {
  const auto& p = in_.profile;
  run_ = run;
  // A pause asked between runs (during the analysis, say): stop, wait, re-warm, then this run.
  if (pause_asked()) {
    if (auto s = do_pause("between coast-downs", false, rewarm_s())) return s;
    if (auto s = do_warm_up(rewarm_s(), false)) return s;
  }
  auto link_or_fault = [&](const Result& r, const char* during) -> std::optional<Stop> {
    if (r.code == motion::kPaused) {
      // The run is discarded (not counted as unusable: the operator asked), then repeated after a re-warm.
      if (auto s = do_pause(during, true, rewarm_s())) return s;
      if (auto s = do_warm_up(rewarm_s(), false)) return s;
      return std::nullopt;
    }
    if (r.status == Result::Status::retryable && r.code != kInterruptedCode) {
      emit(ev::CoastdownDiscarded{run, std::string("link lost during ") + during + ": " + r.message,
                                  std::nullopt, std::nullopt});
      ++unusable_;
      ++discarded_;
      reset_passes(
          run, std::string("coast-down ") + std::to_string(run) + " discarded: link lost during " + during);
      if (!recover_link(r.message)) return fault(held_fault_.empty() ? r : Result::fail(held_fault_), during);
      if (!clear_driver_prompt(run, "after the lost link"))
        return Stop{Outcome::controller_fault, "the driver display could not be cleared after the lost link"};
      if (unusable_ >= p.max_unusable_runs)
        return Stop{Outcome::not_accepted,
                    "too many unusable coast-downs (" + std::to_string(unusable_) + ")"};
      // The rollers stopped: re-warm before the repeat, so the 120 s rule applies to a warm vehicle again;
      // the vehicle cooled as they stopped, so the warming trend starts again from that re-warm (as after a
      // pause).
      forget_warming();
      if (auto s = do_set_inertia()) return s;
      if (auto s = do_warm_up(rewarm_s(), false)) return s;
      return std::nullopt;
    }
    return fault(r, during);
  };
  run_from_s_ = t_now_;
  transition(State::write_set, "coast-down " + std::to_string(run));
  // One continuous motoring period at most the cell's limit: no setting is written once it is used up.
  if (motoring_used_s() > in_.cell.max_motoring_s)
    return Stop{Outcome::not_accepted,
                "the cell's motoring-time limit of " + num(in_.cell.max_motoring_s) + " s was reached"};
  // The envelope, before anything is written: a setting that would ask the dyno for more than the cell
  // allows, or that has run away from the target, is never sent.
  if (const core::SetCheck chk = core::check_set(set_, in_.vehicle.target, last_written_, opt_.envelope);
      !chk.ok) {
    emit(ev::EnvelopeRefused{run, set_, chk.why});
    // The first adjustment is the error of the first setting's loss estimate (core/envelope.hpp): a step too
    // large there most often means a vehicle unlike the one that estimate assumed. Only for that step: the
    // step limit broken, one setting written so far, and the setting the decision after it.
    const bool first_adjustment =
        chk.step_refused && iterations_ == 1 && last_adjusted_to_ && *last_adjusted_to_ == set_;
    const std::string cause = iterations_ == 0 ? "nothing has been measured yet: the first setting itself is "
                                                 "outside it (check the target file's "
                                                 "initial set and the cell's limits)"
                              : first_adjustment
                                  ? "the first setting was far from this vehicle's loss on the rollers (set "
                                    "a closer first setting: a "
                                    "target file's initial set, or another first-setting strategy), or the "
                                    "measurement is wrong, or "
                                    "the controller does not follow the setting"
                                  : "the controller does not follow the setting or the measurement is wrong";
    return Stop{Outcome::controller_fault,
                "the next setting was not written: it leaves the safe envelope (" + chk.why + "); " + cause};
  }
  if (Result r = c_.set_coefficients(set_); !r.ok()) return link_or_fault(r, "write set");
  if (!last_written_ || !(*last_written_ == set_)) ++iterations_;
  last_written_ = set_;
  if (!emit(ev::SetWritten{run, set_, iterations_})) return Stop{Outcome::record_failure, record_error_};

  transition(State::run_up);
  const double t_ru = t_now_;
  if (!emit(ev::CoastdownStarted{run, set_, p.start_speed_kmh()}))
    return Stop{Outcome::record_failure, record_error_};
  std::vector<controller::Sample> trace;
  const double end = p.end_speed_kmh();
  // A coast that takes three times the target's predicted time (or 5 min, whichever is longer) means the set
  // load plus the vehicle's loss leaves too little retarding force: the dyno is nearly driving the car.
  const double predicted =
      core::coastdown_time_s(in_.vehicle.target, force_mass_kg_, p.start_speed_kmh(), end)
          .value_or(kMinCoastBudgetS);
  const double budget = std::max(kMinCoastBudgetS, 3.0 * predicted);
  double run_up_s = 0.0;
  Result r = Result::success();
  if (in_.cell.run_up == core::RunUp::vehicle) {
    // Under the vehicle's own power: the driver prompted through the controller (docs/session.md).
    motion_commanded_ = true;
    motion::VehicleRunPlan plan;
    plan.start_kmh = p.start_speed_kmh();
    plan.end_kmh = end;
    plan.coast_budget_s = budget;
    plan.neutral_signal = neutral_signal_;
    motion::VehicleRunOutcome out;
    r = motion_.vehicle_run(
        plan, out,
        [&](controller::DriverPrompt pr, double v) {
          prompt_shown_ = pr != controller::DriverPrompt::off;
          emit(ev::DriverPromptShown{run, pr, v,
                                     pr == controller::DriverPrompt::accelerate
                                         ? "accelerate to " + num(v) + " km/h"
                                     : pr == controller::DriverPrompt::neutral ? "shift to neutral"
                                                                               : "prompt cleared"});
        },
        [&] { transition(State::coast_down); });
    if (r.code == kTooSlowCode) {
      (void)clear_driver_prompt(run, "too slow a coast");  // the too-slow coast is handled below
    } else if (r.ok()) {
      if (auto s = after_vehicle_run(run, out, p.start_speed_kmh())) return s;
      if (out.ending != motion::VehicleRunOutcome::Ending::coasted) {
        if (Result h = c_.hold_speed(std::max(10.0, end)); !h.ok())
          return link_or_fault(h, "after the run-up");
        if (out.ending == motion::VehicleRunOutcome::Ending::early_release) {
          // Released below the start speed: the run is unusable, discarded and repeated.
          ++unusable_;
          ++discarded_;
          first_after_warm_up_ = false;
          t_last_coast_end_ = t_now_;
          reset_passes(run, "coast-down " + std::to_string(run) + " discarded: released early");
          emit(ev::CoastdownDiscarded{run, out.why, std::nullopt,
                                      "repeated (an early release, GTR 15 Annex 4 "
                                      "§8.1.3.4: the coast starts at the start speed)"});
          if (unusable_ >= p.max_unusable_runs)
            return Stop{Outcome::not_accepted, "too many unusable coast-downs (" + std::to_string(unusable_) +
                                                   "): the last was released early"};
          return std::nullopt;
        }
        // Never reached the start speed, or never released: the run ends the session with the reason.
        return Stop{Outcome::not_accepted, "coast-down " + std::to_string(run) + ": " + out.why};
      }
      trace = std::move(out.coast);
      run_up_s = out.release_s - out.prompt_s;
    }
  } else {
    if (Result rr = hold_and_wait(p.start_speed_kmh(), "run-up"); !rr.ok())
      return link_or_fault(rr, "run-up");
    run_up_s = t_now_ - t_ru;
    transition(State::coast_down);
    if (Result rr = c_.release_road_load(); !rr.ok()) return link_or_fault(rr, "release");
    // Only road-load samples read after the release was acknowledged are this coast's.
    r = motion_.collect(
        step("coast-down", budget, {Mode::road_load}),
        [&](const controller::Sample& s) { return s.speed_kmh < end; }, &trace);
  }
  if (r.code == kTooSlowCode) {
    // Leave road-load simulation at once, count the run unusable and fall back to the standard's default
    // setting.
    if (Result h = c_.hold_speed(std::max(10.0, end)); !h.ok())
      return link_or_fault(h, "after a too slow coast-down");
    ++unusable_;
    ++discarded_;
    // This run was released: the next one follows it (the 120 s rule was this run's; it is discarded).
    first_after_warm_up_ = false;
    t_last_coast_end_ = t_now_;
    reset_passes(run, "coast-down " + std::to_string(run) + " discarded: too little retarding force");
    const core::RoadLoad fallback =
        core::standard_initial_setting(in_.vehicle.target, in_.cell.axles, p.initial);
    emit(ev::CoastdownDiscarded{run, r.message + ": too little retarding force with this setting", fallback,
                                "falling back to the standard's default setting"});
    set_ = fallback;
    if (unusable_ >= p.max_unusable_runs)
      return Stop{Outcome::not_accepted, "too many unusable coast-downs (" + std::to_string(unusable_) + ")"};
    return std::nullopt;
  }
  if (!r.ok()) return link_or_fault(r, "coast-down");
  // Keep the vehicle turning for the next run: leave road-load simulation for a low speed hold at once.
  if (Result h = c_.hold_speed(std::max(10.0, end)); !h.ok()) return link_or_fault(h, "after coast-down");
  const double release = trace.empty() ? t_now_ : trace.front().time_s;
  // The last coast-down's end and whether this run follows one of the same warm-up (the cycle the warming
  // outlook below expects again).
  const double previous_end = first_after_warm_up_ ? -1.0 : t_last_coast_end_;
  if (first_after_warm_up_) {
    // The 120 s rule applies after every warm-up, a re-warm included (EU SA4 §8.1.2–8.1.3, docs/standards.md
    // §3.6). Comparisons are written so that a NaN gap is late.
    first_after_warm_up_ = false;
    const double gap = release - t_warm_end_;
    const bool within = gap <= p.max_gap_after_warmup_s;
    const bool repeat = !within && p.late_start == core::Profile::LateStart::repeat;
    const std::string rule = "first coast-down after the warm-up released within " +
                             num(p.max_gap_after_warmup_s) + " s of its end (EU SA4 §8.1.2-8.1.3)";
    emit(ev::ReleaseTiming{rule, gap, within, within ? "" : repeat ? "repeat" : "finding"});
    if (!within && !repeat)
      findings_.push_back("coast-down " + std::to_string(run) + " was released " + num(gap, 1) +
                          " s after the warm-up ended, beyond the " + num(p.max_gap_after_warmup_s) +
                          " s rule; kept by the profile's policy (timing.late_start = \"finding\")");
    if (repeat) {
      // Discarded unanalysed; a short re-warm, then the run again (bounded by the unusable-run limit).
      ++unusable_;
      ++discarded_;
      reset_passes(run, "coast-down " + std::to_string(run) + " discarded: released late");
      emit(ev::CoastdownDiscarded{run,
                                  "released " + num(gap, 1) + " s after the warm-up ended, beyond the " +
                                      num(p.max_gap_after_warmup_s) + " s rule",
                                  std::nullopt,
                                  "repeated after a short re-warm (timing.late_start = \"repeat\")"});
      if (unusable_ >= p.max_unusable_runs)
        return Stop{Outcome::not_accepted, "too many unusable coast-downs (" + std::to_string(unusable_) +
                                               "): the last released late"};
      if (auto s = do_warm_up(p.late_start_rewarm_s, false)) return s;
      return std::nullopt;
    }
  } else {
    emit(ev::ConsecutiveTiming{"consecutive coast-downs start immediately (EU SA4 §8.1.3)",
                               release - t_last_coast_end_});
  }
  t_last_coast_end_ = t_now_;

  transition(State::analyse);
  std::vector<double> ts, vs;
  split_trace(trace, ts, vs);
  CoastdownRecord rec;
  rec.run = run;
  rec.set = set_;
  rec.release_time_s = release;
  rec.duration_s = trace.empty() ? 0.0 : trace.back().time_s - trace.front().time_s;
  rec.run_up_s = run_up_s;
  rec.verifying = method_->verifying();
  rec.tolerance_n = p.tolerance_n;
  {
    // The analysis (the whole-trace fit above all) runs on a worker thread while this one keeps the link
    // alive: the controller's watchdog must never see the tool fall silent while the vehicle turns.
    // The wait has a deadline on the tool's own clock (docs/safety.md): an analysis that never ends must not
    // hold the rollers at the run's end speed while the keep-alive feeds the watchdog. The worker owns copies
    // of what it reads, so one given up on can finish (or not) on its own.
    core::EvaluationOptions eo;
    eo.whole_trace = opt_.whole_trace_estimator;
    auto task = std::make_shared<std::packaged_task<core::CoastdownEvaluation()>>(
        [ts, vs, prof = p, target = in_.vehicle.target, mass = force_mass_kg_, eo,
         hook = opt_.before_analysis] {
          if (hook) hook();
          return core::evaluate_coastdown({ts, vs}, prof, target, mass, eo);
        });
    auto job = task->get_future();
    std::thread([task] { (*task)(); }).detach();
    using SteadyClock = std::chrono::steady_clock;
    const auto deadline = SteadyClock::now() + std::chrono::duration_cast<SteadyClock::duration>(
                                                   std::chrono::duration<double>(opt_.analysis_wall_limit_s));
    for (;;) {
      const auto left = std::max(SteadyClock::duration::zero(), deadline - SteadyClock::now());
      if (job.wait_for(std::min<SteadyClock::duration>(std::chrono::milliseconds(20), left)) ==
          std::future_status::ready)
        break;
      if (SteadyClock::now() >= deadline)
        return fault(Result::fail("the analysis of coast-down " + std::to_string(run) +
                                  " did not finish within " + core::num(opt_.analysis_wall_limit_s) +
                                  " s of wall time: the session stops rather than hold the rollers"),
                     "analysis");
      c_.lease(in_.cell.timeouts.progress_grace);  // this thread is alive: waiting on a bounded computation
      if (Result hb = c_.heartbeat_if_due(); !hb.ok()) return link_or_fault(hb, "analysis");
    }
    rec.evaluation = job.get();
  }
  ++coastdowns_;
  if (!rec.evaluation.usable) {
    ++unusable_;
    reset_passes(run, "coast-down " + std::to_string(run) + " unusable: " + rec.evaluation.unusable_reason);
    if (!emit(ev::Coastdown{rec}, &trace)) return Stop{Outcome::record_failure, record_error_};
    if (unusable_ >= p.max_unusable_runs)
      return Stop{Outcome::not_accepted, "too many unusable coast-downs (" + std::to_string(unusable_) +
                                             "): " + rec.evaluation.unusable_reason};
  } else {
    // The warming still to come, anticipated in the next setting (warm_up.anticipate_drift, docs/standards.md
    // §3.16): the warm-up's curve predicts the loss change from this coast-down's middle to the next one's,
    // a run-up and a coast-down later.
    core::WarmingOutlook outlook;
    const bool anticipate = p.warm_up.anticipate_drift && drift_t0_ >= 0.0;
    // The next coast-down follows this one by the cycle just measured (end to end, when this run followed
    // one of the same warm-up), else by this run's run-up and coast (the first after a warm-up, whose run-up
    // started from the warm-up speed: a shorter cycle, so less is anticipated, not more).
    cycle_measured_ = previous_end >= 0.0 && previous_end >= drift_t0_ && t_now_ > previous_end;
    cycle_s_ = cycle_measured_ ? t_now_ - previous_end : std::max(0.0, rec.run_up_s) + rec.duration_s;
    if (anticipate) {
      const double mid = rec.release_time_s + 0.5 * rec.duration_s;
      outlook = warming_outlook(mid, mid + cycle_s_);
      outlook.cycle_s = cycle_s_;  // the coast-downs after the next (warm_up.anticipate_for = "passes")
    }
    // The acceptance is the band regression's (check.pass); the loss an adjustment takes off comes from the
    // profile's estimate (method.adjust_from, docs/standards.md §3.17).
    rec.decision = method_->on_coastdown(set_, rec.evaluation.adjust_basis, rec.evaluation.check.pass,
                                         anticipate ? &outlook : nullptr);
    // A pass that is not yet the last of the consecutive passes: is the warming predicted to take the next
    // coast-down outside the limit (warm_up.predict_next_pass, docs/standards.md §3.19)? Then the setting is
    // adjusted now, as after a failure, and the passes start again: two more coast-downs instead of a likely
    // failure and two more after it. Only with room for the passes and a setting the safe envelope takes.
    if (anticipate && p.warm_up.predict_next_pass && p.method == core::SettingMethod::iterative &&
        !rec.verifying && rec.evaluation.check.pass && rec.decision.kind == core::Decision::Kind::run_again)
      judge_next_pass(run, rec, outlook);
    // Said wherever the basis moved a setting: an iterative adjustment, or a fixed-run run (its loss sets run
    // 2 or enters the final setting's average).
    const bool fixed_run_loss = p.method == core::SettingMethod::fixed_run && !rec.verifying;
    if (!rec.evaluation.adjust_why.empty() &&
        (fixed_run_loss ||
         (rec.decision.kind == core::Decision::Kind::run_again &&
          (!rec.evaluation.check.pass || (rec.decision.next_pass && rec.decision.next_pass->adjusted)))))
      rec.decision.reason += "; loss from the " + rec.evaluation.adjust_why;
    if (rec.evaluation.confirmation_refused)
      rec.decision.reason += "; within tolerance by the band regression but " + rec.evaluation.confirmation;
    if (divergence_)
      divergence_->add(set_, in_.vehicle.target, rec.evaluation.fit.coefficients,
                       rec.evaluation.check.worst_abs_deviation_n);
    // Predicted band times for the target at TM + m_r, beside the measured ones (what the rollers should do):
    // part of the record from the start, so the event is complete when it is built.
    for (const auto& t : core::predicted_band_times_s(in_.vehicle.target, force_mass_kg_,
                                                      p.reference_speeds_kmh, p.band_half_width_kmh))
      rec.predicted_delta_t_s.push_back(t);
    // A fixed-run final setting accepted without verification runs was never coasted: it meets the same
    // envelope as every setting written, or it is rejected, before the record says anything.
    if (rec.decision.kind == core::Decision::Kind::accepted && !(rec.decision.next_set == set_))
      if (const core::SetCheck chk =
              core::check_set(rec.decision.next_set, in_.vehicle.target, last_written_, opt_.envelope);
          !chk.ok) {
        emit(ev::EnvelopeRefused{run, rec.decision.next_set, chk.why});
        rec.decision.kind = core::Decision::Kind::rejected;
        rec.decision.reason +=
            "; but the final setting leaves the safe envelope (" + chk.why + "): not accepted";
      }
    // A setting about to be accepted: is the vehicle still warming (docs/standards.md §3.12)?
    if (rec.decision.kind == core::Decision::Kind::accepted) judge_warm_acceptance(run, rec);
    last_ = rec;  // usable records only, as last_adjusted_to_
    last_adjusted_to_ = rec.decision.kind == core::Decision::Kind::run_again
                            ? std::optional<core::RoadLoad>(rec.decision.next_set)
                            : std::nullopt;
    if (!emit(ev::Coastdown{rec}, &trace)) return Stop{Outcome::record_failure, record_error_};
    if (rec.decision.kind == core::Decision::Kind::accepted) {
      final_set_ = rec.decision.next_set;
      return Stop{Outcome::accepted, rec.decision.reason};
    }
    if (rec.decision.kind == core::Decision::Kind::rejected)
      return Stop{Outcome::not_accepted, rec.decision.reason};
    if (divergence_)
      if (auto why = divergence_->verdict()) {
        emit(ev::Diverging{run, *why});
        return Stop{Outcome::controller_fault, *why};
      }
    set_ = rec.decision.next_set;
  }
  if (coastdowns_ >= p.max_coastdowns)
    return Stop{Outcome::not_accepted,
                "iteration limit of " + std::to_string(p.max_coastdowns) + " coast-downs reached"};
  return std::nullopt;
}

void Session::do_safe_stop() {
  if (safe_stop_done_) return;
  safe_stop_done_ = true;
  transition(State::safe_stop);
  if (!controller_reached_ && !link_up_ && !motion_commanded_) {
    rollers_stopped_ = true;
    stop_note_ = identified_
                     ? "nothing was commanded: the controller was refused before anything moved"
                     : "nothing was commanded to move: no controller was identified (the link never came "
                       "up, or the controller did not identify itself)";
    emit(ev::SafeStop{stop_note_, true, std::nullopt});
    return;
  }
  if (link_up_) (void)clear_driver_prompt(run_, "stopping");  // best effort; the stop comes first either way
  Result r = Result::retry("the link is down");
  bool stopped = false;
  if (link_up_)
    r = motion_.stop_and_wait(opt_.stop_budget_s, stopped);
  else if (controller_reached_)
    r = c_.controlled_stop();  // reached but not streaming (a refusal on connect): confirmed by status below
  bool ours = true;            // the controller the stop is asked of is the cell's (identified and matching)
  if (!stopped && !r.ok() && (r.status == Result::Status::retryable || !link_up_)) {
    // The link failed: one reconnection to command the stop ourselves rather than leave it to the watchdog.
    // The controller that answers is identified and checked first: another cell's is never commanded.
    c_.disconnect();
    r = c_.connect();
    controller::ControllerInfo again;
    if (r.ok()) r = c_.identify(again);
    if (r.ok())
      if (const core::Problems mismatch = controller::check_identity(in_.cell, again); !mismatch.empty()) {
        ours = false;
        r = Result::fail("the controller that answers does not match the cell file (" + mismatch.front().key +
                         ": " + mismatch.front().message + "): not commanded");
        c_.disconnect();
      }
    if (r.ok()) r = c_.controlled_stop();
    emit(ev::SafeStopReconnect{r.ok(), r.message});
  }
  // Without confirmation from the stream, ask the controller's status (every poll bounded in both clocks).
  controller::StatusReport st;
  Result sr = Result::fail("not asked");
  bool seen = false;  // st holds a status the controller sent and the controller layer accepted
  if (stopped) {
    // The stream saw a standstill; the controller's own status must agree, or the wait goes on by status.
    // A status that could not be read or failed its checks, or that shows the rollers slow but not at rest
    // (a holding mode at standstill), is no agreement: the wait goes on by status.
    if (Result q = c_.status(st); q.ok() && motion_.at_rest(st.speed_kmh, st.mode))
      seen = true;
    else
      stopped = false;
  }
  if (!stopped && ours) {
    st = {};
    sr = motion_.settle_by_status(opt_.stop_budget_s, st, &seen);
  } else if (!ours) {
    sr = r;  // why nothing was asked of the controller that answered
  }
  c_.stop_stream();
  rollers_stopped_ = stopped || sr.ok();
  if (rollers_stopped_)
    stop_note_ = "controlled stop: standstill confirmed by the controller";
  else
    stop_note_ = "rollers not confirmed stopped: " + (sr.message.empty() ? r.message : sr.message) +
                 "; the controller's watchdog is the remaining safeguard";
  emit(ev::SafeStop{
      rollers_stopped_ ? "controlled stop" : "controlled stop commanded, standstill not confirmed",
      rollers_stopped_,
      seen ? std::optional<ev::SafeStop::Seen>(
                 ev::SafeStop::Seen{st.speed_kmh, st.mode, in_.cell.standstill_kmh, stop_note_})
           : std::nullopt});
}

Session::StopGuard::~StopGuard() {
  if (s.safe_stop_done_) return;
  try {
    s.c_.controlled_stop();  // best effort on a path that bypassed do_safe_stop
    if (s.prompt_shown_) (void)s.c_.prompt_driver(controller::DriverPrompt::off);
  } catch (...) {
  }
}

Summary Session::run(const ResumePoint* resume) {
  // Records wait for the disk (fsync) and large traces take time to hash and write: a thread of its own keeps
  // the controller's watchdog fed meanwhile, while this thread is alive and within its announced steps.
  c_.lease(in_.cell.timeouts.progress_grace);
  const controller::KeepAlive keep_alive(c_);
  StopGuard guard{*this};
  const auto& p = in_.profile;
  std::optional<Stop> stop;
  try {
    stop = run_states(resume);
  } catch (const std::exception& e) {
    stop =
        Stop{Outcome::controller_fault, std::string("internal error, the session was stopped: ") + e.what()};
  } catch (...) {
    stop = Stop{Outcome::controller_fault, "internal error, the session was stopped"};
  }
  if (!stop) stop = Stop{Outcome::controller_fault, "internal error: the session ended without a reason"};
  if (record_failed_ && stop->outcome != Outcome::record_failure)
    stop = Stop{Outcome::record_failure, record_error_};
  try {
    do_safe_stop();
  } catch (const std::exception& e) {
    stop_note_ = std::string("rollers not confirmed stopped: the stop failed: ") + e.what();
    rollers_stopped_ = false;
  }
  motion_.drain_warnings();  // the last of the controller's warnings, before the end
  transition(State::finished, to_string(stop->outcome));
  Summary s;
  s.outcome = stop->outcome;
  s.stop_reason = stop->reason;
  s.iterations = iterations_;
  s.coastdowns = coastdowns_;
  s.usable_coastdowns = coastdowns_ - (unusable_ - discarded_);
  s.cell_time_s =
      t_start_ >= 0.0 ? cell_time_before_ + (t_now_ - t_start_) : cell_time_before_;  // as emit() states it
  s.first_setting = first_setting_;
  s.rollers_stopped = rollers_stopped_;
  s.stop_note = stop_note_;
  // A pause asked but never taken (the session ended first) is said, so the one who asked knows.
  if (const auto asked =
          pause_asked() && !pause_held_ && opt_.pause ? opt_.pause->pause_request() : std::nullopt)
    findings_.push_back("a pause asked by " + asked->by + " (" + asked->source +
                        ") was not taken: the session ended first");
  s.findings = findings_;
  if (final_set_) s.final_set = core::rounded(*final_set_, p.rounding);
  if (last_) {
    s.measured = last_->evaluation.fit.coefficients;
    s.deviations = last_->evaluation.check.rows;
  }
  emit(ev::Finished{s});
  return s;
}

std::optional<Session::Stop> Session::run_states(const ResumePoint* resume) {
  const auto& p = in_.profile;
  opt_.envelope.max_force_n = in_.cell.max_force_n;
  opt_.envelope.top_speed_kmh = p.start_speed_kmh();
  divergence_.emplace(p.tolerance_n, p.bottom_speed_kmh(), p.top_speed_kmh());
  method_ = std::make_unique<core::SettingMethodState>(in_.profile, in_.vehicle.target);
  int run_no = 1;
  // The warm-up to come, for the progress line's estimate from the first state on.
  warm_asked_s_ = resume && opt_.resume_warm_up_s >= 0.0 ? opt_.resume_warm_up_s : p.warm_up.duration_s;
  if (resume) {
    cell_time_before_ = resume->cell_time_s;
    replay_method(*resume, *method_);
    coastdowns_ = static_cast<int>(resume->completed.size());
    // The settings written before, so that the first write after the resume meets the step limit against the
    // last one the controller was given (and counts as an iteration only when it differs).
    iterations_ = resume->iterations;
    last_written_ = resume->last_written;
    last_adjusted_to_ = resume->last_adjusted_to;
    unusable_ = resume->unusable;
    discarded_ = resume->discarded;
    run_no = std::max(run_no, resume->last_run + 1);
    set_ = resume->next_set;
    first_setting_ = resume->strategy;
    if (resume->discarded_run) run_no = std::max(run_no, *resume->discarded_run + 1);
    // The session stopped and re-warms: passes before the stop are not consecutive with what follows.
    if (method_->consecutive_passes() > 0)
      emit(ev::PassesReset{run_no, method_->reset_passes(), "the session stopped and was resumed"});
    emit(ev::Resumed{static_cast<std::size_t>(coastdowns_),
                     resume->discarded_run ? "the half-recorded coast-down is discarded and run again"
                                           : "no run was in progress",
                     ev::Resumed::Continued{unusable_, set_, resume->discarded_run}});
  }
  std::optional<Stop> stop = do_connect();
  if (!stop) stop = do_check_limits();
  if (!stop) stop = do_set_inertia();
  // A resumed session that had not yet chosen its first setting (interrupted in connect, warm-up or the loss
  // map) chooses it now, as a new session would; one that had continues with its recorded next setting.
  const bool choose_first = !resume || !resume->have_next_set;
  const bool want_map =
      choose_first && !in_.vehicle.initial_set && opt_.first_setting == core::FirstSetting::loss_map;
  if (!stop) {
    const double warm = resume && opt_.resume_warm_up_s >= 0.0 ? opt_.resume_warm_up_s : p.warm_up.duration_s;
    initial_hold_ = !resume;
    stop = do_warm_up(warm, want_map);
  }
  if (!stop && choose_first) {
    // The first setting: the choice and its fallbacks are the core's (core/strategy.hpp).
    auto choose = [&](core::FirstSetting requested) {
      return core::choose_first_setting({.requested = requested,
                                         .target = in_.vehicle.target,
                                         .test_mass_kg = in_.vehicle.test_mass_kg,
                                         .layout = in_.cell.axles,
                                         .rule = p.initial,
                                         .target_file_set = in_.vehicle.initial_set,
                                         .fleet = opt_.fleet,
                                         .history = opt_.history,
                                         .warm_up_today = initial_warm_up_,
                                         .loss_map = loss_map_,
                                         .coast_points = coast_points_,
                                         .coasts_asked = p.loss_map.coast_between_holds && !loss_map_.empty(),
                                         .lo_kmh = p.bottom_speed_kmh(),
                                         .hi_kmh = p.top_speed_kmh()});
    };
    core::FirstSettingChoice c = choose(opt_.first_setting);
    // A first setting has no previous write to step from: the map's coasts wrote the standard's default
    // setting as a measurement, not as an iteration (a step rule from it refused legitimate loss-map settings
    // of large vehicles in the bench); an absurd coast correction is bounded by fit_coast_correction.
    auto refused = [&](const core::FirstSettingChoice& x) {
      return core::check_set(x.set, in_.vehicle.target, std::nullopt, opt_.envelope);
    };
    // A coast correction that takes the map's set out of the envelope: the map as it is, said.
    if (c.coast_correction && c.coast_correction->ok) {
      if (const core::SetCheck chk = refused(c); !chk.ok) {
        core::FirstSettingChoice plain = c;
        plain.loss = c.map_fit;
        plain.set = core::setting_for_loss(in_.vehicle.target, *c.map_fit);
        plain.coast_correction->ok = false;
        plain.coast_correction->why =
            "not used: the corrected setting leaves the safe envelope (" + chk.why + ")";
        c = plain;
      }
    }
    // The warming from the map to the first coast-down, anticipated (warm_up.anticipate_drift,
    // docs/standards.md §3.16): the map's loss is of its middle; the first coast-down's middle is a run-up
    // (at the motoring rate from the last hold) and half a coast-down of the target later.
    if (p.warm_up.anticipate_drift && c.used == core::to_string(core::FirstSetting::loss_map) && c.loss &&
        drift_t0_ >= 0.0 && map_to_s_ >= map_from_s_ && map_from_s_ >= drift_t0_) {
      const double last_hold_kmh = loss_map_.empty() ? p.warm_up.speed_kmh : loss_map_.back().speed_kmh;
      const double run_up_s = std::max(0.0, p.start_speed_kmh() - last_hold_kmh) / 3.6 / core::kHoldRampMps2;
      const double coast_s =
          core::coastdown_time_s(in_.vehicle.target, force_mass_kg_, p.start_speed_kmh(), p.end_speed_kmh())
              .value_or(0.0);
      core::WarmingOutlook o =
          warming_outlook(0.5 * (map_from_s_ + map_to_s_), t_now_ + run_up_s + 0.5 * coast_s);
      // Aimed at the consecutive passes of the iterative method (warm_up.anticipate_for = "passes"): the
      // coast-downs after the first follow by a run-up from the end speed and a coast (the fixed-run method's
      // first run only stabilises: its setting is aimed at that run).
      if (p.method == core::SettingMethod::iterative) {
        o.aimed = core::coastdowns_aimed_at(p.warm_up, p.consecutive_passes);
        o.cycle_s =
            std::max(0.0, p.start_speed_kmh() - p.end_speed_kmh()) / 3.6 / core::kHoldRampMps2 + coast_s;
      }
      core::Anticipation a = core::anticipate_warming(*c.loss, o, o.now_s, o.next_s);
      if (a.used) {
        core::FirstSettingChoice anticipated = c;
        anticipated.loss = c.loss->scaled(1.0 + a.ratio);
        anticipated.set = core::setting_for_loss(in_.vehicle.target, *anticipated.loss);
        // An anticipated setting outside the envelope: the map's own, said (the check below judges it).
        if (const core::SetCheck chk = refused(anticipated); chk.ok) {
          c = anticipated;
        } else {
          a.used = false;
          a.why = "not used: the anticipated setting leaves the safe envelope (" + chk.why + "); " + a.why;
        }
      }
      c.anticipation = std::move(a);
    }
    // A strategy's set that leaves the safe envelope (a history row, a fleet or map fit gone wild) is never
    // the first setting: the standard's is used instead and the record says why (the envelope would refuse
    // to write it anyway, after the warm-up, as a controller fault).
    if (c.used != "target-file" && c.used != core::to_string(core::FirstSetting::standard)) {
      if (const core::SetCheck chk = refused(c); !chk.ok) {
        const std::string why = "the " + c.used + " first setting leaves the safe envelope (" + chk.why + ")";
        // What the refused strategy measured stays in the record (an auditor sees what was refused).
        const auto basis = c.history_basis;
        const auto map_fit = c.map_fit;
        const auto map_sd = c.map_residual_sd_n;
        auto correction = c.coast_correction;
        const auto anticipation = c.anticipation;
        auto day_scale = c.day_scale;
        if (day_scale && day_scale->used) {
          day_scale->used = false;
          day_scale->why = "the scaled history first setting left the safe envelope";
        }
        if (correction && correction->ok) {
          correction->ok = false;
          correction->why = "not used: the loss-map first setting left the safe envelope";
        }
        c = choose(core::FirstSetting::standard);
        c.why = why + "; the standard's first setting is used";
        c.history_basis = basis;
        c.map_fit = map_fit;
        c.map_residual_sd_n = map_sd;
        c.coast_correction = correction;
        c.anticipation = anticipation;
        c.day_scale = day_scale;
        if (c.anticipation && c.anticipation->used) {
          c.anticipation->used = false;
          c.anticipation->why =
              "not used: the loss-map first setting left the safe envelope; " + c.anticipation->why;
        }
      }
    }
    set_ = c.set;
    first_setting_ = c.used;
    const bool history_involved = opt_.first_setting == core::FirstSetting::history ||
                                  c.used == core::to_string(core::FirstSetting::history);
    if (!emit(ev::FirstSetting{core::to_string(opt_.first_setting), c.used, c.why, set_, c.history_utc,
                               c.map_fit, c.map_residual_sd_n, c.loss, c.history_basis,
                               history_involved ? opt_.history_lookup : nlohmann::json(), c.coast_correction,
                               c.anticipation, c.day_scale}))
      stop = Stop{Outcome::record_failure, record_error_};
  }
  while (!stop) {
    stop = do_run(run_no++);
    if (!stop && record_failed_) stop = Stop{Outcome::record_failure, record_error_};
  }
  return stop;
}

}  // namespace loadtrim::session
