// The vehicle-on-rollers model: its integrator against the textbook closed form, its parts against their
// stated forms, and its coast-downs through the core analysis.
#include <gtest/gtest.h>

#include <cmath>

#include "core/evaluation.hpp"
#include "physics/roller_model.hpp"
#include "physics/truth_generator.hpp"
#include "support/test_support.hpp"

using namespace loadtrim;

namespace {
// A model whose only load is the dyno's set load: no vehicle losses, no parasitic residual, no noise,
// exact inertia. Then m·dv/dt = −F_set(v) with m = the set inertia, the textbook problem.
physics::Truth bare_truth() {
  physics::Truth t;
  auto& v = t.vehicle;
  v.rotating_mass_on_rollers_kg = 0.0;
  v.tyre_loss_flat_n = v.tyre_loss_flat_n_per_kmh = 0.0;
  v.drivetrain_loss_n = v.drivetrain_loss_n_per_kmh2 = 0.0;
  v.brake_drag_n = 0.0;
  v.hold_bias_n = 0.0;
  t.dyno.inertia_simulation_error = 0.0;
  t.dyno.parasitic_compensation_error = 0.0;
  t.dyno.speed_noise_kmh = 0.0;
  t.dyno.force_noise_n = 0.0;
  return t;
}
}  // namespace

TEST(Physics, Rk4MatchesTheClosedFormCoastdown) {
  // docs/standards.md §6.4 (textbook integral, completed square): relative speed error below 1e-6 from 130 to
  // 15 km/h.
  for (const core::RoadLoad load :
       {core::RoadLoad{100, 0.0, 0.03}, core::RoadLoad{100, 0.5, 0.03}, core::RoadLoad{180, -0.9, 0.045}}) {
    physics::RollerModel m(bare_truth());
    m.set_inertia_kg(1542.75);
    m.set_coefficients(load);
    m.hold_speed(130.0);
    m.advance(60.0);
    ASSERT_NEAR(m.speed_kmh(), 130.0, 1e-9);
    m.release_road_load();
    const double t0 = m.time_s();
    double worst = 0.0;
    int checked = 0;
    while (m.speed_kmh() > 15.0) {
      m.advance(0.5, 0.01);
      const double exact = loadtrim::testing::exact_speed_kmh(load, 1542.75, 130.0, m.time_s() - t0);
      if (exact < 15.0) break;
      worst = std::max(worst, std::abs(m.speed_kmh() - exact) / exact);
      ++checked;
    }
    EXPECT_GT(checked, 100);
    EXPECT_LT(worst, 1e-6) << load.f0_n;
  }
}

TEST(Physics, FreeCoastOfTheEmptyRollersMatchesTheClosedForm) {
  // docs/protocol.md section 11: in a free coast the empty rollers coast on their own inertia against their
  // own losses, compensation off, so m·dv/dt = −P(v) with m the base inertia and P the parasitic curve; the
  // speed follows the textbook integral of docs/standards.md §6.4 (relative error below 1e-6, as above).
  physics::Truth t = bare_truth();
  t.vehicle_on_rollers = false;
  physics::RollerModel m(t);
  m.hold_speed(100.0);
  m.advance(60.0);
  ASSERT_NEAR(m.speed_kmh(), 100.0, 1e-9);
  m.free_coast();
  EXPECT_EQ(m.mode(), physics::Mode::free_coast);
  const core::RoadLoad parasitic{t.dyno.parasitic_f0_n, t.dyno.parasitic_f1_n_per_kmh,
                                 t.dyno.parasitic_f2_n_per_kmh2};
  const double t0 = m.time_s();
  double worst = 0.0;
  int checked = 0;
  while (m.speed_kmh() > 15.0) {
    m.advance(0.5, 0.01);
    EXPECT_EQ(m.exact().force_n, 0.0);  // the motor is off: its load cell reads nothing
    const double exact =
        loadtrim::testing::exact_speed_kmh(parasitic, t.dyno.base_inertia_kg, 100.0, m.time_s() - t0);
    if (exact < 15.0) break;
    worst = std::max(worst, std::abs(m.speed_kmh() - exact) / exact);
    ++checked;
  }
  EXPECT_GT(checked, 100);
  EXPECT_LT(worst, 1e-6);
  EXPECT_EQ(m.mode(), physics::Mode::free_coast);  // the model never leaves it on its own
}

