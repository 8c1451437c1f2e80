// Whole-trace estimator: fits the coast-down differential equation m·dv/dt = −F(v), F = f0 + f1·v + f2·v²,
// to every sample of the trace between the lowest and highest band edges (NLopt, derivative-free BOBYQA
// over f0, f1, f2 and the initial speed; fixed-step RK4 between samples). Independent of the band-time
// method, so the two are reported side by side and their disagreement flagged. Pure: no I/O.
#pragma once

#include <string>

#include "core/road_load.hpp"
#include "core/trace_analysis.hpp"

namespace loadtrim::core {

struct WholeTraceOptions {
  std::size_t max_points = 3000;  // the trace is decimated to at most this many samples
  int max_evaluations = 4000;
  double relative_tolerance = 1e-9;
};

struct WholeTraceFit {
  bool ok = false;
  // The optimizer met its tolerance (or round-off): false when it stopped at max_evaluations or its time
  // limit, which still leaves ok (a usable estimate) but not an independent one: it started from the band
  // fit.
  bool converged = false;
  std::string message;
  RoadLoad coefficients;
  double initial_speed_kmh = 0.0;
  double rms_residual_kmh = 0.0;
  int evaluations = 0;
  std::size_t points_used = 0;
};

// Fits the part of the trace from v_high_kmh down to v_low_kmh. `start` is the initial guess (e.g. the
// band-regression result); a poor guess still converges, only slower.
WholeTraceFit fit_whole_trace(TraceView trace, double force_mass_kg, double v_low_kmh, double v_high_kmh,
                              const RoadLoad& start, const WholeTraceOptions& options = {});

}  // namespace loadtrim::core
