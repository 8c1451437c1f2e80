// The session state machine without a simulator process: the scripted fake controller (the simulator's typed
// core in-process, tests/support/fake_controller.hpp) with observers that fail, a controller that never
// stops, and one that acknowledges the setting without applying it. What is checked is the project's safety
// contract (docs/safety.md): the safe stop on every path, observers unable to throw into the session, the
// envelope and the divergence rule. Tolerance ±10 N at every reference speed for acceptance: GTR 15 Annex 4
// §8.1.3.4.2 [text].
#include <gtest/gtest.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <functional>
#include <optional>
#include <stdexcept>
#include <thread>

#include "config/cell_loader.hpp"
#include "config/loaders.hpp"
#include "core/combination.hpp"
#include "core/envelope.hpp"
#include "record/verify.hpp"
#include "registry.hpp"
#include "report/report.hpp"
#include "session/record_writer.hpp"
#include "session/session.hpp"
#include "support/fake_controller.hpp"

using namespace loadtrim;
using controller::Mode;
using loadtrim::testing::FakeController;

namespace {

const std::string kSrc = LOADTRIM_SOURCE_DIR;

session::Inputs inputs() {
  session::Inputs in;
  in.cell = config::load_cell(kSrc + "/config/cells/sim-tcp.toml", adapters::production().sections());
  in.profile = config::load_profile(kSrc + "/tests/data/wltp-iterative-short-warmup.toml");
  // The test profile keeps a late first release with a finding (for the process tests on a loaded host); here
  // time is the fake controller's, so the shipped profiles' policy applies: a late first release is repeated,
  // and a session whose releases were all wrongly judged late could not end accepted.
  in.profile.late_start = core::Profile::LateStart::repeat;
  in.vehicle = config::load_target(kSrc + "/samples/targets/demo-hatchback.toml");
  return in;
}

session::Options options() {
  session::Options o;
  o.first_setting = core::FirstSetting::standard;  // no loss map: the shortest honest session
  o.whole_trace_estimator = false;
  o.stop_budget_s = 120.0;
  return o;
}

// A fresh temporary folder holding an empty "session" folder (the record writer's), for a test that stops a
// session and resumes it: {the temporary folder, to remove at the end; the session folder}.
std::pair<std::string, std::string> temp_session_folder(const std::string& name) {
  namespace fs = std::filesystem;
  std::string dir = (fs::temp_directory_path() / ("loadtrim-" + name + "-XXXXXX")).string();
  if (!::mkdtemp(dir.data())) throw std::runtime_error("mkdtemp failed for " + dir);
  fs::create_directories(dir + "/session");
  return {dir, dir + "/session"};
}

// The session folder's log, one record per line.
std::vector<nlohmann::json> read_log(const std::string& folder) {
  std::vector<nlohmann::json> records;
  std::ifstream log(folder + "/events.jsonl");
  for (std::string line; std::getline(log, line);) records.push_back(nlohmann::json::parse(line));
  return records;
}

// Keeps every event; fails (returns false, or throws) on the first event of a given type when told to.
class Recorder : public session::Observer {
 public:
  explicit Recorder(bool critical, std::string fail_on = "", bool throws = false)
      : critical_(critical), fail_on_(std::move(fail_on)), throws_(throws) {}
  bool on_event(const session::Event& e) override {
    types.push_back(session::type_of(e));
    if (!fail_on_.empty() && types.back() == fail_on_) {
      if (throws_) throw std::runtime_error("scripted observer failure");
      return false;
    }
    return true;
  }
  std::string error() const override { return "scripted record failure"; }
  bool critical() const override { return critical_; }
  bool saw(const std::string& t) const { return std::find(types.begin(), types.end(), t) != types.end(); }
  std::vector<std::string> types;

 private:
  bool critical_;
  std::string fail_on_;
  bool throws_;
};

}  // namespace

TEST(SessionUnit, AnHonestControllerIsAcceptedAndTheRollersEndStopped) {
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  session::Session s(inputs(), options(), c, {&record});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  ASSERT_FALSE(c.commands.empty());
  EXPECT_EQ(c.commands.back().first, Mode::controlled_stop);
  for (const auto& d : sum.deviations) EXPECT_LE(std::abs(d.deviation_n), 10.0) << d.speed_kmh;
  // The first release met the 120 s rule after the warm-up (EU SA4 §8.1.2-8.1.3, docs/standards.md §3.6): the
  // fake controller's run-up from the 80 km/h warm-up to the 142 km/h start takes well under it.
  EXPECT_TRUE(std::find(record.types.begin(), record.types.end(), "timing") != record.types.end());
  EXPECT_TRUE(std::find(record.types.begin(), record.types.end(), "timing_rule_missed") ==
              record.types.end());
}

TEST(SessionUnit, AThrowingViewIsDroppedAndTheSessionGoesOn) {
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  Recorder console(false, "coastdown", /*throws=*/true);
  session::Session s(inputs(), options(), c, {&record, &console});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_TRUE(record.saw("observer_dropped"));
  EXPECT_EQ(std::count(console.types.begin(), console.types.end(), "coastdown"), 1)
      << "dropped after it threw";
}

TEST(SessionUnit, AViewThatSaysNoIsDroppedOnceAndTheSessionGoesOn) {
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  Recorder console(false, "first_setting");  // returns false: only the record may fail a session
  session::Session s(inputs(), options(), c, {&record, &console});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  EXPECT_EQ(std::count(record.types.begin(), record.types.end(), "observer_dropped"), 1) << "said once";
  EXPECT_EQ(console.types.back(), "first_setting") << "never called again after it failed";
}

TEST(SessionUnit, AFailingRecordStopsSafelyAndNothingUnrecordedIsShown) {
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true, "coastdown");
  Recorder console(false);
  session::Session s(inputs(), options(), c, {&record, &console});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::record_failure);
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  EXPECT_TRUE(c.sent(Mode::controlled_stop));
  EXPECT_FALSE(console.saw("coastdown")) << "the console showed a result whose record was not written";
}

TEST(SessionUnit, ARecordThatThrowsIsARecordFailureNotACrash) {
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true, "set_written", /*throws=*/true);
  session::Session s(inputs(), options(), c, {&record});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::record_failure);
  EXPECT_TRUE(c.sent(Mode::controlled_stop));
}

TEST(SessionUnit, AControllerThatNeverStopsIsReportedAsSuch) {
  FakeController c(loadtrim::testing::demo_truth());
  c.script.never_stops = true;
  Recorder record(true);
  session::Session s(inputs(), options(), c, {&record});
  const auto sum = s.run();
  EXPECT_FALSE(sum.rollers_stopped);
  EXPECT_NE(sum.stop_note.find("rollers not confirmed stopped"), std::string::npos) << sum.stop_note;
}

// The status that confirms the stream's standstill at the end must show the rollers at rest, not only slow
// (docs/safety.md §3: standstill in idle or controlled stop, for every stop and start check; a hostile review
// found the speed alone checked there). Here the controller's status says HOLD at standstill twice after
// the stop: the tool must command the stop again and confirm it by status.
TEST(SessionUnit, TheFinalStatusMustShowTheRollersAtRestNotOnlySlow) {
  FakeController c(loadtrim::testing::demo_truth());
  int lies_left = 2;
  std::size_t lied_at = 0;
  c.script.status_lie = [&](controller::StatusReport& st) {
    if (lies_left > 0 && !c.commands.empty() && c.commands.back().first == Mode::controlled_stop &&
        st.speed_kmh <= 0.5) {
      if (lies_left == 2) lied_at = c.commands.size();
      --lies_left;
      st.mode = Mode::speed_hold;
    }
  };
  Recorder record(true);
  session::Session s(inputs(), options(), c, {&record});
  const auto sum = s.run();
  ASSERT_EQ(lies_left, 0) << "the lie never fired";
  bool stopped_again = false;
  for (std::size_t i = lied_at; i < c.commands.size(); ++i)
    if (c.commands[i].first == Mode::controlled_stop) stopped_again = true;
  EXPECT_TRUE(stopped_again) << "a status in speed hold at standstill was taken for the rollers at rest";
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
}

// A controller that acknowledges road-load simulation and stays in speed hold (a hostile review): the session
// took each run for a coast-down with too little retarding force, changed the setting on that and ended "not
// accepted" while the vehicle was motored at the start speed. Now it is a controller fault (exit 3) naming
// the mode, with the rollers stopped.
TEST(SessionUnit, RoadLoadAcknowledgedButNotEnteredIsAControllerFault) {
  FakeController c(loadtrim::testing::demo_truth());
  c.script.sample_lie = [](controller::Sample& s) {
    if (s.mode == Mode::road_load) s.mode = Mode::speed_hold;
  };
  Recorder record(true);
  session::Session s(inputs(), options(), c, {&record});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::controller_fault) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("did not enter"), std::string::npos) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
}

TEST(SessionUnit, ASettingAcknowledgedButNotAppliedStopsTheSession) {
  FakeController c(loadtrim::testing::demo_truth());
  c.script.coefficients_not_applied = true;
  Recorder record(true);
  session::Session s(inputs(), options(), c, {&record});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::controller_fault) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("does not follow the setting"), std::string::npos) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped);
  EXPECT_LE(c.coefficient_writes, 6) << "stopped within a few adjustments, not at the iteration limit";
}

TEST(SessionUnit, AFaultEventFromTheControllerStopsTheSession) {
  FakeController c(loadtrim::testing::demo_truth());
  int n = 0;
  c.script.sample_lie = [&](controller::Sample&) {
    if (++n == 20000) c.script.events = {"FAULT kind=ESTOP detail=scripted"};
  };
  Recorder record(true);
  session::Session s(inputs(), options(), c, {&record});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::controller_fault);
  EXPECT_NE(sum.stop_reason.find("fault event"), std::string::npos) << sum.stop_reason;
  EXPECT_TRUE(c.sent(Mode::controlled_stop));
}

namespace {
// Passes a hook every event (the session's thread), so a test can change the fake's script at a given step.
class Hook : public session::Observer {
 public:
  explicit Hook(std::function<void(const session::Event&)> f) : f_(std::move(f)) {}
  bool on_event(const session::Event& e) override {
    f_(e);
    return true;
  }
  std::string error() const override { return ""; }
  bool critical() const override { return false; }

 private:
  std::function<void(const session::Event&)> f_;
};

int count(const Recorder& r, const std::string& type) {
  return static_cast<int>(std::count(r.types.begin(), r.types.end(), type));
}
}  // namespace

TEST(SessionUnit, PassThenADiscardedRunThenPassNeedsAThirdPass) {
  // GTR 15 Annex 4 §8.1.3.4.2 [text]: two CONSECUTIVE coast-downs within tolerance. A run discarded for a
  // lost link between two passes breaks the sequence (docs/standards.md §3.1): after the re-warm, two more
  // passes are needed, and the 120 s rule applies again after that re-warm (EU SA4 §8.1.2–8.1.3).
  FakeController c(loadtrim::testing::demo_truth());
  bool armed = false;
  int passes = 0, passes_after_reset = 0;
  bool reset_seen = false;
  Recorder record(true);
  Hook hook([&](const session::Event& e) {
    const std::string t = session::type_of(e);
    if (const auto* cd = std::get_if<session::ev::Coastdown>(&e.payload);
        cd && cd->record.evaluation.usable && cd->record.evaluation.check.pass) {
      ++passes;
      if (reset_seen) ++passes_after_reset;
      if (passes == 1) armed = true;  // the next coast-down loses its link
    }
    if (t == "coastdown_started" && armed) {
      armed = false;
      c.script.silent = true;
    }
    if (t == "link_lost") c.script.silent = false;
    if (t == "passes_reset") reset_seen = true;
  });
  session::Session s(inputs(), options(), c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_TRUE(reset_seen);
  EXPECT_EQ(passes, 3) << "pass, discarded, pass, pass";
  EXPECT_EQ(passes_after_reset, 2);
  EXPECT_EQ(count(record, "coastdown_discarded"), 1);
  // The 120 s rule was judged after the first warm-up and again after the re-warm.
  EXPECT_EQ(count(record, "warm_up_ended"), 2);
  EXPECT_EQ(count(record, "timing") + count(record, "timing_rule_missed"),
            2 + (sum.coastdowns - 2));  // two first releases; every other release is a consecutive one
}

TEST(SessionUnit, ALateFirstCoastDownIsRepeatedOrKeptWithAFindingAsTheProfileSays) {
  // The 120 s rule (EU SA4 §8.1.2–8.1.3 [text], docs/standards.md §3.6), made unmeetable: 1 s, while the
  // run-up from the 80 km/h warm-up to the 142 km/h start speed alone takes longer. "repeat": the late run is
  // discarded unanalysed and re-warmed (the short re-warm) until the unusable-run limit stops the session;
  // "finding": kept, accepted, with the finding in the summary (the report's page one).
  for (const auto policy : {core::Profile::LateStart::repeat, core::Profile::LateStart::finding}) {
    FakeController c(loadtrim::testing::demo_truth());
    Recorder record(true);
    session::Inputs in = inputs();
    in.profile.max_gap_after_warmup_s = 1.0;
    in.profile.late_start = policy;
    in.profile.late_start_rewarm_s = 20.0;
    session::Session s(in, options(), c, {&record});
    const auto sum = s.run();
    if (policy == core::Profile::LateStart::repeat) {
      EXPECT_EQ(sum.outcome, session::Outcome::not_accepted) << sum.stop_reason;
      EXPECT_NE(sum.stop_reason.find("released late"), std::string::npos) << sum.stop_reason;
      EXPECT_EQ(count(record, "coastdown_discarded"), in.profile.max_unusable_runs);
      EXPECT_EQ(count(record, "coastdown"), 0) << "a late run is never analysed";
      EXPECT_EQ(count(record, "warm_up_started"), in.profile.max_unusable_runs);  // first + re-warms
      EXPECT_TRUE(sum.findings.empty());
    } else {
      EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
      EXPECT_EQ(count(record, "timing_rule_missed"), 1);
      ASSERT_EQ(sum.findings.size(), 1u);
      EXPECT_NE(sum.findings[0].find("beyond the 1 s rule"), std::string::npos) << sum.findings[0];
    }
    EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  }
}

TEST(SessionUnit, AReWarmWithoutAStopDoesNotRestartTheMotoringClock) {
  // The cell's limits.max_motoring_s is one continuous motoring period (docs/session.md; common practice, no
  // source: a drivetrain and a tyre heat as long as the rollers turn). A late first coast-down's re-warm
  // (EU SA4 §8.1.2–8.1.3, the 120 s rule made unmeetable: 1 s) never stops the rollers, so the period goes on
  // from the first warm-up, and the second repeat is never written.
  FakeController c(loadtrim::testing::demo_truth());
  session::Inputs in = inputs();
  in.profile.max_gap_after_warmup_s = 1.0;
  in.profile.late_start = core::Profile::LateStart::repeat;
  in.profile.late_start_rewarm_s = 20.0;
  // At least the planned motoring (the combination's check), 400 s: by the fake controller's clock the first
  // setting is written 120 s after the warm-up hold began, the first repeat's 337 s, the second repeat's 555
  // s (seen before the period counted the run-up; about 17 s more into the period with it). Restarted at each
  // re-warm (before), the clock read 20 s at each repeat, and the session ended on the unusable-run limit.
  in.cell.max_motoring_s = 400.0;
  ASSERT_GE(in.cell.max_motoring_s, core::planned_motoring_s(in.profile));
  Recorder record(true);
  session::Session s(in, options(), c, {&record});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::not_accepted) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("motoring-time limit"), std::string::npos) << sum.stop_reason;
  EXPECT_EQ(count(record, "coastdown_discarded"), 2)
      << "the first late run and one repeat; the next is not written";
  EXPECT_EQ(count(record, "set_written"), 2) << "no setting written once the period is used up";
  EXPECT_NE(sum.stop_reason.find("was reached before the re-warm"), std::string::npos) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;

  // A re-warm the limit would cut short is not begun: refused before its run-up back to the warm-up speed.
  // Found from a session without the limit: the period used when the first re-warm begins (the warm-up
  // state entered, before its run-up), from the period's start as recorded; the limit is then 10 s beyond
  // it, so the 20 s re-warm would cross it.
  auto hold_commands = [&](const FakeController& fc) {
    return std::count_if(fc.commands.begin(), fc.commands.end(), [&](const auto& cmd) {
      return cmd.first == Mode::speed_hold && cmd.second == in.profile.warm_up.speed_kmh;
    });
  };
  double since = -1.0;
  std::vector<double> warm_up_entered;
  Hook times([&](const session::Event& e) {
    if (const auto* w = std::get_if<session::ev::WarmUpStarted>(&e.payload); w && since < 0.0)
      since = w->motoring_since_s;
    if (const auto* t = std::get_if<session::ev::StateChanged>(&e.payload);
        t && t->to == session::State::warm_up && e.stamp && e.stamp->t_s)
      warm_up_entered.push_back(*e.stamp->t_s);
  });
  FakeController free_c(loadtrim::testing::demo_truth());
  session::Inputs free_in = in;
  free_in.cell.max_motoring_s = 1e6;
  session::Session free_s(free_in, options(), free_c, {&times});
  (void)free_s.run();
  ASSERT_GE(since, 0.0);
  ASSERT_GE(warm_up_entered.size(), 2u) << "the first warm-up and the late start's re-warm";
  const double used_at_rewarm_s = warm_up_entered[1] - since;
  EXPECT_GE(hold_commands(free_c), 2) << "without the limit the re-warm runs up to the speed";
  session::Inputs tight = in;
  tight.cell.max_motoring_s = used_at_rewarm_s + 10.0;
  ASSERT_GE(tight.cell.max_motoring_s, core::planned_motoring_s(tight.profile));
  FakeController tight_c(loadtrim::testing::demo_truth());
  session::Session tight_s(tight, options(), tight_c, {});
  const auto cut = tight_s.run();
  EXPECT_EQ(cut.outcome, session::Outcome::not_accepted) << cut.stop_reason;
  EXPECT_NE(cut.stop_reason.find("would be reached in the re-warm"), std::string::npos) << cut.stop_reason;
  EXPECT_EQ(hold_commands(tight_c), 1) << "the re-warm's run-up was begun";
  EXPECT_TRUE(cut.rollers_stopped) << cut.stop_note;
}

// A history whose set leaves the safe envelope (the hostile review forged a store row with F0 = −10⁶ N and
// saw the session end as a controller fault after the whole warm-up) is never the first setting: the
// standard's is, the record says why, and the session goes on (docs/store.md, "The history first setting").
TEST(SessionUnit, AFirstSettingOutsideTheEnvelopeFallsBackToTheStandard) {
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  std::vector<session::ev::FirstSetting> firsts;
  Hook hook([&](const session::Event& e) {
    if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) firsts.push_back(*f);
  });
  session::Inputs in = inputs();
  session::Options o = options();
  o.first_setting = core::FirstSetting::history;
  core::HistoryEntry h;
  h.utc = "2026-12-02T10:00:00Z";
  h.target = in.vehicle.target;
  h.final_set = core::RoadLoad{-1.0e6, h.target.f1_n_per_kmh, h.target.f2_n_per_kmh2};
  o.history = h;
  session::Session s(in, o, c, {&record, &hook});
  const auto sum = s.run();
  ASSERT_EQ(firsts.size(), 1u);
  EXPECT_EQ(firsts[0].strategy, "standard");
  EXPECT_NE(firsts[0].fallback_reason.find("leaves the safe envelope"), std::string::npos)
      << firsts[0].fallback_reason;
  EXPECT_GT(firsts[0].set.f0_n, -1000.0);
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
}