TEST(Physics, RollerCurvatureFactor) {
  // docs/standards.md §5: √(1 + r/R) (form from memory); ratios 1.414 for equal diameters and 2.0 for a tyre
  // three times the roller diameter [text, secondary]; 0.32 m tyre on a 48-inch roller (R = 0.6096 m): 1.2349
  // [computed].
  EXPECT_NEAR(physics::roller_curvature_factor(0.5, 0.5), 1.414, 5e-4);
  EXPECT_NEAR(physics::roller_curvature_factor(1.5, 0.5), 2.0, 1e-12);
  EXPECT_NEAR(physics::roller_curvature_factor(0.32, 0.6096), 1.2349, 5e-5);
}

TEST(Physics, SpeedHoldReadsTheLossPlusResidualAndBias) {
  physics::Truth t;
  t.dyno.speed_noise_kmh = t.dyno.force_noise_n = 0.0;
  t.vehicle.initial_warmth = 1.0;
  physics::RollerModel m(t);
  m.hold_speed(80.0);
  m.advance(120.0);
  const auto s = m.exact();
  EXPECT_NEAR(s.speed_kmh, 80.0, 1e-9);
  EXPECT_NEAR(s.force_n, m.vehicle_loss_n(80.0) + m.parasitic_residual_n(80.0) + t.vehicle.hold_bias_n, 1e-9);
  // Loss by parts (the model's stated form): tyre × curvature + spin × (1 + k·(1 − θ)) + brake drag. θ is a
  // little below 1 here: the drivetrain cooled for the instant the rollers stood still before the ramp.
  EXPECT_GT(m.warmth(), 0.999);
  const double c = physics::roller_curvature_factor(t.vehicle.tyre_radius_m, 0.5 * t.dyno.roller_diameter_m);
  const double expect = (t.vehicle.tyre_loss_flat_n + 80 * t.vehicle.tyre_loss_flat_n_per_kmh) * c +
                        (t.vehicle.drivetrain_loss_n + t.vehicle.drivetrain_loss_n_per_kmh2 * 6400) *
                            (1.0 + t.vehicle.drivetrain_cold_excess * (1.0 - m.warmth())) +
                        t.vehicle.brake_drag_n;
  EXPECT_NEAR(m.vehicle_loss_n(80.0), expect, 1e-9);
}

TEST(Physics, TheSteadyDifferenceAndTheLoadCellShowInReadingsNotInCoasts) {
  // The model's stated form (physics/roller_model.hpp): in speed hold the load cell reads L + P_res + b0 +
  // b2·v² (+ the inertial force, nothing at a steady speed), and every reading is gain·F + offset. With
  // b0 = 2 N, b2 = 0.001 N/(km/h)², gain 1.02, offset 3 N: at 80 km/h 1.02·(L + P_res + 2 + 6.4) + 3.
  physics::Truth t;
  t.dyno.speed_noise_kmh = t.dyno.force_noise_n = 0.0;
  t.vehicle.initial_warmth = 1.0;
  t.vehicle.hold_bias_n = 2.0;
  t.vehicle.hold_bias_n_per_kmh2 = 0.001;
  t.dyno.load_cell_gain = 1.02;
  t.dyno.load_cell_offset_n = 3.0;
  physics::RollerModel m(t);
  m.hold_speed(80.0);
  m.advance(120.0);
  EXPECT_NEAR(m.exact().force_n,
              1.02 * (m.vehicle_loss_n(80.0) + m.parasitic_residual_n(80.0) + 2.0 + 6.4) + 3.0, 1e-9);
  // At rest with the motor off the cell reads its offset alone.
  m.controlled_stop();
  m.advance(60.0);
  ASSERT_EQ(m.mode(), physics::Mode::idle);
  EXPECT_NEAR(m.exact().force_n, 3.0, 1e-12);
  // A coast-down never holds a speed and never uses the load cell: the same speeds as an exact cell with a
  // constant difference (same seed, so the same noise).
  physics::Truth plain = t;
  plain.vehicle.hold_bias_n_per_kmh2 = 0.0;
  plain.dyno.load_cell_gain = 1.0;
  plain.dyno.load_cell_offset_n = 0.0;
  plain.dyno.speed_noise_kmh = t.dyno.speed_noise_kmh = 0.05;
  physics::RollerModel a(t), b(plain);
  for (auto* x : {&a, &b}) {
    x->set_inertia_kg(1500.0);
    x->set_coefficients({50.0, 0.3, 0.02});
  }
  const auto ta = physics::record_coastdown(a, 130.0, 15.0, 10.0);
  const auto tb = physics::record_coastdown(b, 130.0, 15.0, 10.0);
  ASSERT_EQ(ta.speed_kmh.size(), tb.speed_kmh.size());
  for (std::size_t i = 0; i < ta.speed_kmh.size(); ++i) EXPECT_EQ(ta.speed_kmh[i], tb.speed_kmh[i]) << i;
}

