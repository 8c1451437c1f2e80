// First-setting strategies. The standard fixes how acceptance is judged and each adjustment made, but leaves
// the first setting to the lab ("or empirical values from a similar vehicle", docs/standards.md §3). All four
// give the dyno setting as target minus an estimate of the vehicle's loss on the rollers, except the
// standard's default. Pure: the data (EPA rows, hold readings, history) is passed in.
#pragma once

#include <optional>
#include <span>
#include <string>
#include <vector>

#include "core/profile.hpp"
#include "core/regression.hpp"
#include "core/road_load.hpp"
#include "core/setting.hpp"
#include "core/warm_up_drift.hpp"

namespace loadtrim::core {

enum class FirstSetting { standard, fleet, loss_map, history };
const char* to_string(FirstSetting f);
bool parse(const std::string& s, FirstSetting& out);

// Set = target − loss: the dyno adds what the vehicle does not take itself.
inline RoadLoad setting_for_loss(const RoadLoad& target, const RoadLoad& loss) {
  return target - loss;
}

// (b) Fleet estimate: the loss (target − set) of real vehicles as a linear function of test mass, per dyno
// layout, fitted by least squares to public EPA rows. Rows whose loss at 20 or 130 km/h falls outside
// 0–600 N are screened out (entry errors in the data, samples/data/README.md).
struct FleetRow {
  double test_mass_kg = 0.0;
  AxleLayout layout = AxleLayout::single_axle;
  RoadLoad target, set;
};
struct FleetLossModel {
  struct Line {
    RoadLoad at_zero_kg;  // intercept
    RoadLoad per_kg;      // slope
    int rows = 0;
  };
  Line single_axle, two_axle;
  RoadLoad estimate(double test_mass_kg, AxleLayout layout) const;
  bool ok() const { return single_axle.rows >= 10; }
};
FleetLossModel fit_fleet_loss(std::span<const FleetRow> rows);

// (c) Loss map measured in speed hold at the end of the warm-up: the force the dyno needs to hold each speed
// is the vehicle's loss on the rollers (plus the residual parasitic loss); a quadratic through the points.
struct HoldPoint {
  double speed_kmh = 0.0;
  double force_n = 0.0;  // mean load-cell force over the averaging window
  double force_sd_n = 0.0;
  int samples = 0;
};
RoadLoadFit fit_loss_map(std::span<const HoldPoint> points);
// The mean and the (population) spread of the load-cell force over one averaging window.
HoldPoint hold_point(double speed_kmh, std::span<const double> forces_n);

// The steady-versus-coasting difference, learnt inside the warm-up (lab policy, docs/standards.md §3.15): a
// speed hold reads the vehicle's loss plus what a coast-down never sees (the steady-versus-coasting
// difference, a load cell's offset and gain); short coasts between the map's holds measure the loss as a
// coast-down does (band force m·2Δv/Δt less the set the dyno applied). The difference d(v) = hold map(v) −
// coasting loss(v) is fitted as d0 + d2·v² (least squares), and the loss map's estimate becomes map − d.
// Never trusted as given (lab policy, no source): d2 only when the points span at least kCoastMinSpanKmh
// (else d0 alone, the mean: two nearby points would carry their noise far down the speed range); refused (not
// ok, why said) when the points disagree by more than kCoastMaxResidualSdN about d(v), or |d| exceeds
// kCoastMaxDifferenceN anywhere on [lo_kmh, hi_kmh] (a reading to distrust, not a vehicle: harsh truths'
// spreads are about 60 N at three standard deviations).
inline constexpr double kCoastMinSpanKmh = 40.0;
// 10 N: above the band force's noise at the top reference speeds at 10 Hz with a 0.2 km/h encoder (about
// 5–8 N: the 100 Hz, 0.05 km/h spread of docs/performance.md "Estimator spread and the noise model" scaled by
// σ_v/√f_s), far below what a lying trace gives (hundreds of N in the review's cases).
inline constexpr double kCoastMaxResidualSdN = 10.0;
inline constexpr double kCoastMaxDifferenceN = 80.0;
struct CoastPoint {
  double speed_kmh = 0.0;
  double coasting_loss_n = 0.0;  // band force less the set force at the band's reference speed
};
struct CoastCorrection {
  bool ok = false;
  std::string why;  // when not ok
  int points = 0;
  double d0_n = 0.0, d2_n_per_kmh2 = 0.0;
  double residual_sd_n = 0.0;  // of the points about d(v) (0 with fewer than 3 points)
  RoadLoad as_road_load() const { return {d0_n, 0.0, d2_n_per_kmh2}; }
};
// At least one finite point at a positive speed.
CoastCorrection fit_coast_correction(const RoadLoad& hold_map, std::span<const CoastPoint> points,
                                     double lo_kmh = 20.0, double hi_kmh = 130.0);

// The loss map's plan, before it is run: the profile's speeds at or below the speed limit less 1 km/h, in the
// profile's order (the others skipped), and the time they take: each ramp from the previous speed at the
// motoring rate kHoldRampMps2, kHoldSettleS at the setpoint, then settle and average (common practice, no
// source). The session shortens the plain warm-up hold by planned_s: the map is part of the warm-up.
inline constexpr double kHoldRampMps2 = 1.5;
// How long the session's every speed hold stays at its setpoint before it counts as reached
// (Session::hold_and_wait; common practice, no source).
inline constexpr double kHoldSettleS = 2.0;
struct HoldPlan {
  std::vector<double> speeds_kmh, skipped_kmh;
  double planned_s = 0.0;
};
HoldPlan plan_hold_points(const LossMap& map, double from_kmh, double speed_limit_kmh);

// A session's initial warm-up hold as its record keeps it (the "warm_up" record's windows): the speed and
// each stability window's mean force, at the window's middle in time since the warm-up began.
struct WarmUpRecord {
  double speed_kmh = 0.0;
  std::vector<DriftPoint> windows;
};

// The history's day-to-day correction (docs/store.md, "The history first setting"; our rule, no source): the
// vehicle's loss on the same cell changes from day to day (tyre pressure and temperature, oil), and today's
// warm-up hold sees that change before any coast-down. The two warm-ups are compared at the same time since
// their start: t = the earlier of the two last windows' middles, each as the mean of its windows in
// (t − kDayScaleSpanS, t]; the history's loss is scaled by today's mean over the earlier one's. Both are the
// sessions' initial holds (the session and the store see to that).
inline constexpr double kDayScaleSpanS = 180.0;     // three one-minute windows (our choice, no source)
inline constexpr double kDayScaleMinHeldS = 600.0;  // t at least 10 min into both (our choice)
inline constexpr double kDayScaleSpeedKmh = 0.5;    // the same warm-up speed within this
inline constexpr double kDayScaleMin = 0.8, kDayScaleMax = 1.25;  // a larger change is not the same state
struct DayScale {
  bool used = false;
  std::string why;      // when not used: why ("" when used)
  double ratio = 1.0;   // today's mean over the earlier one's (1 when none was computed or it was out of
                        // range: why gives it; the ratio refused when the scaled set left the envelope)
  double at_s = 0.0;    // the time since the warm-up began the two were compared at
  double then_n = 0.0;  // the earlier session's mean there
  double now_n = 0.0;   // today's
  int windows_then = 0, windows_now = 0;
};
DayScale day_to_day_scale(const WarmUpRecord& then, const WarmUpRecord& now);

// (d) History: the loss seen in earlier sessions of the vehicle (an iterative session's last measured curve
// less its setting, else target − accepted set): on the same cell scaled by the day-to-day correction above;
// from another cell, corrected by what the lab's record store knows about the two cells (docs/store.md, "The
// history first setting"; our rule, no source).
//
// One accepted session as the record store indexed it (its folder verified again before it is passed here).
struct StoredSession {
  std::string id;      // the session id (the folder's name)
  std::string folder;  // where the store says it is
  std::string cell, vehicle;
  std::string utc;  // when it started (record 0), ISO 8601 UTC: sorts as text
  RoadLoad target, final_set;
  // The curve its last coast-down measured at final_set, from its verified folder, only for an iterative
  // session, whose last coast-down is always at the accepted setting (nullopt otherwise, or none recorded).
  std::optional<RoadLoad> measured;
  std::optional<WarmUpRecord> warm_up;  // its initial warm-up hold, from its verified folder (or nullopt)
  // The loss on the rollers where the session ended: the measured curve less the setting it was measured
  // at when known (what the standard's adjustment would carry on from), else target − final_set.
  RoadLoad loss() const { return measured ? *measured - final_set : target - final_set; }
};
// A vehicle accepted on two cells: its latest accepted session on each.
struct CellPair {
  std::string vehicle;
  StoredSession here;   // on the cell being set
  StoredSession there;  // on the other cell
  // When the pair was last seen: the later of its two sessions.
  const std::string& newest_utc() const { return here.utc > there.utc ? here.utc : there.utc; }
};
// At most this many pairs (the newest) go into a cell correction (our rule, no source: enough for a stable
// mean, few enough that a cell's drift over the years does not dominate).
inline constexpr int kMaxCellPairs = 20;
// Where a history estimate came from, for the record.
struct HistoryBasis {
  std::string source;  // "store" or "file"
  std::string where;   // the store as shown (a file, or a server), or the history file
  std::string session_id, session_folder, source_cell;  // the vehicle's session the loss is from
  bool same_cell = true;
  std::vector<CellPair> pairs;  // the pairs the correction is the mean over (newest first)
  int pairs_available = 0;      // pairs between the two cells before the cap
  RoadLoad correction;          // added to the session's loss (zero on the same cell, or without a pair)
  std::string note;             // one sentence: how the loss was obtained
};
struct HistoryEntry {
  std::string utc;
  RoadLoad target;
  RoadLoad final_set;
  std::optional<RoadLoad> measured;     // as StoredSession::measured
  std::optional<WarmUpRecord> warm_up;  // its initial warm-up hold (nullopt: not known, or another cell)
  RoadLoad correction;                  // the cell correction (zero when the session was on this cell)
  std::optional<HistoryBasis> basis;
  RoadLoad loss() const { return (measured ? *measured - final_set : target - final_set) + correction; }
};
// How a history loss was obtained, for the basis' note: "its loss as measured at its last coast-down" or
// "its loss as target − accepted set (...)" (docs/store.md, "The history first setting").
std::string history_loss_note(bool measured);

// The history estimate from the record store, for `vehicle_sessions` (accepted sessions of the vehicle, any
// cell, any order) on `this_cell`, with `pairs` (vehicles accepted on this cell and another, there.cell the
// other; any order). The rule (docs/store.md):
// - the vehicle's latest accepted session on this cell, uncorrected, when there is one;
// - else the cell X (of those the vehicle was accepted on) with the most pairs, ties to the cell of the newer
//   session, and there the vehicle's latest accepted session; its loss plus the correction, the arithmetic
//   mean over the newest `max_pairs` pairs of (loss here − loss on X), per coefficient;
// - with no pair, X's loss uncorrected, note "no vehicle run on both cells: not corrected".
// nullopt when the vehicle has no accepted session.
std::optional<HistoryEntry> history_from_store(const std::string& this_cell,
                                               std::span<const StoredSession> vehicle_sessions,
                                               std::span<const CellPair> pairs,
                                               int max_pairs = kMaxCellPairs);

// The first setting, chosen once before the first coast-down (session.cpp) and shown per strategy by
// `loadtrim target` (target_cmd.cpp): the one place the choice and its fallbacks are written.
struct FirstSettingInputs {
  FirstSetting requested = FirstSetting::standard;
  RoadLoad target;
  double test_mass_kg = 0.0;
  AxleLayout layout = AxleLayout::single_axle;  // the cell's dyno.axles
  InitialSettingRule rule;                      // the profile's [initial_setting]
  std::optional<RoadLoad> target_file_set;      // vehicle.initial_set: overrides every strategy
  std::optional<FleetLossModel> fleet;          // used only when ok()
  std::optional<HistoryEntry> history;          // this vehicle on this cell
  std::optional<WarmUpRecord> warm_up_today;    // this session's warm-up hold (the history's day scale)
  std::vector<HoldPoint> loss_map;              // measured at the end of the warm-up (empty: not measured)
  std::vector<CoastPoint> coast_points;         // the coasts between the holds (empty: none)
  bool coasts_asked = false;                    // the profile asked for them: the record says what came of it
  double lo_kmh = 20.0, hi_kmh = 130.0;         // the reference speed range (the correction's bound)
};
struct FirstSettingChoice {
  std::string used;  // the strategy's name (to_string), or "target-file"
  std::string why;   // why the requested strategy was not used ("" when it was)
  RoadLoad set;
  std::optional<RoadLoad> loss;  // the loss estimate the set was derived from (set = target − loss)
  // What the chosen strategy used, recorded beside its result.
  std::optional<std::string> history_utc;  // only when history was requested and used
  std::optional<HistoryBasis>
      history_basis;                  // whenever the history's loss was used and says where it is from
  std::optional<DayScale> day_scale;  // whenever the history's loss was used: its day-to-day correction
  std::optional<RoadLoad> map_fit;
  std::optional<double> map_residual_sd_n;
  std::optional<CoastCorrection> coast_correction;  // when coast points were given with a loss map
  // The warming the loss map's setting anticipates (docs/standards.md §3.16): set by the session, which
  // knows the clock; loss above is the scaled one and anticipation->loss the map's before scaling.
  std::optional<Anticipation> anticipation;
};
// The rules:
// - A target file's initial set is used as given ("target-file").
// - standard: Ad = k0·At, Bd = k1·Bt, Cd = k2·Ct (standard_initial_setting with the layout and rule).
// - fleet: target − fleet.estimate(TM, layout) when the model is ok(); else standard, why "no fleet data".
// - history: target − history.loss(), the loss scaled by day_to_day_scale(history.warm_up, warm_up_today)
//   when both are given and it is used (day_scale says why not otherwise); without history, the fallback
//   below, why "no earlier accepted session of this vehicle".
// - loss-map: target − fit_loss_map(points) when the fit is ok, less the coast correction d when coasts were
//   asked for and it fits (else the map as it is, the correction's why recorded); else the fallback, why "no
//   loss map (not measured)" or "no loss map (<the fit's message>)".
// - The fallback: history when there is one, else fleet when ok(), else standard.
FirstSettingChoice choose_first_setting(const FirstSettingInputs& in);

}  // namespace loadtrim::core
