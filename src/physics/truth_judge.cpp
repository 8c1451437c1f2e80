#include "physics/truth_judge.hpp"

#include <algorithm>
#include <cmath>

#include "core/regression.hpp"
#include "core/units.hpp"

namespace loadtrim::physics {

namespace {

// The mass road-load simulation turns and the force it turns against (physics/roller_model.hpp's model,
// written out here from the truth's parameters).
double simulated_mass_kg(const RollerModel& m) {
  const auto& d = m.truth().dyno;
  return d.base_inertia_kg + m.rotating_mass_kg() +
         d.force_loop_gain *
             (m.inertia_set_kg() * (1.0 + d.inertia_simulation_error) - m.stated_base_inertia_kg());
}

double retarding_force_n(const RollerModel& m, double v_kmh) {
  return m.truth().dyno.force_loop_gain * m.coefficients().force_n(v_kmh) + m.vehicle_loss_n(v_kmh) +
         m.parasitic_residual_n(v_kmh);
}

}  // namespace

TrueJudgement judge_setting(const Truth& truth, const SettingOnDyno& dyno, const core::RoadLoad& target,
                            std::span<const double> speeds_kmh, double half_band_kmh,
                            std::span<const double> warmth_per_speed) {
  TrueJudgement j;
  if (warmth_per_speed.size() != speeds_kmh.size() || speeds_kmh.empty() || !(half_band_kmh > 0.0)) return j;
  RollerModel m(truth);
  m.set_inertia_kg(dyno.inertia_set_kg);
  m.set_coefficients(dyno.set);
  const double mass = simulated_mass_kg(m);
  std::vector<double> band;
  for (std::size_t i = 0; i < speeds_kmh.size(); ++i) {
    const double v = speeds_kmh[i];
    m.set_warmth(std::clamp(warmth_per_speed[i], 0.0, 1.0));
    // ∫ dv/R(v) over the band by composite Simpson (R is a smooth quadratic at a fixed warmth: 64 panels are
    // exact to far below a millinewton).
    constexpr int kPanels = 64;
    const double a = v - half_band_kmh, h = 2.0 * half_band_kmh / kPanels;
    double integral = 0.0;
    bool positive = true;
    for (int k = 0; k <= kPanels; ++k) {
      const double r = retarding_force_n(m, a + k * h);
      if (!(r > 0.0)) positive = false;
      const double w = (k == 0 || k == kPanels) ? 1.0 : (k % 2 ? 4.0 : 2.0);
      integral += w / r;
    }
    if (!positive) return j;  // the coast never crosses this band: no force to judge
    integral *= h / 3.0;
    const double dt_s = mass / core::units::kKmhPerMps * integral;
    const double f_mj = dyno.force_mass_kg * 2.0 * half_band_kmh / (core::units::kKmhPerMps * dt_s);
    band.push_back(f_mj);
    TrueSpeedError row;
    row.speed_kmh = v;
    row.target_n = target.force_n(v);
    row.band_force_n = f_mj;
    // At a steady speed the vehicle meets its steady loss: the coasting loss plus the steady-versus-coasting
    // difference b0 + b2·v² (physics::VehicleTruth::hold_bias_at_n), which no coast-down sees.
    row.steady_force_n =
        retarding_force_n(m, v) + (truth.vehicle_on_rollers ? truth.vehicle.hold_bias_at_n(v) : 0.0);
    row.steady_error_n = row.steady_force_n - row.target_n;
    j.rows.push_back(row);
  }
  const core::RoadLoadFit fit = core::fit_road_load(speeds_kmh, band);
  if (!fit.ok) return j;
  for (auto& row : j.rows) {
    row.coastdown_n = fit.coefficients.force_n(row.speed_kmh);
    row.coastdown_error_n = row.coastdown_n - row.target_n;
    j.worst_coastdown_n = std::max(j.worst_coastdown_n, std::abs(row.coastdown_error_n));
    j.worst_steady_n = std::max(j.worst_steady_n, std::abs(row.steady_error_n));
  }
  j.ok = true;
  return j;
}

}  // namespace loadtrim::physics