// The history's day-to-day correction through the session (docs/store.md, "The history first setting"; our
// rule, no source). Day 1: the demo vehicle accepted with the standard's first setting after a 900 s warm-up
// in 60 s windows; its first warm-up hold, its last measured curve and its setting make the history. Day 2:
// the same vehicle with every loss of its own 5 % higher (tyre pressure, oil: the bench's day-to-day
// spread), same cell. Its warm-up hold force at 80 km/h is then up by less than 5 %: about 123 N of the
// 127 N hold is the vehicle's loss; the steady-versus-coasting difference and the parasitic residual (about
// 4 N) did not change: 1 + 0.05·123/127 ≈ 1.048 (by hand, from samples/truths/demo-hatchback.toml). The first
// setting is the history's loss scaled by the ratio (algebra), and the record and the report say so.
TEST(SessionUnit, TheHistorysLossIsScaledByTodaysWarmUpOverTheEarlierOnes) {
  session::Inputs in = inputs();
  in.profile.warm_up.duration_s = 900.0;
  in.profile.warm_up.stable_window_s = 60.0;
  std::vector<session::ev::WarmUpHeld> held;
  std::vector<session::ev::FirstSetting> firsts;
  std::vector<nlohmann::json> first_records;
  Hook hook([&](const session::Event& e) {
    if (const auto* w = std::get_if<session::ev::WarmUpHeld>(&e.payload)) held.push_back(*w);
    if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) {
      firsts.push_back(*f);
      first_records.push_back(session::to_json(e.payload));
    }
  });
  FakeController day1(loadtrim::testing::demo_truth());
  Recorder r1(true);
  const auto s1 = session::Session(in, options(), day1, {&r1, &hook}).run();
  ASSERT_EQ(s1.outcome, session::Outcome::accepted) << s1.stop_reason;
  ASSERT_TRUE(s1.final_set && s1.measured);
  ASSERT_EQ(held.size(), 1u);
  // 900 s in 60 s windows, each closed at the first sample 60 s after its start (a window ending at the
  // hold's last sample may not close).
  ASSERT_GE(held[0].windows.size(), 14u);
  ASSERT_LE(held[0].windows.size(), 15u);
  EXPECT_TRUE(held[0].initial);
  EXPECT_NEAR(held[0].windows.front().t_s, 30.0, 1.0);
  EXPECT_GT(held[0].windows.back().t_s, 800.0);
  core::HistoryEntry h;
  h.utc = "2026-12-02T10:00:00Z";
  h.target = in.vehicle.target;
  h.final_set = *s1.final_set;
  h.measured = s1.measured;
  h.warm_up = core::WarmUpRecord{held[0].speed_kmh, held[0].windows};
  core::HistoryBasis basis;
  basis.source = "file";
  basis.where = "the test's history entry (invented)";
  basis.note = "the history file of this vehicle on this cell: not corrected";
  h.basis = basis;

  physics::Truth t2 = loadtrim::testing::demo_truth();
  t2.vehicle.tyre_loss_flat_n *= 1.05;
  t2.vehicle.tyre_loss_flat_n_per_kmh *= 1.05;
  t2.vehicle.drivetrain_loss_n *= 1.05;
  t2.vehicle.drivetrain_loss_n_per_kmh2 *= 1.05;
  t2.vehicle.brake_drag_n *= 1.05;
  session::Options o = options();
  o.first_setting = core::FirstSetting::history;
  o.history = h;
  FakeController day2(t2);
  namespace fs = std::filesystem;
  std::string dir = (fs::temp_directory_path() / "loadtrim-day-scale-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  SCOPED_TRACE("session folder kept under " + dir);
  const std::string folder = dir + "/session";
  fs::create_directories(folder);
  firsts.clear();
  first_records.clear();
  session::Summary s2;
  {
    session::RecordWriter writer(folder);
    s2 = session::Session(in, o, day2, {&writer, &hook}).run();
  }
  EXPECT_EQ(s2.outcome, session::Outcome::accepted) << s2.stop_reason;
  ASSERT_EQ(firsts.size(), 1u);
  ASSERT_TRUE(firsts[0].day_scale);
  const core::DayScale& d = *firsts[0].day_scale;
  EXPECT_TRUE(d.used) << d.why;
  EXPECT_NEAR(d.ratio, 1.048, 0.003);
  EXPECT_EQ(d.windows_then, 3);
  EXPECT_EQ(d.windows_now, 3);
  const core::RoadLoad want = core::setting_for_loss(h.target, h.loss().scaled(d.ratio));
  EXPECT_NEAR(firsts[0].set.f0_n, want.f0_n, 1e-9);
  EXPECT_NEAR(firsts[0].set.f2_n_per_kmh2, want.f2_n_per_kmh2, 1e-12);
  // The record: inputs.history_day_scale, as docs/session.md lists it.
  ASSERT_EQ(first_records.size(), 1u);
  EXPECT_EQ(first_records[0]["strategy"], "history");
  EXPECT_EQ(first_records[0]["inputs"]["history_day_scale"]["used"], true);
  EXPECT_EQ(first_records[0]["inputs"]["history_day_scale"]["ratio"], d.ratio);
  // The report says it beside the history used, from the record alone.
  const auto files = report::write_report(folder, "test");
  ASSERT_TRUE(files.ok) << files.error;
  std::ifstream html(files.html);
  const std::string page((std::istreambuf_iterator<char>(html)), {});
  char ratio[32], now[32], then[32], at[32];
  std::snprintf(ratio, sizeof ratio, "%.4f", d.ratio);
  std::snprintf(now, sizeof now, "%.1f", d.now_n);
  std::snprintf(then, sizeof then, "%.1f", d.then_n);
  std::snprintf(at, sizeof at, "%.0f", d.at_s);
  const std::string sentence = std::string("Day-to-day correction: the loss scaled by ") + ratio +
                               " (this warm-up's " + now + " N over the earlier " + then + " N, at " + at +
                               " s of each warm-up)";
  EXPECT_NE(page.find(sentence), std::string::npos) << sentence;
  if (!HasFailure()) fs::remove_all(dir);
}

namespace {
// The demo truth starting cold (textbook first-order warming): the drivetrain's cold excess, a multiple of
// its spin loss, decays with time constant tau_s. warming_truth(1.0, 400.0) warms slowly; warming_truth(1.5,
// 1000.0) (spin loss 30 + 0.0028·v² N) is still warming after a 600 s warm-up.
physics::Truth warming_truth(double cold_excess, double tau_s) {
  physics::Truth t = loadtrim::testing::demo_truth();
  t.vehicle.drivetrain_cold_excess = cold_excess;
  t.vehicle.warm_up_time_constant_s = tau_s;
  t.vehicle.initial_warmth = 0.0;
  return t;
}
// The test profile with a 600 s warm-up held in 30 s windows (the warming curve is fitted across them).
session::Inputs long_warm_up_inputs() {
  session::Inputs in = inputs();
  in.profile.warm_up.duration_s = 600.0;
  in.profile.warm_up.stable_window_s = 30.0;
  return in;
}
}  // namespace

TEST(SessionUnit, AFirstAdjustmentBeyondTheStepLimitNamesTheFirstSetting) {
  // core/envelope.hpp (the step limit, from the EPA Test Car List): the first adjustment is the error of the
  // first setting's loss estimate, so a refused first step names that first, then the measurement and the
  // controller (common practice, no source: the likeliest cause first). A 1 N step limit refuses it.
  FakeController c(loadtrim::testing::demo_truth());
  session::Options o = options();
  o.envelope.max_step_n = 1.0;
  session::Session s(inputs(), o, c, {});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::controller_fault) << sum.stop_reason;
  EXPECT_EQ(sum.iterations, 1);
  EXPECT_NE(sum.stop_reason.find("beyond the step limit"), std::string::npos) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("the first setting was far from this vehicle's loss"), std::string::npos)
      << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped);
  // Control: a first adjustment refused by the vehicle-loss limit instead (|target − set| at most 1 N). A
  // target file's initial set equal to the target (0 N from it) is written; the adjustment after the first
  // coast-down takes the vehicle's loss off the target, far beyond 1 N: not the step limit, so the message
  // does not name the first setting.
  FakeController c2(loadtrim::testing::demo_truth());
  session::Options o2 = options();
  o2.envelope.max_vehicle_loss_n = 1.0;
  session::Inputs in2 = inputs();
  in2.vehicle.initial_set = in2.vehicle.target;
  session::Session s2(in2, o2, c2, {});
  const auto other = s2.run();
  EXPECT_EQ(other.outcome, session::Outcome::controller_fault) << other.stop_reason;
  EXPECT_NE(other.stop_reason.find("beyond the vehicle-loss limit"), std::string::npos) << other.stop_reason;
  EXPECT_EQ(other.stop_reason.find("beyond the step limit"), std::string::npos) << other.stop_reason;
  EXPECT_EQ(other.stop_reason.find("the first setting was far"), std::string::npos) << other.stop_reason;
  EXPECT_NE(other.stop_reason.find("the controller does not follow the setting or the measurement is wrong"),
            std::string::npos)
      << other.stop_reason;
}

TEST(SessionUnit, AFirstAdjustmentRefusedAfterAResumeStillNamesTheFirstSetting) {
  // As above (core/envelope.hpp; the likeliest cause first: common practice, no source), across a resume. The
  // session with a 1 N step limit is cut off right after its first coast-down record (the process ended
  // there: the records after it dropped), its first coast-down adjusted (the standard's first setting is far
  // from the demo vehicle's loss). The resume restores the last setting written and the setting that
  // coast-down adjusted to, so its first write is refused by the step limit against what the controller was
  // given, and named as the live session names it.
  const auto [dir, folder] = temp_session_folder("first-adjust-resume");
  session::Options o = options();
  o.envelope.max_step_n = 1.0;
  {
    FakeController c1(loadtrim::testing::demo_truth());
    session::RecordWriter writer(folder);
    session::Session s1(inputs(), o, c1, {&writer});
    const auto live = s1.run();
    ASSERT_EQ(live.outcome, session::Outcome::controller_fault) << live.stop_reason;
    ASSERT_NE(live.stop_reason.find("the first setting was far"), std::string::npos) << live.stop_reason;
  }
  std::vector<nlohmann::json> records = read_log(folder);
  // The process ended right after the first coast-down record.
  const auto first_coastdown = std::find_if(records.begin(), records.end(), [](const nlohmann::json& r) {
    return r.value("type", "") == "coastdown";
  });
  ASSERT_NE(first_coastdown, records.end());
  records.erase(first_coastdown + 1, records.end());
  ASSERT_EQ(records.back().value("type", ""), "coastdown");
  ASSERT_EQ(records.back().at("decision").value("kind", ""), "run-again") << "the test's premise";
  const session::ResumePoint rp = session::resume_point(records);
  ASSERT_EQ(rp.malformed, 0) << rp.malformed_note;
  ASSERT_EQ(rp.iterations, 1);
  ASSERT_TRUE(rp.last_adjusted_to.has_value());
  EXPECT_TRUE(*rp.last_adjusted_to == rp.next_set);
  FakeController c2(loadtrim::testing::demo_truth());
  session::Session s2(inputs(), o, c2, {});
  const auto rest = s2.run(&rp);
  EXPECT_EQ(rest.outcome, session::Outcome::controller_fault) << rest.stop_reason;
  EXPECT_NE(rest.stop_reason.find("beyond the step limit"), std::string::npos) << rest.stop_reason;
  EXPECT_NE(rest.stop_reason.find("the first setting was far from this vehicle's loss"), std::string::npos)
      << rest.stop_reason;
  EXPECT_EQ(c2.coefficient_writes, 0) << "the refused setting is never written";
  std::filesystem::remove_all(dir);
}

