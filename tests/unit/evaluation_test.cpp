// One coast-down from trace to verdict (core/evaluation.hpp) against numbers computed outside loadtrim: exact
// band times from the textbook closed-form coast-down, the standard's band-force formula (UN GTR 15 Annex 4
// §8.1.3.2), the least-squares quadratic through them (§8.1.3.3) done by numpy, and the tolerance rule of
// §8.1.3.4.2.
//
// The reference values below were computed once with numpy 1.24 (Debian 12 python3-numpy) by this script:
//   m = 1542.75; vs = np.arange(20, 131, 10.0)
//   a, b, c = f0, f1*3.6, f2*3.6**2                       # SI
//   K = np.sqrt(4*a*c - b*b)/(2*c)
//   t = lambda v: -(m/(c*K))*np.arctan((v/3.6 + b/(2*c))/K)   # ∫ m du/(−C(u² + K²)), table integral
//   F = (1/3.6)*m*10.0/(t(vs - 5) - t(vs + 5))          # §8.1.3.2 with Δv = 5 km/h
//   C2, C1, C0 = np.polyfit(vs, F, 2)                    # §8.1.3.3
#include "core/evaluation.hpp"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <vector>

#include "core/warm_up_drift.hpp"
#include "support/test_support.hpp"

using namespace loadtrim;

namespace {
const std::vector<double> kSpeeds = {20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130};
const core::RoadLoad kTarget{100, 0.5, 0.03};  // docs/standards.md §6.2
constexpr double kMass = 1542.75;              // TM 1500 + m_r 42.75 kg (docs/standards.md §6.2)

core::Profile profile() {
  core::Profile p;
  p.name = "test";
  p.reference_speeds_kmh =
      kSpeeds;  // band half-width 5 km/h, tolerance 10 N, disagreement flag 5 N: defaults
  return p;
}

core::CoastdownEvaluation evaluate(const core::RoadLoad& truth, const core::Profile& p,
                                   double v0_kmh = 142.0) {
  const auto tr = loadtrim::testing::exact_trace(truth, kMass, v0_kmh, 10.0, 100.0);
  return core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
}
}  // namespace

TEST(Evaluation, BandForcesAndRegressionMatchNumpy) {
  // numpy (script above) for the curve (100, 0.5, 0.03): F_mj at 20…130 km/h and the regressed As, Bs, Cs.
  const double f_numpy[] = {122.05330172913047, 141.94051444592833, 167.83382040391504, 199.7404602867317,
                            237.66214234303507, 281.59780405022434, 331.5453867538782,  387.502719359728,
                            449.4678713228969,  517.4392470078733,  591.415572490639,   671.395846777704};
  const core::RoadLoad regressed_numpy{100.29599296035663, 0.4864952214327834, 0.030051308950585578};
  const auto e = evaluate(kTarget, profile());
  ASSERT_TRUE(e.usable) << e.unusable_reason;
  ASSERT_EQ(e.bands.size(), kSpeeds.size());
  // Crossing times from 100 Hz samples are good to about 2e-5 s (trace_analysis_test), i.e. a few mN here.
  for (std::size_t j = 0; j < kSpeeds.size(); ++j)
    EXPECT_NEAR(e.bands[j].force_n, f_numpy[j], 5e-3) << kSpeeds[j];
  for (double v : kSpeeds) EXPECT_NEAR(e.fit.coefficients.force_n(v), regressed_numpy.force_n(v), 5e-3) << v;
  EXPECT_NEAR(e.fit.coefficients.f0_n, regressed_numpy.f0_n, 0.02);
  EXPECT_NEAR(e.fit.coefficients.f2_n_per_kmh2, regressed_numpy.f2_n_per_kmh2, 2e-6);
}

