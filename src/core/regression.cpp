#include "core/regression.hpp"

#include <cmath>

namespace loadtrim::core {

PolynomialFit fit_polynomial(std::span<const double> x, std::span<const double> y, int degree,
                             std::span<const double> weights) {
  PolynomialFit fit;
  const int n = static_cast<int>(x.size());
  const int p = degree + 1;
  if (degree < 0 || y.size() != x.size() || (!weights.empty() && weights.size() != x.size())) {
    fit.message = "mismatched input sizes";
    return fit;
  }
  if (n < p) {
    fit.message = "needs at least " + std::to_string(p) + " points, has " + std::to_string(n);
    return fit;
  }
  // Centre-free scaling: divide each column by its largest magnitude so all columns are O(1).
  Eigen::MatrixXd design(n, p);
  Eigen::VectorXd rhs(n);
  for (int i = 0; i < n; ++i) {
    const double w = weights.empty() ? 1.0 : weights[static_cast<std::size_t>(i)];
    if (!(w >= 0.0) || !std::isfinite(w)) {
      fit.message = "weights must be finite and non-negative";
      return fit;
    }
    const double sw = std::sqrt(w);
    double power = 1.0;
    for (int j = 0; j < p; ++j) {
      design(i, j) = sw * power;
      power *= x[static_cast<std::size_t>(i)];
    }
    rhs(i) = sw * y[static_cast<std::size_t>(i)];
  }
  Eigen::VectorXd col_scale = design.cwiseAbs().colwise().maxCoeff().transpose();
  for (int j = 0; j < p; ++j)
    if (col_scale(j) == 0.0) col_scale(j) = 1.0;
  const Eigen::MatrixXd scaled = design * col_scale.cwiseInverse().asDiagonal();
  Eigen::ColPivHouseholderQR<Eigen::MatrixXd> qr(scaled);
  if (qr.rank() < p) {
    fit.message = "design matrix is rank deficient (too few distinct speeds)";
    return fit;
  }
  const Eigen::VectorXd z = qr.solve(rhs);
  fit.coefficients = z.cwiseQuotient(col_scale);

  Eigen::VectorXd fitted(n);
  fit.residuals.resize(n);
  double rss = 0.0;
  for (int i = 0; i < n; ++i) {
    double value = 0.0, power = 1.0;
    for (int j = 0; j < p; ++j) {
      value += fit.coefficients(j) * power;
      power *= x[static_cast<std::size_t>(i)];
    }
    fit.residuals(i) = y[static_cast<std::size_t>(i)] - value;
    const double w = weights.empty() ? 1.0 : weights[static_cast<std::size_t>(i)];
    rss += w * fit.residuals(i) * fit.residuals(i);
  }
  fit.degrees_of_freedom = n - p;
  const double s2 = fit.degrees_of_freedom > 0 ? rss / fit.degrees_of_freedom : 0.0;
  fit.residual_sd = std::sqrt(s2);
  // (XᵀWX)⁻¹ from the R factor of the scaled problem: (R⁻¹)(R⁻¹)ᵀ, then undo pivoting and scaling.
  const Eigen::MatrixXd r = qr.matrixR().topLeftCorner(p, p).template triangularView<Eigen::Upper>();
  const Eigen::MatrixXd rinv = r.inverse();
  const Eigen::MatrixXd cov_perm = rinv * rinv.transpose();
  const auto perm = qr.colsPermutation();
  const Eigen::MatrixXd cov_scaled = perm * cov_perm * perm.transpose();
  const Eigen::MatrixXd inv_scale = col_scale.cwiseInverse().asDiagonal();
  fit.covariance = s2 * (inv_scale * cov_scaled * inv_scale);
  fit.ok = true;
  return fit;
}

double RoadLoadFit::force_standard_error_n(double speed_kmh) const {
  const Eigen::Vector3d g(1.0, speed_kmh, speed_kmh * speed_kmh);
  const double var = g.dot(covariance * g);
  return var > 0.0 ? std::sqrt(var) : 0.0;
}

RoadLoadFit fit_road_load(std::span<const double> speeds_kmh, std::span<const double> forces_n,
                          std::span<const double> weights) {
  RoadLoadFit out;
  const PolynomialFit pf = fit_polynomial(speeds_kmh, forces_n, 2, weights);
  out.ok = pf.ok;
  out.message = pf.message;
  if (!pf.ok) return out;
  out.coefficients = {pf.coefficients(0), pf.coefficients(1), pf.coefficients(2)};
  out.covariance = pf.covariance;
  out.residuals_n.assign(pf.residuals.data(), pf.residuals.data() + pf.residuals.size());
  out.residual_sd_n = pf.residual_sd;
  return out;
}

}  // namespace loadtrim::core
