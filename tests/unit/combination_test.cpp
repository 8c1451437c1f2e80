// Vehicle against cell and profile before anything connects (core/combination.hpp), and the target file's
// vehicle.two_wheel_drive_mode key (config loader and writer). Check values are computed by hand beside each
// check.
#include "core/combination.hpp"

#include <gtest/gtest.h>

#include <cmath>
#include <optional>
#include <string>
#include <vector>

#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "config/target_writer.hpp"

using namespace loadtrim;
using namespace loadtrim::core;

namespace {

// The shipped WLTP profile: reference speeds 20–130 km/h, run-up margin 12 km/h (start 142 km/h), warm-up 80
// km/h for 1200 s, stability rule off, loss map of 5 speeds with 5 s settle and 5 s average.
Profile wltp() {
  return config::load_profile(std::string(LOADTRIM_SOURCE_DIR) + "/config/profiles/wltp-iterative.toml");
}
// The invented demo target (samples/targets/demo-hatchback.toml): TM 1470 kg, MRO 1380 kg, front-wheel drive,
// 185 km/h, target (142, 0.35, 0.033).
VehicleTarget demo() {
  return config::load_target(std::string(LOADTRIM_SOURCE_DIR) + "/samples/targets/demo-hatchback.toml");
}
// The invented demo cell's facts (config/cells/sim-inprocess.toml).
CellFacts demo_cell() {
  CellFacts c;
  c.max_speed_kmh = 160.0;
  c.max_force_n = 8000.0;
  c.max_motoring_s = 5400.0;
  c.axles = AxleLayout::single_axle;
  c.min_inertia_kg = 800.0;
  c.max_inertia_kg = 2700.0;
  c.run_up = RunUp::vehicle;
  return c;
}

const Problem* find(const Problems& ps, const std::string& key,
                    Problem::Severity s = Problem::Severity::error) {
  for (const auto& p : ps)
    if (p.key == key && p.severity == s) return &p;
  return nullptr;
}
bool contains(const std::string& s, const std::string& part) {
  return s.find(part) != std::string::npos;
}
std::size_t total(const CombinationProblems& c) {
  return c.cell.size() + c.target.size() + c.profile.size();
}

}  // namespace

TEST(Combination, DemoVehicleOnDemoCellIsClean) {
  // Positive control: every check below fails on one changed fact of this combination.
  const CombinationProblems c = check_combination(demo(), wltp(), demo_cell());
  EXPECT_FALSE(c.any_error());
  EXPECT_EQ(total(c), 0u);
}

TEST(Combination, StartSpeedAgainstTheCellsAndTheVehiclesMaximum) {
  // Start speed = 130 + 12 = 142 km/h; it must be strictly below both maxima (as session.cpp
  // do_check_limits).
  CellFacts cell = demo_cell();
  cell.max_speed_kmh = 142.0;
  const CombinationProblems c = check_combination(demo(), wltp(), cell);
  const Problem* p = find(c.cell, "limits.max_speed_kmh");
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "allowed only above 142 km/h")) << p->message;
  cell.max_speed_kmh = 142.5;
  EXPECT_FALSE(check_combination(demo(), wltp(), cell).any_error());

  // A vehicle of 142 km/h: the 130 km/h point is dropped (130 + 14 = 144 ≥ 142, GTR 15 §2.2 from memory,
  // docs/standards.md §2.1), so the start speed is 120 + 12 = 132 < 142: nothing to refuse.
  VehicleTarget v = demo();
  v.max_speed_kmh = 142.0;
  EXPECT_FALSE(check_combination(v, wltp(), demo_cell()).any_error());
  // A run-up margin of 25 km/h (the profile allows up to 30) would start at 120 + 25 = 145 ≥ 142: refused.
  Profile wide = wltp();
  wide.run_up_margin_kmh = 25.0;
  EXPECT_NE(find(check_combination(v, wide, demo_cell()).target, "vehicle.max_speed_kmh"), nullptr);
}

TEST(Combination, AVehicleTooSlowForThreeReferenceSpeedsIsRefused) {
  // GTR 15 §2.2 (from memory, docs/standards.md §2.1): a point with v + 14 ≥ v_max is dropped; a quadratic
  // needs three points. v_max 44 km/h leaves 20 (34 < 44) and nothing else (30 + 14 = 44 ≥ 44): refused,
  // naming the key. (The vehicle file allows maxima from 30 km/h.) v_max 54.5 leaves 20, 30, 40: fine for the
  // speeds, though the warm-up at 80 km/h is then above the vehicle's maximum, which is its own error.
  VehicleTarget v = demo();
  v.max_speed_kmh = 44.0;
  const CombinationProblems c = check_combination(v, wltp(), demo_cell());
  const Problem* p = find(c.profile, "bands.reference_speeds_kmh");
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "only 1 of the profile's 12 reference speeds remain")) << p->message;
  v.max_speed_kmh = 54.5;
  EXPECT_EQ(find(check_combination(v, wltp(), demo_cell()).profile, "bands.reference_speeds_kmh"), nullptr);
}

