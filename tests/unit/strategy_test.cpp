// First-setting strategies (core/strategy.hpp): the loss map (a quadratic through hold points), the fleet
// loss model (straight lines in test mass fitted to EPA rows) and the history, each against a reference
// outside loadtrim: exact interpolation by hand, exact data on known lines, and numpy on the public EPA
// extract in samples/data.
#include "core/strategy.hpp"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

#include "config/epa_csv.hpp"

using namespace loadtrim;
using core::AxleLayout;
using core::RoadLoad;

TEST(Strategy, NamesRoundTrip) {
  // The four names the CLI offers for --first-setting (loadtrim demo/run --help: standard, fleet, loss-map,
  // history) and nothing else.
  for (const char* name : {"standard", "fleet", "loss-map", "history"}) {
    core::FirstSetting f{};
    ASSERT_TRUE(core::parse(name, f)) << name;
    EXPECT_STREQ(core::to_string(f), name);
  }
  core::FirstSetting f = core::FirstSetting::fleet;
  EXPECT_FALSE(core::parse("loss_map", f));
  EXPECT_FALSE(core::parse("", f));
  EXPECT_EQ(f, core::FirstSetting::fleet);  // a refused name leaves the value alone
}

TEST(Strategy, LossMapThroughThreeExactPointsIsTheInterpolatingQuadratic) {
  // Three hold points determine the quadratic uniquely. Solved by hand (Lagrange interpolation, exact
  // fractions) for (20 km/h, 80 N), (70, 150), (130, 400): f0 = 2878/33, f1 = −19/22, f2 = 83/3300;
  // np.polyfit([20, 70, 130], [80, 150, 400], 2) gives the same (8.721212121212153e+01,
  // −8.636363636363695e−01, 2.515151515151521e−02).
  const std::vector<core::HoldPoint> pts = {{20, 80, 0.5, 500}, {70, 150, 0.5, 500}, {130, 400, 0.5, 500}};
  const auto fit = core::fit_loss_map(pts);
  ASSERT_TRUE(fit.ok) << fit.message;
  EXPECT_NEAR(fit.coefficients.f0_n, 2878.0 / 33.0, 1e-9);
  EXPECT_NEAR(fit.coefficients.f1_n_per_kmh, -19.0 / 22.0, 1e-11);
  EXPECT_NEAR(fit.coefficients.f2_n_per_kmh2, 83.0 / 3300.0, 1e-13);
}

TEST(Strategy, LossMapOverFiveSpeedsIsTheLeastSquaresQuadratic) {
  // The profile's default loss-map speeds (130, 100, 70, 40, 20 km/h) with forces that lie on no quadratic;
  // the reference is np.polyfit([130, 100, 70, 40, 20], [455, 301, 203, 131, 97], 2), run once with
  // numpy 1.24: f2 = 2.0127729214066165e−02, f1 = 1.8495988504370775e−01, f0 = 8.8019438789765644e+01.
  const std::vector<core::HoldPoint> pts = {
      {130, 455, 1, 500}, {100, 301, 1, 500}, {70, 203, 1, 500}, {40, 131, 1, 500}, {20, 97, 1, 500}};
  const auto fit = core::fit_loss_map(pts);
  ASSERT_TRUE(fit.ok) << fit.message;
  EXPECT_NEAR(fit.coefficients.f0_n, 8.8019438789765644e+01, 1e-9);
  EXPECT_NEAR(fit.coefficients.f1_n_per_kmh, 1.8495988504370775e-01, 1e-11);
  EXPECT_NEAR(fit.coefficients.f2_n_per_kmh2, 2.0127729214066165e-02, 1e-13);
}

namespace {
// Rows whose loss is exactly on a known line in test mass: loss(TM) = at0 + TM·slope.
core::FleetRow exact_row(double tm, AxleLayout layout, const RoadLoad& at0, const RoadLoad& slope) {
  const RoadLoad target{120.0 + 0.05 * tm, 1.0, 0.035};
  return {tm, layout, target, target - (at0 + slope.scaled(tm))};
}
void expect_load_near(const RoadLoad& a, const RoadLoad& b, double rel) {
  EXPECT_NEAR(a.f0_n, b.f0_n, rel * std::max(1.0, std::abs(b.f0_n)));
  EXPECT_NEAR(a.f1_n_per_kmh, b.f1_n_per_kmh, rel * std::max(1e-3, std::abs(b.f1_n_per_kmh)));
  EXPECT_NEAR(a.f2_n_per_kmh2, b.f2_n_per_kmh2, rel * std::max(1e-5, std::abs(b.f2_n_per_kmh2)));
}
}  // namespace

