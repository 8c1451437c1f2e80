// Tolerance, adjustment and the setting methods against the standard's rules (UN GTR 15 Annex 4
// §8.1.3–8.1.4).
#include "core/setting.hpp"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <optional>
#include <random>
#include <utility>
#include <vector>

#include "core/profile.hpp"

using namespace loadtrim::core;

namespace {
Profile wltp(SettingMethod m) {
  Profile p;
  p.name = "test";
  p.reference_speeds_kmh = {20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130};
  p.method = m;
  return p;
}
void expect_eq(const RoadLoad& a, const RoadLoad& b, double tol = 1e-12) {
  EXPECT_NEAR(a.f0_n, b.f0_n, tol);
  EXPECT_NEAR(a.f1_n_per_kmh, b.f1_n_per_kmh, tol);
  EXPECT_NEAR(a.f2_n_per_kmh2, b.f2_n_per_kmh2, tol);
}
}  // namespace

TEST(Setting, AdjustmentExample) {
  // docs/standards.md §6.3 [computed from GTR 15 §8.1.4]: target (100, 0.5, 0.03), set (50, 0.2, 0.028),
  // simulated (110, 0.6, 0.029) → new set (40, 0.1, 0.029).
  expect_eq(adjusted_setting({100, 0.5, 0.03}, {50, 0.2, 0.028}, {110, 0.6, 0.029}), {40, 0.1, 0.029});
}

TEST(Setting, ToleranceAtTheBoundary) {
  // GTR 15 §8.1.3.4.2: within ±10 N at every reference speed. A constant offset of exactly 10 N passes,
  // 10.001 N fails; the worst row is reported.
  const std::vector<double> v = {20, 60, 130};
  EXPECT_TRUE(check_tolerance({100, 0.5, 0.03}, {110, 0.5, 0.03}, v, 10.0).pass);
  EXPECT_TRUE(check_tolerance({100, 0.5, 0.03}, {90, 0.5, 0.03}, v, 10.0).pass);
  const auto c = check_tolerance({100, 0.5, 0.03}, {110.001, 0.5, 0.03}, v, 10.0);
  EXPECT_FALSE(c.pass);
  EXPECT_NEAR(c.worst_abs_deviation_n, 10.001, 1e-9);
  // Only the top speed out: f2 off by 0.001 gives 16.9 N at 130 km/h, 0.4 N at 20 km/h.
  const auto d = check_tolerance({100, 0.5, 0.03}, {100, 0.5, 0.031}, v, 10.0);
  EXPECT_TRUE(d.rows[0].pass);
  EXPECT_FALSE(d.rows[2].pass);
  EXPECT_NEAR(d.rows[2].deviation_n, 16.9, 1e-9);
}

TEST(Setting, GuardBandRefusesWhatSimpleAcceptanceAccepts) {
  // docs/standards.md §3.11. A deviation of 8 N with a standard uncertainty of 1.5 N: the standard's simple
  // rule accepts (8 ≤ 10, GTR 15 §8.1.3.4.2); a guard band of k·u = 2 × 1.5 = 3 N (ILAC-G8 form, from memory)
  // leaves 10 − 3 = 7 N, and 8 > 7 fails: the uncertainty straddles the limit. With u = 0.9 N the limit is
  // 8.2 N and 8 N passes. Arithmetic by hand.
  const std::vector<double> v = {20, 60, 130};
  const RoadLoad target{100, 0.5, 0.03}, measured{108, 0.5, 0.03};
  const auto u15 = [](double) { return 1.5; };
  const auto simple = check_tolerance(target, measured, v, 10.0, {}, u15);
  EXPECT_TRUE(simple.pass);
  EXPECT_EQ(simple.rule.kind, DecisionRule::Kind::simple);
  EXPECT_DOUBLE_EQ(simple.rows[1].u_n, 1.5);  // recorded under either rule
  EXPECT_DOUBLE_EQ(simple.rows[1].limit_n, 10.0);
  const DecisionRule guard{DecisionRule::Kind::guard_band, 2.0};
  const auto banded = check_tolerance(target, measured, v, 10.0, guard, u15);
  EXPECT_FALSE(banded.pass);
  EXPECT_DOUBLE_EQ(banded.rows[0].limit_n, 7.0);
  EXPECT_FALSE(banded.rows[0].pass);
  EXPECT_TRUE(check_tolerance(target, measured, v, 10.0, guard, [](double) { return 0.9; }).pass);
  // An uncertainty the estimator could not give (NaN) fails the guard band, never passes it.
  EXPECT_FALSE(check_tolerance(target, measured, v, 10.0, guard, [](double) { return std::nan(""); }).pass);
  // A guard band wider than the tolerance leaves no acceptance zone, even for a perfect match.
  EXPECT_FALSE(check_tolerance(target, target, v, 10.0, guard, [](double) { return 6.0; }).pass);
  EXPECT_STREQ(to_string(DecisionRule::Kind::guard_band), "guard-band");
  EXPECT_STREQ(to_string(DecisionRule::Kind::simple), "simple");
}

TEST(Setting, StandardInitialSetting) {
  // docs/standards.md §3 (from memory): Ad = 0.5·At (0.1·At two-axle), Bd = 0.2·Bt, Cd = Ct.
  InitialSettingRule r;
  expect_eq(standard_initial_setting({100, 0.5, 0.03}, AxleLayout::single_axle, r), {50, 0.1, 0.03});
  expect_eq(standard_initial_setting({100, 0.5, 0.03}, AxleLayout::two_axle, r), {10, 0.1, 0.03});
}

TEST(Setting, MassRules) {
  // EU SA4 §2.5.1: m_r = 3 % of (MRO + 25 kg): MRO 1400 kg → 42.75 kg (docs/standards.md §6.2). §2.5.3: dyno
  // inertia TM + 50 % m_r on a single-axle dyno, TM on a two-axle dyno.
  MassRule r;
  EXPECT_NEAR(rotating_mass_kg(1400.0, r), 42.75, 1e-12);
  EXPECT_NEAR(force_mass_kg(1500.0, 42.75), 1542.75, 1e-12);
  EXPECT_NEAR(dyno_inertia_kg(1500.0, 42.75, AxleLayout::single_axle, r), 1521.375, 1e-12);
  EXPECT_NEAR(dyno_inertia_kg(1500.0, 42.75, AxleLayout::two_axle, r), 1500.0, 1e-12);
}