TEST(Combination, ReferenceSpeedsFollowTheVehicleAndTheCycle) {
  // GTR 15 §2.2 (from memory, docs/standards.md §2.1). Profile speeds 20..130 km/h in 10 km/h steps.
  const Profile p = wltp();
  auto kept = [&](double vmax, std::optional<double> cycle) {
    return plan_reference_speeds(p, vmax, cycle).kept_kmh;
  };
  auto upto = [](double top) {
    std::vector<double> out;
    for (double v = 20.0; v <= top + 1e-9; v += 10.0) out.push_back(v);
    return out;
  };
  // 120 km/h: 110 + 14 = 124 ≥ 120 is dropped, 100 + 14 = 114 < 120 is kept.
  EXPECT_EQ(kept(120.0, std::nullopt), upto(100.0));
  // 140 and 143 km/h: 130 + 14 = 144 reaches both; 120 + 14 = 134 does not.
  EXPECT_EQ(kept(140.0, std::nullopt), upto(120.0));
  EXPECT_EQ(kept(143.0, std::nullopt), upto(120.0));
  // 144.1 km/h keeps every point.
  EXPECT_EQ(kept(144.1, std::nullopt), upto(130.0));
  // A cycle whose maximum is 97.4 km/h: the top point is 100, the one just above it; exactly 100 keeps 100.
  EXPECT_EQ(kept(185.0, 97.4), upto(100.0));
  EXPECT_EQ(kept(185.0, 100.0), upto(100.0));
  // A cycle faster than every point keeps them all; both rules together take the lower top.
  EXPECT_EQ(kept(185.0, 131.3), upto(130.0));
  EXPECT_EQ(kept(120.0, 115.0), upto(100.0));
  // Each dropped point says why.
  const ReferenceSpeedPlan plan = plan_reference_speeds(p, 140.0, 97.4);
  ASSERT_EQ(plan.dropped.size(), 3u);  // 110, 120 above the cycle's top point; 130 too
  EXPECT_TRUE(contains(plan.dropped[0].why, "test cycle's maximum speed of 97.4")) << plan.dropped[0].why;
  EXPECT_FALSE(plan.refusal);
  // The start speed follows the planned top point: 120 + 12 = 132 km/h for a 140 km/h vehicle.
  EXPECT_DOUBLE_EQ(with_reference_speeds(p, plan_reference_speeds(p, 140.0, std::nullopt)).start_speed_kmh(),
                   132.0);
  // NaN never keeps a point.
  EXPECT_TRUE(plan_reference_speeds(p, std::nan(""), std::nullopt).refusal);
}

TEST(Combination, WarmUpSpeedAboveALimitIsRefused) {
  // Warm-up at 165 km/h on a 160 km/h cell (the vehicle allows 185): allowed up to min(160, 185) = 160 km/h.
  Profile p = wltp();
  p.warm_up.speed_kmh = 165.0;
  const CombinationProblems c = check_combination(demo(), p, demo_cell());
  const Problem* w = find(c.profile, "warm_up.speed_kmh");
  ASSERT_NE(w, nullptr);
  EXPECT_TRUE(contains(w->message, "allowed up to 160 km/h")) << w->message;
  p.warm_up.speed_kmh = 160.0;  // "not above": equal passes
  EXPECT_EQ(find(check_combination(demo(), p, demo_cell()).profile, "warm_up.speed_kmh"), nullptr);
}

TEST(Combination, MotoringTimeTooShortIsRefused) {
  // Same formula as session.cpp do_check_limits: the run-up from standstill to 80 km/h at 1.5 m/s² (80 / 3.6
  // / 1.5 = 14.81 s, by hand) + its 2 s settle + 1200 s + 0 (stability off) + 5 × (5 + 5 + 30) s = 1416.8 s.
  const double run_up_s = 80.0 / 3.6 / 1.5 + 2.0;
  EXPECT_DOUBLE_EQ(planned_motoring_s(wltp()), 1400.0 + run_up_s);
  CellFacts cell = demo_cell();
  cell.max_motoring_s = 1416.0;
  const CombinationProblems c = check_combination(demo(), wltp(), cell);
  const Problem* p = find(c.cell, "limits.max_motoring_s");
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "up to 1416.8")) << p->message;
  cell.max_motoring_s = 1417.0;
  EXPECT_FALSE(check_combination(demo(), wltp(), cell).any_error());
  // With the stability rule on, warm_up.max_extra_s (600 s) is added: 2016.8 s no longer fits in 1417 s.
  Profile stable = wltp();
  stable.warm_up.stable_within_n = 2.0;
  EXPECT_DOUBLE_EQ(planned_motoring_s(stable), 2000.0 + run_up_s);
  EXPECT_NE(find(check_combination(demo(), stable, cell).cell, "limits.max_motoring_s"), nullptr);
}

