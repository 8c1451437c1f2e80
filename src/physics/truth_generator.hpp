// Randomised but realistic truths for simulated vehicles, scaled to the public US EPA Test Car List: there
// the target minus set load at 20 km/h has a median of about 115 N (p95 about 250 N) and at 130 km/h about
// 160 N (p95 about 350 N) (samples/data/README.md; docs/standards.md §5). Pure: the generator is passed in.
#pragma once

#include <random>
#include <string_view>

#include "core/profile.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::physics {

struct TruthSpread {
  double loss_median_20_n = 115.0, loss_p95_20_n = 250.0;    // EPA target − set, 20 km/h
  double loss_median_130_n = 160.0, loss_p95_130_n = 350.0;  // and 130 km/h
  double inertia_error_sd = 0.003;                           // common practice, no source
  double compensation_error_sd = 0.05;                       // common practice, no source
  double hold_bias_sd_n = 3.0;                               // common practice, no source
  // The drivetrain's warming: time constant uniform in [min, max], cold excess (the fraction the spin loss is
  // higher when cold) uniform in [min, max]. Assumptions, no source (docs/performance.md, "Truth presets").
  double warm_up_tau_min_s = 300.0, warm_up_tau_max_s = 900.0;
  double cold_excess_min = 0.15, cold_excess_max = 0.40;
  // Loss correlated with test mass: the log of the loss at 20 and at 130 km/h each has correlation ρ with the
  // log of the test mass, standardised by the fleet's log-mass median and sd. The EPA data give ρ = 0.43 at
  // 20 km/h and 0.42 at 130 km/h, median test mass 1814 kg, log sd 0.182 (docs/standards.md §5.6). 0: the
  // loss is drawn without regard to the mass (the long-standing draw, unchanged).
  double loss_mass_correlation = 0.0;
  double mass_median_kg = 1814.37, mass_log_sd = 0.1818;
  // The steady-versus-coasting difference's speed part: b2·v² with b2·130² ~ N(0, σ²), σ in N at 130 km/h.
  // Assumption, no source. 0: a constant difference only (no draw).
  double hold_bias_speed_sd_n = 0.0;
  // The load cell's calibration: gain 1 + σ_g·z, offset σ_o·z. Assumptions, no source (the scale: the
  // force resolution of docs/standards.md §2.8, ±9.8 N). 0: an exact cell (no draw).
  double load_cell_gain_sd = 0.0;
  double load_cell_offset_sd_n = 0.0;
};

// How a vehicle's truth differs on another day on the same cell (the history strategy's second session):
// tyre and spin losses scale by exp(σ·z) each, the hold bias and the cell's parasitic compensation error move
// by σ·z, the warm-up time constant and cold excess scale by exp(σ·z), and the noise is fresh. The cell's
// inertia simulation and load cell, the tyre radius, the rotating mass and the hold bias's speed part stay.
// Assumptions, no source (docs/performance.md, "Truth presets").
struct DayToDaySpread {
  double loss_sd = 0.03;                // tyre and spin loss, relative (tyre pressure and temperature, oil)
  double hold_bias_sd_n = 1.0;          // N
  double warm_up_sd = 0.10;             // relative, time constant and cold excess
  double compensation_error_sd = 0.01;  // absolute fraction of the parasitic loss
};

// A named set of truth spreads for the benchmark: the spreads, the encoder noise and the day-to-day change.
struct TruthPreset {
  const char* name = "typical";
  TruthSpread spread;
  double speed_noise_kmh = 0.05;  // encoder noise, standard deviation (sampled at the session's rate)
  DayToDaySpread day;
};
// "typical" (the simulator's long-standing values) and "harsh" (hold bias σ 15 N, inertia error σ 1.5 %,
// speed noise 0.2 km/h, warm-up τ 1500–3000 s with cold excess 0.6–1.0, loss–mass correlation 0.43, hold bias
// speed part σ 10 N at 130 km/h, load-cell gain σ 1 % and offset σ 4.9 N); nullptr for any other name.
const TruthPreset* truth_preset(std::string_view name);

// A truth for a vehicle of this test mass and rotating mass on this dyno layout; `dyno` supplies the
// rollers (diameter, base inertia, parasitic curve, noise).
Truth random_truth(double test_mass_kg, double rotating_mass_kg, core::AxleLayout layout,
                   const DynoTruth& dyno, std::mt19937_64& rng, const TruthSpread& spread = {});

// The same vehicle on the same cell on another day: `first` redrawn within `day` (a new object; `first` is
// not changed).
Truth redraw_day(const Truth& first, std::mt19937_64& rng, const DayToDaySpread& day);

}  // namespace loadtrim::physics
