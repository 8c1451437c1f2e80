#include "physics/roller_model.hpp"

#include <algorithm>
#include <cmath>

#include "core/units.hpp"

namespace loadtrim::physics {

using core::units::kKmhPerMps;

double roller_curvature_factor(double tyre_radius_m, double roller_radius_m) {
  return std::sqrt(1.0 + tyre_radius_m / roller_radius_m);
}

RollerModel::RollerModel(const Truth& truth)
    : truth_(truth),
      inertia_set_kg_(truth.dyno.base_inertia_kg),
      warmth_(std::clamp(truth.vehicle.initial_warmth, 0.0, 1.0)),
      curvature_(roller_curvature_factor(truth.vehicle.tyre_radius_m, 0.5 * truth.dyno.roller_diameter_m)),
      rng_(truth.noise_seed),
      driver_rng_(truth.driver.seed) {}

void RollerModel::prompt_driver(core::DriverPrompt p, double speed_kmh) {
  const auto& d = truth_.driver;
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> n(0.0, 1.0);
  prompt_ = p;
  switch (p) {
    case core::DriverPrompt::accelerate:
      prompted_kmh_ = std::max(0.0, speed_kmh);
      driver_target_kmh_ = prompted_kmh_ + d.overshoot_kmh;
      engage_at_s_ = time_s_ + d.reaction_time_s;
      early_ = u(driver_rng_) < d.early_release_probability;
      shift_pending_ = false;
      holding_ = false;
      break;
    case core::DriverPrompt::neutral: {
      if (!in_gear_) {  // not yet engaged: nothing to shift out of
        engage_at_s_ = 1e300;
        break;
      }
      double delay = d.reaction_time_s + std::abs(d.neutral_jitter_s * n(driver_rng_));
      if (u(driver_rng_) < d.late_release_probability) delay += d.late_release_extra_s;
      shift_at_s_ = time_s_ + delay;
      shift_pending_ = true;
      break;
    }
    case core::DriverPrompt::off:
      in_gear_ = false;
      shift_pending_ = false;
      holding_ = false;
      engage_at_s_ = 1e300;
      break;
  }
}

void RollerModel::advance_driver() {
  const auto& d = truth_.driver;
  const double v = speed_kmh();
  if (!in_gear_ && prompt_ == core::DriverPrompt::accelerate && time_s_ >= engage_at_s_) {
    in_gear_ = true;
    throttle_from_s_ = time_s_;
    engage_at_s_ = 1e300;  // engages once per prompt
  }
  if (!in_gear_) {
    tractive_n_ = 0.0;
    return;
  }
  if (early_ && !shift_pending_ && v >= prompted_kmh_ - d.early_release_below_kmh) {
    in_gear_ = false;  // an early shift, unprompted
    tractive_n_ = 0.0;
    return;
  }
  if (shift_pending_ && time_s_ >= shift_at_s_) {
    in_gear_ = false;
    shift_pending_ = false;
    tractive_n_ = 0.0;
    return;
  }
  if (v >= driver_target_kmh_) holding_ = true;
  const double available = std::min(d.max_tractive_force_n, d.max_power_w / std::max(1.0, v / kKmhPerMps));
  if (!holding_) {
    const double throttle = d.throttle_ramp_s > 0.0
                                ? std::clamp((time_s_ - throttle_from_s_) / d.throttle_ramp_s, 0.0, 1.0)
                                : 1.0;
    tractive_n_ = throttle * available;
  } else {
    // Hold the target: balance the load, plus a correction proportional to the speed error.
    const double err_mps = (driver_target_kmh_ - v) / kKmhPerMps;
    tractive_n_ =
        std::clamp(road_load_force_n(v) + d.hold_gain_per_s * err_mps * coasting_mass_kg(), 0.0, available);
  }
}

double RollerModel::tractive_force_n() const {
  return mode_ == Mode::road_load && in_gear_ && truth_.vehicle_on_rollers ? tractive_n_ : 0.0;
}

void RollerModel::apply_force(double force_n) {
  if (mode_ != Mode::constant_force) {  // the motor's force starts from nothing (no load at a steady hold)
    force_applied_n_ = 0.0;
    force_rate_n_per_s_ = 0.0;
  }
  force_cmd_n_ = force_n;
  mode_ = Mode::constant_force;
  if (!(truth_.dyno.force_loop_time_constant_s > 0.0))
    force_applied_n_ = truth_.dyno.force_loop_gain * force_cmd_n_;
}

void RollerModel::advance_force_loop(double h) {
  const auto& d = truth_.dyno;
  const double demand = d.force_loop_gain * force_cmd_n_;
  if (!(d.force_loop_time_constant_s > 0.0)) {
    force_applied_n_ = demand;
    return;
  }
  // F'' = ω²·(demand − F) − 2ζω·F', ω = 1/τ, by RK4 in steps of at most τ/20 (its error far below the noise).
  const double w = 1.0 / d.force_loop_time_constant_s, z = d.force_loop_damping;
  const int n = std::max(1, static_cast<int>(std::ceil(h * w * 20.0)));
  const double dt = h / n;
  auto rate = [&](double f, double r) { return w * w * (demand - f) - 2.0 * z * w * r; };
  for (int i = 0; i < n; ++i) {
    const double f0 = force_applied_n_, r0 = force_rate_n_per_s_;
    const double kf1 = r0, kr1 = rate(f0, r0);
    const double kf2 = r0 + 0.5 * dt * kr1, kr2 = rate(f0 + 0.5 * dt * kf1, kf2);
    const double kf3 = r0 + 0.5 * dt * kr2, kr3 = rate(f0 + 0.5 * dt * kf2, kf3);
    const double kf4 = r0 + dt * kr3, kr4 = rate(f0 + dt * kf3, kf4);
    force_applied_n_ = f0 + dt / 6.0 * (kf1 + 2.0 * kf2 + 2.0 * kf3 + kf4);
    force_rate_n_per_s_ = r0 + dt / 6.0 * (kr1 + 2.0 * kr2 + 2.0 * kr3 + kr4);
  }
}

double RollerModel::road_load_mass_kg() const {
  const auto& d = truth_.dyno;
  if (d.force_loop_gain == 1.0) return coasting_mass_kg();
  return d.base_inertia_kg + rotating_mass_kg() +
         d.force_loop_gain *
             (inertia_set_kg_ * (1.0 + d.inertia_simulation_error) - stated_base_inertia_kg());
}

void RollerModel::hold_speed(double speed_kmh) {
  hold_kmh_ = std::max(0.0, speed_kmh);
  mode_ = Mode::speed_hold;
}

double RollerModel::vehicle_loss_n(double v) const {
  const auto& t = truth_.vehicle;
  if (v <= 0.0 || !truth_.vehicle_on_rollers) return 0.0;
  const double tyre = (t.tyre_loss_flat_n + t.tyre_loss_flat_n_per_kmh * v) * curvature_;
  const double spin = (t.drivetrain_loss_n + t.drivetrain_loss_n_per_kmh2 * v * v) *
                      (1.0 + t.drivetrain_cold_excess * (1.0 - warmth_));
  return tyre + spin + t.brake_drag_n;
}

double RollerModel::parasitic_residual_n(double v) const {
  const auto& d = truth_.dyno;
  if (v <= 0.0) return 0.0;
  return (d.parasitic_compensation_error + d.parasitic_excess) *
         (d.parasitic_f0_n + (d.parasitic_f1_n_per_kmh + d.parasitic_f2_n_per_kmh2 * v) * v);
}

double RollerModel::parasitic_true_n(double v) const {
  const auto& d = truth_.dyno;
  if (v <= 0.0) return 0.0;
  return (1.0 + d.parasitic_excess) *
         (d.parasitic_f0_n + (d.parasitic_f1_n_per_kmh + d.parasitic_f2_n_per_kmh2 * v) * v);
}

double RollerModel::stated_base_inertia_kg() const {
  return truth_.dyno.stated_base_inertia_kg > 0.0 ? truth_.dyno.stated_base_inertia_kg
                                                  : truth_.dyno.base_inertia_kg;
}

double RollerModel::rotating_mass_kg() const {
  return truth_.vehicle_on_rollers ? truth_.vehicle.rotating_mass_on_rollers_kg : 0.0;
}

double RollerModel::coasting_mass_kg() const {
  // The controller simulates I_set − (the base inertia it believes); the true base inertia turns as it is.
  return inertia_set_kg_ * (1.0 + truth_.dyno.inertia_simulation_error) + rotating_mass_kg() +
         (truth_.dyno.base_inertia_kg - stated_base_inertia_kg());
}

double RollerModel::road_load_force_n(double v) const {
  return set_.force_n(v) + vehicle_loss_n(v) + parasitic_residual_n(v);
}

double RollerModel::acceleration_mps2(double v_mps) const {
  const double v = v_mps * kKmhPerMps;
  const auto& d = truth_.dyno;
  if (mode_ == Mode::road_load) {
    const double drive = tractive_force_n();
    if (d.force_loop_gain == 1.0) return (drive - road_load_force_n(v)) / coasting_mass_kg();
    return (drive - (d.force_loop_gain * set_.force_n(v) + vehicle_loss_n(v) + parasitic_residual_n(v))) /
           road_load_mass_kg();
  }
  const double physical_mass = d.base_inertia_kg + rotating_mass_kg();
  if (mode_ == Mode::constant_force) {
    // The motor's force against the vehicle's losses and the residual parasitic loss (compensation on).
    if (v <= 0.0 && force_applied_n_ <= 0.0) return 0.0;
    return (force_applied_n_ - vehicle_loss_n(v) - parasitic_residual_n(v)) / physical_mass;
  }
  // Idle and free coast: motor off, the rollers freewheel on their own inertia against the vehicle's and
  // their own losses.
  return -(vehicle_loss_n(v) + parasitic_true_n(v)) / physical_mass;
}

void RollerModel::advance(double dt_s, double max_step_s) {
  if (!(dt_s > 0.0)) return;
  const int steps = std::max(1, static_cast<int>(std::ceil(dt_s / max_step_s - 1e-9)));
  const double h = dt_s / steps;
  const auto& veh = truth_.vehicle;
  for (int i = 0; i < steps; ++i) {
    const double v0 = speed_mps_;
    advance_driver();
    switch (mode_) {
      case Mode::speed_hold: {
        const double target = hold_kmh_ / kKmhPerMps;
        const double dv = std::clamp(target - v0, -truth_.dyno.motoring_accel_mps2 * h,
                                     truth_.dyno.motoring_accel_mps2 * h);
        speed_mps_ = v0 + dv;
        break;
      }
      case Mode::controlled_stop:
        speed_mps_ = std::max(0.0, v0 - truth_.dyno.stop_decel_mps2 * h);
        if (speed_mps_ == 0.0) mode_ = Mode::idle;
        break;
      case Mode::constant_force:
      case Mode::road_load:
      case Mode::idle:
      case Mode::free_coast: {
        if (mode_ == Mode::constant_force) advance_force_loop(h);
        if (v0 <= 0.0 && !(mode_ == Mode::constant_force && force_applied_n_ > 0.0) &&
            !(tractive_force_n() > 0.0)) {
          speed_mps_ = 0.0;
          break;
        }
        const double k1 = acceleration_mps2(v0);
        const double k2 = acceleration_mps2(v0 + 0.5 * h * k1);
        const double k3 = acceleration_mps2(v0 + 0.5 * h * k2);
        const double k4 = acceleration_mps2(v0 + h * k3);
        speed_mps_ = std::max(0.0, v0 + h / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4));
        break;
      }
    }
    accel_mps2_ = (speed_mps_ - v0) / h;
    // Drivetrain warmth: first-order rise while turning, decay at rest (exact exponential per step).
    if (speed_mps_ > 0.3)
      warmth_ = 1.0 - (1.0 - warmth_) * std::exp(-h / veh.warm_up_time_constant_s);
    else
      warmth_ *= std::exp(-h / veh.cool_down_time_constant_s);
    time_s_ += h;
  }
}