TEST(Evaluation, EstimatorDisagreementIsTheBandIntegralBias) {
  // The whole-trace fit returns the true curve; the band regression carries the band-integral bias. numpy:
  // the regressed curve minus the true one at 20…130 km/h runs from +0.046 to −0.5925 N, largest |·|
  // 0.5925069884852974 N at 130 km/h. So the reported disagreement is that value, below the 5 N flag; a
  // profile flagging above 0.3 N (a threshold chosen for the test) must flag it.
  auto p = profile();
  const auto e = evaluate(kTarget, p);
  ASSERT_TRUE(e.usable) << e.unusable_reason;
  ASSERT_TRUE(e.whole_trace.ok) << e.whole_trace.message;
  EXPECT_NEAR(e.estimator_disagreement_n, 0.5925069884852974, 0.03);
  EXPECT_FALSE(e.estimators_disagree);
  p.estimator_disagreement_n = 0.3;
  EXPECT_TRUE(evaluate(kTarget, p).estimators_disagree);
  // Without the whole-trace estimator nothing is compared and nothing is flagged.
  core::EvaluationOptions off;
  off.whole_trace = false;
  const auto tr = loadtrim::testing::exact_trace(kTarget, kMass, 142.0, 10.0, 100.0);
  const auto e2 = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass, off);
  EXPECT_TRUE(e2.usable);
  EXPECT_FALSE(e2.whole_trace.ok);
  EXPECT_EQ(e2.estimator_disagreement_n, 0.0);
  EXPECT_FALSE(e2.estimators_disagree);
}

TEST(Evaluation, TheWholeTraceConfirmationRefusesAPassItsCurveDoesNotMake) {
  // acceptance.whole_trace_confirms (docs/standards.md §3.11, lab policy). The vehicle on the rollers is the
  // target plus 10.3 N·(v/130 km/h)², i.e. f2 = 0.03 + 10.3/130² = 0.0306094674556213 N/(km/h)². numpy (the
  // script above with f2 changed): the band regression minus the target runs from 0.2894 N at 20 km/h to
  // 9.6937 N at 130 km/h (every speed within ±10 N: the standard's simple verdict passes); the true curve
  // minus the target is 10.3 N at 130 km/h, outside. The whole-trace fit returns the true curve (the test
  // above, within 0.03 N), so the confirmation must refuse the pass and name 130 km/h.
  const core::RoadLoad vehicle{100, 0.5, 0.0306094674556213};
  auto p = profile();
  const auto plain = evaluate(vehicle, p);
  ASSERT_TRUE(plain.usable) << plain.unusable_reason;
  EXPECT_TRUE(plain.check.pass);
  EXPECT_NEAR(plain.check.worst_abs_deviation_n, 9.6937, 0.01);
  EXPECT_TRUE(plain.confirmation.empty());
  EXPECT_FALSE(plain.whole_trace_check.has_value());

  p.whole_trace_confirms = true;
  const auto e = evaluate(vehicle, p);
  ASSERT_TRUE(e.usable) << e.unusable_reason;
  ASSERT_TRUE(e.whole_trace.ok) << e.whole_trace.message;
  ASSERT_TRUE(e.whole_trace_check.has_value());
  EXPECT_FALSE(e.whole_trace_check->pass);
  EXPECT_NEAR(e.whole_trace_check->rows.back().deviation_n, 10.3, 0.03);
  EXPECT_FALSE(e.check.pass);
  EXPECT_TRUE(e.confirmation_refused);
  EXPECT_NE(e.confirmation.find("not confirmed"), std::string::npos) << e.confirmation;
  EXPECT_NE(e.confirmation.find("130 km/h"), std::string::npos) << e.confirmation;
  // The band rows are the standard's, untouched: the refusal is the confirmation's alone.
  for (const auto& r : e.check.rows) EXPECT_TRUE(r.pass) << r.speed_kmh;

  // A vehicle on the target: both agree, the pass stands and says it was confirmed. Even with the session's
  // whole-trace estimator switched off, the profile's confirmation computes it.
  core::EvaluationOptions off;
  off.whole_trace = false;
  const auto tr = loadtrim::testing::exact_trace(kTarget, kMass, 142.0, 10.0, 100.0);
  const auto ok = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass, off);
  ASSERT_TRUE(ok.usable);
  EXPECT_TRUE(ok.whole_trace.ok);
  EXPECT_TRUE(ok.check.pass);
  EXPECT_FALSE(ok.confirmation_refused);
  EXPECT_NE(ok.confirmation.find("confirmed by the whole-trace curve"), std::string::npos) << ok.confirmation;

  // The confirmation never turns a fail into a pass: a vehicle 40 N above the target fails by the bands.
  const core::RoadLoad far{140, 0.5, 0.03};  // 40 N above the target at every speed (unit arithmetic)
  const auto e3 = evaluate(far, p);
  ASSERT_TRUE(e3.usable);
  EXPECT_FALSE(e3.check.pass);
  EXPECT_FALSE(e3.confirmation_refused);
}