TEST(Strategy, FleetLossLinesFromExactRowsAndTheScreeningRule) {
  // Least squares on points that lie exactly on a line returns that line. Rows whose loss at 20 or 130 km/h
  // is outside 0–600 N are screened out (header; entry errors in the EPA data, samples/data/README.md): the
  // two outliers below would pull the lines far off if they were used.
  const RoadLoad single0{50.0, -0.8, 0.005}, single_k{0.03, 0.0006, -2e-6};
  const RoadLoad two0{60.0, 1.1, -0.005}, two_k{0.06, -0.0003, 3e-6};
  std::vector<core::FleetRow> rows;
  for (int i = 0; i < 12; ++i)
    rows.push_back(exact_row(1000.0 + 150.0 * i, AxleLayout::single_axle, single0, single_k));
  for (int i = 0; i < 11; ++i)
    rows.push_back(exact_row(1400.0 + 120.0 * i, AxleLayout::two_axle, two0, two_k));
  const RoadLoad t{200, 1, 0.03};
  rows.push_back({1500.0, AxleLayout::single_axle, t, t + RoadLoad{50, 0, 0}});  // loss −50 N: negative
  rows.push_back({1500.0, AxleLayout::two_axle, t, t - RoadLoad{0, 0, 0.05}});  // 845 N at 130 km/h: too high
  const auto m = core::fit_fleet_loss(rows);
  EXPECT_EQ(m.single_axle.rows, 12);
  EXPECT_EQ(m.two_axle.rows, 11);
  EXPECT_TRUE(m.ok());
  expect_load_near(m.single_axle.at_zero_kg, single0, 1e-7);
  expect_load_near(m.single_axle.per_kg, single_k, 1e-7);
  expect_load_near(m.two_axle.at_zero_kg, two0, 1e-7);
  expect_load_near(m.two_axle.per_kg, two_k, 1e-7);
  expect_load_near(m.estimate(1800.0, AxleLayout::two_axle), two0 + two_k.scaled(1800.0), 1e-7);

  // With fewer than ten two-axle rows the two-axle estimate falls back to the single-axle line (header
  // contract); with fewer than ten single-axle rows the model is not usable.
  rows.erase(rows.begin() + 12, rows.begin() + 14);
  const auto few = core::fit_fleet_loss(rows);
  EXPECT_EQ(few.two_axle.rows, 9);
  expect_load_near(few.estimate(1800.0, AxleLayout::two_axle), single0 + single_k.scaled(1800.0), 1e-7);
  rows.erase(rows.begin(), rows.begin() + 3);
  EXPECT_FALSE(core::fit_fleet_loss(rows).ok());
}

TEST(Strategy, FleetLossModelOfTheEpaExtractMatchesNumpy) {
  // The public EPA extract (samples/data, 3485 rows). Reference computed once with numpy 1.24: csv.DictReader
  // over the file, loss = target_* − set_* (SI columns), rows dropped when the loss at 20 or 130 km/h is
  // outside 0–600 N, drive codes F/R single axle and all others two axle (as `loadtrim run` maps them,
  // config::fleet_rows), then np.polyfit(etw_kg, loss_c, 1) per coefficient:
  //   single axle, 3069 rows: intercept (56.75632323558945, −0.8340154471639946, 0.005163029750750922)
  //                           slope (0.02758078850964422, 0.0005898962271224815, −2.2878931099171245e−06)
  //   two axle, 360 rows:     intercept (63.539395896150516, 1.1170868809927548, −0.005572899541863091)
  //                           slope (0.05787184587734525, −0.00034580425126235924, 3.4161173441222815e−06)
  //   estimate at TM 1500 kg, single axle: (98.12750600005577, 0.05082889351972775, 0.001731190085875235)
  const auto f = config::read_epa_csv(std::string(LOADTRIM_SOURCE_DIR) +
                                      "/samples/data/epa_test_car_roadload_MY2016_2019.csv");
  ASSERT_EQ(f.rows.size(), 3485u);
  // The rows as `loadtrim run`, `target` and `bench` build them (config::fleet_rows).
  const auto m = core::fit_fleet_loss(config::fleet_rows(f));
  ASSERT_TRUE(m.ok());
  EXPECT_EQ(m.single_axle.rows, 3069);
  EXPECT_EQ(m.two_axle.rows, 360);
  expect_load_near(m.single_axle.at_zero_kg, {56.75632323558945, -0.8340154471639946, 0.005163029750750922},
                   1e-8);
  expect_load_near(m.single_axle.per_kg,
                   {0.02758078850964422, 0.0005898962271224815, -2.2878931099171245e-06}, 1e-8);
  expect_load_near(m.two_axle.at_zero_kg, {63.539395896150516, 1.1170868809927548, -0.005572899541863091},
                   1e-8);
  expect_load_near(m.two_axle.per_kg, {0.05787184587734525, -0.00034580425126235924, 3.4161173441222815e-06},
                   1e-8);
  expect_load_near(m.estimate(1500.0, AxleLayout::single_axle),
                   {98.12750600005577, 0.05082889351972775, 0.001731190085875235}, 1e-8);
}