double RollerModel::load_cell_n() const {
  const double v = speed_kmh();
  switch (mode_) {
    case Mode::speed_hold:
    case Mode::controlled_stop:
      // The force the motor needs: the vehicle's and residual parasitic losses, plus what accelerates the
      // physical rotating mass.
      return vehicle_loss_n(v) + parasitic_residual_n(v) +
             (v > 0.0 && truth_.vehicle_on_rollers ? truth_.vehicle.hold_bias_at_n(v) : 0.0) +
             (truth_.dyno.base_inertia_kg + rotating_mass_kg()) * accel_mps2_;
    case Mode::road_load:
      // The set load plus the electrically simulated part of the inertia.
      return truth_.dyno.force_loop_gain * set_.force_n(v) -
             (road_load_mass_kg() - truth_.dyno.base_inertia_kg) * accel_mps2_;
    case Mode::constant_force:
      return force_applied_n_;  // the force the motor applies, as its load cell reads it
    case Mode::idle:
    case Mode::free_coast:
      return 0.0;
  }
  return 0.0;
}

Sample RollerModel::exact() const {
  return {time_s_, speed_kmh(), truth_.dyno.load_cell_gain * load_cell_n() + truth_.dyno.load_cell_offset_n};
}

Sample RollerModel::sample() {
  Sample s = exact();
  s.speed_kmh += truth_.dyno.speed_noise_kmh * unit_normal_(rng_);
  s.force_n += truth_.dyno.force_noise_n * unit_normal_(rng_);
  return s;
}

Trace record_coastdown(RollerModel& model, double start_kmh, double end_kmh, double rate_hz,
                       double settle_s) {
  model.hold_speed(start_kmh);
  const double dt = 1.0 / rate_hz;
  // Run up: bounded by the time the ramp needs plus the settling time.
  const double ramp_s =
      std::abs(start_kmh - model.speed_kmh()) / kKmhPerMps / model.truth().dyno.motoring_accel_mps2;
  model.advance(ramp_s + settle_s, std::min(dt, 0.01));
  model.release_road_load();
  Trace tr;
  const double max_duration_s = 3600.0;  // a coast that never ends is a modelling error; stop anyway
  const double t0 = model.time_s();
  for (;;) {
    const Sample s = model.sample();
    tr.time_s.push_back(s.time_s);
    tr.speed_kmh.push_back(s.speed_kmh);
    tr.force_n.push_back(s.force_n);
    if (model.speed_kmh() < end_kmh || model.time_s() - t0 > max_duration_s) break;
    model.advance(dt, std::min(dt, 0.01));
  }
  model.controlled_stop();
  return tr;
}

}  // namespace loadtrim::physics
