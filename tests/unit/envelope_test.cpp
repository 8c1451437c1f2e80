// The setting envelope (core/envelope.hpp): exact extremes of the road-load quadratic, the target's checks,
// the set curve's checks before a write, and the divergence watch. Check values are computed by hand beside
// each check (F(v) = f0 + f1·v + f2·v², EU SA4 §2.4; vertex at v = −f1/(2·f2)).
#include "core/envelope.hpp"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <random>
#include <vector>

#include "core/regression.hpp"
#include "core/setting.hpp"
#include "core/vehicle.hpp"

using namespace loadtrim::core;

namespace {

const std::vector<double> kWltpSpeeds = {20, 30, 40,  50,  60,  70,
                                         80, 90, 100, 110, 120, 130};  // GTR 15 §2.2, from memory
// The invented demo hatchback (samples/targets/demo-hatchback.toml): F(130) = 142 + 45.5 + 557.7 = 745.2 N.
const RoadLoad kDemoTarget{142.0, 0.35, 0.033};
constexpr double kDemoMassKg = 1470.0;

EnvelopeLimits cell(double max_force_n, double top_speed_kmh) {
  EnvelopeLimits l;
  l.max_force_n = max_force_n;
  l.top_speed_kmh = top_speed_kmh;
  return l;
}

int count(const Problems& ps, Problem::Severity s) {
  return static_cast<int>(
      std::count_if(ps.begin(), ps.end(), [&](const Problem& p) { return p.severity == s; }));
}
const Problem* find(const Problems& ps, const std::string& key, Problem::Severity s) {
  for (const auto& p : ps)
    if (p.key == key && p.severity == s) return &p;
  return nullptr;
}
bool contains(const std::string& s, const std::string& part) {
  return s.find(part) != std::string::npos;
}

}  // namespace

// ---------------------------------------------------------------------------------------------- exact
// extremes

TEST(Envelope, ExtremesAreExactIncludingAVertexBetweenGridSpeeds) {
  // (−50, 4.1, −0.02): vertex at v = 4.1/0.04 = 102.5 km/h, F = −50 + 420.25 − 210.125 = 160.125 N (hand);
  // ends F(0) = −50, F(142) = −50 + 582.2 − 403.28 = 128.92 N. A 10 km/h grid would find at most 160.0 at
  // 100.
  const CurvePoint m = max_abs_on({-50.0, 4.1, -0.02}, 0.0, 142.0);
  EXPECT_NEAR(m.speed_kmh, 102.5, 1e-12);
  EXPECT_NEAR(m.force_n, 160.125, 1e-9);
  // The lowest point of the same curve is the end at 0 km/h (−50 N), not the vertex (a maximum here).
  const CurvePoint lo = minimum_on({-50.0, 4.1, -0.02}, 0.0, 142.0);
  EXPECT_EQ(lo.speed_kmh, 0.0);
  EXPECT_NEAR(lo.force_n, -50.0, 1e-12);
  // |F| largest where F is most negative: (−2431, 0.07, 0.33) on 0–50 km/h: F(0) = −2431; F(50) = −2431 + 3.5
  // + 825 = −1602.5; vertex −0.07/0.66 < 0 is outside. The sign is kept.
  const CurvePoint n = max_abs_on({-2431.0, 0.07, 0.33}, 0.0, 50.0);
  EXPECT_EQ(n.speed_kmh, 0.0);
  EXPECT_NEAR(n.force_n, -2431.0, 1e-12);
}

// ---------------------------------------------------------------------------------------------- check_target

TEST(Envelope, TargetNegativeInsideTheReferenceRangeIsRefused) {
  // Issue 13: f1 = −5. (135, −5, 1/30) = (v² − 150·v + 4050)/30: F(20) = (400 − 3000 + 4050)/30 = 48.3 N > 0,
  // so the F(20) > 0 rule of plausibility() passes it; roots 75 ± √1575 = 35.31 and 114.69 km/h; vertex at v
  // = 5/(2/30) = 75 km/h, F = (5625 − 11250 + 4050)/30 = −52.5 N (hand).
  const RoadLoad t{135.0, -5.0, 1.0 / 30.0};
  VehicleTarget v;
  v.test_mass_kg = 1500.0;
  v.mass_in_running_order_kg = 1400.0;
  v.max_speed_kmh = 180.0;
  v.target = t;
  EXPECT_FALSE(has_errors(plausibility(v)))
      << "the old rule already caught it: this test no longer shows the gap";

  const Problems ps = check_target(t, kWltpSpeeds, 1500.0, cell(8000.0, 142.0));
  const Problem* p = find(ps, "target", Problem::Severity::error);
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "35.3–114.7 km/h")) << p->message;
  EXPECT_TRUE(contains(p->message, "-52.5 N at 75.0 km/h")) << p->message;
}