TEST(Setting, IterativeNeedsTwoConsecutivePasses) {
  // GTR 15 §8.1.3.4.2: within tolerance for two consecutive coast-downs; a failure in between restarts the
  // count.
  const Profile p = wltp(SettingMethod::iterative);
  const RoadLoad target{100, 0.5, 0.03}, set{50, 0.2, 0.028};
  SettingMethodState m(p, target);
  auto d = m.on_coastdown(set, {103, 0.5, 0.03}, true);
  EXPECT_EQ(d.kind, Decision::Kind::run_again);
  expect_eq(d.next_set, set);  // a pass keeps the setting
  d = m.on_coastdown(set, {120, 0.5, 0.03}, false);
  EXPECT_EQ(d.kind, Decision::Kind::run_again);
  expect_eq(d.next_set, {30, 0.2, 0.028});  // adjusted: 50 + 100 − 120
  d = m.on_coastdown(d.next_set, {101, 0.5, 0.03}, true);
  EXPECT_EQ(d.kind, Decision::Kind::run_again);
  d = m.on_coastdown(d.next_set, {99, 0.5, 0.03}, true);
  EXPECT_EQ(d.kind, Decision::Kind::accepted);
  expect_eq(d.next_set, {30, 0.2, 0.028});
  EXPECT_EQ(m.runs(), 4);
}

TEST(Setting, FixedRunFinalSetting) {
  // GTR 15 §8.1.3.4.1 (four coast-downs, run 1 stabilises) and the final form A = At − (1/3)·Σ(As − Ad) over
  // runs 2–4 (docs/standards.md §3, from memory). Hand computation: losses (As − Ad) of runs 2..4 are
  // (60, 0.30, 0.0010), (63, 0.33, 0.0012), (57, 0.27, 0.0008) → mean (60, 0.30, 0.0010) →
  // final (100 − 60, 0.5 − 0.30, 0.03 − 0.0010) = (40, 0.2, 0.029).
  Profile p = wltp(SettingMethod::fixed_run);
  p.fixed_run_verification_runs = 0;
  const RoadLoad target{100, 0.5, 0.03};
  SettingMethodState m(p, target);
  auto d = m.on_coastdown({50, 0.1, 0.03}, {112, 0.42, 0.031}, false);
  expect_eq(d.next_set, {38, 0.18, 0.029});  // run 2 set from run 1 by the §8.1.4 adjustment
  const RoadLoad s = d.next_set;
  d = m.on_coastdown(s, s + RoadLoad{60, 0.30, 0.0010}, false);
  EXPECT_EQ(d.kind, Decision::Kind::run_again);
  expect_eq(d.next_set, s);
  d = m.on_coastdown(s, s + RoadLoad{63, 0.33, 0.0012}, true);
  EXPECT_EQ(d.kind, Decision::Kind::run_again);
  d = m.on_coastdown(s, s + RoadLoad{57, 0.27, 0.0008}, false);
  EXPECT_EQ(d.kind, Decision::Kind::accepted);
  expect_eq(d.next_set, {40, 0.2, 0.029}, 1e-9);
  // A drift rule that keeps coasting at the accepted setting until the vehicle settles (docs/standards.md
  // §3.12): the coast-down at (40, 0.2, 0.029) checks that setting and never joins the average of runs 2..4
  // (§3.2). Averaged in, its loss (54, 0.24, 0.0006) would have made the mean of four (58.5, 0.285, 0.0009)
  // and the setting (41.5, 0.215, 0.0291) (by hand), never coasted.
  const RoadLoad f{40, 0.2, 0.029};
  d = m.on_coastdown(f, f + RoadLoad{54, 0.24, 0.0006}, true);
  EXPECT_EQ(d.kind, Decision::Kind::accepted);
  expect_eq(d.next_set, f, 1e-12);
  EXPECT_TRUE(m.verifying());
  // Outside tolerance when coasted again: rejected, as a failed verification run is.
  SettingMethodState m2(p, target);
  RoadLoad s2 = m2.on_coastdown({50, 0.1, 0.03}, {112, 0.42, 0.031}, false).next_set;
  for (int i = 0; i < 3; ++i) s2 = m2.on_coastdown(s2, s2 + RoadLoad{60, 0.3, 0.001}, false).next_set;
  d = m2.on_coastdown(s2, s2 + RoadLoad{40, 0.3, 0.001}, false);
  EXPECT_EQ(d.kind, Decision::Kind::rejected);
  expect_eq(d.next_set, s2, 1e-12);
}

TEST(Setting, FixedRunWithVerification) {
  Profile p = wltp(SettingMethod::fixed_run);
  p.fixed_run_verification_runs = 1;
  const RoadLoad target{100, 0.5, 0.03};
  SettingMethodState m(p, target);
  RoadLoad s = m.on_coastdown({50, 0.1, 0.03}, {110, 0.4, 0.031}, false).next_set;
  for (int i = 0; i < 3; ++i) s = m.on_coastdown(s, s + RoadLoad{60, 0.3, 0.001}, false).next_set;
  EXPECT_TRUE(m.verifying());
  expect_eq(s, {40, 0.2, 0.029}, 1e-9);
  EXPECT_EQ(m.on_coastdown(s, {100.5, 0.5, 0.03}, true).kind, Decision::Kind::accepted);
  SettingMethodState m2(p, target);
  s = m2.on_coastdown({50, 0.1, 0.03}, {110, 0.4, 0.031}, false).next_set;
  for (int i = 0; i < 3; ++i) s = m2.on_coastdown(s, s + RoadLoad{60, 0.3, 0.001}, false).next_set;
  EXPECT_EQ(m2.on_coastdown(s, {130, 0.5, 0.03}, false).kind, Decision::Kind::rejected);
}

