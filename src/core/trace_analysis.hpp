// Coast-down trace analysis: from sampled (time, speed) data to the band times Δt_j and forces F_mj
// (docs/standards.md §2.2–2.3: the variables are GTR 15 Annex 4 §8.1.3.2's text; the equation's form
// F_mj = (1/3.6)·(TM + m_r)·(2·Δv)/Δt_j and Δv = 5 km/h are from memory), Δv in km/h, Δt_j the time from
// v_j + Δv down to v_j − Δv. Pure: no I/O, no clocks; time comes with the samples (the controller's own
// timestamps).
#pragma once

#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <vector>

namespace loadtrim::core {

// A coast-down trace: time ascending (s), speed (km/h). Views only; the caller owns the data.
struct TraceView {
  std::span<const double> time_s;
  std::span<const double> speed_kmh;
  std::size_t size() const { return time_s.size(); }
};

enum class BandStatus : std::uint8_t {
  ok,
  not_reached,       // the trace starts below the band's upper edge (run-up too short)
  not_finished,      // the trace ends above the band's lower edge (recording stopped too early)
  too_few_samples,   // not enough samples around a crossing for the local fit
  not_decelerating,  // the local fit does not fall through the level (re-acceleration, stall, bad data)
  bad_trace,         // time not ascending or non-finite values
};
const char* to_string(BandStatus s);

struct BandOptions {
  // Each crossing time is the root of a local quadratic fit v(t) over the samples whose speed lies within
  // ± this of the level, not the first noisy sample below it.
  double fit_half_width_kmh = 2.5;
  int min_fit_samples = 6;
};

struct BandResult {
  double reference_speed_kmh = 0.0;
  BandStatus status = BandStatus::ok;
  std::string reason;      // empty when ok
  double t_upper_s = 0.0;  // crossing of v_j + Δv
  double t_lower_s = 0.0;  // crossing of v_j − Δv
  double delta_t_s = 0.0;
  double force_n = 0.0;
  bool ok() const { return status == BandStatus::ok; }
};

// The standard's formula: F = (1/3.6)·m·(2·Δv)/Δt.
double band_force_n(double force_mass_kg, double half_band_kmh, double delta_t_s);
// Its inverse, the band time Δt the formula turns back into force_n: Δt = m·(2·Δv)/(3.6·F), s. For a road
// load that is constant over the band this is the exact coast time (core::coastdown_time_s); otherwise the
// time of the mean deceleration the formula assumes. F = 0 gives infinity, as the formula does.
double band_time_s(double force_mass_kg, double half_band_kmh, double force_n);

// Time at which the trace falls through level_kmh, with the reason when it cannot be found.
struct Crossing {
  BandStatus status = BandStatus::ok;
  double time_s = 0.0;
  std::string reason;
};

// Reusable analyser: precomputes the trace's running envelopes once, then finds any number of crossings in
// O(log n + window) each. Construct per trace.
class TraceAnalyser {
 public:
  explicit TraceAnalyser(TraceView trace, BandOptions options = {});
  Crossing crossing(double level_kmh) const;
  std::vector<BandResult> bands(std::span<const double> reference_speeds_kmh, double half_band_kmh,
                                double force_mass_kg) const;
  const TraceView& trace() const { return trace_; }
  // The samples a crude crossing of `level_kmh` lies between: the first sample below the level and the last
  // sample at or above it (nullopt: the trace is bad, starts below the level, or never falls below it).
  struct RoughIndices {
    std::size_t first_below = 0, last_at_or_above = 0;
  };
  std::optional<RoughIndices> rough_indices(double level_kmh) const;

 private:
  // Crude crossing: midway between the first sample below the level and the last sample at or above it.
  bool rough_crossing(double level_kmh, double& t) const;
  bool even_deceleration(double v, double half_band, double t_up, double t_low, std::string& why) const;
  TraceView trace_;
  BandOptions options_;
  // The running extremes by blocks of kBlock samples (vector reductions build them; a crossing is found by a
  // binary search over the blocks and a scan inside one): block_prefix_min_[b] is the min of speed[0 .. end
  // of block b] (non-increasing), block_suffix_max_[b] the max of speed[start of block b .. n−1]
  // (non-increasing).
  static constexpr std::size_t kBlock = 16;
  std::vector<double> block_prefix_min_;
  std::vector<double> block_suffix_max_;
  std::string trace_problem_;
};

// Convenience wrapper.
std::vector<BandResult> analyse_bands(TraceView trace, std::span<const double> reference_speeds_kmh,
                                      double half_band_kmh, double force_mass_kg,
                                      const BandOptions& options = {});

}  // namespace loadtrim::core
