#include "core/profile.hpp"

#include <algorithm>
#include <cmath>
#include <string>

namespace loadtrim::core {

const char* to_string(DecisionRule::Kind k) {
  return k == DecisionRule::Kind::guard_band ? "guard-band" : "simple";
}

const char* to_string(SettingMethod m) {
  return m == SettingMethod::iterative ? "iterative" : "fixed-run";
}
const char* to_string(AxleLayout a) {
  return a == AxleLayout::single_axle ? "single-axle" : "two-axle";
}

bool parse(const std::string& s, SettingMethod& out) {
  if (s == "iterative") return out = SettingMethod::iterative, true;
  if (s == "fixed-run") return out = SettingMethod::fixed_run, true;
  return false;
}
bool parse(const std::string& s, AxleLayout& out) {
  if (s == "single-axle") return out = AxleLayout::single_axle, true;
  if (s == "two-axle") return out = AxleLayout::two_axle, true;
  return false;
}

double Profile::top_speed_kmh() const {
  return reference_speeds_kmh.empty()
             ? 0.0
             : *std::max_element(reference_speeds_kmh.begin(), reference_speeds_kmh.end());
}
double Profile::bottom_speed_kmh() const {
  return reference_speeds_kmh.empty()
             ? 0.0
             : *std::min_element(reference_speeds_kmh.begin(), reference_speeds_kmh.end());
}

namespace {
void range(Problems& ps, const std::string& key, double v, double lo, double hi, const char* unit) {
  if (!std::isfinite(v) || v < lo || v > hi)
    ps.push_back({Problem::Severity::error, key,
                  "is " + num(v) + ", allowed " + num(lo) + " to " + num(hi) + (*unit ? " " : "") + unit});
}
void irange(Problems& ps, const std::string& key, int v, int lo, int hi) {
  if (v < lo || v > hi)
    ps.push_back(
        {Problem::Severity::error, key,
         "is " + std::to_string(v) + ", allowed " + std::to_string(lo) + " to " + std::to_string(hi)});
}
}  // namespace

Problems validate(const Profile& p) {
  Problems ps;
  if (p.name.empty()) ps.push_back({Problem::Severity::error, "name", "must not be empty"});
  range(ps, "bands.half_width_kmh", p.band_half_width_kmh, 1.0, 10.0, "km/h");
  if (p.reference_speeds_kmh.size() < 3)
    ps.push_back({Problem::Severity::error, "bands.reference_speeds_kmh",
                  "needs at least 3 speeds to regress three coefficients, has " +
                      std::to_string(p.reference_speeds_kmh.size())});
  for (std::size_t i = 0; i < p.reference_speeds_kmh.size(); ++i) {
    const double v = p.reference_speeds_kmh[i];
    range(ps, "bands.reference_speeds_kmh[" + std::to_string(i) + "]", v, p.band_half_width_kmh + 4.0, 250.0,
          "km/h");
    if (i > 0 && !(v > p.reference_speeds_kmh[i - 1]))
      ps.push_back({Problem::Severity::error, "bands.reference_speeds_kmh",
                    "must be strictly increasing (entry " + std::to_string(i) + ")"});
  }
  range(ps, "acceptance.tolerance_n", p.tolerance_n, 0.1, 1000.0, "N");
  irange(ps, "acceptance.consecutive_passes", p.consecutive_passes, 1, 10);
  range(ps, "acceptance.guard_band_k", p.decision_rule.coverage_k, 1.0, 3.0, "");
  // The upper edge of the top band must be passed in free coast, with room for the crossing fit: its window
  // (bands.crossing_fit_half_width_kmh, docs/standards.md §2.10) ends at or below the release, and at least 2
  // km/h of free coast lie above the edge.
  range(ps, "bands.crossing_fit_half_width_kmh", p.crossing_fit_half_width_kmh, 1.0, 10.0, "km/h");
  range(ps, "run.run_up_margin_kmh", p.run_up_margin_kmh,
        p.band_half_width_kmh + std::max(2.0, p.crossing_fit_half_width_kmh), 30.0, "km/h");
  irange(ps, "method.fixed_runs", p.fixed_runs, 2, 10);
  irange(ps, "method.fixed_run_verification_runs", p.fixed_run_verification_runs, 0, 5);
  range(ps, "mass.rotating_fraction", p.mass.rotating_fraction, 0.0, 0.2, "");
  range(ps, "mass.rotating_offset_kg", p.mass.rotating_offset_kg, 0.0, 500.0, "kg");
  range(ps, "mass.single_axle_inertia_share", p.mass.single_axle_inertia_share, 0.0, 1.0, "");
  range(ps, "initial_setting.f0_factor_single_axle", p.initial.f0_factor_single_axle, -1.0, 2.0, "");
  range(ps, "initial_setting.f0_factor_two_axle", p.initial.f0_factor_two_axle, -1.0, 2.0, "");
  range(ps, "initial_setting.f1_factor", p.initial.f1_factor, -1.0, 2.0, "");
  range(ps, "initial_setting.f2_factor", p.initial.f2_factor, -1.0, 2.0, "");
  irange(ps, "rounding.f0_decimals", p.rounding.f0_decimals, 0, 9);
  irange(ps, "rounding.f1_decimals", p.rounding.f1_decimals, 0, 9);
  irange(ps, "rounding.f2_decimals", p.rounding.f2_decimals, 0, 9);
  irange(ps, "limits.max_coastdowns", p.max_coastdowns, 2, 100);
  irange(ps, "limits.max_unusable_runs", p.max_unusable_runs, 1, 100);
  range(ps, "timing.max_gap_after_warmup_s", p.max_gap_after_warmup_s, 0.0, 3600.0, "s");
  range(ps, "acceptance.estimator_disagreement_n", p.estimator_disagreement_n, 0.0, 1000.0, "N");
  range(ps, "warm_up.speed_kmh", p.warm_up.speed_kmh, 10.0, 250.0, "km/h");
  range(ps, "warm_up.duration_s", p.warm_up.duration_s, 0.0, 14400.0, "s");
  range(ps, "warm_up.stable_within_n", p.warm_up.stable_within_n, 0.0, 100.0, "N");
  range(ps, "warm_up.stable_window_s", p.warm_up.stable_window_s, 5.0, 1200.0, "s");
  range(ps, "warm_up.max_extra_s", p.warm_up.max_extra_s, 0.0, 7200.0, "s");
  if (p.warm_up.stable_by == WarmUp::StableBy::trend && !(p.warm_up.stable_within_n > 0.0))
    ps.push_back(
        {Problem::Severity::error, "warm_up.stable_by",
         "is \"trend\", which needs warm_up.stable_within_n above 0 N (the drift still to come at which "
         "the warm-up may end); with 0 nothing would be checked"});
  if (p.loss_map.speeds_kmh.size() < 3)
    ps.push_back(
        {Problem::Severity::error, "loss_map.speeds_kmh", "needs at least 3 speeds for a quadratic"});
  for (std::size_t i = 0; i < p.loss_map.speeds_kmh.size(); ++i)
    range(ps, "loss_map.speeds_kmh[" + std::to_string(i) + "]", p.loss_map.speeds_kmh[i], 5.0, 250.0, "km/h");
  range(ps, "loss_map.settle_s", p.loss_map.settle_s, 0.5, 120.0, "s");
  range(ps, "loss_map.average_s", p.loss_map.average_s, 0.5, 120.0, "s");
  if (p.method == SettingMethod::fixed_run && p.max_coastdowns < p.fixed_runs + p.fixed_run_verification_runs)
    ps.push_back({Problem::Severity::error, "limits.max_coastdowns",
                  "must be at least method.fixed_runs + method.fixed_run_verification_runs (" +
                      std::to_string(p.fixed_runs + p.fixed_run_verification_runs) + ")"});
  // docs/standards.md §3.12, §3.16: with the fixed-run method the coast-downs "require" holds while the
  // vehicle settles can only confirm or reject the final setting, never improve it; that setting anticipates
  // the warming only with warm_up.anticipate_drift and at least one verification run (aimed at those runs,
  // not at later held ones).
  if (p.method == SettingMethod::fixed_run && p.warm_up.drift_rule == WarmUp::DriftRule::require &&
      (p.fixed_run_verification_runs == 0 || !p.warm_up.anticipate_drift))
    ps.push_back({Problem::Severity::warning, "warm_up.drift_rule",
                  std::string("is \"require\" with the fixed-run method and ") +
                      (p.fixed_run_verification_runs == 0 ? "method.fixed_run_verification_runs = 0"
                                                          : "warm_up.anticipate_drift = false") +
                      ": the coast-downs held while the vehicle settles can only confirm or reject the final "
                      "setting, never improve it, and that setting anticipates no warming (docs/standards.md "
                      "§3.12, §3.16); a vehicle still warming may end the session rejected. At least one "
                      "verification run with warm_up.anticipate_drift = true reduces that risk, it does not "
                      "remove it"});
  // docs/standards.md §3.19: the next-pass rule predicts with the anticipation's warming curve and acts on
  // the iterative method's passes only; asked for where it cannot act, the profile says so instead of
  // letting the operator believe it is on.
  if (p.warm_up.predict_next_pass &&
      (p.method == SettingMethod::fixed_run || !p.warm_up.anticipate_drift))
    ps.push_back({Problem::Severity::warning, "warm_up.predict_next_pass",
                  std::string("is true, but ") +
                      (p.method == SettingMethod::fixed_run
                           ? "the method is fixed-run, which has no passes in a row to give up"
                           : "warm_up.anticipate_drift is false, so there is no warming forecast to judge the "
                             "next pass by") +
                      ": the rule does nothing with this profile (docs/standards.md §3.19)"});
  return ps;
}

double rotating_mass_kg(double mass_in_running_order_kg, const MassRule& rule) {
  return rule.rotating_fraction * (mass_in_running_order_kg + rule.rotating_offset_kg);
}

double dyno_inertia_kg(double test_mass_kg, double rotating_mass_kg, AxleLayout layout,
                       const MassRule& rule) {
  return layout == AxleLayout::two_axle ? test_mass_kg
                                        : test_mass_kg + rule.single_axle_inertia_share * rotating_mass_kg;
}

}  // namespace loadtrim::core