TEST(Envelope, TargetNegativeOnlyBetweenReferenceSpeedsIsRefused) {
  // F = (v − 65)²/16 − 1 = (263.0625, −8.125, 0.0625): every reference speed is positive (F(60) = F(70) =
  // 25/16 − 1 = 0.5625 N), yet F < 0 on 65 ± 4 = 61–69 km/h, lowest −1 N at 65 km/h (hand). Only the exact
  // minimum sees it. All numbers are exact in binary.
  const RoadLoad t{263.0625, -8.125, 0.0625};
  for (double v : kWltpSpeeds) ASSERT_GT(t.force_n(v), 0.0) << v;
  const Problems ps = check_target(t, kWltpSpeeds, 1500.0, cell(8000.0, 142.0));
  const Problem* p = find(ps, "target", Problem::Severity::error);
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "61.0–69.0 km/h")) << p->message;
  EXPECT_TRUE(contains(p->message, "-1.0 N at 65.0 km/h")) << p->message;
  // 1.5 N more everywhere (f0 264.5625) and its lowest point is +0.5 N at 65 km/h: no error.
  EXPECT_EQ(find(check_target({264.5625, -8.125, 0.0625}, kWltpSpeeds, 1500.0, cell(8000.0, 142.0)), "target",
                 Problem::Severity::error),
            nullptr);
}

TEST(Envelope, TargetTouchingZeroIsRefused) {
  // (225, −7.5, 0.0625) = (v − 60)²/16: exactly 0 N at v = 7.5/0.125 = 60 km/h (hand, exact in binary). "Zero
  // or negative" is refused: at 60 km/h the vehicle would not decelerate.
  const Problems ps = check_target({225.0, -7.5, 0.0625}, kWltpSpeeds, 1500.0, cell(8000.0, 142.0));
  const Problem* p = find(ps, "target", Problem::Severity::error);
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "on 60.0 km/h")) << p->message;
}

TEST(Envelope, TargetAboveTheCellsForceLimitIsRefused) {
  // Issue 13: a cell with max_force_n = 100 ran the demo target, which needs F(130) = 142 + 0.35·130 +
  // 0.033·130² = 142 + 45.5 + 557.7 = 745.2 N (hand). Top speed 130 km/h here; the largest |F| is at the top
  // (f1, f2 > 0).
  const Problems ps = check_target(kDemoTarget, kWltpSpeeds, kDemoMassKg, cell(100.0, 130.0));
  const Problem* p = find(ps, "target", Problem::Severity::error);
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "745.2 N at 130.0 km/h")) << p->message;
  EXPECT_TRUE(contains(p->message, "limits.max_force_n = 100 N")) << p->message;
  // The limit is inclusive from above: 746 N passes, 745 N does not.
  EXPECT_FALSE(has_errors(check_target(kDemoTarget, kWltpSpeeds, kDemoMassKg, cell(746.0, 130.0))));
  EXPECT_TRUE(has_errors(check_target(kDemoTarget, kWltpSpeeds, kDemoMassKg, cell(745.0, 130.0))));
  // Up to the session's top speed (start speed 142 km/h): 142 + 49.7 + 665.412 = 857.112 N.
  const Problems top = check_target(kDemoTarget, kWltpSpeeds, kDemoMassKg, cell(800.0, 142.0));
  ASSERT_NE(find(top, "target", Problem::Severity::error), nullptr);
  EXPECT_TRUE(contains(find(top, "target", Problem::Severity::error)->message, "857.1 N at 142.0 km/h"));
}

