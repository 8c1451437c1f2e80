#include "physics/truth_generator.hpp"

#include <algorithm>
#include <cmath>

namespace loadtrim::physics {

Truth random_truth(double test_mass_kg, double rotating_mass_kg, core::AxleLayout layout,
                   const DynoTruth& dyno, std::mt19937_64& rng, const TruthSpread& spread) {
  std::normal_distribution<double> z(0.0, 1.0);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  constexpr double kZ95 = 1.6448536269514722;  // standard normal 95th percentile
  const double s20 = std::log(spread.loss_p95_20_n / spread.loss_median_20_n) / kZ95;
  const double s130 = std::log(spread.loss_p95_130_n / spread.loss_median_130_n) / kZ95;
  // The two speeds are strongly correlated in the data (a lossy car is lossy at every speed): ρ ≈ 0.8
  // assumed. With a loss–mass correlation ρ_m each speed's normal score is ρ_m·z_m + √(1 − ρ_m²)·(its own),
  // z_m the test mass's standardised log; ρ_m = 0 is the long-standing draw exactly.
  const double w1 = z(rng), w2 = 0.8 * w1 + 0.6 * z(rng);
  const double rho = std::clamp(spread.loss_mass_correlation, -0.99, 0.99);
  const double zm = spread.mass_log_sd > 0.0 && spread.mass_median_kg > 0.0 && test_mass_kg > 0.0
                        ? std::log(test_mass_kg / spread.mass_median_kg) / spread.mass_log_sd
                        : 0.0;
  const double own = std::sqrt(1.0 - rho * rho);
  const double z1 = rho == 0.0 ? w1 : rho * zm + own * w1;
  const double z2 = rho == 0.0 ? w2 : rho * zm + own * w2;
  const double l20 = spread.loss_median_20_n * std::exp(s20 * z1);
  const double l130 = std::max(l20 * 1.02, spread.loss_median_130_n * std::exp(s130 * z2));

  Truth t;
  t.dyno = dyno;
  t.dyno.inertia_simulation_error = spread.inertia_error_sd * z(rng);
  t.dyno.parasitic_compensation_error = spread.compensation_error_sd * z(rng);
  t.noise_seed = rng();
  auto& v = t.vehicle;
  v.test_mass_kg = test_mass_kg;
  const double share = layout == core::AxleLayout::two_axle ? 1.0 : 0.5;
  v.rotating_mass_on_rollers_kg = share * rotating_mass_kg * (0.85 + 0.3 * u(rng));
  v.tyre_radius_m = 0.29 + 0.08 * u(rng);
  v.drivetrain_cold_excess =
      spread.cold_excess_min + (spread.cold_excess_max - spread.cold_excess_min) * u(rng);
  v.warm_up_time_constant_s =
      spread.warm_up_tau_min_s + (spread.warm_up_tau_max_s - spread.warm_up_tau_min_s) * u(rng);
  v.cool_down_time_constant_s = 1200.0 + 2400.0 * u(rng);
  v.initial_warmth = 0.0;
  v.hold_bias_n = spread.hold_bias_sd_n * z(rng);
  v.brake_drag_n = 8.0 * u(rng);

  // Warm loss L(v) = L0 + L1·v + L2·v² through the two drawn points; split into tyre, spin and brake parts.
  const double curvature = roller_curvature_factor(v.tyre_radius_m, 0.5 * dyno.roller_diameter_m);
  const double l1 = 0.08 * u(rng);  // N/(km/h), from the tyre
  const double l2 = (l130 - l20 - l1 * 110.0) / (130.0 * 130.0 - 20.0 * 20.0);
  const double quad = std::max(0.0, l2);
  const double l0 = l20 - l1 * 20.0 - quad * 400.0;
  const double tyre_share = 0.55 + 0.2 * u(rng);
  const double constant = std::max(10.0, l0 - v.brake_drag_n);
  v.tyre_loss_flat_n = tyre_share * constant / curvature;
  v.tyre_loss_flat_n_per_kmh = l1 / curvature;
  v.drivetrain_loss_n = (1.0 - tyre_share) * constant;
  v.drivetrain_loss_n_per_kmh2 = quad;
  // The newer truths draw only when their spread is on, so a preset without them draws exactly as before.
  if (spread.hold_bias_speed_sd_n > 0.0)
    v.hold_bias_n_per_kmh2 = spread.hold_bias_speed_sd_n * z(rng) / (130.0 * 130.0);
  if (spread.load_cell_gain_sd > 0.0) t.dyno.load_cell_gain = 1.0 + spread.load_cell_gain_sd * z(rng);
  if (spread.load_cell_offset_sd_n > 0.0) t.dyno.load_cell_offset_n = spread.load_cell_offset_sd_n * z(rng);
  // The driver: its own generator, seeded from the noise seed, so the vehicle's draws above stay as they
  // were. Spreads are assumptions, no source: reaction 0.5-1.1 s, overshoot 0.5-1.5 km/h, 40-90 kW.
  std::mt19937_64 drng(t.noise_seed ^ 0x9E3779B97F4A7C15ULL);
  t.driver.seed = drng() % 2147483647ULL;
  t.driver.reaction_time_s = 0.5 + 0.6 * u(drng);
  t.driver.overshoot_kmh = 0.5 + 1.0 * u(drng);
  t.driver.max_power_w = 100000.0 + 80000.0 * u(drng);
  t.driver.max_tractive_force_n = 6000.0;
  return t;
}

Truth redraw_day(const Truth& first, std::mt19937_64& rng, const DayToDaySpread& day) {
  std::normal_distribution<double> z(0.0, 1.0);
  Truth t = first;
  auto& v = t.vehicle;
  const double tyre = std::exp(day.loss_sd * z(rng)), spin = std::exp(day.loss_sd * z(rng));
  v.tyre_loss_flat_n *= tyre;
  v.tyre_loss_flat_n_per_kmh *= tyre;
  v.drivetrain_loss_n *= spin;
  v.drivetrain_loss_n_per_kmh2 *= spin;
  v.hold_bias_n += day.hold_bias_sd_n * z(rng);
  v.warm_up_time_constant_s *= std::exp(day.warm_up_sd * z(rng));
  v.drivetrain_cold_excess *= std::exp(day.warm_up_sd * z(rng));
  t.dyno.parasitic_compensation_error += day.compensation_error_sd * z(rng);
  t.noise_seed = rng();
  return t;
}

const TruthPreset* truth_preset(std::string_view name) {
  static const TruthPreset typical{};
  static const TruthPreset harsh = [] {
    TruthPreset p;
    p.name = "harsh";
    p.spread.hold_bias_sd_n = 15.0;
    p.spread.inertia_error_sd = 0.015;
    p.spread.warm_up_tau_min_s = 1500.0;
    p.spread.warm_up_tau_max_s = 3000.0;
    p.spread.cold_excess_min = 0.6;
    p.spread.cold_excess_max = 1.0;
    p.speed_noise_kmh = 0.2;
    p.spread.loss_mass_correlation = 0.43;  // the EPA data at 20 km/h (docs/standards.md §5.6)
    p.spread.hold_bias_speed_sd_n = 10.0;
    p.spread.load_cell_gain_sd = 0.01;
    p.spread.load_cell_offset_sd_n = 4.9;  // ±9.8 N at 2σ (docs/standards.md §2.8's resolution)
    return p;
  }();
  if (name == "typical") return &typical;
  if (name == "harsh") return &harsh;
  return nullptr;
}

}  // namespace loadtrim::physics
