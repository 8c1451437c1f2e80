// The benchmark's judge (physics/truth_judge.hpp): the coast-down-equivalent force of a setting on the hidden
// truth, against the textbook closed form, and its verdict where the tool's own measurement says "within
// tolerance" but the setting is truly 15 N off; the truth presets and the day-to-day redraw.
#include "physics/truth_judge.hpp"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <numeric>
#include <random>
#include <vector>

#include "config/epa_csv.hpp"
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

namespace {

double sample_sd(const std::vector<double>& x) {
  const double mu = std::accumulate(x.begin(), x.end(), 0.0) / x.size();
  double s2 = 0.0;
  for (double y : x) s2 += (y - mu) * (y - mu);
  return std::sqrt(s2 / (x.size() - 1));
}

double pearson(const std::vector<double>& a, const std::vector<double>& b) {
  const double ma = std::accumulate(a.begin(), a.end(), 0.0) / a.size();
  const double mb = std::accumulate(b.begin(), b.end(), 0.0) / b.size();
  double sab = 0.0, saa = 0.0, sbb = 0.0;
  for (std::size_t i = 0; i < a.size(); ++i) {
    sab += (a[i] - ma) * (b[i] - mb);
    saa += (a[i] - ma) * (a[i] - ma);
    sbb += (b[i] - mb) * (b[i] - mb);
  }
  return sab / std::sqrt(saa * sbb);
}

// The warm loss on the rollers at a speed (no parasitic residual): what the generator drew.
double warm_loss_n(const physics::Truth& t, double v_kmh) {
  physics::RollerModel m(t);
  m.set_warmth(1.0);
  return m.vehicle_loss_n(v_kmh);
}

}  // namespace

TEST(TruthJudge, TheSteadyForceCarriesTheSteadyVersusCoastingDifferenceTheCoastdownDoesNot) {
  // Steady loss = coasting loss + b0 + b2·v² (physics/roller_model.hpp): b0 = 4 N, b2 = 0.001 N/(km/h)² adds
  // 4 + 0.4 = 4.4 N at 20 km/h and 4 + 16.9 = 20.9 N at 130 km/h to the steady force; a coast-down never
  // holds a speed, so its equivalent is the same as without the difference (to rounding).
  physics::Truth plain = spin_only_truth(30.0, 0.01);
  physics::Truth biased = plain;
  biased.vehicle.hold_bias_n = 4.0;
  biased.vehicle.hold_bias_n_per_kmh2 = 0.001;
  const physics::SettingOnDyno on{1542.75, {60.0, 0.0, 0.02}, 1542.75};
  const std::vector<double> warm(kSpeeds.size(), 1.0);
  const auto a = physics::judge_setting(plain, on, {90.0, 0.0, 0.03}, kSpeeds, 5.0, warm);
  const auto b = physics::judge_setting(biased, on, {90.0, 0.0, 0.03}, kSpeeds, 5.0, warm);
  ASSERT_TRUE(a.ok);
  ASSERT_TRUE(b.ok);
  EXPECT_NEAR(b.rows.front().steady_error_n - a.rows.front().steady_error_n, 4.4, 1e-9);
  EXPECT_NEAR(b.rows.back().steady_error_n - a.rows.back().steady_error_n, 20.9, 1e-9);
  for (std::size_t i = 0; i < kSpeeds.size(); ++i)
    EXPECT_NEAR(b.rows[i].coastdown_n, a.rows[i].coastdown_n, 1e-9) << kSpeeds[i];
  EXPECT_GT(b.worst_steady_n, 10.0);
  EXPECT_LT(a.worst_steady_n, 1e-9);  // the set plus the loss is the target exactly
}

