// Least squares with Eigen: polynomial fits (used for the road-load regression of UN GTR 15 §8.1.3.3 and
// checked against NIST StRD certified values) and the road-load fit of forces at reference speeds.
// Pure: no I/O.
#pragma once

#include <Eigen/Dense>
#include <span>
#include <string>
#include <vector>

#include "core/road_load.hpp"

namespace loadtrim::core {

struct PolynomialFit {
  bool ok = false;
  std::string message;           // why not, when !ok
  Eigen::VectorXd coefficients;  // c0 + c1·x + ... + c_d·x^d
  Eigen::VectorXd residuals;     // y − fit, per observation
  Eigen::MatrixXd covariance;    // of the coefficients: s²·(XᵀWX)⁻¹, s² = weighted RSS / (n − p)
  double residual_sd = 0.0;      // s
  int degrees_of_freedom = 0;    // n − p
};

// Weighted least squares (weights empty = all 1). Columns are scaled before a column-pivoting Householder QR,
// which keeps ill-conditioned data (NIST Pontius, x up to 3e6) accurate to ~1e-10 relative.
PolynomialFit fit_polynomial(std::span<const double> x, std::span<const double> y, int degree,
                             std::span<const double> weights = {});

struct RoadLoadFit {
  bool ok = false;
  std::string message;
  RoadLoad coefficients;
  Eigen::Matrix3d covariance = Eigen::Matrix3d::Zero();  // f0, f1, f2
  std::vector<double> residuals_n;
  double residual_sd_n = 0.0;
  // Standard error of the fitted force at a speed, N.
  double force_standard_error_n(double speed_kmh) const;
};

RoadLoadFit fit_road_load(std::span<const double> speeds_kmh, std::span<const double> forces_n,
                          std::span<const double> weights = {});

}  // namespace loadtrim::core