TEST(Setting, TheAdjustmentAnticipatesTheWarmingTheTrendPredicts) {
  // docs/standards.md §3.16 (lab policy): the adjusted setting At − (As − Ad) with the loss (As − Ad) scaled
  // by 1 + ratio, ratio = change / loss(v_warm). By hand: target (100, 0.5, 0.03), set (50, 0.2, 0.028),
  // simulated (120, 0.5, 0.03) → loss (70, 0.3, 0.002); at 80 km/h 70 + 24 + 12.8 = 106.8 N; a predicted
  // change of −10.68 N is a ratio of −0.1, so the next set is (100 − 63, 0.5 − 0.27, 0.03 − 0.0018) = (37,
  // 0.23, 0.0282); without the outlook it is the standard's (30, 0.2, 0.028) (GTR 15 §8.1.4).
  const Profile p = wltp(SettingMethod::iterative);
  const RoadLoad target{100, 0.5, 0.03}, set{50, 0.2, 0.028}, simulated{120, 0.5, 0.03};
  WarmingOutlook o;
  double asked_from = -1, asked_to = -1;
  o.change_n = [&](double from, double to) -> std::optional<double> {
    asked_from = from;
    asked_to = to;
    return -10.68;
  };
  o.speed_kmh = 80.0;
  o.speeds_kmh = p.reference_speeds_kmh;  // the loss is 76.8 N at 20 km/h and 142.8 N at 130: within bounds
  o.now_s = 1300.0;
  o.next_s = 1520.0;
  SettingMethodState m(p, target);
  const Decision d = m.on_coastdown(set, simulated, false, &o);
  EXPECT_EQ(d.kind, Decision::Kind::run_again);
  ASSERT_TRUE(d.anticipation.used) << d.anticipation.why;
  EXPECT_NEAR(d.anticipation.ratio, -0.1, 1e-12);
  EXPECT_DOUBLE_EQ(asked_from, 1300.0);
  EXPECT_DOUBLE_EQ(asked_to, 1520.0);
  expect_eq(d.next_set, {37, 0.23, 0.0282}, 1e-9);
  EXPECT_NE(d.reason.find("anticipates a loss change of -10.7 N at 80 km/h"), std::string::npos) << d.reason;
  SettingMethodState plain(p, target);
  expect_eq(plain.on_coastdown(set, simulated, false).next_set, {30, 0.2, 0.028}, 1e-12);
  // A pass keeps the setting: consecutive passes are at one setting (GTR 15 §8.1.3.4.2).
  SettingMethodState passing(p, target);
  const Decision kept = passing.on_coastdown(set, {101, 0.5, 0.03}, true, &o);
  expect_eq(kept.next_set, set);
  EXPECT_FALSE(kept.anticipation.used);
}

TEST(Setting, AnAnticipationAimedAtThePassesTakesTheMeanChangeToEach) {
  // docs/standards.md §3.16 (warm_up.anticipate_for = "passes", lab policy): the iterative method accepts
  // after two consecutive passes at one setting (GTR 15 §8.1.3.4.2), so the setting aims at both: the change
  // is the mean of those predicted from this coast-down (1300 s) to the next (1520 s) and to the one after
  // (1520 + 250 s). The warming curve is a first-order response F∞ + A·e^(−t/τ) (textbook), so each change
  // is the closed form Δ(t1, t2) = A·(e^(−t2/τ) − e^(−t1/τ)); A = 80 N, τ = 2000 s (invented figures). Same
  // target, set and loss as above (loss 106.8 N at 80 km/h).
  Profile p = wltp(SettingMethod::iterative);
  p.warm_up.anticipate_for = WarmUp::AnticipateFor::passes;
  const RoadLoad target{100, 0.5, 0.03}, set{50, 0.2, 0.028}, simulated{120, 0.5, 0.03};
  const double A = 80.0, tau = 2000.0;
  auto closed = [&](double t1, double t2) { return A * (std::exp(-t2 / tau) - std::exp(-t1 / tau)); };
  std::vector<double> asked_to;
  WarmingOutlook o;
  o.change_n = [&](double from, double to) -> std::optional<double> {
    asked_to.push_back(to);
    return closed(from, to);
  };
  o.speed_kmh = 80.0;
  o.speeds_kmh = p.reference_speeds_kmh;
  o.now_s = 1300.0;
  o.next_s = 1520.0;
  o.cycle_s = 250.0;
  SettingMethodState m(p, target);
  const Decision d = m.on_coastdown(set, simulated, false, &o);
  ASSERT_TRUE(d.anticipation.used) << d.anticipation.why;
  ASSERT_EQ(asked_to.size(), 2u);
  EXPECT_DOUBLE_EQ(asked_to[0], 1520.0);
  EXPECT_DOUBLE_EQ(asked_to[1], 1770.0);
  const double mean_change = 0.5 * (closed(1300.0, 1520.0) + closed(1300.0, 1770.0));
  EXPECT_NEAR(d.anticipation.change_n, mean_change, 1e-12);
  EXPECT_NEAR(d.anticipation.ratio, mean_change / 106.8, 1e-12);
  EXPECT_EQ(d.anticipation.aimed, 2);
  EXPECT_DOUBLE_EQ(d.anticipation.to_last_s, 1770.0);
  // The setting: At − loss·(1 + ratio), the loss (70, 0.3, 0.002) (as above).
  const double k = 1.0 + mean_change / 106.8;
  expect_eq(d.next_set, {100 - 70 * k, 0.5 - 0.3 * k, 0.03 - 0.002 * k}, 1e-9);
  EXPECT_NE(d.reason.find("by the next 2 coast-downs (their mean)"), std::string::npos) << d.reason;
  // Aimed at the next only (the profile's "next"), or with no cycle known: the change to the next alone.
  for (bool next_only : {true, false}) {
    Profile q = p;
    if (next_only) q.warm_up.anticipate_for = WarmUp::AnticipateFor::next;
    WarmingOutlook o2 = o;
    if (!next_only) o2.cycle_s = 0.0;
    asked_to.clear();
    SettingMethodState m2(q, target);
    const Decision d2 = m2.on_coastdown(set, simulated, false, &o2);
    ASSERT_TRUE(d2.anticipation.used);
    EXPECT_EQ(asked_to, std::vector<double>{1520.0});
    EXPECT_NEAR(d2.anticipation.change_n, closed(1300.0, 1520.0), 1e-12);
    EXPECT_EQ(d2.anticipation.aimed, 1);
  }
  // The fixed-run final setting aims at its verification runs: one here, so the next coast-down only.
  Profile f = wltp(SettingMethod::fixed_run);
  f.warm_up.anticipate_for = WarmUp::AnticipateFor::passes;
  f.fixed_run_verification_runs = 1;
  SettingMethodState fm(f, target);
  WarmingOutlook of = o;
  Decision fd;
  for (int i = 0; i < f.fixed_runs; ++i) {
    of.now_s = 1000.0 + 250.0 * i;
    of.next_s = of.now_s + 250.0;
    fd = fm.on_coastdown(set, simulated, false, &of);
  }
  ASSERT_TRUE(fm.verifying());
  ASSERT_TRUE(fd.anticipation.used) << fd.anticipation.why;
  EXPECT_EQ(fd.anticipation.aimed, 1);
  // Two verification runs: both aimed at.
  f.fixed_run_verification_runs = 2;
  SettingMethodState fm2(f, target);
  for (int i = 0; i < f.fixed_runs; ++i) {
    of.now_s = 1000.0 + 250.0 * i;
    of.next_s = of.now_s + 250.0;
    fd = fm2.on_coastdown(set, simulated, false, &of);
  }
  ASSERT_TRUE(fd.anticipation.used) << fd.anticipation.why;
  EXPECT_EQ(fd.anticipation.aimed, 2);
  EXPECT_DOUBLE_EQ(fd.anticipation.to_last_s, of.next_s + 250.0);
}