TEST(Envelope, TargetWithoutCellLimitsIsRefused) {
  // Fail safe: EnvelopeLimits{} has max_force_n = 0 ("not given"), which nothing may pass.
  EXPECT_TRUE(has_errors(check_target(kDemoTarget, kWltpSpeeds, kDemoMassKg, EnvelopeLimits{})));
}

TEST(Envelope, DemoTargetIsClean) {
  // Positive control: the demo target on the demo cell (8000 N, start 142 km/h). Plausibility ratios (hand, g
  // = 9.80665 m/s² NIST SP 811): F(20) = 142 + 7 + 13.2 = 162.2 N → 162.2/(1470·9.80665) = 0.01125
  // (0.003–0.06); F(130)/(TM·g) = 745.2/14415.78 = 0.0517 (0.015–0.15).
  EXPECT_TRUE(check_target(kDemoTarget, kWltpSpeeds, kDemoMassKg, cell(8000.0, 142.0)).empty());
}

TEST(Envelope, NoAerodynamicTermIsWarned) {
  // (150, 1, 0): positive everywhere, 150 + 142 = 292 N at 142 km/h; ratios 170/14709.98 = 0.0116 and
  // 280/14709.98 = 0.0190, inside the bounds: the only problem is the f2 = 0 warning.
  const Problems ps = check_target({150.0, 1.0, 0.0}, kWltpSpeeds, 1500.0, cell(8000.0, 142.0));
  ASSERT_EQ(ps.size(), 1u);
  EXPECT_EQ(ps[0].severity, Problem::Severity::warning);
  EXPECT_EQ(ps[0].key, "target.f2_n_per_kmh2");
  EXPECT_TRUE(contains(ps[0].message, "no aerodynamic term"));
}

TEST(Envelope, ImplausibleForTheTestMassIsWarned) {
  // The demo target with the mass given in tonnes (1.47): F(20)/(TM·g) = 162.2/14.416 = 11.3, far above 0.06,
  // and 745.2/14.416 = 51.7 above 0.15 → two warnings, no error.
  const Problems tonnes = check_target(kDemoTarget, kWltpSpeeds, 1.47, cell(8000.0, 142.0));
  EXPECT_EQ(count(tonnes, Problem::Severity::warning), 2);
  EXPECT_EQ(count(tonnes, Problem::Severity::error), 0);
  // The coefficients in kN instead of N: 0.1622/14415.78 = 1.1e-5 and 0.7452/14415.78 = 5.2e-5, both far
  // below.
  const Problems kn = check_target(kDemoTarget.scaled(1e-3), kWltpSpeeds, kDemoMassKg, cell(8000.0, 142.0));
  EXPECT_EQ(count(kn, Problem::Severity::warning), 2);
  for (const auto& p : kn) EXPECT_TRUE(contains(p.message, "(TM·g)")) << p.message;
}

TEST(Envelope, NonFiniteTargetIsRefused) {
  EXPECT_TRUE(
      has_errors(check_target({142.0, std::nan(""), 0.033}, kWltpSpeeds, kDemoMassKg, cell(8000.0, 142.0))));
}

// ---------------------------------------------------------------------------------------------- check_set

