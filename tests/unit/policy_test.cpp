// Policy in the core (issue 15, item 3): the first-setting choice (core/strategy.hpp), the session's limit
// rules (core/combination.hpp), the band-time formula (core/trace_analysis.hpp) and the drive-to-axle mapping
// (core/vehicle.hpp, config/epa_csv.hpp). Each check names its reference outside loadtrim beside it.
#include <gtest/gtest.h>
#include <stdlib.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <limits>
#include <string>
#include <vector>

#include "config/epa_csv.hpp"
#include "config/loaders.hpp"
#include "core/combination.hpp"
#include "core/predict.hpp"
#include "core/setting.hpp"
#include "core/strategy.hpp"
#include "core/trace_analysis.hpp"
#include "core/vehicle.hpp"

using namespace loadtrim;
using core::AxleLayout;
using core::FirstSetting;
using core::RoadLoad;

namespace {

// The shipped WLTP profile (config/profiles/wltp-iterative.toml): reference speeds 20–130 km/h, run-up margin
// 12 km/h (start 142 km/h), warm-up 80 km/h for 1200 s, stability rule off, loss map of 5 speeds with 5 s
// settle and 5 s average; [initial_setting] f0 0.5 (single axle) / 0.1 (two axle), f1 0.2, f2 1.0.
core::Profile wltp() {
  return config::load_profile(std::string(LOADTRIM_SOURCE_DIR) + "/config/profiles/wltp-iterative.toml");
}
// The invented demo target's curve (samples/targets/demo-hatchback.toml): (142 N, 0.35 N/(km/h), 0.033).
const RoadLoad kDemo{142.0, 0.35, 0.033};
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kInf = std::numeric_limits<double>::infinity();

void expect_curve(const RoadLoad& got, const RoadLoad& want, double tol = 1e-12) {
  EXPECT_NEAR(got.f0_n, want.f0_n, tol);
  EXPECT_NEAR(got.f1_n_per_kmh, want.f1_n_per_kmh, tol);
  EXPECT_NEAR(got.f2_n_per_kmh2, want.f2_n_per_kmh2, tol);
}

// A fleet model whose loss is exactly at0 + slope·TM for both layouts (twelve rows on the line, screening
// bounds respected), as strategy_test builds it.
core::FleetLossModel exact_fleet(const RoadLoad& at0, const RoadLoad& slope) {
  std::vector<core::FleetRow> rows;
  for (AxleLayout l : {AxleLayout::single_axle, AxleLayout::two_axle})
    for (int i = 0; i < 12; ++i) {
      const double tm = 1000.0 + 100.0 * i;
      const RoadLoad loss{at0.f0_n + slope.f0_n * tm, at0.f1_n_per_kmh + slope.f1_n_per_kmh * tm,
                          at0.f2_n_per_kmh2 + slope.f2_n_per_kmh2 * tm};
      const RoadLoad target{300.0, 2.0, 0.05};
      rows.push_back({tm, l, target, target - loss});
    }
  return core::fit_fleet_loss(rows);
}

core::FirstSettingInputs demo_inputs(FirstSetting f) {
  core::FirstSettingInputs in;
  in.requested = f;
  in.target = kDemo;
  in.test_mass_kg = 1470.0;
  in.layout = AxleLayout::single_axle;
  in.rule = wltp().initial;
  return in;
}

// History: a target of (150, 0.4, 0.03) accepted at (100, 0.1, 0.03): loss (50, 0.3, 0) by hand.
core::HistoryEntry a_history() {
  core::HistoryEntry h;
  h.utc = "2026-11-30T10:00:00.000Z";
  h.target = {150.0, 0.4, 0.03};
  h.final_set = {100.0, 0.1, 0.03};
  return h;
}

}  // namespace

// ---- the first setting
// -------------------------------------------------------------------------------------

