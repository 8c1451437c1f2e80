// A standard profile: the rules one coast-down setting follows (reference speeds, band, tolerance, method,
// mass and inertia rules, rounding). Profiles are data files in config/profiles; this header holds the
// values and their validation. Pure: no I/O.
#pragma once

#include <string>
#include <vector>

#include "core/problem.hpp"
#include "core/road_load.hpp"

namespace loadtrim::core {

enum class SettingMethod { iterative, fixed_run };
enum class AxleLayout { single_axle, two_axle };  // the dyno: one driven axle on rollers, or both

const char* to_string(SettingMethod m);
const char* to_string(AxleLayout a);
bool parse(const std::string& s, SettingMethod& out);
bool parse(const std::string& s, AxleLayout& out);

// m_r = fraction × (mass in running order + offset) (EU SA4 §2.5.1: 3 % of (MRO + 25 kg)).
// Forces use TM + m_r (§2.5.2). Dyno inertia: TM on a two-axle dyno, TM + share × m_r otherwise (§2.5.3).
struct MassRule {
  double rotating_fraction = 0.03;
  double rotating_offset_kg = 25.0;
  double single_axle_inertia_share = 0.5;
};

// Initial dyno setting when the lab has nothing better (docs/standards.md §3, from memory, low confidence):
// Ad = 0.5·At (0.1·At on a two-axle dyno), Bd = 0.2·Bt, Cd = Ct.
struct InitialSettingRule {
  double f0_factor_single_axle = 0.5;
  double f0_factor_two_axle = 0.1;
  double f1_factor = 0.2;
  double f2_factor = 1.0;
};

// Vehicle warm-up on the dyno before the first coast-down (docs/standards.md §3: the dyno-side wording was
// not found). The road's warm-up (from memory: 90 % of the cycle's maximum speed for at least 20 min) is not
// what the 80 km/h, 20 min default below is: that default is common practice, no source; profiles set theirs.
struct WarmUp {
  double speed_kmh = 80.0;
  double duration_s = 1200.0;
  double stable_within_n = 0.0;  // > 0: continue until stable, judged as stable_by says
  double stable_window_s = 60.0;
  double max_extra_s = 600.0;  // ...for at most this much longer
  // How "stable" is judged (lab policy, docs/standards.md §3.12): `windows`, the mean hold force of the last
  // window differs from the one before by less than stable_within_n; `trend`, less than stable_within_n is
  // still to come at the warm-up speed by remaining_drift_for_end_n (warm_up_drift.hpp: the warming curve
  // fitted across the hold windows so far, and the recent slope carried on; no verdict is not stable).
  enum class StableBy { windows, trend };
  StableBy stable_by = StableBy::windows;
  // The drift still to come at acceptance (docs/standards.md §3.12, lab policy): "warn" accepts with a
  // finding when it is above drift_threshold_n; "require" keeps coasting at the accepted setting until it is
  // below (within the coast-down limit).
  enum class DriftRule { warn, require };
  DriftRule drift_rule = DriftRule::warn;
  double drift_threshold_n = 3.0;
  // With "require": a settled vehicle's setting is also judged as it will be once the vehicle is fully warm
  // (setting.hpp fully_warm_outlook, docs/standards.md §3.18, lab policy); outside tolerance there, the
  // iterative method adjusts it for the warm vehicle (or coasts on at it while the vehicle settles further,
  // not accepting when no coast-down is left) instead of accepting.
  bool check_fully_warm = false;
  // Anticipate the warming still to come in each adjusted setting and in the fixed-run final setting
  // (setting.hpp WarmingOutlook, docs/standards.md §3.16, lab policy): the loss taken off the target is
  // scaled by the change the warm-up's curve predicts by the next coast-down. Off: the standard's adjustment
  // as it is.
  bool anticipate_drift = false;
  // With anticipate_drift and the iterative method: after a pass that is not yet the last of the consecutive
  // passes, predict the next coast-down's deviation with the warming to it (setting.hpp next_pass_outlook,
  // docs/standards.md §3.19, lab policy) and its chance to fail; above next_pass_risk, and when the adjusted
  // setting is predicted likelier to pass, adjust the setting now (the passes start again) instead of coasting
  // on to a likely failure.
  bool predict_next_pass = false;
  // The model's chance of a failure at the next coast-down above which the setting is adjusted now (0.01 to
  // 0.99; 0.5: when a failure is more likely than not by the model).
  double next_pass_risk = 0.5;
  // Which coast-downs an anticipated setting aims at (docs/standards.md §3.16, lab policy): `next`, the next
  // coast-down only; `passes`, the coast-downs it must pass in a row at one setting (the iterative method's
  // consecutive passes, the fixed-run method's verification runs), by the mean of the changes predicted to
  // each: a setting aimed at the first of two passes meets the second a whole cycle's warming off.
  enum class AnticipateFor { next, passes };
  AnticipateFor anticipate_for = AnticipateFor::next;
};

// Loss map at the end of the warm-up (first-setting strategy "loss-map"): hold each speed, let it settle,
// average.
struct LossMap {
  std::vector<double> speeds_kmh = {130.0, 100.0, 70.0, 40.0, 20.0};
  double settle_s = 5.0;
  double average_s = 5.0;
  // Coast from each hold down to the next with the standard's default setting written, and learn the
  // steady-versus-coasting difference from those coasts (strategy.hpp fit_coast_correction; docs/standards.md
  // §3.15, lab policy). Off: the map ramps between holds at the motoring rate.
  bool coast_between_holds = false;
};

// How a deviation is judged against the tolerance (docs/standards.md §3.11). ISO/IEC 17025:2017 §7.8.6 asks
// that a statement of conformity name its decision rule [text, from memory]. "simple": the standard's own
// acceptance, |deviation| ≤ tolerance, the measured value taken as it is (GTR 15 §8.1.3.4.2). "guard-band":
// lab policy, |deviation| ≤ tolerance − k·u, so that a pass is a pass with the stated coverage (the guard
// band w = k·u of ILAC-G8, from memory; k = 2 is about 95 % for a normal distribution).
struct DecisionRule {
  enum class Kind { simple, guard_band };
  Kind kind = Kind::simple;
  double coverage_k = 2.0;
};
const char* to_string(DecisionRule::Kind k);  // "simple", "guard-band"

struct Profile {
  std::string name;
  std::string standard;  // free text, e.g. "UN GTR 15 Annex 4 §8.1.3"
  std::vector<double> reference_speeds_kmh;
  double band_half_width_kmh = 5.0;  // Δv: the band runs from v_j + Δv down to v_j − Δv
  // The samples each band edge's crossing time is fitted over: those within ± this of the edge's speed
  // (trace_analysis.hpp BandOptions; bands.crossing_fit_half_width_kmh, lab policy, docs/standards.md §2.10).
  // A wider window averages more samples of a noisy encoder; the fit's error stays of fourth order in it.
  double crossing_fit_half_width_kmh = 2.5;
  double tolerance_n = 10.0;   // every reference speed within ± this of the target
  DecisionRule decision_rule;  // how "within" is judged (acceptance.decision_rule)
  // acceptance.whole_trace_confirms (lab policy, docs/standards.md §3.11): a coast-down within tolerance by
  // the standard's band regression counts as a pass only when the whole-trace curve is within tolerance at
  // every reference speed too (a fit that fails confirms nothing: no pass). The adjustment stays the
  // standard's.
  bool whole_trace_confirms = false;
  int consecutive_passes = 2;       // iterative method: passes in a row for acceptance
  double run_up_margin_kmh = 12.0;  // run up this far above the top reference speed before releasing
  SettingMethod method = SettingMethod::iterative;
  int fixed_runs = 4;                   // fixed-run method: coast-downs in total, run 1 stabilises
  int fixed_run_verification_runs = 1;  // coast-downs at the final setting to confirm it (0 = none)
  MassRule mass;
  InitialSettingRule initial;
  WarmUp warm_up;
  LossMap loss_map;
  Rounding rounding;
  int max_coastdowns = 10;                // stop reason "iteration limit" beyond this
  int max_unusable_runs = 3;              // stop after this many unusable coast-downs
  double max_gap_after_warmup_s = 120.0;  // first coast-down starts within this of the warm-up end
  // A first coast-down released later than that (EU SA4 §8.1.2–8.1.3, docs/standards.md §3.6): repeated after
  // a short re-warm (the default), or, where the lab's policy allows, kept with a finding on page one.
  enum class LateStart { repeat, finding };
  LateStart late_start = LateStart::repeat;
  double late_start_rewarm_s = 300.0;     // the short re-warm before the repeat (lab policy, no source)
  double estimator_disagreement_n = 5.0;  // flag when band and whole-trace forces differ by more
  // method.adjust_from (lab policy, docs/standards.md §3.17): the estimate the adjustment (and the fixed-run
  // final setting's average) takes the measured curve from. band_regression: the standard's (As, Bs, Cs);
  // whole_trace: the whole-trace curve's band-equivalent, when the fit converged and that curve lies within
  // the band regression's noise of it and within the tolerance at every reference speed (evaluation.hpp
  // kAdjustNoiseK; else the band regression's, said). Acceptance is the band regression's either way.
  enum class AdjustFrom { band_regression, whole_trace };
  AdjustFrom adjust_from = AdjustFrom::band_regression;

  double top_speed_kmh() const;
  double bottom_speed_kmh() const;
  // Release into the coast from here: top reference speed + run-up margin (docs/standards.md §3: 10–15 km/h
  // on the road).
  double start_speed_kmh() const { return top_speed_kmh() + run_up_margin_kmh; }
  // Record until the speed is below this: lowest band edge less a margin for the crossing fit.
  double end_speed_kmh() const { return bottom_speed_kmh() - band_half_width_kmh - 3.0; }
};

// Every problem at once, keys as they appear in the profile file.
Problems validate(const Profile& p);

// m_r from the mass in running order.
double rotating_mass_kg(double mass_in_running_order_kg, const MassRule& rule);
// TM + m_r: the mass used to turn deceleration into force, on road and dyno alike.
inline double force_mass_kg(double test_mass_kg, double rotating_mass_kg) {
  return test_mass_kg + rotating_mass_kg;
}
// The inertia the dyno is told to simulate.
double dyno_inertia_kg(double test_mass_kg, double rotating_mass_kg, AxleLayout layout, const MassRule& rule);

}  // namespace loadtrim::core