TEST(Envelope, RunawaySetIsRefused) {
  // Issue 13: a controller that ignored the setting drove f0 from 71 to −2431 N and f2 to 0.33 (f1 taken as
  // the standard initial 0.2·0.35 = 0.07). At 12 km/h it asks −2431 + 0.84 + 47.52 = −2382.6 N (2.4 kN of
  // drive). On the demo cell (±8000 N, top 142 km/h): F_set(142) = −2431 + 9.94 + 6654.12 = 4233.06 N is
  // within the force limit, but target − set = 2573 + 0.28·v − 0.297·v² is 2573 + 39.76 − 5988.708 =
  // −3375.948 N at 142 km/h (its vertex 0.28/0.594 = 0.47 km/h gives only 2573.07 N), beyond the 1000 N
  // vehicle-loss limit.
  const RoadLoad runaway{-2431.0, 0.07, 0.33};
  EXPECT_NEAR(runaway.force_n(12.0), -2382.64, 1e-9);
  const SetCheck c = check_set(runaway, kDemoTarget, std::nullopt, cell(8000.0, 142.0));
  EXPECT_FALSE(c.ok);
  EXPECT_TRUE(contains(c.why, "target minus set is -3375.9 N at 142.0 km/h")) << c.why;
  EXPECT_TRUE(contains(c.why, "vehicle-loss limit of ±1000 N")) << c.why;
  EXPECT_FALSE(contains(c.why, "force limit")) << c.why;
  // On a cell limited to 3000 N the force limit names the top speed too (4233.1 N at 142 km/h).
  const SetCheck f = check_set(runaway, kDemoTarget, std::nullopt, cell(3000.0, 142.0));
  EXPECT_TRUE(contains(f.why, "asks 4233.1 N at 142.0 km/h, beyond the cell's force limit of ±3000 N"))
      << f.why;
  // A drive (negative) force counts as much as a brake force: top 50 km/h, largest |F| is −2431 N at 0 km/h.
  const SetCheck d = check_set(runaway, kDemoTarget, std::nullopt, cell(2000.0, 50.0));
  EXPECT_TRUE(contains(d.why, "asks -2431.0 N at 0.0 km/h")) << d.why;
}

TEST(Envelope, HonestFirstSetPasses) {
  // The standard initial setting of the demo target (0.5·142, 0.2·0.35, 0.033) = (71, 0.07, 0.033)
  // (docs/standards.md §3, from memory): target − set = 71 + 0.28·v, largest 71 + 39.76 = 110.76 N at 142
  // km/h (≤ 1000 N); the set's own largest force F(142) = 71 + 9.94 + 665.412 = 746.352 N (≤ 8000 N).
  const SetCheck c = check_set({71.0, 0.07, 0.033}, kDemoTarget, std::nullopt, cell(8000.0, 142.0));
  EXPECT_TRUE(c.ok) << c.why;
  EXPECT_TRUE(c.why.empty());
}

TEST(Envelope, TooLargeAStepIsRefused) {
  // From (71, 0.07, 0.033) to (71, 0.07, 0.058): the step is 0.025·v², 0.025·142² = 504.1 N at 142 km/h,
  // above the 500 N step limit; target − next = 71 + 0.28·v − 0.025·v² stays within ±1000 N (−393.34 N at 142
  // km/h).
  const RoadLoad prev{71.0, 0.07, 0.033}, next{71.0, 0.07, 0.058};
  const SetCheck c = check_set(next, kDemoTarget, prev, cell(8000.0, 142.0));
  EXPECT_FALSE(c.ok);
  EXPECT_TRUE(contains(c.why, "change by 504.1 N at 142.0 km/h since the last write")) << c.why;
  EXPECT_FALSE(contains(c.why, "vehicle-loss")) << c.why;
  // The same step up to 130 km/h only: 0.025·130² = 422.5 N, within 500 N.
  EXPECT_TRUE(check_set(next, kDemoTarget, prev, cell(8000.0, 130.0)).ok);
  // No previous write: no step to check.
  EXPECT_TRUE(check_set(next, kDemoTarget, std::nullopt, cell(8000.0, 142.0)).ok);
  // A value equal to its limit passes: f0 71 → 571 is a step of exactly 500 N (exact in binary); 571.5 is
  // not.
  EXPECT_TRUE(check_set({571.0, 0.07, 0.033}, kDemoTarget, prev, cell(8000.0, 142.0)).ok);
  EXPECT_FALSE(check_set({571.5, 0.07, 0.033}, kDemoTarget, prev, cell(8000.0, 142.0)).ok);
}

TEST(Envelope, NonFiniteOrUnsetIsRefused) {
  EXPECT_FALSE(check_set({71.0, 0.07, std::numeric_limits<double>::infinity()}, kDemoTarget, std::nullopt,
                         cell(8000.0, 142.0))
                   .ok);
  EXPECT_FALSE(
      check_set({71.0, 0.07, 0.033}, kDemoTarget, RoadLoad{std::nan(""), 0.0, 0.0}, cell(8000.0, 142.0)).ok);
  EXPECT_FALSE(check_set({71.0, 0.07, 0.033}, kDemoTarget, std::nullopt, EnvelopeLimits{}).ok);
  EnvelopeLimits no_step = cell(8000.0, 142.0);
  no_step.max_step_n = std::nan("");
  EXPECT_FALSE(check_set({71.0, 0.07, 0.033}, kDemoTarget, std::nullopt, no_step).ok);
}

