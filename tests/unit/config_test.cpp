// Input files: the shipped ones load; bad ones are refused with file, key, line and allowed range.
#include <gtest/gtest.h>

#include <fstream>
#include <functional>
#include <iterator>
#include <string>
#include <utility>

#include "config/epa_csv.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "config/target_writer.hpp"
#include "core/units.hpp"
#include "support/test_support.hpp"

using namespace loadtrim;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;

std::string refusal(const std::function<void()>& f) {
  try {
    f();
  } catch (const config::InputError& e) {
    return e.what();
  }
  return "";
}

const char* kGoodTarget = R"(profile = "wltp-iterative"
[vehicle]
id = "T1"
test_mass_kg = 1500.0
mass_in_running_order_kg = 1400.0
drive = "front"
max_speed_kmh = 180.0
[target]
f0_n = 100.0
f1_n_per_kmh = 0.5
f2_n_per_kmh2 = 0.03
)";
}  // namespace

TEST(Config, ShippedFilesLoad) {
  for (const char* name : {"wltp-iterative", "wltp-fixed-run", "us-iterative"}) {
    core::Problems w;
    const core::Profile p = config::load_profile(config::profile_path(kSrc + "/config/profiles", name), &w);
    EXPECT_EQ(p.name, name);
    EXPECT_TRUE(w.empty()) << config::format_problems(name, w);
  }
  const auto wltp = config::load_profile(kSrc + "/config/profiles/wltp-iterative.toml");
  EXPECT_EQ(wltp.reference_speeds_kmh.size(), 12u);
  EXPECT_EQ(wltp.method, core::SettingMethod::iterative);
  EXPECT_EQ(config::load_profile(kSrc + "/config/profiles/wltp-fixed-run.toml").method,
            core::SettingMethod::fixed_run);
  const auto us = config::load_profile(kSrc + "/config/profiles/us-iterative.toml");
  EXPECT_DOUBLE_EQ(us.reference_speeds_kmh.front(), 15 * 1.609344);  // NIST SP 811: exact mph factor
  EXPECT_DOUBLE_EQ(us.band_half_width_kmh, 2.5 * 1.609344);
  core::Problems w;
  const auto v = config::load_target(kSrc + "/samples/targets/demo-hatchback.toml", &w);
  EXPECT_TRUE(w.empty()) << config::format_problems("demo", w);
  EXPECT_NEAR(core::resolved_rotating_mass_kg(v, wltp.mass), 0.03 * (1380.0 + 25.0), 1e-12);  // EU SA4 §2.5.1
  const auto t = config::load_truth(kSrc + "/samples/truths/demo-hatchback.toml");
  EXPECT_EQ(t.vehicle.test_mass_kg, 1470.0);
}

TEST(Config, TruthsWithoutTheNewerKeysLoadAsNoneAndTheKeysRoundTrip) {
  // A truth file from before the steady difference's speed part and the load cell's calibration existed (the
  // shipped demo) loads with none: b2 = 0, gain 1, offset 0 (docs/performance.md, "Truth presets").
  const auto old = config::load_truth(kSrc + "/samples/truths/demo-hatchback.toml");
  EXPECT_EQ(old.vehicle.hold_bias_n_per_kmh2, 0.0);
  EXPECT_EQ(old.dyno.load_cell_gain, 1.0);
  EXPECT_EQ(old.dyno.load_cell_offset_n, 0.0);
  // Written and read back: the same values.
  physics::Truth t = old;
  t.vehicle.hold_bias_n_per_kmh2 = 0.00061;
  t.dyno.load_cell_gain = 0.987;
  t.dyno.load_cell_offset_n = -4.25;
  const auto back = config::parse_truth(config::truth_toml(t, "round trip"), "round-trip.toml");
  EXPECT_DOUBLE_EQ(back.vehicle.hold_bias_n_per_kmh2, 0.00061);
  EXPECT_DOUBLE_EQ(back.dyno.load_cell_gain, 0.987);
  EXPECT_DOUBLE_EQ(back.dyno.load_cell_offset_n, -4.25);
  // Out of range: refused with the key and its range.
  const std::string msg = refusal([] {
    config::parse_truth("[vehicle]\ntest_mass_kg = 1500\n[dyno]\nload_cell_gain = 1.5\n", "bad-cell.toml");
  });
  EXPECT_NE(msg.find("bad-cell.toml: error: dyno.load_cell_gain (line 4): is 1.5, allowed 0.8 to 1.2"),
            std::string::npos)
      << msg;
}