TEST(SessionUnit, ARequireThatCouldNotBeAppliedIsAFinding) {
  // docs/standards.md §3.12: with fewer than 4 windows the warming is "not estimated" and decides nothing.
  // With the drift rule "require" the lab asked for a vehicle warm at acceptance, so the acceptance says the
  // rule could not be applied (common practice, no source: a check not made is reported, never silent). Here
  // a 120 s warm-up of 60 s windows gives 2.
  FakeController c(loadtrim::testing::demo_truth());
  std::vector<session::ev::WarmUpDrift> drifts;
  Hook hook([&](const session::Event& e) {
    if (const auto* d = std::get_if<session::ev::WarmUpDrift>(&e.payload)) drifts.push_back(*d);
  });
  session::Inputs in = inputs();
  in.profile.warm_up.duration_s = 120.0;
  in.profile.warm_up.stable_window_s = 60.0;
  in.profile.warm_up.drift_rule = core::WarmUp::DriftRule::require;
  in.profile.warm_up.check_fully_warm = false;
  session::Session s(in, options(), c, {&hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  ASSERT_EQ(drifts.size(), 1u);
  EXPECT_FALSE(drifts[0].curve.ok);
  EXPECT_EQ(drifts[0].verdict.rfind("not estimated", 0), 0u) << drifts[0].verdict;
  ASSERT_EQ(sum.findings.size(), 1u);
  EXPECT_NE(sum.findings[0].find("the drift rule \"require\" could not be applied at acceptance"),
            std::string::npos)
      << sum.findings[0];
  // With the fully-warm check on (as shipped), the one finding says both: the rule and the check (docs/
  // standards.md §3.18) could not be applied for the same reason.
  FakeController c3(loadtrim::testing::demo_truth());
  in.profile.warm_up.check_fully_warm = true;
  session::Session s3(in, options(), c3, {});
  const auto checked = s3.run();
  EXPECT_EQ(checked.outcome, session::Outcome::accepted) << checked.stop_reason;
  ASSERT_EQ(checked.findings.size(), 1u);
  EXPECT_NE(checked.findings[0].find("the drift rule \"require\" could not be applied at acceptance"),
            std::string::npos)
      << checked.findings[0];
  EXPECT_NE(checked.findings[0].find("the fully-warm check was not made"), std::string::npos)
      << checked.findings[0];
  // With "warn" the same session carries no such finding (the rule asks nothing to be applied).
  FakeController c2(loadtrim::testing::demo_truth());
  in.profile.warm_up.drift_rule = core::WarmUp::DriftRule::warn;
  in.profile.warm_up.check_fully_warm = false;
  session::Session s2(in, options(), c2, {});
  EXPECT_TRUE(s2.run().findings.empty());
}

TEST(SessionUnit, AfterALostLinkTheWarmingCurveStartsAgainFromTheReWarm) {
  // docs/standards.md §3.12: the warming curve is fitted to the hold windows since the warm-up hold began. A
  // lost link stops the rollers (the controller's watchdog) and the vehicle cools, as in a pause: the curve
  // judged at acceptance is the re-warm's alone, its time counted from the re-warm (common practice, no
  // source: a curve across a stop mixes two warmings).
  FakeController c(warming_truth(1.0, 400.0));
  bool armed = false, lost = false;
  std::vector<session::ev::WarmUpHeld> holds;
  std::vector<session::ev::WarmUpDrift> drifts;
  std::vector<double> warm_up_started_t, drift_t;  // their stamps, controller clock
  Hook hook([&](const session::Event& e) {
    if (std::holds_alternative<session::ev::WarmUpStarted>(e.payload) && e.stamp && e.stamp->t_s)
      warm_up_started_t.push_back(*e.stamp->t_s);
    if (std::holds_alternative<session::ev::WarmUpDrift>(e.payload) && e.stamp && e.stamp->t_s)
      drift_t.push_back(*e.stamp->t_s);
    if (const auto* cd = std::get_if<session::ev::Coastdown>(&e.payload);
        cd && !lost && cd->record.evaluation.usable)
      armed = true;  // the next coast-down loses its link
    if (std::holds_alternative<session::ev::CoastdownStarted>(e.payload) && armed && !lost) {
      lost = true;
      c.script.silent = true;
    }
    if (std::holds_alternative<session::ev::LinkLost>(e.payload)) c.script.silent = false;
    if (const auto* h = std::get_if<session::ev::WarmUpHeld>(&e.payload)) holds.push_back(*h);
    if (const auto* d = std::get_if<session::ev::WarmUpDrift>(&e.payload)) drifts.push_back(*d);
  });
  session::Inputs in = long_warm_up_inputs();
  in.profile.max_coastdowns = 20;
  session::Options o = options();
  o.resume_warm_up_s = 300.0;  // the re-warm after the lost link
  session::Session s(in, o, c, {&hook});
  const auto sum = s.run();
  ASSERT_TRUE(lost);
  ASSERT_EQ(holds.size(), 2u) << sum.stop_reason;  // the warm-up, the re-warm
  ASSERT_FALSE(drifts.empty()) << sum.stop_reason;
  ASSERT_GE(holds[0].windows.size(), 15u);
  ASSERT_GE(holds[1].windows.size(), 5u);
  const auto& d = drifts.back();
  ASSERT_TRUE(d.curve.ok) << d.curve.why;
  // The re-warm's windows only (300 s of 30 s windows), not the first hold's 20 as well.
  EXPECT_EQ(d.curve.points, static_cast<int>(holds[1].windows.size()));
  // Its time counted from the re-warm's start (the hold begins once at speed, a few seconds before the
  // warm_up_started record), not from the first warm-up's 600 s and more earlier.
  ASSERT_EQ(warm_up_started_t.size(), 2u);
  ASSERT_FALSE(drift_t.empty());
  EXPECT_NEAR(d.t_s, drift_t.back() - warm_up_started_t[1], 5.0);
}

TEST(SessionUnit, AVehicleStillWarmingIsFlaggedOrKeptRunningAsTheProfileSays) {
  // docs/standards.md §3.12 (lab policy): the warm-up hold windows are fitted with F∞ + A·exp(−t/τ)
  // (first-order warming) and the drift still to come is judged when a setting is about to be accepted. The
  // truth warms slowly: cold excess 1.0 of the spin loss (25 N + 0.002·80² = 37.8 N at 80 km/h) with τ = 400
  // s, so after a 600 s warm-up plus the first coast-downs (t ≈ 700–800 s) about 37.8·e^(−1.9) ≈ 5–6 N is
  // still to come, above the 2 N threshold; by t ≈ 1100 s it is under 2 N (by hand). "warn": accepted with a
  // finding on page one; "require": coasting goes on at the accepted setting until the estimate is under the
  // threshold.
  for (const auto rule : {core::WarmUp::DriftRule::warn, core::WarmUp::DriftRule::require}) {
    FakeController c(warming_truth(1.0, 400.0));
    std::vector<session::ev::WarmUpDrift> drifts;
    Hook hook([&](const session::Event& e) {
      if (const auto* d = std::get_if<session::ev::WarmUpDrift>(&e.payload)) drifts.push_back(*d);
    });
    session::Inputs in = long_warm_up_inputs();
    in.profile.warm_up.drift_rule = rule;
    in.profile.warm_up.drift_threshold_n = 2.0;
    in.profile.max_coastdowns = 20;
    namespace fs = std::filesystem;
    std::string dir = (fs::temp_directory_path() / "loadtrim-drift-XXXXXX").string();
    ASSERT_TRUE(::mkdtemp(dir.data()));
    const std::string folder = dir + "/session";
    fs::create_directories(folder);
    session::Summary sum;
    {
      session::RecordWriter writer(folder);
      session::Session s(in, options(), c, {&writer, &hook});
      sum = s.run();
    }
    ASSERT_FALSE(drifts.empty()) << sum.stop_reason;
    // The log keeps the time the remaining drift was read at (since the warm-up hold began) beside the
    // record's own controller clock (t_s): neither overwrites the other.
    {
      std::ifstream log(folder + "/events.jsonl");
      std::vector<nlohmann::json> logged;
      for (std::string line; std::getline(log, line);) {
        const auto j = nlohmann::json::parse(line, nullptr, false);
        if (j.is_object() && j.value("type", "") == "warm_up_drift") logged.push_back(j);
      }
      ASSERT_EQ(logged.size(), drifts.size());
      EXPECT_DOUBLE_EQ(logged.front().at("since_warm_up_s").get<double>(), drifts.front().t_s);
      EXPECT_NE(logged.front().at("t_s").get<double>(), drifts.front().t_s);
      if (drifts.front().curve.ok) {
        EXPECT_NEAR(
            logged.front().at("remaining_drift_n").get<double>(),
            drifts.front().curve.remaining_drift_n(logged.front().at("since_warm_up_s").get<double>()), 1e-9);
      }
    }
    // The report names only the last record of an accepted session "at acceptance"; an earlier one (the
    // rule "require" coasted on) was when the setting was due to be accepted.
    const auto files = report::write_report(folder, "test");
    ASSERT_TRUE(files.ok) << files.error;
    {
      std::ifstream html(files.html);
      const std::string page((std::istreambuf_iterator<char>(html)), {});
      const auto count_of = [&](const std::string& what) {
        std::size_t n = 0;
        for (auto at = page.find(what); at != std::string::npos; at = page.find(what, at + 1)) ++n;
        return n;
      };
      EXPECT_EQ(count_of("Warm-up drift at acceptance (coast-down"), 1u);
      EXPECT_EQ(count_of("Warm-up drift when the setting was due to be accepted (coast-down"),
                drifts.size() - 1);
    }
    fs::remove_all(dir);
    const auto& first = drifts.front();
    ASSERT_TRUE(first.curve.ok) << first.curve.why;
    EXPECT_GE(first.curve.points, 15);
    // The fit finds the truth's warming: τ within a factor of 2 of 400 s, the amplitude within 30 % of the
    // cold excess at 80 km/h (the hold force also carries noise and the dyno's own terms, which do not warm).
    EXPECT_GT(first.curve.tau_s, 200.0);
    EXPECT_LT(first.curve.tau_s, 800.0);
    EXPECT_NEAR(first.curve.amplitude_n / 37.8, 1.0, 0.3);
    EXPECT_GT(first.curve.remaining_drift_n(first.t_s), 2.0);
    EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
    if (rule == core::WarmUp::DriftRule::warn) {
      EXPECT_EQ(drifts.size(), 1u);
      EXPECT_EQ(first.verdict, "still warming: accepted with a finding");
      ASSERT_EQ(sum.findings.size(), 1u);
      EXPECT_NE(sum.findings[0].find("still warming at acceptance"), std::string::npos) << sum.findings[0];
    } else {
      ASSERT_GE(drifts.size(), 2u);
      EXPECT_EQ(first.verdict, "still warming: coasting again at the accepted setting");
      EXPECT_EQ(drifts.back().verdict, "settled");
      EXPECT_LE(drifts.back().curve.remaining_drift_n(drifts.back().t_s), 2.0);
      EXPECT_TRUE(sum.findings.empty());
    }
  }
}

namespace {
// A session of the warming truth above with the drift rule "require" and the fully-warm check
// (docs/standards.md §3.18), its drift, coast-down and passes-reset records.
struct FullyWarmRun {
  session::Summary sum;
  std::vector<session::ev::WarmUpDrift> drifts;
  std::vector<session::CoastdownRecord> runs;
  std::vector<session::ev::PassesReset> resets;
  std::vector<session::ev::EnvelopeRefused> refused;
  std::vector<double> drift_stamps;  // each warm_up_drift record's time (controller clock)
  double motoring_since_s = -1.0;    // the first motoring period's start (warm_up_started)
};
FullyWarmRun run_fully_warm(double threshold_n, int max_coastdowns, double cold_excess = 1.0,
                            double tau_s = 400.0, bool anticipate = false, double warm_up_s = 600.0,
                            double max_motoring_s = 0.0) {
  FullyWarmRun out;
  FakeController c(warming_truth(cold_excess, tau_s));
  Recorder record(true);
  Hook hook([&](const session::Event& e) {
    if (const auto* d = std::get_if<session::ev::WarmUpDrift>(&e.payload)) {
      out.drifts.push_back(*d);
      out.drift_stamps.push_back(e.stamp && e.stamp->t_s ? *e.stamp->t_s : -1.0);
    }
    if (const auto* w = std::get_if<session::ev::WarmUpStarted>(&e.payload); w && out.motoring_since_s < 0.0)
      out.motoring_since_s = w->motoring_since_s;
    if (const auto* d = std::get_if<session::ev::Coastdown>(&e.payload)) out.runs.push_back(d->record);
    if (const auto* r = std::get_if<session::ev::PassesReset>(&e.payload)) out.resets.push_back(*r);
    if (const auto* r = std::get_if<session::ev::EnvelopeRefused>(&e.payload)) out.refused.push_back(*r);
  });
  session::Inputs in = long_warm_up_inputs();
  in.profile.warm_up.drift_rule = core::WarmUp::DriftRule::require;
  in.profile.warm_up.drift_threshold_n = threshold_n;
  in.profile.warm_up.check_fully_warm = true;
  in.profile.warm_up.duration_s = warm_up_s;
  in.profile.warm_up.anticipate_drift = anticipate;
  in.profile.warm_up.anticipate_for = core::WarmUp::AnticipateFor::passes;
  in.profile.max_coastdowns = max_coastdowns;
  if (max_motoring_s > 0.0) in.cell.max_motoring_s = max_motoring_s;
  session::Session s(in, options(), c, {&record, &hook});
  out.sum = s.run();
  return out;
}
// The first drift record whose fully-warm outlook is predicted and outside.
const session::ev::WarmUpDrift* first_outside(const FullyWarmRun& r) {
  for (const auto& d : r.drifts)
    if (d.fully_warm && d.fully_warm->predicted && !d.fully_warm->within) return &d;
  return nullptr;
}
}  // namespace

TEST(SessionUnit, ASettledSettingOutsideToleranceFullyWarmIsAdjustedForTheWarmVehicle) {
  // docs/standards.md §3.18 (lab policy; the bounds are algebra, tests/unit/setting_test.cpp FullyWarm.*).
  // The truth of the test above warms with τ = 400 s and 37.8 N of cold excess at 80 km/h; with a drift
  // threshold of 8 N the vehicle counts as settled at the first acceptance (t ≈ 700–800 s:
  // about 37.8·e^(−1.9) ≈ 5–6 N still to come, by hand). At 130 km/h the bounds once fully warm are then the
  // deviation plus c and plus 2.64·c, c ≈ −5 N: within ±10 N only for a deviation now between about +3 and
  // +10 N. The premise, that this session's setting is outside, is asserted from its record. The truth's spin
  // loss, 25 + 0.002·v² N, changes at 130 km/h by 58.8/37.8 = 1.56 times its change at 80 km/h and at 20 km/h
  // by 25.8/37.8 = 0.68 times: inside the bounds' [1, 2.64] and [0.0625, 1] (by hand).
  const FullyWarmRun r = run_fully_warm(8.0, 20);
  ASSERT_FALSE(r.drifts.empty()) << r.sum.stop_reason;
  const auto* first = first_outside(r);
  ASSERT_NE(first, nullptr) << "the premise: a settled setting outside tolerance once fully warm";
  EXPECT_EQ(first, &r.drifts.front());
  ASSERT_TRUE(first->curve.ok) << first->curve.why;
  EXPECT_LT(first->curve.remaining_drift_n(first->t_s), 8.0);
  EXPECT_GT(first->curve.remaining_drift_n(first->t_s), 2.0);
  const auto& o = *first->fully_warm;
  ASSERT_TRUE(o.aimable) << o.why;
  EXPECT_EQ(first->verdict, "settled, but outside tolerance once fully warm: adjusted for the warm vehicle");
  EXPECT_LT(o.change_n, -2.0);  // still falling
  // The change is taken at the accepting coast-down's middle, before the record's time (its end and the
  // analysis): more is still to come then than the curve says at t_s.
  EXPECT_GT(-o.change_n, first->curve.remaining_drift_n(first->t_s));
  // The accepting coast-down's passes were dropped, with the reason, and the next coast-down ran the
  // setting aimed at the warm vehicle (as written: rounded to the profile's decimals).
  ASSERT_FALSE(r.resets.empty());
  EXPECT_NE(r.resets.front().why.find("adjusted for the vehicle fully warm"), std::string::npos);
  std::size_t at = 0;
  while (at < r.runs.size() && r.runs[at].run != first->run) ++at;
  ASSERT_LT(at + 1, r.runs.size());
  EXPECT_EQ(r.runs[at].decision.kind, core::Decision::Kind::run_again);
  EXPECT_NE(r.runs[at].decision.reason.find("adjusted for the warm vehicle"), std::string::npos);
  EXPECT_NEAR(r.runs[at + 1].set.f0_n, o.warm_setting.f0_n, 0.06);
  EXPECT_NEAR(r.runs[at + 1].set.f2_n_per_kmh2, o.warm_setting.f2_n_per_kmh2, 1e-5);
  // Accepted in the end, with both bounds within tolerance at every speed, and no finding.
  EXPECT_EQ(r.sum.outcome, session::Outcome::accepted) << r.sum.stop_reason;
  ASSERT_TRUE(r.drifts.back().fully_warm.has_value());
  EXPECT_TRUE(r.drifts.back().fully_warm->predicted);
  EXPECT_TRUE(r.drifts.back().fully_warm->within) << r.drifts.back().fully_warm->why;
  EXPECT_EQ(r.drifts.back().verdict, "settled");
  EXPECT_TRUE(r.sum.findings.empty());
  EXPECT_TRUE(r.refused.empty());

  // The same session with room for one more coast-down only, not two passes: the accepted setting is coasted
  // again while the vehicle settles further; and with none left, not accepted (the drift rule "require"),
  // saying why (docs/standards.md §3.18).
  const FullyWarmRun one_left = run_fully_warm(8.0, first->run + 1);
  ASSERT_FALSE(one_left.drifts.empty());
  EXPECT_EQ(one_left.drifts.front().verdict,
            "settled, but outside tolerance once fully warm: coasting again at the accepted setting");
  ASSERT_GE(one_left.runs.size(), 2u);
  EXPECT_EQ(one_left.runs.back().set, one_left.runs[one_left.runs.size() - 2].set);
  const FullyWarmRun none_left = run_fully_warm(8.0, first->run);
  ASSERT_FALSE(none_left.drifts.empty());
  EXPECT_EQ(none_left.drifts.front().verdict, "settled, but outside tolerance once fully warm: not accepted");
  EXPECT_EQ(none_left.sum.outcome, session::Outcome::not_accepted);
  EXPECT_NE(none_left.sum.stop_reason.find("too few coast-downs are left"), std::string::npos)
      << none_left.sum.stop_reason;
  EXPECT_NE(none_left.sum.stop_reason.find("no coast-down is left"), std::string::npos)
      << none_left.sum.stop_reason;

  // The same session with coast-downs to spare but too little of the cell's motoring time for two passes
  // (room_for_passes, shared with the next-pass rule): the limit half a cycle beyond the moment the first
  // outside setting was judged, so the adjusted setting's second pass could not start within it. It coasts
  // on at the accepted setting, saying why, and no setting is written once the period is used up.
  const std::size_t first_i = static_cast<std::size_t>(first - &r.drifts.front());
  ASSERT_GE(r.motoring_since_s, 0.0);
  ASSERT_GE(r.drift_stamps[first_i], 0.0);
  const double used_at_first_s = r.drift_stamps[first_i] - r.motoring_since_s;
  const double cycle_s = r.runs[at + 1].release_time_s - r.runs[at].release_time_s;
  ASSERT_GT(cycle_s, 0.0);
  const FullyWarmRun short_period =
      run_fully_warm(8.0, 20, 1.0, 400.0, false, 600.0, used_at_first_s + 0.5 * cycle_s);
  ASSERT_FALSE(short_period.drifts.empty()) << short_period.sum.stop_reason;
  const auto& judged = short_period.drifts.front();
  ASSERT_TRUE(judged.fully_warm.has_value());
  EXPECT_FALSE(judged.fully_warm->within);
  EXPECT_EQ(judged.verdict,
            "settled, but outside tolerance once fully warm: coasting again at the accepted setting");
  EXPECT_NE(judged.fully_warm->not_adjusted_why.find("too little of the cell's motoring time is left"),
            std::string::npos)
      << judged.fully_warm->not_adjusted_why;
  EXPECT_TRUE(short_period.resets.empty()) << "no adjustment, so no passes given up for one";
  EXPECT_EQ(short_period.sum.outcome, session::Outcome::not_accepted) << short_period.sum.stop_reason;
  EXPECT_NE(short_period.sum.stop_reason.find("motoring-time limit"), std::string::npos)
      << short_period.sum.stop_reason;
}

TEST(SessionUnit, ASettingTooFarFromWarmToAimAtCoastsOnAtTheAcceptedSetting) {
  // docs/standards.md §3.18: a setting aimed at the warm vehicle reads about −c·(1 + r²)/2 at the next
  // coast-down, 1.82·|c| at 130 km/h (warm-up at 80 km/h); above 10 N it would fail there. A vehicle with
  // twice the cold excess (75.6 N at 80 km/h) and τ = 1500 s, after a 600 s warm-up, still has about
  // 75.6·e^(−0.6) ≈ 40 N to come near t ≈ 900–1200 s (by hand), so with a drift threshold of 50 N it counts
  // as settled at its first acceptance while a setting aimed at the warm vehicle would read about 70 N:
  // coasting goes on at the accepted setting, as for a vehicle still warming. The settings anticipate the
  // warming (§3.16) so that the loop reaches acceptance at all. Each record's verdict follows the rule from
  // its own c.
  const FullyWarmRun r = run_fully_warm(50.0, 20, 2.0, 1500.0, true);
  ASSERT_FALSE(r.drifts.empty()) << r.sum.stop_reason;
  bool held = false;
  for (std::size_t k = 0; k < r.drifts.size(); ++k) {
    const auto& d = r.drifts[k];
    ASSERT_TRUE(d.fully_warm.has_value());
    if (!d.fully_warm->predicted || d.fully_warm->within) continue;
    double need = 0.0;  // the largest |c|·(1 + r²)/2 over the reference speeds
    for (const auto& row : d.fully_warm->rows)
      need = std::max(need, std::abs(d.fully_warm->change_n) * 0.5 *
                                (1.0 + row.speed_kmh * row.speed_kmh / (80.0 * 80.0)));
    EXPECT_EQ(d.fully_warm->aimable, need <= 10.0) << need;
    if (need > 10.0) {
      held = true;
      EXPECT_EQ(d.verdict,
                "settled, but outside tolerance once fully warm: coasting again at the accepted setting");
      std::size_t at = 0;
      while (at < r.runs.size() && r.runs[at].run != d.run) ++at;
      ASSERT_LT(at + 1, r.runs.size());
      EXPECT_EQ(r.runs[at + 1].set, r.runs[at].set);  // the same setting coasted again
    }
  }
  EXPECT_TRUE(held) << "the premise: a settled setting too far from warm to aim at";
  // This vehicle (twice the cold excess, τ = 1500 s) is still far from warm when the coast-downs run out or
  // the divergence rule stops the loop (its rule 3 reads a loss falling this fast as a controller not
  // following the setting: docs/performance.md, a known limit); whatever the end, no setting outside the
  // bounds was accepted.
  if (r.sum.outcome == session::Outcome::accepted) {
    const auto& last = r.drifts.back();
    EXPECT_TRUE(!last.fully_warm->predicted || last.fully_warm->within);
  }
}

TEST(SessionUnit, AFullyWarmCheckThatCannotBeMadeIsAFinding) {
  // docs/standards.md §3.18 and §3.12: a 90 s warm-up in 30 s windows gives 3 windows, fewer than the 4 the
  // curve needs, so the curve is "not estimated" and nothing is decided by it; with the fully-warm check
  // asked for, the acceptance carries a finding saying the check was not made and why.
  const FullyWarmRun r = run_fully_warm(3.0, 20, 1.0, 400.0, false, 90.0);
  ASSERT_FALSE(r.drifts.empty()) << r.sum.stop_reason;
  EXPECT_EQ(r.drifts.back().verdict.rfind("not estimated", 0), 0u) << r.drifts.back().verdict;
  ASSERT_TRUE(r.drifts.back().fully_warm.has_value());
  EXPECT_FALSE(r.drifts.back().fully_warm->predicted);
  EXPECT_EQ(r.sum.outcome, session::Outcome::accepted) << r.sum.stop_reason;
  ASSERT_EQ(r.sum.findings.size(), 1u);
  EXPECT_EQ(
      r.sum.findings[0].rfind("the fully-warm check was not made (not predicted: the warm-up's curve is "
                              "not fitted",
                              0),
      0u)
      << r.sum.findings[0];
}

TEST(SessionUnit, TheFixedRunMethodKeepsItsFinalSettingAndSaysItIsOutsideOnceFullyWarm) {
  // docs/standards.md §3.18: the fixed-run method cannot adjust its final setting (runs 2..n averaged, §3.2),
  // so a settled setting outside tolerance once fully warm is accepted with a finding; the verdict says so.
  // The truth warms with 1.5 times the cold excess above (56.7 N at 80 km/h) and τ = 1200 s; after a 600 s
  // warm-up and the runs (t ≈ 900–1000 s) about 56.7·e^(−0.8) ≈ 25 N is still to come (by hand), under a
  // drift threshold of 40 N, so the vehicle counts as settled, and up to 2.64 times that at 130 km/h: far
  // outside. The settings anticipate the warming (§3.16) so that the verification run passes. The premise
  // (outside) is asserted from the record.
  FakeController c(warming_truth(1.5, 1200.0));
  Recorder record(true);
  std::vector<session::ev::WarmUpDrift> drifts;
  Hook hook([&](const session::Event& e) {
    if (const auto* d = std::get_if<session::ev::WarmUpDrift>(&e.payload)) drifts.push_back(*d);
  });
  session::Inputs in = long_warm_up_inputs();
  in.profile.method = core::SettingMethod::fixed_run;
  in.profile.fixed_run_verification_runs = 1;
  in.profile.warm_up.anticipate_drift = true;
  in.profile.warm_up.anticipate_for = core::WarmUp::AnticipateFor::passes;
  in.profile.warm_up.drift_rule = core::WarmUp::DriftRule::require;
  in.profile.warm_up.drift_threshold_n = 40.0;
  in.profile.warm_up.check_fully_warm = true;
  in.profile.max_coastdowns = 20;
  session::Session s(in, options(), c, {&record, &hook});
  const auto sum = s.run();
  ASSERT_FALSE(drifts.empty()) << sum.stop_reason;
  const auto& d = drifts.back();
  ASSERT_TRUE(d.fully_warm.has_value());
  ASSERT_TRUE(d.fully_warm->predicted) << d.fully_warm->why;
  ASSERT_FALSE(d.fully_warm->within) << "the premise: " << d.fully_warm->why;
  EXPECT_LT(d.fully_warm->change_n, -10.0);  // tens of newtons still to come, as worked above
  EXPECT_GT(d.fully_warm->change_n, -40.0);
  EXPECT_EQ(d.verdict, "settled, but outside tolerance once fully warm: accepted with a finding");
  EXPECT_TRUE(d.fully_warm->not_adjusted_why.empty());
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  ASSERT_EQ(sum.findings.size(), 1u);
  EXPECT_NE(sum.findings[0].find("the fixed-run method keeps its final setting"), std::string::npos)
      << sum.findings[0];
}

TEST(SessionUnit, AFixedRunFinalSettingHeldWhileTheVehicleSettlesIsCoastedNeverAveraged) {
  // docs/standards.md §3.12 (lab policy) "require": coasting goes on at the accepted setting until the drift
  // still to come is under the threshold; §3.2: the fixed-run final setting A = At − mean(As − Ad) over runs
  // 2..n only (GTR 15 form, from memory). The truth of the test above warms with τ = 400 s and 37.8 N of cold
  // excess at 80 km/h; after a 300 s warm-up the four fixed runs end near t ≈ 700 s, with about
  // 37.8·e^(−1.75) ≈ 6.6 N still to come, above the 2 N threshold (by hand). Every coast-down after run 4 is
  // at the final setting computed from runs 2..4, is recorded as checking it, and the setting accepted at the
  // end is that one.
  FakeController c(warming_truth(1.0, 400.0));
  Recorder record(true);
  std::vector<session::CoastdownRecord> runs;
  std::vector<session::ev::WarmUpDrift> drifts;
  Hook hook([&](const session::Event& e) {
    if (const auto* d = std::get_if<session::ev::Coastdown>(&e.payload)) runs.push_back(d->record);
    if (const auto* d = std::get_if<session::ev::WarmUpDrift>(&e.payload)) drifts.push_back(*d);
  });
  session::Inputs in = inputs();
  in.profile.method = core::SettingMethod::fixed_run;
  in.profile.fixed_run_verification_runs = 0;
  in.profile.warm_up.duration_s = 300.0;
  in.profile.warm_up.stable_window_s = 30.0;
  in.profile.warm_up.drift_rule = core::WarmUp::DriftRule::require;
  in.profile.warm_up.drift_threshold_n = 2.0;
  in.profile.max_coastdowns = 20;
  ASSERT_FALSE(in.profile.warm_up.anticipate_drift);  // the final setting is the plain mean
  session::Session s(in, options(), c, {&record, &hook});
  const auto sum = s.run();
  const int n = in.profile.fixed_runs;
  // The premise: still warming when run n's final setting is about to be accepted.
  ASSERT_FALSE(drifts.empty()) << sum.stop_reason;
  EXPECT_EQ(drifts.front().verdict, "still warming: coasting again at the accepted setting");
  core::RoadLoad loss_sum;
  for (const auto& r : runs) {
    ASSERT_TRUE(r.evaluation.usable) << "run "
                                     << r.run;  // the fake has no link to lose: runs 1, 2, ... in order
    if (r.run >= 2 && r.run <= n) loss_sum = loss_sum + (r.evaluation.adjust_basis - r.set);
  }
  const core::RoadLoad final_set = in.vehicle.target - loss_sum.scaled(1.0 / (n - 1));
  const auto first_held =
      std::find_if(runs.begin(), runs.end(), [&](const auto& r) { return r.run == n + 1; });
  ASSERT_NE(first_held, runs.end()) << sum.stop_reason;
  const core::RoadLoad held = first_held->set;  // the decision's setting (the summary's is rounded)
  EXPECT_NEAR(held.f0_n, final_set.f0_n, 1e-9);
  EXPECT_NEAR(held.f1_n_per_kmh, final_set.f1_n_per_kmh, 1e-12);
  EXPECT_NEAR(held.f2_n_per_kmh2, final_set.f2_n_per_kmh2, 1e-12);
  for (const auto& r : runs) {
    if (r.run <= n) continue;
    EXPECT_TRUE(r.verifying) << "run " << r.run << " checks the accepted setting";
    EXPECT_TRUE(r.set == held) << "run " << r.run << " was at another setting";
  }
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_EQ(drifts.back().verdict, "settled");
  ASSERT_TRUE(sum.final_set);
  // The summary states the accepted setting at the profile's decimals.
  EXPECT_TRUE(*sum.final_set == core::rounded(held, in.profile.rounding))
      << "accepted a setting never coasted: F0 " << sum.final_set->f0_n << " N vs " << held.f0_n << " N";
}

TEST(SessionUnit, TheAdjustmentAnticipatesTheWarmingOfASlowlyWarmingVehicle) {
  // docs/standards.md §3.16 (lab policy). The truth warms slowly: the demo hatchback's spin loss (30 N +
  // 0.0028·v², samples/truths/demo-hatchback.toml) with cold excess 1.5 and τ = 1000 s, so at t s of motoring
  // the loss still to fall at v is 1.5·(30 + 0.0028·v²)·e^(−t/1000) (first-order warming, textbook): at 80
  // km/h 71.9·e^(−t/1000) N. After a 600 s warm-up the first coast-down (t ≈ 700 s) and the second (about
  // 150 s later) are about 71.9·(e^(−0.70) − e^(−0.85)) ≈ 5 N apart at 80 km/h (by hand). The standard's
  // adjustment (GTR 15 §8.1.4) corrects coast-down 1's deviation and so misses coast-down 2 by that fall; the
  // anticipating one scales the loss it takes off by the fall the warm-up's curve predicts, so coast-down 2
  // lands nearer the target. The curve's prediction over its own span matches the truth's closed form within
  // 25 % (the fit's time origin is the warm-up hold, a run-up after motoring began: common practice, no
  // source).
  physics::Truth truth = warming_truth(1.5, 1000.0);
  double mean_dev[2] = {0.0, 0.0};
  core::Anticipation used;
  for (int anticipate = 0; anticipate < 2; ++anticipate) {
    FakeController c(truth);
    Recorder record(true);
    std::vector<session::CoastdownRecord> runs;
    Hook hook([&](const session::Event& e) {
      if (const auto* d = std::get_if<session::ev::Coastdown>(&e.payload)) runs.push_back(d->record);
    });
    session::Inputs in = long_warm_up_inputs();
    in.profile.warm_up.anticipate_drift = anticipate == 1;
    session::Session s(in, options(), c, {&record, &hook});
    const auto sum = s.run();
    ASSERT_GE(runs.size(), 2u) << sum.stop_reason;
    ASSERT_FALSE(runs[0].evaluation.check.pass) << "the standard's first setting is not within tolerance";
    for (const auto& row : runs[1].evaluation.check.rows) mean_dev[anticipate] += row.deviation_n;
    mean_dev[anticipate] /= static_cast<double>(runs[1].evaluation.check.rows.size());
    const core::Anticipation& a = runs[0].decision.anticipation;
    if (anticipate == 1) {
      ASSERT_TRUE(a.used) << a.why << " / " << runs[0].decision.reason;
      used = a;
      // The span is from coast-down 1's middle to coast-down 2's, on the controller's clock from the curve's
      // origin (epoch_s): the start exactly; the end predicted a run-up and a coast later, within 15 % of the
      // real gap (the first run-up after the warm-up starts from 80 km/h, the next from the low hold, so it
      // is predicted short; common practice, no source).
      const double mid1 = runs[0].release_time_s + 0.5 * runs[0].duration_s;
      const double mid2 = runs[1].release_time_s + 0.5 * runs[1].duration_s;
      EXPECT_NEAR(a.from_s + a.epoch_s, mid1, 1e-6);
      EXPECT_NEAR(a.to_s + a.epoch_s, mid2, 0.15 * (mid2 - mid1));
      EXPECT_LE(a.to_s + a.epoch_s, mid2 + 1.0) << "predicted short, never long";
      EXPECT_TRUE(a.curve.ok);
      EXPECT_NE(runs[0].decision.reason.find("anticipates a loss change of"), std::string::npos);
    } else {
      EXPECT_TRUE(a.why.empty()) << "nothing anticipated when the profile does not ask";
    }
  }
  // The fall over the anticipation's span, by the truth's closed form.
  const double truth_change =
      1.5 * (30.0 + 0.0028 * 80.0 * 80.0) * (std::exp(-used.to_s / 1000.0) - std::exp(-used.from_s / 1000.0));
  EXPECT_LT(truth_change, -3.0);
  EXPECT_NEAR(used.change_n / truth_change, 1.0, 0.25) << used.change_n << " vs " << truth_change;
  EXPECT_LT(mean_dev[0], -3.0) << "the standard's adjustment misses by the fall";
  EXPECT_LT(std::abs(mean_dev[1]), 0.5 * std::abs(mean_dev[0])) << mean_dev[1] << " vs " << mean_dev[0];
}

TEST(SessionUnit, TheLossMapsFirstSettingAnticipatesTheWarmingToTheFirstCoastDown) {
  // docs/standards.md §3.16: the map's loss is of the map's middle; the first coast-down meets the vehicle a
  // run-up and half a coast later. The truth as above (cold excess 1.5 of the spin loss 30 + 0.0028·v² N, τ =
  // 1000 s: the fall at 80 km/h from t1 to t2 is 71.9·(e^(−t2/1000) − e^(−t1/1000)) N, textbook first-order
  // warming): the change recorded matches it within 25 % over the recorded span, the span starts inside the
  // map and ends after it, and the record's loss and set are the map's loss scaled by 1 + ratio (set =
  // target − loss, GTR 15 §8.1.4's form).
  physics::Truth truth = warming_truth(1.5, 1000.0);
  FakeController c(truth);
  Recorder record(true);
  std::optional<session::ev::FirstSetting> first;
  std::vector<double> map_t;
  Hook hook([&](const session::Event& e) {
    if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) first = *f;
    if (std::holds_alternative<session::ev::LossMapPoint>(e.payload))
      map_t.push_back(e.stamp && e.stamp->t_s ? *e.stamp->t_s : -1.0);
  });
  session::Inputs in = long_warm_up_inputs();
  in.profile.warm_up.anticipate_drift = true;
  session::Options o = options();
  o.first_setting = core::FirstSetting::loss_map;
  session::Session s(in, o, c, {&record, &hook});
  const auto sum = s.run();
  ASSERT_TRUE(first.has_value()) << sum.stop_reason;
  ASSERT_EQ(first->strategy, "loss-map") << first->fallback_reason;
  EXPECT_EQ(first->fallback_reason, "") << "an anticipation is not a fallback";
  ASSERT_TRUE(first->anticipation.has_value());
  const core::Anticipation& a = *first->anticipation;
  ASSERT_TRUE(a.used) << a.why;
  ASSERT_GE(map_t.size(), 2u);
  // 30 s: one hold window (warm_up.stable_window_s above), the curve's time resolution: the span starts no
  // more than a window before the map's first point and inside the map, and ends more than a window later (a
  // run-up and half a coast-down later, by construction).
  EXPECT_GT(a.from_s + a.epoch_s, map_t.front() - 30.0);
  EXPECT_LT(a.from_s + a.epoch_s, map_t.back());
  EXPECT_GT(a.to_s, a.from_s + 30.0);
  const double truth_change =
      1.5 * (30.0 + 0.0028 * 80.0 * 80.0) * (std::exp(-a.to_s / 1000.0) - std::exp(-a.from_s / 1000.0));
  EXPECT_LT(truth_change, -1.0);
  EXPECT_NEAR(a.change_n / truth_change, 1.0, 0.25) << a.change_n << " vs " << truth_change;
  ASSERT_TRUE(first->loss.has_value());
  const core::RoadLoad scaled = a.loss.scaled(1.0 + a.ratio);
  EXPECT_NEAR(first->loss->f0_n, scaled.f0_n, 1e-9);
  EXPECT_NEAR(first->loss->f2_n_per_kmh2, scaled.f2_n_per_kmh2, 1e-12);
  const core::RoadLoad expect_set = in.vehicle.target - scaled;
  EXPECT_NEAR(first->set.f0_n, expect_set.f0_n, 1e-9);
  EXPECT_NEAR(first->set.f1_n_per_kmh, expect_set.f1_n_per_kmh, 1e-12);
  EXPECT_NEAR(first->set.f2_n_per_kmh2, expect_set.f2_n_per_kmh2, 1e-12);
}

// The report's sentence for the first setting's anticipation (docs/standards.md §3.16), aimed at the two
// consecutive passes (warm_up.anticipate_for = "passes", GTR 15 §8.1.3.4.2): it states the share, the change,
// the span and the mean over the passes with the last one's time, each as the record has it (rounded as
// printed). The truth of the test above (still warming after a 600 s warm-up, so the anticipation is used).
TEST(SessionUnit, TheReportStatesTheFirstSettingsAnticipationAimedAtThePasses) {
  namespace fs = std::filesystem;
  physics::Truth truth = warming_truth(1.5, 1000.0);
  FakeController c(truth);
  std::string dir = (fs::temp_directory_path() / "loadtrim-aimed-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  SCOPED_TRACE("session folder kept under " + dir);
  const std::string folder = dir + "/session";
  fs::create_directories(folder);
  std::optional<session::ev::FirstSetting> first;
  {
    session::RecordWriter writer(folder);
    Hook hook([&](const session::Event& e) {
      if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) first = *f;
    });
    session::Inputs in = long_warm_up_inputs();
    in.profile.warm_up.anticipate_drift = true;
    in.profile.warm_up.anticipate_for = core::WarmUp::AnticipateFor::passes;
    session::Options o = options();
    o.first_setting = core::FirstSetting::loss_map;
    session::Session s(in, o, c, {&writer, &hook});
    s.run();
  }
  ASSERT_TRUE(first && first->anticipation);
  const core::Anticipation& a = *first->anticipation;
  ASSERT_TRUE(a.used) << a.why;
  ASSERT_EQ(a.aimed, 2);
  EXPECT_GT(a.to_last_s, a.to_s);
  const auto files = report::write_report(folder, "test");
  ASSERT_TRUE(files.ok) << files.error;
  std::ifstream html(files.html);
  const std::string page((std::istreambuf_iterator<char>(html)), {});
  char ratio[32], change[32], from[32], to[32], last[32];
  std::snprintf(ratio, sizeof ratio, "%.4f", a.ratio);
  std::snprintf(change, sizeof change, "%.1f", a.change_n);
  std::snprintf(from, sizeof from, "%.0f", a.from_s);
  std::snprintf(to, sizeof to, "%.0f", a.to_s);
  std::snprintf(last, sizeof last, "%.0f", a.to_last_s);
  const std::string sentence = std::string("the map's loss scaled by 1 + ") + ratio + " (a change of " +
                               change + " N predicted at the warm-up speed from " + from + " s to " + to +
                               " s, the mean over the 2 coast-downs it must pass, the last at " + last +
                               " s)";
  EXPECT_NE(page.find(sentence), std::string::npos) << sentence;
  if (!HasFailure()) fs::remove_all(dir);
}

TEST(SessionUnit, TheShippedLeversReachTheSettingsAndTheRecord) {
  // docs/standards.md §3.16 (warm_up.anticipate_for = "passes") and §3.17 (method.adjust_from =
  // "whole-trace"), as the shipped profiles set them, through the session: the truth of the tests above
  // (still warming after a 600 s warm-up). Each adjusted setting is target − basis-loss·(1 + ratio), the loss
  // taken from the curve the record names (GTR 15 §8.1.4's form with the lab's basis and share), aimed at the
  // two consecutive passes a cycle apart (GTR 15 §8.1.3.4.2); the loss map's first setting likewise.
  physics::Truth truth = warming_truth(1.5, 1000.0);
  for (const bool map : {false, true}) {
    FakeController c(truth);
    Recorder record(true);
    std::vector<session::CoastdownRecord> runs;
    std::optional<session::ev::FirstSetting> first;
    Hook hook([&](const session::Event& e) {
      if (const auto* d = std::get_if<session::ev::Coastdown>(&e.payload)) runs.push_back(d->record);
      if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) first = *f;
    });
    session::Inputs in = long_warm_up_inputs();
    in.profile.warm_up.anticipate_drift = true;
    in.profile.warm_up.anticipate_for = core::WarmUp::AnticipateFor::passes;
    in.profile.adjust_from = core::Profile::AdjustFrom::whole_trace;
    in.profile.crossing_fit_half_width_kmh = 5.0;
    session::Options o = options();
    if (map) o.first_setting = core::FirstSetting::loss_map;
    session::Session s(in, o, c, {&record, &hook});
    const auto sum = s.run();
    ASSERT_FALSE(runs.empty()) << sum.stop_reason;
    if (map) {
      ASSERT_TRUE(first && first->anticipation) << sum.stop_reason;
      const core::Anticipation& a = *first->anticipation;
      ASSERT_TRUE(a.used) << a.why;
      EXPECT_EQ(a.aimed, 2);
      EXPECT_GT(a.to_last_s, a.to_s + 30.0);
      continue;
    }
    ASSERT_FALSE(runs[0].evaluation.check.pass) << "the standard's first setting is not within tolerance";
    int adjusted = 0, anticipated = 0;
    for (const auto& r : runs) {
      if (!r.evaluation.usable) continue;
      EXPECT_FALSE(r.evaluation.adjust_why.empty());
      EXPECT_TRUE(r.evaluation.adjust_band_equivalent.has_value());
      if (r.evaluation.check.pass || r.decision.kind != core::Decision::Kind::run_again) continue;
      ++adjusted;
      EXPECT_NE(r.decision.reason.find("loss from the "), std::string::npos) << r.decision.reason;
      const core::Anticipation& a = r.decision.anticipation;
      const core::RoadLoad loss = r.evaluation.adjust_basis - r.set;
      const core::RoadLoad expect = in.vehicle.target - loss.scaled(a.used ? 1.0 + a.ratio : 1.0);
      EXPECT_NEAR(r.decision.next_set.f0_n, expect.f0_n, 1e-9);
      EXPECT_NEAR(r.decision.next_set.f1_n_per_kmh, expect.f1_n_per_kmh, 1e-12);
      EXPECT_NEAR(r.decision.next_set.f2_n_per_kmh2, expect.f2_n_per_kmh2, 1e-12);
      if (a.used) {
        ++anticipated;
        EXPECT_EQ(a.aimed, 2);
        EXPECT_GT(a.to_last_s, a.to_s);
      }
    }
    EXPECT_GE(adjusted, 1);
    EXPECT_GE(anticipated, 1);
    EXPECT_TRUE(runs[0].evaluation.adjust_from_whole_trace) << runs[0].evaluation.adjust_why;
  }
}