TEST(TruthPresets, TheEpaLossToMassCorrelationIsWhatHarshUses) {
  // docs/standards.md §5.6 (computed from the EPA data): the log of target − set correlates with the log of
  // the test mass, r = 0.4326 at 20 km/h and 0.4221 at 130 km/h over the 3,432 rows with a positive
  // difference at both speeds; the log mass has median 1814.37 kg and sd 0.1818. Recomputed here from the
  // file; the values above were computed with numpy 1.24 (corrcoef, median, std with ddof 0).
  const auto f = config::read_epa_csv(std::string(LOADTRIM_SOURCE_DIR) +
                                      "/samples/data/epa_test_car_roadload_MY2016_2019.csv");
  std::vector<double> lm, l20, l130, lm_all;
  for (const auto& r : f.rows) {
    lm_all.push_back(std::log(r.etw_kg));
    const double d20 = r.target.force_n(20.0) - r.set.force_n(20.0);
    const double d130 = r.target.force_n(130.0) - r.set.force_n(130.0);
    if (!(d20 > 0.0 && d130 > 0.0)) continue;
    lm.push_back(std::log(r.etw_kg));
    l20.push_back(std::log(d20));
    l130.push_back(std::log(d130));
  }
  ASSERT_EQ(lm.size(), 3432u);
  EXPECT_NEAR(pearson(l20, lm), 0.4326, 1e-4);   // numpy
  EXPECT_NEAR(pearson(l130, lm), 0.4221, 1e-4);  // numpy
  const physics::TruthPreset* h = physics::truth_preset("harsh");
  ASSERT_NE(h, nullptr);
  EXPECT_NEAR(h->spread.loss_mass_correlation, pearson(l20, lm), 0.005);
  std::vector<double> sorted = lm_all;
  std::sort(sorted.begin(), sorted.end());
  EXPECT_NEAR(std::exp(sorted[sorted.size() / 2]), h->spread.mass_median_kg, 0.01);  // 3,485 rows: odd
  const double mu = std::accumulate(lm_all.begin(), lm_all.end(), 0.0) / lm_all.size();
  double s2 = 0.0;
  for (double x : lm_all) s2 += (x - mu) * (x - mu);
  EXPECT_NEAR(std::sqrt(s2 / lm_all.size()), h->spread.mass_log_sd, 1e-4);  // numpy std, ddof 0
}

TEST(TruthPresets, LossCorrelatesWithTestMassAsStatedAndKeepsItsScale) {
  // Masses lognormal with the fleet's median and log sd; the drawn warm loss at 20 and 130 km/h must have a
  // log-log correlation of ρ = 0.43 with the mass, within 4 standard errors of Fisher's z (1/√(n − 3)), and
  // keep the EPA scale of docs/standards.md §5.5: median 115 N at 20 km/h, within 4 standard errors of a
  // sample median (1.2533·σ/√n in the log, σ = ln(250/115)/1.645).
  physics::TruthSpread sp = physics::truth_preset("harsh")->spread;
  constexpr int kN = 4000;
  std::mt19937_64 rng(23), mass_rng(29);
  std::normal_distribution<double> z(0.0, 1.0);
  std::vector<double> lm, l20, l130;
  for (int i = 0; i < kN; ++i) {
    const double mass = sp.mass_median_kg * std::exp(sp.mass_log_sd * z(mass_rng));
    const physics::Truth t = physics::random_truth(mass, 45.0, core::AxleLayout::single_axle, {}, rng, sp);
    lm.push_back(std::log(mass));
    l20.push_back(std::log(warm_loss_n(t, 20.0)));
    l130.push_back(std::log(warm_loss_n(t, 130.0)));
  }
  const double se_z = 1.0 / std::sqrt(kN - 3.0);
  EXPECT_NEAR(std::atanh(pearson(l20, lm)), std::atanh(0.43), 4 * se_z);
  EXPECT_NEAR(std::atanh(pearson(l130, lm)), std::atanh(0.43), 4 * se_z);
  std::vector<double> s = l20;
  std::sort(s.begin(), s.end());
  const double sigma = std::log(250.0 / 115.0) / 1.6448536269514722;
  EXPECT_NEAR(s[kN / 2], std::log(115.0), 4 * 1.2533 * sigma / std::sqrt(kN));
  // Off (typical): no correlation, within the same 4 standard errors.
  sp.loss_mass_correlation = 0.0;
  std::vector<double> lm0, l0;
  for (int i = 0; i < kN; ++i) {
    const double mass = sp.mass_median_kg * std::exp(sp.mass_log_sd * z(mass_rng));
    lm0.push_back(std::log(mass));
    l0.push_back(std::log(
        warm_loss_n(physics::random_truth(mass, 45.0, core::AxleLayout::single_axle, {}, rng, sp), 20.0)));
  }
  EXPECT_NEAR(std::atanh(pearson(l0, lm0)), 0.0, 4 * se_z);
}