TEST(Strategy, SettingFromALossAndFromHistory) {
  // Set = target − loss (header: "the dyno adds what the vehicle does not take itself"); a history entry's
  // loss is target − accepted set, so the same target with the recorded loss gives back the accepted set
  // (algebra), and a heavier target carries the same loss over. Numbers invented for the test.
  const RoadLoad target{140.0, 0.9, 0.036}, loss{80.0, 0.7, 0.004};
  const RoadLoad set = core::setting_for_loss(target, loss);
  EXPECT_DOUBLE_EQ(set.f0_n, 60.0);
  EXPECT_NEAR(set.f1_n_per_kmh, 0.2, 1e-15);
  EXPECT_NEAR(set.f2_n_per_kmh2, 0.032, 1e-15);
  for (double v : {20.0, 80.0, 130.0})
    EXPECT_NEAR(set.force_n(v), target.force_n(v) - loss.force_n(v), 1e-12);
  core::HistoryEntry h;
  h.utc = "2026-01-01T00:00:00Z";
  h.target = target;
  h.final_set = set;
  EXPECT_NEAR(h.loss().f0_n, loss.f0_n, 1e-12);
  EXPECT_NEAR(h.loss().f1_n_per_kmh, loss.f1_n_per_kmh, 1e-15);
  EXPECT_NEAR(h.loss().f2_n_per_kmh2, loss.f2_n_per_kmh2, 1e-15);
}

// --- The history estimate from the record store (core::history_from_store; the rule is docs/store.md's, "The
// history first setting": our rule, no source). Every expected number below is worked by hand from the
// invented sessions: loss = target − accepted set (algebra), the correction the arithmetic mean, per
// coefficient, of (loss on this cell − loss on the other cell) over the pairs.
namespace {
core::StoredSession stored(const std::string& id, const std::string& cell, const std::string& vehicle,
                           const std::string& utc, const RoadLoad& target, const RoadLoad& final_set,
                           const std::optional<RoadLoad>& measured = std::nullopt) {
  return {id, "/lab/sessions/" + id, cell, vehicle, utc, target, final_set, measured, std::nullopt};
}
void expect_load(const RoadLoad& a, const RoadLoad& b) {
  EXPECT_NEAR(a.f0_n, b.f0_n, 1e-9);
  EXPECT_NEAR(a.f1_n_per_kmh, b.f1_n_per_kmh, 1e-12);
  EXPECT_NEAR(a.f2_n_per_kmh2, b.f2_n_per_kmh2, 1e-14);
}
const RoadLoad kVTarget{150.0, 0.5, 0.03};
// Vehicle V: accepted twice on cell A (the newer loss {80, 0.2, 0.001}), once on cell C (loss {75, 0.25,
// 0.0005}); never on cell B, the cell being set.
std::vector<core::StoredSession> v_sessions() {
  return {stored("a-old", "A", "V", "2026-11-01T08:00:00.000Z", kVTarget, {60.0, 0.2, 0.028}),
          stored("a-new", "A", "V", "2026-11-20T08:00:00.000Z", kVTarget, {70.0, 0.3, 0.029}),
          stored("c-1", "C", "V", "2026-11-25T08:00:00.000Z", kVTarget, {75.0, 0.25, 0.0295})};
}
// Two vehicles run on A and B: loss on B − loss on A = {−10, −0.1, 0.001} (P1) and {−4, −0.2, 0.002} (P2).
core::CellPair p1() {
  return {"P1", stored("p1-b", "B", "P1", "2026-11-10T08:00:00.000Z", {120.0, 0.4, 0.03}, {50.0, 0.2, 0.027}),
          stored("p1-a", "A", "P1", "2026-11-09T08:00:00.000Z", {120.0, 0.4, 0.03}, {40.0, 0.1, 0.028})};
}
core::CellPair p2() {
  return {"P2",
          stored("p2-b", "B", "P2", "2026-10-10T08:00:00.000Z", {100.0, 0.3, 0.025}, {40.0, 0.2, 0.023}),
          stored("p2-a", "A", "P2", "2026-10-09T08:00:00.000Z", {100.0, 0.3, 0.025}, {36.0, 0.0, 0.025})};
}
// One vehicle run on C and B: loss on B − loss on C = {5, 0, 0}.
core::CellPair q1(const std::string& vehicle = "Q1", const std::string& day = "2026-11-26") {
  return {
      vehicle,
      stored(vehicle + "-b", "B", vehicle, day + "T09:00:00.000Z", {100.0, 0.3, 0.025}, {35.0, 0.2, 0.023}),
      stored(vehicle + "-c", "C", vehicle, day + "T08:00:00.000Z", {100.0, 0.3, 0.025}, {40.0, 0.2, 0.023})};
}
}  // namespace