TEST(Combination, AllWheelDriveOnASingleAxleCell) {
  // Issue 13: an all-wheel-drive vehicle ran to acceptance on a single-axle cell. Refused (common practice,
  // no source) unless the target states the two-wheel-drive coastdown mode (EU 2018/1832 amending SA4
  // §4.2.1.8.5).
  VehicleTarget v = demo();
  v.drive = Drive::all;
  const CombinationProblems refused = check_combination(v, wltp(), demo_cell());
  const Problem* p = find(refused.target, "vehicle.drive");
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "single-axle")) << p->message;
  EXPECT_TRUE(contains(p->message, "vehicle.two_wheel_drive_mode = true")) << p->message;

  v.two_wheel_drive_mode = true;
  const CombinationProblems allowed = check_combination(v, wltp(), demo_cell());
  EXPECT_FALSE(allowed.any_error());
  const Problem* w = find(allowed.target, "vehicle.two_wheel_drive_mode", Problem::Severity::warning);
  ASSERT_NE(w, nullptr);
  EXPECT_TRUE(contains(w->message, "logged")) << w->message;

  // On a two-axle cell all-wheel drive is what the cell is for: no error (inertia TM = 1470 kg, in range).
  v.two_wheel_drive_mode = false;
  CellFacts two = demo_cell();
  two.axles = AxleLayout::two_axle;
  EXPECT_EQ(total(check_combination(v, wltp(), two)), 0u);
}

TEST(Combination, InertiaOutsideTheDynosRangeIsRefused) {
  // EU SA4 §2.5.1: m_r = 0.03·(1380 + 25) = 42.15 kg; §2.5.3: single-axle inertia 1470 + 0.5·42.15 = 1491.075
  // kg.
  CellFacts cell = demo_cell();
  cell.min_inertia_kg = 1500.0;
  const CombinationProblems c = check_combination(demo(), wltp(), cell);
  const Problem* lo = find(c.cell, "dyno.min_inertia_kg");
  ASSERT_NE(lo, nullptr);
  EXPECT_TRUE(contains(lo->message, "1491.1 kg")) << lo->message;
  cell.min_inertia_kg = 1491.0;
  EXPECT_FALSE(check_combination(demo(), wltp(), cell).any_error());
  cell = demo_cell();
  cell.max_inertia_kg = 1491.0;
  EXPECT_NE(find(check_combination(demo(), wltp(), cell).cell, "dyno.max_inertia_kg"), nullptr);
  // Two-axle: inertia = TM = 1470 kg, inside 1400–1480.
  cell.axles = AxleLayout::two_axle;
  cell.min_inertia_kg = 1400.0;
  cell.max_inertia_kg = 1480.0;
  EXPECT_FALSE(check_combination(demo(), wltp(), cell).any_error());
  // 0 = not given: nothing to check.
  cell.min_inertia_kg = cell.max_inertia_kg = 0.0;
  cell.axles = AxleLayout::single_axle;
  EXPECT_FALSE(check_combination(demo(), wltp(), cell).any_error());
}

TEST(Combination, TargetAboveTheCellsForceLimitIsRefused) {
  // Issue 13: max_force_n = 100 and the demo target. Up to the start speed 142 km/h the target needs
  // 142 + 0.35·142 + 0.033·142² = 142 + 49.7 + 665.412 = 857.112 N (745.2 N at 130 km/h).
  CellFacts cell = demo_cell();
  cell.max_force_n = 100.0;
  const CombinationProblems c = check_combination(demo(), wltp(), cell);
  const Problem* p = find(c.target, "target");
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "857.1 N at 142.0 km/h")) << p->message;
  EXPECT_TRUE(contains(p->message, "limits.max_force_n")) << p->message;
  cell.max_force_n = 858.0;
  EXPECT_FALSE(check_combination(demo(), wltp(), cell).any_error());
}