TEST(FirstSettingChoice, StandardIsTheProfilesRule) {
  // config/profiles/wltp-iterative.toml [initial_setting] (docs/standards.md §3): Ad = 0.5·At single axle,
  // 0.1·At two axle, Bd = 0.2·Bt, Cd = 1.0·Ct. On (142, 0.35, 0.033) by hand: (71, 0.07, 0.033) and (14.2,
  // 0.07, 0.033).
  auto in = demo_inputs(FirstSetting::standard);
  in.history = a_history();  // present, not asked for: ignored
  core::FirstSettingChoice c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "standard");
  EXPECT_EQ(c.why, "");
  EXPECT_FALSE(c.loss);
  expect_curve(c.set, {71.0, 0.07, 0.033});
  in.layout = AxleLayout::two_axle;
  expect_curve(core::choose_first_setting(in).set, {14.2, 0.07, 0.033});
}

TEST(FirstSettingChoice, FleetIsTargetMinusTheModelsLoss) {
  // Loss on the exact line (20 N + 0.05 N/kg·TM, 0.1 + 0.0001·TM, 0): at TM 1470 kg, 93.5 N, 0.247, 0, so the
  // set is (142 − 93.5, 0.35 − 0.247, 0.033) = (48.5, 0.103, 0.033) by hand.
  auto in = demo_inputs(FirstSetting::fleet);
  in.fleet = exact_fleet({20.0, 0.1, 0.0}, {0.05, 0.0001, 0.0});
  ASSERT_TRUE(in.fleet->ok());
  const core::FirstSettingChoice c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "fleet");
  EXPECT_EQ(c.why, "");
  ASSERT_TRUE(c.loss);
  expect_curve(*c.loss, {93.5, 0.247, 0.0}, 1e-8);
  expect_curve(c.set, {48.5, 0.103, 0.033}, 1e-8);
}

TEST(FirstSettingChoice, FleetWithoutDataIsStandardEvenWithHistory) {
  auto in = demo_inputs(FirstSetting::fleet);
  in.history = a_history();
  const core::FirstSettingChoice c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "standard");
  EXPECT_EQ(c.why, "no fleet data");
  expect_curve(c.set, {71.0, 0.07, 0.033});
}

TEST(FirstSettingChoice, HistoryIsTargetMinusTheEarlierLoss) {
  // Loss (50, 0.3, 0) (a_history, by hand): set (92, 0.05, 0.033); the entry's time is recorded.
  auto in = demo_inputs(FirstSetting::history);
  in.history = a_history();
  const core::FirstSettingChoice c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "history");
  ASSERT_TRUE(c.history_utc);
  EXPECT_EQ(*c.history_utc, "2026-11-30T10:00:00.000Z");
  expect_curve(c.set, {92.0, 0.05, 0.033});
}

TEST(FirstSettingChoice, HistoryMissingFallsBackToFleetThenStandard) {
  auto in = demo_inputs(FirstSetting::history);
  in.fleet = exact_fleet({20.0, 0.1, 0.0}, {0.05, 0.0001, 0.0});
  core::FirstSettingChoice c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "fleet");
  EXPECT_EQ(c.why, "no earlier accepted session of this vehicle");
  EXPECT_FALSE(c.history_utc);
  expect_curve(c.set, {48.5, 0.103, 0.033}, 1e-8);
  in.fleet.reset();
  c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "standard");
  expect_curve(c.set, {71.0, 0.07, 0.033});
}

