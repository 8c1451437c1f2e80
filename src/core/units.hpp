// Unit conversions at the edges of loadtrim. Everything inside is SI, or km/h where the standard states
// road-load coefficients per km/h (UN GTR 15 Annex 4 / EU 2017/1151 Sub-Annex 4 §2.4).
// Factors are the exact values of NIST SP 811, Appendix B.
#pragma once

namespace loadtrim::core::units {

inline constexpr double kKmhPerMps = 3.6;                 // 1 m/s = 3.6 km/h (definition)
inline constexpr double kKgPerLb = 0.45359237;            // NIST SP 811 App. B, exact
inline constexpr double kKmhPerMph = 1.609344;            // NIST SP 811 App. B, exact (1 mi = 1609.344 m)
inline constexpr double kMpsPerMph = 0.44704;             // NIST SP 811 App. B, exact
inline constexpr double kStandardGravity_mps2 = 9.80665;  // NIST SP 811, standard acceleration of gravity
inline constexpr double kNewtonPerLbf = kKgPerLb * kStandardGravity_mps2;  // 4.4482216152605 N, exact
inline constexpr double kMetrePerFoot = 0.3048;                            // NIST SP 811 App. B, exact
// The horsepower of 550 ft·lbf/s (NIST SP 811 App. B: 7.456999 E+02 W), from the exact factors above:
// 745.69987158227022 W.
inline constexpr double kWattPerHp = 550.0 * kMetrePerFoot * kNewtonPerLbf;

constexpr double kmh_to_mps(double speed_kmh) {
  return speed_kmh / kKmhPerMps;
}
constexpr double mps_to_kmh(double speed_mps) {
  return speed_mps * kKmhPerMps;
}
constexpr double mph_to_kmh(double speed_mph) {
  return speed_mph * kKmhPerMph;
}
constexpr double kmh_to_mph(double speed_kmh) {
  return speed_kmh / kKmhPerMph;
}
constexpr double lbf_to_n(double force_lbf) {
  return force_lbf * kNewtonPerLbf;
}
constexpr double n_to_lbf(double force_n) {
  return force_n / kNewtonPerLbf;
}
constexpr double lb_to_kg(double mass_lb) {
  return mass_lb * kKgPerLb;
}
constexpr double kg_to_lb(double mass_kg) {
  return mass_kg / kKgPerLb;
}

}  // namespace loadtrim::core::units

namespace loadtrim {
namespace units = core::units;  // short spelling for code outside the core
}