TEST(Setting, AnAnticipationOutsideItsBoundsIsNotUsedAndSaysWhy) {
  // The bounds (lab policy, no source): the loss at the warm-up speed at least kMinLossForShareN, the share
  // at most kMaxAnticipatedShare; no prediction, or a NaN one: nothing anticipated. Each falls back to the
  // standard's adjustment, (30, 0.2, 0.028) here (GTR 15 §8.1.4, as above).
  const Profile p = wltp(SettingMethod::iterative);
  const RoadLoad target{100, 0.5, 0.03}, set{50, 0.2, 0.028};
  struct Case {
    RoadLoad simulated;
    std::optional<double> change;
    const char* says;
  };
  const Case cases[] = {
      {{120, 0.5, 0.03}, std::nullopt, "does not predict"},
      {{120, 0.5, 0.03}, std::nan(""), "does not predict"},
      {{120, 0.5, 0.03}, -30.0, "beyond 25 %"},  // 30 / 106.8 = 28 %
      {{120, 0.5, 0.03}, +30.0, "beyond 25 %"},
      // loss (5, 0.0, 0.0): 5 N at 80 km/h, below 20 N
      {{55, 0.2, 0.028}, -1.0, "below 20 N"},
      // loss (−400, 0, 0.066) (a wild fit): 22.4 N at 80 km/h but −373.6 N at 20 km/h (outside 20 N to 3
      // times 22.4 N): a share of it would move the setting by far more than the change at 80 km/h (by hand)
      {{-350, 0.2, 0.094}, -5.0, "at 20 km/h, outside 20 N to 3 times"},
      // loss (0, 0, 0.03): 192 N at 80 km/h but 12 N at 20 km/h, below 20 N there (by hand)
      {{50, 0.2, 0.058}, -5.0, "at 20 km/h, outside"},
  };
  for (const auto& c : cases) {
    WarmingOutlook o;
    o.change_n = [&](double, double) { return c.change; };
    o.speeds_kmh = p.reference_speeds_kmh;
    o.now_s = 1000.0;
    o.next_s = 1200.0;
    SettingMethodState m(p, target);
    const Decision d = m.on_coastdown(set, c.simulated, false, &o);
    EXPECT_FALSE(d.anticipation.used);
    EXPECT_NE(d.anticipation.why.find(c.says), std::string::npos) << d.anticipation.why;
    expect_eq(d.next_set, adjusted_setting(target, set, c.simulated), 1e-12);
  }
}

TEST(Setting, TheFixedRunFinalSettingAnticipatesFromTheRunsMeanTimeToTheVerification) {
  // docs/standards.md §3.16: the fixed-run final setting A = At − mean(As − Ad) (docs/standards.md §3, as in
  // FixedRunFinalSetting above: mean loss (60, 0.30, 0.0010) → (40, 0.2, 0.029)) with the mean loss scaled by
  // 1 + ratio, the change predicted from the mean time of runs 2..4 (1200, 1400, 1600 s → 1400 s) to the
  // verification run (next_s of run 4: 1800 s). The mean loss at 80 km/h is 60 + 24 + 6.4 = 90.4 N; a change
  // of −9.04 N is a ratio of −0.1 → (100 − 54, 0.5 − 0.27, 0.03 − 0.0009) = (46, 0.23, 0.0291) (by hand).
  Profile p = wltp(SettingMethod::fixed_run);
  p.fixed_run_verification_runs = 1;
  const RoadLoad target{100, 0.5, 0.03};
  double asked_from = -1, asked_to = -1;
  WarmingOutlook o;
  o.change_n = [&](double from, double to) -> std::optional<double> {
    asked_from = from;
    asked_to = to;
    return -9.04;
  };
  SettingMethodState m(p, target);
  o.now_s = 1000.0;
  o.next_s = 1200.0;
  const Decision first = m.on_coastdown({50, 0.1, 0.03}, {112, 0.42, 0.031}, false, &o);
  expect_eq(first.next_set, {38, 0.18, 0.029});  // run 1 → run 2: the standard's adjustment, as without
  const RoadLoad s = first.next_set;
  const RoadLoad losses[] = {{60, 0.30, 0.0010}, {63, 0.33, 0.0012}, {57, 0.27, 0.0008}};
  Decision d;
  for (int i = 0; i < 3; ++i) {
    o.now_s = 1200.0 + 200.0 * i;
    o.next_s = o.now_s + 200.0;
    d = m.on_coastdown(s, s + losses[i], false, &o);
  }
  EXPECT_TRUE(m.verifying());
  ASSERT_TRUE(d.anticipation.used) << d.anticipation.why;
  EXPECT_DOUBLE_EQ(asked_from, 1400.0);
  EXPECT_DOUBLE_EQ(asked_to, 1800.0);
  expect_eq(d.next_set, {46, 0.23, 0.0291}, 1e-9);
}

TEST(Setting, AFixedRunAveragingRunsOfTwoWarmUpsAnticipatesNothing) {
  // The times of runs 2..4 are on the curve of their own warm-up (epoch_s); a pause re-warms and restarts
  // that clock, so a mean over runs of two warm-ups means nothing: the final setting is the standard's, A =
  // At − mean(As − Ad) = (40, 0.2, 0.029) as in FixedRunFinalSetting (docs/standards.md §3), and the record
  // says why.
  Profile p = wltp(SettingMethod::fixed_run);
  p.fixed_run_verification_runs = 1;
  const RoadLoad target{100, 0.5, 0.03};
  WarmingOutlook o;
  o.change_n = [](double, double) -> std::optional<double> { return -9.04; };
  o.epoch_s = 20.0;
  SettingMethodState m(p, target);
  const RoadLoad s = m.on_coastdown({50, 0.1, 0.03}, {112, 0.42, 0.031}, false, &o).next_set;
  const RoadLoad losses[] = {{60, 0.30, 0.0010}, {63, 0.33, 0.0012}, {57, 0.27, 0.0008}};
  Decision d;
  for (int i = 0; i < 3; ++i) {
    if (i == 2) o.epoch_s = 1100.0;  // a pause and a re-warm before run 4
    o.now_s = 600.0 + 200.0 * i;
    o.next_s = o.now_s + 200.0;
    d = m.on_coastdown(s, s + losses[i], false, &o);
  }
  EXPECT_TRUE(m.verifying());
  EXPECT_FALSE(d.anticipation.used);
  EXPECT_NE(d.anticipation.why.find("span a re-warm"), std::string::npos) << d.anticipation.why;
  expect_eq(d.next_set, {40, 0.2, 0.029}, 1e-9);
}

