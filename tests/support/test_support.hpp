// Shared test helpers: relative closeness, reference-data readers, and coast-down traces from the textbook
// closed-form solution (independent of loadtrim's own integrator).
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "core/road_load.hpp"

namespace loadtrim::testing {

// |a − b| ≤ rel·max(|a|, |b|), for EXPECT_PRED3.
bool close_rel(double a, double b, double rel);

// Observations (y, x) of a NIST StRD file in tests/data, and its certified coefficients from the header.
struct StrdData {
  std::vector<double> x, y;
  std::vector<double> certified;
};
StrdData read_strd(const std::string& file_name);

// Exact speed (km/h) at time t_s of a mass coasting from v0_kmh under F = f0 + f1·v + f2·v² (v km/h), for
// loads whose discriminant 4AC − B² > 0 in SI. From m·du/dt = −C·(u² + K²), u = v + B/(2C), K² = (4AC −
// B²)/(4C²): u(t) = K·tan(atan(u0/K) − C·K·t/m) (table integral ∫du/(u² + K²) = atan(u/K)/K).
double exact_speed_kmh(const core::RoadLoad& load, double mass_kg, double v0_kmh, double t_s);

struct SyntheticTrace {
  std::vector<double> time_s, speed_kmh;
};
// Samples of the exact solution from v0 until below v_end, at rate_hz, with white speed noise (sd, km/h).
SyntheticTrace exact_trace(const core::RoadLoad& load, double mass_kg, double v0_kmh, double v_end_kmh,
                           double rate_hz, double noise_sd_kmh = 0.0, std::uint64_t seed = 1);

}  // namespace loadtrim::testing
