#include "core/setting.hpp"

#include <algorithm>
#include <cmath>

#include "core/problem.hpp"

namespace loadtrim::core {

ToleranceCheck check_tolerance(const RoadLoad& target, const RoadLoad& simulated,
                               std::span<const double> speeds_kmh, double tolerance_n,
                               const DecisionRule& rule, const std::function<double(double)>& u_n) {
  ToleranceCheck out;
  out.rule = rule;
  out.pass = !speeds_kmh.empty();
  for (double v : speeds_kmh) {
    SpeedDeviation d;
    d.speed_kmh = v;
    d.target_n = target.force_n(v);
    d.measured_n = simulated.force_n(v);
    d.deviation_n = d.measured_n - d.target_n;
    d.u_n = u_n ? u_n(v) : 0.0;
    d.limit_n =
        rule.kind == DecisionRule::Kind::guard_band ? tolerance_n - rule.coverage_k * d.u_n : tolerance_n;
    // Written so that a NaN deviation or uncertainty fails.
    d.pass = std::abs(d.deviation_n) <= d.limit_n;
    out.pass = out.pass && d.pass;
    out.worst_abs_deviation_n = std::max(out.worst_abs_deviation_n, std::abs(d.deviation_n));
    out.rows.push_back(d);
  }
  return out;
}

RoadLoad adjusted_setting(const RoadLoad& target, const RoadLoad& set, const RoadLoad& simulated) {
  return set + target - simulated;
}

RoadLoad standard_initial_setting(const RoadLoad& target, AxleLayout layout, const InitialSettingRule& rule) {
  const double k0 = layout == AxleLayout::two_axle ? rule.f0_factor_two_axle : rule.f0_factor_single_axle;
  return {k0 * target.f0_n, rule.f1_factor * target.f1_n_per_kmh, rule.f2_factor * target.f2_n_per_kmh2};
}

RoadLoad fixed_run_final_setting(const RoadLoad& target, std::span<const RunCoefficients> runs) {
  RoadLoad loss_sum;
  for (const auto& r : runs) loss_sum = loss_sum + (r.simulated - r.set);
  return target - loss_sum.scaled(1.0 / static_cast<double>(runs.size()));
}

Anticipation anticipate_warming(const RoadLoad& loss, const WarmingOutlook& outlook, double from_s,
                                double to_s) {
  Anticipation a;
  a.from_s = from_s;
  a.to_s = to_s;
  a.epoch_s = outlook.epoch_s;
  a.loss = loss;
  a.curve = outlook.curve;
  // The coast-downs aimed at: the next, and with a cycle the ones after it; the change is their mean.
  const int aimed =
      outlook.cycle_s > 0.0 && std::isfinite(outlook.cycle_s) ? std::clamp(outlook.aimed, 1, 10) : 1;
  a.aimed = aimed;
  a.to_last_s = to_s + (aimed - 1) * outlook.cycle_s;
  std::optional<double> change = outlook.change_n ? std::optional<double>(0.0) : std::nullopt;
  for (int k = 0; k < aimed && change; ++k) {
    const std::optional<double> c = outlook.change_n(from_s, to_s + k * outlook.cycle_s);
    change = c ? std::optional<double>(*change + *c / aimed) : std::nullopt;
  }
  if (!change || !std::isfinite(*change)) {
    a.why = "no warming anticipated: the warm-up's trend does not predict it";
    return a;
  }
  const double at_warm = loss.force_n(outlook.speed_kmh);
  if (!(at_warm >= kMinLossForShareN)) {
    a.why = "no warming anticipated: the loss on the dyno at " + num(outlook.speed_kmh) + " km/h is below " +
            num(kMinLossForShareN) + " N";
    return a;
  }
  for (double v : outlook.speeds_kmh) {
    const double l = loss.force_n(v);
    if (!(l >= kMinLossForShareN) || !(l <= kMaxLossSpread * at_warm)) {
      a.why = "no warming anticipated: the loss on the dyno is " + num(l, 1) + " N at " + num(v) +
              " km/h, outside " + num(kMinLossForShareN) + " N to " + num(kMaxLossSpread) + " times its " +
              num(at_warm, 1) + " N at " + num(outlook.speed_kmh) + " km/h";
      return a;
    }
  }
  const double ratio = *change / at_warm;
  if (!(std::abs(ratio) <= kMaxAnticipatedShare)) {
    a.why = "no warming anticipated: the trend predicts a change of " + num(ratio * 100.0, 1) +
            " % of the loss, beyond " + num(kMaxAnticipatedShare * 100.0) + " %";
    return a;
  }
  a.used = true;
  a.change_n = *change;
  a.ratio = ratio;
  a.why = "anticipates a loss change of " + num(*change, 1) + " N at " + num(outlook.speed_kmh) +
          " km/h by " +
          (aimed == 1 ? std::string("the next coast-down")
                      : "the next " + std::to_string(aimed) + " coast-downs (their mean)") +
          " (" + num(ratio * 100.0, 1) + " % of the loss)";
  return a;
}

NextPassOutlook next_pass_outlook(const ToleranceCheck& now, const RoadLoad& target, const RoadLoad& set,
                                  const RoadLoad& basis, const WarmingOutlook& outlook, double risk) {
  NextPassOutlook o;
  o.risk = risk;
  WarmingOutlook next = outlook;
  next.aimed = 1;  // the next coast-down alone
  const RoadLoad loss = basis - set;
  const Anticipation a = anticipate_warming(loss, next, outlook.now_s, outlook.next_s);
  o.warming = a;
  if (!a.used) {
    o.why = "the next coast-down not predicted (" + a.why + ")";
    return o;
  }
  double pass_all = 1.0;
  std::size_t worst = 0;  // the row most likely to fail
  for (const auto& row : now.rows) {
    NextPassRow r;
    r.speed_kmh = row.speed_kmh;
    r.deviation_n = basis.force_n(row.speed_kmh) - target.force_n(row.speed_kmh);
    r.change_n = a.ratio * loss.force_n(row.speed_kmh);
    r.predicted_n = r.deviation_n + r.change_n;
    r.u_n = row.u_n;
    r.limit_n = row.limit_n;
    if (!std::isfinite(r.predicted_n) || !std::isfinite(r.limit_n) || !std::isfinite(r.u_n) || r.u_n < 0.0) {
      o.why = "the next coast-down not predicted (a value at " + num(r.speed_kmh) + " km/h is not finite)";
      o.rows.clear();
      return o;
    }
    // The normal tails beyond ±limit (u = 0: the prediction itself decides).
    if (r.u_n > 0.0) {
      const double s = r.u_n * std::sqrt(2.0);
      r.fail_probability =
          0.5 * std::erfc((r.limit_n - r.predicted_n) / s) + 0.5 * std::erfc((r.limit_n + r.predicted_n) / s);
    } else {
      r.fail_probability = std::abs(r.predicted_n) > r.limit_n ? 1.0 : 0.0;
    }
    r.fail_probability = std::clamp(r.fail_probability, 0.0, 1.0);
    pass_all *= 1.0 - r.fail_probability;
    if (o.rows.empty() || r.fail_probability > o.rows[worst].fail_probability) worst = o.rows.size();
    o.rows.push_back(r);
  }
  o.predicted = true;
  o.fail_probability = 1.0 - pass_all;
  o.likely_to_fail = o.fail_probability > risk;
  const std::string p = num(o.fail_probability * 100.0, 0) + " %";
  o.why =
      "the next coast-down predicted to fail with probability " + p +
      (o.rows.empty() ? std::string()
                      : " (most likely at " + num(o.rows[worst].speed_kmh) +
                            " km/h: " + num(o.rows[worst].predicted_n, 1) + " N against ±" +
                            num(o.rows[worst].limit_n, 1) + " N, u " + num(o.rows[worst].u_n, 1) + " N)") +
      ", warming " + num(a.change_n, 1) + " N at " + num(outlook.speed_kmh) + " km/h; " +
      (o.likely_to_fail ? "above" : "not above") + " the profile's " + num(risk * 100.0, 0) + " %";
  return o;
}

void judge_adjusted(NextPassOutlook& o, const ToleranceCheck& now, const RoadLoad& target,
                    const RoadLoad& set, const RoadLoad& basis, const RoadLoad& adjusted,
                    const WarmingOutlook& outlook) {
  if (!o.predicted) return;
  // The adjusted setting as this coast-down would have read it: the same loss on top of it.
  const NextPassOutlook a =
      next_pass_outlook(now, target, adjusted, adjusted + (basis - set), outlook, o.risk);
  if (!a.predicted) return;
  o.adjusted_fail_probability = a.fail_probability;
  o.adjusting_helps = a.fail_probability < o.fail_probability;
}

FullyWarmOutlook fully_warm_outlook(const ToleranceCheck& now, const RoadLoad& target, const RoadLoad& loss,
                                    const WarmUpCurve& curve, double t_s, double warm_up_speed_kmh) {
  FullyWarmOutlook o;
  o.speed_kmh = warm_up_speed_kmh;
  if (!curve.ok) {
    o.why = "not predicted: the warm-up's curve is not fitted (" + curve.why + ")";
    return o;
  }
  if (curve.tau_at_bound) {
    o.why = "not predicted: the warm-up's curve does not resolve its time constant";
    return o;
  }
  if (!(curve.rms_residual_n <= kMaxCurveRmsForOutlookN)) {
    o.why = "not predicted: the warm-up's curve misses its windows by " + num(curve.rms_residual_n, 1) +
            " N rms, above " + num(kMaxCurveRmsForOutlookN) + " N";
    return o;
  }
  const std::optional<double> change =
      std::isfinite(curve.tau_s) && std::isfinite(t_s) && t_s >= 0.0
          ? predicted_change_n(curve, t_s, t_s + kFullyWarmTaus * curve.tau_s)
          : std::nullopt;
  if (!change || !std::isfinite(*change) || !(warm_up_speed_kmh > 0.0) || now.rows.empty()) {
    o.why = "not predicted: the warm-up's curve does not predict the change still to come";
    return o;
  }
  const double vw2 = warm_up_speed_kmh * warm_up_speed_kmh;
  bool aimable = true;
  for (const auto& d : now.rows) {
    const double r2 = d.speed_kmh * d.speed_kmh / vw2;
    FullyWarmRow row;
    row.speed_kmh = d.speed_kmh;
    row.deviation_n = d.deviation_n;
    row.limit_n = d.limit_n;
    const double a = d.deviation_n + *change * std::min(1.0, r2),
                 b = d.deviation_n + *change * std::max(1.0, r2);
    row.low_n = std::min(a, b);
    row.high_n = std::max(a, b);
    if (!std::isfinite(row.low_n) || !std::isfinite(row.high_n)) {
      o.rows.clear();
      o.within = true;
      o.why = "not predicted: a deviation is not finite";
      return o;
    }
    // Written so that a NaN limit fails.
    row.within = std::abs(row.low_n) <= d.limit_n && std::abs(row.high_n) <= d.limit_n;
    aimable = aimable && std::abs(*change) * 0.5 * (1.0 + r2) <= d.limit_n;
    o.within = o.within && row.within;
    o.rows.push_back(row);
  }
  o.predicted = true;
  o.change_n = *change;
  o.from_s = t_s;
  const FullyWarmRow* worst = &o.rows.front();
  for (const auto& r : o.rows)
    if (std::max(std::abs(r.low_n), std::abs(r.high_n)) >
        std::max(std::abs(worst->low_n), std::abs(worst->high_n)))
      worst = &r;
  const std::string bounds = num(worst->low_n, 1) + " to " + num(worst->high_n, 1) + " N at " +
                             num(worst->speed_kmh) + " km/h (change still to come " + num(*change, 1) +
                             " N at " + num(warm_up_speed_kmh) + " km/h)";
  if (o.within) {
    o.why = "within tolerance once fully warm: at worst " + bounds;
    return o;
  }
  o.why = "predicted outside tolerance once fully warm: " + bounds;
  const RoadLoad middle{0.5 * *change, 0.0, 0.5 * *change / vw2};
  const RoadLoad warm = target - (loss + middle);
  if (!aimable) {
    o.not_aimable_why =
        "the vehicle is still too far from warm to aim a setting at (it would miss the next coast-down by "
        "more "
        "than the limit)";
  } else if (!std::isfinite(warm.f0_n) || !std::isfinite(warm.f1_n_per_kmh) ||
             !std::isfinite(warm.f2_n_per_kmh2)) {
    o.not_aimable_why = "the setting for the warm vehicle is not finite";
  } else {
    o.aimable = true;
    o.warm_setting = warm;
  }
  return o;
}

const char* to_string(Decision::Kind k) {
  switch (k) {
    case Decision::Kind::run_again:
      return "run-again";
    case Decision::Kind::accepted:
      return "accepted";
    case Decision::Kind::rejected:
      return "rejected";
  }
  return "unknown";
}

int coastdowns_aimed_at(const WarmUp& warm_up, int passes) {
  return warm_up.anticipate_for == WarmUp::AnticipateFor::passes ? std::max(1, passes) : 1;
}

namespace {
// The outlook aimed at the coast-downs a setting must pass (coastdowns_aimed_at).
WarmingOutlook aimed(const WarmingOutlook& outlook, const WarmUp& warm_up, int passes) {
  WarmingOutlook o = outlook;
  o.aimed = coastdowns_aimed_at(warm_up, passes);
  return o;
}
}  // namespace

SettingMethodState::SettingMethodState(const Profile& profile, const RoadLoad& target)
    : profile_(profile), target_(target) {}

Decision SettingMethodState::adjusted(const RoadLoad& set, const RoadLoad& simulated,
                                      const WarmingOutlook* outlook) const {
  Decision d;
  d.next_set = adjusted_setting(target_, set, simulated);
  d.reason = "adjusted A*d = Ad + At − As (B, C likewise)";
  if (outlook) {
    const RoadLoad loss = simulated - set;
    d.anticipation = anticipate_warming(loss, aimed(*outlook, profile_.warm_up, profile_.consecutive_passes),
                                        outlook->now_s, outlook->next_s);
    if (d.anticipation.used) d.next_set = target_ - loss.scaled(1.0 + d.anticipation.ratio);
    d.reason += "; " + d.anticipation.why;
  }
  return d;
}

Decision SettingMethodState::on_coastdown(const RoadLoad& set, const RoadLoad& simulated,
                                          bool within_tolerance, const WarmingOutlook* outlook) {
  ++runs_;
  Decision d;
  if (profile_.method == SettingMethod::iterative || verifying_) {
    const int required = verifying_ ? profile_.fixed_run_verification_runs : profile_.consecutive_passes;
    if (within_tolerance) {
      // A held fixed-run setting (no verification runs asked: required 0) has no passes to count.
      if (required > 0) ++passes_;
      if (passes_ >= required) {
        d.kind = Decision::Kind::accepted;
        d.next_set = set;
        d.reason = verifying_ && required == 0
                       ? "the accepted fixed-run setting within tolerance on a coast-down held while the "
                         "vehicle settles"
                       : std::to_string(passes_) + (verifying_ ? " verification" : " consecutive") +
                             " coast-down(s) within tolerance";
      } else {
        d.next_set = set;
        d.reason = "within tolerance (" + std::to_string(passes_) + " of " + std::to_string(required) +
                   "), same setting again";
      }
      return d;
    }
    passes_ = 0;
    if (verifying_) {
      d.kind = Decision::Kind::rejected;
      d.next_set = set;
      d.reason = required == 0 ? "the accepted fixed-run setting outside tolerance on a held verification "
                                 "coast-down (the drift rule's, while the vehicle settles)"
                               : "fixed-run final setting outside tolerance on its verification coast-down";
      return d;
    }
    d = adjusted(set, simulated, outlook);
    d.reason = "outside tolerance: " + d.reason;
    return d;
  }
  // Fixed-run method: run 1 stabilises and sets run 2; runs 2..n at that setting; final from their mean.
  if (runs_ == 1) {
    d.next_set = adjusted_setting(target_, set, simulated);
    d.reason = "fixed-run: stabilisation run, its result sets run 2";
    return d;
  }
  fixed_runs_.push_back({set, simulated});
  if (outlook) {
    fixed_run_times_s_.push_back(outlook->now_s);
    fixed_run_epochs_s_.push_back(outlook->epoch_s);
  }
  if (runs_ < profile_.fixed_runs) {
    d.next_set = set;
    d.reason = "fixed-run: run " + std::to_string(runs_) + " of " + std::to_string(profile_.fixed_runs);
    return d;
  }
  d.next_set = fixed_run_final_setting(target_, fixed_runs_);
  if (profile_.fixed_run_verification_runs == 0) {
    d.kind = Decision::Kind::accepted;
    d.reason =
        "fixed-run: final setting A = At − mean(As − Ad) over runs 2.." + std::to_string(profile_.fixed_runs);
    // A coast-down after this one (a drift rule that keeps coasting at the accepted setting until the vehicle
    // has settled, docs/standards.md §3.12) checks this setting as a verification run does: within tolerance
    // it stays accepted, outside it is rejected. It never joins the average (§3.2: runs 2..fixed_runs only).
    verifying_ = true;
    return d;
  }
  verifying_ = true;
  d.reason = "fixed-run: final setting computed, verifying it";
  // Every averaged run timed by an outlook of the same warm-up (a resumed session replays its runs without
  // one; a pause re-warms and restarts the curve's clock): the loss they averaged is of their mean time; the
  // verification run meets the vehicle one coast-down after this one.
  if (!outlook) return d;
  const bool timed = fixed_run_times_s_.size() == fixed_runs_.size();
  const bool one_warm_up = std::all_of(fixed_run_epochs_s_.begin(), fixed_run_epochs_s_.end(),
                                       [&](double e) { return e == outlook->epoch_s; });
  if (!timed || !one_warm_up) {
    d.anticipation.why = timed
                             ? "no warming anticipated: the averaged runs span a re-warm (their times are of "
                               "two warm-ups)"
                             : "no warming anticipated: not every averaged run was timed (a resumed session)";
  } else {
    double mean_t = 0.0;
    RoadLoad loss;
    for (std::size_t i = 0; i < fixed_runs_.size(); ++i) {
      mean_t += fixed_run_times_s_[i];
      loss = loss + (fixed_runs_[i].simulated - fixed_runs_[i].set);
    }
    mean_t /= static_cast<double>(fixed_runs_.size());
    loss = loss.scaled(1.0 / static_cast<double>(fixed_runs_.size()));
    d.anticipation =
        anticipate_warming(loss, aimed(*outlook, profile_.warm_up, profile_.fixed_run_verification_runs),
                           mean_t, outlook->next_s);
    if (d.anticipation.used) d.next_set = target_ - loss.scaled(1.0 + d.anticipation.ratio);
  }
  d.reason += "; " + d.anticipation.why;
  return d;
}

}  // namespace loadtrim::core