// ---------------------------------------------------------------------------------------------- divergence

namespace {

// Sets that follow a deviation sequence the way §8.1.4 does for a constant offset: each adjustment moves f0
// by the deviation, towards lowering the measured curve when sign > 0.
struct Step {
  double deviation_n;
  int sign;
};
std::optional<std::string> feed(DivergenceWatch& w, const std::vector<Step>& steps,
                                std::size_t* fired_at = nullptr) {
  RoadLoad set{71.0, 0.07, 0.033};
  for (std::size_t i = 0; i < steps.size(); ++i) {
    w.add(set, kDemoTarget, steps[i].deviation_n);
    if (w.verdict()) {
      if (fired_at) *fired_at = i + 1;
      return w.verdict();
    }
    set.f0_n -= steps[i].sign * steps[i].deviation_n;
  }
  return std::nullopt;
}

// The loop of GTR 15 §8.1.3–8.1.4 against a simple linear dyno: measured force at each reference speed =
// gain·F_set + F_loss + noise (or, for a controller that does not apply the setting, F_first set + F_loss +
// noise); regression (§8.1.3.3), tolerance check (§8.1.3.4.2), A*d = Ad + At − As on a failure, same setting
// on a pass. Runs `coastdowns` coast-downs regardless of acceptance, which is harsher than a session (it
// stops at two passes).
struct Loop {
  double noise_sd_n = 0.0;
  double gain = 1.0;
  bool applies = true;
  RoadLoad loss{90.0, 0.4,
                0.004};  // the vehicle's own loss on the rollers: 90 + 36 + 32.4 = 158.4 N at 90 km/h
};
struct LoopResult {
  std::optional<std::string> verdict;
  int fired_at = 0;  // coast-down number, 1-based
  std::vector<double> deviations_n;
};
LoopResult run_loop(const Loop& m, unsigned seed, int coastdowns, double tolerance_n = 10.0) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> noise(0.0, 1.0);
  DivergenceWatch watch(tolerance_n);
  const RoadLoad first = standard_initial_setting(kDemoTarget, AxleLayout::single_axle, InitialSettingRule{});
  RoadLoad set = first;
  LoopResult out;
  for (int k = 1; k <= coastdowns; ++k) {
    std::vector<double> forces;
    for (double v : kWltpSpeeds)
      forces.push_back((m.applies ? m.gain * set.force_n(v) : first.force_n(v)) + m.loss.force_n(v) +
                       m.noise_sd_n * noise(rng));
    const RoadLoadFit fit = fit_road_load(kWltpSpeeds, forces);
    EXPECT_TRUE(fit.ok);
    const ToleranceCheck tc = check_tolerance(kDemoTarget, fit.coefficients, kWltpSpeeds, tolerance_n);
    out.deviations_n.push_back(tc.worst_abs_deviation_n);
    watch.add(set, kDemoTarget, fit.coefficients, tc.worst_abs_deviation_n);
    if (watch.verdict() && !out.verdict) {
      out.verdict = watch.verdict();
      out.fired_at = k;
    }
    if (!tc.pass) set = adjusted_setting(kDemoTarget, set, fit.coefficients);
  }
  return out;
}
double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v[v.size() / 2];
}

}  // namespace

TEST(Divergence, HonestConvergenceDoesNotFire) {
  // The brief's sequence: 40, 12, 9, 11, 8 N, each adjustment in a random-looking direction (tolerance 10 N,
  // margin 30 N): only the first is outside the margin.
  DivergenceWatch w(10.0);
  EXPECT_EQ(feed(w, {{40, 1}, {12, -1}, {9, 1}, {11, 1}, {8, -1}, {10.5, -1}, {9.5, 1}}), std::nullopt);
  // Noise near the tolerance, every coast-down just outside it and each adjustment's direction random, as it
  // is for noise: never three moves away from the target in a row (rule 2) and never above the 30 N margin
  // (rule 1).
  DivergenceWatch n(10.0);
  EXPECT_EQ(feed(n, {{11, 1}, {13, -1}, {10.5, 1}, {12, 1}, {10.2, -1}, {13, 1}, {10.1, 1}, {11.5, -1}}),
            std::nullopt);
}