TEST(Evaluation, ToleranceVerdictFollowsTheStandardRowByRow) {
  // GTR 15 Annex 4 §8.1.3.4.2 (docs/analysis.md, "Tolerance, adjustment, methods";
  // config/profiles/wltp-iterative): the regressed forces must be within ±10 N of the target at every
  // reference speed. The vehicle on the rollers has the target curve plus a constant offset; numpy (script
  // above, run on f0 = 100 + offset) gives the deviations the check must see:
  //   offset  9.00 N: 9.0626 8.9549 8.8571 8.7690 8.6907 8.6222 8.5635 8.5146 8.4755 8.4462 8.4266 8.4169 →
  //   all pass offset 10.25
  //   N: 10.3147 10.2073 10.1096 10.0216 9.9434 9.8749 9.8161 9.7671 9.7278 9.6982 9.6783 9.6682
  //                   → 20…50 km/h out, 60…130 km/h in, so the coast-down fails.
  const double dev9[] = {9.0626, 8.9549, 8.8571, 8.7690, 8.6907, 8.6222,
                         8.5635, 8.5146, 8.4755, 8.4462, 8.4266, 8.4169};
  const double dev1025[] = {10.3147, 10.2073, 10.1096, 10.0216, 9.9434, 9.8749,
                            9.8161,  9.7671,  9.7278,  9.6982,  9.6783, 9.6682};
  const auto a = evaluate({109.0, 0.5, 0.03}, profile());
  ASSERT_TRUE(a.usable) << a.unusable_reason;
  ASSERT_EQ(a.check.rows.size(), kSpeeds.size());
  for (std::size_t j = 0; j < kSpeeds.size(); ++j) {
    EXPECT_NEAR(a.check.rows[j].deviation_n, dev9[j], 5e-3) << kSpeeds[j];
    EXPECT_TRUE(a.check.rows[j].pass) << kSpeeds[j];
  }
  EXPECT_TRUE(a.check.pass);

  const auto b = evaluate({110.25, 0.5, 0.03}, profile());
  ASSERT_TRUE(b.usable) << b.unusable_reason;
  for (std::size_t j = 0; j < kSpeeds.size(); ++j) {
    EXPECT_NEAR(b.check.rows[j].deviation_n, dev1025[j], 5e-3) << kSpeeds[j];
    EXPECT_EQ(b.check.rows[j].pass, kSpeeds[j] >= 60) << kSpeeds[j];
  }
  EXPECT_FALSE(b.check.pass);
  EXPECT_NEAR(b.check.worst_abs_deviation_n, 10.3147, 5e-3);
}