TEST(HistoryFromStore, AnotherCellWithTheMostPairsAndTheMeanCorrection) {
  // A has two pairs, C one: A is used although V's session on C is newer. V's latest on A: loss {80, 0.2,
  // 0.001}; correction = mean of {−10, −0.1, 0.001} and {−4, −0.2, 0.002} = {−7, −0.15, 0.0015}; loss
  // {73, 0.05, 0.0025}; set for the target {150, 0.5, 0.03}: {77, 0.45, 0.0275}.
  const auto v = v_sessions();
  const std::vector<core::CellPair> pairs = {p2(), q1(), p1()};
  const auto h = core::history_from_store("B", v, pairs);
  ASSERT_TRUE(h);
  ASSERT_TRUE(h->basis);
  EXPECT_EQ(h->basis->source_cell, "A");
  EXPECT_EQ(h->basis->session_id, "a-new");
  EXPECT_EQ(h->basis->session_folder, "/lab/sessions/a-new");
  EXPECT_FALSE(h->basis->same_cell);
  ASSERT_EQ(h->basis->pairs.size(), 2u);
  EXPECT_EQ(h->basis->pairs[0].vehicle, "P1");  // the newest pair first
  EXPECT_EQ(h->basis->pairs_available, 2);
  expect_load(h->correction, {-7.0, -0.15, 0.0015});
  expect_load(h->basis->correction, {-7.0, -0.15, 0.0015});
  expect_load(h->loss(), {73.0, 0.05, 0.0025});
  core::FirstSettingInputs in;
  in.requested = core::FirstSetting::history;
  in.target = kVTarget;
  in.history = h;
  const auto c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "history");
  ASSERT_TRUE(c.history_basis);
  EXPECT_EQ(c.history_basis->session_id, "a-new");
  expect_load(c.set, {77.0, 0.45, 0.0275});
}

TEST(HistoryFromStore, ATieInPairsGoesToTheCellOfTheNewerSession) {
  // Two pairs each for A and C: C's session (2026-11-25) is newer than A's (2026-11-20). Correction = mean of
  // two {5, 0, 0} = {5, 0, 0}; C's loss {75, 0.25, 0.0005}; loss {80, 0.25, 0.0005}.
  const auto v = v_sessions();
  const std::vector<core::CellPair> pairs = {p1(), p2(), q1("Q1", "2026-11-26"), q1("Q2", "2026-11-27")};
  const auto h = core::history_from_store("B", v, pairs);
  ASSERT_TRUE(h && h->basis);
  EXPECT_EQ(h->basis->source_cell, "C");
  EXPECT_EQ(h->basis->session_id, "c-1");
  ASSERT_EQ(h->basis->pairs.size(), 2u);
  EXPECT_EQ(h->basis->pairs[0].vehicle, "Q2");
  expect_load(h->loss(), {80.0, 0.25, 0.0005});
}

TEST(HistoryFromStore, TheSameCellIsUsedAsItIsWhateverThePairs) {
  // V accepted on B itself (older than its sessions on A and C): B's session, loss {90, 0.1, 0.002}, no
  // correction.
  auto v = v_sessions();
  v.push_back(stored("b-1", "B", "V", "2026-09-01T08:00:00.000Z", kVTarget, {60.0, 0.4, 0.028}));
  const std::vector<core::CellPair> pairs = {p1(), p2()};
  const auto h = core::history_from_store("B", v, pairs);
  ASSERT_TRUE(h && h->basis);
  EXPECT_TRUE(h->basis->same_cell);
  EXPECT_EQ(h->basis->session_id, "b-1");
  EXPECT_TRUE(h->basis->pairs.empty());
  expect_load(h->correction, {0.0, 0.0, 0.0});
  expect_load(h->loss(), {90.0, 0.1, 0.002});
}

TEST(HistoryFromStore, WithoutAPairTheOtherCellsLossIsUsedUncorrectedAndSaidSo) {
  // Only A and C, no pair: the newer session (C, loss {75, 0.25, 0.0005}) as it is.
  const auto v = v_sessions();
  const auto h = core::history_from_store("B", v, {});
  ASSERT_TRUE(h && h->basis);
  EXPECT_EQ(h->basis->source_cell, "C");
  EXPECT_EQ(h->basis->note,
            "no vehicle run on both cells: not corrected; its loss as target − accepted set (no measured "
            "curve: only an iterative session's is used)");
  EXPECT_EQ(h->basis->pairs_available, 0);
  expect_load(h->loss(), {75.0, 0.25, 0.0005});
}

TEST(HistoryFromStore, OnlyTheNewestPairsUpToTheCapAreUsed) {
  // A cap of one pair: P1 (2026-11-10) is newer than P2 (2026-10-10): correction {−10, −0.1, 0.001}, loss
  // {70, 0.1, 0.002}; two pairs were available.
  const auto v = v_sessions();
  const std::vector<core::CellPair> pairs = {p2(), p1()};
  const auto h = core::history_from_store("B", v, pairs, 1);
  ASSERT_TRUE(h && h->basis);
  EXPECT_EQ(h->basis->source_cell, "A");
  ASSERT_EQ(h->basis->pairs.size(), 1u);
  EXPECT_EQ(h->basis->pairs[0].vehicle, "P1");
  EXPECT_EQ(h->basis->pairs_available, 2);
  expect_load(h->loss(), {70.0, 0.1, 0.002});
}

