// The vehicle on the rollers, in neutral, with the dyno applying its set load. This is the physics both the
// in-process demo and the simulated controller run; its parameters ("truth") are hidden from the tool.
// Pure: no I/O, no clocks (time advances only through advance()), noise from a seeded generator.
//
// Model (SI inside; speeds in km/h at the interface):
//   road-load simulation:  (I_sim·(1+ε_I) + m_rot)·dv/dt = −(F_set(v) + L(v, θ) + P_res(v))
//   L(v, θ)   vehicle loss on the rollers = tyre loss × √(1 + r_tyre/R_roller) + drivetrain spin loss × (1 +
//   k·(1−θ))
//             + brake drag;  θ ∈ [0, 1] the drivetrain warmth, rising while the rollers turn, falling at rest
//   P_res(v)  dyno parasitic loss left after the controller's compensation: ε_P × P(v)
//   speed hold: the dyno drives the rollers to the set speed; the load cell reads L + P_res + bias(v) +
//   inertial force, bias(v) = b0 + b2·v² the steady-versus-coasting difference
//   load cell: every force reading is gain·F + offset (DynoTruth::load_cell_*), then noise
//   force loop (DynoTruth::force_loop_*): with a gain k ≠ 1 road-load simulation turns
//   base + m_rot + k·(I_sim·(1+ε_I) − stated base) against k·F_set(v) + L + P_res; constant force applies the
//   demand through a second-order lag
// The curvature factor form is from memory (docs/standards.md §5); the rest is a plain lumped-mass model.
#pragma once

#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "core/mode.hpp"
#include "core/road_load.hpp"