TEST(Evaluation, AGuardBandRefusesACoastDownWhoseUncertaintyStraddlesTheLimit) {
  // docs/standards.md §3.11: the same coast-down, judged by the standard's simple rule and by a guard band
  // (lab policy). The trace is the closed-form coast-down of target + 9 N with seeded N(0, 0.05 km/h) speed
  // noise, so each regressed force carries a standard error u > 0. The tolerance is set just above the worst
  // deviation, by less than k·u: the measured value is inside the tolerance, its uncertainty straddles the
  // limit. Simple acceptance passes every speed; the guard band fails the worst one (its limit is the
  // tolerance − k·u, below the worst deviation). u is recorded under both rules.
  auto tr = loadtrim::testing::exact_trace({109.0, 0.5, 0.03}, kMass, 142.0, 10.0, 100.0);
  std::mt19937_64 rng(7);
  std::normal_distribution<double> noise(0.0, 0.05);
  for (double& v : tr.speed_kmh) v += noise(rng);
  core::Profile p = profile();
  const auto first = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
  ASSERT_TRUE(first.usable) << first.unusable_reason;
  double worst = 0, u_min = 1e9;
  for (const auto& r : first.check.rows) {
    worst = std::max(worst, std::abs(r.deviation_n));
    u_min = std::min(u_min, r.u_n);
  }
  ASSERT_GT(u_min, 0.0);
  p.decision_rule.coverage_k = 2.0;
  p.tolerance_n = worst + 0.5 * p.decision_rule.coverage_k * u_min;
  const auto simple = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
  EXPECT_TRUE(simple.check.pass);
  p.decision_rule.kind = core::DecisionRule::Kind::guard_band;
  const auto banded = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
  EXPECT_FALSE(banded.check.pass);
  ASSERT_EQ(banded.check.rows.size(), simple.check.rows.size());
  for (std::size_t j = 0; j < banded.check.rows.size(); ++j) {
    const auto& r = banded.check.rows[j];
    EXPECT_DOUBLE_EQ(r.u_n, simple.check.rows[j].u_n);
    EXPECT_NEAR(r.limit_n, p.tolerance_n - 2.0 * r.u_n, 1e-12);
    EXPECT_EQ(r.pass, std::abs(r.deviation_n) <= r.limit_n);
  }
}

TEST(Evaluation, AMissingBandMakesTheRunUnusable) {
  // The standard regresses every reference speed (§8.1.3.3), so a coast-down released at 132 km/h, below the
  // top band's upper edge of 135 km/h, is repeated, not patched (docs/analysis.md, step 3): no regression, no
  // verdict, and the reason names the band.
  const auto e = evaluate(kTarget, profile(), 132.0);
  EXPECT_FALSE(e.usable);
  EXPECT_NE(e.unusable_reason.find("130 km/h"), std::string::npos) << e.unusable_reason;
  EXPECT_EQ(e.unusable_reason.find("120 km/h"), std::string::npos) << e.unusable_reason;
  EXPECT_FALSE(e.fit.ok);
  EXPECT_TRUE(e.check.rows.empty());
  ASSERT_EQ(e.bands.size(), kSpeeds.size());
  EXPECT_EQ(e.bands.back().status, core::BandStatus::not_reached);
}

TEST(WarmUpDrift, TheFirstOrderWarmingCurveIsRecovered) {
  // docs/standards.md §3.12: F(t) = F∞ + A·exp(−t/τ) (first-order response, textbook). Windows every 30 s
  // over 20 min of F∞ = 80 N, A = 20 N, τ = 600 s with seeded N(0, 0.3 N) noise: the fit recovers the three
  // within a few per cent, and the drift still to come at t = 1500 s is 20·e^(−2.5) = 1.64 N (by hand).
  std::vector<core::DriftPoint> pts;
  std::mt19937_64 rng(11);
  std::normal_distribution<double> noise(0.0, 0.3);
  for (double t = 15.0; t < 1200.0; t += 30.0)
    pts.push_back({t, 80.0 + 20.0 * std::exp(-t / 600.0) + noise(rng)});
  const core::WarmUpCurve c = core::fit_warm_up_curve(pts);
  ASSERT_TRUE(c.ok) << c.why;
  EXPECT_NEAR(c.tau_s / 600.0, 1.0, 0.1);
  EXPECT_NEAR(c.amplitude_n / 20.0, 1.0, 0.05);
  EXPECT_NEAR(c.settled_n, 80.0, 1.0);
  EXPECT_FALSE(c.tau_at_bound);
  EXPECT_NEAR(c.remaining_drift_n(1500.0), 20.0 * std::exp(-2.5), 0.3);
  EXPECT_LT(c.rms_residual_n, 0.5);
  // Too few windows, a NaN, or a flat line that no τ resolves: said, never a made-up curve.
  EXPECT_FALSE(core::fit_warm_up_curve(std::span(pts).first(3)).ok);
  auto bad = pts;
  bad[4].force_n = std::nan("");
  EXPECT_FALSE(core::fit_warm_up_curve(bad).ok);
  std::vector<core::DriftPoint> line;
  for (double t = 15.0; t < 300.0; t += 30.0) line.push_back({t, 100.0 - 0.01 * t});
  const core::WarmUpCurve l = core::fit_warm_up_curve(line);
  ASSERT_TRUE(l.ok);
  EXPECT_TRUE(l.tau_at_bound) << "a straight fall over 5 min does not show where warming ends";
}