TEST(Config, UsTargetsConvertExactly) {
  std::string text = kGoodTarget;
  text.replace(text.find("[target]"), std::string::npos,
               "[target_us]\na_lbf = 37.6\nb_lbf_per_mph = 0.238\nc_lbf_per_mph2 = 0.0211\n");
  const auto v = config::parse_target(text, "us.toml");
  // NIST SP 811: 1 lbf = 4.4482216152605 N, 1 mph = 1.609344 km/h.
  EXPECT_PRED3(loadtrim::testing::close_rel, v.target.f0_n, 37.6 * 4.4482216152605, 1e-12);
  EXPECT_PRED3(loadtrim::testing::close_rel, v.target.f1_n_per_kmh, 0.238 * 4.4482216152605 / 1.609344,
               1e-12);
  EXPECT_PRED3(loadtrim::testing::close_rel, v.target.f2_n_per_kmh2,
               0.0211 * 4.4482216152605 / (1.609344 * 1.609344), 1e-12);
  // The console then speaks US units too (session/console.hpp); a metric target does not.
  EXPECT_TRUE(v.target_given_in_us);
  EXPECT_FALSE(config::parse_target(kGoodTarget, "metric.toml").target_given_in_us);
}

TEST(Config, BadTargetsAreRefusedWithKeyAndRange) {
  auto with = [](const std::string& from, const std::string& to) {
    std::string t = kGoodTarget;
    t.replace(t.find(from), from.size(), to);
    return t;
  };
  struct Case {
    std::string text, must_contain;
  };
  const Case cases[] = {
      {with("test_mass_kg = 1500.0", "test_mass_kg = -5.0"),
       "vehicle.test_mass_kg (line 4): is -5, allowed 50 to 20000 kg"},
      {with("test_mass_kg = 1500.0\n", ""), "vehicle.test_mass_kg: is missing, allowed 50 to 20000 kg"},
      {with("test_mass_kg = 1500.0", "test_mass_kg = \"heavy\""),
       "vehicle.test_mass_kg (line 4): must be a number"},
      {with("f2_n_per_kmh2 = 0.03", "f2_n_per_kmh2 = -0.03"),
       "target.f2_n_per_kmh2 (line 11): is -0.03, must be positive"},
      {with("f0_n = 100.0", "f0_n = nan"), "target.f0_n (line 9): is nan, must be a finite number"},
      {with("f0_n = 100.0", "f0_n = inf"), "must be a finite number"},
      {with("drive = \"front\"", "drive = \"sideways\""),
       "vehicle.drive (line 6): is \"sideways\", allowed \"front\", \"rear\", \"all\""},
      {with("f1_n_per_kmh = 0.5", "f1_n_per_kmh = 0.5 0.6"), "not valid TOML"},
      {"", "the file is empty"},
      {std::string("profile = \"x\"\0\x01\x02", 16), "binary data"},
  };
  for (const auto& c : cases) {
    const std::string msg = refusal([&] { config::parse_target(c.text, "bad-target.toml"); });
    EXPECT_NE(msg.find("bad-target.toml"), std::string::npos) << msg;
    EXPECT_NE(msg.find(c.must_contain), std::string::npos)
        << "expected: " << c.must_contain << "\ngot: " << msg;
  }
  // Every problem at once, not only the first.
  const std::string many = refusal([&] {
    config::parse_target(with("test_mass_kg = 1500.0", "test_mass_kg = -5.0").replace(0, 0, "") + "",
                         "m.toml");
  });
  std::string two = with("max_speed_kmh = 180.0", "max_speed_kmh = 999.0");
  two = two.replace(two.find("f2_n_per_kmh2 = 0.03"), 20, "f2_n_per_kmh2 = -0.1");
  const std::string both = refusal([&] { config::parse_target(two, "two.toml"); });
  EXPECT_NE(both.find("vehicle.max_speed_kmh"), std::string::npos) << both;
  EXPECT_NE(both.find("target.f2_n_per_kmh2"), std::string::npos) << both;
  EXPECT_FALSE(many.empty());
}

