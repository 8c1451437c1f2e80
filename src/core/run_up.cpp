#include "core/run_up.hpp"

#include <algorithm>
#include <cmath>

#include "core/units.hpp"

namespace loadtrim::core {

RunUpFigure run_up_figure(std::span<const double> t, std::span<const double> v_kmh, double move_kmh,
                          double window_s) {
  RunUpFigure f;
  const std::size_t n = std::min(t.size(), v_kmh.size());
  if (n < 2) return f;
  std::size_t a = 0;
  while (a < n && !(v_kmh[a] > v_kmh[0] + move_kmh)) ++a;
  if (a >= n - 1) return f;
  const std::size_t b = n - 1;
  const double va = v_kmh[a] / units::kKmhPerMps, vb = v_kmh[b] / units::kKmhPerMps;
  const double dt = t[b] - t[a];
  if (!(dt > 0.0) || !(vb > va)) return f;
  f.ok = true;
  f.mean_m2ps3 = (vb * vb - va * va) / (2.0 * dt);
  f.from_kmh = v_kmh[a];
  f.to_kmh = v_kmh[b];
  f.duration_s = dt;
  // The peak: a least-squares slope over each window of window_s starting at a sample, × the window's mean.
  double peak = 0.0;
  std::size_t j = a;
  for (std::size_t i = a; i < n; ++i) {
    while (j < n && t[j] - t[i] < window_s) ++j;
    if (j >= n) break;
    const std::size_t m = j - i + 1;
    if (m < 3) continue;
    double st = 0, sv = 0;
    for (std::size_t k = i; k <= j; ++k) {
      st += t[k];
      sv += v_kmh[k];
    }
    const double mt = st / m, mv = sv / m;
    double num = 0, den = 0;
    for (std::size_t k = i; k <= j; ++k) {
      num += (t[k] - mt) * (v_kmh[k] - mv);
      den += (t[k] - mt) * (t[k] - mt);
    }
    if (!(den > 0.0)) continue;
    const double a_mps2 = num / den / units::kKmhPerMps;
    peak = std::max(peak, a_mps2 * mv / units::kKmhPerMps);
  }
  f.peak_m2ps3 = peak;
  return f;
}

bool ReleaseDetector::feed(double time_s, double speed_kmh) {
  if (release_) return true;
  t_.push_back(time_s);
  v_.push_back(speed_kmh);
  tail_sum_ += speed_kmh;
  while (tail_ + 1 < t_.size() && time_s - t_[tail_] > smooth_s_) tail_sum_ -= v_[tail_++];
  const std::size_t count = t_.size() - tail_;
  if (!(time_s - t_[tail_] >= 0.5 * smooth_s_) || count < 3) return false;  // not a full window yet
  const double mean = tail_sum_ / static_cast<double>(count);
  peak_ = std::max(peak_, mean);
  if (!(mean < peak_ - drop_kmh_)) return false;
  // Released: the last sample whose centred mean is within band_kmh of the peak.
  const double half = 0.5 * smooth_s_;
  std::size_t lo = 0, hi = 0;
  double sum = 0.0;
  std::size_t at = 0;
  for (std::size_t i = 0; i < t_.size(); ++i) {
    while (hi < t_.size() && t_[hi] <= t_[i] + half) sum += v_[hi++];
    while (lo < i && t_[lo] < t_[i] - half) sum -= v_[lo++];
    const double c = sum / static_cast<double>(hi - lo);
    if (c >= peak_ - band_kmh_) at = i;
  }
  release_ = at;
  return true;
}

}  // namespace loadtrim::core
