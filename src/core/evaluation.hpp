// One coast-down from trace to verdict: band times and forces, the regression to As/Bs/Cs (GTR 15 §8.1.3.3),
// the whole-trace estimator beside it, and the tolerance check against the target. Pure: no I/O.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "core/profile.hpp"
#include "core/regression.hpp"
#include "core/setting.hpp"
#include "core/trace_analysis.hpp"
#include "core/whole_trace_fit.hpp"

namespace loadtrim::core {

struct CoastdownEvaluation {
  std::vector<BandResult> bands;
  bool usable = false;
  std::string unusable_reason;            // why not, naming the bands
  RoadLoadFit fit;                        // simulated coefficients As, Bs, Cs from the band forces
  WholeTraceFit whole_trace;              // independent estimate from the whole trace
  double estimator_disagreement_n = 0.0;  // largest |F_band(v_j) − F_whole(v_j)|
  bool estimators_disagree = false;       // above the profile's threshold
  ToleranceCheck check;                   // of the regressed curve against the target
  // The profile's whole_trace_confirms: the whole-trace curve's own check (simple rule), and one sentence on
  // what it did to the verdict ("" when the profile does not ask). check.pass already includes it.
  std::optional<ToleranceCheck> whole_trace_check;
  std::string confirmation;
  bool confirmation_refused = false;  // the band regression passed, the confirmation did not
  // The measured curve the adjustment takes the loss from (profile.adjust_from, docs/standards.md §3.17):
  // the band regression's unless the profile asks for the whole-trace curve and it qualifies; adjust_why
  // says which and why ("" when the profile keeps the band regression).
  RoadLoad adjust_basis;
  bool adjust_from_whole_trace = false;
  std::string adjust_why;
  std::optional<RoadLoad> adjust_band_equivalent;  // the whole-trace curve's band-equivalent, when computed
};

// The whole-trace curve qualifies for the adjustment when it is fitted and converged and its band-equivalent
// curve (its closed-form band forces, regressed as the measured ones are) lies, at every reference speed,
// within estimator_disagreement_n + kAdjustNoiseK × u of the band regression (u its standard error there),
// and never more than the tolerance away: further apart than the band regression's own noise explains, one of
// the two fits is wrong and the standard's is kept (lab policy, no source). The band-equivalent curve is then
// the adjustment's basis.
inline constexpr double kAdjustNoiseK = 3.0;

struct EvaluationOptions {
  BandOptions bands;  // its fit_half_width_kmh is the profile's crossing_fit_half_width_kmh
  bool whole_trace = true;
  WholeTraceOptions whole_trace_options;
};

CoastdownEvaluation evaluate_coastdown(TraceView trace, const Profile& profile, const RoadLoad& target,
                                       double force_mass_kg, const EvaluationOptions& options = {});

}  // namespace loadtrim::core