TEST(WarmUpDrift, TheCurveForecastsTheChangeBetweenTwoCoastDowns) {
  // docs/standards.md §3.16: the change the curve predicts from t1 to t2 is A·(e^(−t2/τ) − e^(−t1/τ))
  // (first-order response, textbook). Windows every 60 s over the first 1000 s of F∞ = 120 N, A = 40 N, τ =
  // 2000 s (a slow warming: the decay is not over when the windows end) with seeded N(0, 0.1 N) noise; from
  // 1300 to 1520 s the truth falls by 40·(e^(−0.76) − e^(−0.65)) = 40·(0.46767 − 0.52205) = −2.175 N (by
  // hand). The fit extrapolates it within 15 % (common practice, no source).
  std::vector<core::DriftPoint> pts;
  std::mt19937_64 rng(5);
  std::normal_distribution<double> noise(0.0, 0.1);
  for (double t = 30.0; t < 1000.0; t += 60.0)
    pts.push_back({t, 120.0 + 40.0 * std::exp(-t / 2000.0) + noise(rng)});
  const core::WarmUpCurve c = core::fit_warm_up_curve(pts);
  ASSERT_TRUE(c.ok) << c.why;
  const auto change = core::predicted_change_n(c, 1300.0, 1520.0);
  ASSERT_TRUE(change.has_value());
  const double truth = 40.0 * (std::exp(-1520.0 / 2000.0) - std::exp(-1300.0 / 2000.0));
  EXPECT_NEAR(truth, -2.175, 0.001);
  EXPECT_NEAR(*change / truth, 1.0, 0.15);
  // Nothing is forecast from a curve that is not the vehicle's: unresolved (τ at the bound), not fitted, a
  // worse fit than the bound, or times out of order or not finite.
  std::vector<core::DriftPoint> line;
  for (double t = 15.0; t < 300.0; t += 30.0) line.push_back({t, 100.0 - 0.01 * t});
  const core::WarmUpCurve l = core::fit_warm_up_curve(line);
  ASSERT_TRUE(l.tau_at_bound);
  EXPECT_FALSE(core::predicted_change_n(l, 400.0, 600.0).has_value());
  EXPECT_FALSE(core::predicted_change_n(core::WarmUpCurve{}, 400.0, 600.0).has_value());
  EXPECT_FALSE(core::predicted_change_n(c, 1300.0, 1520.0, c.rms_residual_n * 0.5).has_value());
  EXPECT_FALSE(core::predicted_change_n(c, 1520.0, 1300.0).has_value());
  EXPECT_FALSE(core::predicted_change_n(c, std::nan(""), 1300.0).has_value());
  EXPECT_FALSE(core::predicted_change_n(c, -5.0, 1300.0).has_value());
}

namespace {
// When the warm-up's end rule (stable_by "trend", docs/standards.md §3.12) first says less than `within_n` is
// to come, for window means `force(t)` every 60 s from t = 30 s, at least `min_s` and at most 3600 s: that
// time.
template <class Force>
double trend_end_s(Force force, double within_n, double min_s = 300.0) {
  std::vector<core::DriftPoint> pts;
  for (double t = 60.0; t <= 3600.0; t += 60.0) {
    pts.push_back({t - 30.0, force(t - 30.0)});
    const auto left = core::remaining_drift_for_end_n(pts, t, core::kTrendHorizonS);
    if (t >= min_s && left && *left < within_n) return t;
  }
  return 3600.0;
}
}  // namespace