TEST(HistoryFromStore, AnIterativeSessionsLossIsItsLastMeasuredCurveLessItsSetting) {
  // docs/store.md, "The history first setting": V accepted on B with the set {60, 0.4, 0.028} while its last
  // coast-down measured {154, 0.45, 0.0302} against the target {150, 0.5, 0.03} (a deviation of +4 N at
  // 0 km/h, accepted). The loss the rollers showed is measured − set = {94, 0.05, 0.0022} (algebra), not
  // target − set = {90, 0.1, 0.002}; the set for the same target is then {56, 0.45, 0.0278}: the standard's
  // next adjustment (set + target − measured, docs/standards.md §3.4).
  auto v = v_sessions();
  v.push_back(stored("b-1", "B", "V", "2026-09-01T08:00:00.000Z", kVTarget, {60.0, 0.4, 0.028},
                     RoadLoad{154.0, 0.45, 0.0302}));
  const auto h = core::history_from_store("B", v, {});
  ASSERT_TRUE(h && h->basis);
  EXPECT_EQ(h->basis->session_id, "b-1");
  ASSERT_TRUE(h->measured);
  expect_load(h->loss(), {94.0, 0.05, 0.0022});
  EXPECT_EQ(h->basis->note,
            "the vehicle's latest accepted session on this cell: not corrected; its loss as measured at its "
            "last coast-down (that curve less the accepted setting)");
  core::FirstSettingInputs in;
  in.requested = core::FirstSetting::history;
  in.target = kVTarget;
  in.history = h;
  expect_load(core::choose_first_setting(in).set, {56.0, 0.45, 0.0278});
  expect_load(core::choose_first_setting(in).set,
              core::adjusted_setting(kVTarget, {60.0, 0.4, 0.028}, {154.0, 0.45, 0.0302}));
  // From another cell the pairs' losses follow the same rule: a pair on B measured 2 N above its target
  // adds 2 N to the correction.
  auto pair = p1();
  pair.here.measured = RoadLoad{122.0, 0.4, 0.03};  // loss on B 72 instead of 70 at 0 km/h
  const auto other = core::history_from_store("B", v_sessions(), std::vector<core::CellPair>{pair});
  ASSERT_TRUE(other);
  expect_load(other->correction, {-8.0, -0.1, 0.001});
}

// --- The history's day-to-day correction (core::day_to_day_scale; docs/store.md, "The history first
// setting": our rule, no source). Invented warm-ups: one-minute windows at t = 30, 90, ... s; every number
// below is worked by hand.
namespace {
core::WarmUpRecord warm_up(double speed_kmh, double last_t_s, double settled_n) {
  core::WarmUpRecord r{speed_kmh, {}};
  // 40 N more at the start, falling by 4 N a window, settled from 630 s (the shape does not matter to the
  // rule).
  for (double t = 30.0; t <= last_t_s + 1e-9; t += 60.0)
    r.windows.push_back({t, settled_n + std::max(0.0, 40.0 - 4.0 * (t - 30.0) / 60.0)});
  return r;
}
}  // namespace

TEST(DayScale, TodaysWarmUpOverTheEarlierOnesAtTheEndOfTheShorter) {
  // The earlier warm-up's windows end at 1170 s, today's at 1230 s: compared at 1170 s over (990, 1170], the
  // windows at 1050, 1110 and 1170 s of each (both settled there: 200 N and 206 N): ratio 206/200 = 1.03.
  const auto d = core::day_to_day_scale(warm_up(80.0, 1170.0, 200.0), warm_up(80.2, 1230.0, 206.0));
  EXPECT_TRUE(d.used) << d.why;
  EXPECT_EQ(d.why, "");
  EXPECT_DOUBLE_EQ(d.at_s, 1170.0);
  EXPECT_EQ(d.windows_then, 3);
  EXPECT_EQ(d.windows_now, 3);
  EXPECT_DOUBLE_EQ(d.then_n, 200.0);
  EXPECT_DOUBLE_EQ(d.now_n, 206.0);
  EXPECT_NEAR(d.ratio, 1.03, 1e-12);
  // At the same time, not at each one's end: an earlier warm-up that ended at 690 s, still warming, is
  // compared with today's at that time. Windows in (510, 690]: 570, 630 and 690 s, 204, 200, 200 N for the
  // earlier and 210, 206, 206 N today: (622/3)/(604/3).
  const auto early = core::day_to_day_scale(warm_up(80.0, 690.0, 200.0), warm_up(80.0, 1230.0, 206.0));
  EXPECT_TRUE(early.used) << early.why;
  EXPECT_DOUBLE_EQ(early.at_s, 690.0);
  EXPECT_NEAR(early.ratio, 622.0 / 604.0, 1e-12);
}