TEST(SessionUnit, AWarmUpEndedOnTheWarmingTrendWaitsForTheDriftAWindowRuleMisses) {
  // docs/standards.md §3.12 (lab policy): a warm-up of at least 300 s that ends when stable. The truth warms
  // with cold excess 1.0 of the spin loss (25 N + 0.002·80² = 37.8 N at 80 km/h) and τ = 400 s, so the force
  // still to come at t s of motoring is 37.8·e^(−t/400) (first-order warming, textbook). By hand:
  // - `trend` with 2 N: the curve says 37.8·e^(−t/400) < 2 from t = 400·ln(18.9) = 1176 s on, but the rule
  //   also carries the slope of the last five 30 s windows (the slope at t − 75 s) over max(τ, 600 s) = 600
  //   s: 37.8/400·e^(−(t−75)/400)·600 < 2 from t = 75 + 400·ln(28.35) = 1412 s on, so the warm-up holds about
  //   1412 s (less the run-up's few seconds; the fit carries the hold's noise: ±10 %, common practice, no
  //   source);
  // - `windows` with 2 N per 30 s window: the window means fall by 37.8·(1 − e^(−30/400))·e^(−t/400) =
  //   2.73·e^(−t/400) N, under 2 N from t = 400·ln(1.37) = 125 s on, so it ends at the 300 s minimum with
  //   37.8·e^(−0.75) ≈ 17.9 N still to come.
  double held[2] = {0.0, 0.0};
  std::string stability[2];
  for (int k = 0; k < 2; ++k) {
    FakeController c(warming_truth(1.0, 400.0));
    Recorder record(true);
    Hook hook([&](const session::Event& e) {
      if (const auto* h = std::get_if<session::ev::WarmUpHeld>(&e.payload)) {
        held[k] = h->held_s;
        stability[k] = h->stability;
      }
    });
    session::Inputs in = inputs();
    in.profile.warm_up.duration_s = 300.0;
    in.profile.warm_up.stable_within_n = 2.0;
    in.profile.warm_up.stable_window_s = 30.0;
    in.profile.warm_up.max_extra_s = 3000.0;
    in.profile.warm_up.stable_by = k == 0 ? core::WarmUp::StableBy::trend : core::WarmUp::StableBy::windows;
    in.profile.max_coastdowns = 20;
    session::Session s(in, options(), c, {&record, &hook});
    const auto sum = s.run();
    EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  }
  EXPECT_EQ(stability[0], "stable");
  EXPECT_NEAR(held[0], 1412.0, 0.10 * 1412.0) << "held " << held[0] << " and " << held[1];
  EXPECT_EQ(stability[1], "stable");
  EXPECT_NEAR(held[1], 300.0, 31.0);  // the minimum, ended within one 30 s window of it
}

