#include "core/warm_up_drift.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace loadtrim::core {

double WarmUpCurve::force_n(double t_s) const {
  return settled_n + amplitude_n * std::exp(-t_s / tau_s);
}

double WarmUpCurve::remaining_drift_n(double t_s) const {
  return std::abs(amplitude_n) * std::exp(-t_s / tau_s);
}

WarmUpCurve fit_warm_up_curve(std::span<const DriftPoint> pts, double tau_min_s, double tau_max_s) {
  WarmUpCurve out;
  out.points = static_cast<int>(pts.size());
  if (pts.size() < 4) {
    out.why = "too few hold windows (" + std::to_string(pts.size()) + ", at least 4)";
    return out;
  }
  double t_lo = pts[0].t_s, t_hi = pts[0].t_s;
  for (const auto& p : pts) {
    if (!std::isfinite(p.t_s) || !std::isfinite(p.force_n)) {
      out.why = "a hold window is not a finite number";
      return out;
    }
    t_lo = std::min(t_lo, p.t_s);
    t_hi = std::max(t_hi, p.t_s);
  }
  if (!(t_hi - t_lo > 0.0) || !(tau_min_s > 0.0) || !(tau_max_s > tau_min_s)) {
    out.why = "the hold windows span no time";
    return out;
  }
  constexpr int kGrid = 400;
  double best = std::numeric_limits<double>::infinity();
  for (int g = 0; g <= kGrid; ++g) {
    const double tau = tau_min_s * std::pow(tau_max_s / tau_min_s, static_cast<double>(g) / kGrid);
    // Normal equations of y = c + A·x with x = exp(−t/τ).
    double n = 0, sx = 0, sxx = 0, sy = 0, sxy = 0;
    for (const auto& p : pts) {
      const double x = std::exp(-p.t_s / tau);
      n += 1;
      sx += x;
      sxx += x * x;
      sy += p.force_n;
      sxy += x * p.force_n;
    }
    const double det = n * sxx - sx * sx;
    if (!(std::abs(det) > 1e-12 * n * n)) continue;
    const double a = (n * sxy - sx * sy) / det;
    const double c = (sy - a * sx) / n;
    double sse = 0;
    for (const auto& p : pts) {
      const double r = p.force_n - (c + a * std::exp(-p.t_s / tau));
      sse += r * r;
    }
    if (sse < best) {
      best = sse;
      out.settled_n = c;
      out.amplitude_n = a;
      out.tau_s = tau;
      out.tau_at_bound = g == kGrid;
    }
  }
  if (!std::isfinite(best)) {
    out.why = "the hold windows do not determine a curve";
    return out;
  }
  out.ok = true;
  out.rms_residual_n = std::sqrt(best / static_cast<double>(pts.size()));
  return out;
}

std::optional<double> predicted_change_n(const WarmUpCurve& c, double t1_s, double t2_s, double max_rms_n) {
  if (!c.ok || c.tau_at_bound || !(c.rms_residual_n <= max_rms_n)) return std::nullopt;
  if (!std::isfinite(t1_s) || !std::isfinite(t2_s) || !(t1_s >= 0.0) || !(t2_s >= t1_s)) return std::nullopt;
  const double change = c.amplitude_n * (std::exp(-t2_s / c.tau_s) - std::exp(-t1_s / c.tau_s));
  if (!std::isfinite(change)) return std::nullopt;
  return change;
}

std::optional<double> remaining_drift_for_end_n(std::span<const DriftPoint> points, double t_s,
                                                double horizon_s, std::size_t recent) {
  if (recent < 2 || points.size() < recent) return std::nullopt;
  const WarmUpCurve c = fit_warm_up_curve(points);
  if (!c.ok || c.tau_at_bound) return std::nullopt;
  // Least-squares slope of the last `recent` windows (textbook linear regression).
  const auto last = points.subspan(points.size() - recent);
  double mt = 0.0, mf = 0.0;
  for (const auto& p : last) {
    mt += p.t_s;
    mf += p.force_n;
  }
  mt /= static_cast<double>(recent);
  mf /= static_cast<double>(recent);
  double stt = 0.0, stf = 0.0;
  for (const auto& p : last) {
    stt += (p.t_s - mt) * (p.t_s - mt);
    stf += (p.t_s - mt) * (p.force_n - mf);
  }
  if (!(stt > 0.0)) return std::nullopt;
  const double slope = stf / stt;
  return std::max(c.remaining_drift_n(t_s), std::abs(slope) * std::max(c.tau_s, horizon_s));
}

}  // namespace loadtrim::core