TEST(Divergence, NoisyLinearLoopsNeverFire) {
  // Many seeds of the honest loop at four noise levels; at σ = 8 N per reference speed the median worst
  // deviation after the first adjustment is about the tolerance, so "noise near the tolerance" is covered
  // (checked below).
  for (double sd : {0.0, 2.0, 4.0, 8.0}) {
    std::vector<double> later;
    for (unsigned seed = 1; seed <= 1000; ++seed) {
      const LoopResult r = run_loop({sd}, seed, 12);
      EXPECT_FALSE(r.verdict) << "σ " << sd << " seed " << seed << ": " << r.verdict.value_or("");
      later.insert(later.end(), r.deviations_n.begin() + 2, r.deviations_n.end());
    }
    const auto failing = std::count_if(later.begin(), later.end(), [](double d) { return d > 10.0; });
    std::printf(
        "σ %.0f N: median worst deviation after the first adjustment %.2f N, %ld of %zu outside ±10 N\n", sd,
        median(later), static_cast<long>(failing), later.size());
    if (sd == 8.0) {
      EXPECT_GT(median(later), 7.0) << "the noise is not near the tolerance: the test would be too easy";
      EXPECT_LT(median(later), 13.0);
      EXPECT_GT(failing, 2500) << "too few coast-downs outside the tolerance to exercise the rules";
    }
  }
}

TEST(Divergence, ControllersWithAGainErrorStillConvergeWithoutFiring) {
  // A controller applying 0.7 or 1.3 times the change converges geometrically (error × 0.3 per adjustment):
  // no verdict at σ = 4 N.
  for (double gain : {0.7, 1.3})
    for (unsigned seed = 1; seed <= 300; ++seed)
      EXPECT_FALSE(run_loop({4.0, gain}, seed, 12).verdict) << gain << " " << seed;
}

TEST(Divergence, SettingNotAppliedWithASmallDeviationFiresByRule3) {
  // The controller keeps its first setting, which is 12–20 N off: rules 1 and 2 need more (above 3·T, or the
  // set moving away by most of each deviation); the measured curve not moving with the set shows it within
  // three adjustments (the fourth coast-down). Constructed: first set = target − loss + a 15 N offset.
  const RoadLoad loss{90.0, 0.4, 0.004};
  for (unsigned seed = 1; seed <= 200; ++seed) {
    std::mt19937 rng(seed);
    std::normal_distribution<double> noise(0.0, 2.0);
    DivergenceWatch watch(10.0);
    const RoadLoad first = kDemoTarget - loss + RoadLoad{15.0, 0.0, 0.0};
    RoadLoad set = first;
    int fired = 0;
    for (int k = 1; k <= 8 && !fired; ++k) {
      std::vector<double> forces;
      for (double v : kWltpSpeeds) forces.push_back(first.force_n(v) + loss.force_n(v) + noise(rng));
      const RoadLoadFit fit = fit_road_load(kWltpSpeeds, forces);
      const ToleranceCheck tc = check_tolerance(kDemoTarget, fit.coefficients, kWltpSpeeds, 10.0);
      watch.add(set, kDemoTarget, fit.coefficients, tc.worst_abs_deviation_n);
      if (watch.verdict()) fired = k;
      set = adjusted_setting(kDemoTarget, set, fit.coefficients);
    }
    ASSERT_GT(fired, 0) << "seed " << seed;
    EXPECT_LE(fired, 4) << "seed " << seed;
    EXPECT_NE(watch.verdict()->find("moved with it by a factor of only"), std::string::npos)
        << *watch.verdict();
  }
}