TEST(FirstSettingChoice, LossMapIsTheQuadraticThroughTheHoldPoints) {
  // Three exact points (20, 80), (70, 150), (130, 400): by Lagrange interpolation (exact fractions, as in
  // strategy_test; np.polyfit gives the same) the loss is (2878/33, −19/22, 83/3300), so the set is
  // (142 − 2878/33, 0.35 + 19/22, 0.033 − 83/3300).
  auto in = demo_inputs(FirstSetting::loss_map);
  in.history = a_history();  // not used: the map is there
  in.loss_map = {{20, 80, 0.5, 500}, {70, 150, 0.5, 500}, {130, 400, 0.5, 500}};
  const core::FirstSettingChoice c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "loss-map");
  ASSERT_TRUE(c.map_fit && c.map_residual_sd_n);
  expect_curve(*c.map_fit, {2878.0 / 33.0, -19.0 / 22.0, 83.0 / 3300.0}, 1e-9);
  expect_curve(c.set, {142.0 - 2878.0 / 33.0, 0.35 + 19.0 / 22.0, 0.033 - 83.0 / 3300.0}, 1e-9);
  EXPECT_FALSE(c.history_utc);
}

TEST(FirstSettingChoice, LossMapMissingFallsBackToHistoryFirst) {
  auto in = demo_inputs(FirstSetting::loss_map);
  in.history = a_history();
  in.fleet = exact_fleet({20.0, 0.1, 0.0}, {0.05, 0.0001, 0.0});
  core::FirstSettingChoice c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "history");
  EXPECT_EQ(c.why, "no loss map (not measured)");
  expect_curve(c.set, {92.0, 0.05, 0.033});
  // Recorded behaviour: a fallback to history does not record the entry's time.
  EXPECT_FALSE(c.history_utc);
  EXPECT_FALSE(c.map_fit);
  // One point cannot carry a quadratic: the fit's own message is kept in the reason.
  in.history.reset();
  in.loss_map = {{80, 200, 0.5, 500}};
  c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "fleet");
  EXPECT_EQ(c.why.rfind("no loss map (", 0), 0u) << c.why;
  EXPECT_NE(c.why, "no loss map (not measured)");
}

TEST(FirstSettingChoice, ATargetFilesSetOverridesEveryStrategy) {
  for (FirstSetting f :
       {FirstSetting::standard, FirstSetting::fleet, FirstSetting::history, FirstSetting::loss_map}) {
    auto in = demo_inputs(f);
    in.target_file_set = RoadLoad{60.0, 0.1, 0.03};
    in.history = a_history();
    const core::FirstSettingChoice c = core::choose_first_setting(in);
    EXPECT_EQ(c.used, "target-file");
    EXPECT_EQ(c.why, "");
    EXPECT_FALSE(c.loss);
    expect_curve(c.set, {60.0, 0.1, 0.03}, 0.0);
  }
}

// ---- limits
// --------------------------------------------------------------------------------------------------

TEST(Limits, TheFourteenKmhRule) {
  // GTR 15 §2.2 as the profile states it (config/profiles/wltp-iterative.toml, from memory; docs/standards.md
  // §2): a reference speed v is dropped when v + 14 km/h ≥ the vehicle's maximum speed.
  EXPECT_TRUE(core::reference_speed_kept(130.0, 144.1));
  EXPECT_FALSE(core::reference_speed_kept(130.0, 144.0));  // equal: dropped
  EXPECT_FALSE(core::reference_speed_kept(130.0, 140.0));
  EXPECT_TRUE(core::reference_speed_kept(120.0, 144.0));
  EXPECT_FALSE(core::reference_speed_kept(kNaN, 200.0));
  EXPECT_FALSE(core::reference_speed_kept(20.0, kNaN));
}

TEST(Limits, StartAndWarmUpSpeeds) {
  // Start 130 + 12 = 142 km/h (the profile's top reference speed and run-up margin, GTR 15 §4.3.2.4.1).
  const core::Profile p = wltp();
  EXPECT_TRUE(core::start_speed_below(p, 142.5));
  EXPECT_FALSE(core::start_speed_below(p, 142.0));
  EXPECT_FALSE(core::start_speed_below(p, kNaN));
  EXPECT_TRUE(core::warm_up_speed_within(p, 80.0));  // warm-up 80 km/h: reaching the limit is allowed
  EXPECT_FALSE(core::warm_up_speed_within(p, 79.9));
  EXPECT_DOUBLE_EQ(core::session_speed_limit_kmh(160.0, 185.0, 150.0), 150.0);
}

