// Predicted coast-down times, closed form. For m·dv/dt = −(A + B·v + C·v²) the time from v1 down to v2 is
// m·∫_{v2}^{v1} dv / (A + B·v + C·v²), solved by completing the square (textbook integral; docs/standards.md
// §6.4). Pure: no I/O.
#pragma once

#include <optional>
#include <span>
#include <vector>

#include "core/road_load.hpp"

namespace loadtrim::core {

// Time in s for a mass (kg) to coast from v_from_kmh down to v_to_kmh under the road load `load`.
// nullopt when the load is not positive everywhere on the interval (the mass would never get there).
std::optional<double> coastdown_time_s(const RoadLoad& load, double mass_kg, double v_from_kmh,
                                       double v_to_kmh);

// Δt_j for each reference speed: from v_j + half_band down to v_j − half_band. Entries are nullopt as above.
std::vector<std::optional<double>> predicted_band_times_s(const RoadLoad& load, double mass_kg,
                                                          std::span<const double> reference_speeds_kmh,
                                                          double half_band_kmh);

}  // namespace loadtrim::core
