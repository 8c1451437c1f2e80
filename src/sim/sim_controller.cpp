#include "sim/sim_controller.hpp"

#include <algorithm>
#include <cmath>

namespace loadtrim::sim {

using line::ErrorCode;
using line::kv;
using physics::Mode;

namespace {
controller::Mode to_controller(Mode m) {
  switch (m) {
    case Mode::idle:
      return controller::Mode::idle;
    case Mode::speed_hold:
      return controller::Mode::speed_hold;
    case Mode::road_load:
      return controller::Mode::road_load;
    case Mode::controlled_stop:
      return controller::Mode::controlled_stop;
    case Mode::constant_force:
      return controller::Mode::constant_force;
  }
  return controller::Mode::idle;
}
// The fault plan names modes in the line protocol's words (--drop-in-mode HOLD).
const char* wire(controller::Mode m) {
  switch (m) {
    case controller::Mode::idle:
      return line::kModeIdle;
    case controller::Mode::speed_hold:
      return line::kModeHold;
    case controller::Mode::road_load:
      return line::kModeRoadLoad;
    case controller::Mode::controlled_stop:
      return line::kModeStop;
    case controller::Mode::constant_force:
      return line::kModeForce;
    case controller::Mode::free_coast:
      return line::kModeIdle;  // reported as idle while coasting
  }
  return line::kModeIdle;
}
}  // namespace

SimController::SimController(const physics::Truth& truth, SimSettings settings)
    : model_(truth), settings_(std::move(settings)), status_rng_(truth.noise_seed ^ 0x5A17u) {}

std::string SimController::wire_mode() const {
  return wire(to_controller(model_.mode()));
}

std::uint32_t SimController::flags() const {
  std::uint32_t f = 0;
  if (!fault_.empty()) f |= controller::kFlagFault;
  if (fault_ == "ESTOP") f |= controller::kFlagEstop;
  if (fault_ == "WATCHDOG") f |= controller::kFlagWatchdog;
  if (model_.mode() == Mode::speed_hold && std::abs(model_.speed_kmh() - model_.hold_target_kmh()) < 0.1)
    f |= controller::kFlagAtSetpoint;
  return f;
}

std::optional<SimError> SimController::hello(int version) {
  if (version != line::kProtocolVersion)
    return SimError{ErrorCode::bad_argument, "unsupported protocol version"};
  return std::nullopt;
}

controller::ControllerInfo SimController::info() const {
  const auto& d = model_.truth().dyno;
  controller::ControllerInfo i;
  i.name = settings_.name;
  i.protocol_version = line::kProtocolVersion;
  i.capabilities = kCapabilities;
  i.roller_diameter_m = settings_.faults.report_roller_diameter_m.value_or(d.roller_diameter_m);
  i.base_inertia_kg = settings_.faults.report_base_inertia_kg.value_or(model_.stated_base_inertia_kg());
  i.max_speed_kmh = settings_.max_speed_kmh;
  i.max_force_n = settings_.max_force_n;
  i.time_scale = settings_.time_scale;
  return i;
}

std::optional<SimError> SimController::set_inertia(double kg) {
  if (kg < 100.0 || kg > 10000.0)
    return SimError{ErrorCode::out_of_limits, "inertia allowed 100 to 10000 kg"};
  if (model_.mode() == Mode::road_load)
    return SimError{ErrorCode::wrong_state, "not during road-load simulation"};
  model_.set_inertia_kg(kg);
  return std::nullopt;
}

std::optional<SimError> SimController::set_coefficients(const core::RoadLoad& c) {
  if (std::abs(c.f0_n) > settings_.max_force_n)
    return SimError{ErrorCode::out_of_limits, "f0 above the force limit"};
  if (model_.mode() == Mode::road_load)
    return SimError{ErrorCode::wrong_state, "not during road-load simulation"};
  model_.set_coefficients(c);
  return std::nullopt;
}

std::optional<SimError> SimController::command(controller::Mode mode, double hold_kmh) {
  const bool moving = mode == controller::Mode::speed_hold || mode == controller::Mode::road_load ||
                      mode == controller::Mode::constant_force;
  if (moving && !fault_.empty())
    return SimError{ErrorCode::fault_active, "fault " + fault_ + " latched: CLEAR first"};
  switch (mode) {
    case controller::Mode::speed_hold:
      if (!(hold_kmh >= 0.0)) return SimError{ErrorCode::bad_argument, "MODE HOLD needs a speed in km/h"};
      if (hold_kmh > settings_.max_speed_kmh)
        return SimError{ErrorCode::out_of_limits, "speed above the controller limit"};
      model_.hold_speed(hold_kmh);
      break;
    case controller::Mode::road_load:
      model_.release_road_load();
      break;
    case controller::Mode::controlled_stop:
      model_.controlled_stop();
      break;
    case controller::Mode::idle:
      if (model_.speed_kmh() > 0.5) return SimError{ErrorCode::wrong_state, "rollers turning: STOP first"};
      model_.idle();
      break;
    case controller::Mode::free_coast:
      model_.idle();
      break;  // the motor lets go at any speed
    case controller::Mode::constant_force:
      if (!(std::abs(hold_kmh) <= settings_.max_force_n))
        return SimError{ErrorCode::out_of_limits, "force above the controller limit"};
      model_.apply_force(hold_kmh);
      break;
  }
  mode_since_s_ = model_.time_s();
  return std::nullopt;
}

std::optional<SimError> SimController::stream(double rate_hz) {
  if (!(rate_hz == 0.0 || (rate_hz >= 10.0 && rate_hz <= 1000.0)))
    return SimError{ErrorCode::bad_argument, "STREAM <rate_hz> with 10 to 1000 Hz, or 0 to stop"};
  stream_hz_ = rate_hz;
  next_sample_s_ = model_.time_s();
  return std::nullopt;
}

std::optional<SimError> SimController::clear() {
  if (model_.speed_kmh() > 0.5) return SimError{ErrorCode::wrong_state, "rollers still turning"};
  fault_.clear();
  return std::nullopt;
}

controller::Sample SimController::reading() {
  const physics::Sample s = model_.sample();
  return {sample_index_++, s.time_s, std::max(0.0, s.speed_kmh), s.force_n, to_controller(model_.mode()),
          flags()};
}

controller::StatusReport SimController::status() const {
  // The encoder's reading as the samples carry it: noise on top, never below zero.
  const double noisy = model_.speed_kmh() + model_.truth().dyno.speed_noise_kmh * status_normal_(status_rng_);
  return {to_controller(model_.mode()), std::max(0.0, noisy), model_.time_s(), flags(), fault_};
}

void SimController::latch_fault(const std::string& kind, const std::string& detail,
                                std::vector<std::string>& events) {
  fault_ = kind;
  if (model_.speed_kmh() > 0.0)
    model_.controlled_stop();
  else
    model_.idle();
  std::string d = detail;  // one field on the wire: no spaces
  for (char& ch : d)
    if (ch == ' ') ch = '_';
  events.push_back("FAULT " + kv("kind", kind) + " " + kv("detail", d) + " " + kv("time_s", model_.time_s()));
}

void SimController::advance_typed(double dt, std::vector<controller::Sample>& samples,
                                  std::vector<std::string>& events) {
  const double end = model_.time_s() + dt;
  const auto& fp = settings_.faults;
  // Fixed 10 ms integration steps at most: the dynamics are slow and smooth (RK4 error far below the noise).
  constexpr double kStep = 0.01;
  while (stream_hz_ > 0.0 && next_sample_s_ <= end + 1e-12) {
    model_.advance(next_sample_s_ - model_.time_s(), kStep);
    if (!(fp.stall_at_s && model_.time_s() >= *fp.stall_at_s)) {
      const physics::Sample s = model_.sample();
      samples.push_back({sample_index_++, s.time_s, std::max(0.0, s.speed_kmh), s.force_n,
                         to_controller(model_.mode()), flags()});
    }
    next_sample_s_ += 1.0 / stream_hz_;
  }
  model_.advance(end - model_.time_s(), kStep);
  if (fp.estop_at_s && !estop_done_ && model_.time_s() >= *fp.estop_at_s) {
    estop_done_ = true;
    latch_fault("ESTOP", "emergency stop raised at the controller", events);
  }
  if (!dropped_once_) {
    const bool by_time = fp.drop_at_s && model_.time_s() >= *fp.drop_at_s;
    const bool by_mode = fp.drop_in_mode && wire_mode() == *fp.drop_in_mode &&
                         model_.time_s() - mode_since_s_ >= fp.drop_after_s;
    if (by_time || by_mode) {
      dropped_once_ = true;
      drop_pending_ = true;
    }
  }
}

void SimController::check_watchdog_typed(double wall_s, std::vector<std::string>& events) {
  const Mode m = model_.mode();
  if ((m == Mode::speed_hold || m == Mode::road_load || m == Mode::constant_force) &&
      wall_s - last_request_wall_s_ > settings_.watchdog_s)
    latch_fault("WATCHDOG", "no request within the watchdog window: controlled stop", events);
}

bool SimController::take_drop_request() {
  const bool d = drop_pending_;
  drop_pending_ = false;
  return d;
}

}  // namespace loadtrim::sim
