// The setting envelope (issue 13): what a target may ask of the cell, what a set curve may ask of the dyno,
// how far one write may move the setting, and when the loop shows that the controller does not follow the
// setting. Pure: no I/O, clocks or threads. All curves are F(v) = f0 + f1·v + f2·v², v in km/h, F in N (EU
// SA4 §2.4); every bound is checked at the exact extreme of the quadratic on the interval (both ends and the
// vertex v = −f1/(2·f2) when it lies inside), never on a grid of sample speeds.
#pragma once

#include <optional>
#include <span>
#include <string>
#include <vector>

#include "core/problem.hpp"
#include "core/road_load.hpp"

namespace loadtrim::core {

struct EnvelopeLimits {
  // The cell's force limit: |F(v)| of the target and of every set curve stays at or below it for 0 ≤ v ≤
  // top_speed_kmh. Must be positive: 0 (the default) means "not given", and then nothing passes (fail safe).
  // check_target alone also takes +∞: no cell is known (`target` without --cell), so the limit is not
  // compared.
  double max_force_n = 0;
  // The highest speed the session reaches: the profile's start speed (top reference speed + run-up margin).
  double top_speed_kmh = 0;
  // |F_target(v) − F_set(v)| at most this on [0, top]: the car's own losses on the rollers, which the set
  // curve leaves out. Default 1000 N, from the public EPA Test Car List (samples/data, 3485 rows, MY2016 and
  // MY2019): max over 0–130 km/h of |target − set| (computed with numpy) has a median of 161 N, a 99th
  // percentile of 461 N; 28 rows (0.8 %) exceed 600 N, and the 14 above 1000 N all have a set curve that
  // cannot be a real setting (all zero, a negative set C, a set C 8–9 times the target's, or a set B of 23.7
  // N/(km/h)). So 1000 N is about twice the 99th percentile and refuses no credible vehicle, while the
  // runaway set of issue 13 (f0 = −2431 N against the demo target's 142 N) is 2573 N from its target at 0
  // km/h alone.
  double max_vehicle_loss_n = 1000;
  // |F_set,new(v) − F_set,old(v)| at most this on [0, top] between consecutive writes. An honest §8.1.4 step
  // is the measured deviation curve, largest on the first adjustment, where it is the error of the first
  // setting's loss estimate. From the same EPA rows (the 3457 with max |target − set| ≤ 600 N), the step from
  // the standard initial setting (Ad = 0.5·At or 0.1·At, Bd = 0.2·Bt, Cd = Ct) to the lab's own set curve,
  // over 0–142 km/h, has a 99th percentile of 323–333 N and a 99.9th of 515–548 N: 500 N would refuse that
  // first step for 5 (single-axle rule) or 9 (two-axle rule) of the 3457, 400 N for 15 or 16. Later steps are
  // near the tolerance.
  double max_step_n = 500;
};

// A point of a curve: a speed and the force there.
struct CurvePoint {
  double speed_kmh = 0.0;
  double force_n = 0.0;
};
// The lowest F(v) on [lo, hi] and where (ends and vertex). lo ≤ hi, finite coefficients.
CurvePoint minimum_on(const RoadLoad& c, double lo_kmh, double hi_kmh);
// The largest |F(v)| on [lo, hi] and where; force_n keeps the sign of F there. lo ≤ hi, finite coefficients.
CurvePoint max_abs_on(const RoadLoad& c, double lo_kmh, double hi_kmh);

// The target against the cell and against physics, every problem at once; keys as in the target file
// (target.f0_n, target.f1_n_per_kmh, target.f2_n_per_kmh2; "target" for the curve as a whole).
// Errors: non-finite coefficients; F(v) ≤ 0 anywhere on [lowest, highest reference speed] (the exact minimum,
// with the speeds where it is not positive); |F(v)| > max_force_n anywhere on [0, top_speed_kmh] (the message
// names the speed, the force and limits.max_force_n); limits not given. Warnings: f2 = 0 ("no aerodynamic
// term"); F(20 km/h)/(TM·g) outside 0.003–0.06 or F(130 km/h)/(TM·g) outside 0.015–0.15. Those bounds come
// from the EPA Test Car List in samples/data (target curves, ETW as TM, g = 9.80665 m/s², computed with numpy
// over all 3485 rows): at 20 km/h min 0.0062, 0.5th percentile 0.0066, median 0.0107, 99.5th 0.0164, max
// 0.0419; at 130 km/h min 0.0288, 0.5th 0.0320, median 0.0471, 99.5th 0.0695, max 0.1017. Each bound is set
// widely outside the data: the lower ones at about half the smallest value, the upper ones about 1.5 times
// the largest. A warning there most likely means a unit mistake (lbf, mph, lb, tonnes).
Problems check_target(const RoadLoad& target, std::span<const double> reference_speeds_kmh,
                      double test_mass_kg, const EnvelopeLimits& limits);

// A set curve about to be written. ok = false with `why` naming, for every bound broken, the speed, the value
// and the limit ("; "-separated). Refused: non-finite coefficients (next, target or previous); limits not
// given (any of max_force_n, top_speed_kmh, max_vehicle_loss_n, max_step_n not a positive number); |F_next| >
// max_force_n on [0, top]; |F_target − F_next| > max_vehicle_loss_n on [0, top]; with a previous write,
// |F_next − F_previous| > max_step_n on [0, top]. A value equal to its limit passes.
struct SetCheck {
  bool ok = true;
  std::string why;
  bool step_refused = false;  // the step limit is among the bounds broken
};
SetCheck check_set(const RoadLoad& next, const RoadLoad& target, const std::optional<RoadLoad>& previous,
                   const EnvelopeLimits& limits);

// Divergence: is the loop converging, or does the controller not follow the setting?
// Fed after every usable coast-down with the set curve that coast-down ran at, the target and the measured
// worst |deviation| over the reference speeds (ToleranceCheck::worst_abs_deviation_n). The rule (lab policy,
// common practice, no source; the factors below were chosen by simulating the honest loop measured =
// gain·set + loss + noise, regressed and adjusted by §8.1.4, up to 30000 sessions of 12 coast-downs per
// case, and the controller that ignores the setting):
// - Coast-downs that ran at the same setting as the one before (the set moved by less than 0.01 N everywhere
//   on [lowest, highest] speed) are one entry, carrying the latest deviation: passes, fixed-run runs and
//   verification runs are not adjustments. An adjustment is the step from one entry to the next.
// - T = tolerance_n; margin M = 3·T. D = max over [lowest, highest] of |F_set − F_target| (how far the
//   setting is from the target); d = the worst deviation measured at that setting.
// - Rule 1, the deviation is not shrinking: over the last two adjustments (entries i−2, i−1, i) every d >
//   M and d_i ≥ 0.8·d_{i−2}. An honest loop removes the deviation in one adjustment up to noise; a
//   controller that keeps its old curve leaves it unchanged (70, 70, 70 N: fires at the third coast-down,
//   after two adjustments).
// - Rule 2, the setting keeps moving away from the target while the deviation does not shrink: over the last
//   three adjustments (entries i−3 … i) each adjustment increased D by at least 0.75 of the deviation
//   that drove it (D_{j+1} − D_j ≥ 0.75·d_j), D grew by more than M in all, every d > T, and no d fell
//   below 0.8 of the one before. It catches a controller that ignores the setting while the deviation stays
//   between T and M, once the setting moves away from the target (a setting that first moves towards it is
//   left to the iteration limit and to check_set's vehicle-loss bound).
// - A non-finite deviation or setting fires at once. Once fired, the verdict stays.
// In that simulation (T = 10 N, gain 1) neither rule fired in 30000 sessions with noise of 8 N per reference
// speed (median worst deviation 9 N, about T), nor in 20000 at 9 N; a first choice of 0.5 instead of 0.75
// fired twice in the 30000. With gains of 0.7 or 1.3 none fired at 4 N noise and 3 of 2000 at 8 N; at gains
// of 0.5 or 1.5 and 8 N noise about 2 % fired (loops that seldom pass either). The ignoring controller fires
// rule 1 at its third coast-down when d > M, and rule 2 mostly at its fourth when T < d ≤ M.
class DivergenceWatch {
 public:
  static constexpr double kMarginFactor = 3.0;  // M = 3·T
  static constexpr double kShrinkRatio = 0.8;   // "shrinking" means below 0.8 of the earlier value
  // Rule 2: each move away at least this share of the deviation that drove it.
  static constexpr double kOutwardShare = 0.75;
  // A set that moved less than this (N) everywhere on the speed range is the same setting.
  static constexpr double kSameSettingN = 0.01;

