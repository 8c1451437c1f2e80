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

// What the method says after a coast-down.
struct Decision {
  enum class Kind { run_again, accepted, rejected };
  Kind kind = Kind::run_again;
  RoadLoad next_set;   // the setting for the next coast-down (run_again), or the final one (accepted)
  std::string reason;  // one line for the log
};
const char* to_string(Decision::Kind k);

// The method as a small state machine fed one coast-down at a time. The caller counts coast-downs against
// the profile's limit; the method only decides from the standard's rules.
class SettingMethodState {
 public:
  SettingMethodState(const Profile& profile, const RoadLoad& target);
  Decision on_coastdown(const RoadLoad& set, const RoadLoad& simulated, bool within_tolerance);
  int consecutive_passes() const { return passes_; }
  // A discarded run, a stop or a re-warm breaks "consecutive" (GTR 15 §8.1.3.4.2, docs/standards.md §3.1):
  // the passes so far no longer count. Returns how many were dropped.
  int reset_passes() { return std::exchange(passes_, 0); }
  int runs() const { return runs_; }
  // Fixed-run: true once the final setting has been computed and the runs are verification runs.
  bool verifying() const { return verifying_; }

 private:
  const Profile& profile_;
  RoadLoad target_;
  int runs_ = 0;
  int passes_ = 0;
  bool verifying_ = false;
  std::vector<RunCoefficients> fixed_runs_;
};

}  // namespace loadtrim::core