namespace loadtrim::physics {

struct VehicleTruth {
  std::string name = "unnamed";
  double test_mass_kg = 1500.0;
  double rotating_mass_on_rollers_kg =
      25.0;  // wheels, axle and drivetrain the rollers turn, as an equivalent mass
  double tyre_radius_m = 0.32;
  double tyre_loss_flat_n = 60.0;             // tyre rolling loss on a flat road, constant part
  double tyre_loss_flat_n_per_kmh = 0.05;     // and its speed slope
  double drivetrain_loss_n = 25.0;            // spin loss in neutral when warm, constant part
  double drivetrain_loss_n_per_kmh2 = 0.002;  // and its quadratic part
  double drivetrain_cold_excess = 0.25;       // fraction added to the spin loss when fully cold
  double warm_up_time_constant_s = 600.0;
  double cool_down_time_constant_s = 1800.0;
  double initial_warmth = 0.0;  // 0 = cold soak, 1 = fully warm
  double brake_drag_n = 5.0;
  // Steady versus coasting loss: at a steady speed (speed hold, or the vehicle driven at a constant speed)
  // the vehicle's loss is the coasting loss plus hold_bias_n + hold_bias_n_per_kmh2·v². The speed hold reads
  // it; a coast-down does not see it; the force a vehicle meets at a steady speed includes it.
  double hold_bias_n = 2.0;
  double hold_bias_n_per_kmh2 = 0.0;  // 0: a constant difference (a truth file without it)
  double hold_bias_at_n(double speed_kmh) const {
    return hold_bias_n + hold_bias_n_per_kmh2 * speed_kmh * speed_kmh;
  }
};

struct DynoTruth {
  double roller_diameter_m = 1.2192;    // 48 in
  double base_inertia_kg = 1250.0;      // mechanical inertia of rollers and motor, as equivalent mass
  double stated_base_inertia_kg = 0.0;  // what the controller believes and reports (its nameplate); 0 = the
                                        // true value. A difference is an inertia simulation error of its own.
  double inertia_simulation_error = 0.0;  // fraction: the simulated inertia is I_set·(1 + this)
  double parasitic_f0_n = 20.0;           // the dyno's own parasitic loss curve
  double parasitic_f1_n_per_kmh = 0.10;
  double parasitic_f2_n_per_kmh2 = 0.0008;
  double parasitic_compensation_error = 0.05;  // fraction of the parasitic loss the compensation misses
  double parasitic_excess = 0.0;  // the rollers' true loss is (1 + this) × the curve above, which is
                                  // what the controller compensates (a worn bearing: a planted fault)
  double speed_noise_kmh = 0.05;  // encoder noise, standard deviation
  double force_noise_n = 2.0;     // load-cell noise, standard deviation
  // The load cell's calibration: it reads gain × the force plus an offset, in every mode (a reading error:
  // the force the motor applies is the force loop's, below). 1 and 0: an exact cell (a truth file without
  // them).
  double load_cell_gain = 1.0;
  double load_cell_offset_n = 0.0;
  double motoring_accel_mps2 = 1.5;  // speed-hold ramp rate
  double stop_decel_mps2 = 2.0;      // controlled-stop deceleration
  // The motor's force loop, in every torque-controlled mode (road-load simulation, constant force). Planted
  // faults for the dyno's own checks (docs/dyno-checks.md): a gain off 1 (the motor applies gain × the force
  // it is asked for: a mis-calibrated torque loop) fails the acceleration/deceleration check; a time constant
  // (a second-order lag, 0 = the force follows its demand at once) and a damping below 1 (it overshoots) fail
  // the response-time check. The lag is modelled in constant force only; the gain in both modes.
  double force_loop_gain = 1.0;
  double force_loop_time_constant_s = 0.0;
  double force_loop_damping = 1.0;
};

// The driver (or driver robot) who accelerates the vehicle under its own power when the controller's driver
// display asks (a run-up in road-load simulation, docs/protocol.md "Driver prompts"). Every default is an
// assumption, no source: a plausible human driver in a mid-size car.
struct DriverTruth {
  double reaction_time_s = 0.8;          // from a prompt to acting on it
  double throttle_ramp_s = 1.5;          // from a closed to a fully open throttle
  double max_tractive_force_n = 4000.0;  // at the roller surface, in the gear used
  double max_power_w = 60000.0;          // the tractive force is at most this / speed
  double overshoot_kmh = 1.0;            // the driver aims this far above the prompted speed and holds there
  double hold_gain_per_s = 1.0;          // how firmly the held speed is kept (a speed error's rate of return)
  double neutral_jitter_s = 0.3;         // extra delay of the shift to neutral, standard deviation
  double late_release_probability = 0.0;  // per run-up: the shift comes late_release_extra_s later
  double late_release_extra_s = 5.0;
  double early_release_probability = 0.0;  // per run-up: the driver shifts to neutral unprompted, this far
  double early_release_below_kmh = 8.0;    // below the prompted speed
  std::uint64_t seed = 1;
};

struct Truth {
  bool vehicle_on_rollers = true;  // false: the empty rollers (the dyno's own checks)
  VehicleTruth vehicle;
  DynoTruth dyno;
  DriverTruth driver;
  std::uint64_t noise_seed = 1;
};

// √(1 + r_tyre / R_roller), from memory (docs/standards.md §5).
double roller_curvature_factor(double tyre_radius_m, double roller_radius_m);

// The controller's modes (core/mode.hpp, shared with the controller interface). idle and free_coast: motor
// off; at speed the rollers coast freely on their own inertia and losses (no simulation, no compensation).
// constant_force: the motor applies a set force at the roller surface, parasitic compensation on, no inertia
// or road-load simulation (the base inertia check).
using Mode = core::Mode;
using core::to_string;

struct Sample {
  double time_s = 0.0;
  double speed_kmh = 0.0;
  double force_n = 0.0;
};

class RollerModel {
 public:
  explicit RollerModel(const Truth& truth);