TEST(Divergence, SettingNotAppliedFiresWithinThreeAdjustments) {
  // Issue 13: the controller accepts the setting but its coast-down does not respond. Measured curve fixed at
  // target + 70 N: the deviation is 70 N each time, the set moves 70 N further from the target with each
  // adjustment. Rule 1 (70 > 30 N and 70 ≥ 0.8·70) fires at the third coast-down, after two adjustments; not
  // before.
  DivergenceWatch w(10.0);
  RoadLoad set{71.0, 0.07, 0.033};
  for (int k = 1; k <= 3; ++k) {
    EXPECT_FALSE(w.verdict()) << "fired before two adjustments, at coast-down " << k;
    w.add(set, kDemoTarget, 70.0);
    set = adjusted_setting(kDemoTarget, set, kDemoTarget + RoadLoad{70.0, 0.0, 0.0});  // f0 − 70 N
  }
  ASSERT_TRUE(w.verdict());
  EXPECT_EQ(w.verdict()->rfind("the controller does not follow the setting: ", 0), 0u) << *w.verdict();
  EXPECT_TRUE(contains(*w.verdict(), "70.0, 70.0, 70.0 N")) << *w.verdict();

  // The full loop with noise: the dyno keeps the first setting's curve. From the standard initial setting the
  // deviation is loss − (target − set) = (19, 0.12, 0.004) → 19 + 15.6 + 67.6 = 102.2 N at 130 km/h: rule 1
  // fires at coast-down 3 for every seed.
  for (unsigned seed = 1; seed <= 200; ++seed) {
    Loop m;
    m.noise_sd_n = 3.0;
    m.applies = false;
    const LoopResult r = run_loop(m, seed, 8);
    ASSERT_TRUE(r.verdict) << seed;
    EXPECT_EQ(r.fired_at, 3) << seed;  // after two adjustments (the brief asks: within three)
  }
}

TEST(Divergence, SettingNotAppliedInsideTheMarginFiresByRule2) {
  // The measured curve fixed 15 N above the target (between T = 10 and M = 30 N): rule 1 cannot fire; the set
  // moves 15 N further away with each adjustment (|target − set| = 15, 30, 45, 60 N: +15 ≥ 0.75·15 each, +45
  // > 30 in all), so rule 2 fires at the fourth coast-down, after three adjustments.
  DivergenceWatch w(10.0);
  RoadLoad set = kDemoTarget - RoadLoad{15.0, 0.0, 0.0};
  std::size_t fired = 0;
  for (std::size_t k = 1; k <= 6 && !w.verdict(); ++k) {
    w.add(set, kDemoTarget, 15.0);
    if (w.verdict()) fired = k;
    set = set - RoadLoad{15.0, 0.0, 0.0};
  }
  EXPECT_EQ(fired, 4u);
  ASSERT_TRUE(w.verdict());
  EXPECT_TRUE(contains(*w.verdict(), "moved away from the target on each of the last three adjustments"))
      << *w.verdict();
}

TEST(Divergence, Rule2OutwardShareBoundary) {
  // An honest noisy pattern seen in the loop model: deviations 14.7, 12.9, 10.6, 11.0 N while f0
  // fell 14.7, 8.2 and 7.3 N (|target − set| = 142 − f0 + 0.28·130 grows by the same). 8.2 < 0.75·12.9
  // = 9.675: not the signature of an ignored setting, no verdict. With moves of 14.7, 9.7 and 8.0 N (≥ 9.675
  // and ≥ 0.75·10.6 = 7.95; 32.4 N > 30 N in all) it is, and rule 2 fires at the fourth setting.
  auto run = [](std::vector<double> f0s) {
    const std::vector<double> d = {14.7, 12.9, 10.6, 11.0};
    DivergenceWatch w(10.0);
    for (std::size_t i = 0; i < d.size(); ++i) w.add({f0s[i], 0.07, 0.033}, kDemoTarget, d[i]);
    return w.verdict();
  };
  EXPECT_FALSE(run({71.0, 71.0 - 14.7, 71.0 - 22.9, 71.0 - 30.2}));
  EXPECT_TRUE(run({71.0, 71.0 - 14.7, 71.0 - 24.4, 71.0 - 32.4}));
}