namespace {
// One session of the fake controller over `truth` on the sim-tcp cell (run_up = "vehicle": every run-up is
// the simulated driver's, the release found by the neutral signal), with what the late-release test looks at.
struct DriverRun {
  session::Summary sum;
  std::vector<session::ev::RunUpChecked> checks;
  std::vector<session::ev::ReleaseTiming> timing;
  std::vector<controller::Sample>
      first_coast;              // the first coast-down's samples, as the session analysed them
  double first_coast_s = -1.0;  // its duration
};
DriverRun driver_run(const physics::Truth& truth, session::Inputs in) {
  FakeController c(truth);
  Recorder record(true);
  DriverRun out;
  Hook hook([&](const session::Event& e) {
    if (const auto* k = std::get_if<session::ev::RunUpChecked>(&e.payload)) out.checks.push_back(*k);
    if (const auto* t = std::get_if<session::ev::ReleaseTiming>(&e.payload)) out.timing.push_back(*t);
    if (const auto* cd = std::get_if<session::ev::Coastdown>(&e.payload); cd && out.first_coast_s < 0.0) {
      out.first_coast_s = cd->record.duration_s;
      if (e.trace) out.first_coast = *e.trace;
    }
  });
  session::Session s(std::move(in), options(), c, {&record, &hook});
  out.sum = s.run();
  return out;
}
}  // namespace

TEST(SessionUnit, ALateReleaseIsCoastedFromTheActualReleaseAndItsDelayRecorded) {
  // The driver's occasional late shift to neutral (the truth's driver.late_release_probability = 1: every
  // shift comes driver.late_release_extra_s = 5 s later than the reaction time and jitter alone would make
  // it). The coast-down must start where the vehicle was actually released (found by the neutral signal),
  // not at the prompt: the driver holds the speed meanwhile. Compared with the same driver on time.
  physics::Truth on_time = loadtrim::testing::demo_truth();
  on_time.driver.late_release_probability = 0.0;
  physics::Truth late = on_time;
  late.driver.late_release_probability = 1.0;
  const double extra_s = late.driver.late_release_extra_s;
  ASSERT_EQ(extra_s, 5.0);
  const DriverRun a = driver_run(on_time, inputs());
  const DriverRun b = driver_run(late, inputs());
  ASSERT_EQ(a.sum.outcome, session::Outcome::accepted) << a.sum.stop_reason;
  EXPECT_EQ(b.sum.outcome, session::Outcome::accepted) << b.sum.stop_reason;
  EXPECT_TRUE(b.sum.rollers_stopped) << b.sum.stop_note;
  ASSERT_GE(b.checks.size(), 2u);
  for (const auto& k : a.checks) EXPECT_LT(k.release_delay_s, extra_s) << "on time: reaction 0.8 s + jitter";
  for (const auto& k : b.checks) {
    EXPECT_EQ(k.ending, "coasted");
    EXPECT_EQ(k.detected_by, "neutral signal");
    // The delay recorded is at least the late extra (plus the 0.8 s reaction time of the truth's driver).
    EXPECT_GE(k.release_delay_s, extra_s + late.driver.reaction_time_s) << k.release_delay_s;
    // Released from the held speed, at or above the start speed (GTR 15 Annex 4 §8.1.3.4; 0.5 km/h: the
    // encoder noise's band, common practice, no source).
    EXPECT_GE(k.release_speed_kmh, k.start_speed_kmh - 0.5) << k.release_speed_kmh;
  }
  // The first coast-down (both sessions start from the same standard setting) lasts as long late as on time,
  // within 1 s (noise), not 5 s longer: the held seconds are not in it. And it falls from its first sample:
  // at the start speed the demo vehicle decelerates at about F/m = (142 + 0.35·142 + 0.033·142²)/1530 ≈
  // 0.56 m/s² ≈ 2 km/h per s (its target coefficients, by hand), so 2 s in it is at least 2 km/h lower.
  ASSERT_GT(a.first_coast_s, 0.0);
  EXPECT_NEAR(b.first_coast_s, a.first_coast_s, 1.0);
  ASSERT_FALSE(b.first_coast.empty());
  const auto two_s_in = std::find_if(
      b.first_coast.begin(), b.first_coast.end(),
      [&](const controller::Sample& x) { return x.time_s >= b.first_coast.front().time_s + 2.0; });
  ASSERT_NE(two_s_in, b.first_coast.end());
  EXPECT_LT(two_s_in->speed_kmh, b.first_coast.front().speed_kmh - 2.0);
  // The 120 s rule (EU SA4 §8.1.2–8.1.3) is judged at the actual release: the late first release comes about
  // 5 s later after the warm-up (within the 0.5 s of one receive of the fake controller).
  ASSERT_FALSE(a.timing.empty());
  ASSERT_FALSE(b.timing.empty());
  EXPECT_NEAR(b.timing[0].gap_s - a.timing[0].gap_s, extra_s, 0.6);
  // A rule that the on-time release meets and the late one misses: named, kept as the profile says
  // ("finding"), on page one.
  session::Inputs tight = inputs();
  tight.profile.max_gap_after_warmup_s = a.timing[0].gap_s + 0.5 * extra_s;
  tight.profile.late_start = core::Profile::LateStart::finding;
  const DriverRun t = driver_run(late, tight);
  EXPECT_EQ(t.sum.outcome, session::Outcome::accepted) << t.sum.stop_reason;
  ASSERT_FALSE(t.timing.empty());
  EXPECT_FALSE(t.timing[0].within);
  ASSERT_EQ(t.sum.findings.size(), 1u);
  EXPECT_NE(t.sum.findings[0].find("after the warm-up ended, beyond the"), std::string::npos)
      << t.sum.findings[0];
}

TEST(SessionUnit, AReleaseLaterThanTheReleaseDeadlineIsNamed) {
  // A shift to neutral 40 s late, beyond the 30 s the tool waits after the prompt (motion::VehicleRunPlan,
  // common practice, no source): the run ends, named, not accepted, the rollers stopped.
  physics::Truth t = loadtrim::testing::demo_truth();
  t.driver.late_release_probability = 1.0;
  t.driver.late_release_extra_s = 40.0;
  const DriverRun r = driver_run(t, inputs());
  EXPECT_EQ(r.sum.outcome, session::Outcome::not_accepted) << r.sum.stop_reason;
  EXPECT_NE(
      r.sum.stop_reason.find("no release to neutral was seen within 30 s of the prompt to shift to neutral"),
      std::string::npos)
      << r.sum.stop_reason;
  ASSERT_EQ(r.checks.size(), 1u);
  EXPECT_EQ(r.checks[0].ending, "no_release");
  EXPECT_TRUE(r.sum.rollers_stopped) << r.sum.stop_note;
}

TEST(SessionUnit, OnlyTheFirstCriticalObserverCanFailASession) {
  // docs/safety.md: only the record can end a session; a second observer that calls itself critical is a
  // view, dropped once when it fails, and one whose critical() throws is a view too.
  class ThrowsOnAsk : public Recorder {
   public:
    ThrowsOnAsk() : Recorder(true, "state") {}
    bool critical() const override { throw std::runtime_error("asked"); }
  };
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  Recorder impostor(true, "state");  // says critical, fails on the first state change
  ThrowsOnAsk thrower;
  session::Session s(inputs(), options(), c, {&record, &impostor, &thrower});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_EQ(count(record, "observer_dropped"), 2);
  EXPECT_TRUE(sum.rollers_stopped);
}
// A Modbus map accepted with setpoint-only read-back (docs/modbus.md, "Applied values") states the capability
// "readback-setpoint-only": every session logs it with the controller, and the report shows one line for it;
// a controller without it shows no such line.
TEST(SessionUnit, SetpointOnlyReadBackIsLoggedAndShownOnTheReport) {
  namespace fs = std::filesystem;
  for (const bool setpoint_only : {false, true}) {
    FakeController c(loadtrim::testing::demo_truth());
    if (setpoint_only) c.script.extra_capabilities = ",readback-setpoint-only";
    std::string dir = (fs::temp_directory_path() / "loadtrim-readback-XXXXXX").string();
    ASSERT_TRUE(::mkdtemp(dir.data()));
    const std::string folder = dir + "/session";
    fs::create_directories(folder);
    {
      session::RecordWriter writer(folder);
      session::Session s(inputs(), options(), c, {&writer});
      const auto sum = s.run();
      EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
    }
    std::ifstream log(folder + "/events.jsonl");
    const std::string events((std::istreambuf_iterator<char>(log)), {});
    EXPECT_EQ(events.find("readback-setpoint-only") != std::string::npos, setpoint_only);
    const auto files = report::write_report(folder, "test");
    ASSERT_TRUE(files.ok) << files.error;
    std::ifstream html(files.html);
    const std::string page((std::istreambuf_iterator<char>(html)), {});
    EXPECT_EQ(page.find("SETPOINT REGISTERS ONLY") != std::string::npos, setpoint_only);
    fs::remove_all(dir);
  }
}

namespace {
// Pauses the session when `when` holds for an event, and continues it as soon as the pause is recorded
// (continue_after_pause), as an operator at another terminal would.
struct PauseScript {
  session::PauseControl control;
  std::function<bool(const session::Event&)> when;
  bool continue_after_pause = true;
  bool asked = false;
  void on(const session::Event& e) {
    if (!asked && when(e)) {
      asked = control.request_pause({"A. Tester", "scripted pause", "test"});
      EXPECT_TRUE(asked);
    }
    if (continue_after_pause && std::holds_alternative<session::ev::Paused>(e.payload)) {
      EXPECT_TRUE(control.request_continue({"B. Tester", "", "test"}));
    }
  }
};

bool entered(const session::Event& e, session::State s) {
  const auto* sc = std::get_if<session::ev::StateChanged>(&e.payload);
  return sc && sc->to == s;
}
}  // namespace

namespace {
// Stamps (controller clock) of one session of the demo truth paused in the coast-down after the first
// coast-down record and continued at once: the warm-ups' starts and the settings' writes.
struct PausedTimes {
  std::vector<double> period_from, set_written;
  session::Summary sum;
};
PausedTimes run_paused(double max_motoring_s);
}  // namespace

TEST(SessionUnit, APauseStartsANewMotoringPeriod) {
  // The cell's limits.max_motoring_s is one continuous motoring period (common practice, no source); a pause
  // stops the rollers (docs/safety.md), so the period starts again at the re-warm. A limit just long enough
  // for each part alone accepts the session; counted from the first warm-up, its last write would be refused.
  const PausedTimes free = run_paused(1e6);
  ASSERT_EQ(free.sum.outcome, session::Outcome::accepted) << free.sum.stop_reason;
  ASSERT_EQ(free.period_from.size(), 2u);
  double before = 0.0, after = 0.0;
  for (double t : free.set_written) {
    const int part = t < free.period_from[1] ? 0 : 1;  // before the pause, or after the continue
    double& longest = part == 0 ? before : after;
    longest = std::max(longest, t - free.period_from[part]);
  }
  ASSERT_GT(after, 0.0) << "a setting is written after the continue";
  // At least the planned motoring (the combination's check) and the re-warm (the profile's warm-up, asked in
  // full after a pause); 1 s beyond the longest part.
  const double limit = std::max({before, after, core::planned_motoring_s(inputs().profile),
                                 inputs().profile.warm_up.duration_s}) +
                       1.0;
  ASSERT_GT(free.set_written.back() - free.period_from[0], limit)
      << "counted from the first warm-up the last write would be beyond the limit (the test's premise)";
  const PausedTimes tight = run_paused(limit);
  EXPECT_EQ(tight.sum.outcome, session::Outcome::accepted) << tight.sum.stop_reason;
  EXPECT_EQ(tight.set_written.size(), free.set_written.size());
}

namespace {
PausedTimes run_paused(double max_motoring_s) {
  PausedTimes out;
  FakeController c(loadtrim::testing::demo_truth());
  PauseScript ps;
  bool analysed = false;
  ps.when = [&](const session::Event& e) { return analysed && entered(e, session::State::coast_down); };
  Hook hook([&](const session::Event& e) {
    if (std::holds_alternative<session::ev::Coastdown>(e.payload)) analysed = true;
    ps.on(e);
    if (!e.stamp || !e.stamp->t_s) return;
    // Each motoring period from its start as recorded (the run-up from standstill included).
    if (const auto* w = std::get_if<session::ev::WarmUpStarted>(&e.payload))
      out.period_from.push_back(w->motoring_since_s);
    if (std::holds_alternative<session::ev::SetWritten>(e.payload)) out.set_written.push_back(*e.stamp->t_s);
  });
  session::Inputs in = inputs();
  in.cell.max_motoring_s = max_motoring_s;
  session::Options o = options();
  o.pause = &ps.control;
  session::Session s(in, o, c, {&hook});
  out.sum = s.run();
  return out;
}
}  // namespace