TEST(Limits, MotoringTimeOfTheWarmUp) {
  // By hand from the profile file: the run-up from standstill to 80 km/h at 1.5 m/s² (80 / 3.6 / 1.5 =
  // 14.81 s) and its 2 s settle + 1200 s + 5 loss-map speeds × (5 s + 5 s + 30 s ramp) = 1416.81 s.
  const core::Profile p = wltp();
  EXPECT_DOUBLE_EQ(core::planned_motoring_s(p), 80.0 / 3.6 / 1.5 + 2.0 + 1400.0);
  EXPECT_TRUE(core::motoring_within(p, 1417.0));
  EXPECT_FALSE(core::motoring_within(p, 1416.0));
  EXPECT_FALSE(core::motoring_within(p, kNaN));
}

TEST(Limits, TheSessionsRefusalNamesTheFirstRuleBroken) {
  const core::Profile p = wltp();
  // Demo cell 160 km/h, demo vehicle 185 km/h, a controller good for 250 km/h, 5400 s of motoring: nothing.
  EXPECT_FALSE(core::limits_refusal(p, 160.0, 185.0, 250.0, 5400.0));
  EXPECT_EQ(core::limits_refusal(p, 142.0, 185.0, 250.0, 5400.0).value_or(""),
            "start speed 142 km/h (top reference speed + run-up margin) is not below the cell's limit of 142 "
            "km/h");
  EXPECT_EQ(core::limits_refusal(p, 160.0, 140.0, 250.0, 5400.0).value_or(""),
            "start speed 142 km/h is not below the vehicle's maximum speed of 140 km/h");
  EXPECT_EQ(core::limits_refusal(p, 160.0, 185.0, 141.0, 5400.0).value_or(""),
            "start speed 142 km/h is not below the controller's limit of 141 km/h");
  // 143 km/h on an unplanned profile: the start speed fits, the 130 km/h point does not (130 + 14 = 144 ≥
  // 143); the session always gets a planned profile (session::plan_inputs), so this is a guard.
  EXPECT_EQ(core::limits_refusal(p, 160.0, 143.0, 250.0, 5400.0).value_or(""),
            "reference speed 130 km/h is within 14 km/h of the vehicle's maximum speed");
  // 1400 s of warm-up and loss map + the run-up from standstill to 80 km/h at 1.5 m/s² and its 2 s settle (80
  // / 3.6 / 1.5 + 2 = 16.81 s, by hand).
  EXPECT_EQ(core::limits_refusal(p, 160.0, 185.0, 250.0, 1416.0).value_or(""),
            "the warm-up needs up to 1416.81 s of motoring, above the cell's limit of 1416 s");
  core::Profile hot = p;
  hot.warm_up.speed_kmh = 155.0;  // above the controller's 150 km/h
  EXPECT_EQ(core::limits_refusal(hot, 160.0, 185.0, 150.0, 5400.0).value_or(""),
            "warm-up speed 155 km/h is above the speed limit of 150 km/h");
}

