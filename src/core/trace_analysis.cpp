#include "core/trace_analysis.hpp"

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <map>

#include "core/problem.hpp"
#include "core/units.hpp"

namespace loadtrim::core {

const char* to_string(BandStatus s) {
  switch (s) {
    case BandStatus::ok:
      return "ok";
    case BandStatus::not_reached:
      return "not-reached";
    case BandStatus::not_finished:
      return "not-finished";
    case BandStatus::too_few_samples:
      return "too-few-samples";
    case BandStatus::not_decelerating:
      return "not-decelerating";
    case BandStatus::bad_trace:
      return "bad-trace";
  }
  return "unknown";
}

double band_force_n(double force_mass_kg, double half_band_kmh, double delta_t_s) {
  return (1.0 / units::kKmhPerMps) * force_mass_kg * (2.0 * half_band_kmh) / delta_t_s;
}

double band_time_s(double force_mass_kg, double half_band_kmh, double force_n) {
  // Written as `loadtrim target` always printed it (same operations in the same order: same digits).
  return force_mass_kg * 2.0 * half_band_kmh / (units::kKmhPerMps * force_n);
}

TraceAnalyser::TraceAnalyser(TraceView trace, BandOptions options) : trace_(trace), options_(options) {
  const std::size_t n = trace_.size();
  if (trace_.speed_kmh.size() != n) {
    trace_problem_ = "time and speed columns differ in length";
    return;
  }
  // Whole-array reductions with Eigen's explicit vector packets (the compiler does not vectorise a floating
  // minimum or a chain of comparisons at -O2 on its own): whether every value is finite (x − x is 0 for a
  // finite x and NaN otherwise, and a NaN survives a sum of zeros), whether time ascends (the smallest step
  // is positive), and each block's speed extremes. A problem is located by a second, plain pass making the
  // same tests sample by sample. Only what is compared changes, never a value: the crossings and their fits
  // read the same samples as before.
  const std::size_t nb = (n + kBlock - 1) / kBlock;
  block_prefix_min_.resize(nb);
  block_suffix_max_.resize(nb);
  const double* t = trace_.time_s.data();
  const double* v = trace_.speed_kmh.data();
  using Column = Eigen::Map<const Eigen::ArrayXd>;
  const auto len = static_cast<Eigen::Index>(n);
  bool ok = true;
  if (n > 0) {
    const Column tc(t, len), vc(v, len);
    const double zeros = ((tc - tc) + (vc - vc)).sum();
    ok = zeros == 0.0;
    if (ok && n > 1) ok = (Column(t + 1, len - 1) - Column(t, len - 1)).minCoeff() > 0.0;
  }
  if (ok) {
    using Block = Eigen::Map<const Eigen::Array<double, kBlock, 1>>;
    const std::size_t full = n / kBlock;
    for (std::size_t b = 0; b < full; ++b) {
      const Block blk(v + b * kBlock);
      block_prefix_min_[b] = blk.minCoeff();
      block_suffix_max_[b] = blk.maxCoeff();
    }
    if (full < nb) {
      const Column rest(v + full * kBlock, static_cast<Eigen::Index>(n - full * kBlock));
      block_prefix_min_[full] = rest.minCoeff();
      block_suffix_max_[full] = rest.maxCoeff();
    }
  }
  if (!ok) {
    for (std::size_t i = 0; i < n; ++i) {
      if (!std::isfinite(t[i]) || !std::isfinite(v[i])) {
        trace_problem_ = "non-finite value at sample " + std::to_string(i);
        break;
      }
      if (i > 0 && !(t[i] - t[i - 1] > 0.0)) {  // the very test of the reduction above
        trace_problem_ = "time not ascending at sample " + std::to_string(i);
        break;
      }
    }
    // Never a rejected trace without a reason (crossing() reads the blocks only when there is none).
    if (trace_problem_.empty()) trace_problem_ = "trace rejected by its validation (no sample located)";
    block_prefix_min_.clear();
    block_suffix_max_.clear();
    return;
  }
  for (std::size_t b = 1; b < nb; ++b)
    block_prefix_min_[b] = std::min(block_prefix_min_[b - 1], block_prefix_min_[b]);
  for (std::size_t b = nb - (nb > 0); b-- > 0;)
    block_suffix_max_[b] = std::max(block_suffix_max_[b + 1], block_suffix_max_[b]);
}

std::optional<TraceAnalyser::RoughIndices> TraceAnalyser::rough_indices(double level) const {
  if (!trace_problem_.empty() || block_prefix_min_.empty()) return std::nullopt;
  const std::size_t n = trace_.size();
  const double* v = trace_.speed_kmh.data();
  // First index whose running minimum is below the level: the first block whose running minimum is, then
  // the first sample below the level inside it (the blocks before it hold none).
  const auto pb = std::partition_point(block_prefix_min_.begin(), block_prefix_min_.end(),
                                       [&](double m) { return m >= level; });
  if (pb == block_prefix_min_.end()) return std::nullopt;
  RoughIndices r;
  r.first_below = static_cast<std::size_t>(pb - block_prefix_min_.begin()) * kBlock;
  while (!(v[r.first_below] < level)) ++r.first_below;
  if (r.first_below == 0) return std::nullopt;
  // Last index whose suffix maximum is at or above the level: the last block holding such a sample, then the
  // last one inside it (sample 0 is one: it is not below the level).
  const auto sb = std::partition_point(block_suffix_max_.begin(), block_suffix_max_.end(),
                                       [&](double m) { return m >= level; });
  const std::size_t b = static_cast<std::size_t>(sb - block_suffix_max_.begin()) - 1;
  r.last_at_or_above = std::min(n, (b + 1) * kBlock) - 1;
  while (!(v[r.last_at_or_above] >= level)) --r.last_at_or_above;
  return r;
}

bool TraceAnalyser::rough_crossing(double level, double& t) const {
  const auto r = rough_indices(level);
  if (!r) return false;
  t = 0.5 * (trace_.time_s[r->first_below] + trace_.time_s[r->last_at_or_above]);
  return true;
}

Crossing TraceAnalyser::crossing(double level) const {
  Crossing c;
  const std::size_t n = trace_.size();
  if (!trace_problem_.empty() || n == 0) {
    c.status = BandStatus::bad_trace;
    c.reason = trace_problem_.empty() ? "empty trace" : trace_problem_;
    return c;
  }
  if (trace_.speed_kmh.front() < level) {
    c.status = BandStatus::not_reached;
    c.reason = "trace starts at " + num(trace_.speed_kmh.front()) + " km/h, below " + num(level) + " km/h";
    return c;
  }
  if (block_prefix_min_.back() >= level) {
    c.status = BandStatus::not_finished;
    c.reason = "trace never falls below " + num(level) + " km/h";
    return c;
  }
  const double w = options_.fit_half_width_kmh;
  double t_mid = 0.0, t_a = 0.0, t_b = 0.0;
  rough_crossing(level, t_mid);
  // The fit window in time: from where the trace passes level + w to where it passes level − w.
  if (!rough_crossing(level + w, t_a)) t_a = trace_.time_s.front();
  if (!rough_crossing(level - w, t_b)) t_b = trace_.time_s.back();
  t_a = std::min(t_a, t_mid);
  t_b = std::max(t_b, t_mid);
  const auto lo = std::lower_bound(trace_.time_s.begin(), trace_.time_s.end(), t_a);
  const auto hi = std::upper_bound(trace_.time_s.begin(), trace_.time_s.end(), t_b);
  const std::size_t i0 = static_cast<std::size_t>(lo - trace_.time_s.begin());
  const std::size_t i1 = static_cast<std::size_t>(hi - trace_.time_s.begin());
  const int count = static_cast<int>(i1 - i0);
  if (count < options_.min_fit_samples) {
    c.status = BandStatus::too_few_samples;
    c.reason = std::to_string(count) + " samples within ±" + num(w) + " km/h of " + num(level) +
               " km/h, need " + std::to_string(options_.min_fit_samples);
    return c;
  }
  // Quadratic least squares in τ = (t − t_mid)/h, h the half window, on normal equations: τ is O(1), so the
  // 3×3 system is well conditioned.
  const double h = std::max(0.5 * (t_b - t_a), 1e-9);
  double s[5] = {0, 0, 0, 0, 0}, r[3] = {0, 0, 0};
  for (std::size_t i = i0; i < i1; ++i) {
    const double tau = (trace_.time_s[i] - t_mid) / h;
    const double y = trace_.speed_kmh[i] - level;
    const double t2 = tau * tau;
    s[0] += 1.0;
    s[1] += tau;
    s[2] += t2;
    s[3] += t2 * tau;
    s[4] += t2 * t2;
    r[0] += y;
    r[1] += y * tau;
    r[2] += y * t2;
  }
  double a, b, g;
  if (count >= 8) {
    Eigen::Matrix3d m;
    m << s[0], s[1], s[2], s[1], s[2], s[3], s[2], s[3], s[4];
    const Eigen::Vector3d x = m.ldlt().solve(Eigen::Vector3d(r[0], r[1], r[2]));
    a = x(0), b = x(1), g = x(2);
  } else {  // too few for a quadratic: straight line
    const double d2 = s[0] * s[2] - s[1] * s[1];
    if (!(std::abs(d2) > 1e-12 * s[0] * s[0])) {
      c.status = BandStatus::too_few_samples;
      c.reason = "degenerate fit window at " + num(level) + " km/h";
      return c;
    }
    a = (r[0] * s[2] - s[1] * r[1]) / d2;
    b = (s[0] * r[1] - s[1] * r[0]) / d2;
    g = 0.0;
  }
  // Root of g·τ² + b·τ + a = 0 nearest τ = 0, in the numerically stable form.
  const double disc = b * b - 4.0 * g * a;
  if (!(b < 0.0) || disc < 0.0) {
    c.status = BandStatus::not_decelerating;
    c.reason = "speed does not fall through " + num(level) + " km/h around t = " + num(t_mid) + " s";
    return c;
  }
  const double tau = -2.0 * a / (b - std::sqrt(disc));
  if (!(std::abs(tau) <= 1.5)) {
    c.status = BandStatus::not_decelerating;
    c.reason = "crossing of " + num(level) + " km/h falls outside its fit window (noise or re-acceleration)";
    return c;
  }
  c.time_s = t_mid + tau * h;
  return c;
}

bool TraceAnalyser::even_deceleration(double v, double half_band, double t_up, double t_low,
                                      std::string& why) const {
  // Within one band the deceleration changes little (the load varies by a few per cent over 2·Δv), so each
  // quarter of the band must take roughly a quarter of Δt. A stall, a re-acceleration or a dropout shows up
  // as one quarter far too long or too short. Quarter edges use the noise-tolerant rough crossings.
  double edges[5] = {t_up, 0, 0, 0, t_low};
  for (int k = 1; k < 4; ++k)
    if (!rough_crossing(v + half_band - 0.5 * half_band * k, edges[k])) {
      why = "no crossing inside the band";
      return false;
    }
  const double quarter = 0.25 * (t_low - t_up);
  for (int k = 0; k < 4; ++k) {
    const double d = edges[k + 1] - edges[k];
    if (!(d > 0.4 * quarter && d < 2.5 * quarter)) {
      why = "uneven deceleration in the band (quarter " + std::to_string(k + 1) + " took " + num(d) +
            " s, expected about " + num(quarter) + " s): stall, re-acceleration or dropout";
      return false;
    }
  }
  return true;
}

std::vector<BandResult> TraceAnalyser::bands(std::span<const double> reference_speeds_kmh,
                                             double half_band_kmh, double force_mass_kg) const {
  std::vector<BandResult> out;
  out.reserve(reference_speeds_kmh.size());
  // Adjacent bands share edges (v_j + Δv = v_{j+1} − Δv for 10 km/h steps and Δv = 5): find each level once.
  std::map<double, Crossing> cache;
  auto at = [&](double level) -> const Crossing& {
    auto it = cache.find(level);
    if (it == cache.end()) it = cache.emplace(level, crossing(level)).first;
    return it->second;
  };
  for (double v : reference_speeds_kmh) {
    BandResult b;
    b.reference_speed_kmh = v;
    const Crossing& up = at(v + half_band_kmh);
    const Crossing& down = at(v - half_band_kmh);
    if (up.status != BandStatus::ok) {
      b.status = up.status;
      b.reason = "upper edge: " + up.reason;
    } else if (down.status != BandStatus::ok) {
      b.status = down.status;
      b.reason = "lower edge: " + down.reason;
    } else if (!(down.time_s > up.time_s)) {
      b.status = BandStatus::not_decelerating;
      b.reason = "lower edge reached before upper edge";
    } else if (std::string why; !even_deceleration(v, half_band_kmh, up.time_s, down.time_s, why)) {
      b.status = BandStatus::not_decelerating;
      b.reason = why;
    } else {
      b.t_upper_s = up.time_s;
      b.t_lower_s = down.time_s;
      b.delta_t_s = down.time_s - up.time_s;
      b.force_n = band_force_n(force_mass_kg, half_band_kmh, b.delta_t_s);
    }
    out.push_back(std::move(b));
  }
  return out;
}

std::vector<BandResult> analyse_bands(TraceView trace, std::span<const double> reference_speeds_kmh,
                                      double half_band_kmh, double force_mass_kg,
                                      const BandOptions& options) {
  return TraceAnalyser(trace, options).bands(reference_speeds_kmh, half_band_kmh, force_mass_kg);
}

}  // namespace loadtrim::core