TEST(Setting, ProfileValidationReportsEveryProblem) {
  Profile p = wltp(SettingMethod::iterative);
  p.name = "";
  p.band_half_width_kmh = 20.0;
  p.tolerance_n = -1.0;
  p.reference_speeds_kmh = {30, 20};
  p.warm_up.stable_by = WarmUp::StableBy::trend;  // with stable_within_n 0: nothing would be checked
  const Problems ps = validate(p);
  auto has = [&](const std::string& key) {
    for (const auto& q : ps)
      if (q.key.rfind(key, 0) == 0) return true;
    return false;
  };
  EXPECT_TRUE(has("name"));
  EXPECT_TRUE(has("bands.half_width_kmh"));
  EXPECT_TRUE(has("acceptance.tolerance_n"));
  EXPECT_TRUE(has("bands.reference_speeds_kmh"));
  EXPECT_TRUE(has("warm_up.stable_by"));
  EXPECT_TRUE(validate(wltp(SettingMethod::iterative)).empty());
}

// docs/standards.md §3.12, §3.16: with the fixed-run method and warm_up.drift_rule = "require", the held
// coast-downs can only confirm or reject the final setting, which anticipates the warming only with
// warm_up.anticipate_drift and at least one verification run. Without either, validation warns on the key
// (the combination is allowed: a lab may choose it); not with both, not with "warn", not for the iterative
// method.
TEST(Setting, FixedRunRequireWithoutAnticipationIsWarned) {
  auto warnings_on = [](const Profile& p, const std::string& key) {
    int n = 0;
    for (const auto& q : validate(p)) {
      EXPECT_EQ(q.severity, Problem::Severity::warning) << q.key << ": " << q.message;
      n += q.key == key;
    }
    return n;
  };
  Profile p = wltp(SettingMethod::fixed_run);
  p.warm_up.drift_rule = WarmUp::DriftRule::require;
  p.warm_up.anticipate_drift = true;
  p.fixed_run_verification_runs = 0;
  EXPECT_EQ(warnings_on(p, "warm_up.drift_rule"), 1);
  EXPECT_FALSE(has_errors(validate(p)));
  p.fixed_run_verification_runs = 1;
  EXPECT_EQ(warnings_on(p, "warm_up.drift_rule"), 0);
  p.warm_up.anticipate_drift = false;
  EXPECT_EQ(warnings_on(p, "warm_up.drift_rule"), 1);
  p.warm_up.drift_rule = WarmUp::DriftRule::warn;
  p.fixed_run_verification_runs = 0;
  EXPECT_EQ(warnings_on(p, "warm_up.drift_rule"), 0);
  Profile it = wltp(SettingMethod::iterative);
  it.warm_up.drift_rule = WarmUp::DriftRule::require;
  it.fixed_run_verification_runs = 0;
  EXPECT_EQ(warnings_on(it, "warm_up.drift_rule"), 0);
}

namespace {
bool o_is_default(const RoadLoad& r) {
  return r.f0_n == 0.0 && r.f1_n_per_kmh == 0.0 && r.f2_n_per_kmh2 == 0.0;
}
// The target plus a deviation of dev20_n at 20 km/h and dev130_n at 130 km/h through {a, 0, q}: a + 400q =
// dev20_n, a + 16900q = dev130_n (by hand: q = (dev130_n − dev20_n)/16500).
RoadLoad off_target(const RoadLoad& target, double dev20_n, double dev130_n) {
  const double q = (dev130_n - dev20_n) / 16500.0;
  return target + RoadLoad{dev20_n - 400.0 * q, 0.0, q};
}
// A warming curve F(t) = 100 + 10·exp(−t/1000) N, as fit_warm_up_curve gives it.
WarmUpCurve curve_tau_1000(double amplitude_n = 10.0) {
  WarmUpCurve c;
  c.ok = true;
  c.settled_n = 100.0;
  c.amplitude_n = amplitude_n;
  c.tau_s = 1000.0;
  c.rms_residual_n = 0.1;
  c.points = 10;
  return c;
}
}  // namespace

TEST(FullyWarm, BoundsEachSpeedAndAimsTheSettingAtTheirMiddle) {
  // docs/standards.md §3.18 (lab policy; the bounds are algebra). Worked by hand: at t = 2000 s the change
  // still to come is c = 10·(e^−52 − e^−2) = −1.3533528 N at 80 km/h. The measured curve is the target plus
  // {2.2424242, 0, −6.0606e−4}, i.e. deviations +2 at 20 km/h, −1.6363636 at 80 and −8 at 130
  // (a + 400q = 2, a + 16900q = −8: q = −10/16500). r² = 0.0625, 1, 2.640625, so fully warm:
  //   20 km/h: 2 + c·0.0625 = 1.9154154 and 2 + c = 0.6466472;
  //   80 km/h: −1.6363636 + c = −2.9897164 (both);
  //   130 km/h: −8 + c = −9.3533528 and −8 + c·2.640625 = −11.5736972: outside ±10 N.
  // The setting for the warm vehicle, target − (loss + {c/2, 0, c/(2·80²)}) with loss = measured − set and
  // set = {60, 0.2, 0.02}: set − (measured − target) − {c/2, 0, c/12800} = {60 − 2.2424242 + 0.6766764, 0.2,
  // 0.02 + 6.0606e−4 + 1.0573069e−4} = {58.4342522, 0.2, 0.0207117907}.
  const RoadLoad target{100.0, 0.5, 0.03}, set{60.0, 0.2, 0.02};
  const RoadLoad measured = off_target(target, 2.0, -8.0);
  const std::vector<double> speeds{20.0, 80.0, 130.0};
  const ToleranceCheck now = check_tolerance(target, measured, speeds, 10.0);
  ASSERT_TRUE(now.pass);
  const FullyWarmOutlook o = fully_warm_outlook(now, target, measured - set, curve_tau_1000(), 2000.0, 80.0);
  ASSERT_TRUE(o.predicted) << o.why;
  EXPECT_NEAR(o.change_n, -1.3533528, 1e-6);
  EXPECT_EQ(o.from_s, 2000.0);
  ASSERT_EQ(o.rows.size(), 3u);
  EXPECT_EQ(o.rows[2].limit_n, 10.0);
  EXPECT_TRUE(o.not_aimable_why.empty());
  EXPECT_NEAR(o.rows[0].low_n, 0.6466472, 1e-6);
  EXPECT_NEAR(o.rows[0].high_n, 1.9154154, 1e-6);
  EXPECT_TRUE(o.rows[0].within);
  EXPECT_NEAR(o.rows[1].low_n, -2.9897164, 1e-6);
  EXPECT_NEAR(o.rows[1].high_n, -2.9897164, 1e-6);
  EXPECT_NEAR(o.rows[2].low_n, -11.5736972, 1e-6);
  EXPECT_NEAR(o.rows[2].high_n, -9.3533528, 1e-6);
  EXPECT_FALSE(o.rows[2].within);
  EXPECT_FALSE(o.within);
  // Aimable: the warm setting reads about −c·(1 + r²)/2 at the next coast-down, at most 1.3533528·1.8203125
  // = 2.46 N (130 km/h), within 10 N.
  EXPECT_TRUE(o.aimable);
  expect_eq(o.warm_setting, {58.4342522, 0.2, 0.0207117907}, 1e-7);
  EXPECT_NE(o.why.find("predicted outside tolerance once fully warm: -11.6 to -9.4 N at 130 km/h"),
            std::string::npos)
      << o.why;
}