  // tolerance_n: the profile's tolerance (> 0; anything else is taken as 0, the strictest). The speed range
  // is the profile's reference speeds, over which D is taken.
  explicit DivergenceWatch(double tolerance_n, double lowest_speed_kmh = 20.0,
                           double highest_speed_kmh = 130.0);
  void add(const RoadLoad& set, const RoadLoad& target, double worst_abs_deviation_n);
  // The same, with the measured (simulated) curve of that coast-down, which also enables rule 3: over the
  // last two or three adjustments, with ΔS the change of the set curve and ΔM the change of the measured
  // curve, taken at 12 speeds evenly over the range, a controller that applies the setting moves the measured
  // road load with it (ΔM ≈ ΔS: the measured load is the set load plus the car's own losses). When the set
  // moved by at least 2.5·T (root mean square over the speeds) and the response r = Σ ΔM·ΔS / Σ ΔS² is below
  // 0.25, the controller acknowledged settings it does not run. A move that large is a real adjustment, not
  // noise chasing, and with measured curves good to a few newtons r's spread there is about 0.2 (lab policy,
  // common practice, no source): an honest loop (r ≈ 1, or its force loop's gain) does not reach 0.25. It
  // catches the controller that ignores the setting while the deviation stays between T and 3·T, which rules
  // 1 and 2 may miss; so it fires only when every deviation over the span is above T. A loop that keeps the
  // measured load within tolerance while the set moves is tracking a vehicle whose losses still fall (the set
  // rises as the loss falls and the measured load stays put: r ≈ 0 with the loop in control), not a
  // controller that ignores the setting (issue 17's harsh truths fired it in about 5 % of sessions).
  void add(const RoadLoad& set, const RoadLoad& target, const RoadLoad& measured,
           double worst_abs_deviation_n);
  // "the controller does not follow the setting: ..." once a rule has fired; else nothing.
  std::optional<std::string> verdict() const { return verdict_; }

 private:
  struct Entry {
    RoadLoad set;
    double distance_n = 0.0;   // D
    double deviation_n = 0.0;  // d
    std::optional<RoadLoad> measured;
  };
  static constexpr double kMinMoveFactor = 2.5;  // rule 3: the set moved by at least 2.5·T (rms)
  static constexpr double kMinResponse = 0.25;   // rule 3: below this response the setting is not followed
  void evaluate();
  double tolerance_n_;
  double lo_kmh_;
  double hi_kmh_;
  std::vector<Entry> entries_;  // the last four settings at most
  std::optional<std::string> verdict_;
};

}  // namespace loadtrim::core
