// The benchmark's judge (physics/truth_judge.hpp): the coast-down-equivalent force of a setting on the hidden
// truth, against the textbook closed form, and its verdict where the tool's own measurement says "within
// tolerance" but the setting is truly 15 N off; the truth presets and the day-to-day redraw.
#include "physics/truth_judge.hpp"

#include <gtest/gtest.h>

#include <cmath>
#include <numeric>
#include <vector>

#include "core/evaluation.hpp"
#include "core/setting.hpp"
#include "physics/roller_model.hpp"
#include "physics/truth_generator.hpp"

using namespace loadtrim;

namespace {

const std::vector<double> kSpeeds = {20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130};

// Only the drivetrain's spin loss (a constant and a v² part) on the rollers: no tyre loss, brake drag,
// parasitic residual or noise; the inertia exact unless a test says otherwise.
physics::Truth spin_only_truth(double spin_n, double spin_n_per_kmh2) {
  physics::Truth t;
  auto& v = t.vehicle;
  v.rotating_mass_on_rollers_kg = 0.0;
  v.tyre_loss_flat_n = v.tyre_loss_flat_n_per_kmh = 0.0;
  v.drivetrain_loss_n = spin_n;
  v.drivetrain_loss_n_per_kmh2 = spin_n_per_kmh2;
  v.brake_drag_n = 0.0;
  v.hold_bias_n = 0.0;
  v.initial_warmth = 1.0;
  t.dyno.inertia_simulation_error = 0.0;
  t.dyno.parasitic_compensation_error = 0.0;
  t.dyno.speed_noise_kmh = 0.0;
  t.dyno.force_noise_n = 0.0;
  return t;
}

// docs/standards.md §6.4 (textbook integral): t(v1 → v2) = (m/√(A·C))·[atan(v1·√(C/A)) − atan(v2·√(C/A))] for
// m·dv/dt = −(A + C·v²), SI units.
double closed_form_time_s(double mass_kg, double a_n, double c_n_per_kmh2, double v1_kmh, double v2_kmh) {
  const double c_si = c_n_per_kmh2 * 3.6 * 3.6;  // N/(m/s)²
  const double k = std::sqrt(c_si / a_n);
  return mass_kg / std::sqrt(a_n * c_si) * (std::atan(v1_kmh / 3.6 * k) - std::atan(v2_kmh / 3.6 * k));
}

}  // namespace

TEST(TruthJudge, BandForceIsTheClosedFormCoastdownOfTheTruthsDyno) {
  // Vehicle spin loss 30 N + 0.01·v², set (60, 0, 0.02): the rollers meet A = 90 N, C = 0.03 N/(km/h)² on the
  // mass I·(1 + ε) + m_rot. F_mj = (1/3.6)·(TM + m_r)·2Δv/Δt_j (docs/standards.md §2.3) with Δt_j the closed
  // form above; the steady force is A + C·v² itself.
  physics::Truth t = spin_only_truth(30.0, 0.01);
  t.vehicle.rotating_mass_on_rollers_kg = 20.0;
  t.dyno.inertia_simulation_error = 0.012;
  const physics::SettingOnDyno on{1521.4, {60.0, 0.0, 0.02}, 1542.75};
  const std::vector<double> warm(kSpeeds.size(), 1.0);
  const auto j = physics::judge_setting(t, on, {100.0, 0.5, 0.03}, kSpeeds, 5.0, warm);
  ASSERT_TRUE(j.ok);
  ASSERT_EQ(j.rows.size(), kSpeeds.size());
  const double mass = 1521.4 * 1.012 + 20.0;
  for (const auto& r : j.rows) {
    const double dt = closed_form_time_s(mass, 90.0, 0.03, r.speed_kmh + 5.0, r.speed_kmh - 5.0);
    const double expect = 1542.75 * 10.0 / (3.6 * dt);
    EXPECT_NEAR(r.band_force_n, expect, 1e-7 * expect) << r.speed_kmh;
    EXPECT_NEAR(r.steady_force_n, 90.0 + 0.03 * r.speed_kmh * r.speed_kmh, 1e-9) << r.speed_kmh;
    EXPECT_NEAR(r.steady_error_n,
                r.steady_force_n - (100.0 + 0.5 * r.speed_kmh + 0.03 * r.speed_kmh * r.speed_kmh), 1e-9);
  }
}