TEST(FullyWarm, WithinBothBoundsKeepsTheSettingAndARisingLossIsBoundedAlike) {
  // docs/standards.md §3.18, by hand as above: a deviation of −5 N at 130 km/h gives −6.35 and −8.57 N fully
  // warm: within. A loss still rising (A = −10 N: c = +1.3533528 N) mirrors the bounds: +8 N at 130 km/h
  // gives 9.35 and 11.57 N: outside.
  const RoadLoad target{100.0, 0.5, 0.03}, set{60.0, 0.2, 0.02};
  const std::vector<double> speeds{20.0, 80.0, 130.0};
  const RoadLoad measured = off_target(target, 2.0, -5.0);
  const FullyWarmOutlook in = fully_warm_outlook(check_tolerance(target, measured, speeds, 10.0), target,
                                                 measured - set, curve_tau_1000(), 2000.0, 80.0);
  ASSERT_TRUE(in.predicted);
  EXPECT_TRUE(in.within);
  EXPECT_NEAR(in.rows[2].low_n, -5.0 - 1.3533528 * 2.640625, 1e-6);
  EXPECT_NEAR(in.rows[2].high_n, -6.3533528, 1e-6);
  EXPECT_EQ(in.why.rfind("within tolerance once fully warm", 0), 0u) << in.why;
  const RoadLoad high = off_target(target, 2.0, 8.0);
  const FullyWarmOutlook rising = fully_warm_outlook(check_tolerance(target, high, speeds, 10.0), target,
                                                     high - set, curve_tau_1000(-10.0), 2000.0, 80.0);
  ASSERT_TRUE(rising.predicted);
  EXPECT_NEAR(rising.change_n, 1.3533528, 1e-6);
  EXPECT_NEAR(rising.rows[2].low_n, 9.3533528, 1e-6);
  EXPECT_NEAR(rising.rows[2].high_n, 11.5736972, 1e-6);
  EXPECT_FALSE(rising.within);
}

TEST(FullyWarm, NothingIsDecidedWhenTheCurveDoesNotPredict) {
  // docs/standards.md §3.18 and §3.16: a curve not fitted, not resolved (τ at the search's bound) or fitting
  // its windows badly predicts nothing; the outlook says so and keeps the setting (within).
  const RoadLoad target{100.0, 0.5, 0.03};
  const std::vector<double> speeds{20.0, 130.0};
  const ToleranceCheck now = check_tolerance(target, target + RoadLoad{0.0, 0.0, -0.0005}, speeds, 10.0);
  WarmUpCurve not_fitted;
  WarmUpCurve at_bound = curve_tau_1000();
  at_bound.tau_at_bound = true;
  WarmUpCurve rough = curve_tau_1000();
  rough.rms_residual_n = 5.0;
  not_fitted.why = "too few hold windows";
  const std::vector<std::pair<WarmUpCurve, std::string>> cases = {
      {not_fitted, "not predicted: the warm-up's curve is not fitted (too few hold windows)"},
      {at_bound, "not predicted: the warm-up's curve does not resolve its time constant"},
      {rough, "not predicted: the warm-up's curve misses its windows by 5.0 N rms, above 2 N"}};
  for (const auto& [c, why] : cases) {
    const FullyWarmOutlook o = fully_warm_outlook(now, target, {}, c, 2000.0, 80.0);
    EXPECT_FALSE(o.predicted);
    EXPECT_TRUE(o.within);
    EXPECT_FALSE(o.aimable);
    EXPECT_TRUE(o.rows.empty());
    EXPECT_EQ(o.why, why);
  }
  // A deviation that is not finite, after a row outside: not predicted, and not "outside" either.
  const double nan = std::numeric_limits<double>::quiet_NaN();
  ToleranceCheck odd;
  odd.rows = {SpeedDeviation{20.0, 100.0, 120.0, 20.0, 0.0, 10.0, false},
              SpeedDeviation{130.0, 100.0, nan, nan, 0.0, 10.0, false}};
  const FullyWarmOutlook bad = fully_warm_outlook(odd, target, {}, curve_tau_1000(), 2000.0, 80.0);
  EXPECT_FALSE(bad.predicted);
  EXPECT_TRUE(bad.within);
  EXPECT_EQ(bad.why, "not predicted: a deviation is not finite");
  // A time before the warm-up hold began (the curve's origin) is not a time the curve speaks of.
  EXPECT_FALSE(fully_warm_outlook(now, target, {}, curve_tau_1000(), -1.0, 80.0).predicted);
}

TEST(FullyWarm, ASettingTooFarFromWarmIsNotAimedAtAndTheGuardBandsLimitIsUsed) {
  // docs/standards.md §3.18, by hand: with A = 100 N the change still to come at t = 2000 s is c = −13.533528
  // N; a setting aimed at the middle would read 13.533528·(1 + 2.640625)/2 = 24.64 N at 130 km/h at the next
  // coast-down, beyond 10 N: not aimable, and no setting is given. Under the guard band (docs/standards.md
  // §3.11) a row's limit is tolerance − k·u: with u = 2 N and k = 2 the limit is 6 N, so a deviation of −5 N
  // at 130 km/h and c = −1.3533528 N (bounds −6.35 and −8.57 N, within ±10) is outside once fully warm.
  const RoadLoad target{100.0, 0.5, 0.03}, set{60.0, 0.2, 0.02};
  const std::vector<double> speeds{20.0, 80.0, 130.0};
  const RoadLoad measured = off_target(target, 2.0, -8.0);
  const FullyWarmOutlook far = fully_warm_outlook(check_tolerance(target, measured, speeds, 10.0), target,
                                                  measured - set, curve_tau_1000(100.0), 2000.0, 80.0);
  ASSERT_TRUE(far.predicted);
  EXPECT_NEAR(far.change_n, -13.533528, 1e-5);
  EXPECT_FALSE(far.within);
  EXPECT_FALSE(far.aimable);
  EXPECT_NE(far.not_aimable_why.find("would miss the next coast-down"), std::string::npos)
      << far.not_aimable_why;
  EXPECT_TRUE(o_is_default(far.warm_setting));
  const RoadLoad m5 = off_target(target, 2.0, -5.0);
  DecisionRule guard;
  guard.kind = DecisionRule::Kind::guard_band;
  guard.coverage_k = 2.0;
  const ToleranceCheck banded = check_tolerance(target, m5, speeds, 10.0, guard, [](double) { return 2.0; });
  ASSERT_TRUE(banded.pass);  // |−5| <= 6
  const FullyWarmOutlook g = fully_warm_outlook(banded, target, m5 - set, curve_tau_1000(), 2000.0, 80.0);
  ASSERT_TRUE(g.predicted);
  EXPECT_FALSE(g.rows[2].within);
  EXPECT_FALSE(g.within);
  EXPECT_TRUE(fully_warm_outlook(check_tolerance(target, m5, speeds, 10.0), target, m5 - set,
                                 curve_tau_1000(), 2000.0, 80.0)
                  .within);
}

