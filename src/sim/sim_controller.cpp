#include "sim/sim_controller.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <utility>

namespace loadtrim::sim {

using controller::Mode;

std::string event_text(const FaultEvent& e) {
  std::string d = e.detail;  // one field: no spaces
  for (char& ch : d)
    if (ch == ' ') ch = '_';
  char t[40];
  std::snprintf(t, sizeof t, "%.17g", e.time_s);  // parses back to the same double
  return std::string("FAULT kind=") + to_string(e.kind) + " detail=" + d + " time_s=" + t;
}

const char* to_string(FaultKind k) {
  switch (k) {
    case FaultKind::watchdog:
      return "WATCHDOG";
    case FaultKind::estop:
      return "ESTOP";
    case FaultKind::overspeed:
      return "OVERSPEED";
  }
  return "FAULT";
}

namespace {
template <class... F>
struct Overloaded : F... {
  using F::operator()...;
};
template <class... F>
Overloaded(F...) -> Overloaded<F...>;
}  // namespace

Mode mode_of(const Command& c) {
  return std::visit(
      Overloaded{[](cmd::Idle) { return Mode::idle; }, [](cmd::HoldSpeed) { return Mode::speed_hold; },
                 [](cmd::ReleaseRoadLoad) { return Mode::road_load; },
                 [](cmd::ControlledStop) { return Mode::controlled_stop; },
                 [](cmd::ApplyForce) { return Mode::constant_force; },
                 [](cmd::FreeCoast) { return Mode::free_coast; }},
      c);
}

Command command_for(Mode mode, double value) {
  switch (mode) {
    case Mode::idle:
      return cmd::Idle{};
    case Mode::speed_hold:
      return cmd::HoldSpeed{value};
    case Mode::road_load:
      return cmd::ReleaseRoadLoad{};
    case Mode::controlled_stop:
      return cmd::ControlledStop{};
    case Mode::constant_force:
      return cmd::ApplyForce{value};
    case Mode::free_coast:
      return cmd::FreeCoast{};
  }
  return cmd::Idle{};
}

SimController::SimController(const physics::Truth& truth, SimSettings settings)
    : model_(truth), settings_(std::move(settings)), status_rng_(truth.noise_seed ^ 0x5A17u) {}

Mode SimController::reported_mode() const {
  const Mode m = model_.mode();
  return m == Mode::free_coast ? Mode::idle : m;
}

std::uint32_t SimController::flags() const {
  std::uint32_t f = 0;
  if (fault_) f |= controller::kFlagFault;
  if (fault_ == FaultKind::estop) f |= controller::kFlagEstop;
  if (fault_ == FaultKind::watchdog) f |= controller::kFlagWatchdog;
  if (model_.mode() == Mode::speed_hold && std::abs(model_.speed_kmh() - model_.hold_target_kmh()) < 0.1)
    f |= controller::kFlagAtSetpoint;
  if (!settings_.hide_neutral && model_.driver_prompt() != controller::DriverPrompt::off &&
      model_.in_neutral())
    f |= controller::kFlagNeutral;
  return f;
}

std::optional<SimError> SimController::hello(int version) {
  if (version != kProtocolVersion) return SimError{Cause::bad_argument, "unsupported protocol version"};
  return std::nullopt;
}

controller::ControllerInfo SimController::info() const {
  const auto& d = model_.truth().dyno;
  controller::ControllerInfo i;
  i.name = settings_.name;
  i.protocol_version = kProtocolVersion;
  i.capabilities = kCapabilities;
  if (!settings_.hide_neutral) i.capabilities += ",neutral";
  i.roller_diameter_m = settings_.faults.report_roller_diameter_m.value_or(d.roller_diameter_m);
  i.base_inertia_kg = settings_.faults.report_base_inertia_kg.value_or(model_.stated_base_inertia_kg());
  i.max_speed_kmh = settings_.max_speed_kmh;
  i.max_force_n = settings_.max_force_n;
  i.time_scale = settings_.time_scale;
  return i;
}

std::optional<SimError> SimController::set_inertia(double kg) {
  if (kg < 100.0 || kg > 10000.0) return SimError{Cause::out_of_limits, "inertia allowed 100 to 10000 kg"};
  if (model_.mode() == Mode::road_load)
    return SimError{Cause::wrong_state, "not during road-load simulation"};
  model_.set_inertia_kg(kg);
  return std::nullopt;
}

std::optional<SimError> SimController::set_coefficients(const core::RoadLoad& c) {
  if (std::abs(c.f0_n) > settings_.max_force_n)
    return SimError{Cause::out_of_limits, "f0 above the force limit"};
  if (model_.mode() == Mode::road_load)
    return SimError{Cause::wrong_state, "not during road-load simulation"};
  model_.set_coefficients(c);
  return std::nullopt;
}

std::optional<SimError> SimController::command(const Command& c) {
  const Mode mode = mode_of(c);
  const bool moving = mode == Mode::speed_hold || mode == Mode::road_load || mode == Mode::constant_force;
  if (moving && fault_)
    return SimError{Cause::fault_active,
                    std::string("fault ") + to_string(*fault_) + " latched: CLEAR first"};
  // One overload per command below: a command without one does not compile.
  const std::optional<SimError> e = std::visit([&](const auto& x) { return run(x); }, c);
  if (e) return e;
  mode_since_s_ = model_.time_s();
  return std::nullopt;
}

std::optional<SimError> SimController::run(const cmd::HoldSpeed& h) {
  if (!(h.speed_kmh >= 0.0)) return SimError{Cause::bad_argument, "MODE HOLD needs a speed in km/h"};
  if (h.speed_kmh > settings_.max_speed_kmh)
    return SimError{Cause::out_of_limits, "speed above the controller limit"};
  model_.hold_speed(h.speed_kmh);
  return std::nullopt;
}
std::optional<SimError> SimController::run(const cmd::ApplyForce& f) {
  if (!(std::abs(f.force_n) <= settings_.max_force_n))
    return SimError{Cause::out_of_limits, "force above the controller limit"};
  model_.apply_force(f.force_n);
  return std::nullopt;
}
std::optional<SimError> SimController::run(const cmd::ReleaseRoadLoad&) {
  model_.release_road_load();
  return std::nullopt;
}
std::optional<SimError> SimController::run(const cmd::ControlledStop&) {
  model_.controlled_stop();
  return std::nullopt;
}
std::optional<SimError> SimController::run(const cmd::Idle&) {
  if (model_.speed_kmh() > 0.5) return SimError{Cause::wrong_state, "rollers turning: STOP first"};
  model_.idle();
  return std::nullopt;
}
std::optional<SimError> SimController::run(const cmd::FreeCoast&) {
  model_.free_coast();  // the motor lets go at any speed
  return std::nullopt;
}

std::optional<SimError> SimController::stream(double rate_hz) {
  if (!(rate_hz == 0.0 || (rate_hz >= 10.0 && rate_hz <= 1000.0)))
    return SimError{Cause::bad_argument, "STREAM <rate_hz> with 10 to 1000 Hz, or 0 to stop"};
  stream_hz_ = rate_hz;
  next_sample_s_ = model_.time_s();
  return std::nullopt;
}

std::optional<SimError> SimController::prompt_driver(controller::DriverPrompt p, double speed_kmh) {
  if (p == controller::DriverPrompt::accelerate) {
    if (!(speed_kmh > 0.0) || speed_kmh > settings_.max_speed_kmh)
      return SimError{Cause::out_of_limits, "DRIVER ACCEL needs a speed above 0 and within the speed limit"};
    if (fault_)
      return SimError{Cause::fault_active,
                      std::string("fault ") + to_string(*fault_) + " latched: CLEAR first"};
  }
  model_.prompt_driver(p, speed_kmh);
  return std::nullopt;
}

std::optional<SimError> SimController::clear() {
  if (model_.speed_kmh() > 0.5) return SimError{Cause::wrong_state, "rollers still turning"};
  fault_.reset();
  return std::nullopt;
}

controller::Sample SimController::reading() {
  const physics::Sample s = model_.sample();
  return {sample_index_++, s.time_s, std::max(0.0, s.speed_kmh), s.force_n, reported_mode(), flags()};
}

controller::StatusReport SimController::status() const {
  // The encoder's reading as the samples carry it: noise on top, never below zero.
  const double noisy = model_.speed_kmh() + model_.truth().dyno.speed_noise_kmh * status_normal_(status_rng_);
  return {reported_mode(), std::max(0.0, noisy), model_.time_s(), flags(),
          fault_ ? std::string(to_string(*fault_)) : std::string()};
}

void SimController::latch_fault(FaultKind kind, std::string detail, std::vector<FaultEvent>& events) {
  fault_ = kind;
  model_.prompt_driver(controller::DriverPrompt::off);  // the display says stop: the driver lets go
  if (model_.speed_kmh() > 0.0)
    model_.controlled_stop();
  else
    model_.idle();
  events.push_back({kind, std::move(detail), model_.time_s()});
}

void SimController::advance_typed(double dt, std::vector<controller::Sample>& samples,
                                  std::vector<FaultEvent>& events) {
  const double end = model_.time_s() + dt;
  const auto& fp = settings_.faults;
  // Fixed 10 ms integration steps at most: the dynamics are slow and smooth (RK4 error far below the noise).
  constexpr double kStep = 0.01;
  while (stream_hz_ > 0.0 && next_sample_s_ <= end + 1e-12) {
    model_.advance(next_sample_s_ - model_.time_s(), kStep);
    check_overspeed(events);
    if (!(fp.stall_at_s && model_.time_s() >= *fp.stall_at_s)) {
      const physics::Sample s = model_.sample();
      samples.push_back(
          {sample_index_++, s.time_s, std::max(0.0, s.speed_kmh), s.force_n, reported_mode(), flags()});
    }
    next_sample_s_ += 1.0 / stream_hz_;
  }
  model_.advance(end - model_.time_s(), kStep);
  check_overspeed(events);
  if (fp.estop_at_s && !estop_done_ && model_.time_s() >= *fp.estop_at_s) {
    estop_done_ = true;
    latch_fault(FaultKind::estop, "emergency stop raised at the controller", events);
  }
  if (!dropped_once_) {
    const bool by_time = fp.drop_at_s && model_.time_s() >= *fp.drop_at_s;
    const bool by_mode = fp.drop_in_mode && reported_mode() == *fp.drop_in_mode &&
                         model_.time_s() - mode_since_s_ >= fp.drop_after_s;
    if (by_time || by_mode) {
      dropped_once_ = true;
      drop_pending_ = true;
    }
  }
}

void SimController::check_overspeed(std::vector<FaultEvent>& events) {
  // A fault already latched has the rollers in a controlled stop and moving commands refused: it stands.
  if (!fault_ && model_.speed_kmh() > kOverspeedTripFactor * settings_.max_speed_kmh)
    latch_fault(FaultKind::overspeed, "rollers above the over-speed trip: controlled stop", events);
}

void SimController::check_watchdog_typed(double wall_s, std::vector<FaultEvent>& events) {
  const Mode m = model_.mode();
  if ((m == Mode::speed_hold || m == Mode::road_load || m == Mode::constant_force) &&
      wall_s - last_request_wall_s_ > settings_.watchdog_s)
    latch_fault(FaultKind::watchdog, "no request within the watchdog window: controlled stop", events);
}

bool SimController::take_drop_request() {
  const bool d = drop_pending_;
  drop_pending_ = false;
  return d;
}

}  // namespace loadtrim::sim