TEST(TruthJudge, FlagsASettingTrulyFifteenNewtonsOffFullyWarmThatTheToolMeasuredWithinTolerance) {
  // The spin loss is 50 N warm and 60 % more fully cold (physics/roller_model.hpp: spin × (1 + k·(1 − θ)));
  // at θ = 0.5 that is 15 N more. The set (35, 0.5, 0.03) with the 50 + 15 N loss makes the target (100, 0.5,
  // 0.03) exactly at θ = 0.5; fully warm the rollers meet 15 N less at every speed.
  physics::Truth t = spin_only_truth(50.0, 0.0);
  t.vehicle.drivetrain_cold_excess = 0.6;
  t.vehicle.initial_warmth = 0.5;
  t.vehicle.warm_up_time_constant_s = 1e12;  // the warmth stays at 0.5 through the coast-down
  t.vehicle.cool_down_time_constant_s = 1e12;
  t.dyno.speed_noise_kmh = 0.05;  // the simulator's typical encoder noise
  const core::RoadLoad target{100.0, 0.5, 0.03}, set{35.0, 0.5, 0.03};
  const double mass = 1542.75;

  // The tool's own measurement: a coast-down at 100 Hz, analysed as a session does, within ±10 N (GTR 15
  // §8.1.3.4.2).
  physics::RollerModel m(t);
  m.set_inertia_kg(mass);
  m.set_coefficients(set);
  const auto tr = physics::record_coastdown(m, 142.0, 12.0, 100.0);
  core::Profile p;
  p.name = "t";
  p.reference_speeds_kmh = kSpeeds;
  const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, target, mass);
  ASSERT_TRUE(e.usable) << e.unusable_reason;
  EXPECT_TRUE(e.check.pass);
  EXPECT_LT(e.check.worst_abs_deviation_n, 1.0);

  const physics::SettingOnDyno on{mass, set, mass};
  const std::vector<double> half(kSpeeds.size(), 0.5), warm(kSpeeds.size(), 1.0);
  const auto at_coast = physics::judge_setting(t, on, target, kSpeeds, 5.0, half);
  const auto hot = physics::judge_setting(t, on, target, kSpeeds, 5.0, warm);
  ASSERT_TRUE(at_coast.ok);
  ASSERT_TRUE(hot.ok);
  // In the state of the coast-down the truth agrees with the tool (two independent computations: the band
  // fits of the noisy trace and the judge's integral): within half a newton at every speed.
  for (std::size_t i = 0; i < kSpeeds.size(); ++i)
    EXPECT_NEAR(at_coast.rows[i].coastdown_n, e.fit.coefficients.force_n(kSpeeds[i]), 0.5) << kSpeeds[i];
  // Against the target, within the standard's mid-speed shortcut (the band force is the band's harmonic mean,
  // not F(v_j): below 0.2 % of the force, predict_test), 1.3 N at 672 N.
  EXPECT_LT(at_coast.worst_coastdown_n, 1.5);
  // Fully warm the rollers meet 15 N less at every speed: the steady force exactly, the coast-down equivalent
  // 15 N below the state of the coast-down (within 0.1 N: the shortcut changes a little with the force).
  for (std::size_t i = 0; i < kSpeeds.size(); ++i) {
    EXPECT_NEAR(hot.rows[i].coastdown_error_n - at_coast.rows[i].coastdown_error_n, -15.0, 0.1) << kSpeeds[i];
    EXPECT_NEAR(hot.rows[i].steady_error_n, -15.0, 1e-9) << kSpeeds[i];
  }
  EXPECT_GT(hot.worst_coastdown_n, 10.0);
}

TEST(TruthJudge, InertiaErrorLeavesTheCoastdownRightAndTheSteadyForceOff) {
  // With the simulated inertia 3 % high, a coast-down converted with TM + m_r reads R·(TM + m_r)/M: a set of
  // 1.03 × the target (no vehicle loss) coasts exactly as the target, so the tool measures the target; the
  // vehicle at a steady speed meets 1.03 × the target, 3 % of 672 N = 20.2 N too much at 130 km/h
  // (docs/standards.md §6.2's target at 130 km/h: 672 N).
  physics::Truth t = spin_only_truth(0.0, 0.0);
  t.dyno.inertia_simulation_error = 0.03;
  const core::RoadLoad target{100.0, 0.5, 0.03};
  const double mass = 1542.75;
  physics::RollerModel m(t);
  m.set_inertia_kg(mass);
  m.set_coefficients(target.scaled(1.03));
  const auto tr = physics::record_coastdown(m, 142.0, 12.0, 100.0);
  core::Profile p;
  p.name = "t";
  p.reference_speeds_kmh = kSpeeds;
  const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, target, mass);
  ASSERT_TRUE(e.usable) << e.unusable_reason;
  EXPECT_TRUE(e.check.pass);  // the tool: within tolerance

  const std::vector<double> warm(kSpeeds.size(), 1.0);
  const auto j = physics::judge_setting(t, {mass, target.scaled(1.03), mass}, target, kSpeeds, 5.0, warm);
  ASSERT_TRUE(j.ok);
  // The band force is the band's harmonic mean, not F(v_j): the standard's mid-speed shortcut, below 0.2 % of
  // the force (predict_test), 1.3 N at 672 N.
  EXPECT_LT(j.worst_coastdown_n, 1.5);
  EXPECT_NEAR(j.rows.back().steady_error_n, 0.03 * 672.0, 1e-9);
  EXPECT_GT(j.worst_steady_n, 15.0);
}

