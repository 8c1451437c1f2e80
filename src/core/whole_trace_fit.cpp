#include "core/whole_trace_fit.hpp"

#include <algorithm>
#include <cmath>
#include <nlopt.hpp>
#include <vector>

#include "core/problem.hpp"
#include "core/units.hpp"

namespace loadtrim::core {

namespace {
struct FitData {
  std::vector<double> t, v;  // decimated samples
  double mass_kg;
  int evaluations = 0;
};

// Sum of squared speed residuals for x = (f0, f1, f2, v0).
double objective(unsigned, const double* x, double*, void* data) {
  auto& p = *static_cast<FitData*>(data);
  ++p.evaluations;
  const double f0 = x[0], f1 = x[1], f2 = x[2];
  const double k = units::kKmhPerMps / p.mass_kg;  // N → km/h per s
  auto dvdt = [&](double v) { return -k * (f0 + (f1 + f2 * v) * v); };
  double v = x[3];
  double sse = (v - p.v[0]) * (v - p.v[0]);
  for (std::size_t i = 1; i < p.t.size(); ++i) {
    const double h = p.t[i] - p.t[i - 1];
    const double k1 = dvdt(v), k2 = dvdt(v + 0.5 * h * k1), k3 = dvdt(v + 0.5 * h * k2),
                 k4 = dvdt(v + h * k3);
    v += h / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4);
    const double r = v - p.v[i];
    sse += r * r;
  }
  return std::isfinite(sse) ? sse : 1e300;
}
}  // namespace

WholeTraceFit fit_whole_trace(TraceView trace, double force_mass_kg, double v_low_kmh, double v_high_kmh,
                              const RoadLoad& start, const WholeTraceOptions& options) {
  WholeTraceFit out;
  const std::size_t n = trace.size();
  // Samples from the first one at or below v_high to the last one at or above v_low.
  std::size_t i0 = 0;
  while (i0 < n && trace.speed_kmh[i0] > v_high_kmh) ++i0;
  std::size_t i1 = n;
  while (i1 > i0 && trace.speed_kmh[i1 - 1] < v_low_kmh) --i1;
  if (i1 < i0 + 10) {
    out.message = "fewer than 10 samples between " + num(v_low_kmh) + " and " + num(v_high_kmh) + " km/h";
    return out;
  }
  FitData p;
  p.mass_kg = force_mass_kg;
  const std::size_t step = std::max<std::size_t>(1, (i1 - i0 + options.max_points - 1) / options.max_points);
  for (std::size_t i = i0; i < i1; i += step) {
    p.t.push_back(trace.time_s[i]);
    p.v.push_back(trace.speed_kmh[i]);
  }
  out.points_used = p.t.size();

  nlopt::opt opt(nlopt::LN_BOBYQA, 4);
  opt.set_min_objective(objective, &p);
  opt.set_xtol_rel(options.relative_tolerance);
  opt.set_ftol_rel(1e-14);
  opt.set_maxeval(options.max_evaluations);
  // Initial steps sized to each parameter's typical magnitude, so the trust region is well scaled.
  const double f_scale = std::max(50.0, std::abs(start.force_n(100.0)));
  opt.set_initial_step({0.2 * f_scale, 0.2 * f_scale / 100.0, 0.2 * f_scale / 10000.0, 0.2});
  std::vector<double> x = {start.f0_n, start.f1_n_per_kmh, start.f2_n_per_kmh2, p.v[0]};
  double best = 0.0;
  try {
    const nlopt::result r = opt.optimize(x, best);
    out.ok = r > 0;
    out.converged = r == nlopt::SUCCESS || r == nlopt::STOPVAL_REACHED || r == nlopt::FTOL_REACHED ||
                    r == nlopt::XTOL_REACHED;
    out.message = out.ok ? (out.converged ? "" : "stopped at the evaluation or time limit before converging")
                         : "optimizer stopped without converging";
  } catch (const nlopt::roundoff_limited&) {
    // x holds the best point found; round-off is the floor of the objective, not a failure.
    out.ok = true;
    out.converged = true;
    best = objective(4, x.data(), nullptr, &p);
  } catch (const std::exception& e) {
    out.message = std::string("optimizer failed: ") + e.what();
    return out;
  }
  out.coefficients = {x[0], x[1], x[2]};
  out.initial_speed_kmh = x[3];
  out.rms_residual_kmh = std::sqrt(best / static_cast<double>(p.t.size()));
  out.evaluations = p.evaluations;
  return out;
}

}  // namespace loadtrim::core