TEST(Config, PlausibilityWarningsNameTheLikelyMistake) {
  // F0 given in lbf by mistake: F0/(TM·g) = 22.5/(1500·9.80665) = 0.0015, below 0.004 (common practice, no
  // source).
  std::string t = kGoodTarget;
  t.replace(t.find("f0_n = 100.0"), 12, "f0_n = 22.5");
  core::Problems w;
  config::parse_target(t, "lbf.toml", &w);
  ASSERT_FALSE(w.empty());
  EXPECT_NE(w[0].message.find("lbf"), std::string::npos) << w[0].message;
  // Unknown keys are warnings, not silent.
  std::string u = kGoodTarget;
  u += "[extra]\nf3 = 1\n";
  core::Problems w2;
  config::parse_target(u, "u.toml", &w2);
  ASSERT_EQ(w2.size(), 1u);
  EXPECT_NE(w2[0].key.find("extra"), std::string::npos);
  EXPECT_NE(w2[0].message.find("unknown key"), std::string::npos);
}

TEST(Config, BadProfilesAndTruthsAreRefused) {
  const std::string msg = refusal([] {
    config::parse_profile(
        "name = \"p\"\n[bands]\nreference_speeds_kmh = [20, 30, 500]\nhalf_width_kmh = 5.0\n"
        "[acceptance]\ntolerance_n = 10.0\n[run]\nrun_up_margin_kmh = 2.0\n[method]\nkind = \"guess\"\n",
        "bad-profile.toml");
  });
  EXPECT_NE(
      msg.find(
          "bad-profile.toml: error: bands.reference_speeds_kmh[2] (line 3): is 500, allowed 1 to 250 km/h"),
      std::string::npos)
      << msg;
  EXPECT_NE(msg.find("method.kind (line 10): is \"guess\", allowed \"iterative\", \"fixed-run\""),
            std::string::npos)
      << msg;
  EXPECT_NE(msg.find("run.run_up_margin_kmh (line 8): is 2, allowed 7.5 to 30 km/h"), std::string::npos)
      << msg;
  const std::string tmsg = refusal([] {
    config::parse_truth("[vehicle]\ntest_mass_kg = 1500\n[dyno]\nroller_diameter_m = 30\n", "bad-truth.toml");
  });
  EXPECT_NE(tmsg.find("bad-truth.toml: error: dyno.roller_diameter_m (line 4): is 30, allowed 0.2 to 3 m"),
            std::string::npos)
      << tmsg;
}

