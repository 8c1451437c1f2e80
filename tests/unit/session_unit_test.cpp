// The session state machine without a simulator process: the scripted fake controller (the simulator's typed
// core in-process, tests/support/fake_controller.hpp) with observers that fail, a controller that never
// stops, and one that acknowledges the setting without applying it. What is checked is the project's safety
// contract (docs/safety.md): the safe stop on every path, observers unable to throw into the session, the
// envelope and the divergence rule. Tolerance ±10 N at every reference speed for acceptance: GTR 15 Annex 4
// §8.1.3.4.2 [text].
#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>
#include <stdexcept>

#include "config/cell_loader.hpp"
#include "config/loaders.hpp"
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