TEST(Limits, TheSessionAndTheCombinationCheckAgree) {
  // The same rules before connecting (check_combination) and after (limits_refusal, with a controller that
  // adds no limit): over a grid of cell and vehicle speeds and motoring limits, both refuse or both accept.
  const core::Profile p = wltp();
  core::VehicleTarget v;
  v.test_mass_kg = 1470.0;
  v.mass_in_running_order_kg = 1380.0;
  v.target = kDemo;
  core::CellFacts cell;
  cell.max_force_n = 8000.0;
  int refused = 0, accepted = 0;
  for (double cell_kmh : {80.0, 142.0, 150.0, 200.0})
    for (double veh_kmh : {79.0, 142.0, 143.0, 144.0, 144.5, 200.0})
      for (double motoring_s : {1416.0, 1417.0}) {
        cell.max_speed_kmh = cell_kmh;
        cell.max_motoring_s = motoring_s;
        v.max_speed_kmh = veh_kmh;
        const bool combination_refuses = core::check_combination(v, p, cell).any_error();
        // The session runs the planned profile (session::plan_inputs).
        const core::Profile planned =
            core::with_reference_speeds(p, core::plan_reference_speeds(p, veh_kmh, std::nullopt));
        const bool session_refuses =
            core::limits_refusal(planned, cell_kmh, veh_kmh, kInf, motoring_s).has_value();
        EXPECT_EQ(combination_refuses, session_refuses) << cell_kmh << " " << veh_kmh << " " << motoring_s;
        (session_refuses ? refused : accepted)++;
      }
  // Both kinds occur. By hand, with 1417 s of motoring (1416.81 s planned): vehicles of 142–144 km/h drop the
  // 130 km/h point and start at 120 + 12 = 132 km/h, which cells of 142, 150 and 200 km/h allow (3 × 3);
  // vehicles of 144.5 and 200 km/h keep it and start at 142 km/h, which only cells of 150 and 200 km/h allow
  // (2 × 2); the 79 km/h vehicle is below the 80 km/h warm-up and the 80 km/h cell below every start speed.
  // 13 accepted.
  EXPECT_EQ(accepted, 13);
  EXPECT_EQ(refused, 35);
}

// ---- band time
// ----------------------------------------------------------------------------------------------

TEST(BandTime, ConstantLoadIsTheExactCoastTime) {
  // Under a constant force F the deceleration is F/m (Newton), so the time through the band 2·Δv is
  // m·2Δv/F exactly; core::coastdown_time_s (closed-form integral) must agree. By hand: m 1500 kg, Δv 5 km/h,
  // F 300 N: 1500·10/(3.6·300) = 125/9 s.
  EXPECT_NEAR(core::band_time_s(1500.0, 5.0, 300.0), 125.0 / 9.0, 1e-12);
  const auto exact = core::coastdown_time_s({300.0, 0.0, 0.0}, 1500.0, 85.0, 75.0);
  ASSERT_TRUE(exact);
  EXPECT_NEAR(core::band_time_s(1500.0, 5.0, 300.0), *exact, 1e-9);
  // The inverse of the standard's formula (band_force_n): F → Δt → F.
  EXPECT_NEAR(core::band_force_n(1500.0, 5.0, core::band_time_s(1500.0, 5.0, 300.0)), 300.0, 1e-10);
}

TEST(BandTime, QuadraticLoadAgainstAnIndependentIntegral) {
  // With curvature the formula's time (the force at the band centre) is not the coast time. Demo target at
  // 80 km/h (±5 km/h), mass 1497.9 kg. Reference computed with Python (composite Simpson rule, 10^5
  // intervals, of m/(3.6·F(v)) from 75 to 85 km/h): exact 10.927057009443539 s; the formula by hand
  // 1497.9·10/(3.6·381.2) = 10.91509268975166 s (0.11 % short).
  const double m = 1497.9;
  EXPECT_NEAR(core::band_time_s(m, 5.0, kDemo.force_n(80.0)), 10.91509268975166, 1e-12);
  const auto exact = core::coastdown_time_s(kDemo, m, 85.0, 75.0);
  ASSERT_TRUE(exact);
  EXPECT_NEAR(*exact, 10.927057009443539, 1e-9);
}

// ---- drive and axle layout
// ----------------------------------------------------------------------------------

TEST(AxleLayout, AllWheelDriveNeedsTwoAxles) {
  EXPECT_EQ(core::axle_layout_for(core::Drive::front), AxleLayout::single_axle);
  EXPECT_EQ(core::axle_layout_for(core::Drive::rear), AxleLayout::single_axle);
  EXPECT_EQ(core::axle_layout_for(core::Drive::all), AxleLayout::two_axle);
}

