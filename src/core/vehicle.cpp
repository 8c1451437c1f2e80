#include "core/vehicle.hpp"

#include <cmath>

#include "core/units.hpp"

namespace loadtrim::core {

const char* to_string(Drive d) {
  switch (d) {
    case Drive::front:
      return "front";
    case Drive::rear:
      return "rear";
    case Drive::all:
      return "all";
  }
  return "unknown";
}
AxleLayout axle_layout_for(Drive d) {
  return d == Drive::all ? AxleLayout::two_axle : AxleLayout::single_axle;
}

bool parse(const std::string& s, Drive& out) {
  if (s == "front") return out = Drive::front, true;
  if (s == "rear") return out = Drive::rear, true;
  if (s == "all") return out = Drive::all, true;
  return false;
}

double resolved_rotating_mass_kg(const VehicleTarget& v, const MassRule& rule) {
  if (v.rotating_mass_kg) return *v.rotating_mass_kg;
  return v.mass_in_running_order_kg ? rotating_mass_kg(*v.mass_in_running_order_kg, rule) : 0.0;
}

Problems plausibility(const VehicleTarget& v) {
  Problems ps;
  auto err = [&](std::string key, std::string msg) {
    ps.push_back({Problem::Severity::error, std::move(key), std::move(msg)});
  };
  auto warn = [&](std::string key, std::string msg) {
    ps.push_back({Problem::Severity::warning, std::move(key), std::move(msg)});
  };
  if (!(v.test_mass_kg >= kMinTestMass_kg && v.test_mass_kg <= kMaxTestMass_kg))
    err("vehicle.test_mass_kg", "is " + num(v.test_mass_kg) + ", allowed " + num(kMinTestMass_kg) + " to " +
                                    num(kMaxTestMass_kg) + " kg");
  if (v.rotating_mass_kg &&
      !(*v.rotating_mass_kg >= 0.0 && *v.rotating_mass_kg <= 0.2 * std::max(v.test_mass_kg, 1.0)))
    err("vehicle.rotating_mass_kg",
        "is " + num(*v.rotating_mass_kg) + ", allowed 0 to 20 % of the test mass");
  if (!v.rotating_mass_kg && !v.mass_in_running_order_kg)
    err("vehicle", "needs rotating_mass_kg or mass_in_running_order_kg (m_r is 3 % of MRO + 25 kg)");
  if (v.mass_in_running_order_kg && v.test_mass_kg > 0.0 &&
      !(*v.mass_in_running_order_kg > 0.5 * v.test_mass_kg &&
        *v.mass_in_running_order_kg <= v.test_mass_kg * 1.05))
    warn("vehicle.mass_in_running_order_kg", "is " + num(*v.mass_in_running_order_kg) +
                                                 " kg, usually between half the test mass and the test mass");
  if (!(v.max_speed_kmh >= 30.0 && v.max_speed_kmh <= 400.0))
    err("vehicle.max_speed_kmh", "is " + num(v.max_speed_kmh) + ", allowed 30 to 400 km/h");
  const auto& t = v.target;
  if (!std::isfinite(t.f0_n) || !std::isfinite(t.f1_n_per_kmh) || !std::isfinite(t.f2_n_per_kmh2)) {
    err("target", "coefficients must be finite numbers");
    return ps;
  }
  if (t.f2_n_per_kmh2 < 0.0)
    err("target.f2_n_per_kmh2", "is " + num(t.f2_n_per_kmh2) + ", must be positive (allowed 0 to " +
                                    num(kMaxTargetF2_n_per_kmh2) + " N/(km/h)²)");
  else if (t.f2_n_per_kmh2 > kMaxTargetF2_n_per_kmh2)
    err("target.f2_n_per_kmh2",
        "is " + num(t.f2_n_per_kmh2) + ", allowed 0 to " + num(kMaxTargetF2_n_per_kmh2) + " N/(km/h)²");
  // F0 may be zero (CFR 86.529-98 Figure F98-9's lightest row has A = 0), never negative.
  if (!(t.f0_n >= 0.0))
    err("target.f0_n", "is " + num(t.f0_n) + ", must not be negative (allowed 0 to 5000 N)");
  if (v.test_mass_kg > 0.0 && t.f0_n > 0.0) {
    const double ratio = t.f0_n / (v.test_mass_kg * units::kStandardGravity_mps2);
    if (ratio < 0.004)
      warn("target.f0_n", "F0/(TM·g) = " + num(ratio) +
                              " is below the usual 0.004–0.03: was F0 given in lbf, or the mass in lb?");
    else if (ratio > 0.03)
      warn("target.f0_n",
           "F0/(TM·g) = " + num(ratio) +
               " is above the usual 0.004–0.03: was the mass given in tonnes, or F0 in a wrong unit?");
  }
  if (std::abs(t.f1_n_per_kmh) > kUsualTargetF1_n_per_kmh)
    warn("target.f1_n_per_kmh", "is " + num(t.f1_n_per_kmh) + ", outside the usual ±" +
                                    num(kUsualTargetF1_n_per_kmh) + " N/(km/h): check units");
  if (t.f2_n_per_kmh2 > 0.0 && t.f2_n_per_kmh2 < kUsualMinTargetF2_n_per_kmh2)
    warn("target.f2_n_per_kmh2", "is " + num(t.f2_n_per_kmh2) + ", below the usual " +
                                     num(kUsualMinTargetF2_n_per_kmh2) + "–" + num(kMaxTargetF2_n_per_kmh2) +
                                     " N/(km/h)²: given per (m/s)² or per mph²?");
  if (t.force_n(20.0) <= 0.0)
    err("target", "force at 20 km/h is not positive: the vehicle would not decelerate");
  return ps;
}

}  // namespace loadtrim::core