TEST(Config, TheCrossingWindowTheLossBasisAndTheAimLoadAndAreRefusedOutOfRange) {
  // The shipped profiles set each of them (docs/standards.md §2.10, §3.16, §3.17); a profile without them
  // keeps the earlier behaviour (2.5 km/h, the band regression, the next coast-down).
  const auto wltp = config::load_profile(kSrc + "/config/profiles/wltp-iterative.toml");
  EXPECT_DOUBLE_EQ(wltp.crossing_fit_half_width_kmh, 5.0);
  EXPECT_EQ(wltp.adjust_from, core::Profile::AdjustFrom::whole_trace);
  EXPECT_EQ(wltp.warm_up.anticipate_for, core::WarmUp::AnticipateFor::passes);
  const auto us = config::load_profile(kSrc + "/config/profiles/us-iterative.toml");
  EXPECT_DOUBLE_EQ(us.crossing_fit_half_width_kmh, 2.5 * 1.609344);  // NIST SP 811: exact mph factor
  // extra_bands and extra_method go into their tables; extra_warm_up makes a [warm_up] table at the end.
  auto profile_text = [](const std::string& extra_bands, const std::string& extra_method,
                         const std::string& extra_warm_up) {
    return "name = \"p\"\n[bands]\nreference_speeds_kmh = [20, 30, 40]\nhalf_width_kmh = 5.0\n" +
           extra_bands +
           "[acceptance]\ntolerance_n = 10.0\n[run]\nrun_up_margin_kmh = 10.0\n[method]\nkind = "
           "\"iterative\"\n" +
           extra_method + (extra_warm_up.empty() ? "" : "[warm_up]\n" + extra_warm_up);
  };
  const auto plain = config::parse_profile(profile_text("", "", ""), "plain.toml");
  EXPECT_DOUBLE_EQ(plain.crossing_fit_half_width_kmh, 2.5);
  EXPECT_EQ(plain.adjust_from, core::Profile::AdjustFrom::band_regression);
  EXPECT_EQ(plain.warm_up.anticipate_for, core::WarmUp::AnticipateFor::next);
  const std::string too_wide = refusal([&] {
    config::parse_profile(profile_text("crossing_fit_half_width_kmh = 12.0\n", "", ""), "bad.toml");
  });
  EXPECT_NE(too_wide.find(
                "bad.toml: error: bands.crossing_fit_half_width_kmh (line 5): is 12, allowed 1 to 10 km/h"),
            std::string::npos)
      << too_wide;
  const std::string basis = refusal(
      [&] { config::parse_profile(profile_text("", "adjust_from = \"average\"\n", ""), "bad.toml"); });
  EXPECT_NE(basis.find(
                "method.adjust_from (line 11): is \"average\", allowed \"band-regression\", \"whole-trace\""),
            std::string::npos)
      << basis;
  const std::string aim =
      refusal([&] { config::parse_profile(profile_text("", "", "anticipate_for = \"all\"\n"), "bad.toml"); });
  EXPECT_NE(aim.find("warm_up.anticipate_for (line 12): is \"all\", allowed \"next\", \"passes\""),
            std::string::npos)
      << aim;
  // warm_up.check_fully_warm (docs/standards.md §3.18): set in every shipped profile (where it waits for a
  // lab to choose the drift rule "require": with "warn" it does nothing), off when absent, and a value that
  // is not a boolean is refused naming the key and its line.
  EXPECT_TRUE(wltp.warm_up.check_fully_warm);
  EXPECT_TRUE(us.warm_up.check_fully_warm);
  EXPECT_TRUE(config::load_profile(kSrc + "/config/profiles/wltp-fixed-run.toml").warm_up.check_fully_warm);
  EXPECT_FALSE(plain.warm_up.check_fully_warm);
  const std::string warm = refusal(
      [&] { config::parse_profile(profile_text("", "", "check_fully_warm = \"yes\"\n"), "bad.toml"); });
  EXPECT_NE(warm.find("bad.toml: error: warm_up.check_fully_warm (line 12)"), std::string::npos) << warm;
  // warm_up.predict_next_pass and next_pass_risk (docs/standards.md §3.19): set in the shipped iterative
  // profiles (risk 0.3: lab policy, no source; docs/performance.md measures it), off (risk 0.5) when absent;
  // a risk outside 0.01 to 0.99 is refused naming the key, its line and the range.
  EXPECT_TRUE(wltp.warm_up.predict_next_pass);
  EXPECT_TRUE(us.warm_up.predict_next_pass);
  EXPECT_DOUBLE_EQ(wltp.warm_up.next_pass_risk, 0.3);
  EXPECT_DOUBLE_EQ(us.warm_up.next_pass_risk, 0.3);
  EXPECT_FALSE(plain.warm_up.predict_next_pass);
  EXPECT_DOUBLE_EQ(plain.warm_up.next_pass_risk, 0.5);
  const std::string risk =
      refusal([&] { config::parse_profile(profile_text("", "", "next_pass_risk = 1.5\n"), "bad.toml"); });
  EXPECT_NE(risk.find("bad.toml: error: warm_up.next_pass_risk (line 12)"), std::string::npos) << risk;
  EXPECT_NE(risk.find("0.99"), std::string::npos) << risk;
  const std::string predict =
      refusal([&] { config::parse_profile(profile_text("", "", "predict_next_pass = 1\n"), "bad.toml"); });
  EXPECT_NE(predict.find("warm_up.predict_next_pass (line 12)"), std::string::npos) << predict;
  // Asked for where it cannot act (no anticipation; the fixed-run method), predict_next_pass loads with one
  // warning on its key and line saying the rule does nothing (docs/standards.md §3.19); with the
  // anticipation on and the iterative method, no warning.
  const std::string head =
      "name = \"p\"\n[bands]\nreference_speeds_kmh = [20, 30, 40]\nhalf_width_kmh = 5.0\n[acceptance]\n"
      "tolerance_n = 10.0\n[run]\nrun_up_margin_kmh = 10.0\n[method]\n";
  const auto next_pass_warnings = [&](const std::string& kind, const std::string& anticipate) {
    core::Problems w;
    (void)config::parse_profile(head + "kind = \"" + kind + "\"\n[warm_up]\npredict_next_pass = true\n" +
                                    "anticipate_drift = " + anticipate + "\n",
                                "np.toml", &w);
    return config::format_problems("np.toml", w);
  };
  const std::string no_anticipation = next_pass_warnings("iterative", "false");
  EXPECT_NE(no_anticipation.find("np.toml: warning: warm_up.predict_next_pass (line 12): is true, but "
                                 "warm_up.anticipate_drift is false"),
            std::string::npos)
      << no_anticipation;
  EXPECT_NE(no_anticipation.find("the rule does nothing"), std::string::npos) << no_anticipation;
  const std::string fixed_run = next_pass_warnings("fixed-run", "true");
  EXPECT_NE(
      fixed_run.find("np.toml: warning: warm_up.predict_next_pass (line 12): is true, but the method is "
                     "fixed-run"),
      std::string::npos)
      << fixed_run;
  EXPECT_EQ(next_pass_warnings("iterative", "true"), "");
  // A fixed-run profile with drift_rule "require" and no verification run loads, with one warning on the key
  // and its line (docs/standards.md §3.12): the held coast-downs can only confirm or reject the final
  // setting.
  core::Problems held;
  const auto fixed = config::parse_profile(
      "name = \"p\"\n[bands]\nreference_speeds_kmh = [20, 30, 40]\nhalf_width_kmh = 5.0\n[acceptance]\n"
      "tolerance_n = 10.0\n[run]\nrun_up_margin_kmh = 10.0\n[method]\nkind = \"fixed-run\"\n"
      "fixed_run_verification_runs = 0\n[warm_up]\ndrift_rule = \"require\"\n",
      "held.toml", &held);
  EXPECT_EQ(fixed.method, core::SettingMethod::fixed_run);
  ASSERT_EQ(held.size(), 1u) << config::format_problems("held.toml", held);
  EXPECT_EQ(held[0].severity, core::Problem::Severity::warning);
  const std::string held_text = config::format_problems("held.toml", held);
  EXPECT_NE(
      held_text.find("held.toml: warning: warm_up.drift_rule (line 13): is \"require\" with the fixed-run "
                     "method and method.fixed_run_verification_runs = 0"),
      std::string::npos)
      << held_text;
  // A crossing window in km/h in a profile whose speeds are in mph is refused, not ignored.
  const std::string mixed = refusal([] {
    config::parse_profile(
        "name = \"p\"\n[bands]\nreference_speeds_mph = [15, 20]\nhalf_width_mph = 2.5\n"
        "crossing_fit_half_width_kmh = 5.0\n[acceptance]\ntolerance_n = 10.0\n[run]\nrun_up_margin_kmh = "
        "10.0\n"
        "[method]\nkind = \"iterative\"\n",
        "mixed.toml");
  });
  EXPECT_NE(mixed.find("give speeds in km/h or in mph, not both"), std::string::npos) << mixed;
  // The crossing window in mph is refused below 0.621372 mph under its own key and line: 0.62 mph is 0.998
  // km/h, below the 1 km/h the km/h key allows (1 mph = 1.609344 km/h exactly, NIST SP 811;
  // config::us_bound).
  const std::string narrow = refusal([] {
    config::parse_profile(
        "name = \"p\"\n[bands]\nreference_speeds_mph = [15, 20, 25]\nhalf_width_mph = 2.5\n"
        "crossing_fit_half_width_mph = 0.62\n[acceptance]\ntolerance_n = 10.0\n[run]\nrun_up_margin_kmh = "
        "10.0\n[method]\nkind = \"iterative\"\n",
        "narrow.toml");
  });
  EXPECT_NE(
      narrow.find("bands.crossing_fit_half_width_mph (line 5): is 0.62, allowed 0.621372 to 6.21371 mph"),
      std::string::npos)
      << narrow;
}