TEST(DayScale, NotUsedAndSaidWhenTheWarmUpsCannotBeCompared) {
  const auto base = warm_up(80.0, 1170.0, 200.0);
  // Another warm-up speed (0.6 km/h apart; the rule allows 0.5).
  auto d = core::day_to_day_scale(base, warm_up(80.6, 1170.0, 200.0));
  EXPECT_FALSE(d.used);
  EXPECT_DOUBLE_EQ(d.ratio, 1.0);
  EXPECT_NE(d.why.find("not the same speed"), std::string::npos) << d.why;
  // A warm-up whose windows end before 600 s.
  d = core::day_to_day_scale(base, warm_up(80.0, 570.0, 200.0));
  EXPECT_FALSE(d.used);
  EXPECT_NE(d.why.find("end before 600 s"), std::string::npos) << d.why;
  // A change of 30 % (260 N over 200 N) is not the same vehicle state.
  d = core::day_to_day_scale(base, warm_up(80.0, 1170.0, 260.0));
  EXPECT_FALSE(d.used);
  EXPECT_DOUBLE_EQ(d.ratio, 1.0);
  EXPECT_NE(d.why.find("1.300 times"), std::string::npos) << d.why;
  EXPECT_NE(d.why.find("outside 0.80 to 1.25"), std::string::npos) << d.why;
  // The bounds belong to the range: 250/200 = 1.25 and 160/200 = 0.8 are used (each quotient rounds to the
  // same double as the bound's literal).
  d = core::day_to_day_scale(base, warm_up(80.0, 1170.0, 250.0));
  EXPECT_TRUE(d.used) << d.why;
  EXPECT_DOUBLE_EQ(d.ratio, 1.25);
  d = core::day_to_day_scale(base, warm_up(80.0, 1170.0, 160.0));
  EXPECT_TRUE(d.used) << d.why;
  EXPECT_DOUBLE_EQ(d.ratio, 0.8);
  // One window in the compared span (the earlier record keeps only every third window).
  core::WarmUpRecord sparse{80.0, {}};
  for (const auto& w : base.windows)
    if (static_cast<int>(w.t_s) % 180 == 30) sparse.windows.push_back(w);
  ASSERT_EQ(sparse.windows.back().t_s, 1110.0);
  d = core::day_to_day_scale(sparse, warm_up(80.0, 1170.0, 200.0));
  EXPECT_FALSE(d.used);
  EXPECT_NE(d.why.find("fewer than two windows"), std::string::npos) << d.why;
  // A window that is not finite is not a window: today's then end at 1110 s, and both are compared over
  // (930, 1110]: 990, 1050 and 1110 s, 200 and 206 N.
  auto holed = warm_up(80.0, 1170.0, 206.0);
  holed.windows.back().force_n = std::nan("");
  d = core::day_to_day_scale(base, holed);
  EXPECT_TRUE(d.used) << d.why;
  EXPECT_DOUBLE_EQ(d.at_s, 1110.0);
  EXPECT_EQ(d.windows_now, 3);
  EXPECT_NEAR(d.ratio, 1.03, 1e-12);
}

TEST(DayScale, TheHistorysLossIsScaledWhenBothWarmUpsAreGiven) {
  // History loss target − set = {150, 0.5, 0.03} − {70, 0.3, 0.029} = {80, 0.2, 0.001}; scaled by 1.03:
  // {82.4, 0.206, 0.00103}; set = target − that = {67.6, 0.294, 0.02897} (algebra).
  core::HistoryEntry h;
  h.utc = "2026-11-20T08:00:00.000Z";
  h.target = kVTarget;
  h.final_set = {70.0, 0.3, 0.029};
  h.warm_up = warm_up(80.0, 1170.0, 200.0);
  core::FirstSettingInputs in;
  in.requested = core::FirstSetting::history;
  in.target = kVTarget;
  in.history = h;
  in.warm_up_today = warm_up(80.0, 1230.0, 206.0);
  auto c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "history");
  ASSERT_TRUE(c.day_scale && c.loss);
  EXPECT_TRUE(c.day_scale->used);
  expect_load(*c.loss, {82.4, 0.206, 0.00103});
  expect_load(c.set, {67.6, 0.294, 0.02897});
  // The same through the loss map's fallback (no map measured).
  in.requested = core::FirstSetting::loss_map;
  c = core::choose_first_setting(in);
  EXPECT_EQ(c.used, "history");
  ASSERT_TRUE(c.day_scale);
  EXPECT_TRUE(c.day_scale->used);
  expect_load(c.set, {67.6, 0.294, 0.02897});
  // Without today's warm-up, or without the earlier one: the loss as it is, and why.
  in.requested = core::FirstSetting::history;
  in.warm_up_today.reset();
  c = core::choose_first_setting(in);
  ASSERT_TRUE(c.day_scale);
  EXPECT_FALSE(c.day_scale->used);
  EXPECT_NE(c.day_scale->why.find("this session's initial warm-up hold is not known"), std::string::npos);
  expect_load(c.set, {70.0, 0.3, 0.029});
  in.warm_up_today = warm_up(80.0, 1230.0, 206.0);
  in.history->warm_up.reset();
  c = core::choose_first_setting(in);
  ASSERT_TRUE(c.day_scale);
  EXPECT_FALSE(c.day_scale->used);
  EXPECT_NE(c.day_scale->why.find("the earlier session's initial warm-up hold is not known"),
            std::string::npos);
  expect_load(c.set, {70.0, 0.3, 0.029});
  // Another strategy used: no day scale at all.
  in.requested = core::FirstSetting::standard;
  EXPECT_FALSE(core::choose_first_setting(in).day_scale);
}

