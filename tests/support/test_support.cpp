#include "support/test_support.hpp"

#include <cmath>
#include <fstream>
#include <random>
#include <sstream>
#include <stdexcept>

namespace loadtrim::testing {

bool close_rel(double a, double b, double rel) {
  return std::abs(a - b) <= rel * std::max(std::abs(a), std::abs(b));
}

StrdData read_strd(const std::string& file_name) {
  std::ifstream in(std::string(LOADTRIM_TEST_DATA_DIR) + "/" + file_name);
  if (!in) throw std::runtime_error("cannot open " + file_name);
  StrdData d;
  std::string line;
  while (std::getline(in, line)) {
    if (line.empty()) continue;
    if (line[0] == '#') {
      // Header lines "# B0  <estimate>  <sd>" carry the certified values.
      std::istringstream ss(line.substr(1));
      std::string name;
      double est;
      if (ss >> name && name.size() == 2 && name[0] == 'B' &&
          std::isdigit(static_cast<unsigned char>(name[1])) && ss >> est)
        d.certified.push_back(est);
      continue;
    }
    std::istringstream ss(line);
    double y, x;
    if (ss >> y >> x) {
      d.y.push_back(y);
      d.x.push_back(x);
    }
  }
  return d;
}

double exact_speed_kmh(const core::RoadLoad& load, double mass_kg, double v0_kmh, double t_s) {
  const double a = load.f0_n, b = load.f1_n_per_kmh * 3.6, c = load.f2_n_per_kmh2 * 3.6 * 3.6;
  const double k = std::sqrt(4.0 * a * c - b * b) / (2.0 * c);
  const double u0 = v0_kmh / 3.6 + b / (2.0 * c);
  const double u = k * std::tan(std::atan(u0 / k) - c * k * t_s / mass_kg);
  return (u - b / (2.0 * c)) * 3.6;
}

SyntheticTrace exact_trace(const core::RoadLoad& load, double mass_kg, double v0_kmh, double v_end_kmh,
                           double rate_hz, double noise_sd_kmh, std::uint64_t seed) {
  SyntheticTrace tr;
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> n(0.0, 1.0);
  for (long i = 0;; ++i) {
    const double t = static_cast<double>(i) / rate_hz;
    const double v = exact_speed_kmh(load, mass_kg, v0_kmh, t);
    tr.time_s.push_back(t);
    tr.speed_kmh.push_back(v + noise_sd_kmh * n(rng));
    if (v < v_end_kmh) break;
  }
  return tr;
}

}  // namespace loadtrim::testing
