// The dyno's own checks, with no vehicle on the rollers (docs/standards.md §4), as pure computations on traces and
// records: the parasitic loss curve from a coast of the empty rollers with simulation off, the unloaded
// coast-down in the shape of 40 CFR 1066.270, the base inertia in the shape of 40 CFR 1066.250, and which
// check is due per the intervals of 40 CFR 1066.215. No I/O, no clocks: times come in as numbers.
#pragma once

#include <optional>
#include <span>
#include <string>
#include <vector>

#include "core/regression.hpp"
#include "core/road_load.hpp"
#include "core/trace_analysis.hpp"

namespace loadtrim::core {

// --- 1066.250: base inertia -------------------------------------------------------------------------------
// I = F̄·Δt/Δv (docs/standards.md §4, the formula from memory), SI: N, s, m/s → kg.
double inertia_from_constant_force_kg(double mean_force_n, double delta_t_s, double delta_v_mps);

struct InertiaCheckOptions {
  double v_low_mph = 10.0;  // CFR 1066.250 [text]: time from 10 to 40 mph
  double v_high_mph = 40.0;
  double tolerance_fraction = 0.01;  // the numeric limit is not in docs/standards.md: configurable, default no source
};

// An accelerating trace (speed rising) with the load-cell force: crossing times at the two speeds (local
// fits, as for coast-downs), the mean force between them, the inertia, and its error against the stated base
// inertia.
struct InertiaCheck {
  bool ok = false;      // computed (not: passed)
  std::string message;  // why not computed
  double t_low_s = 0.0, t_high_s = 0.0, delta_t_s = 0.0, delta_v_mps = 0.0, mean_force_n = 0.0;
  double inertia_kg = 0.0, stated_kg = 0.0, error_fraction = 0.0;
  bool passed = false;
  std::string verdict;  // one line naming the finding
};
InertiaCheck check_base_inertia(TraceView rising, std::span<const double> force_n,
                                double stated_base_inertia_kg, const InertiaCheckOptions& o = {});

// --- 1066.270: unloaded coast-down ------------------------------------------------------------------------
struct UnloadedCoastdownOptions {
  double v_start_mph = 80.0;  // CFR 1066.270 [text]: 80 → 10 mph in 10 mph intervals
  double v_end_mph = 10.0;
  double interval_mph = 10.0;
  double tolerance_n = 9.8;  // not in docs/standards.md: configurable. Default = the 1066.210 force resolution floor
                             // (±9.8 N), used here as an assumption, not as the standard's limit.
  double tolerance_fraction = 0.02;  // and the larger of this share of the expected force (no source)
};

struct IntervalResult {
  double v_high_mph = 0.0, v_low_mph = 0.0;
  double delta_t_s = 0.0, expected_delta_t_s = 0.0;
  double mean_force_n = 0.0;      // I·Δv/Δt from the measured time
  double expected_force_n = 0.0;  // I·Δv/Δt from the closed-form time under the setting (docs/standards.md §6.4)
  double deviation_n = 0.0, limit_n = 0.0;
  bool passed = false;
  std::string reason;  // when not measured
};
struct UnloadedCoastdown {
  bool passed = false;
  double inertia_kg = 0.0;
  RoadLoad setting;
  std::vector<IntervalResult> intervals;
  std::string verdict;
};
// The coast of the empty rollers under road-load simulation with `setting` at `inertia_kg`.
UnloadedCoastdown check_unloaded_coastdown(TraceView coast, double inertia_kg, const RoadLoad& setting,
                                           const UnloadedCoastdownOptions& o = {});
// Speeds of the intervals, high to low, in mph: 80, 70, …, 10.
std::vector<double> interval_edges_mph(const UnloadedCoastdownOptions& o);

// --- parasitic loss ----------------------------------------------------------------------------------------
struct ParasiticOptions {
  std::vector<double> speeds_kmh = {20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120};
  double half_band_kmh = 5.0;
  double tolerance_n = 5.0;          // no source (common practice, no source): against the stored curve, the
  double tolerance_fraction = 0.10;  // larger of this and this share of the stored loss, at each speed
};
struct ParasiticPoint {
  double speed_kmh = 0.0, measured_n = 0.0, stored_n = 0.0, deviation_n = 0.0, limit_n = 0.0;
  bool passed = false;
};
struct ParasiticDetermination {
  bool ok = false;  // a curve was derived
  std::string message;
  RoadLoadFit fit;
  std::vector<BandResult> bands;
  std::vector<ParasiticPoint> points;  // against the stored curve, when there is one
  bool have_stored = false;
  bool passed = false;  // derived, and within tolerance of the stored curve (or none stored: installation)
  double mean_ratio = 1.0;  // measured / stored, mean over the speeds
  std::string verdict;
};
// A coast of the empty rollers with simulation off: base_inertia·dv/dt = −P(v).
ParasiticDetermination determine_parasitic(TraceView coast, double base_inertia_kg,
                                           const std::optional<RoadLoad>& stored,
                                           const ParasiticOptions& o = {});

// --- 1066.215: which check is due -------------------------------------------------------------------------
enum class CheckKind { parasitic, coastdown, readiness, inertia };
const char* to_string(CheckKind k);
bool parse(const std::string& s, CheckKind& out);
inline constexpr CheckKind kAllChecks[] = {CheckKind::parasitic, CheckKind::coastdown, CheckKind::readiness,
                                           CheckKind::inertia};

struct CheckRecord {
  CheckKind kind = CheckKind::coastdown;
  double utc_s = 0.0;  // seconds since the Unix epoch
  bool passed = false;
};
struct DuePolicy {
  double coastdown_interval_s = 7 * 86400.0;  // CFR 1066.215 [text]: unloaded coast-down within every 7 days
  double readiness_interval_s = 1 * 86400.0;  // CFR 1066.215 [text]: daily readiness check within 1 day
  double inertia_interval_s = 0.0;    // 0: at installation, after maintenance and after a failed check only
                                      // (the interval is not in docs/standards.md)
  double parasitic_interval_s = 0.0;  // CFR 1066.215 [text]: at installation, after major maintenance and
                                      // after a failed check
};
enum class DueState { current, due_never_done, overdue, failed, after_maintenance, after_failed_check };
const char* to_string(DueState s);
struct DueItem {
  CheckKind kind = CheckKind::coastdown;
  DueState state = DueState::current;
  std::optional<double> last_pass_utc_s;
  std::optional<double> valid_until_utc_s;  // for interval checks
  std::string why;
  bool due() const { return state != DueState::current; }
};
// `maintenance_utc_s`: when major maintenance was last logged (parasitic and inertia become due after it).
// A check done at t with interval T is current for now − t ≤ T and overdue after; a failed latest run makes
// the check due again, and makes the parasitic determination due (1066.215) until a later passing one.
std::vector<DueItem> due_checks(std::span<const CheckRecord> history, double now_utc_s,
                                const DuePolicy& policy,
                                std::optional<double> maintenance_utc_s = std::nullopt);

// --- a check profile: everything above, as one file (config/checks/*.toml) --------------------------------
struct CheckProfile {
  std::string name, standard;
  DuePolicy due;
  std::vector<CheckKind> required = {CheckKind::parasitic, CheckKind::coastdown, CheckKind::readiness,
                                     CheckKind::inertia};
  ParasiticOptions parasitic;
  double parasitic_run_up_margin_kmh = 10.0;
  UnloadedCoastdownOptions coastdown;
  RoadLoad smallest_inertia_setting{40.0, 0.2,
                                    0.02};  // "typical" coefficients (1066.270 [text]); values: ours
  RoadLoad largest_inertia_setting{150.0, 1.0, 0.04};
  double coastdown_run_up_margin_mph = 5.0;
  double settle_s = 3.0;  // hold at the start speed before releasing (common practice, no source)
  InertiaCheckOptions inertia;
  double inertia_accel_mph_per_s = 1.0;  // CFR 1066.250 [text]: a constant force at about 1 mph/s
};

}  // namespace loadtrim::core