TEST(FullyWarm, TheBoundsHoldForEveryWarmingPolynomialWithTermsOfOneSign) {
  // The algebra behind docs/standards.md §3.18: for a change Δ(v) = s·(a + b·v + q·v²) with a, b, q >= 0 and
  // s = ±1, and c = Δ(v_w), Δ(v) lies between c·min(1, r²) and c·max(1, r²), r = v / v_w. Checked on 2,000
  // polynomials drawn with a fixed seed and every 5 km/h from 5 to 160 km/h (the bounds are reached by the
  // pure terms: q alone gives c·r², a alone gives c).
  std::mt19937_64 rng(17);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  const double vw = 80.0;
  for (int k = 0; k < 2000; ++k) {
    const double a = 30.0 * u(rng) * (k % 3 != 0), b = 0.3 * u(rng) * (k % 5 != 0), q = 0.004 * u(rng);
    const double sign = k % 2 ? 1.0 : -1.0;
    auto change = [&](double v) { return sign * (a + b * v + q * v * v); };
    const double c = change(vw);
    for (double v = 5.0; v <= 160.0; v += 5.0) {
      const double r2 = (v / vw) * (v / vw);
      const double lo = std::min(c * std::min(1.0, r2), c * std::max(1.0, r2));
      const double hi = std::max(c * std::min(1.0, r2), c * std::max(1.0, r2));
      EXPECT_GE(change(v), lo - 1e-12) << "a " << a << " b " << b << " q " << q << " v " << v;
      EXPECT_LE(change(v), hi + 1e-12) << "a " << a << " b " << b << " q " << q << " v " << v;
    }
  }
  // And fully_warm_outlook's rows are those bounds: a deviation of 0 now at every speed gives exactly them.
  const RoadLoad target{100.0, 0.5, 0.03};
  const std::vector<double> speeds{20.0, 80.0, 130.0};
  const FullyWarmOutlook o = fully_warm_outlook(check_tolerance(target, target, speeds, 10.0), target, {},
                                                curve_tau_1000(), 2000.0, vw);
  ASSERT_TRUE(o.predicted);
  EXPECT_NEAR(o.rows[0].low_n, o.change_n, 1e-12);
  EXPECT_NEAR(o.rows[0].high_n, o.change_n * 0.0625, 1e-12);
  EXPECT_NEAR(o.rows[2].low_n, o.change_n * 2.640625, 1e-12);
  EXPECT_NEAR(o.rows[2].high_n, o.change_n, 1e-12);
}

namespace {
// A check of two reference speeds, 20 and 130 km/h, each with the ±10 N limit (GTR 15 §8.1.3.4.2) and the
// band regression's standard error u (2.6).
ToleranceCheck two_speed_check(double u_n) {
  ToleranceCheck c;
  c.pass = true;
  for (double v : {20.0, 130.0}) c.rows.push_back({v, 0.0, 0.0, 0.0, u_n, 10.0, true});
  return c;
}
WarmingOutlook fixed_change_outlook(std::optional<double> change_n) {
  WarmingOutlook o;
  o.change_n = [change_n](double, double) { return change_n; };
  o.speed_kmh = 80.0;
  o.speeds_kmh = {20.0, 130.0};
  o.now_s = 1300.0;
  o.next_s = 1520.0;
  return o;
}
}  // namespace

TEST(NextPass, PredictsEachSpeedAndTheChanceTheNextCoastDownFails) {
  // docs/standards.md §3.19 (lab policy). By hand: target (100, 0.5, 0.03), set (50, 0.2, 0.028), the
  // adjustment's curve (94, 0.5, 0.03): the deviation now is −6 N at every speed; the loss (44, 0.3, 0.002)
  // is 80.8 N at 80 km/h, 50.8 N at 20 and 116.8 N at 130. A change of −4.04 N at 80 km/h is a share of
  // −0.05, so the warming to the next coast-down is −2.54 N at 20 and −5.84 N at 130: predicted −8.54 and
  // −11.84 N. With u = 2 N the next verdict fails at 20 km/h with Φ((−10 + 8.54)/2) = Φ(−0.73) = 0.23270 and
  // at 130 with Φ((−10 + 11.84)/2) = Φ(0.92) = 0.82121 (the other tails below 1e-20; standard normal table,
  // textbook), and at either with 1 − (1 − 0.23270)(1 − 0.82121) = 0.86281.
  const RoadLoad target{100, 0.5, 0.03}, set{50, 0.2, 0.028}, basis{94, 0.5, 0.03};
  const NextPassOutlook o =
      next_pass_outlook(two_speed_check(2.0), target, set, basis, fixed_change_outlook(-4.04), 0.5);
  ASSERT_TRUE(o.predicted) << o.why;
  EXPECT_NEAR(o.warming.change_n, -4.04, 1e-12);
  EXPECT_NEAR(o.warming.ratio, -0.05, 1e-12);
  EXPECT_DOUBLE_EQ(o.warming.from_s, 1300.0);
  EXPECT_DOUBLE_EQ(o.warming.to_s, 1520.0);
  ASSERT_EQ(o.rows.size(), 2u);
  EXPECT_NEAR(o.rows[0].deviation_n, -6.0, 1e-9);
  EXPECT_NEAR(o.rows[0].change_n, -2.54, 1e-9);
  EXPECT_NEAR(o.rows[0].predicted_n, -8.54, 1e-9);
  EXPECT_NEAR(o.rows[1].change_n, -5.84, 1e-9);
  EXPECT_NEAR(o.rows[1].predicted_n, -11.84, 1e-9);
  EXPECT_NEAR(o.rows[0].fail_probability, 0.23270, 5e-5);
  EXPECT_NEAR(o.rows[1].fail_probability, 0.82121, 5e-5);
  EXPECT_NEAR(o.fail_probability, 0.86281, 5e-5);
  EXPECT_DOUBLE_EQ(o.rows[1].u_n, 2.0);
  EXPECT_DOUBLE_EQ(o.rows[1].limit_n, 10.0);
  EXPECT_TRUE(o.likely_to_fail);
  EXPECT_NE(o.why.find("most likely at 130 km/h: -11.8 N against ±10.0 N"), std::string::npos) << o.why;
  // The profile's risk decides: above 0.86 it coasts on.
  EXPECT_FALSE(next_pass_outlook(two_speed_check(2.0), target, set, basis, fixed_change_outlook(-4.04), 0.9)
                   .likely_to_fail);
  // No warming predicted (a change of 0): the deviation now, −6 N, 2 u inside the limit at both speeds:
  // Φ(−2) = 0.02275 each, 1 − (1 − 0.02275)² = 0.04498 at either (table).
  const NextPassOutlook still =
      next_pass_outlook(two_speed_check(2.0), target, set, basis, fixed_change_outlook(0.0), 0.3);
  ASSERT_TRUE(still.predicted) << still.why;
  EXPECT_NEAR(still.fail_probability, 0.04498, 5e-5);
  EXPECT_FALSE(still.likely_to_fail);
  // u not known (0): the prediction against the limit decides, 0 or 1.
  const NextPassOutlook sharp =
      next_pass_outlook(two_speed_check(0.0), target, set, basis, fixed_change_outlook(-4.04), 0.5);
  EXPECT_DOUBLE_EQ(sharp.rows[0].fail_probability, 0.0);
  EXPECT_DOUBLE_EQ(sharp.rows[1].fail_probability, 1.0);
  EXPECT_TRUE(sharp.likely_to_fail);
}

