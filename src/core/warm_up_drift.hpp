// The vehicle's warm-up trend and the drift still to come (docs/standards.md §3.12): the force the dyno needs
// to hold the warm-up speed falls as the drivetrain warms. Fitted as F(t) = F∞ + A·exp(−t/τ) (first-order
// warming, textbook), t from the start of the warm-up hold; the drift still to come at time t is
// |A|·exp(−t/τ), the force the loss will still fall (or rise) by at the warm-up speed. Pure: no I/O.
#pragma once

#include <cstddef>
#include <optional>
#include <span>
#include <string>

namespace loadtrim::core {

struct DriftPoint {
  double t_s = 0.0;      // controller time since the warm-up hold began, at the middle of the window
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

// How well a curve must fit its windows before its forecast moves a setting (lab policy, no source: the hold
// windows of a warm vehicle scatter by well under a newton; 2 N of rms residual is a curve that is not the
// vehicle's).
inline constexpr double kMaxCurveRmsForOutlookN = 2.0;

// The change of the warm-up-speed force from t1_s to t2_s (s since the warm-up hold began) that the curve
// predicts, A·(exp(−t2/τ) − exp(−t1/τ)) (warm_up.anticipate_drift, docs/standards.md §3.16). nullopt when the
// curve is not fitted, not resolved (τ at the search's upper bound: the decay's shape is not known, so
// neither is its future), fits its windows with an rms residual above max_rms_n, or the times are not finite
// with 0 <= t1_s <= t2_s.
std::optional<double> predicted_change_n(const WarmUpCurve& c, double t1_s, double t2_s,
                                         double max_rms_n = kMaxCurveRmsForOutlookN);

// How long the recent slope is carried on at least (lab policy, no source: ten minutes, half the road
// warm-up's 20 minutes).
inline constexpr double kTrendHorizonS = 600.0;

// The drift still to come as the warm-up's end rule judges it (stable_by "trend", docs/standards.md §3.12):
// the larger of the curve's |A|·exp(−t/τ) and the recent slope carried on, |s|·max(τ, horizon_s), where s is
// the least-squares slope of the last `recent` windows. For one first-order warming the two agree (the slope
// of A·exp(−t/τ) is −A/τ·exp(−t/τ)); when the warming has a second, slower part, or noise or a start spike
// bends the fit to a short τ, the curve alone says "settled" while the force still falls, and the slope
// carried over the horizon does not. nullopt when the curve cannot be fitted (or is not resolved: τ at the
// search's bound) or fewer than `recent` windows exist.
std::optional<double> remaining_drift_for_end_n(std::span<const DriftPoint> points, double t_s,
                                                double horizon_s, std::size_t recent = 5);

}  // namespace loadtrim::core