TEST(AxleLayout, EpaDriveCodesOfTheExtract) {
  // samples/data/epa_test_car_roadload_MY2016_2019.csv, counted with Python's csv module
  // (collections.Counter(row['drive_system_code'])): F 1617, R 1493, A 270, 4 96, P 9 of 3485 rows. F and R
  // are one driven axle, A, 4 and P all wheels: 3110 single-axle, 375 two-axle.
  const config::EpaFile f = config::read_epa_csv(std::string(LOADTRIM_SOURCE_DIR) +
                                                 "/samples/data/epa_test_car_roadload_MY2016_2019.csv");
  ASSERT_EQ(f.rows.size(), 3485u);
  int single = 0, two = 0;
  for (const auto& r : f.rows) {
    const AxleLayout l = core::axle_layout_for(config::drive_of(r));
    (l == AxleLayout::single_axle ? single : two)++;
    EXPECT_EQ(config::drive_of(r), config::target_from_epa(r, "wltp-iterative").drive);
  }
  EXPECT_EQ(single, 3110);
  EXPECT_EQ(two, 375);
  // Every row of the extract is read: none is left out by the reader's checks.
  EXPECT_TRUE(f.skipped.empty()) << config::skipped_rows_note("extract", f);
  EXPECT_EQ(f.last_line, 3486);
}

