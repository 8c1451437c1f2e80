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
};

struct EvaluationOptions {
  BandOptions bands;
  bool whole_trace = true;
  WholeTraceOptions whole_trace_options;
};

CoastdownEvaluation evaluate_coastdown(TraceView trace, const Profile& profile, const RoadLoad& target,
                                       double force_mass_kg, const EvaluationOptions& options = {});

}  // namespace loadtrim::core