// A key in US units is checked against the range the tool enforces in metric units, converted with the exact
// NIST SP 811 factors (core/units.hpp) and rounded inward to 6 significant digits (config::us_bound), and a
// refusal names the key typed with that range in its unit: never the metric key, never km/h or N.
TEST(Config, UsUnitKeysAreCheckedAndNamedInTheirOwnUnits) {
  namespace u = core::units;
  // The coefficient ranges of [target_us] / [initial_set_us] and --us are those of [target] converted.
  const double factor[3] = {1.0 / u::kNewtonPerLbf, u::kKmhPerMph / u::kNewtonPerLbf,
                            u::kKmhPerMph * u::kKmhPerMph / u::kNewtonPerLbf};
  for (int i = 0; i < 3; ++i) {
    const double lo = config::kMetricCoefficients[i].lo * factor[i],
                 hi = config::kMetricCoefficients[i].hi * factor[i];
    EXPECT_DOUBLE_EQ(config::kUsCoefficients[i].lo, config::us_bound(lo, true)) << i;
    EXPECT_DOUBLE_EQ(config::kUsCoefficients[i].hi, config::us_bound(hi, false)) << i;
    EXPECT_GE(config::kUsCoefficients[i].lo, lo) << i;
    EXPECT_LE(config::kUsCoefficients[i].hi, hi) << i;
    EXPECT_LT(config::kUsCoefficients[i].hi, hi * 1.00001) << i;  // 6 significant digits: within 0.001 %
  }
  EXPECT_DOUBLE_EQ(config::us_bound(u::kmh_to_mph(1.0), true), 0.621372);
  EXPECT_DOUBLE_EQ(config::us_bound(u::kmh_to_mph(10.0), false), 6.21371);

  // A US profile: each band key refused in mph, with the metric check's range in mph.
  std::ifstream in(kSrc + "/config/profiles/us-iterative.toml");
  const std::string us_profile((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  // (The run-up margin, in km/h, must exceed the half width plus the crossing window: 30 km/h for the edges.)
  auto profile_with = [&](const std::string& from, const std::string& to, bool wide_margin = false) {
    std::string t = us_profile;
    if (wide_margin) t.replace(t.find("run_up_margin_kmh = 12.0"), 24, "run_up_margin_kmh = 30.0");
    const auto at = t.find(from);
    EXPECT_NE(at, std::string::npos) << from;
    if (at != std::string::npos) t.replace(at, from.size(), to);
    return refusal([&] { config::parse_profile(t, "us.toml"); });
  };
  struct Row {
    std::string from, to, said;
  };
  const Row profile_rows[] = {
      {"half_width_mph = 2.5", "half_width_mph = 0.55", "bands.half_width_mph (line "},
      {"half_width_mph = 2.5", "half_width_mph = 0.55", "is 0.55, allowed 0.621372 to 6.21371 mph"},
      {"half_width_mph = 2.5", "half_width_mph = 6.5", "is 6.5, allowed 0.621372 to 6.21371 mph"},
      {"crossing_fit_half_width_mph = 2.5", "crossing_fit_half_width_mph = 6.5",
       "bands.crossing_fit_half_width_mph (line "},
      {"crossing_fit_half_width_mph = 2.5", "crossing_fit_half_width_mph = 6.5",
       "allowed 0.621372 to 6.21371 mph"},
      // The lowest reference speed: the half width + 4 km/h (2.5 + 2.48548 mph), the highest 250 km/h.
      {"[15, 20,", "[4.9, 20,", "bands.reference_speeds_mph[0] (line "},
      {"[15, 20,", "[4.9, 20,", "is 4.9, allowed 4.98549 to 155.342 mph"},
      {"65, 70]", "65, 156]", "bands.reference_speeds_mph[11] (line "},
      {"65, 70]", "65, 156]", "is 156, allowed 4.98549 to 155.342 mph"},
  };
  for (const auto& r : profile_rows) {
    const std::string msg = profile_with(r.from, r.to);
    EXPECT_NE(msg.find(r.said), std::string::npos) << r.to << "\nexpected: " << r.said << "\ngot: " << msg;
    EXPECT_EQ(msg.find("_kmh"), std::string::npos) << msg;
    EXPECT_EQ(msg.find("km/h"), std::string::npos) << msg;
  }
  // The edges of the printed ranges pass (the metric check behind them too).
  for (const auto& [from, to] :
       {std::pair<std::string, std::string>{"half_width_mph = 2.5", "half_width_mph = 6.21371"},
        {"half_width_mph = 2.5", "half_width_mph = 0.621372"},
        {"crossing_fit_half_width_mph = 2.5", "crossing_fit_half_width_mph = 6.21371"},
        {"65, 70]", "65, 155.342]"},
        {"[15, 20,", "[4.98549, 20,"},
        // The exact metric edges converted and rounded to the nearest 5 significant digits: 10 km/h is
        // 6.2137119 mph, 1 km/h 0.6213712 mph, 250 km/h 155.34280 mph, the half width + 4 km/h 4.9854848 mph.
        // The metric check accepts them, and so does the mph one (4 digits, 6.213 and 0.6214, would not).
        {"half_width_mph = 2.5", "half_width_mph = 6.2137"},
        {"crossing_fit_half_width_mph = 2.5", "crossing_fit_half_width_mph = 0.62138"},
        {"65, 70]", "65, 155.34]"},
        {"[15, 20,", "[4.9855, 20,"}})
    EXPECT_EQ(profile_with(from, to, true), "") << to;

  // A [target_us] table: its keys and its units.
  auto us_target = [](const std::string& a, const std::string& b, const std::string& c,
                      core::Problems* w = nullptr) {
    std::string text = kGoodTarget;
    text.replace(text.find("[target]"), std::string::npos,
                 "[target_us]\na_lbf = " + a + "\nb_lbf_per_mph = " + b + "\nc_lbf_per_mph2 = " + c + "\n");
    return refusal([&] { config::parse_target(text, "us.toml", w); });
  };
  const Row target_rows[] = {
      {"a", "1150", "target_us.a_lbf (line 9): is 1150, allowed -1124.04 to 1124.04 lbf"},
      {"a", "-5", "target_us.a_lbf (line 9): is -5, must not be negative (allowed 0 to 1124.04 lbf)"},
      {"b", "19", "target_us.b_lbf_per_mph (line 10): is 19, allowed -18.0897 to 18.0897 lbf/mph"},
      {"c", "0.6", "target_us.c_lbf_per_mph2 (line 11): is 0.6, allowed -0.582252 to 0.582252 lbf/mph²"},
      {"c", "-0.02",
       "target_us.c_lbf_per_mph2 (line 11): is -0.02, must be positive (allowed 0 to 0.11645 lbf/mph²)"},
      {"c", "0.2", "target_us.c_lbf_per_mph2 (line 11): is 0.2, allowed 0 to 0.11645 lbf/mph²"},
      // Above the exact bound, the metric 0.2 N/(km/h)² converted (0.1164505): refused in lbf/mph².
      {"c", "0.116451", "target_us.c_lbf_per_mph2 (line 11): is 0.116451, allowed 0 to 0.11645 lbf/mph²"},
      // Above the printed bound and below the exact one (7 digits): refused as printed.
      {"c", "0.1164502", "target_us.c_lbf_per_mph2 (line 11): is 0.11645, allowed 0 to 0.11645 lbf/mph²"},
  };
  for (const auto& r : target_rows) {
    const std::string msg =
        us_target(r.from == "a" ? r.to : "30", r.from == "b" ? r.to : "0.3", r.from == "c" ? r.to : "0.02");
    EXPECT_NE(msg.find(r.said), std::string::npos) << "expected: " << r.said << "\ngot: " << msg;
    EXPECT_EQ(msg.find("target."), std::string::npos) << msg;
    EXPECT_EQ(msg.find("N/(km/h)"), std::string::npos) << msg;
  }
  EXPECT_EQ(us_target("1124.04", "18.0897", "0.11645"), "");  // the printed edges pass
  // Values inside the exact edges typed with fewer digits (5000 N is 1124.0447 lbf, 50 N/(km/h) 18.089746
  // lbf/mph, 0.2 N/(km/h)² 0.1164505 lbf/mph²): accepted, as the metric check accepts them (4 significant
  // digits would print and check ±18.08 and 0.1164, and refuse 18.089 and 0.11645).
  EXPECT_EQ(us_target("1124.0", "18.089", "0.11645"), "");
  EXPECT_EQ(us_target("1124.0", "-18.089", "0.11645"), "");
  EXPECT_NE(us_target("1124.05", "0.3", "0.02"), "");  // above the exact edge: the metric check refuses too
  // Warnings too: B outside the usual ±10 N/(km/h), C below the usual 0.005 N/(km/h)², in US units.
  core::Problems w;
  EXPECT_EQ(us_target("30", "5", "0.002", &w), "");
  const std::string warned = config::format_problems("us.toml", w);
  EXPECT_NE(warned.find("target_us.b_lbf_per_mph (line 10): is 5, outside the usual ±3.61794 lbf/mph"),
            std::string::npos)
      << warned;
  EXPECT_NE(warned.find(
                "target_us.c_lbf_per_mph2 (line 11): is 0.002, below the usual 0.00291127–0.11645 lbf/mph²"),
            std::string::npos)
      << warned;
  EXPECT_EQ(warned.find("N/(km/h)"), std::string::npos) << warned;
}

// An EPA row whose equivalent test weight leaves no mass in running order (the weight less 100 kg, and at
// least the 25 kg a target file takes) is not used: listed with its line, the column and the range, not read
// as a vehicle with a negative mass.
TEST(Config, EpaRowsTooLightForAMassInRunningOrderAreLeftOut) {
  const std::string csv = ::testing::TempDir() + "/loadtrim-epa-etw.csv";
  {
    std::ofstream out(csv);
    out << "model_year,test_vehicle_id,test_veh_config_num,drive_system_code,etw_kg,target_f0_N,"
           "target_f1_N_per_kmh,target_f2_N_per_kmh2,set_f0_N,set_f1_N_per_kmh,set_f2_N_per_kmh2\n"
        << "2016,A1,0,F,80,150,0.5,0.03,20,0.1,0.03\n"     // line 2: below 100 kg
        << "2016,A2,0,F,124.9,150,0.5,0.03,20,0.1,0.03\n"  // line 3: 24.9 kg in running order
        << "2016,A3,0,F,125,150,0.5,0.03,20,0.1,0.03\n"    // line 4: the lightest taken
        << "2016,A4,0,F,20001,150,0.5,0.03,20,0.1,0.03\n"  // line 5: above the heaviest test mass
        << "2016,A5,0,F,1500,150,0.5,0.03,20,0.1,0.03\n";  // line 6
  }
  const config::EpaFile f = config::read_epa_csv(csv);
  std::vector<int> read;
  for (const auto& r : f.rows) read.push_back(r.line);
  EXPECT_EQ(read, (std::vector<int>{4, 6}));
  ASSERT_EQ(f.skipped.size(), 3u);
  EXPECT_EQ(f.skipped[0].line, 2);
  EXPECT_EQ(f.skipped[0].column, "etw_kg");
  EXPECT_EQ(f.skipped[0].id, "2016/A1/0");
  EXPECT_NE(
      f.skipped[0].message.find("is 80, allowed 125 to 20000 kg (the test mass; the mass in running order "
                                "is estimated as the weight less 100 kg and must be at least 25 kg)"),
      std::string::npos)
      << f.skipped[0].message;
  EXPECT_EQ(f.skipped[1].line, 3);
  EXPECT_EQ(f.skipped[2].line, 5);
  // The lightest row taken gives a target that reads back: 25 kg in running order, no error.
  const core::VehicleTarget t = config::target_from_epa(f.rows[0], "wltp-iterative");
  EXPECT_DOUBLE_EQ(*t.mass_in_running_order_kg, 25.0);
  EXPECT_NO_THROW(config::parse_target(config::target_toml(t, "lightest"), "lightest.toml"));
  std::remove(csv.c_str());
  // The shipped extract: every one of its 3,485 rows is read.
  const config::EpaFile shipped =
      config::read_epa_csv(kSrc + "/samples/data/epa_test_car_roadload_MY2016_2019.csv");
  EXPECT_EQ(shipped.rows.size(), 3485u);
  EXPECT_TRUE(shipped.skipped.empty());
}