// A row the reader cannot use is never guessed at (the brief's rule: bad input names the file, line/key and
// the allowed range; never a silent default): a drive_system_code that is empty or not one of F, R, A, 4, P
// (once taken for all-wheel drive, two-axle), a short row and a number column that is not a number are each
// left out with the line, the column, the value and what is allowed. Spaces around a value are not part of
// it.
TEST(AxleLayout, EpaRowsThatCannotBeUsedAreNamedNotGuessed) {
  std::string dir = (std::filesystem::temp_directory_path() / "loadtrim-epa-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  const std::string csv = dir + "/rows.csv";
  {
    std::ofstream out(csv);
    out << "model_year,test_vehicle_id,test_veh_config_num,drive_system_code,etw_kg,target_f0_N,"
           "target_f1_N_per_kmh,target_f2_N_per_kmh2,set_f0_N,set_f1_N_per_kmh,set_f2_N_per_kmh2\n"
        << "2016,A1,0,F,1500,150,0.5,0.03,20,0.1,0.03\n"     // line 2: good
        << "2016,A2,0,,1500,150,0.5,0.03,20,0.1,0.03\n"      // line 3: empty drive code
        << "2016,A3,0,f,1500,150,0.5,0.03,20,0.1,0.03\n"     // line 4: lower-case f
        << "2016,A4,0,R,1500 ,150,0.5,0.03,20,0.1,0.03\n"    // line 5: a trailing space: read
        << "2016,A5,0,R,1500\n"                              // line 6: short
        << "2016,A6,0,R,15x0,150,0.5,0.03,20,0.1,0.03\n"     // line 7: not a number
        << "2016,A7,0, A ,1500,150,0.5,0.03,20,0.1,0.03\n";  // line 8: spaces around A: read
  }
  const config::EpaFile f = config::read_epa_csv(csv);
  std::vector<int> read;
  for (const auto& r : f.rows) read.push_back(r.line);
  EXPECT_EQ(read, (std::vector<int>{2, 5, 8}));
  EXPECT_EQ(config::drive_of(f.rows[2]), core::Drive::all);
  EXPECT_DOUBLE_EQ(f.rows[1].etw_kg, 1500.0);
  ASSERT_EQ(f.skipped.size(), 4u);
  const std::string codes = "allowed \"F\" (2WD front), \"R\" (2WD rear), \"A\" (AWD), \"4\" (4WD), \"P\"";
  EXPECT_EQ(f.skipped[0].line, 3);
  EXPECT_EQ(f.skipped[0].column, "drive_system_code");
  EXPECT_NE(f.skipped[0].message.find("is empty, " + codes), std::string::npos) << f.skipped[0].message;
  EXPECT_EQ(f.skipped[1].line, 4);
  EXPECT_NE(f.skipped[1].message.find("is \"f\", " + codes), std::string::npos) << f.skipped[1].message;
  EXPECT_EQ(f.skipped[2].line, 6);
  EXPECT_EQ(f.skipped[2].column, "target_f0_N");
  EXPECT_NE(f.skipped[2].message.find("the row has 5 cells, the header 11"), std::string::npos);
  EXPECT_EQ(f.skipped[3].line, 7);
  EXPECT_EQ(f.skipped[3].column, "etw_kg");
  EXPECT_NE(f.skipped[3].message.find("is \"15x0\", not a number: allowed a finite number in kg"),
            std::string::npos);
  const std::string note = config::skipped_rows_note(csv, f, 2);
  EXPECT_NE(note.find(csv + ": line 3, column drive_system_code: is empty"), std::string::npos) << note;
  EXPECT_NE(note.find(csv + ": and 2 more row(s) not used"), std::string::npos) << note;
  // A row read but unable to give a target names its line and the column: ETW −5 kg as the test mass.
  config::EpaRow neg = f.rows[0];
  neg.etw_kg = -5.0;
  const core::Problems bad =
      config::row_errors(neg, core::plausibility(config::target_from_epa(neg, "wltp-iterative")));
  ASSERT_FALSE(bad.empty());
  EXPECT_EQ(bad[0].key.rfind("line 2, column etw_kg", 0), 0u) << bad[0].key;
  EXPECT_NE(bad[0].message.find("is -5, allowed 50 to 20000 kg"), std::string::npos) << bad[0].message;
  std::filesystem::remove_all(dir);
}

// ---- hold points
// -------------------------------------------------------------------------------------------

TEST(HoldPoints, ThePlanSkipsWhatTheLimitForbidsAndTimesTheRest) {
  // Speeds 130, 100, 70, 40, 20 km/h from the 80 km/h warm-up, settle 5 s + average 5 s each. With a 125 km/h
  // limit, 130 is skipped (above 125 − 1). By hand: ramps 80→100→70→40→20 = 20 + 30 + 30 + 20 = 100 km/h at
  // 1.5 m/s² (kHoldRampMps2, common practice, no source) = 100/(3.6·1.5) s, plus 4 × (2 + 5 + 5) s.
  core::LossMap map;  // the profile's defaults
  const core::HoldPlan plan = core::plan_hold_points(map, 80.0, 125.0);
  EXPECT_EQ(plan.speeds_kmh, (std::vector<double>{100.0, 70.0, 40.0, 20.0}));
  EXPECT_EQ(plan.skipped_kmh, (std::vector<double>{130.0}));
  EXPECT_NEAR(plan.planned_s, 100.0 / (3.6 * 1.5) + 4 * 12.0, 1e-12);
  // 131 km/h keeps 130 (130 ≤ 131 − 1); a NaN limit skips everything.
  EXPECT_EQ(core::plan_hold_points(map, 80.0, 131.0).speeds_kmh.size(), 5u);
  EXPECT_TRUE(core::plan_hold_points(map, 80.0, kNaN).speeds_kmh.empty());
}

TEST(HoldPoints, MeanAndSpreadOfAWindow) {
  // By hand: forces 10, 12, 14 N → mean 12 N, population spread sqrt(((−2)² + 0 + 2²)/3) = sqrt(8/3) N.
  const std::vector<double> f = {10.0, 12.0, 14.0};
  const core::HoldPoint hp = core::hold_point(70.0, f);
  EXPECT_EQ(hp.samples, 3);
  EXPECT_DOUBLE_EQ(hp.force_n, 12.0);
  EXPECT_NEAR(hp.force_sd_n, std::sqrt(8.0 / 3.0), 1e-12);
  EXPECT_EQ(core::hold_point(70.0, {}).samples, 0);
}