TEST(Combination, TargetNegativeInTheReferenceRangeAndNoAeroTerm) {
  // (135, −5, 1/30): negative from 35.3 to 114.7 km/h (envelope_test has the hand computation) → error under
  // target.
  VehicleTarget v = demo();
  v.target = {135.0, -5.0, 1.0 / 30.0};
  EXPECT_NE(find(check_combination(v, wltp(), demo_cell()).target, "target"), nullptr);
  // (150, 1, 0): only the f2 = 0 warning (ratios 170/14415.8 = 0.0118 and 280/14415.8 = 0.0194 are
  // plausible).
  v.target = {150.0, 1.0, 0.0};
  const CombinationProblems w = check_combination(v, wltp(), demo_cell());
  EXPECT_FALSE(w.any_error());
  EXPECT_NE(find(w.target, "target.f2_n_per_kmh2", Problem::Severity::warning), nullptr);
}

// ------------------------------------------------------------------------ the target file's
// two_wheel_drive_mode

namespace {
const char* kTargetText = R"(profile = "wltp-iterative"
[vehicle]
id = "T"
test_mass_kg = 1470.0
mass_in_running_order_kg = 1380.0
drive = "all"
max_speed_kmh = 185.0
%MODE%
[target]
f0_n = 142.0
f1_n_per_kmh = 0.35
f2_n_per_kmh2 = 0.033
)";
std::string target_text(const std::string& mode_line) {
  std::string s = kTargetText;
  s.replace(s.find("%MODE%"), 6, mode_line);
  return s;
}
}  // namespace

TEST(Combination, TwoWheelDriveModeKeyIsReadAndWritten) {
  EXPECT_FALSE(
      config::parse_target(target_text(""), "t.toml").two_wheel_drive_mode);  // optional, default false
  const VehicleTarget on = config::parse_target(target_text("two_wheel_drive_mode = true"), "t.toml");
  EXPECT_TRUE(on.two_wheel_drive_mode);
  // Written only when true, and read back the same.
  const std::string written = config::target_toml(on, "test");
  EXPECT_TRUE(contains(written, "two_wheel_drive_mode = true")) << written;
  EXPECT_TRUE(config::parse_target(written, "w.toml").two_wheel_drive_mode);
  VehicleTarget off = on;
  off.two_wheel_drive_mode = false;
  EXPECT_FALSE(contains(config::target_toml(off, "test"), "two_wheel_drive_mode"))
      << config::target_toml(off, "test");
  // Not a boolean: refused with the key.
  try {
    config::parse_target(target_text("two_wheel_drive_mode = \"yes\""), "t.toml");
    ADD_FAILURE() << "a string was accepted as a boolean";
  } catch (const config::InputError& e) {
    EXPECT_TRUE(contains(e.what(), "two_wheel_drive_mode")) << e.what();
  }
}

// GTR 15 Annex 4 §8.1.3.4 (text, as the EU text states it): when the dyno accelerates the vehicle only the
// fixed-run method may be used; when the vehicle accelerates itself, either (docs/standards.md §3.3).
TEST(Combination, IterativeRefusedWhenTheDynoAcceleratesTheVehicle) {
  CellFacts dyno = demo_cell();
  dyno.run_up = RunUp::dyno;
  const CombinationProblems c = check_combination(demo(), wltp(), dyno);
  const Problem* p = find(c.cell, "dyno.run_up");
  ASSERT_NE(p, nullptr);
  EXPECT_TRUE(contains(p->message, "fixed-run")) << p->message;
  EXPECT_TRUE(contains(p->message, "GTR 15 Annex 4 §8.1.3.4")) << p->message;
  EXPECT_TRUE(c.any_error());
}

TEST(Combination, FixedRunAllowedWithEitherRunUpAndIterativeWithTheVehicle) {
  const Profile fixed =
      config::load_profile(std::string(LOADTRIM_SOURCE_DIR) + "/config/profiles/wltp-fixed-run.toml");
  ASSERT_EQ(fixed.method, SettingMethod::fixed_run);
  for (RunUp r : {RunUp::dyno, RunUp::vehicle}) {
    CellFacts cell = demo_cell();
    cell.run_up = r;
    EXPECT_EQ(find(check_combination(demo(), fixed, cell).cell, "dyno.run_up"), nullptr) << to_string(r);
  }
  // The iterative method with the vehicle accelerating itself: no run-up problem.
  EXPECT_EQ(find(check_combination(demo(), wltp(), demo_cell()).cell, "dyno.run_up"), nullptr);
  // No cell given (target without --cell): not checked.
  CellFacts unknown = demo_cell();
  unknown.run_up.reset();
  EXPECT_EQ(find(check_combination(demo(), wltp(), unknown).cell, "dyno.run_up"), nullptr);
}
