#include "core/predict.hpp"

#include <cmath>

#include "core/units.hpp"

namespace loadtrim::core {

namespace {
// ∫_{x2}^{x1} dx / (c·x² + b·x + a), assuming the denominator is positive on [x2, x1].
double inverse_quadratic_integral(double a, double b, double c, double x1, double x2) {
  const double scale = std::abs(a) + std::abs(b) * x1 + std::abs(c) * x1 * x1;
  if (std::abs(c) * x1 * x1 < 1e-13 * scale) {  // effectively linear
    if (std::abs(b) * x1 < 1e-13 * scale) return (x1 - x2) / a;
    return std::log((a + b * x1) / (a + b * x2)) / b;
  }
  const double d = 4.0 * a * c - b * b;
  if (d > 0.0) {
    const double s = std::sqrt(d);
    // atan(u1) − atan(u2) as one atan2: keeps precision when both arguments are large, and u1 > u2 puts the
    // difference in (0, π), which atan2 with a positive first argument returns without a branch cut.
    const double u1 = (2.0 * c * x1 + b) / s, u2 = (2.0 * c * x2 + b) / s;
    return (2.0 / s) * std::atan2(u1 - u2, 1.0 + u1 * u2);
  }
  if (d < 0.0) {
    const double s = std::sqrt(-d);
    auto g = [&](double x) { return std::log(std::abs((2.0 * c * x + b - s) / (2.0 * c * x + b + s))); };
    return (g(x1) - g(x2)) / s;
  }
  return -2.0 / (2.0 * c * x1 + b) + 2.0 / (2.0 * c * x2 + b);
}
}  // namespace

std::optional<double> coastdown_time_s(const RoadLoad& load, double mass_kg, double v_from_kmh,
                                       double v_to_kmh) {
  if (!(v_from_kmh > v_to_kmh) || !(mass_kg > 0.0)) return std::nullopt;
  // The load must stay positive on [v_to, v_from]: check the ends and the vertex of the parabola.
  auto positive = [&](double v) { return load.force_n(v) > 0.0; };
  if (!positive(v_from_kmh) || !positive(v_to_kmh)) return std::nullopt;
  if (load.f2_n_per_kmh2 != 0.0) {
    const double vertex = -load.f1_n_per_kmh / (2.0 * load.f2_n_per_kmh2);
    if (vertex > v_to_kmh && vertex < v_from_kmh && !positive(vertex)) return std::nullopt;
  }
  // SI: F = A + B·v + C·v² with v in m/s.
  const double a = load.f0_n;
  const double b = load.f1_n_per_kmh * units::kKmhPerMps;
  const double c = load.f2_n_per_kmh2 * units::kKmhPerMps * units::kKmhPerMps;
  const double x1 = units::kmh_to_mps(v_from_kmh), x2 = units::kmh_to_mps(v_to_kmh);
  return mass_kg * inverse_quadratic_integral(a, b, c, x1, x2);
}

std::vector<std::optional<double>> predicted_band_times_s(const RoadLoad& load, double mass_kg,
                                                          std::span<const double> reference_speeds_kmh,
                                                          double half_band_kmh) {
  std::vector<std::optional<double>> out;
  out.reserve(reference_speeds_kmh.size());
  for (double v : reference_speeds_kmh)
    out.push_back(coastdown_time_s(load, mass_kg, v + half_band_kmh, v - half_band_kmh));
  return out;
}

}  // namespace loadtrim::core