TEST(WarmUpDrift, TheEndRuleWaitsWhileTheForceStillFalls) {
  // docs/standards.md §3.12. Window means of 60 s, a warm-up of at least 300 s ended when less than 2 N is to
  // come. The truth's drift still to come at the end is computed by hand from its closed form; the rule must
  // not end a warm-up with more than 4 N of it left (twice the threshold: common practice, no source). (a)
  // Two time constants, 25 N over 60 s and 20 N over 900 s (the curve alone fits τ ≈ 80 s and ended at
  //     300 s with 14.5 N to come): 25·e^(−t/60) + 20·e^(−t/900).
  auto two = [](double t) { return 80.0 + 25.0 * std::exp(-t / 60.0) + 20.0 * std::exp(-t / 900.0); };
  const double t2 = trend_end_s(two, 2.0);
  EXPECT_LE(25.0 * std::exp(-t2 / 60.0) + 20.0 * std::exp(-t2 / 900.0), 4.0) << "ended at " << t2 << " s";
  EXPECT_LT(t2, 3600.0) << "it still ends";
  // (b) A start spike of 15 N in the first window on a 30 N, 600 s warming (the curve alone ended at 300 s
  // with
  //     18.2 N to come).
  auto spike = [](double t) { return 80.0 + 30.0 * std::exp(-t / 600.0) + (t < 60.0 ? 15.0 : 0.0); };
  const double ts = trend_end_s(spike, 2.0);
  EXPECT_LE(30.0 * std::exp(-ts / 600.0), 4.0) << "ended at " << ts << " s";
  // (c) One first-order warming, 30 N over 600 s: the closed form says 2 N is left at 600·ln(15) = 1625 s.
  // The
  //     slope of the last five windows is the slope 150 s before t (their middle), carried 600 s (= τ): it
  //     says 2 N at 1625 + 150 = 1775 s, so the rule ends at the next window's end, 1800 s (by hand).
  auto one = [](double t) { return 80.0 + 30.0 * std::exp(-t / 600.0); };
  const double t1 = trend_end_s(one, 2.0);
  EXPECT_GE(t1, 1625.0);
  EXPECT_LE(t1, 1800.0);
  // (d) The same with seeded N(0, 1 N) noise on the window means, 200 warm-ups: the curve alone left more
  // than
  //     4 N to come in 18 % of them; the rule in at most 2 % (common practice, no source).
  std::mt19937_64 rng(2026);
  std::normal_distribution<double> noise(0.0, 1.0);
  int early = 0;
  for (int k = 0; k < 200; ++k) {
    const double t = trend_end_s([&](double x) { return one(x) + noise(rng); }, 2.0);
    early += 30.0 * std::exp(-t / 600.0) > 4.0;
  }
  EXPECT_LE(early, 4) << early << " of 200 ended with more than 4 N to come";
  // Not enough windows, or a curve that cannot be fitted: no verdict.
  std::vector<core::DriftPoint> few = {{30, 100}, {90, 99}, {150, 98}, {210, 97}};
  EXPECT_FALSE(core::remaining_drift_for_end_n(few, 240.0, core::kTrendHorizonS).has_value());
}

