// Road-load coefficients: F(v) = f0 + f1·v + f2·v², v in km/h, F in N
// (EU 2017/1151 Sub-Annex 4 §2.4; UN GTR 15 Annex 4). US practice writes A, B, C in lbf, lbf/mph, lbf/mph²
// (40 CFR 1066.210); conversions use the exact NIST SP 811 factors. Pure value types, no I/O.
#pragma once

#include <cmath>
#include <span>
#include <vector>

namespace loadtrim::core {

// Metric coefficients, the form used everywhere inside loadtrim.
struct RoadLoad {
  double f0_n = 0.0;
  double f1_n_per_kmh = 0.0;
  double f2_n_per_kmh2 = 0.0;

  double force_n(double speed_kmh) const {
    return f0_n + (f1_n_per_kmh + f2_n_per_kmh2 * speed_kmh) * speed_kmh;
  }
  // Power absorbed at a speed, W (force × speed in m/s).
  double power_w(double speed_kmh) const;

  RoadLoad operator+(const RoadLoad& o) const {
    return {f0_n + o.f0_n, f1_n_per_kmh + o.f1_n_per_kmh, f2_n_per_kmh2 + o.f2_n_per_kmh2};
  }
  RoadLoad operator-(const RoadLoad& o) const {
    return {f0_n - o.f0_n, f1_n_per_kmh - o.f1_n_per_kmh, f2_n_per_kmh2 - o.f2_n_per_kmh2};
  }
  RoadLoad scaled(double k) const { return {f0_n * k, f1_n_per_kmh * k, f2_n_per_kmh2 * k}; }
  // Every coefficient a finite number.
  bool finite() const {
    return std::isfinite(f0_n) && std::isfinite(f1_n_per_kmh) && std::isfinite(f2_n_per_kmh2);
  }
  bool operator==(const RoadLoad&) const = default;
};

// US coefficients, only at the edges (input files, reports).
struct RoadLoadUs {
  double a_lbf = 0.0;
  double b_lbf_per_mph = 0.0;
  double c_lbf_per_mph2 = 0.0;
  double force_lbf(double speed_mph) const {
    return a_lbf + (b_lbf_per_mph + c_lbf_per_mph2 * speed_mph) * speed_mph;
  }
};

RoadLoad to_metric(const RoadLoadUs& us);
RoadLoadUs to_us(const RoadLoad& metric);

// Decimals used when coefficients are reported (2018/1832 amending Sub-Annex 4 §2.4: f0 1, f1 3, f2 5).
struct Rounding {
  int f0_decimals = 1;
  int f1_decimals = 3;
  int f2_decimals = 5;
};
RoadLoad rounded(const RoadLoad& c, const Rounding& r);
double round_to(double value, int decimals);

// Forces of a curve at the given reference speeds.
std::vector<double> forces_at(const RoadLoad& c, std::span<const double> speeds_kmh);

}  // namespace loadtrim::core