TEST(Physics, WarmUpLowersTheSpinLossAndRestCoolsIt) {
  physics::Truth t;
  t.vehicle.initial_warmth = 0.0;
  physics::RollerModel m(t);
  const double cold = m.vehicle_loss_n(100.0);
  m.hold_speed(100.0);
  m.advance(3.0 * t.vehicle.warm_up_time_constant_s, 0.05);
  const double warm = m.vehicle_loss_n(100.0);
  // After three time constants the warmth is 1 − e⁻³ (first-order rise).
  EXPECT_NEAR(m.warmth(), 1.0 - std::exp(-3.0), 1e-3);
  EXPECT_LT(warm, cold);
  m.controlled_stop();
  m.advance(20.0);
  EXPECT_EQ(m.mode(), physics::Mode::idle);
  EXPECT_EQ(m.speed_kmh(), 0.0);
  m.advance(t.vehicle.cool_down_time_constant_s, 0.5);
  EXPECT_GT(m.vehicle_loss_n(100.0), warm);
}

TEST(Physics, CoastdownAnalysedByTheCoreGivesSetPlusLoss) {
  // The dyno reproduces F_set + L + P_res on a coasting mass I·(1+ε) + m_rot; the tool converts with TM +
  // m_r. So the measured force at v_j is (TM + m_r)/(I·(1+ε) + m_rot) · (F_set + L + P_res)(v_j), up to the
  // standard's mid-speed shortcut (< 0.2 %, see predict_test).
  physics::Truth t;
  t.vehicle.initial_warmth = 1.0;
  t.dyno.speed_noise_kmh = 0.0;
  t.dyno.inertia_simulation_error = 0.004;
  physics::RollerModel m(t);
  const double force_mass = 1542.75;
  m.set_inertia_kg(1521.4);
  m.set_coefficients({40.0, 0.2, 0.025});
  const auto tr = physics::record_coastdown(m, 142.0, 12.0, 100.0);
  core::Profile p;
  p.name = "t";
  p.reference_speeds_kmh = {20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130};
  const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, p, {100, 0.5, 0.03}, force_mass);
  ASSERT_TRUE(e.usable) << e.unusable_reason;
  const double scale = force_mass / m.coasting_mass_kg();
  for (double v : p.reference_speeds_kmh)
    EXPECT_NEAR(e.fit.coefficients.force_n(v), scale * m.road_load_force_n(v), 0.004 * m.road_load_force_n(v))
        << v;
}

TEST(Physics, RandomTruthsFollowTheEpaSpread) {
  // samples/data/README.md: target − set at 20 km/h has median ≈ 115 N, p95 ≈ 250 N; at 130 km/h ≈ 160 N, 350
  // N.
  std::mt19937_64 rng(42);
  std::vector<double> l20, l130;
  for (int i = 0; i < 2000; ++i) {
    physics::Truth t = physics::random_truth(1800.0, 50.0, core::AxleLayout::single_axle, {}, rng);
    t.vehicle.initial_warmth = 1.0;
    physics::RollerModel m(t);
    l20.push_back(m.vehicle_loss_n(20.0));
    l130.push_back(m.vehicle_loss_n(130.0));
  }
  auto q = [](std::vector<double> x, double p) {
    std::sort(x.begin(), x.end());
    return x[static_cast<std::size_t>(p * (x.size() - 1))];
  };
  EXPECT_NEAR(q(l20, 0.5), 115.0, 15.0);
  EXPECT_NEAR(q(l20, 0.95), 250.0, 40.0);
  EXPECT_NEAR(q(l130, 0.5), 160.0, 20.0);
  EXPECT_NEAR(q(l130, 0.95), 350.0, 50.0);
}