TEST(Evaluation, AWholeTraceFitThatDidNotConvergeConfirmsNothing) {
  // The whole-trace fit starts from the band regression's coefficients: one stopped at its evaluation limit
  // returns about the band curve and would "confirm" the verdict it is meant to check (a hostile review saw
  // "confirmed ... worst 9.69 N" here). The vehicle is the one of TheWholeTraceConfirmationRefuses... (its
  // band regression passes); 8 evaluations stand for a fit that stalls on a noisy or hostile trace.
  const core::RoadLoad vehicle{100, 0.5, 0.0306094674556213};
  auto p = profile();
  p.whole_trace_confirms = true;
  core::EvaluationOptions o;
  o.whole_trace_options.max_evaluations = 8;
  const auto tr = loadtrim::testing::exact_trace(vehicle, kMass, 142.0, 10.0, 100.0);
  const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass, o);
  ASSERT_TRUE(e.usable);
  EXPECT_TRUE(e.whole_trace.ok);  // an estimate, but not a converged one
  EXPECT_FALSE(e.whole_trace.converged);
  EXPECT_FALSE(e.check.pass);
  EXPECT_TRUE(e.confirmation_refused);
  EXPECT_NE(e.confirmation.find("did not converge"), std::string::npos) << e.confirmation;
  // The converged fit of the same trace does converge (the default evaluation limit).
  const auto full = evaluate(vehicle, p);
  EXPECT_TRUE(full.whole_trace.converged) << full.whole_trace.message;
}

TEST(Evaluation, TheAdjustmentTakesTheWholeTraceCurveOnlyWhenItQualifies) {
  // method.adjust_from = "whole-trace" (docs/standards.md §3.17, lab policy). With speed noise at the GTR 15
  // §3.1 floor (0.2 km/h at 10 Hz), the whole-trace curve is the tighter estimate of the top speed's force
  // (docs/performance.md "Estimator spread"): across 30 traces of the textbook closed-form coast-down its
  // error at 130 km/h must be well under the band regression's (half of it here; the linearised spreads give
  // about a quarter). Acceptance is the band regression's with or without the option.
  auto p = profile();
  p.adjust_from = core::Profile::AdjustFrom::whole_trace;
  double sse_band = 0.0, sse_basis = 0.0;
  int whole = 0;
  for (std::uint64_t seed = 1; seed <= 30; ++seed) {
    const auto tr = loadtrim::testing::exact_trace(kTarget, kMass, 142.0, 10.0, 10.0, 0.2, seed);
    const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
    const auto plain = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, profile(), kTarget, kMass);
    ASSERT_TRUE(e.usable) << e.unusable_reason;
    EXPECT_EQ(e.check.pass, plain.check.pass);
    EXPECT_EQ(e.fit.coefficients.f0_n, plain.fit.coefficients.f0_n);
    EXPECT_FALSE(e.adjust_why.empty());
    if (e.adjust_from_whole_trace) {
      ++whole;
      EXPECT_EQ(e.adjust_why.rfind("whole-trace curve", 0), 0u) << e.adjust_why;
    } else {
      EXPECT_EQ(e.adjust_basis.f2_n_per_kmh2, e.fit.coefficients.f2_n_per_kmh2);
    }
    sse_band += std::pow(e.fit.coefficients.force_n(130) - kTarget.force_n(130), 2);
    sse_basis += std::pow(e.adjust_basis.force_n(130) - kTarget.force_n(130), 2);
    // Without the option there is nothing to say and the basis is the band regression's.
    EXPECT_TRUE(plain.adjust_why.empty());
    EXPECT_EQ(plain.adjust_basis.f1_n_per_kmh, plain.fit.coefficients.f1_n_per_kmh);
  }
  // Within the band regression's noise of it nearly always (3 u + 5 N): at least 27 of the 30 traces (90 %:
  // our bar, no source).
  EXPECT_GE(whole, 27);
  EXPECT_LT(std::sqrt(sse_basis), 0.5 * std::sqrt(sse_band));
}

