#include "core/envelope.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "core/units.hpp"

namespace loadtrim::core {

namespace {

bool positive(double x) {
  return std::isfinite(x) && x > 0.0;
}

// The speeds where a quadratic can take its extremes on [lo, hi]: both ends, and the vertex −f1/(2·f2) when
// the curve has one strictly inside.
std::vector<double> candidates(const RoadLoad& c, double lo, double hi) {
  std::vector<double> v = {lo, hi};
  if (c.f2_n_per_kmh2 != 0.0) {
    const double vertex = -c.f1_n_per_kmh / (2.0 * c.f2_n_per_kmh2);
    if (vertex > lo && vertex < hi) v.push_back(vertex);
  }
  return v;
}

// Real roots of the quadratic (or the line), in ascending order; none for a constant. Uses the
// cancellation-free form q = −(b + sign(b)·√disc)/2, roots q/a and c/q.
std::vector<double> roots(const RoadLoad& c) {
  const double a = c.f2_n_per_kmh2, b = c.f1_n_per_kmh, k = c.f0_n;
  std::vector<double> r;
  if (a == 0.0) {
    if (b != 0.0) r.push_back(-k / b);
    return r;
  }
  const double disc = b * b - 4.0 * a * k;
  if (disc < 0.0) return r;
  const double q = -0.5 * (b + std::copysign(std::sqrt(disc), b));
  r.push_back(q / a);
  if (q != 0.0) r.push_back(k / q);
  std::sort(r.begin(), r.end());
  return r;
}

// The parts of [lo, hi] where F(v) ≤ 0, as "a–b km/h" (or "a km/h" for a single point), comma-separated.
std::string non_positive_ranges(const RoadLoad& c, double lo, double hi) {
  std::vector<double> cuts = {lo, hi};
  for (double r : roots(c))
    if (r > lo && r < hi) cuts.push_back(r);
  std::sort(cuts.begin(), cuts.end());
  std::vector<std::pair<double, double>> parts;
  auto add = [&](double a, double b) {
    if (!parts.empty() && std::abs(parts.back().second - a) <= 1e-9 * (1.0 + std::abs(a)))
      parts.back().second = b;
    else
      parts.emplace_back(a, b);
  };
  for (std::size_t i = 0; i + 1 < cuts.size(); ++i) {
    const double a = cuts[i], b = cuts[i + 1];
    if (c.force_n(0.5 * (a + b)) <= 0.0) add(a, b);
  }
  // A curve that only touches zero (a double root) has no negative segment: name the point.
  const CurvePoint m = minimum_on(c, lo, hi);
  if (parts.empty() && m.force_n <= 0.0) parts.emplace_back(m.speed_kmh, m.speed_kmh);
  std::string s;
  for (const auto& [a, b] : parts) {
    if (!s.empty()) s += ", ";
    s += b - a < 0.05 ? num(a, 1) + " km/h" : num(a, 1) + "–" + num(b, 1) + " km/h";
  }
  return s;
}

}  // namespace

CurvePoint minimum_on(const RoadLoad& c, double lo_kmh, double hi_kmh) {
  CurvePoint best{lo_kmh, c.force_n(lo_kmh)};
  for (double v : candidates(c, lo_kmh, hi_kmh))
    if (const double f = c.force_n(v); f < best.force_n) best = {v, f};
  return best;
}

CurvePoint max_abs_on(const RoadLoad& c, double lo_kmh, double hi_kmh) {
  CurvePoint best{lo_kmh, c.force_n(lo_kmh)};
  for (double v : candidates(c, lo_kmh, hi_kmh))
    if (const double f = c.force_n(v); std::abs(f) > std::abs(best.force_n)) best = {v, f};
  return best;
}

Problems check_target(const RoadLoad& target, std::span<const double> reference_speeds_kmh,
                      double test_mass_kg, const EnvelopeLimits& limits) {
  Problems ps;
  auto err = [&](std::string key, std::string msg) {
    ps.push_back({Problem::Severity::error, std::move(key), std::move(msg)});
  };
  auto warn = [&](std::string key, std::string msg) {
    ps.push_back({Problem::Severity::warning, std::move(key), std::move(msg)});
  };
  if (!target.finite()) {
    err("target", "coefficients must be finite numbers");
    return ps;
  }
  // Positive over the whole reference range: the vehicle must decelerate at every speed the bands cover.
  bool speeds_ok = !reference_speeds_kmh.empty();
  for (double v : reference_speeds_kmh) speeds_ok = speeds_ok && std::isfinite(v);
  if (speeds_ok) {
    const auto [lo_it, hi_it] = std::minmax_element(reference_speeds_kmh.begin(), reference_speeds_kmh.end());
    const double lo = *lo_it, hi = *hi_it;
    const CurvePoint m = minimum_on(target, lo, hi);
    if (!(m.force_n > 0.0))
      err("target", "road load is zero or negative on " + non_positive_ranges(target, lo, hi) + " (lowest " +
                        num(m.force_n, 1) + " N at " + num(m.speed_kmh, 1) +
                        " km/h); it must be above 0 N at every speed from " + num(lo) + " to " + num(hi) +
                        " km/h (the reference speeds), or the vehicle would not coast down");
  }
  // Within the cell's force limit from standstill to the top speed. A limit of +∞ means no cell is known
  // (`target` without --cell): there is nothing to compare with.
  const bool no_cell = limits.max_force_n == std::numeric_limits<double>::infinity();
  if (no_cell) {
    // nothing to compare with
  } else if (!positive(limits.max_force_n) || !positive(limits.top_speed_kmh)) {
    err("target", "cannot be checked against the cell: limits.max_force_n (" + num(limits.max_force_n) +
                      " N) and the top speed (" + num(limits.top_speed_kmh) +
                      " km/h) must be positive numbers");
  } else {
    const CurvePoint m = max_abs_on(target, 0.0, limits.top_speed_kmh);
    if (std::abs(m.force_n) > limits.max_force_n)
      err("target", "needs " + num(m.force_n, 1) + " N at " + num(m.speed_kmh, 1) +
                        " km/h, beyond the cell's force limit limits.max_force_n = " +
                        num(limits.max_force_n) + " N (allowed: |F(v)| at most that from 0 to " +
                        num(limits.top_speed_kmh) + " km/h, the session's top speed)");
  }
  if (target.f2_n_per_kmh2 == 0.0)
    warn("target.f2_n_per_kmh2",
         "is 0: no aerodynamic term; every road vehicle has one (usually 0.015–0.085 N/(km/h)² "
         "in the public EPA test-car data): was it left out?");
  // Plausible for the test mass: bounds and their derivation in envelope.hpp (EPA Test Car List).
  if (positive(test_mass_kg)) {
    struct Bound {
      double speed_kmh, lo, hi, data_lo, data_hi;
    };
    for (const Bound& b : {Bound{20.0, 0.003, 0.06, 0.0062, 0.042}, Bound{130.0, 0.015, 0.15, 0.029, 0.10}}) {
      const double ratio = target.force_n(b.speed_kmh) / (test_mass_kg * units::kStandardGravity_mps2);
      if (!(ratio >= b.lo && ratio <= b.hi))
        warn("target", "F(" + num(b.speed_kmh) + " km/h)/(TM·g) = " + num(ratio) + " for a test mass of " +
                           num(test_mass_kg) + " kg is outside the plausible " + num(b.lo) + "–" + num(b.hi) +
                           " (public EPA test-car data: " + num(b.data_lo) + "–" + num(b.data_hi) +
                           "): check the units of the coefficients and of the mass");
    }
  }
  return ps;
}

SetCheck check_set(const RoadLoad& next, const RoadLoad& target, const std::optional<RoadLoad>& previous,
                   const EnvelopeLimits& limits) {
  SetCheck out;
  auto refuse = [&](const std::string& why) {
    out.ok = false;
    out.why += (out.why.empty() ? "" : "; ") + why;
  };
  if (!next.finite()) {
    refuse("the set coefficients are not finite numbers (f0 " + num(next.f0_n) + " N, f1 " +
           num(next.f1_n_per_kmh) + " N/(km/h), f2 " + num(next.f2_n_per_kmh2) + " N/(km/h)²)");
    return out;
  }
  if (!target.finite() || (previous && !previous->finite())) {
    refuse("the target or the previous setting is not finite: the new setting cannot be checked");
    return out;
  }
  if (!positive(limits.max_force_n) || !positive(limits.top_speed_kmh) ||
      !positive(limits.max_vehicle_loss_n) || !positive(limits.max_step_n)) {
    refuse("the envelope is not set (force limit " + num(limits.max_force_n) + " N, top speed " +
           num(limits.top_speed_kmh) + " km/h, vehicle-loss limit " + num(limits.max_vehicle_loss_n) +
           " N, step limit " + num(limits.max_step_n) + " N: each must be a positive number)");
    return out;
  }
  const double top = limits.top_speed_kmh;
  const std::string range = " (checked from 0 to " + num(top) + " km/h)";
  if (const CurvePoint m = max_abs_on(next, 0.0, top); std::abs(m.force_n) > limits.max_force_n)
    refuse("the set curve asks " + num(m.force_n, 1) + " N at " + num(m.speed_kmh, 1) +
           " km/h, beyond the cell's force limit of ±" + num(limits.max_force_n) + " N" + range);
  if (const CurvePoint m = max_abs_on(target - next, 0.0, top);
      std::abs(m.force_n) > limits.max_vehicle_loss_n)
    refuse("target minus set is " + num(m.force_n, 1) + " N at " + num(m.speed_kmh, 1) +
           " km/h, beyond the vehicle-loss limit of ±" + num(limits.max_vehicle_loss_n) + " N" + range);
  if (previous)
    if (const CurvePoint m = max_abs_on(next - *previous, 0.0, top);
        std::abs(m.force_n) > limits.max_step_n) {
      out.step_refused = true;
      refuse("the setting would change by " + num(m.force_n, 1) + " N at " + num(m.speed_kmh, 1) +
             " km/h since the last write, beyond the step limit of ±" + num(limits.max_step_n) + " N" +
             range);
    }
  return out;
}

DivergenceWatch::DivergenceWatch(double tolerance_n, double lowest_speed_kmh, double highest_speed_kmh)
    : tolerance_n_(positive(tolerance_n) ? tolerance_n : 0.0),
      lo_kmh_(std::min(lowest_speed_kmh, highest_speed_kmh)),
      hi_kmh_(std::max(lowest_speed_kmh, highest_speed_kmh)) {
  // A range that is not a pair of finite speeds falls back to the GTR 15 reference speeds (20–130 km/h, from
  // memory).
  if (!std::isfinite(lo_kmh_) || !std::isfinite(hi_kmh_)) {
    lo_kmh_ = 20.0;
    hi_kmh_ = 130.0;
  }
}

void DivergenceWatch::add(const RoadLoad& set, const RoadLoad& target, const RoadLoad& measured,
                          double worst_abs_deviation_n) {
  if (verdict_) return;
  if (!measured.finite()) {
    verdict_ = "the controller does not follow the setting: a non-finite measured curve was reported";
    return;
  }
  add(set, target, worst_abs_deviation_n);
  if (verdict_ || entries_.empty()) return;
  entries_.back().measured = measured;
  // Rule 3: the measured road load does not move with the setting, over the last two or three adjustments.
  const std::size_t n = entries_.size();
  for (std::size_t span = 2; span <= 3 && !verdict_; ++span) {
    if (n < span + 1 || !entries_[n - 1 - span].measured) continue;
    const Entry &a = entries_[n - 1 - span], &c = entries_[n - 1];
    bool all_outside = true;
    for (std::size_t j = n - 1 - span; j < n; ++j)
      all_outside = all_outside && entries_[j].deviation_n > tolerance_n_;
    if (!all_outside) continue;
    double ss = 0.0, ms = 0.0;
    constexpr int kPoints = 12;
    for (int i = 0; i < kPoints; ++i) {
      const double v = lo_kmh_ + (hi_kmh_ - lo_kmh_) * i / (kPoints - 1);
      const double ds = (c.set - a.set).force_n(v), dm = (*c.measured - *a.measured).force_n(v);
      ss += ds * ds;
      ms += dm * ds;
    }
    const double rms = std::sqrt(ss / kPoints);
    if (rms >= kMinMoveFactor * tolerance_n_ && ss > 0.0 && ms / ss < kMinResponse)
      verdict_ = "the controller does not follow the setting: over the last " + std::to_string(span) +
                 " adjustments the set road load moved by " + num(rms, 1) + " N (rms over " + num(lo_kmh_) +
                 "–" + num(hi_kmh_) + " km/h) but the measured road load moved with it by a factor of only " +
                 num(ms / ss, 2) + " (an applied setting moves it by about 1)";
  }
}

void DivergenceWatch::add(const RoadLoad& set, const RoadLoad& target, double worst_abs_deviation_n) {
  if (verdict_) return;
  if (!set.finite() || !target.finite() || !std::isfinite(worst_abs_deviation_n)) {
    verdict_ = "the controller does not follow the setting: a non-finite setting, target or deviation (" +
               num(worst_abs_deviation_n) + " N) was reported";
    return;
  }
  const Entry e{set, std::abs(max_abs_on(set - target, lo_kmh_, hi_kmh_).force_n),
                std::abs(worst_abs_deviation_n), std::nullopt};
  if (!entries_.empty() &&
      std::abs(max_abs_on(set - entries_.back().set, lo_kmh_, hi_kmh_).force_n) < kSameSettingN)
    entries_.back() = e;  // the same setting again: not an adjustment; keep the latest deviation
  else
    entries_.push_back(e);
  if (entries_.size() > 4) entries_.erase(entries_.begin());
  evaluate();
}

void DivergenceWatch::evaluate() {
  const double t = tolerance_n_, margin = kMarginFactor * tolerance_n_;
  const std::size_t n = entries_.size();
  auto list = [&](std::size_t from, auto value) {
    std::string s;
    for (std::size_t i = from; i < n; ++i) s += (s.empty() ? "" : ", ") + num(value(entries_[i]), 1);
    return s;
  };
  auto deviation = [](const Entry& e) { return e.deviation_n; };
  // Rule 1: the deviation is not shrinking over the last two adjustments while outside the margin.
  if (n >= 3) {
    const Entry &a = entries_[n - 3], &b = entries_[n - 2], &c = entries_[n - 1];
    if (a.deviation_n > margin && b.deviation_n > margin && c.deviation_n > margin &&
        c.deviation_n >= kShrinkRatio * a.deviation_n) {
      verdict_ = "the controller does not follow the setting: the worst deviation stayed above " +
                 num(margin) + " N over the last two adjustments (" + list(n - 3, deviation) +
                 " N), where an applied adjustment removes it up to noise";
      return;
    }
  }
  // Rule 2: the setting keeps moving away from the target while the deviation does not shrink.
  if (n >= 4) {
    bool fires = entries_[n - 1].distance_n - entries_[n - 4].distance_n > margin;
    for (std::size_t i = n - 4; i < n; ++i) fires = fires && entries_[i].deviation_n > t;
    for (std::size_t i = n - 4; i + 1 < n; ++i) {
      const Entry &a = entries_[i], &b = entries_[i + 1];
      fires = fires && b.distance_n - a.distance_n >= kOutwardShare * a.deviation_n &&
              b.deviation_n >= kShrinkRatio * a.deviation_n;
    }
    if (fires)
      verdict_ =
          "the controller does not follow the setting: the setting moved away from the target on each of the "
          "last three adjustments (largest |target − set| " +
          list(n - 4, [](const Entry& e) { return e.distance_n; }) +
          " N) while the worst deviation did not shrink (" + list(n - 4, deviation) + " N)";
  }
}

}  // namespace loadtrim::core