TEST(SessionUnit, APauseDuringACoastDownStopsTheRollersAndTheContinuedSessionIsAccepted) {
  // The pause contract (docs/session.md "Pause and continue"): the run in progress is discarded, the rollers
  // are stopped to standstill before the wait, and after the continue the vehicle is re-warmed and the pass
  // count starts again: two CONSECUTIVE passes after the pause (GTR 15 Annex 4 §8.1.3.4.2 [text]); the 120 s
  // rule applies again after the re-warm (EU SA4 §8.1.2–8.1.3).
  FakeController c(loadtrim::testing::demo_truth());
  PauseScript ps;
  // Paused in the coast-down that follows the first pass: that pass no longer counts.
  bool passed = false;
  ps.when = [&](const session::Event& e) { return passed && entered(e, session::State::coast_down); };
  Recorder record(true);
  std::vector<session::Event> paused, continued;
  bool stopped_before_wait = false, reset_by_pause = false;
  int passes_after_continue = 0;
  Hook hook([&](const session::Event& e) {
    if (const auto* cd = std::get_if<session::ev::Coastdown>(&e.payload);
        cd && cd->record.evaluation.usable && cd->record.evaluation.check.pass)
      passed = true;
    if (const auto* r = std::get_if<session::ev::PassesReset>(&e.payload);
        r && r->why.find("paused") != std::string::npos && r->passes == 1)
      reset_by_pause = true;
    ps.on(e);
    if (const auto* p = std::get_if<session::ev::Paused>(&e.payload)) {
      paused.push_back(e);
      // The last command before the wait was the controlled stop (docs/safety.md: a pause is a stop).
      stopped_before_wait = !c.commands.empty() && c.commands.back().first == Mode::controlled_stop;
      EXPECT_EQ(p->during, "coast-down");
    }
    if (std::holds_alternative<session::ev::Continued>(e.payload)) continued.push_back(e);
    if (const auto* cd = std::get_if<session::ev::Coastdown>(&e.payload);
        cd && !continued.empty() && cd->record.evaluation.usable && cd->record.evaluation.check.pass)
      ++passes_after_continue;
  });
  session::Options o = options();
  o.pause = &ps.control;
  session::Session s(inputs(), o, c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  ASSERT_EQ(paused.size(), 1u);
  ASSERT_EQ(continued.size(), 1u);
  const auto& p = std::get<session::ev::Paused>(paused[0].payload);
  EXPECT_TRUE(p.rollers_stopped);
  EXPECT_TRUE(stopped_before_wait);
  EXPECT_EQ(p.by, "A. Tester");
  EXPECT_EQ(p.why, "scripted pause");
  EXPECT_EQ(std::get<session::ev::Continued>(continued[0].payload).by, "B. Tester");
  EXPECT_EQ(count(record, "coastdown_discarded"), 1) << "the paused run is not counted";
  EXPECT_EQ(count(record, "warm_up_ended"), 2) << "the warm-up and the re-warm after the continue";
  EXPECT_TRUE(reset_by_pause) << "the pass before the pause no longer counts";
  EXPECT_GE(passes_after_continue, 2);
  // The paused run counts as neither usable nor unusable: every recorded coast-down was usable here.
  EXPECT_EQ(sum.usable_coastdowns, sum.coastdowns);
  // The pause is a state of its own in the record (the progress line and the report read it).
  EXPECT_TRUE(record.saw("paused") && record.saw("continued"));
}

TEST(SessionUnit, APauseDuringTheWarmUpWarmsUpAgainAfterTheContinue) {
  FakeController c(loadtrim::testing::demo_truth());
  PauseScript ps;
  ps.when = [](const session::Event& e) {
    return std::holds_alternative<session::ev::WarmUpStarted>(e.payload);
  };
  Recorder record(true);
  std::string during;
  Hook hook([&](const session::Event& e) {
    ps.on(e);
    if (const auto* p = std::get_if<session::ev::Paused>(&e.payload)) during = p->during;
  });
  session::Options o = options();
  o.pause = &ps.control;
  session::Session s(inputs(), o, c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  EXPECT_EQ(during, "warm-up");
  EXPECT_EQ(count(record, "paused"), 1);
  EXPECT_EQ(count(record, "continued"), 1);
  // The interrupted warm-up never ended; the one after the continue did, before any coast-down.
  EXPECT_EQ(count(record, "warm_up_started"), 2);
  EXPECT_EQ(count(record, "warm_up_ended"), 1);
  EXPECT_EQ(count(record, "coastdown_discarded"), 0) << "no run was in progress";
}

// The history's day-to-day correction compares only the session's initial warm-up hold (docs/store.md, "The
// history first setting"): after a pause in the warm-up the re-warm is not initial, its record says so, and
// the first setting uses the history's loss as it is, saying why.
TEST(SessionUnit, APausedWarmUpIsNotComparedForTheDayToDayCorrection) {
  FakeController c(loadtrim::testing::demo_truth());
  PauseScript ps;
  ps.when = [](const session::Event& e) {
    return std::holds_alternative<session::ev::WarmUpStarted>(e.payload);
  };
  std::vector<session::ev::WarmUpHeld> held;
  std::optional<session::ev::FirstSetting> first;
  Hook hook([&](const session::Event& e) {
    ps.on(e);
    if (const auto* w = std::get_if<session::ev::WarmUpHeld>(&e.payload)) held.push_back(*w);
    if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) first = *f;
  });
  session::Inputs in = inputs();
  in.profile.warm_up.duration_s = 900.0;
  in.profile.warm_up.stable_window_s = 60.0;
  session::Options o = options();
  o.pause = &ps.control;
  o.first_setting = core::FirstSetting::history;
  core::HistoryEntry h;  // an invented earlier session: its loss the target's own 1/4, a settled 127 N hold
  h.utc = "2026-12-02T10:00:00Z";
  h.target = in.vehicle.target;
  h.final_set = in.vehicle.target.scaled(0.75);
  h.warm_up = core::WarmUpRecord{80.0, {}};
  for (double t = 30.0; t < 900.0; t += 60.0) h.warm_up->windows.push_back({t, 127.0});
  o.history = h;
  Recorder record(true);
  const auto sum = session::Session(in, o, c, {&record, &hook}).run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_EQ(count(record, "paused"), 1);
  ASSERT_EQ(held.size(), 1u);  // the interrupted hold never ended; the re-warm did
  EXPECT_FALSE(held[0].initial);
  EXPECT_GE(held[0].windows.size(), 14u);  // still recorded, as facts of the re-warm
  ASSERT_TRUE(first && first->day_scale);
  EXPECT_EQ(first->strategy, "history");
  EXPECT_FALSE(first->day_scale->used);
  EXPECT_NE(first->day_scale->why.find("this session's initial warm-up hold is not known"), std::string::npos)
      << first->day_scale->why;
  const core::RoadLoad want = core::setting_for_loss(h.target, h.loss());  // the loss as it is
  EXPECT_NEAR(first->set.f0_n, want.f0_n, 1e-9);
}

TEST(SessionUnit, APauseWithoutAContinueEndsAsInterruptedWithTheRollersStopped) {
  // Every wait has a deadline on the tool's own clock: a pause nobody continues ends the session as
  // interrupted (resumable, exit code 4) with the rollers stopped.
  FakeController c(loadtrim::testing::demo_truth());
  PauseScript ps;
  ps.continue_after_pause = false;
  ps.when = [](const session::Event& e) { return entered(e, session::State::run_up); };
  Recorder record(true);
  Hook hook([&](const session::Event& e) { ps.on(e); });
  session::Options o = options();
  o.pause = &ps.control;
  o.max_pause_s = 0.3;
  session::Session s(inputs(), o, c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::interrupted) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("paused longer than"), std::string::npos) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  EXPECT_EQ(count(record, "continued"), 0);
  EXPECT_EQ(count(record, "coastdown_discarded"), 1);
}

TEST(SessionUnit, RollersThatMoveDuringAPauseEndTheSession) {
  // At rest means at rest: a controller that starts the rollers while the session waits is a fault, never
  // a continue (docs/safety.md).
  FakeController c(loadtrim::testing::demo_truth());
  PauseScript ps;
  ps.continue_after_pause = false;
  ps.when = [](const session::Event& e) {
    return std::holds_alternative<session::ev::WarmUpStarted>(e.payload);
  };
  Recorder record(true);
  Hook hook([&](const session::Event& e) {
    ps.on(e);
    if (std::holds_alternative<session::ev::Paused>(e.payload))
      (void)c.sim().command(sim::command_for(Mode::speed_hold, 30.0));
  });
  session::Options o = options();
  o.pause = &ps.control;
  o.max_pause_s = 30.0;
  session::Session s(inputs(), o, c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::controller_fault) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("not at rest"), std::string::npos) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
}

TEST(SessionUnit, AFaultDuringAVehicleRunUpClearsTheDriverDisplay) {
  // The display must not go on saying "accelerate" while the rollers are stopped (docs/safety.md): every way
  // out of a vehicle run-up clears it, a fault included, and the record says the controller took it.
  FakeController c(loadtrim::testing::demo_truth());
  bool accelerating = false;
  int n = 0;
  c.script.sample_lie = [&](controller::Sample&) {
    if (accelerating && ++n == 200) c.script.events = {"FAULT kind=ESTOP detail=scripted"};
  };
  std::vector<session::ev::DriverPromptShown> prompts;
  Recorder record(true);
  Hook hook([&](const session::Event& e) {
    if (const auto* p = std::get_if<session::ev::DriverPromptShown>(&e.payload)) {
      prompts.push_back(*p);
      if (p->prompt == controller::DriverPrompt::accelerate) accelerating = true;
    }
  });
  session::Session s(inputs(), options(), c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::controller_fault) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  ASSERT_FALSE(prompts.empty());
  EXPECT_EQ(prompts.back().prompt, controller::DriverPrompt::off);
  EXPECT_NE(prompts.back().text.find("prompt cleared"), std::string::npos) << prompts.back().text;
  EXPECT_EQ(c.sim().model().driver_prompt(), core::DriverPrompt::off) << "the controller was told";
}

TEST(SessionUnit, TheLossMapCoastsLearnWhatTheHoldsReadAndACoastDownDoesNot) {
  // docs/standards.md §3.15. The demo vehicle with a steady-versus-coasting difference of 20 N + 0.0006·v²
  // N (v in km/h) and a load cell 5 N high (both planted here; roller_model.hpp: a speed hold reads them, a
  // coast-down does not). Unit arithmetic: the holds read 25 N + 0.0006·v² more than the loss a coast-down
  // sees, 35.1 N at 130 km/h. Without the coasts the loss map carries all of it into the first setting, and
  // the first coast-down misses the target by about that much (outside ±10 N, GTR 15 Annex 4 §8.1.3.4.2);
  // with them the correction finds it and the first coast-down is within tolerance. The coasts measure as a
  // coast-down does, so what they find also holds the coast-down's own terms (the demo dyno's 0.2 % inertia
  // error and the tool's rotating mass against the truth's, both times the deceleration, largest at the top
  // speed): within 3 N of the planted difference at 20 km/h and 6 N at 130 km/h (the band noise of a few
  // coasts, the drift between them and those terms; common practice, no source).
  physics::Truth t = loadtrim::testing::demo_truth();
  t.vehicle.hold_bias_n = 20.0;
  t.vehicle.hold_bias_n_per_kmh2 = 0.0006;
  t.dyno.load_cell_offset_n = 5.0;
  auto run = [&](bool coasts, std::vector<session::ev::LossMapCoast>& seen,
                 std::optional<session::ev::FirstSetting>& first, std::vector<double>& first_worst) {
    FakeController c(t);
    Recorder record(true);
    Hook hook([&](const session::Event& e) {
      if (const auto* x = std::get_if<session::ev::LossMapCoast>(&e.payload)) seen.push_back(*x);
      if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) first = *f;
      if (const auto* cd = std::get_if<session::ev::Coastdown>(&e.payload))
        if (cd->record.evaluation.usable)
          first_worst.push_back(cd->record.evaluation.check.worst_abs_deviation_n);
    });
    session::Inputs in = inputs();
    in.profile.loss_map.coast_between_holds = coasts;
    session::Options o = options();
    o.first_setting = core::FirstSetting::loss_map;
    session::Session s(in, o, c, {&record, &hook});
    const auto sum = s.run();
    EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
    EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  };
  std::vector<session::ev::LossMapCoast> none, four;
  std::optional<session::ev::FirstSetting> first_plain, first_coast;
  std::vector<double> worst_plain, worst_coast;
  run(false, none, first_plain, worst_plain);
  run(true, four, first_coast, worst_coast);
  EXPECT_TRUE(none.empty());
  ASSERT_EQ(four.size(), 4u);  // 130→100, 100→70, 70→40, 40→20
  EXPECT_EQ(four[0].from_kmh, 130.0);
  EXPECT_EQ(four[0].to_kmh, 100.0);
  std::size_t points = 0;
  for (const auto& k : four) {
    points += k.points.size();
    for (const auto& p : k.points) {
      EXPECT_GT(p.speed_kmh - 5.0, k.to_kmh - 1e-9);
      EXPECT_LT(p.speed_kmh + 5.0, k.from_kmh - 2.0 + 1e-9);
    }
  }
  EXPECT_EQ(points, 7u);  // 110, 120 | 80, 90 | 50, 60 | 30
  ASSERT_TRUE(first_plain && first_coast);
  EXPECT_FALSE(first_plain->coast_correction.has_value());
  ASSERT_TRUE(first_coast->coast_correction.has_value());
  const core::CoastCorrection& k = *first_coast->coast_correction;
  ASSERT_TRUE(k.ok) << k.why;
  EXPECT_EQ(k.points, 7);
  EXPECT_NEAR(k.d0_n + k.d2_n_per_kmh2 * 20.0 * 20.0, 25.0 + 0.0006 * 400.0, 3.0);
  EXPECT_NEAR(k.d0_n + k.d2_n_per_kmh2 * 130.0 * 130.0, 25.0 + 0.0006 * 16900.0, 6.0);
  ASSERT_FALSE(worst_plain.empty());
  ASSERT_FALSE(worst_coast.empty());
  EXPECT_GT(worst_plain.front(), 20.0);
  EXPECT_LE(worst_coast.front(), 10.0);
}

// The loss map's coasts (loss_map.coast_between_holds, docs/standards.md §3.15) against a hostile controller,
// a pause and an auditor: what a hostile review found, kept as tests.
namespace {
session::Inputs coast_inputs() {
  session::Inputs in = inputs();
  in.profile.loss_map.coast_between_holds = true;
  return in;
}
session::Options map_options() {
  session::Options o = options();
  o.first_setting = core::FirstSetting::loss_map;
  return o;
}
}  // namespace

// The coast leaves road-load simulation at once, before its analysis and its record (as a coast-down does): a
// slow record (fsync within record_budget) must not let the vehicle coast on unheld.
TEST(SessionUnitCoasts, TheMapCoastLeavesRoadLoadBeforeItsRecordIsWritten) {
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  std::vector<Mode> at_record;
  Hook hook([&](const session::Event& e) {
    if (std::holds_alternative<session::ev::LossMapCoast>(e.payload))
      at_record.push_back(c.sim().model().mode());
  });
  session::Session s(coast_inputs(), map_options(), c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  ASSERT_FALSE(at_record.empty());
  for (Mode m : at_record)
    EXPECT_NE(m, Mode::road_load) << "the dyno still simulates road load at the record";
}

// Speed readings that lie during the map's coasts only (the reported deceleration 1.5 times the true one,
// smooth and even, so the band analysis accepts every band): before the bounds the correction was −117 N at
// 20 km/h and −475 N at 130 km/h and a first setting with f0 = −74.6 N was written. Now the correction is
// refused (beyond ±80 N, strategy.hpp) and the map is used as it is, said in the record.
TEST(SessionUnitCoasts, LyingSpeedsInTheMapCoastsAreRefusedNotWritten) {
  FakeController c(loadtrim::testing::demo_truth());
  bool in_map = true;
  bool coasting = false;
  double v0 = 0.0;
  c.script.sample_lie = [&](controller::Sample& s) {
    if (!in_map) return;
    if (s.mode != Mode::road_load) {
      coasting = false;
      return;
    }
    if (!coasting) {
      coasting = true;
      v0 = s.speed_kmh;
    }
    s.speed_kmh = v0 - 1.5 * (v0 - s.speed_kmh);
  };
  Recorder record(true);
  std::optional<session::ev::FirstSetting> first;
  std::optional<core::RoadLoad> written;
  Hook hook([&](const session::Event& e) {
    if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) {
      first = *f;
      in_map = false;
    }
    if (const auto* w = std::get_if<session::ev::SetWritten>(&e.payload))
      if (!written) written = w->set;
  });
  session::Session s(coast_inputs(), map_options(), c, {&record, &hook});
  const auto sum = s.run();
  ASSERT_TRUE(first && first->coast_correction);
  const core::CoastCorrection& k = *first->coast_correction;
  std::printf("correction ok=%d points=%d d0=%.1f N d2=%.6f resid=%.2f; d(20)=%.1f N d(130)=%.1f N\n", k.ok,
              k.points, k.d0_n, k.d2_n_per_kmh2, k.residual_sd_n, k.d0_n + k.d2_n_per_kmh2 * 400.0,
              k.d0_n + k.d2_n_per_kmh2 * 16900.0);
  std::printf("first setting (%s): %.1f %.4f %.5f; map fit at 100 km/h %.1f N; outcome %s (%s)\n",
              first->strategy.c_str(), first->set.f0_n, first->set.f1_n_per_kmh, first->set.f2_n_per_kmh2,
              first->loss_map_fit ? first->loss_map_fit->force_n(100.0) : -1.0,
              session::to_string(sum.outcome), sum.stop_reason.c_str());
  ASSERT_TRUE(written.has_value());
  std::printf("first set written: %.1f %.4f %.5f\n", written->f0_n, written->f1_n_per_kmh,
              written->f2_n_per_kmh2);
  EXPECT_FALSE(k.ok) << "an absurd correction was used";
  EXPECT_FALSE(k.why.empty());
  EXPECT_GT(written->f0_n, 0.0);  // the holds-only map's set, not the corrected one (−74.6 N before)
  ASSERT_TRUE(first->loss_map_fit.has_value());
  for (double v : {20.0, 130.0})
    EXPECT_NEAR(first->set.force_n(v), (inputs().vehicle.target - *first->loss_map_fit).force_n(v), 1e-9)
        << v;
}

// Coasts asked for, none of them usable (holds 8 km/h apart: no reference band lies wholly in a coast): the
// first setting is the holds-only map and its record says why the correction asked for is not used.
TEST(SessionUnitCoasts, CoastsAskedButNoneUsableIsSaidInTheFirstSetting) {
  FakeController c(loadtrim::testing::demo_truth());
  session::Inputs in = coast_inputs();
  in.profile.loss_map.speeds_kmh = {130.0, 122.0, 114.0, 106.0, 98.0, 90.0, 82.0};
  Recorder record(true);
  std::optional<session::ev::FirstSetting> first;
  int coasts = 0;
  Hook hook([&](const session::Event& e) {
    if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) first = *f;
    if (std::holds_alternative<session::ev::LossMapCoast>(e.payload)) ++coasts;
  });
  session::Session s(in, map_options(), c, {&record, &hook});
  (void)s.run();
  EXPECT_EQ(coasts, 6);
  ASSERT_TRUE(first);
  EXPECT_EQ(first->strategy, "loss-map");
  ASSERT_TRUE(first->coast_correction.has_value());
  EXPECT_FALSE(first->coast_correction->ok);
  EXPECT_EQ(first->coast_correction->why, "no usable coast point");
}

