#include "session/session.hpp"

#include <algorithm>
#include <cmath>
#include <future>
#include <thread>

#include "core/predict.hpp"
#include "core/problem.hpp"
#include "core/setting.hpp"

namespace loadtrim::session {

nlohmann::json coefficients_json(const core::RoadLoad& c);
core::RoadLoad coefficients_from_json(const nlohmann::json& j);

using controller::Mode;
using controller::Result;
using core::num;

namespace {
constexpr int kInterruptedCode = -2;
constexpr int kTooSlowCode = -3;
constexpr std::uint32_t kFaultFlags = controller::kFlagFault | controller::kFlagEstop | controller::kFlagWatchdog;
}  // namespace

const char* to_string(State s) {
  switch (s) {
    case State::connect: return "connect";
    case State::check_limits: return "check_limits";
    case State::set_inertia: return "set_inertia";
    case State::warm_up: return "warm_up";
    case State::write_set: return "write_set";
    case State::run_up: return "run_up";
    case State::coast_down: return "coast_down";
    case State::analyse: return "analyse";
    case State::safe_stop: return "safe_stop";
    case State::finished: return "finished";
  }
  return "unknown";
}

const char* to_string(Outcome o) {
  switch (o) {
    case Outcome::accepted: return "accepted";
    case Outcome::not_accepted: return "not-accepted";
    case Outcome::refused: return "refused";
    case Outcome::controller_fault: return "controller-fault";
    case Outcome::interrupted: return "interrupted";
    case Outcome::record_failure: return "record-failure";
  }
  return "unknown";
}

Session::Session(Inputs inputs, Options options, controller::Controller& controller, std::vector<Observer*> observers,
                 const std::atomic<bool>* stop_flag)
    : in_(std::move(inputs)), opt_(std::move(options)), c_(controller), observers_(std::move(observers)), stop_flag_(stop_flag) {}

bool Session::emit(const std::string& type, nlohmann::json data, const std::vector<controller::Sample>* trace) {
  if (!data.is_object()) data = nlohmann::json::object();
  data["state"] = to_string(state_);
  if (t_start_ >= 0.0) {
    data["t_s"] = t_now_;
    data["cell_time_s"] = cell_time_before_ + (t_now_ - t_start_);
  }
  const Event e{type, std::move(data), trace};
  for (Observer* o : observers_) {
    if (!o->on_event(e) && !record_failed_) {
      record_failed_ = true;
      record_error_ = o->error();
    }
  }
  return !record_failed_;
}

void Session::progress(double speed_kmh, double band_kmh) {
  Progress p;
  p.state = state_;
  p.coastdown = coastdowns_ + 1;
  p.speed_kmh = speed_kmh;
  p.band_kmh = band_kmh;
  p.cell_time_s = t_start_ >= 0.0 ? cell_time_before_ + t_now_ - t_start_ : 0.0;
  // Remaining: the runs the method still needs at least, each a run-up plus the predicted coast-down.
  const auto& pr = in_.profile;
  int runs_left = pr.method == core::SettingMethod::iterative
                      ? std::max(1, pr.consecutive_passes - (method_ ? method_->consecutive_passes() : 0))
                      : std::max(1, pr.fixed_runs + pr.fixed_run_verification_runs - coastdowns_);
  const auto coast = core::coastdown_time_s(in_.vehicle.target, force_mass_kg_ > 0 ? force_mass_kg_ : 1500.0,
                                            pr.start_speed_kmh(), std::max(1.0, pr.end_speed_kmh()));
  const double per_run = coast.value_or(300.0) + 60.0;
  p.remaining_estimate_s = runs_left * per_run;
  if (state_ == State::warm_up && t_motoring_from_ >= 0.0)
    p.remaining_estimate_s += std::max(0.0, pr.warm_up.duration_s - (t_now_ - t_motoring_from_));
  for (Observer* o : observers_) o->on_progress(p);
}

void Session::transition(State to, const std::string& why) {
  const State from = state_;
  state_ = to;
  emit("state", {{"from", to_string(from)}, {"to", to_string(to)}, {"why", why}});
}

Result Session::wait_for(const std::function<bool(const controller::Sample&)>& pred, double budget_s,
                         std::vector<controller::Sample>* keep, const char* what, double since_s) {
  double t_begin = -1.0, last_progress = -1e9;
  std::vector<controller::Sample> got;
  for (;;) {
    if (stop_requested()) return Result::fail("interrupted by the operator", kInterruptedCode);
    got.clear();
    if (Result r = c_.receive_samples(got); !r.ok()) return r;
    for (const auto& s : got) {
      t_now_ = std::max(t_now_, s.time_s);
      if (t_start_ < 0.0) t_start_ = s.time_s;
      // Samples queued before the command that started this wait belong to the previous phase.
      if (s.time_s < since_s) continue;
      if (t_begin < 0.0) t_begin = s.time_s;
      if (s.flags & kFaultFlags)
        return Result::fail(std::string("the controller reports a fault (flags ") + std::to_string(s.flags) + ") during " + what);
      if (s.speed_kmh > speed_limit_kmh_ + 2.0 && speed_limit_kmh_ > 0.0)
        return Result::fail("speed " + num(s.speed_kmh) + " km/h above the limit of " + num(speed_limit_kmh_) + " km/h");
      if (keep) keep->push_back(s);
      double band = 0.0;
      if (state_ == State::coast_down)
        for (double v : in_.profile.reference_speeds_kmh)
          if (std::abs(s.speed_kmh - v) <= in_.profile.band_half_width_kmh) band = v;
      if (s.time_s - last_progress >= 0.5) {
        last_progress = s.time_s;
        progress(s.speed_kmh, band);
      }
      if (pred(s)) return Result::success();
    }
    if (t_begin >= 0.0 && t_now_ - t_begin > budget_s)
      return Result::fail(std::string(what) + " did not complete within " + num(budget_s) + " s of controller time", kTooSlowCode);
  }
}

Result Session::command_time(double& t) {
  controller::StatusReport st;
  if (Result r = c_.status(st); !r.ok()) return r;
  t = st.time_s;
  return Result::success();
}

Result Session::hold_and_wait(double speed_kmh, const char* what) {
  if (Result r = c_.hold_speed(speed_kmh); !r.ok()) return r;
  double since = -1e300;
  if (Result r = command_time(since); !r.ok()) return r;
  // At the setpoint, then 2 s more to settle.
  double reached = -1.0;
  return wait_for(
      [&](const controller::Sample& s) {
        if (s.mode != Mode::speed_hold) return false;
        if (reached < 0.0 && std::abs(s.speed_kmh - speed_kmh) < 0.5) reached = s.time_s;
        return reached >= 0.0 && s.time_s - reached >= 2.0;
      },
      600.0, nullptr, what, since);
}

std::optional<Session::Stop> Session::fault(const Result& r, const std::string& during) {
  if (r.code == kInterruptedCode) {
    emit("interrupted", {{"during", during}});
    return Stop{Outcome::interrupted, "interrupted by the operator during " + during};
  }
  emit("fault", {{"during", during}, {"message", r.message}, {"status", controller::to_string(r.status)}, {"code", r.code}});
  return Stop{Outcome::controller_fault, r.message};
}

bool Session::settle_and_clear(const std::string& when) {
  // Wait for the rollers to stand still (a watchdog's controlled stop, or ours), then clear a latched fault.
  controller::StatusReport st;
  bool stopped = false;
  for (int i = 0; i < 1200; ++i) {
    if (!c_.status(st).ok()) return false;
    t_now_ = std::max(t_now_, st.time_s);
    if (st.speed_kmh == 0.0 && (st.mode == Mode::idle || st.mode == Mode::controlled_stop)) {
      stopped = true;
      break;
    }
    if (st.mode == Mode::speed_hold || st.mode == Mode::road_load) c_.controlled_stop();
    c_.heartbeat_if_due();
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  if (!stopped) return false;
  if (!st.fault.empty()) {
    const Result cr = c_.clear_fault();
    emit("fault_cleared", {{"fault", st.fault}, {"when", when}, {"rollers", "stopped"}, {"ok", cr.ok()}, {"message", cr.message}});
    if (!cr.ok()) return false;
  }
  return true;
}

bool Session::recover_link(const std::string& why) {
  ++link_losses_;
  link_up_ = false;
  emit("link_lost", {{"why", why}, {"incident", link_losses_},
                     {"note", "the controller's watchdog takes the rollers to a stop"}});
  const auto& policy = in_.cell.reconnect;
  for (int attempt = 1; attempt <= policy.attempts; ++attempt) {
    if (stop_requested()) return false;
    std::this_thread::sleep_for(policy.delay);
    c_.disconnect();
    Result r = c_.connect();
    if (r.ok()) r = c_.identify(info_);
    emit("reconnect", {{"attempt", attempt}, {"of", policy.attempts}, {"ok", r.ok()}, {"message", r.message}});
    if (!r.ok()) continue;
    // Settle first, stream after: no stale samples from the stopping rollers reach the next wait.
    if (!settle_and_clear("after the lost link")) continue;
    if (!c_.start_stream(opt_.sample_rate_hz).ok()) continue;
    link_up_ = true;
    emit("link_restored", {{"attempt", attempt}, {"rollers", "stopped"}});
    return true;
  }
  return false;
}

std::optional<Session::Stop> Session::do_connect() {
  transition(State::connect);
  Result r = c_.connect();
  for (int attempt = 1; !r.ok() && r.status == Result::Status::retryable && attempt <= in_.cell.reconnect.attempts; ++attempt) {
    emit("reconnect", {{"attempt", attempt}, {"of", in_.cell.reconnect.attempts}, {"message", r.message}});
    std::this_thread::sleep_for(in_.cell.reconnect.delay);
    r = c_.connect();
  }
  if (!r.ok()) return fault(r, "connect");
  if (r = c_.identify(info_); !r.ok()) return fault(r, "identify");
  emit("controller", {{"name", info_.name}, {"protocol_version", info_.protocol_version}, {"capabilities", info_.capabilities},
                      {"roller_diameter_m", info_.roller_diameter_m}, {"base_inertia_kg", info_.base_inertia_kg},
                      {"max_speed_kmh", info_.max_speed_kmh}, {"max_force_n", info_.max_force_n}});
  const core::Problems mismatch = controller::check_identity(in_.cell, info_);
  if (!mismatch.empty()) {
    std::string msg;
    for (const auto& p : mismatch) msg += (msg.empty() ? "" : "; ") + p.key + ": " + p.message;
    emit("refused", {{"why", msg}});
    return Stop{Outcome::refused, "controller does not match the cell file: " + msg};
  }
  // A fault latched before we came (a watchdog stop after a lost tool): only with the rollers stopped is it cleared.
  controller::StatusReport st;
  if (r = c_.status(st); !r.ok()) return fault(r, "status");
  if (!st.fault.empty() || st.speed_kmh != 0.0) {
    emit("controller_state_on_connect", {{"fault", st.fault}, {"speed_kmh", st.speed_kmh}, {"mode", controller::to_string(st.mode)}});
    if (!settle_and_clear("on connect")) return fault(Result::fail("the controller did not reach a stopped, fault-free state"), "connect");
  }
  if (r = c_.start_stream(opt_.sample_rate_hz); !r.ok()) return fault(r, "start stream");
  link_up_ = true;
  // The first samples give the controller's clock.
  if (r = wait_for([](const controller::Sample&) { return true; }, 10.0, nullptr, "first sample"); !r.ok())
    return fault(r, "first sample");
  return std::nullopt;
}

std::optional<Session::Stop> Session::do_check_limits() {
  transition(State::check_limits);
  const auto& p = in_.profile;
  speed_limit_kmh_ = std::min({in_.cell.max_speed_kmh, in_.vehicle.max_speed_kmh, info_.max_speed_kmh});
  std::string why;
  const double start = p.start_speed_kmh();
  if (!(start < in_.cell.max_speed_kmh))
    why = "start speed " + num(start) + " km/h (top reference speed + run-up margin) is not below the cell's limit of " +
          num(in_.cell.max_speed_kmh) + " km/h";
  else if (!(start < in_.vehicle.max_speed_kmh))
    why = "start speed " + num(start) + " km/h is not below the vehicle's maximum speed of " + num(in_.vehicle.max_speed_kmh) + " km/h";
  else if (!(start < info_.max_speed_kmh))
    why = "start speed " + num(start) + " km/h is not below the controller's limit of " + num(info_.max_speed_kmh) + " km/h";
  else if (p.warm_up.speed_kmh > speed_limit_kmh_)
    why = "warm-up speed " + num(p.warm_up.speed_kmh) + " km/h is above the speed limit of " + num(speed_limit_kmh_) + " km/h";
  // A reference speed within 14 km/h of the vehicle's maximum is dropped by the standard (domain.md §2, from memory):
  // here that means the profile does not fit this vehicle.
  for (double v : p.reference_speeds_kmh)
    if (why.empty() && v + 14.0 >= in_.vehicle.max_speed_kmh)
      why = "reference speed " + num(v) + " km/h is within 14 km/h of the vehicle's maximum speed; use a profile without it";
  const double warm_total = p.warm_up.duration_s + p.warm_up.max_extra_s * (p.warm_up.stable_within_n > 0 ? 1 : 0) +
                            p.loss_map.speeds_kmh.size() * (p.loss_map.settle_s + p.loss_map.average_s + 30.0);
  if (why.empty() && warm_total > in_.cell.max_motoring_s)
    why = "the warm-up needs up to " + num(warm_total) + " s of motoring, above the cell's limit of " + num(in_.cell.max_motoring_s) + " s";
  if (!why.empty()) {
    emit("refused", {{"why", why}});
    return Stop{Outcome::refused, why};
  }
  c_.set_speed_limit(speed_limit_kmh_);
  emit("limits", {{"speed_limit_kmh", speed_limit_kmh_}, {"start_speed_kmh", start}, {"end_speed_kmh", p.end_speed_kmh()},
                  {"cell_max_speed_kmh", in_.cell.max_speed_kmh}, {"vehicle_max_speed_kmh", in_.vehicle.max_speed_kmh},
                  {"controller_max_speed_kmh", info_.max_speed_kmh}, {"max_motoring_s", in_.cell.max_motoring_s}});
  return std::nullopt;
}

std::optional<Session::Stop> Session::do_set_inertia() {
  transition(State::set_inertia);
  const auto& p = in_.profile;
  m_r_kg_ = core::resolved_rotating_mass_kg(in_.vehicle, p.mass);
  force_mass_kg_ = core::force_mass_kg(in_.vehicle.test_mass_kg, m_r_kg_);
  inertia_kg_ = core::dyno_inertia_kg(in_.vehicle.test_mass_kg, m_r_kg_, in_.cell.axles, p.mass);
  if (Result r = c_.set_inertia(inertia_kg_); !r.ok()) return fault(r, "set inertia");
  emit("inertia", {{"test_mass_kg", in_.vehicle.test_mass_kg}, {"rotating_mass_kg", m_r_kg_}, {"force_mass_kg", force_mass_kg_},
                   {"inertia_kg", inertia_kg_}, {"axles", core::to_string(in_.cell.axles)}, {"read_back", "matches"}});
  return std::nullopt;
}

std::optional<Session::Stop> Session::do_warm_up(double duration_s, bool measure_loss_map) {
  transition(State::warm_up, measure_loss_map ? "warm-up, then the loss map" : "warm-up");
  const auto& w = in_.profile.warm_up;
  if (Result r = hold_and_wait(w.speed_kmh, "warm-up run-up"); !r.ok()) return fault(r, "warm-up");
  t_motoring_from_ = t_now_;
  // The loss map is part of the warm-up, not added to it: the plain hold is shortened by the map's planned time
  // (ramps at the motoring rate, settle and average at each speed).
  double map_s = 0.0;
  if (measure_loss_map && info_.has("hold-force")) {
    double v_prev = w.speed_kmh;
    for (double v : in_.profile.loss_map.speeds_kmh)
      if (v <= speed_limit_kmh_ - 1.0) {
        map_s += std::abs(v - v_prev) / (3.6 * 1.5) + 2.0 + in_.profile.loss_map.settle_s + in_.profile.loss_map.average_s;
        v_prev = v;
      }
  }
  duration_s = std::max(0.0, duration_s - map_s);
  emit("warm_up_started", {{"speed_kmh", w.speed_kmh}, {"duration_s", duration_s}, {"loss_map_planned_s", map_s}});
  const double t0 = t_now_;
  // Hold for the time, keeping the load-cell force of the last stability window.
  std::vector<double> window_means;
  double sum = 0.0;
  int n = 0;
  double window_start = t0;
  bool stable = w.stable_within_n <= 0.0;
  Result r = wait_for(
      [&](const controller::Sample& s) {
        sum += s.force_n;
        ++n;
        if (s.time_s - window_start >= w.stable_window_s) {
          window_means.push_back(sum / std::max(1, n));
          sum = 0.0;
          n = 0;
          window_start = s.time_s;
          if (window_means.size() >= 2 && w.stable_within_n > 0.0 &&
              std::abs(window_means.back() - window_means[window_means.size() - 2]) < w.stable_within_n)
            stable = true;
        }
        const double held = s.time_s - t0;
        return held >= duration_s && (stable || held >= duration_s + w.max_extra_s);
      },
      duration_s + w.max_extra_s + 60.0, nullptr, "warm-up");
  if (!r.ok()) return fault(r, "warm-up");
  emit("warm_up", {{"speed_kmh", w.speed_kmh}, {"held_s", t_now_ - t0}, {"stable", stable},
                   {"stability_threshold_n", w.stable_within_n},
                   {"last_window_force_n", window_means.empty() ? nlohmann::json(nullptr) : nlohmann::json(window_means.back())}});
  if (measure_loss_map) {
    loss_map_.clear();
    if (!info_.has("hold-force")) {
      emit("loss_map_skipped", {{"why", "the controller does not report force in speed hold"}});
    } else {
      for (double v : in_.profile.loss_map.speeds_kmh) {
        if (v > speed_limit_kmh_ - 1.0) {
          emit("loss_map_point_skipped", {{"speed_kmh", v}, {"why", "above the speed limit"}});
          continue;
        }
        if (Result rr = hold_and_wait(v, "loss-map hold"); !rr.ok()) return fault(rr, "loss map");
        const double ts = t_now_;
        if (Result rr = wait_for([&](const controller::Sample& s) { return s.time_s - ts >= in_.profile.loss_map.settle_s; },
                                 in_.profile.loss_map.settle_s + 30.0, nullptr, "loss-map settle");
            !rr.ok())
          return fault(rr, "loss map");
        std::vector<controller::Sample> avg;
        const double ta = t_now_;
        if (Result rr = wait_for([&](const controller::Sample& s) { return s.time_s - ta >= in_.profile.loss_map.average_s; },
                                 in_.profile.loss_map.average_s + 30.0, &avg, "loss-map average");
            !rr.ok())
          return fault(rr, "loss map");
        core::HoldPoint hp;
        hp.speed_kmh = v;
        double s1 = 0, s2 = 0;
        for (const auto& s : avg) {
          s1 += s.force_n;
          s2 += s.force_n * s.force_n;
        }
        hp.samples = static_cast<int>(avg.size());
        hp.force_n = s1 / std::max<std::size_t>(1, avg.size());
        hp.force_sd_n = std::sqrt(std::max(0.0, s2 / std::max<std::size_t>(1, avg.size()) - hp.force_n * hp.force_n));
        loss_map_.push_back(hp);
        emit("loss_map_point", {{"speed_kmh", v}, {"force_n", hp.force_n}, {"force_sd_n", hp.force_sd_n}, {"samples", hp.samples}});
      }
    }
  }
  t_warm_end_ = t_now_;
  emit("warm_up_ended", {{"t_s", t_warm_end_}});
  return std::nullopt;
}

std::optional<Session::Stop> Session::do_run(int run) {
  const auto& p = in_.profile;
  auto link_or_fault = [&](const Result& r, const char* during) -> std::optional<Stop> {
    if (r.status == Result::Status::retryable && r.code != kInterruptedCode) {
      emit("coastdown_discarded", {{"run", run}, {"why", std::string("link lost during ") + during + ": " + r.message}});
      ++unusable_;
      ++discarded_;
      if (!recover_link(r.message)) return fault(r, during);
      if (unusable_ >= p.max_unusable_runs)
        return Stop{Outcome::not_accepted, "too many unusable coast-downs (" + std::to_string(unusable_) + ")"};
      // The rollers stopped: re-warm before the repeat, so the 120 s rule applies to a warm vehicle again.
      const double rewarm = opt_.resume_warm_up_s >= 0.0 ? opt_.resume_warm_up_s : p.warm_up.duration_s;
      if (auto s = do_set_inertia()) return s;
      if (auto s = do_warm_up(rewarm, false)) return s;
      return std::nullopt;
    }
    return fault(r, during);
  };
  transition(State::write_set, "coast-down " + std::to_string(run));
  if (Result r = c_.set_coefficients(set_); !r.ok()) return link_or_fault(r, "write set");
  if (!last_written_ || !(*last_written_ == set_)) ++iterations_;
  last_written_ = set_;
  if (!emit("set_written", {{"run", run}, {"set", coefficients_json(set_)}, {"read_back", "matches"}, {"iteration", iterations_}}))
    return Stop{Outcome::record_failure, record_error_};
  if (t_motoring_from_ >= 0.0 && t_now_ - t_motoring_from_ > in_.cell.max_motoring_s)
    return Stop{Outcome::not_accepted, "the cell's motoring-time limit of " + num(in_.cell.max_motoring_s) + " s was reached"};

  transition(State::run_up);
  const double t_ru = t_now_;
  if (!emit("coastdown_started", {{"run", run}, {"set", coefficients_json(set_)}, {"start_speed_kmh", p.start_speed_kmh()}}))
    return Stop{Outcome::record_failure, record_error_};
  if (Result r = hold_and_wait(p.start_speed_kmh(), "run-up"); !r.ok()) return link_or_fault(r, "run-up");
  const double run_up_s = t_now_ - t_ru;

  transition(State::coast_down);
  if (Result r = c_.release_road_load(); !r.ok()) return link_or_fault(r, "release");
  std::vector<controller::Sample> trace;
  const double end = p.end_speed_kmh();
  // A coast that takes three times the target's predicted time (or 5 min, whichever is longer) means the set load
  // plus the vehicle's loss leaves too little retarding force: the dyno is nearly driving the car.
  const double predicted = core::coastdown_time_s(in_.vehicle.target, force_mass_kg_, p.start_speed_kmh(), end).value_or(300.0);
  const double budget = std::max(300.0, 3.0 * predicted);
  // The run-up wait consumed everything before the release, so the road-load samples from here on are this coast.
  Result r = wait_for(
      [&](const controller::Sample& s) { return s.mode == Mode::road_load && s.speed_kmh < end; }, budget, &trace,
      "coast-down");
  if (r.code == kTooSlowCode) {
    // Leave road-load simulation at once, count the run unusable and fall back to the standard's default setting.
    if (Result h = c_.hold_speed(std::max(10.0, end)); !h.ok()) return link_or_fault(h, "after a too slow coast-down");
    ++unusable_;
    ++discarded_;
    const core::RoadLoad fallback = core::standard_initial_setting(in_.vehicle.target, in_.cell.axles, p.initial);
    emit("coastdown_discarded", {{"run", run}, {"why", r.message + ": too little retarding force with this setting"},
                                 {"next_set", coefficients_json(fallback)}, {"note", "falling back to the standard's default setting"}});
    set_ = fallback;
    if (unusable_ >= p.max_unusable_runs)
      return Stop{Outcome::not_accepted, "too many unusable coast-downs (" + std::to_string(unusable_) + ")"};
    return std::nullopt;
  }
  if (!r.ok()) return link_or_fault(r, "coast-down");
  // Keep only the road-load part (samples queued before the release still say HOLD).
  trace.erase(std::remove_if(trace.begin(), trace.end(), [](const controller::Sample& s) { return s.mode != Mode::road_load; }),
              trace.end());
  // Keep the vehicle turning for the next run: leave road-load simulation for a low speed hold at once.
  if (Result h = c_.hold_speed(std::max(10.0, end)); !h.ok()) return link_or_fault(h, "after coast-down");
  const double release = trace.empty() ? t_now_ : trace.front().time_s;
  if (t_last_coast_end_ < 0.0 || coastdowns_ == 0) {
    const double gap = release - t_warm_end_;
    const bool within = gap <= p.max_gap_after_warmup_s;
    emit(within ? "timing" : "timing_rule_missed",
         {{"rule", "first coast-down released within " + num(p.max_gap_after_warmup_s) + " s of the warm-up end (EU SA4 §8.1.2-8.1.3)"},
          {"gap_s", gap}, {"within", within}});
  } else {
    emit("timing", {{"rule", "consecutive coast-downs start immediately (EU SA4 §8.1.3)"}, {"gap_since_last_coast_s", release - t_last_coast_end_}});
  }
  t_last_coast_end_ = t_now_;

  transition(State::analyse);
  std::vector<double> ts, vs;
  ts.reserve(trace.size());
  vs.reserve(trace.size());
  for (const auto& s : trace) {
    ts.push_back(s.time_s);
    vs.push_back(s.speed_kmh);
  }
  CoastdownRecord rec;
  rec.run = run;
  rec.set = set_;
  rec.release_time_s = release;
  rec.duration_s = trace.empty() ? 0.0 : trace.back().time_s - trace.front().time_s;
  rec.run_up_s = run_up_s;
  rec.verifying = method_->verifying();
  {
    // The analysis (the whole-trace fit above all) runs on a worker thread while this one keeps the link alive:
    // the controller's watchdog must never see the tool fall silent while the vehicle turns.
    core::EvaluationOptions eo;
    eo.whole_trace = opt_.whole_trace_estimator;
    auto job = std::async(std::launch::async,
                          [&] { return core::evaluate_coastdown({ts, vs}, p, in_.vehicle.target, force_mass_kg_, eo); });
    while (job.wait_for(std::chrono::milliseconds(20)) != std::future_status::ready)
      if (Result hb = c_.heartbeat_if_due(); !hb.ok()) {
        rec.evaluation = job.get();
        return link_or_fault(hb, "analysis");
      }
    rec.evaluation = job.get();
  }
  ++coastdowns_;
  if (!rec.evaluation.usable) {
    ++unusable_;
    nlohmann::json j = to_json(rec, p);
    if (!emit("coastdown", j, &trace)) return Stop{Outcome::record_failure, record_error_};
    if (unusable_ >= p.max_unusable_runs)
      return Stop{Outcome::not_accepted, "too many unusable coast-downs (" + std::to_string(unusable_) + "): " + rec.evaluation.unusable_reason};
  } else {
    rec.decision = method_->on_coastdown(set_, rec.evaluation.fit.coefficients, rec.evaluation.check.pass);
    nlohmann::json j = to_json(rec, p);
    // Predicted band times for the target at TM + m_r, beside the measured ones (what the rollers should do).
    const auto predicted = core::predicted_band_times_s(in_.vehicle.target, force_mass_kg_, p.reference_speeds_kmh, p.band_half_width_kmh);
    for (std::size_t i = 0; i < predicted.size() && i < j["bands"].size(); ++i)
      if (predicted[i]) j["bands"][i]["predicted_delta_t_s"] = *predicted[i];
    last_ = rec;
    if (!emit("coastdown", j, &trace)) return Stop{Outcome::record_failure, record_error_};
    if (rec.decision.kind == core::Decision::Kind::accepted) {
      final_set_ = rec.decision.next_set;
      return Stop{Outcome::accepted, rec.decision.reason};
    }
    if (rec.decision.kind == core::Decision::Kind::rejected) return Stop{Outcome::not_accepted, rec.decision.reason};
    set_ = rec.decision.next_set;
  }
  if (coastdowns_ >= p.max_coastdowns)
    return Stop{Outcome::not_accepted, "iteration limit of " + std::to_string(p.max_coastdowns) + " coast-downs reached"};
  return std::nullopt;
}

void Session::do_safe_stop() {
  transition(State::safe_stop);
  if (!link_up_) {
    emit("safe_stop", {{"how", "link down: the controller's watchdog takes the rollers to a controlled stop"}});
    return;
  }
  Result r = c_.controlled_stop();
  if (r.status == Result::Status::retryable && !stop_requested()) {
    // The link failed: one reconnection to command the stop ourselves rather than wait for the watchdog.
    c_.disconnect();
    if (c_.connect().ok()) r = c_.controlled_stop();
    emit("safe_stop_reconnect", {{"ok", r.ok()}, {"message", r.message}});
  }
  if (!r.ok()) {
    emit("safe_stop", {{"how", "controlled stop refused or not confirmed; the controller's watchdog will stop the rollers"},
                       {"message", r.message}});
    return;
  }
  // Wait (without the operator's stop flag: stopping is what it asked for) until the rollers stand still.
  double last = -1.0;
  controller::StatusReport st;
  for (int i = 0; i < 2000; ++i) {
    std::vector<controller::Sample> got;
    if (!c_.receive_samples(got).ok()) break;
    if (!got.empty()) {
      last = got.back().speed_kmh;
      t_now_ = got.back().time_s;
      if (last == 0.0 && got.back().mode == Mode::idle) break;
    }
  }
  c_.stop_stream();
  const bool stopped = c_.status(st).ok() && st.speed_kmh == 0.0;
  emit("safe_stop", {{"how", "controlled stop"}, {"rollers_stopped", stopped}, {"speed_kmh", st.speed_kmh}, {"mode", controller::to_string(st.mode)}});
}

Summary Session::run(const ResumePoint* resume) {
  // Records wait for the disk (fsync) and large traces take time to hash and write: a thread of its own keeps the
  // controller's watchdog fed meanwhile, for the whole session.
  const controller::KeepAlive keep_alive(c_);
  const auto& p = in_.profile;
  method_ = std::make_unique<core::SettingMethodState>(in_.profile, in_.vehicle.target);
  int run_no = 1;
  if (resume) {
    cell_time_before_ = resume->cell_time_s;
    for (const auto& r : resume->completed) {
      if (r.value("usable", false))
        method_->on_coastdown(coefficients_from_json(r.at("set")), coefficients_from_json(r.at("simulated")),
                              r.at("check").at("pass").get<bool>());
      run_no = std::max(run_no, r.at("run").get<int>() + 1);
    }
    coastdowns_ = static_cast<int>(resume->completed.size());
    unusable_ = resume->unusable;
    set_ = resume->next_set;
    first_setting_ = resume->strategy;
    if (resume->discarded_run) run_no = std::max(run_no, *resume->discarded_run + 1);
    emit("resumed", {{"completed_coastdowns", coastdowns_}, {"unusable", unusable_}, {"next_set", coefficients_json(set_)},
                     {"discarded_run", resume->discarded_run ? nlohmann::json(*resume->discarded_run) : nlohmann::json(nullptr)},
                     {"note", resume->discarded_run ? "the half-recorded coast-down is discarded and run again" : "no run was in progress"}});
  }
  std::optional<Stop> stop = do_connect();
  if (!stop) stop = do_check_limits();
  if (!stop) stop = do_set_inertia();
  const bool want_map = !resume && !in_.vehicle.initial_set && opt_.first_setting == core::FirstSetting::loss_map;
  if (!stop) {
    const double warm = resume && opt_.resume_warm_up_s >= 0.0 ? opt_.resume_warm_up_s : p.warm_up.duration_s;
    stop = do_warm_up(warm, want_map);
  }
  if (!stop && !resume) {
    // The first setting.
    std::string used = core::to_string(opt_.first_setting), why;
    core::RoadLoad loss;
    bool have_loss = false;
    auto fallback = [&](const std::string& reason) {
      why += (why.empty() ? "" : "; ") + reason;
      if (opt_.history) {
        used = "history";
        loss = opt_.history->loss();
        have_loss = true;
      } else if (opt_.fleet && opt_.fleet->ok()) {
        used = "fleet";
        loss = opt_.fleet->estimate(in_.vehicle.test_mass_kg, in_.cell.axles);
        have_loss = true;
      } else {
        used = "standard";
      }
    };
    nlohmann::json inputs = nlohmann::json::object();
    if (in_.vehicle.initial_set) {
      used = "target-file";
      set_ = *in_.vehicle.initial_set;
    } else {
      switch (opt_.first_setting) {
        case core::FirstSetting::standard: break;
        case core::FirstSetting::fleet:
          if (opt_.fleet && opt_.fleet->ok()) {
            loss = opt_.fleet->estimate(in_.vehicle.test_mass_kg, in_.cell.axles);
            have_loss = true;
          } else {
            used = "standard";
            why = "no fleet data";
          }
          break;
        case core::FirstSetting::history:
          if (opt_.history) {
            loss = opt_.history->loss();
            have_loss = true;
            inputs["history_utc"] = opt_.history->utc;
          } else {
            opt_.history.reset();
            fallback("no earlier session of this vehicle on this cell");
          }
          break;
        case core::FirstSetting::loss_map: {
          const core::RoadLoadFit fit = core::fit_loss_map(loss_map_);
          if (fit.ok) {
            loss = fit.coefficients;
            have_loss = true;
            inputs["loss_map_fit"] = coefficients_json(fit.coefficients);
            inputs["loss_map_residual_sd_n"] = fit.residual_sd_n;
          } else {
            fallback("no loss map (" + (loss_map_.empty() ? std::string("not measured") : fit.message) + ")");
          }
          break;
        }
      }
      set_ = have_loss ? core::setting_for_loss(in_.vehicle.target, loss)
                       : core::standard_initial_setting(in_.vehicle.target, in_.cell.axles, p.initial);
      if (have_loss) inputs["loss"] = coefficients_json(loss);
    }
    first_setting_ = used;
    if (!emit("first_setting", {{"requested", core::to_string(opt_.first_setting)}, {"strategy", used}, {"fallback_reason", why},
                                {"set", coefficients_json(set_)}, {"inputs", inputs}}))
      stop = Stop{Outcome::record_failure, record_error_};
  }
  while (!stop) {
    stop = do_run(run_no++);
    if (!stop && record_failed_) stop = Stop{Outcome::record_failure, record_error_};
  }
  if (record_failed_ && stop->outcome != Outcome::record_failure) stop = Stop{Outcome::record_failure, record_error_};
  do_safe_stop();
  transition(State::finished, to_string(stop->outcome));
  Summary s;
  s.outcome = stop->outcome;
  s.stop_reason = stop->reason;
  s.iterations = iterations_;
  s.coastdowns = coastdowns_;
  s.usable_coastdowns = coastdowns_ - (unusable_ - discarded_);
  s.cell_time_s = t_start_ >= 0.0 ? cell_time_before_ + t_now_ - t_start_ : cell_time_before_;
  s.first_setting = first_setting_;
  if (final_set_) s.final_set = core::rounded(*final_set_, p.rounding);
  if (last_) {
    s.measured = last_->evaluation.fit.coefficients;
    s.deviations = last_->evaluation.check.rows;
  }
  emit("finished", to_json(s));
  return s;
}

}  // namespace loadtrim::session