TEST(Evaluation, TheAdjustmentKeepsTheBandRegressionWhenTheWholeTraceCurveDoesNotQualify) {
  // A whole-trace fit stopped at its evaluation limit started from the band curve: not an independent
  // estimate, so the adjustment keeps the band regression's and says why.
  auto p = profile();
  p.adjust_from = core::Profile::AdjustFrom::whole_trace;
  core::EvaluationOptions stalled;
  stalled.whole_trace_options.max_evaluations = 8;
  const auto tr = loadtrim::testing::exact_trace(kTarget, kMass, 142.0, 10.0, 100.0);
  const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass, stalled);
  ASSERT_TRUE(e.usable);
  EXPECT_FALSE(e.adjust_from_whole_trace);
  EXPECT_EQ(e.adjust_basis.f0_n, e.fit.coefficients.f0_n);
  EXPECT_NE(e.adjust_why.find("did not converge"), std::string::npos) << e.adjust_why;
  // Like with like: the whole-trace curve is F(v) itself, the band regression carries the band integral's
  // bias (0.59 N at 130 km/h here, EstimatorDisagreementIsTheBandIntegralBias). On a noise-free trace the
  // basis (the whole-trace curve's band forces, from the closed-form band times and the standard's formula,
  // regressed as the standard does) is the band regression's to 0.05 N at every speed, not 0.59 N off; with a
  // 0.3 N allowance (below that bias) it still qualifies.
  p.estimator_disagreement_n = 0.3;
  const auto same = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
  ASSERT_TRUE(same.adjust_from_whole_trace) << same.adjust_why;
  EXPECT_GT(std::abs(same.whole_trace.coefficients.force_n(130) - same.fit.coefficients.force_n(130)), 0.4);
  // 0.05 N: a twelfth of the 0.59 N bias and above the optimiser's stopping error (better than 0.01 N,
  // below); our bound, no source.
  for (double v : kSpeeds)
    EXPECT_NEAR(same.adjust_basis.force_n(v), same.fit.coefficients.force_n(v), 0.05) << v;
  // Never more than the tolerance apart, whatever the allowance: with a 1e-6 N tolerance the optimiser's own
  // stopping error (the two agree to better than 0.01 N here) is enough to keep the band regression.
  p.estimator_disagreement_n = 5.0;
  p.tolerance_n = 1e-6;
  const auto apart = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
  ASSERT_TRUE(apart.whole_trace.converged) << apart.whole_trace.message;
  EXPECT_FALSE(apart.adjust_from_whole_trace);
  EXPECT_EQ(apart.adjust_basis.f2_n_per_kmh2, apart.fit.coefficients.f2_n_per_kmh2);
  EXPECT_NE(apart.adjust_why.find("band-equivalent is"), std::string::npos) << apart.adjust_why;
}

TEST(Evaluation, TheBandsAreFittedOverTheProfilesCrossingWindow) {
  // bands.crossing_fit_half_width_kmh (docs/standards.md §2.10) reaches the evaluation: its band forces are
  // those of analyse_bands with that window, and differ from the 2.5 km/h window's on a noisy trace (0.2 km/h
  // at 10 Hz, the GTR 15 §3.1 floor).
  const auto tr = loadtrim::testing::exact_trace(kTarget, kMass, 142.0, 12.0, 10.0, 0.2, 7);
  auto p = profile();
  p.crossing_fit_half_width_kmh = 5.0;
  const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, kTarget, kMass);
  core::BandOptions wide, narrow;
  wide.fit_half_width_kmh = 5.0;
  narrow.fit_half_width_kmh = 2.5;
  const auto bw = core::analyse_bands({tr.time_s, tr.speed_kmh}, kSpeeds, 5.0, kMass, wide);
  const auto bn = core::analyse_bands({tr.time_s, tr.speed_kmh}, kSpeeds, 5.0, kMass, narrow);
  ASSERT_EQ(e.bands.size(), bw.size());
  double apart = 0.0;
  for (std::size_t i = 0; i < bw.size(); ++i) {
    EXPECT_EQ(e.bands[i].force_n, bw[i].force_n);
    apart = std::max(apart, std::abs(e.bands[i].force_n - bn[i].force_n));
  }
  // The two windows' band forces differ by more than 0.1 N at some speed on this noisy trace: a change of
  // window that changed nothing would not show that the profile's window reaches the analysis (0.1 N: our
  // bar, well above floating-point noise, no source).
  EXPECT_GT(apart, 0.1);
}
