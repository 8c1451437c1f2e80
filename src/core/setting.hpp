// Tolerance check, adjustment, initial setting and the two setting methods of UN GTR 15 Annex 4 §8.1.3–8.1.4
// (EU 2017/1151 Sub-Annex 4 §8.1.3–8.1.4). Symbols: target At, Bt, Ct; simulated (measured on the dyno)
// As, Bs, Cs; set (what the dyno is told) Ad, Bd, Cd. Pure: no I/O.
#pragma once

#include <functional>
#include <optional>
#include <span>
#include <string>
#include <utility>
#include <vector>

#include "core/profile.hpp"
#include "core/road_load.hpp"
#include "core/warm_up_drift.hpp"

namespace loadtrim::core {

struct SpeedDeviation {
  double speed_kmh = 0.0;
  double target_n = 0.0;
  double measured_n = 0.0;
  double deviation_n = 0.0;  // measured − target
  double u_n = 0.0;          // standard uncertainty of measured_n (0 when not known)
  double limit_n = 0.0;      // the acceptance limit on |deviation_n| the decision rule applied
  bool pass = false;
};

struct ToleranceCheck {
  std::vector<SpeedDeviation> rows;
  bool pass = false;
  double worst_abs_deviation_n = 0.0;
  DecisionRule rule;
};

// Every reference speed within ±tolerance of the target (§8.1.3.4.2), on the regressed (simulated) curve,
// judged by `rule`; `u_n(v)` gives the standard uncertainty of the measured force at v (none: 0). A guard
// band wider than the tolerance leaves no acceptance zone: the speed fails.
ToleranceCheck check_tolerance(const RoadLoad& target, const RoadLoad& simulated,
                               std::span<const double> speeds_kmh, double tolerance_n,
                               const DecisionRule& rule = {}, const std::function<double(double)>& u_n = {});

// §8.1.4: F*_dj = F_dj − (F_sj − F_tj), i.e. A*d = Ad + At − As, B*d = Bd + Bt − Bs, C*d = Cd + Ct − Cs.
RoadLoad adjusted_setting(const RoadLoad& target, const RoadLoad& set, const RoadLoad& simulated);

// The standard's default initial setting (docs/standards.md §3, from memory): Ad = k0·At, Bd = k1·Bt, Cd =
// k2·Ct.
RoadLoad standard_initial_setting(const RoadLoad& target, AxleLayout layout, const InitialSettingRule& rule);

// Fixed-run final setting (docs/standards.md §3, form from memory): A = At − (1/n)·Σ(A_sn − A_dn) over the
// runs after the stabilisation run; B and C likewise.
struct RunCoefficients {
  RoadLoad set;
  RoadLoad simulated;
};
RoadLoad fixed_run_final_setting(const RoadLoad& target,
                                 std::span<const RunCoefficients> runs_after_stabilisation);

// Warming anticipated in the next setting (warm_up.anticipate_drift, docs/standards.md §3.16, lab policy).
// The loss the vehicle shows on the dyno, loss = simulated − set (the coefficients As − Ad, Bs − Bd, Cs −
// Cd), is what the standard's adjustment takes off the target (A*d = At − (As − Ad)). A vehicle still warming
// will show less of it at the next coast-down: by change_n at the warm-up speed, as the warming curve of the
// warm-up's hold windows predicts (warm_up_drift.hpp predicted_change_n). The whole loss curve is scaled by
// the same share, ratio = change_n / loss(v_warm), so the setting becomes At − (As − Ad)·(1 + ratio). The
// share is a model (the whole loss drifting in proportion, lab policy, no source): the drivetrain's spin
// loss, the part that warms, grows faster with speed than the tyres' loss, so at the top speeds it
// under-predicts and at the lowest it over-predicts.
struct WarmingOutlook {
  // The loss change at speed_kmh from from_s to to_s (s since the warm-up hold began); nullopt: not
  // predicted.
  std::function<std::optional<double>(double from_s, double to_s)> change_n;
  WarmUpCurve curve;     // the curve change_n comes from (recorded with the anticipation)
  double epoch_s = 0.0;  // when the warm-up hold began, on the controller's clock: the times' origin
  double speed_kmh = 80.0;
  std::vector<double> speeds_kmh;  // the reference speeds: the loss is checked at each (below)
  double now_s = 0.0;              // this coast-down's time (the middle of its coast)
  double next_s = 0.0;             // the next coast-down's expected time (its middle)
  // The coast-downs the setting aims at (warm_up.anticipate_for): `aimed` of them, the next and each
  // following one cycle_s later; the change anticipated is the mean of the changes predicted to each. 1 (or
  // no cycle): the next coast-down only.
  int aimed = 1;
  double cycle_s = 0.0;
};

struct Anticipation {
  bool used = false;
  double change_n = 0.0;            // predicted at the warm-up speed (0 when not predicted)
  double ratio = 0.0;               // change_n / loss(v_warm), the share the whole loss curve is scaled by
  double from_s = 0.0, to_s = 0.0;  // the span predicted over, s since the warm-up hold began
  int aimed = 1;                    // coast-downs aimed at: the change is the mean of those to to_s, to_s +
  double to_last_s = 0.0;           // cycle, ..., to_last_s (to_last_s = to_s for one)
  double epoch_s = 0.0;             // when the warm-up hold began, on the controller's clock
  RoadLoad loss;      // the loss before it was scaled (the setting is target − loss·(1 + ratio))
  WarmUpCurve curve;  // the warm-up curve the change is from
  std::string why;    // one line for the log: what was anticipated, or why nothing was
};

// Bounds on the anticipation (lab policy, no source): the loss at least kMinLossForShareN at the warm-up
// speed and at every reference speed (a share of a near-zero loss is no prediction), and at no reference
// speed more than kMaxLossSpread times the loss at the warm-up speed (one share scales the whole curve: a
// curve that wild is a fit gone wrong, and the share would move the setting there by far more than the change
// predicted); the share at most kMaxAnticipatedShare in size (a quarter of the loss between two coast-downs
// is far beyond any warming the tool has seen; a curve that says so is not believed).
inline constexpr double kMinLossForShareN = 20.0;
inline constexpr double kMaxLossSpread = 3.0;
inline constexpr double kMaxAnticipatedShare = 0.25;

// How many coast-downs a setting that must pass `passes` in a row at one setting aims at: all of them with
// warm_up.anticipate_for = "passes", else the next one only.
int coastdowns_aimed_at(const WarmUp& warm_up, int passes);

// The share for `loss` from from_s to the coast-downs aimed at (to_s and, with outlook.aimed > 1 and a
// cycle, those following it); not used (and why) outside the bounds.
Anticipation anticipate_warming(const RoadLoad& loss, const WarmingOutlook& outlook, double from_s,
                                double to_s);

// The setting once the vehicle is fully warm (warm_up.check_fully_warm with the drift rule "require",
// docs/standards.md §3.18, lab policy, no source). The warm-up's curve gives the change of the warm-up-speed
// force still to come, c = F(∞) − F(t) (negative while the loss falls). How that change spreads over the
// speeds is not known, but when the part of the loss that warms is a polynomial in v with terms up to v² that
// all change with the same sign, the change at v is c·k with k between min(1, r²) and max(1, r²),
// r = v / v_warm-up (algebra: each term's ratio (v / v_warm-up)^j, j = 0, 1, 2, lies between them). Each
// reference speed's deviation once fully warm is then between the deviation now plus c·min and plus c·max;
// the setting is kept only when both bounds are within the acceptance's limit (±tolerance, or the guard
// band's narrower limit) everywhere. Otherwise the setting for the warm vehicle is aimed at the middle of the
// bounds, c·(1 + r²)/2: set = target − (loss + c·(1 + r²)/2), loss = measured − set (as 3.4 and 3.17); at the
// next coast-down it reads about −c·(1 + r²)/2 (less the warming in between, which brings it nearer zero), so
// it is aimable only when that is within the limit at every speed.
struct FullyWarmRow {
  double speed_kmh = 0.0;
  double deviation_n = 0.0;          // measured − target now (the acceptance's check)
  double limit_n = 0.0;              // the acceptance's limit at this speed (the check's)
  double low_n = 0.0, high_n = 0.0;  // the bounds on the deviation once fully warm
  bool within = false;               // both bounds within limit_n
};
struct FullyWarmOutlook {
  bool predicted = false;  // false: the curve does not predict the change (why says so); nothing is decided
  std::string why;         // one line for the log
  double change_n = 0.0;   // c: the warm-up-speed force's change still to come (negative: still falling)
  double from_s = 0.0;     // the time c is taken from, s since the warm-up hold began (the curve's clock)
  double speed_kmh = 0.0;  // the warm-up speed
  std::vector<FullyWarmRow> rows;
  bool within = true;  // every row within (true when not predicted)
  // Predicted and not within: whether the setting for the warm vehicle can pass the next coast-down (above),
  // and that setting (finite; set only when aimable).
  bool aimable = false;
  std::string not_aimable_why;  // predicted, not within and not aimable: why
  RoadLoad warm_setting;
  // Set by the session when the setting is not adjusted for the warm vehicle although not within: why (not
  // aimable, too few coast-downs left, the safe envelope); empty otherwise.
  std::string not_adjusted_why;
};
// How far ahead "fully warm" is taken, in time constants of the curve (e^−50: nothing left to come).
inline constexpr double kFullyWarmTaus = 50.0;
// `now` is the acceptance's check of the setting (its rows carry each speed's limit); `loss` the loss the
// adjustment takes (measured − set); `t_s` the coast-down's middle, s since the warm-up hold began.
FullyWarmOutlook fully_warm_outlook(const ToleranceCheck& now, const RoadLoad& target, const RoadLoad& loss,
                                    const WarmUpCurve& curve, double t_s, double warm_up_speed_kmh);

// A pass the warming is predicted to take outside the limit at the next coast-down
// (warm_up.predict_next_pass, docs/standards.md §3.19, lab policy, no source). The iterative method needs its
// passes in a row at one setting; a vehicle still warming reads less loss at each coast-down, so a pass near
// the limit can be followed by a failure, and the passes start again two coast-downs later. The next
// coast-down's deviation at each reference speed is predicted as the deviation now, by the curve the
// adjustment takes (3.17), plus the warming to it by the anticipation's model (3.16: the loss scaled by the
// share r = ΔF / L(v_warm-up), ΔF the warm-up curve's change from this coast-down's middle to the next
// one's): predicted = deviation + r·(measured − set). The next coast-down's verdict reads it with its band
// regression's noise, taken as this one's standard error u at that speed (2.6), normally distributed: it
// fails there with probability P = Φ((−limit − predicted) / u) + 1 − Φ((limit − predicted) / u), and fails at
// all with 1 − Π(1 − P) over the speeds (taken as independent: they come from one fit, so this overstates
// the chance somewhat). u is this coast-down's own within-coast error; the error of the deviation now and of
// the warming model are not in it, so P is the model's chance, not a calibrated one: the bench measures what
// a risk does (docs/performance.md). Above `risk`, and only when the adjusted setting is predicted likelier
// to pass (judge_adjusted: noise alone, which an adjustment cannot help, never moves the setting), the
// session adjusts the setting now.
struct NextPassRow {
  double speed_kmh = 0.0;
  double deviation_n = 0.0;  // now: the adjustment's curve − target
  double change_n = 0.0;     // the warming predicted to the next coast-down: r·loss(v)
  double predicted_n = 0.0;  // deviation_n + change_n
  double u_n = 0.0;          // the band regression's standard error at this speed (0: the prediction decides)
  double limit_n = 0.0;      // the acceptance's limit at this speed (the check's)
  double fail_probability = 0.0;
};
struct NextPassOutlook {
  bool predicted = false;  // false: the warming to the next coast-down is not predicted (why says so)
  std::string why;         // one line for the log
  // The warming to the next coast-down alone, as anticipate_warming gives it: its change_n at the warm-up
  // speed, ratio (the share of the loss), from_s and to_s (this coast-down's middle and the next one's).
  Anticipation warming;
  std::vector<NextPassRow> rows;
  double fail_probability = 0.0;  // that the next coast-down fails at any speed
  double risk = 0.5;              // the profile's threshold
  bool likely_to_fail = false;    // predicted and fail_probability > risk
  // judge_adjusted: the same chance for the adjusted setting at the next coast-down, and whether it is lower.
  std::optional<double> adjusted_fail_probability;
  bool adjusting_helps = false;
  bool adjusted = false;         // set by the session: the setting was adjusted now
  std::string not_adjusted_why;  // set by the session: likely to fail, yet coasted on (why)
};
// `now` is the acceptance's check of this coast-down (its rows carry each speed's limit and u), `basis` the
// curve the adjustment takes the loss from, `outlook` this coast-down's warming outlook (its next_s the next
// coast-down's middle), `risk` the probability of a failure above which the setting is to be adjusted now.
NextPassOutlook next_pass_outlook(const ToleranceCheck& now, const RoadLoad& target, const RoadLoad& set,
                                  const RoadLoad& basis, const WarmingOutlook& outlook, double risk);
// The adjusted setting `adjusted` judged by the same model: at the next coast-down it would read
// adjusted + loss·(1 + r) (the loss basis − set of this coast-down); its chance to fail there is compared
// with the setting's own (o.fail_probability). Sets o.adjusted_fail_probability and o.adjusting_helps
// (strictly lower); nothing when o was not predicted.
void judge_adjusted(NextPassOutlook& o, const ToleranceCheck& now, const RoadLoad& target,
                    const RoadLoad& set, const RoadLoad& basis, const RoadLoad& adjusted,
                    const WarmingOutlook& outlook);

// What the method says after a coast-down.
struct Decision {
  enum class Kind { run_again, accepted, rejected };
  Kind kind = Kind::run_again;
  RoadLoad next_set;          // the setting for the next coast-down (run_again), or the final one (accepted)
  std::string reason;         // one line for the log
  Anticipation anticipation;  // the warming the next setting anticipates (used only with an outlook)
  std::optional<NextPassOutlook> next_pass;  // a pass's prediction of the next coast-down (when made)
};
const char* to_string(Decision::Kind k);

// The method as a small state machine fed one coast-down at a time. The caller counts coast-downs against
// the profile's limit; the method only decides from the standard's rules.
class SettingMethodState {
 public:
  SettingMethodState(const Profile& profile, const RoadLoad& target);
  // `outlook` (optional): anticipate the warming in an adjusted setting (iterative) and in the fixed-run
  // final setting (from the mean time of the runs it averages to the verification run's).
  Decision on_coastdown(const RoadLoad& set, const RoadLoad& simulated, bool within_tolerance,
                        const WarmingOutlook* outlook = nullptr);
  // The iterative method's adjustment of `set` from the measured `simulated` (§8.1.4), anticipating the
  // warming to the coast-downs it aims at when `outlook` is given: what a failed coast-down gets, and what a
  // pass predicted to fail next gets (next_pass_outlook) when the session adjusts it.
  Decision adjusted(const RoadLoad& set, const RoadLoad& simulated, const WarmingOutlook* outlook) const;
  int consecutive_passes() const { return passes_; }
  // A discarded run, a stop or a re-warm breaks "consecutive" (GTR 15 §8.1.3.4.2, docs/standards.md §3.1):
  // the passes so far no longer count. Returns how many were dropped.
  int reset_passes() { return std::exchange(passes_, 0); }
  int runs() const { return runs_; }
  // Fixed-run: true once the final setting has been computed: later runs check it (verification runs, or,
  // with none asked, coast-downs the drift rule holds at the accepted setting while the vehicle settles).
  bool verifying() const { return verifying_; }

 private:
  const Profile& profile_;
  RoadLoad target_;
  int runs_ = 0;
  int passes_ = 0;
  bool verifying_ = false;
  std::vector<RunCoefficients> fixed_runs_;
  std::vector<double> fixed_run_times_s_;   // the outlook's now_s of each averaged run (when given)
  std::vector<double> fixed_run_epochs_s_;  // and its epoch_s: runs of an earlier warm-up are not comparable
};

}  // namespace loadtrim::core
