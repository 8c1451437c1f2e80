#include "core/evaluation.hpp"

#include <cmath>

namespace loadtrim::core {

CoastdownEvaluation evaluate_coastdown(TraceView trace, const Profile& profile, const RoadLoad& target,
                                       double force_mass_kg, const EvaluationOptions& options) {
  CoastdownEvaluation e;
  e.bands = analyse_bands(trace, profile.reference_speeds_kmh, profile.band_half_width_kmh, force_mass_kg,
                          options.bands);
  std::vector<double> speeds, forces;
  for (const auto& b : e.bands) {
    if (b.ok()) {
      speeds.push_back(b.reference_speed_kmh);
      forces.push_back(b.force_n);
    } else {
      e.unusable_reason += (e.unusable_reason.empty() ? "" : "; ") + num(b.reference_speed_kmh) + " km/h " +
                           to_string(b.status) + ": " + b.reason;
    }
  }
  // The standard regresses every reference speed: a run with a missing band is repeated, not patched.
  if (!e.unusable_reason.empty()) return e;
  e.fit = fit_road_load(speeds, forces);
  if (!e.fit.ok) {
    e.unusable_reason = "regression failed: " + e.fit.message;
    return e;
  }
  e.usable = true;
  // Each reference speed's force carries the regression's standard error (OLS covariance of f0, f1, f2
  // propagated to F(v); checked against repeats in regression_test), which the decision rule may use.
  const RoadLoadFit& fit = e.fit;
  e.check =
      check_tolerance(target, e.fit.coefficients, profile.reference_speeds_kmh, profile.tolerance_n,
                      profile.decision_rule, [&fit](double v) { return fit.force_standard_error_n(v); });
  if (options.whole_trace || profile.whole_trace_confirms) {
    e.whole_trace =
        fit_whole_trace(trace, force_mass_kg, profile.bottom_speed_kmh() - profile.band_half_width_kmh,
                        profile.top_speed_kmh() + profile.band_half_width_kmh, e.fit.coefficients,
                        options.whole_trace_options);
    if (e.whole_trace.ok) {
      for (double v : profile.reference_speeds_kmh)
        e.estimator_disagreement_n =
            std::max(e.estimator_disagreement_n,
                     std::abs(e.fit.coefficients.force_n(v) - e.whole_trace.coefficients.force_n(v)));
      e.estimators_disagree = e.estimator_disagreement_n > profile.estimator_disagreement_n;
    }
  }
  if (profile.whole_trace_confirms) {
    // docs/standards.md §3.11 (lab policy): the standard's verdict stands only when an independent estimate
    // from the same trace agrees that every reference speed is within tolerance.
    if (!e.whole_trace.ok || !e.whole_trace.converged) {
      // A fit that stopped before converging started from the band fit: it would confirm the verdict it is
      // meant to check.
      e.confirmation = "not confirmed: the whole-trace fit " +
                       std::string(e.whole_trace.ok ? "did not converge (" : "failed (") +
                       e.whole_trace.message + ")";
    } else {
      e.whole_trace_check = check_tolerance(target, e.whole_trace.coefficients, profile.reference_speeds_kmh,
                                            profile.tolerance_n);
      const ToleranceCheck& w = *e.whole_trace_check;
      const SpeedDeviation* worst = nullptr;
      for (const auto& r : w.rows)
        if (!worst || std::abs(r.deviation_n) > std::abs(worst->deviation_n)) worst = &r;
      const std::string at =
          worst ? num(worst->deviation_n, 2) + " N at " + num(worst->speed_kmh) + " km/h" : std::string("-");
      if (!e.check.pass)
        e.confirmation =
            "nothing to confirm: the band regression is outside tolerance (whole-trace curve worst " + at +
            ")";
      else
        e.confirmation = w.pass ? "confirmed by the whole-trace curve (worst " + at + ")"
                                : "not confirmed: the whole-trace curve is " + at + ", outside ±" +
                                      num(profile.tolerance_n) + " N";
    }
    // The check exists only for a converged fit.
    const bool confirmed = e.whole_trace_check && e.whole_trace_check->pass;
    if (e.check.pass && !confirmed) {
      e.check.pass = false;
      e.confirmation_refused = true;
    }
  }
  return e;
}

}  // namespace loadtrim::core
