// A run-up under the vehicle's own power (docs/session.md "Vehicle-driven run-up"): its acceleration × speed
// figure and the driver's release to neutral found from the speed trace alone. Pure: no I/O, no clocks; time
// comes with the samples (the controller's own timestamps).
#pragma once

#include <cstddef>
#include <optional>
#include <span>
#include <vector>

namespace loadtrim::core {

// GTR 15 Annex 4 §8.1.3.4 (text; docs/standards.md §3.13): a run-up under the vehicle's own power needs
// acceleration × speed of at least 6 m²/s³, else full accelerator.
inline constexpr double kMinRunUpAccelSpeed_m2ps3 = 6.0;

struct RunUpFigure {
  bool ok = false;          // false: no acceleration to judge (fewer than two samples, or no speed gained)
  double mean_m2ps3 = 0.0;  // (v_b² − v_a²) / (2·(t_b − t_a)), SI: the mean of a·v over the accelerating part
  double peak_m2ps3 = 0.0;  // the largest a·v of a least-squares line over any window of window_s
  double from_kmh = 0.0, to_kmh = 0.0, duration_s = 0.0;
};

// The figure over samples (time ascending, s; speed km/h) from the prompt until the start speed is reached.
// The accelerating part begins at the first sample more than move_kmh above the first sample's speed (the
// driver's reaction and the creep before it are not the run-up), and ends at the last sample. Since
// d(v²/2)/dt = a·v, the mean over that part is exact from its end points (no differentiation of noise).
RunUpFigure run_up_figure(std::span<const double> time_s, std::span<const double> speed_kmh,
                          double move_kmh = 2.0, double window_s = 1.0);

// Finds the release to neutral from the speed alone: fed one sample at a time, it reports a release once the
// trailing mean over smooth_s has fallen drop_kmh below the highest trailing mean seen; the release is then
// placed at the last sample whose centred mean over smooth_s was within band_kmh of that peak (the samples
// from there on are the coast). Lab policy, common practice, no source.
class ReleaseDetector {
 public:
  explicit ReleaseDetector(double drop_kmh = 1.0, double smooth_s = 0.5, double band_kmh = 0.3)
      : drop_kmh_(drop_kmh), smooth_s_(smooth_s), band_kmh_(band_kmh) {}
  // True once the release is found (and from then on).
  bool feed(double time_s, double speed_kmh);
  // The index (in the order fed) of the release: the first sample of the coast.
  std::optional<std::size_t> release_index() const { return release_; }
  double peak_kmh() const { return peak_; }

 private:
  double drop_kmh_, smooth_s_, band_kmh_;
  std::vector<double> t_, v_;
  std::size_t tail_ = 0;  // first index of the trailing window
  double tail_sum_ = 0.0;
  double peak_ = -1e300;
  std::optional<std::size_t> release_;
};

}  // namespace loadtrim::core