TEST(HistoryFromStore, TheWarmUpGoesWithTheSameCellsSessionOnly) {
  // docs/store.md: another dyno's hold reads its own, so a session on another cell brings no warm-up.
  auto v = v_sessions();
  for (auto& x : v) x.warm_up = warm_up(80.0, 1170.0, 200.0);
  auto h = core::history_from_store("B", v, {});
  ASSERT_TRUE(h && h->basis);
  EXPECT_FALSE(h->basis->same_cell);
  EXPECT_FALSE(h->warm_up);
  h = core::history_from_store("A", v, {});
  ASSERT_TRUE(h && h->basis);
  EXPECT_TRUE(h->basis->same_cell);
  ASSERT_TRUE(h->warm_up);
  EXPECT_EQ(h->warm_up->windows.size(), 20u);
}

TEST(HistoryFromStore, NoAcceptedSessionIsNoEstimate) {
  EXPECT_FALSE(core::history_from_store("B", {}, std::vector<core::CellPair>{p1()}));
}

TEST(CoastCorrection, AnExactDifferenceIsRecoveredAndTakenOffTheMap) {
  // docs/standards.md §3.15. The hold map is 80 + 0.2·v + 0.02·v² N; the coasts see that less d(v) = 12 +
  // 0.0005·v² N (unit arithmetic), at the seven reference speeds the default map's four coasts span. The fit
  // must return d0 = 12 N and d2 = 0.0005 N/(km/h)² with no residual, and the loss-map strategy must set
  // target − (map − d).
  const RoadLoad map{80.0, 0.2, 0.02};
  std::vector<core::CoastPoint> pts;
  for (double v : {120.0, 110.0, 90.0, 80.0, 60.0, 50.0, 30.0})
    pts.push_back({v, map.force_n(v) - (12.0 + 0.0005 * v * v)});
  const auto c = core::fit_coast_correction(map, pts);
  ASSERT_TRUE(c.ok) << c.why;
  EXPECT_EQ(c.points, 7);
  EXPECT_NEAR(c.d0_n, 12.0, 1e-9);
  EXPECT_NEAR(c.d2_n_per_kmh2, 0.0005, 1e-12);
  EXPECT_NEAR(c.residual_sd_n, 0.0, 1e-9);

  core::FirstSettingInputs in;
  in.requested = core::FirstSetting::loss_map;
  in.target = {150.0, 0.5, 0.035};
  // Hold points exactly on the map (five speeds: the quadratic through them is the map itself).
  for (double v : {130.0, 100.0, 70.0, 40.0, 20.0}) in.loss_map.push_back({v, map.force_n(v), 0.1, 50});
  const auto plain = core::choose_first_setting(in);
  ASSERT_EQ(plain.used, "loss-map");
  EXPECT_FALSE(plain.coast_correction.has_value());
  in.coast_points = pts;
  const auto corrected = core::choose_first_setting(in);
  ASSERT_EQ(corrected.used, "loss-map");
  ASSERT_TRUE(corrected.coast_correction.has_value());
  ASSERT_TRUE(corrected.loss.has_value());
  // set = target − (map − d): at every speed 12 + 0.0005·v² N more than without the coasts.
  for (double v : {20.0, 75.0, 130.0})
    EXPECT_NEAR(corrected.set.force_n(v) - plain.set.force_n(v), 12.0 + 0.0005 * v * v, 1e-6) << v;
  EXPECT_NEAR(corrected.loss->force_n(100.0), map.force_n(100.0) - 17.0, 1e-6);
}

TEST(CoastCorrection, LeastSquaresAgainstNumpyOnePointAndNothingUsable) {
  // Three points on a zero map: d = 5, 8, 9 N at 20, 40, 60 km/h (x = v² = 400, 1600, 3600). numpy 1.24
  // (Debian 12): np.polyfit(x, d, 1) = [1.17346939e-03, 5.14285714e+00]; the residual sd with one degree of
  // freedom, sqrt(sum(r²)/1) = 1.2121830534626532.
  const RoadLoad zero{0.0, 0.0, 0.0};
  const std::vector<core::CoastPoint> three = {{20.0, -5.0}, {40.0, -8.0}, {60.0, -9.0}};
  const auto c = core::fit_coast_correction(zero, three);
  ASSERT_TRUE(c.ok) << c.why;
  EXPECT_NEAR(c.d2_n_per_kmh2, 1.17346939e-03, 1e-11);
  EXPECT_NEAR(c.d0_n, 5.14285714, 1e-8);
  EXPECT_NEAR(c.residual_sd_n, 1.2121830534626532, 1e-9);
  // One speed: the mean difference as a constant (unit arithmetic: (4 + 6)/2 = 5).
  const std::vector<core::CoastPoint> one = {{50.0, -4.0}, {50.0, -6.0}};
  const auto c1 = core::fit_coast_correction(zero, one);
  ASSERT_TRUE(c1.ok);
  EXPECT_DOUBLE_EQ(c1.d0_n, 5.0);
  EXPECT_DOUBLE_EQ(c1.d2_n_per_kmh2, 0.0);
  // Nothing usable (not finite, or no positive speed): not ok, and the strategy keeps the map as it is.
  const std::vector<core::CoastPoint> bad = {{NAN, 3.0}, {40.0, INFINITY}, {0.0, 1.0}};
  const auto cb = core::fit_coast_correction(zero, bad);
  EXPECT_FALSE(cb.ok);
  EXPECT_EQ(cb.points, 0);
  EXPECT_FALSE(cb.why.empty());
  core::FirstSettingInputs in;
  in.requested = core::FirstSetting::loss_map;
  in.target = {150.0, 0.5, 0.035};
  for (double v : {130.0, 100.0, 70.0, 40.0, 20.0}) in.loss_map.push_back({v, 50.0 + 0.01 * v * v, 0.1, 50});
  const auto without = core::choose_first_setting(in);
  in.coast_points = bad;
  const auto with_bad = core::choose_first_setting(in);
  ASSERT_TRUE(with_bad.coast_correction.has_value());
  EXPECT_FALSE(with_bad.coast_correction->ok);
  EXPECT_NEAR(with_bad.set.force_n(100.0), without.set.force_n(100.0), 1e-9);
}

