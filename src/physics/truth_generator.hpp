// Randomised but realistic truths for simulated vehicles, scaled to the public US EPA Test Car List: there
// the target minus set load at 20 km/h has a median of about 115 N (p95 about 250 N) and at 130 km/h about
// 160 N (p95 about 350 N) (samples/data/README.md; docs/standards.md §5). Pure: the generator is passed in.
#pragma once

#include <random>

#include "core/profile.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::physics {

struct TruthSpread {
  double loss_median_20_n = 115.0, loss_p95_20_n = 250.0;    // EPA target − set, 20 km/h
  double loss_median_130_n = 160.0, loss_p95_130_n = 350.0;  // and 130 km/h
  double inertia_error_sd = 0.003;                           // common practice, no source
  double compensation_error_sd = 0.05;                       // common practice, no source
  double hold_bias_sd_n = 3.0;                               // common practice, no source
};

// A truth for a vehicle of this test mass and rotating mass on this dyno layout; `dyno` supplies the
// rollers (diameter, base inertia, parasitic curve, noise).
Truth random_truth(double test_mass_kg, double rotating_mass_kg, core::AxleLayout layout,
                   const DynoTruth& dyno, std::mt19937_64& rng, const TruthSpread& spread = {});

}  // namespace loadtrim::physics