TEST(Divergence, Rule1RatioBoundary) {
  // 70, 60, 56: 56 ≥ 0.8·70 = 56 → fires; 70, 60, 55.9 → does not (the deviation shrank by more than 20 %).
  DivergenceWatch a(10.0), b(10.0);
  std::size_t at = 0;
  EXPECT_TRUE(feed(a, {{70, 1}, {60, 1}, {56, 1}}, &at));
  EXPECT_EQ(at, 3u);
  EXPECT_FALSE(feed(b, {{70, 1}, {60, 1}, {55.9, 1}}));
  // All three must be outside the margin (30 N): 70, 29.9, 70 does not fire.
  DivergenceWatch c(10.0);
  EXPECT_FALSE(feed(c, {{70, 1}, {29.9, -1}, {70, 1}}));
}

TEST(Divergence, RepeatedSettingIsNotAnAdjustment) {
  // Fixed-run runs 2–4 and passes keep the same setting: a constant 50 N deviation at one setting is no
  // evidence that the controller ignores changes (there were none).
  DivergenceWatch w(10.0);
  for (int k = 0; k < 5; ++k) w.add({71.0, 0.07, 0.033}, kDemoTarget, 50.0);
  EXPECT_FALSE(w.verdict());
  // Then two real adjustments with the deviation unchanged: fires.
  w.add({21.0, 0.07, 0.033}, kDemoTarget, 50.0);
  EXPECT_FALSE(w.verdict());
  w.add({-29.0, 0.07, 0.033}, kDemoTarget, 50.0);
  EXPECT_TRUE(w.verdict());
}

TEST(Divergence, NonFiniteFiresAndTheVerdictStays) {
  DivergenceWatch w(10.0);
  w.add({71.0, 0.07, 0.033}, kDemoTarget, std::nan(""));
  ASSERT_TRUE(w.verdict());
  const std::string first = *w.verdict();
  w.add({71.0, 0.07, 0.033}, kDemoTarget, 1.0);
  EXPECT_EQ(*w.verdict(), first);
}

TEST(Divergence, ALoopTrackingAVehicleWhoseLossesStillFallDoesNotFire) {
  // A vehicle still warming (docs/standards.md §3.12): its loss falls by 6 N at every speed between two
  // coast-downs. The loop adjusts after every coast-down by §8.1.4 (GTR 15 Annex 4); the set rises by about
  // 6 N each time while the measured load stays about 6 N below the target (within T = 10 N): over three
  // adjustments the set moves about 18 N and the measured load hardly at all, r ≈ 0. That is the loop in
  // control of a drifting vehicle, not a controller that ignores the setting: rule 3 must not fire while a
  // deviation of the span is within tolerance (2 N noise per speed, 200 seeds). At 6 N the set moves less
  // than rule 3's 2.5·T; at 8 N (about 24–27 N over three adjustments) it fired for 63 of the 200 seeds
  // before rule 3 needed every deviation of the span above T (measured once here). Unit arithmetic on
  // constructed curves.
  const RoadLoad loss0{90.0, 0.4, 0.004};
  for (double drift : {6.0, 8.0}) {
    int fired = 0;
    for (unsigned seed = 1; seed <= 200; ++seed) {
      std::mt19937 rng(seed);
      std::normal_distribution<double> noise(0.0, 2.0);
      DivergenceWatch watch(10.0);
      RoadLoad set = kDemoTarget - loss0;
      for (int k = 0; k < 8; ++k) {
        const RoadLoad loss = loss0 - RoadLoad{drift * k, 0.0, 0.0};
        std::vector<double> forces;
        for (double v : kWltpSpeeds) forces.push_back(set.force_n(v) + loss.force_n(v) + noise(rng));
        const RoadLoadFit fit = fit_road_load(kWltpSpeeds, forces);
        const ToleranceCheck tc = check_tolerance(kDemoTarget, fit.coefficients, kWltpSpeeds, 10.0);
        watch.add(set, kDemoTarget, fit.coefficients, tc.worst_abs_deviation_n);
        set = adjusted_setting(kDemoTarget, set, fit.coefficients);
      }
      fired += watch.verdict().has_value();
    }
    std::printf("drift %.0f N per coast-down: rule 3 fired in %d of 200 seeds\n", drift, fired);
    if (drift == 6.0)
      EXPECT_EQ(fired, 0);
    else
      EXPECT_LE(fired, 10);  // 8 N + noise is often above T: rare, no longer half of them
  }
}
