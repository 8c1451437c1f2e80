#include "core/road_load.hpp"

#include <cmath>

#include "core/units.hpp"

namespace loadtrim::core {

double RoadLoad::power_w(double speed_kmh) const {
  return force_n(speed_kmh) * units::kmh_to_mps(speed_kmh);
}

RoadLoad to_metric(const RoadLoadUs& us) {
  // B [lbf/mph] → N/(km/h): × N/lbf ÷ (km/h per mph); C likewise with the square.
  return {units::lbf_to_n(us.a_lbf), units::lbf_to_n(us.b_lbf_per_mph) / units::kKmhPerMph,
          units::lbf_to_n(us.c_lbf_per_mph2) / (units::kKmhPerMph * units::kKmhPerMph)};
}

RoadLoadUs to_us(const RoadLoad& m) {
  return {units::n_to_lbf(m.f0_n), units::n_to_lbf(m.f1_n_per_kmh * units::kKmhPerMph),
          units::n_to_lbf(m.f2_n_per_kmh2 * units::kKmhPerMph * units::kKmhPerMph)};
}

double round_to(double value, int decimals) {
  const double scale = std::pow(10.0, decimals);
  return std::round(value * scale) / scale;
}

RoadLoad rounded(const RoadLoad& c, const Rounding& r) {
  return {round_to(c.f0_n, r.f0_decimals), round_to(c.f1_n_per_kmh, r.f1_decimals),
          round_to(c.f2_n_per_kmh2, r.f2_decimals)};
}

std::vector<double> forces_at(const RoadLoad& c, std::span<const double> speeds_kmh) {
  std::vector<double> out;
  out.reserve(speeds_kmh.size());
  for (double v : speeds_kmh) out.push_back(c.force_n(v));
  return out;
}

}  // namespace loadtrim::core