TEST(TruthPresets, HarshDrawsTheSteadyDifferenceAndTheLoadCellWithinTheirSpreads) {
  // docs/performance.md, "Truth presets": harsh draws b2·130² with σ 10 N, the load cell's gain 1 + σ·z with
  // σ 1 % and its offset with σ 4.9 N. Sample sd of 4000 normal draws: relative standard error
  // 1/√(2·3999) ≈ 1.1 %; 5 % is over 4 of them; the means within 4·σ/√n.
  const physics::TruthSpread& sp = physics::truth_preset("harsh")->spread;
  std::mt19937_64 rng(31);
  std::vector<double> b130, gain, offset;
  for (int i = 0; i < 4000; ++i) {
    const physics::Truth t = physics::random_truth(1700.0, 45.0, core::AxleLayout::two_axle, {}, rng, sp);
    b130.push_back(t.vehicle.hold_bias_n_per_kmh2 * 130.0 * 130.0);
    gain.push_back(t.dyno.load_cell_gain);
    offset.push_back(t.dyno.load_cell_offset_n);
  }
  EXPECT_NEAR(sample_sd(b130), 10.0, 0.5);
  EXPECT_NEAR(sample_sd(gain), 0.01, 0.0005);
  EXPECT_NEAR(sample_sd(offset), 4.9, 0.245);
  EXPECT_NEAR(std::accumulate(gain.begin(), gain.end(), 0.0) / 4000, 1.0, 4 * 0.01 / std::sqrt(4000.0));
  EXPECT_NEAR(std::accumulate(offset.begin(), offset.end(), 0.0) / 4000, 0.0, 4 * 4.9 / std::sqrt(4000.0));
  // The second day keeps the cell's load cell and the vehicle's speed part.
  const physics::Truth a = physics::random_truth(1700.0, 45.0, core::AxleLayout::two_axle, {}, rng, sp);
  const physics::Truth b = physics::redraw_day(a, rng, {});
  EXPECT_EQ(a.dyno.load_cell_gain, b.dyno.load_cell_gain);
  EXPECT_EQ(a.dyno.load_cell_offset_n, b.dyno.load_cell_offset_n);
  EXPECT_EQ(a.vehicle.hold_bias_n_per_kmh2, b.vehicle.hold_bias_n_per_kmh2);
}

TEST(TruthPresets, TypicalHasNoneOfTheNewerTruthsAndDrawsAsBefore) {
  // typical keeps the long-standing draw (docs/performance.md: its figures reproduce): no loss–mass
  // correlation, a constant steady difference, an exact load cell, and no extra draw from the generator (the
  // next value after a truth is the same as with the newer spreads explicitly zero and a different mass,
  // which without the correlation does not enter the draw).
  const physics::TruthSpread& sp = physics::truth_preset("typical")->spread;
  EXPECT_EQ(sp.loss_mass_correlation, 0.0);
  EXPECT_EQ(sp.hold_bias_speed_sd_n, 0.0);
  EXPECT_EQ(sp.load_cell_gain_sd, 0.0);
  EXPECT_EQ(sp.load_cell_offset_sd_n, 0.0);
  std::mt19937_64 r1(41), r2(41);
  const physics::Truth a = physics::random_truth(1200.0, 40.0, core::AxleLayout::single_axle, {}, r1, sp);
  physics::TruthSpread with_harsh_mass = sp;
  with_harsh_mass.mass_median_kg = 3000.0;
  const physics::Truth b =
      physics::random_truth(2500.0, 40.0, core::AxleLayout::single_axle, {}, r2, with_harsh_mass);
  EXPECT_EQ(a.vehicle.tyre_loss_flat_n, b.vehicle.tyre_loss_flat_n);
  EXPECT_EQ(a.vehicle.drivetrain_loss_n_per_kmh2, b.vehicle.drivetrain_loss_n_per_kmh2);
  EXPECT_EQ(r1(), r2());
  EXPECT_EQ(a.vehicle.hold_bias_n_per_kmh2, 0.0);
  EXPECT_EQ(a.dyno.load_cell_gain, 1.0);
  EXPECT_EQ(a.dyno.load_cell_offset_n, 0.0);
}