TEST(NextPass, NothingIsPredictedWithoutAWarmingForecastOrFromValuesThatAreNotFinite) {
  // docs/standards.md §3.19: no prediction, no adjustment (the session coasts on, as the standard does).
  const RoadLoad target{100, 0.5, 0.03}, set{50, 0.2, 0.028}, basis{94, 0.5, 0.03};
  const NextPassOutlook none =
      next_pass_outlook(two_speed_check(2.0), target, set, basis, fixed_change_outlook(std::nullopt), 0.5);
  EXPECT_FALSE(none.predicted);
  EXPECT_FALSE(none.likely_to_fail);
  EXPECT_NE(none.why.find("not predicted"), std::string::npos) << none.why;
  // A share beyond the anticipation's bound (a quarter of the loss, 3.16) is not believed either.
  EXPECT_FALSE(next_pass_outlook(two_speed_check(2.0), target, set, basis, fixed_change_outlook(-30.0), 0.5)
                   .predicted);
  const double nan = std::numeric_limits<double>::quiet_NaN();
  ToleranceCheck bad = two_speed_check(2.0);
  bad.rows[1].u_n = nan;
  const NextPassOutlook o = next_pass_outlook(bad, target, set, basis, fixed_change_outlook(-4.04), 0.5);
  EXPECT_FALSE(o.predicted);
  EXPECT_FALSE(o.likely_to_fail);
  EXPECT_TRUE(o.rows.empty());
  EXPECT_NE(o.why.find("130 km/h is not finite"), std::string::npos) << o.why;
}

TEST(NextPass, AnAdjustmentIsJudgedByTheSameModelAndNoiseAloneNeverMovesTheSetting) {
  // docs/standards.md §3.19: the setting is adjusted only when the adjusted setting is predicted likelier to
  // pass. By hand, as in PredictsEachSpeed... above: the standard's adjustment target − loss (GTR 15 §8.1.4)
  // would read, at the next coast-down, the warming alone, −2.54 N at 20 km/h and −5.84 N at 130: it fails
  // with Φ((−10 + 2.54)/2) = Φ(−3.73) = 0.000096 and Φ((−10 + 5.84)/2) = Φ(−2.08) = 0.018763, at either
  // 0.018857 (standard normal table), against 0.86281 coasting on: adjusting helps.
  const RoadLoad target{100, 0.5, 0.03}, set{50, 0.2, 0.028}, basis{94, 0.5, 0.03};
  const RoadLoad loss = basis - set;
  NextPassOutlook o =
      next_pass_outlook(two_speed_check(2.0), target, set, basis, fixed_change_outlook(-4.04), 0.5);
  judge_adjusted(o, two_speed_check(2.0), target, set, basis, target - loss, fixed_change_outlook(-4.04));
  ASSERT_TRUE(o.adjusted_fail_probability.has_value());
  EXPECT_NEAR(*o.adjusted_fail_probability, 0.018857, 5e-5);
  EXPECT_TRUE(o.adjusting_helps);
  // Noise alone: a setting on the target (the adjustment's curve = target), no warming, u = 8 N at both
  // speeds: each fails with 2Φ(−10/8) = 2 × 0.10565 = 0.21130, either with 1 − (1 − 0.21130)² = 0.37796
  // (table): above a risk of 0.3. The standard's adjustment is the same setting: no likelier to pass, so the
  // setting is not moved (an adjustment cannot help noise).
  const RoadLoad on_target_set{60, 0.3, 0.028};
  NextPassOutlook noisy =
      next_pass_outlook(two_speed_check(8.0), target, on_target_set, target, fixed_change_outlook(0.0), 0.3);
  ASSERT_TRUE(noisy.predicted) << noisy.why;
  EXPECT_NEAR(noisy.fail_probability, 0.37796, 5e-5);
  EXPECT_TRUE(noisy.likely_to_fail);
  judge_adjusted(noisy, two_speed_check(8.0), target, on_target_set, target,
                 target - (target - on_target_set), fixed_change_outlook(0.0));
  ASSERT_TRUE(noisy.adjusted_fail_probability.has_value());
  EXPECT_NEAR(*noisy.adjusted_fail_probability, 0.37796, 5e-5);
  EXPECT_FALSE(noisy.adjusting_helps);
  // Not predicted: nothing judged.
  NextPassOutlook none =
      next_pass_outlook(two_speed_check(2.0), target, set, basis, fixed_change_outlook(std::nullopt), 0.5);
  judge_adjusted(none, two_speed_check(2.0), target, set, basis, target - loss, fixed_change_outlook(0.0));
  EXPECT_FALSE(none.adjusted_fail_probability.has_value());
  EXPECT_FALSE(none.adjusting_helps);
}