TEST(TruthJudge, ABandThatNeverEndsCannotBeJudged) {
  // A set that cancels the whole loss (R ≤ 0 in a band) makes a coast that never ends: no force to judge.
  physics::Truth t = spin_only_truth(50.0, 0.0);
  const std::vector<double> warm(kSpeeds.size(), 1.0);
  EXPECT_FALSE(
      physics::judge_setting(t, {1500.0, {-60.0, 0.0, 0.0}, 1500.0}, {100, 0.5, 0.03}, kSpeeds, 5.0, warm)
          .ok);
  // One warmth per speed, or nothing is judged.
  EXPECT_FALSE(physics::judge_setting(t, {1500.0, {60.0, 0.0, 0.0}, 1500.0}, {100, 0.5, 0.03}, kSpeeds, 5.0,
                                      std::vector<double>{1.0})
                   .ok);
}

TEST(TruthPresets, HarshDrawsWithinItsStatedRangesAndSpreads) {
  // docs/performance.md, "Truth presets": harsh = hold bias σ 15 N, inertia error σ 1.5 %, warm-up τ uniform
  // in 1500–3000 s, cold excess uniform in 0.6–1.0, speed noise 0.2 km/h.
  const physics::TruthPreset* h = physics::truth_preset("harsh");
  ASSERT_NE(h, nullptr);
  EXPECT_EQ(physics::truth_preset("gentle"), nullptr);
  EXPECT_EQ(h->speed_noise_kmh, 0.2);
  std::mt19937_64 rng(7);
  std::vector<double> bias, inertia;
  for (int i = 0; i < 4000; ++i) {
    const physics::Truth t =
        physics::random_truth(1700.0, 45.0, core::AxleLayout::single_axle, {}, rng, h->spread);
    EXPECT_GE(t.vehicle.warm_up_time_constant_s, 1500.0);
    EXPECT_LE(t.vehicle.warm_up_time_constant_s, 3000.0);
    EXPECT_GE(t.vehicle.drivetrain_cold_excess, 0.6);
    EXPECT_LE(t.vehicle.drivetrain_cold_excess, 1.0);
    bias.push_back(t.vehicle.hold_bias_n);
    inertia.push_back(t.dyno.inertia_simulation_error);
  }
  auto sd = [](const std::vector<double>& x) {
    const double mu = std::accumulate(x.begin(), x.end(), 0.0) / x.size();
    double s2 = 0.0;
    for (double y : x) s2 += (y - mu) * (y - mu);
    return std::sqrt(s2 / (x.size() - 1));
  };
  // Sample sd of 4000 normal draws: relative standard error 1/√(2·3999) ≈ 1.1 %; 5 % is over 4 of them.
  EXPECT_NEAR(sd(bias), 15.0, 0.75);
  EXPECT_NEAR(sd(inertia), 0.015, 0.00075);
}

TEST(TruthPresets, TheSecondDayIsANewTruthWithinTheDayToDaySpread) {
  // docs/performance.md, "Truth presets": on another day the tyre and spin losses scale by exp(σ·z), σ 3 %,
  // the hold bias moves by σ 1 N; the cell's inertia simulation and the vehicle's tyre radius stay; the noise
  // is fresh.
  const physics::DayToDaySpread day{};
  std::mt19937_64 rng(11);
  std::vector<double> log_tyre, bias_step;
  for (int i = 0; i < 4000; ++i) {
    const physics::Truth a = physics::random_truth(1500.0, 40.0, core::AxleLayout::two_axle, {}, rng);
    const physics::Truth b = physics::redraw_day(a, rng, day);
    EXPECT_NE(a.noise_seed, b.noise_seed);
    EXPECT_EQ(a.dyno.inertia_simulation_error, b.dyno.inertia_simulation_error);
    EXPECT_EQ(a.vehicle.tyre_radius_m, b.vehicle.tyre_radius_m);
    log_tyre.push_back(std::log(b.vehicle.tyre_loss_flat_n / a.vehicle.tyre_loss_flat_n));
    bias_step.push_back(b.vehicle.hold_bias_n - a.vehicle.hold_bias_n);
  }
  auto sd = [](const std::vector<double>& x) {
    const double mu = std::accumulate(x.begin(), x.end(), 0.0) / x.size();
    double s2 = 0.0;
    for (double y : x) s2 += (y - mu) * (y - mu);
    return std::sqrt(s2 / (x.size() - 1));
  };
  EXPECT_NEAR(sd(log_tyre), 0.03, 0.0015);  // as above: 5 % of the sd
  EXPECT_NEAR(sd(bias_step), 1.0, 0.05);
}
