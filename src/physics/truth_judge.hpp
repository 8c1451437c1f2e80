// The hidden truth's verdict on a setting: what a noise-free coast-down of the set coefficients would measure
// on the truth's dyno with the truth's vehicle, and the force the vehicle truly meets at a steady speed. The
// benchmark judges acceptance with it (docs/performance.md), so a setting the tool accepted on noisy or
// drifting coast-downs is judged by what it really does. Pure: no I/O.
//
// Coast-down equivalence (docs/standards.md §2.3, §6.4): in road-load simulation the truth's rollers turn the
// mass M = base + m_rot + g·(I_set·(1+ε_I) − stated base) against R(v) = g·F_set(v) + L(v, θ) + P_res(v)
// (physics/roller_model.hpp; g the force loop's gain, 1 unless a fault is planted), so the band time is
// Δt_j = (M/3.6)·∫ dv/R(v) over v_j ± Δv, and the force the tool computes from it is
// F_mj = (1/3.6)·(TM + m_r)·2Δv/Δt_j. The F_mj are regressed as the standard does (§2.6) and the regressed
// curve is compared with the target at each reference speed. The steady force is R(v) plus the vehicle's
// steady-versus-coasting difference b0 + b2·v² (VehicleTruth::hold_bias_at_n): what the vehicle meets at a
// constant speed with the setting on the dyno, against the target it should meet.
#pragma once

#include <span>
#include <vector>

#include "core/road_load.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::physics {

struct TrueSpeedError {
  double speed_kmh = 0.0;
  double target_n = 0.0;
  double band_force_n = 0.0;       // F_mj a noise-free coast-down would measure
  double coastdown_n = 0.0;        // the regressed curve at v_j (what the standard's acceptance checks)
  double coastdown_error_n = 0.0;  // coastdown_n − target_n
  double steady_force_n = 0.0;     // R(v_j) + b0 + b2·v_j²: the retarding force at a steady v_j
  double steady_error_n = 0.0;     // steady_force_n − target_n
};

struct TrueJudgement {
  bool ok = false;  // false: a band never ends (R ≤ 0 somewhere in it) or the regression failed
  std::vector<TrueSpeedError> rows;
  double worst_coastdown_n = 0.0;  // max |coastdown_error_n|
  double worst_steady_n = 0.0;     // max |steady_error_n|
};

struct SettingOnDyno {
  double inertia_set_kg = 0.0;  // what the controller was told
  core::RoadLoad set;           // the final set coefficients
  double force_mass_kg = 0.0;   // TM + m_r, the tool's conversion mass (docs/standards.md §2.3)
};

// Judges `dyno` for `target` at `speeds_kmh` with bands ±half_band_kmh; warmth_per_speed holds the drivetrain
// warmth θ at each reference speed (one value per speed; 1 = fully warm).
TrueJudgement judge_setting(const Truth& truth, const SettingOnDyno& dyno, const core::RoadLoad& target,
                            std::span<const double> speeds_kmh, double half_band_kmh,
                            std::span<const double> warmth_per_speed);

}  // namespace loadtrim::physics