TEST(CoastCorrection, ItIsNeverTrustedAsGiven) {
  // docs/standards.md §3.15 bounds (lab policy, no source); the cases a hostile review found.
  const RoadLoad zero{0.0, 0.0, 0.0};
  // Two points 10 km/h apart and 4 N apart: no d2 from them (span below 40 km/h), the mean as a constant
  // (unit arithmetic: (0 + 4)/2 = 2 N, sd about it √8 = 2.83 N), not a correction carried down to 20 km/h by
  // a slope fitted to their noise. 20 N apart they disagree (sd √200 = 14.1 N above 10 N): refused.
  const std::vector<core::CoastPoint> two = {{110.0, 0.0}, {120.0, -4.0}};
  const auto c2 = core::fit_coast_correction(zero, two);
  ASSERT_TRUE(c2.ok) << c2.why;
  EXPECT_DOUBLE_EQ(c2.d2_n_per_kmh2, 0.0);
  EXPECT_DOUBLE_EQ(c2.d0_n, 2.0);
  EXPECT_NEAR(c2.residual_sd_n, std::sqrt(8.0), 1e-12);
  const std::vector<core::CoastPoint> apart = {{110.0, 0.0}, {120.0, -20.0}};
  EXPECT_FALSE(core::fit_coast_correction(zero, apart).ok);
  // Points that contradict each other by hundreds of N: refused on the residual, said.
  const RoadLoad map{100.0, 0.5, 0.03};
  std::vector<core::CoastPoint> wild;
  int i = 0;
  for (double v : {120.0, 110.0, 90.0, 80.0, 60.0, 50.0, 30.0})
    wild.push_back({v, map.force_n(v) + ((i++ % 2) ? 300.0 : -300.0)});
  const auto cw = core::fit_coast_correction(map, wild);
  EXPECT_FALSE(cw.ok);
  EXPECT_NE(cw.why.find("disagree"), std::string::npos) << cw.why;
  // Consistent points 400 N off (a lying force): refused on the size, said, and the strategy keeps the map.
  core::FirstSettingInputs in;
  in.requested = core::FirstSetting::loss_map;
  in.target = {150.0, 0.5, 0.035};
  const RoadLoad m2{80.0, 0.2, 0.02};
  for (double v : {130.0, 100.0, 70.0, 40.0, 20.0}) in.loss_map.push_back({v, m2.force_n(v), 0.1, 50});
  const auto plain = core::choose_first_setting(in);
  for (double v : {120.0, 110.0}) in.coast_points.push_back({v, m2.force_n(v) - 400.0});
  const auto c = core::choose_first_setting(in);
  ASSERT_TRUE(c.coast_correction.has_value());
  EXPECT_FALSE(c.coast_correction->ok);
  EXPECT_NE(c.coast_correction->why.find("beyond"), std::string::npos) << c.coast_correction->why;
  EXPECT_NEAR(c.set.force_n(100.0), plain.set.force_n(100.0), 1e-9);
  // Coasts asked for and none usable: the record still says so (not silently like coasts off).
  in.coast_points.clear();
  in.coasts_asked = true;
  const auto none = core::choose_first_setting(in);
  ASSERT_TRUE(none.coast_correction.has_value());
  EXPECT_FALSE(none.coast_correction->ok);
  EXPECT_EQ(none.coast_correction->why, "no usable coast point");
  // A difference just inside the bound passes: d = 79.9 N at every speed.
  const std::vector<core::CoastPoint> at_bound = {{30.0, -79.9}, {60.0, -79.9}, {120.0, -79.9}};
  const auto cb = core::fit_coast_correction(zero, at_bound);
  EXPECT_TRUE(cb.ok) << cb.why;
}