  // Setpoints, as the controller is told them.
  void set_inertia_kg(double inertia_kg) { inertia_set_kg_ = inertia_kg; }
  void set_coefficients(const core::RoadLoad& set) { set_ = set; }
  void hold_speed(double speed_kmh);
  void release_road_load() { mode_ = Mode::road_load; }
  void controlled_stop() { mode_ = Mode::controlled_stop; }
  void idle() { mode_ = Mode::idle; }
  void free_coast() { mode_ = Mode::free_coast; }  // as idle; the mode says it was commanded at speed
  void apply_force(double force_n);
  // The driver display (DriverTruth): accelerate to a speed, shift to neutral, or cleared. The driver acts in
  // road-load simulation only (the dyno holding or stopping the rollers overrides any throttle); "off" and
  // "neutral" before the driver has engaged a gear leave the vehicle in neutral.
  void prompt_driver(core::DriverPrompt p, double speed_kmh = 0.0);
  bool in_neutral() const { return !in_gear_; }
  core::DriverPrompt driver_prompt() const { return prompt_; }
  double prompted_kmh() const { return prompted_kmh_; }  // the speed of the last "accelerate" prompt
  double tractive_force_n() const;  // what the driver applies now (0 in neutral or outside road-load)

  // Advance simulated time by dt_s with fixed RK4 steps no longer than max_step_s.
  void advance(double dt_s, double max_step_s = 0.001);
  // A reading now, with encoder and load-cell noise.
  Sample sample();
  // The same without noise (tests).
  Sample exact() const;

  double time_s() const { return time_s_; }
  double speed_kmh() const { return speed_mps_ * 3.6; }
  double warmth() const { return warmth_; }
  void set_warmth(double w) { warmth_ = w; }
  Mode mode() const { return mode_; }
  double hold_target_kmh() const { return hold_kmh_; }
  double inertia_set_kg() const { return inertia_set_kg_; }
  const core::RoadLoad& coefficients() const { return set_; }
  const Truth& truth() const { return truth_; }

  // Truth curves at the current warmth (tests and the benchmark compare against them).
  double vehicle_loss_n(double speed_kmh) const;
  double parasitic_residual_n(double speed_kmh) const;
  double parasitic_true_n(double speed_kmh) const;  // the rollers' whole own loss (free coast)
  double coasting_mass_kg() const;                  // I_sim·(1+ε) + m_rot + (base − stated base)
  double stated_base_inertia_kg() const;
  double rotating_mass_kg() const;  // of the vehicle on the rollers (0 when empty)
  // Total retarding force in road-load simulation at a speed, N.
  double road_load_force_n(double speed_kmh) const;

 private:
  double acceleration_mps2(double v_mps) const;  // in road_load, constant_force, idle or free_coast
  void advance_driver();                         // the driver's decisions at the current time and speed
  double road_load_mass_kg() const;   // the mass road-load simulation turns (the force loop's gain)
  void advance_force_loop(double h);  // the applied force towards its demand, over h seconds
  double load_cell_n() const;
  Truth truth_;
  core::RoadLoad set_;
  double inertia_set_kg_;
  double time_s_ = 0.0;
  double speed_mps_ = 0.0;
  double accel_mps2_ = 0.0;  // of the last step, for the load cell's inertial term
  double warmth_;
  double hold_kmh_ = 0.0;
  double force_cmd_n_ = 0.0;
  double force_applied_n_ = 0.0;  // what the motor applies in constant force (the load cell reads it)
  double force_rate_n_per_s_ = 0.0;
  Mode mode_ = Mode::idle;
  double curvature_;
  std::mt19937_64 rng_;
  std::normal_distribution<double> unit_normal_{0.0, 1.0};
  core::DriverPrompt prompt_ = core::DriverPrompt::off;
  bool in_gear_ = false, holding_ = false, early_ = false, shift_pending_ = false;
  double engage_at_s_ = 0.0, throttle_from_s_ = 0.0, shift_at_s_ = 0.0, driver_target_kmh_ = 0.0;
  double prompted_kmh_ = 0.0;
  double tractive_n_ = 0.0;  // held constant over one integration step
  std::mt19937_64 driver_rng_;
};

// A sampled coast-down trace (time from the model's clock).
struct Trace {
  std::vector<double> time_s;
  std::vector<double> speed_kmh;
  std::vector<double> force_n;
};

// Run up to start_kmh in speed hold (settling for settle_s), release into road-load simulation and sample
// at rate_hz until the speed is below end_kmh; the model is left in controlled stop, not advanced further.
Trace record_coastdown(RollerModel& model, double start_kmh, double end_kmh, double rate_hz,
                       double settle_s = 2.0);

}  // namespace loadtrim::physics
