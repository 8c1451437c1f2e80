// The vehicle's warm-up trend and the drift still to come (docs/standards.md §3.12): the force the dyno needs
// to hold the warm-up speed falls as the drivetrain warms. Fitted as F(t) = F∞ + A·exp(−t/τ) (first-order
// warming, textbook), t from the start of motoring; the drift still to come at time t is |A|·exp(−t/τ), the
// force the loss will still fall (or rise) by at the warm-up speed. Pure: no I/O.
#pragma once

#include <span>
#include <string>

namespace loadtrim::core {

struct DriftPoint {
  double t_s = 0.0;      // controller time since motoring began, at the middle of the window
  double force_n = 0.0;  // mean hold force over the window
};

struct WarmUpCurve {
  bool ok = false;
  std::string why;  // when not ok: too few points, not finite, ...
  double settled_n = 0.0, amplitude_n = 0.0, tau_s = 0.0;
  double rms_residual_n = 0.0;
  int points = 0;
  bool tau_at_bound = false;  // the best τ is the search's upper bound: the decay is not resolved
  double force_n(double t_s) const;
  double remaining_drift_n(double t_s) const;
};

// Least squares over τ on a log grid from tau_min_s to tau_max_s (for each τ the model is linear in F∞ and
// A). Needs at least 4 finite points spanning some time.
WarmUpCurve fit_warm_up_curve(std::span<const DriftPoint> points, double tau_min_s = 30.0,
                              double tau_max_s = 20000.0);

}  // namespace loadtrim::core