// A pause taken during a map coast: the rollers stop and the continued session re-runs warm-up and map, as a
// pause in the holds does; the coast's set write and its release are in the log before the pause
// (loss_map_coast_started is written before anything moves).
TEST(SessionUnitCoasts, APauseDuringAMapCoastStopsTheRollersAndItsStartIsRecorded) {
  FakeController c(loadtrim::testing::demo_truth());
  PauseScript pause;
  pause.when = [](const session::Event& e) {
    const auto* p = std::get_if<session::ev::LossMapPoint>(&e.payload);
    return p && p->point.speed_kmh == 130.0;
  };
  session::Options o = map_options();
  o.pause = &pause.control;
  Recorder record(true);
  std::vector<std::string> seq;
  bool stopped_at_pause = false;
  Hook hook([&](const session::Event& e) {
    pause.on(e);
    seq.push_back(session::type_of(e));
    if (const auto* p = std::get_if<session::ev::Paused>(&e.payload)) stopped_at_pause = p->rollers_stopped;
  });
  session::Session s(coast_inputs(), o, c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  EXPECT_TRUE(stopped_at_pause);
  const auto paused = std::find(seq.begin(), seq.end(), "paused");
  ASSERT_NE(paused, seq.end());
  const bool coast_seen = std::find(seq.begin(), paused, "loss_map_coast_started") != paused;
  // The pause was taken inside the coast (after the write and the release): show the commands.
  bool released_before_pause = false;
  for (const auto& [m, v] : c.commands)
    if (m == Mode::road_load) released_before_pause = true;
  EXPECT_TRUE(released_before_pause);
  EXPECT_TRUE(coast_seen)
      << "the paused coast's write of the default setting and its release are not in the log";
}

// Report and verify on a folder with loss_map_coast records.
TEST(SessionUnitCoasts, AFolderWithMapCoastsReportsAndVerifies) {
  namespace fs = std::filesystem;
  FakeController c(loadtrim::testing::demo_truth());
  std::string dir = (fs::temp_directory_path() / "loadtrim-review-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  const std::string folder = dir + "/session";
  fs::create_directories(folder);
  {
    session::RecordWriter writer(folder);
    session::Inputs in = coast_inputs();
    in.profile.warm_up.anticipate_drift =
        true;  // its first-setting line in the report (docs/standards.md §3.16)
    session::Session s(in, map_options(), c, {&writer});
    const auto sum = s.run();
    EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
  }
  const auto files = report::write_report(folder, "test");
  ASSERT_TRUE(files.ok) << files.error;
  std::ifstream html(files.html);
  const std::string page((std::istreambuf_iterator<char>(html)), {});
  EXPECT_NE(page.find("loss-map-coasts"), std::string::npos);
  EXPECT_NE(page.find("loss-map-correction"), std::string::npos);
  EXPECT_NE(page.find("first-setting-anticipation"), std::string::npos);
  const auto v = record::verify_folder(folder);
  EXPECT_TRUE(v.intact()) << v.message;
  std::printf("verify: %s\n", v.message.c_str());
  fs::remove_all(dir);
}

// Hostile controllers during the map's coasts only: every path ends with the rollers stopped and a controlled
// stop as the last command (docs/safety.md); what happened is printed.
TEST(SessionUnitCoasts, HostileCoastsAreBoundedAndEndSafe) {
  struct Case {
    const char* name;
    std::function<void(controller::Sample&, double v0)> lie;
    bool not_applied = false;
  };
  const std::vector<Case> cases = {
      {"never decelerates", [](controller::Sample& s, double v0) { s.speed_kmh = v0; }},
      {"NaN speed", [](controller::Sample& s, double) { s.speed_kmh = NAN; }},
      {"negative speed", [](controller::Sample& s, double) { s.speed_kmh = -5.0; }},
      {"speeds up", [](controller::Sample& s, double v0) { s.speed_kmh = v0 + (v0 - s.speed_kmh); }},
      {"ignores later sets", nullptr, true},
  };
  for (const auto& k : cases) {
    FakeController c(loadtrim::testing::demo_truth());
    c.script.coefficients_not_applied = k.not_applied;
    bool in_map = true, coasting = false;
    double v0 = 0.0;
    if (k.lie)
      c.script.sample_lie = [&](controller::Sample& s) {
        if (!in_map) return;
        if (s.mode != Mode::road_load) {
          coasting = false;
          return;
        }
        if (!coasting) coasting = true, v0 = s.speed_kmh;
        k.lie(s, v0);
      };
    Recorder record(true);
    std::vector<std::string> notes;
    std::optional<session::ev::FirstSetting> first;
    Hook hook([&](const session::Event& e) {
      if (const auto* x = std::get_if<session::ev::LossMapCoast>(&e.payload))
        notes.push_back(std::to_string(int(x->from_kmh)) + "->" + std::to_string(int(x->to_kmh)) + ": " +
                        std::to_string(x->points.size()) + " pts, '" + x->note + "'");
      if (const auto* f = std::get_if<session::ev::FirstSetting>(&e.payload)) {
        first = *f;
        in_map = false;
      }
    });
    session::Session s(coast_inputs(), map_options(), c, {&record, &hook});
    const auto sum = s.run();
    std::printf("== %s: outcome %s (%s); rollers stopped %d; first %s\n", k.name,
                session::to_string(sum.outcome), sum.stop_reason.substr(0, 200).c_str(), sum.rollers_stopped,
                first ? (first->strategy + (first->coast_correction ? (first->coast_correction->ok
                                                                           ? " corrected"
                                                                           : " correction not used: " +
                                                                                 first->coast_correction->why)
                                                                    : " no correction"))
                            .c_str()
                      : "-");
    for (const auto& n : notes) std::printf("   %s\n", n.substr(0, 300).c_str());
    EXPECT_TRUE(sum.rollers_stopped) << k.name;
    ASSERT_FALSE(c.commands.empty());
    EXPECT_EQ(c.commands.back().first, Mode::controlled_stop) << k.name;
  }
}

TEST(SessionUnit, AResumeOfAWholeTraceProfileRefusesARecordWithoutItsAdjustment) {
  // docs/standards.md §3.17: a profile that takes the loss from the whole-trace curve writes the curve it
  // used with every usable coast-down; a resume replays the method from it. A usable record without it in
  // such a folder is damage, not an old folder (whose own profile copy keeps the band regression): named, so
  // that resume refuses before anything is written (common practice, no source: never read a default).
  const nlohmann::json set = {{"f0_n", 50.0}, {"f1_n_per_kmh", 0.2}, {"f2_n_per_kmh2", 0.03}};
  nlohmann::json rec = {{"type", "coastdown"}, {"run", 3}, {"usable", true}, {"set", set}, {"measured", set}};
  session::ResumePoint rp;
  rp.completed = {rec};
  session::Inputs in = inputs();
  in.profile.adjust_from = core::Profile::AdjustFrom::whole_trace;
  const auto why = session::missing_adjustment(rp, in.profile);
  ASSERT_TRUE(why.has_value());
  EXPECT_NE(why->find("coast-down 3's record has no \"adjustment\""), std::string::npos) << *why;
  in.profile.adjust_from = core::Profile::AdjustFrom::band_regression;
  EXPECT_FALSE(session::missing_adjustment(rp, in.profile).has_value());
  in.profile.adjust_from = core::Profile::AdjustFrom::whole_trace;
  rp.completed[0]["adjustment"] = {{"from", "band-regression"}, {"measured", set}, {"why", "x"}};
  EXPECT_FALSE(session::missing_adjustment(rp, in.profile).has_value());
  rp.completed[0]["usable"] = false;  // an unusable run has no curve to replay
  rp.completed[0].erase("adjustment");
  EXPECT_FALSE(session::missing_adjustment(rp, in.profile).has_value());
}

TEST(SessionUnit, AResumeFindsThePassesTheSessionHad) {
  // GTR 15 §8.1.3.4.2 (two consecutive coast-downs within tolerance at one setting, docs/standards.md §3.1):
  // the passes a resume finds in hand are the session's. A pass given up when the setting moved (the
  // next-pass rule, §3.19: its passes_reset record comes before the coast-down's own) and one given up by an
  // unusable run count for nothing after the resume; a pass at an unchanged setting still counts.
  const nlohmann::json set = {{"f0_n", 50.0}, {"f1_n_per_kmh", 0.2}, {"f2_n_per_kmh2", 0.03}};
  const nlohmann::json moved = {{"f0_n", 47.5}, {"f1_n_per_kmh", 0.2}, {"f2_n_per_kmh2", 0.03}};
  auto coast = [&](int run, bool pass, const nlohmann::json& next) {
    return nlohmann::json{{"type", "coastdown"},
                          {"run", run},
                          {"usable", true},
                          {"set", set},
                          {"measured", set},
                          {"check", {{"pass", pass}, {"rows", nlohmann::json::array()}}},
                          {"decision", {{"kind", "run-again"}, {"next_set", next}}}};
  };
  const nlohmann::json reset = {{"type", "passes_reset"}, {"run", 1}, {"passes", 1}};
  const nlohmann::json unusable = {{"type", "coastdown"}, {"run", 2}, {"usable", false}, {"set", set}};
  auto passes_after = [](const std::vector<nlohmann::json>& records) {
    const session::ResumePoint rp = session::resume_point(records);
    EXPECT_EQ(rp.malformed, 0) << rp.malformed_note;
    // The method keeps references to its profile and target: the inputs outlive it.
    const session::Inputs in = inputs();
    core::SettingMethodState method(in.profile, in.vehicle.target);
    session::replay_method(rp, method);
    return method.consecutive_passes();
  };
  // A pass, coasting on at the same setting: one pass in hand.
  EXPECT_EQ(passes_after({coast(1, true, set)}), 1);
  // The same pass adjusted by the next-pass rule (the reset record first, then the record with a new next
  // setting): none in hand, as in the session. Replaying the verdicts alone found one. (The changed next
  // setting alone already resets it, the line after; the reset record's own effect is the unusable and pause
  // cases below.)
  EXPECT_EQ(passes_after({reset, coast(1, true, moved)}), 0);
  EXPECT_EQ(passes_after({coast(1, true, moved)}), 0);
  // A pass, then an unusable run (its reset record before its own): none.
  EXPECT_EQ(passes_after({coast(1, true, set), reset, unusable}), 0);
  // A pass, a reset (a pause), then a pass at the same setting: one, not two.
  EXPECT_EQ(passes_after({coast(1, true, set), reset, coast(2, true, set)}), 1);
  // A failure adjusts as the standard does: none.
  EXPECT_EQ(passes_after({coast(1, true, set), coast(2, false, moved)}), 0);
}

TEST(SessionUnit, TheLossMapsCoastsKeepTheirWindowBelowTheRelease) {
  // docs/standards.md §2.10 (lab policy): with the profile's 5 km/h crossing window the loss map's short
  // coasts still fit at most 2.5 km/h, and use a band only when its window's top lies 2 km/h below the
  // release (the release itself is never in a fit). Between holds 10 km/h apart, the top band (its edge 5
  // km/h below the release) is then still used: 120 km/h of the 130 → 100 coast (by hand: 120 + 5 + 2.5 =
  // 127.5 ≤ 128); a 5 km/h window would have dropped it (130 > 128).
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  std::vector<session::ev::LossMapCoast> coasts;
  Hook hook([&](const session::Event& e) {
    if (const auto* k = std::get_if<session::ev::LossMapCoast>(&e.payload)) coasts.push_back(*k);
  });
  session::Inputs in = inputs();
  in.profile.crossing_fit_half_width_kmh = 5.0;
  in.profile.loss_map.coast_between_holds = true;
  session::Options o = options();
  o.first_setting = core::FirstSetting::loss_map;
  session::Session s(in, o, c, {&record, &hook});
  const auto sum = s.run();
  ASSERT_FALSE(coasts.empty()) << sum.stop_reason;
  bool top_band_used = false;
  for (const auto& k : coasts)
    for (const auto& pt : k.points) {
      EXPECT_LE(pt.speed_kmh + in.profile.band_half_width_kmh + 2.5, k.from_kmh - 2.0 + 1e-9)
          << pt.speed_kmh << " in " << k.from_kmh << " -> " << k.to_kmh;
      if (k.from_kmh == 130.0 && pt.speed_kmh == 120.0) top_band_used = true;
    }
  EXPECT_TRUE(top_band_used);
}

TEST(SessionUnit, EveryFixedRunRunWhoseLossIsUsedNamesItsBasis) {
  // docs/standards.md §3.17: the fixed-run method's stabilisation run and the runs its final setting averages
  // take their loss from the profile's basis; each such run's reason says which (an auditor recomputes the
  // final setting from the records' `adjustment.measured`, A = At − mean(As − Ad), GTR 15 form from memory).
  FakeController c(loadtrim::testing::demo_truth());
  Recorder record(true);
  std::vector<session::CoastdownRecord> runs;
  Hook hook([&](const session::Event& e) {
    if (const auto* d = std::get_if<session::ev::Coastdown>(&e.payload)) runs.push_back(d->record);
  });
  session::Inputs in = inputs();
  in.profile.method = core::SettingMethod::fixed_run;
  in.profile.adjust_from = core::Profile::AdjustFrom::whole_trace;
  session::Session s(in, options(), c, {&record, &hook});
  const auto sum = s.run();
  int named = 0;
  core::RoadLoad loss_sum;
  int averaged = 0;
  for (const auto& r : runs) {
    if (!r.evaluation.usable || r.verifying) continue;
    EXPECT_NE(r.decision.reason.find("loss from the "), std::string::npos) << r.decision.reason;
    ++named;
    if (r.run >= 2) {
      loss_sum = loss_sum + (r.evaluation.adjust_basis - r.set);
      ++averaged;
    }
  }
  EXPECT_EQ(named, in.profile.fixed_runs) << sum.stop_reason;
  ASSERT_EQ(averaged, in.profile.fixed_runs - 1);
  // The final setting (the verification run's set) is the target less the mean basis loss, when nothing was
  // anticipated (this profile does not anticipate).
  ASSERT_FALSE(in.profile.warm_up.anticipate_drift);
  const core::RoadLoad expect = in.vehicle.target - loss_sum.scaled(1.0 / averaged);
  const auto verify = std::find_if(runs.begin(), runs.end(), [](const auto& r) { return r.verifying; });
  ASSERT_NE(verify, runs.end());
  EXPECT_NEAR(verify->set.f0_n, expect.f0_n, 0.06);  // the written set is rounded to the profile's decimals
  EXPECT_NEAR(verify->set.f2_n_per_kmh2, expect.f2_n_per_kmh2, 1e-5);
}

// The cell's motoring-time limit (limits.max_motoring_s: one continuous motoring period) is checked again
// while the session runs, on the controller's clock, after each setting is written and before its run-up: a
// session that has motored longer than the limit starts no further coast-down and stops, not accepted, with
// the rollers stopped (the planned time against the limit, before anything moves: policy_test and
// combination_test). The limit is the least the cell may state for this profile, its planned motoring (by
// hand: 120 s warm-up + 5 map speeds x (4 s settle + 4 s average + 30 s ramp) = 310 s), and the tolerance one
// no coast-down meets (0.001 N), so that only the limit can end the session. The motoring period starts when
// the warm-up's hold is reached: the warm-up's end minus its 120 s.
TEST(SessionUnit, TheCellsMotoringTimeLimitStartsNoFurtherCoastDown) {
  FakeController c(loadtrim::testing::demo_truth());
  session::Inputs in = inputs();
  in.profile.tolerance_n = 0.001;
  // 300 s of warm-up + 10 s (the test profile's loss-map allowance) + the run-up from standstill to 80 km/h
  // at the simulator's 1.5 m/s² and 2 s at the speed (80 / 3.6 / 1.5 + 2 = 16.8 s, by hand).
  in.cell.max_motoring_s = core::planned_motoring_s(in.profile);
  ASSERT_NEAR(in.cell.max_motoring_s, 326.8, 0.05);
  Recorder record(true);
  std::vector<double> warm_up_started, started, written;
  std::vector<double> motoring_since;
  Hook hook([&](const session::Event& e) {
    if (const auto* w = std::get_if<session::ev::WarmUpStarted>(&e.payload))
      motoring_since.push_back(w->motoring_since_s);
    if (!e.stamp || !e.stamp->t_s) return;
    const std::string t = session::type_of(e);
    if (t == "warm_up_started") warm_up_started.push_back(*e.stamp->t_s);
    if (t == "coastdown_started") started.push_back(*e.stamp->t_s);
    if (t == "set_written") written.push_back(*e.stamp->t_s);
  });
  session::Session s(in, options(), c, {&record, &hook});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::not_accepted) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("motoring-time limit of 326.8"), std::string::npos) << sum.stop_reason;
  EXPECT_NE(sum.stop_reason.find("was reached"), std::string::npos) << sum.stop_reason;
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
  EXPECT_TRUE(c.sent(Mode::controlled_stop));
  ASSERT_EQ(warm_up_started.size(), 1u);
  ASSERT_EQ(motoring_since.size(), 1u);
  // The period starts with the run-up from standstill, not at the speed: the record's start is the run-up's
  // length (14.8 s at 1.5 m/s², then the settle; by hand) before the warm-up hold's.
  EXPECT_GE(warm_up_started[0] - motoring_since[0], 14.0);
  EXPECT_LE(warm_up_started[0] - motoring_since[0], 20.0);
  const double from = motoring_since[0];
  ASSERT_FALSE(started.empty());
  // No setting is written once the period is used up (docs/safety.md): every setting written is coasted.
  ASSERT_EQ(written.size(), started.size()) << "a setting written after the limit";
  for (double t : written) EXPECT_LE(t - from, in.cell.max_motoring_s) << "a setting written after the limit";
  for (double t : started)
    EXPECT_LE(t - from, in.cell.max_motoring_s) << "a coast-down started after the limit";
}

TEST(SessionUnit, APassTheWarmingWillTakeOutsideTheLimitIsAdjustedNow) {
  // docs/standards.md §3.19 (lab policy). The truth warms slowly (the demo hatchback's spin loss with cold
  // excess 1.5, τ = 1000 s, as in TheAdjustmentAnticipatesTheWarming... above: about 5 N falls at 80 km/h
  // between the first and the second coast-down after a 600 s warm-up, by hand). Session A finds the first
  // coast-down's loss at the standard's first setting; sessions B and C start from the standard's adjustment
  // of it (GTR 15 §8.1.4) moved 8 N low, so their first coast-down (at the same time as A's) reads about −8
  // N: a pass (±10 N, GTR 15 §8.1.3.4.2) that the warming takes to about −13 N by the next one. C coasts on
  // (the truth: its second coast-down fails); B predicts that and adjusts at once, the passes starting again.
  const physics::Truth truth = warming_truth(1.5, 1000.0);
  struct Seen {
    std::vector<session::CoastdownRecord> runs;
    std::vector<session::ev::PassesReset> resets;
    session::Summary sum;
    double warm_up_t = -1.0;      // when motoring began (warm_up_started.motoring_since_s), controller clock
    std::vector<double> coast_t;  // each coastdown record's stamp
  };
  auto run = [&](std::optional<core::RoadLoad> initial, bool predict, int max_coastdowns = 10,
                 double max_step_n = 0.0, double max_motoring_s = 0.0) {
    Seen out;
    FakeController c(truth);
    Recorder record(true);
    Hook hook([&](const session::Event& e) {
      if (const auto* w = std::get_if<session::ev::WarmUpStarted>(&e.payload); w && out.warm_up_t < 0.0)
        out.warm_up_t = w->motoring_since_s;
      if (std::holds_alternative<session::ev::Coastdown>(e.payload) && e.stamp && e.stamp->t_s)
        out.coast_t.push_back(*e.stamp->t_s);
      if (const auto* d = std::get_if<session::ev::Coastdown>(&e.payload)) out.runs.push_back(d->record);
      if (const auto* r = std::get_if<session::ev::PassesReset>(&e.payload)) out.resets.push_back(*r);
    });
    session::Inputs in = long_warm_up_inputs();
    in.profile.warm_up.anticipate_drift = true;
    in.profile.warm_up.predict_next_pass = predict;
    in.profile.warm_up.next_pass_risk = 0.5;
    in.profile.warm_up.anticipate_for = core::WarmUp::AnticipateFor::passes;  // as shipped
    in.vehicle.initial_set = initial;
    in.profile.max_coastdowns = max_coastdowns;
    if (max_motoring_s > 0.0) in.cell.max_motoring_s = max_motoring_s;
    session::Options o = options();
    if (max_step_n > 0.0) o.envelope.max_step_n = max_step_n;
    session::Session s(in, o, c, {&record, &hook});
    out.sum = s.run();
    return out;
  };
  const Seen a = run(std::nullopt, false);
  ASSERT_FALSE(a.runs.empty()) << a.sum.stop_reason;
  const core::RoadLoad target = long_warm_up_inputs().vehicle.target;
  const core::RoadLoad loss = a.runs[0].evaluation.adjust_basis - a.runs[0].set;
  const core::RoadLoad low = target - loss + core::RoadLoad{-8.0, 0.0, 0.0};

  const Seen c = run(low, false);
  ASSERT_GE(c.runs.size(), 2u) << c.sum.stop_reason;
  ASSERT_TRUE(c.runs[0].evaluation.check.pass) << c.runs[0].evaluation.check.worst_abs_deviation_n;
  EXPECT_FALSE(c.runs[0].decision.next_pass.has_value()) << "not asked: no prediction";
  EXPECT_TRUE(c.runs[1].set == c.runs[0].set) << "coasted on at the same setting";
  EXPECT_FALSE(c.runs[1].evaluation.check.pass) << "the truth: the warming took the next coast-down outside";

  const Seen b = run(low, true);
  ASSERT_GE(b.runs.size(), 2u) << b.sum.stop_reason;
  const auto& first = b.runs[0];
  ASSERT_TRUE(first.evaluation.check.pass);
  ASSERT_TRUE(first.decision.next_pass.has_value());
  const core::NextPassOutlook& np = *first.decision.next_pass;
  ASSERT_TRUE(np.predicted) << np.why;
  EXPECT_LT(np.warming.change_n, -2.0) << "the warming to the next coast-down, at 80 km/h";
  EXPECT_GT(np.fail_probability, 0.5) << np.why;
  EXPECT_TRUE(np.likely_to_fail);
  EXPECT_TRUE(np.adjusted) << np.not_adjusted_why;
  // Each row: the deviation now plus the warming's share of the loss there, against the check's limit.
  for (const auto& r : np.rows) {
    EXPECT_NEAR(r.predicted_n, r.deviation_n + r.change_n, 1e-9);
    EXPECT_NEAR(r.change_n,
                np.warming.ratio * (first.evaluation.adjust_basis - first.set).force_n(r.speed_kmh), 1e-9);
    EXPECT_DOUBLE_EQ(r.limit_n, 10.0);
  }
  EXPECT_EQ(first.decision.kind, core::Decision::Kind::run_again);
  EXPECT_FALSE(first.decision.next_set == first.set) << "adjusted at once";
  EXPECT_TRUE(first.decision.anticipation.used) << first.decision.anticipation.why;
  // The adjusted setting is the anticipating adjustment's (docs/standards.md §3.16: target − loss·(1 + r),
  // the loss from the adjustment's curve), predicted likelier to pass than the setting coasted on.
  const core::RoadLoad first_loss = first.evaluation.adjust_basis - first.set;
  for (double v : {20.0, 80.0, 130.0})
    EXPECT_NEAR(first.decision.next_set.force_n(v),
                (target - first_loss.scaled(1.0 + first.decision.anticipation.ratio)).force_n(v), 1e-9);
  ASSERT_TRUE(np.adjusted_fail_probability.has_value());
  EXPECT_LT(*np.adjusted_fail_probability, np.fail_probability);
  EXPECT_TRUE(np.adjusting_helps);
  EXPECT_NE(first.decision.reason.find("within tolerance, but the next coast-down predicted to fail"),
            std::string::npos)
      << first.decision.reason;
  ASSERT_EQ(b.resets.size(), 1u);
  EXPECT_EQ(b.resets[0].run, first.run);
  EXPECT_EQ(b.resets[0].passes, 1);
  // The adjusted setting then passes twice in a row where coasting on failed.
  EXPECT_TRUE(b.runs[1].set == first.decision.next_set);
  EXPECT_TRUE(b.runs[1].evaluation.check.pass) << b.runs[1].evaluation.check.worst_abs_deviation_n;
  EXPECT_EQ(b.sum.outcome, session::Outcome::accepted) << b.sum.stop_reason;
  EXPECT_EQ(b.sum.coastdowns, 3);
  EXPECT_GT(c.sum.coastdowns, b.sum.coastdowns);
  // With three in all, exactly enough are left for the adjusted setting's two passes: adjusted.
  const Seen three = run(low, true, 3);
  ASSERT_FALSE(three.runs.empty()) << three.sum.stop_reason;
  ASSERT_TRUE(three.runs[0].decision.next_pass.has_value());
  EXPECT_TRUE(three.runs[0].decision.next_pass->adjusted)
      << three.runs[0].decision.next_pass->not_adjusted_why;
  // A first pass likely to fail that is not adjusted: the session coasts on at its setting, and the record
  // says why (the part of not_adjusted_why given).
  auto expect_coasts_on = [](const Seen& s, const std::string& why) {
    ASSERT_FALSE(s.runs.empty()) << s.sum.stop_reason;
    ASSERT_TRUE(s.runs[0].decision.next_pass.has_value());
    const core::NextPassOutlook& np = *s.runs[0].decision.next_pass;
    EXPECT_TRUE(np.likely_to_fail);
    EXPECT_FALSE(np.adjusted);
    EXPECT_NE(np.not_adjusted_why.find(why), std::string::npos) << np.not_adjusted_why;
    EXPECT_TRUE(s.runs[0].decision.next_set == s.runs[0].set);
  };
  // With two coast-downs allowed in all, an adjusted setting could not pass twice: the session coasts on at
  // the setting (its only chance), and the record says why.
  const Seen last = run(low, true, 2);
  ASSERT_NO_FATAL_FAILURE(expect_coasts_on(last, "too few coast-downs are left"));
  EXPECT_TRUE(last.resets.empty());
  EXPECT_NE(last.runs[0].decision.reason.find("coasting on: too few coast-downs are left"), std::string::npos)
      << last.runs[0].decision.reason;
  // The safe envelope (docs/standards.md §3.19: never a setting the envelope refuses): with a step limit
  // below the adjustment's step (by hand, the change at the top speed is r·loss plus the 8 N moved, well
  // above 1 N), the session coasts on at the setting and says why; no pass is given up at that coast-down.
  const double step_n = core::max_abs_on(first.decision.next_set - first.set, 0.0,
                                         long_warm_up_inputs().profile.start_speed_kmh())
                            .force_n;
  ASSERT_GT(std::abs(step_n), 1.0);
  const Seen fenced = run(low, true, 10, 1.0);
  ASSERT_NO_FATAL_FAILURE(expect_coasts_on(fenced, "the adjusted setting leaves the safe envelope"));
  ASSERT_NO_FATAL_FAILURE(expect_coasts_on(fenced, "step limit"));
  EXPECT_TRUE(fenced.resets.empty() || fenced.resets[0].run != fenced.runs[0].run);
  // The cell's motoring-time limit (limits.max_motoring_s; the rule is lab policy, docs/standards.md §3.19,
  // the limit the cell's own, common practice, no source): each setting is written only within it, and the
  // adjusted setting's second pass would start a cycle after its first. A limit half a cycle beyond the
  // first coast-down's decision leaves time for one more coast-down, not two: it coasts on and says why.
  ASSERT_GE(b.coast_t.size(), 2u);
  ASSERT_GE(b.warm_up_t, 0.0);
  const double cycle_s = b.coast_t[1] - b.coast_t[0];
  ASSERT_GT(cycle_s, 60.0);
  const double limit_s = b.coast_t[0] - b.warm_up_t + 0.5 * cycle_s;
  const Seen timed = run(low, true, 10, 0.0, limit_s);
  ASSERT_NO_FATAL_FAILURE(expect_coasts_on(timed, "too little of the cell's motoring time is left"));
  // With a limit two cycles and more beyond, the same session adjusts as before.
  const Seen roomy = run(low, true, 10, 0.0, b.coast_t[0] - b.warm_up_t + 2.5 * cycle_s);
  ASSERT_FALSE(roomy.runs.empty()) << roomy.sum.stop_reason;
  ASSERT_TRUE(roomy.runs[0].decision.next_pass.has_value());
  EXPECT_TRUE(roomy.runs[0].decision.next_pass->adjusted)
      << roomy.runs[0].decision.next_pass->not_adjusted_why;
  // A resume after an adjusted pass finds no pass in hand, as the session had none (GTR 15 §8.1.3.4.2, two
  // consecutive passes at one setting): it writes no passes_reset of its own (the replay of the verdicts
  // alone found one pass and wrote a count of 1). Stopped by the operator right after the pass; the control,
  // the same pass coasted on (no prediction), is resumed with its one pass reset (the count 1).
  auto resume_after_first_pass = [&](bool predict, std::vector<session::ev::PassesReset>& resume_resets) {
    const auto [dir, folder] = temp_session_folder("nextpass-resume");
    session::Inputs in = long_warm_up_inputs();
    in.profile.warm_up.anticipate_drift = true;
    in.profile.warm_up.predict_next_pass = predict;
    in.profile.warm_up.next_pass_risk = 0.5;
    in.profile.warm_up.anticipate_for = core::WarmUp::AnticipateFor::passes;
    in.vehicle.initial_set = low;
    std::atomic<bool> stop{false};
    bool passed = false, adjusted = false;
    Hook stopper([&](const session::Event& e) {
      if (const auto* d = std::get_if<session::ev::Coastdown>(&e.payload);
          d && d->record.evaluation.check.pass && !stop) {
        passed = true;
        adjusted = d->record.decision.next_pass && d->record.decision.next_pass->adjusted;
        stop = true;
      }
    });
    {
      FakeController c1(truth);
      session::RecordWriter writer(folder);
      session::Session s1(in, options(), c1, {&writer, &stopper}, &stop);
      const auto first_part = s1.run();
      ASSERT_TRUE(passed) << first_part.stop_reason;
      ASSERT_EQ(adjusted, predict) << "the rule adjusts this pass, coasting on keeps it";
      ASSERT_EQ(first_part.outcome, session::Outcome::interrupted) << first_part.stop_reason;
    }
    const session::ResumePoint rp = session::resume_point(read_log(folder));
    ASSERT_EQ(rp.malformed, 0) << rp.malformed_note;
    ASSERT_EQ(rp.completed.size(), 1u);
    Hook seen([&](const session::Event& e) {
      if (const auto* r = std::get_if<session::ev::PassesReset>(&e.payload);
          r && r->why.find("the session stopped and was resumed") != std::string::npos)
        resume_resets.push_back(*r);
    });
    FakeController c2(truth);
    session::Session s2(in, options(), c2, {&seen});
    const auto rest = s2.run(&rp);
    EXPECT_NE(rest.outcome, session::Outcome::refused) << rest.stop_reason;
    std::filesystem::remove_all(dir);
  };
  std::vector<session::ev::PassesReset> after_adjusted, after_kept;
  resume_after_first_pass(true, after_adjusted);
  EXPECT_TRUE(after_adjusted.empty())
      << "a resume found " << after_adjusted.front().passes << " pass(es) in hand after an adjusted pass";
  resume_after_first_pass(false, after_kept);
  ASSERT_EQ(after_kept.size(), 1u) << "the control: the pass coasted on is in hand when the session stops";
  EXPECT_EQ(after_kept[0].passes, 1);
}

// docs/safety.md, "Faults the tool clears": a fault latched before the tool came is cleared only when it is
// the watchdog stop a killed tool left (WATCHDOG, flags 05: docs/protocol.md sections 7-9). An emergency stop
// stays latched: the session ends as a controller fault (exit 3) saying the operator is needed, and nothing
// is commanded to move. Before, any latched fault was cleared and the rollers motored.
TEST(SessionUnit, AnEmergencyStopLatchedBeforeTheToolCameIsNotClearedAndNothingMoves) {
  struct Case {
    const char* fault;
    std::uint32_t flags;
    bool cleared;
  };
  using controller::kFlagEstop;
  using controller::kFlagFault;
  using controller::kFlagWatchdog;
  for (const Case k : {Case{"ESTOP", kFlagFault | kFlagEstop, false},
                       Case{"WATCHDOG", kFlagFault | kFlagWatchdog | kFlagEstop, false},
                       Case{"WATCHDOG", kFlagFault | kFlagWatchdog, true}}) {
    SCOPED_TRACE(std::string(k.fault) + " flags " + std::to_string(k.flags));
    FakeController c(loadtrim::testing::demo_truth());
    bool clear_asked = false;
    c.script.status_lie = [&](controller::StatusReport& st) {
      if (clear_asked) return;  // a clear that was sent is taken
      st.fault = k.fault;
      st.flags |= k.flags;
    };
    std::vector<session::ev::FaultCleared> clears;
    Hook hook([&](const session::Event& e) {
      if (const auto* f = std::get_if<session::ev::FaultCleared>(&e.payload)) {
        clears.push_back(*f);
        clear_asked = f->ok;
      }
    });
    session::Session s(inputs(), options(), c, {&hook});
    const auto sum = s.run();
    ASSERT_EQ(clears.size(), 1u) << sum.stop_reason;
    EXPECT_EQ(clears[0].ok, k.cleared) << clears[0].message;
    if (k.cleared) {
      EXPECT_TRUE(c.sent(Mode::speed_hold)) << sum.stop_reason;
      EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;
      continue;
    }
    EXPECT_EQ(sum.outcome, session::Outcome::controller_fault);
    EXPECT_NE(sum.stop_reason.find("needs the operator at the cell"), std::string::npos) << sum.stop_reason;
    EXPECT_FALSE(c.sent(Mode::speed_hold));
    EXPECT_FALSE(c.sent(Mode::road_load));
    // The cell's controller was reached: the safe stop commands a stop and the controller confirms it
    // (before, the record said the link never came up and took the rollers as stopped).
    EXPECT_TRUE(c.sent(Mode::controlled_stop));
    EXPECT_TRUE(sum.rollers_stopped);
    EXPECT_NE(sum.stop_note.find("confirmed by the controller"), std::string::npos) << sum.stop_note;
  }
}

// The same after a lost link (docs/safety.md): the controller found latched on reconnecting is cleared only
// for the watchdog stop the lost link caused, and the controller that answers must still be the cell's
// (roller diameter, base inertia and a maximum speed not below the cell's limit, as on connect). An emergency
// stop, or another controller, ends the session (exit 3) with no further reconnection and nothing more
// commanded to move. Before, the emergency stop was cleared and the session went on to acceptance, and a
// controller stating other rollers or a lower maximum speed was driven.
TEST(SessionUnit, AfterALostLinkAnEmergencyStopOrAnotherControllerEndsTheSession) {
  for (const std::string lie : {"estop", "identity", "max_speed"}) {
    SCOPED_TRACE(lie);
    FakeController c(loadtrim::testing::demo_truth());
    bool lost = false;
    std::size_t commands_at_loss = 0;
    int reconnects = 0;
    Hook hook([&](const session::Event& e) {
      if (std::holds_alternative<session::ev::CoastdownStarted>(e.payload) && !lost) {
        lost = true;
        c.script.silent = true;
      }
      if (std::holds_alternative<session::ev::LinkLost>(e.payload)) {
        c.script.silent = false;
        commands_at_loss = c.commands.size();
        if (lie == "estop")
          c.script.status_lie = [](controller::StatusReport& st) {
            st.fault = "ESTOP";
            st.flags |= controller::kFlagFault | controller::kFlagEstop;
          };
        else if (lie == "identity")
          c.script.identify_lie = [](controller::ControllerInfo& i) { i.roller_diameter_m = 0.5; };
        else  // a maximum speed below the cell's limits.max_speed_kmh (160 km/h), as on connect
          c.script.identify_lie = [](controller::ControllerInfo& i) { i.max_speed_kmh = 150.0; };
      }
      if (std::holds_alternative<session::ev::Reconnect>(e.payload)) ++reconnects;
    });
    session::Session s(inputs(), options(), c, {&hook});
    const auto sum = s.run();
    ASSERT_TRUE(lost);
    EXPECT_EQ(sum.outcome, session::Outcome::controller_fault) << sum.stop_reason;
    EXPECT_NE(sum.stop_reason.find(lie == "estop" ? "needs the operator at the cell"
                                                  : "does not match the cell file"),
              std::string::npos)
        << sum.stop_reason;
    EXPECT_EQ(reconnects, 1);
    for (std::size_t i = commands_at_loss; i < c.commands.size(); ++i) {
      EXPECT_NE(c.commands[i].first, Mode::speed_hold) << "command " << i;
      EXPECT_NE(c.commands[i].first, Mode::road_load) << "command " << i;
      // Another cell's controller (identity or stated maximum not the cell's) is never commanded, not even
      // the stop: the rollers are then not confirmed stopped (exit 3) and its watchdog is the safeguard. The
      // cell's own, with an emergency stop latched, is stopped and confirmed.
      if (lie != "estop") {
        EXPECT_NE(c.commands[i].first, Mode::controlled_stop) << "command " << i;
      }
    }
    EXPECT_EQ(sum.rollers_stopped, lie == "estop") << sum.stop_note;
  }
}

// docs/safety.md (the stop): the stream's standstill must be confirmed by the controller's status. A status
// that fails its checks (here a time that is not a number, once the stop is commanded) is no confirmation:
// the run ends "rollers not confirmed stopped" (exit 3). Before, a status that could not be read left the
// stop confirmed by the stream alone.
TEST(SessionUnit, AStatusThatFailsItsChecksAtTheStopIsNoConfirmation) {
  FakeController c(loadtrim::testing::demo_truth());
  c.script.status_lie = [&](controller::StatusReport& st) {
    if (c.sent(Mode::controlled_stop)) st.time_s = std::nan("");
  };
  session::Session s(inputs(), options(), c, {});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::accepted) << sum.stop_reason;  // the stop at the end, no earlier
  EXPECT_TRUE(c.sent(Mode::controlled_stop));
  EXPECT_FALSE(sum.rollers_stopped) << sum.stop_note;
  EXPECT_NE(sum.stop_note.find("not confirmed"), std::string::npos) << sum.stop_note;
}

// docs/safety.md (every wait has a deadline on the tool's own clock): the analysis of a coast-down runs on a
// worker while the rollers turn at the run's end speed and the keep-alive feeds the watchdog. One that does
// not finish within Options::analysis_wall_limit_s ends the session (exit 3) with the rollers stopped. Here
// the limit is 0.05 s and the analysis is held back 0.5 s, so the first one is given up on. Before, the wait
// had no deadline.
TEST(SessionUnit, AnAnalysisThatDoesNotFinishInTimeStopsTheSession) {
  FakeController c(loadtrim::testing::demo_truth());
  session::Options o = options();
  o.analysis_wall_limit_s = 0.05;
  o.before_analysis = [] { std::this_thread::sleep_for(std::chrono::milliseconds(500)); };
  session::Session s(inputs(), o, c, {});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::controller_fault);
  EXPECT_NE(sum.stop_reason.find("did not finish within"), std::string::npos) << sum.stop_reason;
  EXPECT_EQ(sum.coastdowns, 0);
  EXPECT_TRUE(c.sent(Mode::road_load));  // it got as far as a coast-down
  EXPECT_TRUE(sum.rollers_stopped) << sum.stop_note;
}

// docs/safety.md: a controller that does not match the cell file on connect is refused and never commanded,
// not even the stop (it may be another cell's dyno, in use); the record says nothing was commanded because
// the controller was refused, not that the link never came up.
TEST(SessionUnit, AControllerRefusedByItsIdentityOnConnectIsNeverCommanded) {
  FakeController c(loadtrim::testing::demo_truth());
  c.script.identify_lie = [](controller::ControllerInfo& i) { i.roller_diameter_m = 0.5; };
  session::Session s(inputs(), options(), c, {});
  const auto sum = s.run();
  EXPECT_EQ(sum.outcome, session::Outcome::refused) << sum.stop_reason;
  EXPECT_TRUE(c.commands.empty()) << c.commands.size() << " command(s) sent";
  EXPECT_NE(sum.stop_note.find("the controller was refused before anything moved"), std::string::npos)
      << sum.stop_note;
}
