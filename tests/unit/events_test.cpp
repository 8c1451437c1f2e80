// The typed events (src/session/events.hpp) against the record format: every event's JSON has exactly the
// members docs/session.md documents for its record kind (the table is read from the document itself, so the
// document and the code cannot drift apart), a handful of records are byte-for-byte what earlier versions
// wrote, the records a resume needs read back to what was emitted, and the delivery rule (only the critical
// observer can fail a session; any other failing observer is dropped once) holds. No external numeric
// source: the values are arbitrary and only their round trip is checked.
#include "session/events.hpp"

#include <gtest/gtest.h>
#include <stdlib.h>

#include <algorithm>
#include <cctype>
#include <filesystem>
#include <fstream>
#include <functional>
#include <iterator>
#include <map>
#include <set>
#include <sstream>
#include <stdexcept>

#include "checks/check_runner.hpp"
#include "config/cell_loader.hpp"
#include "config/loaders.hpp"
#include "record/event_log.hpp"
#include "record/road_load_json.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "record/vehicle_history.hpp"
#include "registry.hpp"
#include "session/console.hpp"
#include "session/event_text.hpp"
#include "session/resume.hpp"
#include "support/fake_controller.hpp"

using namespace loadtrim;
using namespace loadtrim::session;

namespace {
loadtrim::core::WarmUpCurve settled_curve() {
  loadtrim::core::WarmUpCurve c;
  c.ok = true;
  c.settled_n = 80.0;
  c.amplitude_n = 20.0;
  c.tau_s = 600.0;
  c.points = 20;
  return c;
}
loadtrim::core::WarmUpCurve unestimated_curve() {
  loadtrim::core::WarmUpCurve c;
  c.why = "too few hold windows (2, at least 4)";
  c.points = 2;
  return c;
}
}  // namespace

namespace {

const std::string kSrc = LOADTRIM_SOURCE_DIR;

struct Documented {
  std::set<std::string> types;     // the record types the row names
  std::set<std::string> required;  // members always present
  std::set<std::string> optional;  // members marked `?`
};

// The events table of docs/session.md, by event name.
std::map<std::string, Documented> documented() {
  std::ifstream in(kSrc + "/docs/session.md");
  std::map<std::string, Documented> out;
  std::string line;
  // Without std::regex (GCC 12's libstdc++ regex trips -Wmaybe-uninitialized under the sanitizer preset).
  // A row: "| `types` | Name | members |"; a member: `name` or `name`? (optional).
  auto names_in = [](const std::string& text, std::set<std::string>* required,
                     std::set<std::string>* optional) {
    for (std::size_t at = text.find('`'); at != std::string::npos; at = text.find('`', at)) {
      const std::size_t end = text.find('`', at + 1);
      if (end == std::string::npos) break;
      const std::string n = text.substr(at + 1, end - at - 1);
      const bool ok =
          !n.empty() && n.find_first_not_of("abcdefghijklmnopqrstuvwxyz0123456789_") == std::string::npos;
      const bool opt = end + 1 < text.size() && text[end + 1] == '?';
      if (ok) (opt && optional ? optional : required)->insert(n);
      at = end + 1;
    }
  };
  while (std::getline(in, line)) {
    if (line.size() < 4 || line.compare(0, 2, "| ") != 0 || line.compare(line.size() - 2, 2, " |") != 0)
      continue;
    const std::size_t a = line.find(" | ", 2);
    if (a == std::string::npos) continue;
    const std::size_t b = line.find(" | ", a + 3);
    if (b == std::string::npos) continue;
    const std::string types = line.substr(2, a - 2), ev = line.substr(a + 3, b - a - 3);
    const std::string members = line.substr(b + 3, line.size() - 2 - (b + 3));
    if (ev.empty() || ev == "event" ||
        ev.find_first_not_of("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz") != std::string::npos)
      continue;
    Documented d;
    names_in(types, &d.types, nullptr);
    // Members nested in parentheses (first_setting's inputs) belong to the member before them.
    std::string top;
    int depth = 0;
    for (char c : members) {
      if (c == '(') ++depth;
      if (depth == 0) top += c;
      if (c == ')') --depth;
    }
    names_in(top, &d.required, &d.optional);
    out[ev] = d;
  }
  return out;
}

std::string event_name(const Payload& p) {
  // The variant's alternatives in declaration order, as the table names them.
  static const char* const names[] = {"SessionStarted",
                                      "ResumeStarted",
                                      "StateChanged",
                                      "ControllerIdentified",
                                      "ControllerStateOnConnect",
                                      "Refused",
                                      "Limits",
                                      "InertiaSet",
                                      "WarmUpStarted",
                                      "WarmUpHeld",
                                      "LossMapSkipped",
                                      "LossMapPointSkipped",
                                      "LossMapPoint",
                                      "LossMapCoastStarted",
                                      "LossMapCoast",
                                      "WarmUpEnded",
                                      "FirstSetting",
                                      "EnvelopeRefused",
                                      "SetWritten",
                                      "CoastdownStarted",
                                      "ReleaseTiming",
                                      "RunUpPlan",
                                      "DriverPromptShown",
                                      "RunUpChecked",
                                      "PassesReset",
                                      "WarmUpDrift",
                                      "ConsecutiveTiming",
                                      "Coastdown",
                                      "CoastdownDiscarded",
                                      "Diverging",
                                      "LinkLost",
                                      "Reconnect",
                                      "NotSettled",
                                      "FaultCleared",
                                      "LinkRestored",
                                      "Fault",
                                      "Interrupted",
                                      "Paused",
                                      "Continued",
                                      "Resumed",
                                      "SafeStopReconnect",
                                      "SafeStop",
                                      "ObserverDropped",
                                      "Finished",
                                      "CheckStarted",
                                      "CheckIdentified",
                                      "FreeCoastStarted",
                                      "CheckCoastStarted",
                                      "ForceApplied",
                                      "RateRunStarted",
                                      "ParasiticAnalysed",
                                      "UnloadedCoastdownAnalysed",
                                      "InertiaAnalysed",
                                      "FrictionAnalysed",
                                      "AccelDecelAnalysed",
                                      "ResponseAnalysed",
                                      "CheckFinished",
                                      "ControllerWarning"};
  static_assert(std::size(names) == std::variant_size_v<Payload>, "a name per event");
  return names[p.index()];
}

const core::RoadLoad kSet{120.5, 0.25, 0.031};

// A warming anticipated in a map's setting (invented figures).
core::Anticipation anticipation() {
  core::Anticipation a;
  a.used = true;
  a.change_n = -4.2;
  a.ratio = -0.035;
  a.from_s = 1150.0;
  a.to_s = 1290.0;
  a.epoch_s = 20.0;
  a.loss = {110.0, 0.2, 0.004};
  a.curve.ok = true;
  a.curve.settled_n = 120.0;
  a.curve.amplitude_n = 40.0;
  a.curve.tau_s = 2000.0;
  a.curve.rms_residual_n = 0.3;
  a.curve.points = 16;
  a.why = "anticipates a loss change of -4.2 N at 80 km/h by the next coast-down (-3.5 % of the loss)";
  return a;
}

// A history from another cell with one pair (invented sessions).
core::HistoryBasis history_basis() {
  core::HistoryBasis b;
  b.source = "store";
  b.where = "/lab/store.sqlite";
  b.session_id = "20261120T080000Z-V";
  b.session_folder = "/lab/sessions/20261120T080000Z-V";
  b.source_cell = "A";
  b.same_cell = false;
  core::CellPair p;
  p.vehicle = "P1";
  p.here.id = "20261110T080000Z-P1";
  p.here.folder = "/lab/sessions/20261110T080000Z-P1";
  p.there.id = "20261109T080000Z-P1";
  p.there.folder = "/lab/sessions/20261109T080000Z-P1";
  b.pairs = {p};
  b.pairs_available = 1;
  b.correction = {-7.0, -0.15, 0.0015};
  b.note = "from cell A, corrected by the mean difference of 1 vehicle(s) run on both cells";
  return b;
}

// One base-inertia set (both directions) and its summary.
core::BaseInertiaCheck inertia_check() {
  core::ConstantForceRun up, down;
  up.ok = down.ok = true;
  up.mean_force_n = 558.8;
  up.accel_mps2 = 0.44704;
  down.mean_force_n = -558.8;
  down.accel_mps2 = -0.44704;
  core::InertiaSet s = core::analyse_inertia_set(up, down, 1250.0);
  s.rate_pair = s.set = 1;
  return core::summarise_base_inertia({s}, 1250.0);
}

CoastdownRecord usable_run() {
  CoastdownRecord r;
  r.run = 3;
  r.set = kSet;
  r.release_time_s = 812.5;
  r.duration_s = 95.25;
  r.run_up_s = 40.0;
  r.tolerance_n = 10.0;
  auto& e = r.evaluation;
  e.usable = true;
  core::BandResult ok;
  ok.reference_speed_kmh = 100.0;
  ok.t_upper_s = 1.0;
  ok.t_lower_s = 4.5;
  ok.delta_t_s = 3.5;
  ok.force_n = 450.0;
  core::BandResult bad;
  bad.reference_speed_kmh = 20.0;
  bad.status = core::BandStatus::not_reached;
  bad.reason = "not reached";
  e.bands = {ok, bad};
  r.predicted_delta_t_s = {3.4, std::nullopt};
  e.fit.ok = true;
  e.fit.coefficients = {130.0, 0.2, 0.03};
  e.whole_trace.ok = true;
  e.whole_trace.coefficients = {131.0, 0.21, 0.0301};
  e.check.pass = true;
  e.check.worst_abs_deviation_n = 4.5;
  e.check.rows = {{100.0, 450.0, 454.5, 4.5, true}};
  r.decision.kind = core::Decision::Kind::accepted;
  r.decision.reason = "within tolerance twice";
  r.decision.next_set = {118.0, 0.24, 0.0305};
  return r;
}

Summary summary() {
  Summary s;
  s.outcome = Outcome::accepted;
  s.stop_reason = "within tolerance twice";
  s.iterations = 2;
  s.coastdowns = 3;
  s.usable_coastdowns = 3;
  s.cell_time_s = 2400.0;
  s.final_set = core::RoadLoad{118.0, 0.24, 0.0305};
  s.measured = core::RoadLoad{130.0, 0.2, 0.03};
  s.deviations = {{100.0, 450.0, 454.5, 4.5, true}};
  s.first_setting = "loss-map";
  s.rollers_stopped = true;
  s.stop_note = "controlled stop: standstill confirmed by the controller";
  return s;
}

// One of every event; where a record has forms, each form.
std::vector<Payload> every_event() {
  ev::StartCommon common;
  common.target = {150.0, 0.3, 0.035};
  CoastdownRecord unusable;
  unusable.run = 1;
  unusable.set = kSet;
  unusable.evaluation.unusable_reason = "no band reached";
  core::ParasiticDetermination pd;
  pd.ok = true;
  pd.fit.coefficients = {22.0, 0.12, 0.0009};
  pd.points = {{30.0, 26.0, 26.1, -0.1, 5.0, true}};
  core::UnloadedCoastdown uc;
  uc.intervals = {{80.0, 70.0, 10.0, 10.1, 100.0, 99.0, 1.0, 9.8, true, ""}};
  return {
      ev::SessionStarted{common, "iterative", nlohmann::json::array(), 4100, "", false,
                         nlohmann::json::array(), false, "tcp:127.0.0.1:4100", ""},
      ev::ResumeStarted{common, 40, 2, "not finished"},
      ev::StateChanged{State::warm_up, State::write_set, "coast-down 1"},
      ev::ControllerIdentified{{"sim", 1, "hold-force,free,force", 0.5, 1100.0, 200.0, 6000.0, 1.0}},
      ev::ControllerStateOnConnect{"WATCHDOG", 0.0, controller::Mode::idle},
      ev::Refused{"start speed too high"},
      ev::Limits{140.0, 135.0, 15.0, 200.0, 180.0, 200.0, 3600.0},
      ev::InertiaSet{1500.0, 45.0, 1545.0, 1522.5, core::AxleLayout::single_axle},
      ev::WarmUpStarted{80.0, 1200.0, 60.0, 12.5},
      ev::WarmUpHeld{80.0, 1201.0, "stable", 2.0, 160.0, {{30.0, 170.0}, {90.0, 165.5}}, true},
      ev::WarmUpHeld{80.0, 1201.0, "not stable within the extra time", 2.0, std::nullopt, {}, false},
      ev::LossMapSkipped{"no force in speed hold"},
      ev::LossMapPointSkipped{150.0, "above the speed limit"},
      ev::LossMapPoint{{60.0, 80.0, 1.5, 500}},
      ev::LossMapCoastStarted{130.0, 100.0, kSet},
      ev::LossMapCoast{130.0, 100.0, kSet, {{120.0, 560.5, 420.0, 140.5}, {110.0, 500.0, 380.0, 120.0}}, ""},
      ev::LossMapCoast{40.0, 20.0, kSet, {}, "not used: too little retarding force"},
      ev::WarmUpEnded{},
      ev::FirstSetting{"loss-map", "loss-map", "", kSet, std::nullopt, core::RoadLoad{30.0, 0.1, 0.004}, 0.8,
                       core::RoadLoad{30.0, 0.1, 0.004}, std::nullopt, nlohmann::json(),
                       core::CoastCorrection{true, "", 7, 12.5, 0.0004, 1.1}, anticipation(), std::nullopt},
      ev::FirstSetting{"history", "standard", "no history", kSet, std::nullopt, std::nullopt, std::nullopt,
                       std::nullopt, std::nullopt, nlohmann::json(), std::nullopt, std::nullopt,
                       std::nullopt},
      ev::FirstSetting{"history", "history", "", kSet, std::string("2026-11-20T08:00:00.000Z"), std::nullopt,
                       std::nullopt, core::RoadLoad{73.0, 0.05, 0.0025}, history_basis(),
                       nlohmann::json{{"looked", "store"},
                                      {"store", "/lab/store.sqlite"},
                                      {"not_used", nlohmann::json::array()},
                                      {"note", ""}},
                       std::nullopt, std::nullopt,
                       core::DayScale{true, "", 1.02, 1170.0, 150.0, 153.0, 3, 3}},
      ev::EnvelopeRefused{2, kSet, "force above the cell's"},
      ev::SetWritten{1, kSet, 1},
      ev::CoastdownStarted{1, kSet, 135.0},
      ev::ReleaseTiming{"first coast-down released within 120 s", 30.0, true, ""},
      ev::ReleaseTiming{"first coast-down released within 120 s", 130.0, false, "repeat"},
      ev::RunUpPlan{core::RunUp::vehicle, "neutral signal", "either method (GTR 15 Annex 4 §8.1.3.4)"},
      ev::RunUpPlan{core::RunUp::dyno, "", "the fixed-run method only (GTR 15 Annex 4 §8.1.3.4)"},
      ev::DriverPromptShown{1, core::DriverPrompt::accelerate, 140.0, "accelerate to 140 km/h"},
      ev::RunUpChecked{1, "coasted", 140.0, 141.2, 140.9, "neutral signal", true, 25.0, 33.0, 6.0, true, 31.0,
                       0.9, ""},
      ev::RunUpChecked{2, "not_reached", 140.0, 96.0, 0.0, "speed trace", true, 3.1, 4.0, 6.0, false, 180.0,
                       0.0, "the vehicle did not reach the start speed"},
      ev::PassesReset{3, 1, "coast-down 3 discarded"},
      ev::WarmUpDrift{2, 1500.0, settled_curve(), "warn", 3.0, "settled", std::nullopt},
      ev::WarmUpDrift{2, 1500.0, unestimated_curve(), "warn", 3.0,
                      "not estimated: too few hold windows (2, at least 4)", std::nullopt},
      ev::WarmUpDrift{3, 1500.0, settled_curve(), "require", 3.0,
                      "settled, but outside tolerance once fully warm: adjusted for the warm vehicle",
                      core::FullyWarmOutlook{true,
                                             "predicted outside tolerance once fully warm",
                                             -2.0,
                                             1460.0,
                                             80.0,
                                             {core::FullyWarmRow{130.0, -6.0, 10.0, -11.3, -8.0, false}},
                                             false,
                                             false,
                                             "the vehicle is still too far from warm to aim a setting at",
                                             kSet,
                                             "the vehicle is still too far from warm to aim a setting at"}},
      ev::ConsecutiveTiming{"consecutive coast-downs start immediately", 12.0},
      ev::Coastdown{usable_run()},
      ev::Coastdown{unusable},
      ev::CoastdownDiscarded{2, "link lost during run-up", std::nullopt, std::nullopt},
      ev::CoastdownDiscarded{2, "too slow", kSet, "falling back to the standard's default setting"},
      ev::Diverging{4, "the deviation does not shrink"},
      ev::LinkLost{"timeout", 1},
      ev::Reconnect{1, 3, true, ""},
      ev::Reconnect{1, 3, std::nullopt, "refused"},
      ev::NotSettled{"after the lost link", "still turning"},
      ev::FaultCleared{"WATCHDOG", "on connect", true, ""},
      ev::LinkRestored{1},
      ev::Fault{"coast-down", "over-speed", controller::Result::Status::fatal, 7},
      ev::Interrupted{"warm-up"},
      ev::Paused{3, "coast-down", "A. Operator", "tyre pressure check", "command", true, 3600.0},
      ev::Continued{3, "A. Operator", "", "console", 312.5, 1200.0},
      ev::Resumed{2, "no run was in progress", ev::Resumed::Continued{0, kSet, std::nullopt}},
      ev::Resumed{2, "finalised", ev::Resumed::Finalised{true, "standstill"}},
      ev::SafeStopReconnect{true, ""},
      ev::SafeStop{"nothing was commanded to move", true, std::nullopt},
      ev::SafeStop{"controlled stop", true,
                   ev::SafeStop::Seen{0.0, controller::Mode::idle, 0.5, "confirmed"}},
      ev::ObserverDropped{"the console failed"},
      ev::Finished{summary()},
      ev::CheckStarted{"parasitic", "cell-1", nlohmann::json::array(), "unattended", "",
                       nlohmann::json::object(), "none", core::RoadLoad{22.0, 0.12, 0.0009},
                       "2024-01-01T00:00:00Z"},
      ev::CheckIdentified{"sim", 0.5, 1100.0, 0},
      ev::FreeCoastStarted{130.0},
      ev::CheckCoastStarted{1, 900.0, kSet, 135.0},
      ev::ForceApplied{490.0, 1100.0},
      ev::RateRunStarted{800.0, 2.0, 1, true, core::RoadLoad{-715.264, 0.0, 0.0}, 8.04672},
      ev::ParasiticAnalysed{
          1100.0, pd, core::RoadLoad{22.0, 0.12, 0.0009}, {{"path", "traces/free-coast.csv"}}},
      ev::UnloadedCoastdownAnalysed{1, 900.0, kSet, uc, {{"path", "traces/coastdown-1.csv"}}},
      ev::InertiaAnalysed{inertia_check(),
                          nlohmann::json::array({{{"path", "traces/inertia-pair1-set1-accel.csv"}},
                                                 {{"path", "traces/inertia-pair1-set1-decel.csv"}}})},
      ev::FrictionAnalysed{core::FrictionCheck{}, 50.0, {{"path", "traces/friction-coast.csv"}}},
      ev::AccelDecelAnalysed{
          core::summarise_accel_decel({core::RateRun{}}),
          nlohmann::json::array({{{"path", "traces/accel-decel-800kg-1mphps-run1-accel.csv"}}})},
      ev::ResponseAnalysed{core::summarise_response({core::ResponseStep{}}), 0.1, 0.1,
                           nlohmann::json::array({{{"path", "traces/response-step-1.csv"}}})},
      ev::CheckFinished{"parasitic", "passed", true, "ok", {{"path", "result.json"}}},
      ev::ControllerWarning{"status_bits",
                            "the controller's status register sets bits the map does not define (0x40)", 3},
  };
}

std::set<std::string> keys(const nlohmann::json& j) {
  std::set<std::string> k;
  for (auto it = j.begin(); it != j.end(); ++it) k.insert(it.key());
  return k;
}

}  // namespace

TEST(Events, EveryEventHasExactlyTheDocumentedMembers) {
  const auto doc = documented();
  ASSERT_GE(doc.size(), std::variant_size_v<Payload>) << "docs/session.md's events table was not found whole";
  std::set<std::size_t> seen;
  for (const Payload& p : every_event()) {
    seen.insert(p.index());
    const std::string name = event_name(p);
    const auto it = doc.find(name);
    ASSERT_NE(it, doc.end()) << name << " is not in docs/session.md's events table";
    EXPECT_TRUE(it->second.types.count(type_of(p)))
        << name << " is written as \"" << type_of(p) << "\", which its row does not name";
    const nlohmann::json j = to_json(p);
    ASSERT_TRUE(j.is_object()) << name;
    for (const auto& k : keys(j))
      EXPECT_TRUE(it->second.required.count(k) || it->second.optional.count(k))
          << name << " writes \"" << k << "\", which docs/session.md does not document";
    for (const auto& k : it->second.required)
      EXPECT_TRUE(j.contains(k)) << name << " lacks the documented member \"" << k << "\"";
    // The stamp's members (record_json) are written over the payload's: a payload member of the same name
    // would be lost from the log (common practice, no source: never let one field overwrite another).
    // The one exception: the summary's cell_time_s (Finished), the very value the stamp writes (Session::run
    // states it as emit() does).
    // The log's own members (record/event_log.cpp: seq, utc, type, prev, sig, record_signer) drop a
    // payload's.
    for (const char* stamp :
         {"state", "t_s", "cell_time_s", "type", "seq", "utc", "prev", "sig", "record_signer"}) {
      if (name == "Finished" && std::string(stamp) == "cell_time_s") continue;
      EXPECT_FALSE(j.contains(stamp))
          << name << " writes \"" << stamp << "\", which the record's stamp or header overwrites";
    }
  }
  EXPECT_EQ(seen.size(), std::variant_size_v<Payload>) << "every event is exercised";
}

TEST(Events, TheRoadLoadSpellingRoundTrips) {
  const nlohmann::json j = to_json(kSet);
  EXPECT_EQ(j.dump(), R"({"f0_n":120.5,"f1_n_per_kmh":0.25,"f2_n_per_kmh2":0.031})");
  const core::RoadLoad back = road_load_from_json(j);
  EXPECT_EQ(back.f0_n, kSet.f0_n);
  EXPECT_EQ(back.f1_n_per_kmh, kSet.f1_n_per_kmh);
  EXPECT_EQ(back.f2_n_per_kmh2, kSet.f2_n_per_kmh2);
  EXPECT_THROW(road_load_from_json({{"f0_n", 1.0}}), nlohmann::json::exception);
}

TEST(Events, OneRoadLoadSpellingServesRecordsHistoriesAndReports) {
  // The record layer's mapping is the one the events use (docs/records.md: one spelling for every file).
  EXPECT_EQ(loadtrim::record::road_load_json(kSet), to_json(kSet));
  EXPECT_TRUE(loadtrim::record::is_road_load_json(to_json(kSet)));
  EXPECT_FALSE(loadtrim::record::is_road_load_json({{"f0_n", 1.0}, {"f1_n_per_kmh", 2.0}}));
  EXPECT_FALSE(
      loadtrim::record::is_road_load_json({{"f0_n", 1.0}, {"f1_n_per_kmh", "2"}, {"f2_n_per_kmh2", 3.0}}));
  EXPECT_FALSE(loadtrim::record::is_road_load_json(nlohmann::json::array({1.0, 2.0, 3.0})));
  EXPECT_EQ(loadtrim::record::measured_member({{"simulated", to_json(kSet)}}), "simulated");
  EXPECT_EQ(loadtrim::record::measured_member({{"measured", to_json(kSet)}, {"simulated", 0}}), "measured");
  EXPECT_EQ(loadtrim::record::measured_member(nlohmann::json::object()), "measured");
}

// Lines as the version before typed events wrote them (the data part: the log adds seq, utc, type, prev).
TEST(Events, RecordsAreByteForByteWhatEarlierVersionsWrote) {
  const Event state{ev::StateChanged{State::warm_up, State::write_set, "coast-down 1"},
                    Stamp{State::write_set, 100.5, 90.5}, nullptr};
  EXPECT_EQ(
      record_json(state).dump(),
      R"({"cell_time_s":90.5,"from":"warm_up","state":"write_set","t_s":100.5,"to":"write_set","why":"coast-down 1"})");
  EXPECT_EQ(
      to_json(Payload{ev::SetWritten{1, kSet, 1}}).dump(),
      R"({"iteration":1,"read_back":"matches","run":1,"set":{"f0_n":120.5,"f1_n_per_kmh":0.25,"f2_n_per_kmh2":0.031}})");
  EXPECT_EQ(
      to_json(Payload{ev::LinkLost{"timeout", 2}}).dump(),
      R"({"incident":2,"note":"the controller's watchdog takes the rollers to a stop","why":"timeout"})");
  EXPECT_EQ(
      to_json(Payload{ev::WarmUpHeld{80.0, 1201.0, "not checked", 0.0, std::nullopt, {{30.0, 170.25}}, true}})
          .dump(),
      R"({"held_s":1201.0,"initial":true,"last_window_force_n":null,"speed_kmh":80.0,"stability":"not checked","stability_threshold_n":0.0,"windows":[{"force_n":170.25,"t_s":30.0}]})");
  // A stamp before the controller's clock is known: the state only.
  const Event early{ev::Refused{"no"}, Stamp{State::connect, std::nullopt, std::nullopt}, nullptr};
  EXPECT_EQ(record_json(early).dump(), R"({"state":"connect","why":"no"})");
  // Predicted band times go beside the measured ones of a usable run, only where they can be predicted.
  const nlohmann::json c = to_json(Payload{ev::Coastdown{usable_run()}});
  EXPECT_EQ(c["bands"][0]["predicted_delta_t_s"], 3.4);
  EXPECT_FALSE(c["bands"][1].contains("predicted_delta_t_s"));
  EXPECT_EQ(c["check"]["tolerance_n"], 10.0);
}

// What resume reads back from the records is what was emitted.
TEST(Events, TheRecordsResumeNeedsReadBack) {
  auto line = [](const Payload& p) {
    nlohmann::json j = record_json(Event{p, Stamp{State::analyse, 500.0, 400.0}, nullptr});
    j["type"] = type_of(p);
    return j;
  };
  const CoastdownRecord run = usable_run();
  const std::vector<nlohmann::json> records = {
      line(ev::FirstSetting{"loss-map", "loss-map", "", kSet, std::nullopt, std::nullopt, std::nullopt,
                            std::nullopt, std::nullopt, nlohmann::json(), std::nullopt, std::nullopt,
                            std::nullopt}),
      line(ev::SetWritten{3, kSet, 2}), line(ev::CoastdownStarted{3, kSet, 135.0}), line(ev::Coastdown{run})};
  const ResumePoint p = resume_point(records);
  EXPECT_EQ(p.malformed, 0);
  EXPECT_EQ(p.strategy, "loss-map");
  EXPECT_EQ(p.iterations, 2);
  ASSERT_EQ(p.completed.size(), 1u);
  EXPECT_FALSE(p.discarded_run.has_value());
  ASSERT_TRUE(p.verdict.has_value());
  EXPECT_EQ(*p.verdict, Outcome::accepted);
  EXPECT_EQ(p.verdict_reason, run.decision.reason);
  ASSERT_TRUE(p.final_set.has_value());
  EXPECT_EQ(p.final_set->f0_n, run.decision.next_set.f0_n);
  EXPECT_EQ(p.cell_time_s, 400.0);

  // A finished record reads back as the summary it was made from.
  const Summary s = summary();
  const ResumePoint f = resume_point({line(ev::Finished{s})});
  ASSERT_TRUE(f.verdict.has_value());
  EXPECT_EQ(*f.verdict, s.outcome);
  EXPECT_EQ(f.verdict_reason, s.stop_reason);
  EXPECT_TRUE(f.finished_recorded);
  ASSERT_TRUE(f.final_set.has_value());
  EXPECT_EQ(f.final_set->f2_n_per_kmh2, s.final_set->f2_n_per_kmh2);
}

namespace {
class Scripted : public Observer {
 public:
  enum class Fails { never, returns_false, throws };
  Scripted(bool critical, Fails fails) : critical_(critical), fails_(fails) {}
  bool on_event(const Event&) override {
    ++calls;
    if (fails_ == Fails::throws) throw std::runtime_error("scripted");
    return fails_ == Fails::never;
  }
  bool critical() const override { return critical_; }
  std::string error() const override { return "scripted failure"; }
  int calls = 0;

 private:
  bool critical_;
  Fails fails_;
};
}  // namespace

TEST(Events, OnlyTheCriticalObserverFailsADeliveryAnyOtherIsDroppedOnce) {
  Scripted record(true, Scripted::Fails::never);
  Scripted says_no(false, Scripted::Fails::returns_false);
  Scripted throws(false, Scripted::Fails::throws);
  Scripted fine(false, Scripted::Fails::never);
  Observers obs({&record, &says_no, &throws, &fine});
  const Event e{ev::Refused{"x"}, std::nullopt, nullptr};
  const auto d1 = obs.deliver(e);
  EXPECT_FALSE(d1.critical_failed);
  ASSERT_EQ(d1.dropped.size(), 2u);
  EXPECT_NE(d1.dropped[0].find("scripted failure"), std::string::npos) << d1.dropped[0];
  EXPECT_NE(d1.dropped[1].find("threw: scripted"), std::string::npos) << d1.dropped[1];
  const auto d2 = obs.deliver(e);
  EXPECT_TRUE(d2.dropped.empty()) << "a dropped observer is said once and never called again";
  EXPECT_EQ(says_no.calls, 1);
  EXPECT_EQ(throws.calls, 1);
  EXPECT_EQ(fine.calls, 2);
  EXPECT_EQ(record.calls, 2);
}

TEST(Events, AFailingRecordHidesTheEventFromTheViews) {
  Scripted record(true, Scripted::Fails::returns_false);
  Scripted view(false, Scripted::Fails::never);
  Observers obs({&record, &view});
  const auto d = obs.deliver(Event{ev::Refused{"x"}, std::nullopt, nullptr});
  EXPECT_TRUE(d.critical_failed);
  EXPECT_EQ(d.critical_error, "scripted failure");
  EXPECT_TRUE(d.dropped.empty()) << "the record is never dropped";
  EXPECT_EQ(view.calls, 0) << "nothing is shown that the record does not hold";
}

// The dyno checks emit their steps as the same typed events: a view sees each step after its record, and a
// view that fails is dropped (stderr and an "observer_dropped" record) without ending the check. The
// base-inertia check on the empty rollers of the scripted fake controller (no process).
namespace {
class Steps : public Observer {
 public:
  explicit Steps(std::string fail_on = "") : fail_on_(std::move(fail_on)) {}
  bool on_event(const Event& e) override {
    types.push_back(type_of(e));
    return fail_on_.empty() || types.back() != fail_on_;
  }
  std::vector<std::string> types;

 private:
  std::string fail_on_;
};
}  // namespace

TEST(Events, TheDynoChecksShowTheirStepsToObservers) {
  physics::Truth truth = loadtrim::testing::demo_truth();
  truth.vehicle_on_rollers = false;
  loadtrim::testing::FakeController c(truth);
  std::string dir = (std::filesystem::temp_directory_path() / "loadtrim-check-events-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(dir.data()));
  checks::CheckRequest req;
  req.kind = core::CheckKind::inertia;
  req.cell_file = kSrc + "/config/cells/sim-tcp.toml";
  req.cell = config::load_cell(req.cell_file, adapters::production().sections());
  req.profile_file = kSrc + "/tests/data/checks-short.toml";  // one set at each of the three rate pairs
  req.profile = config::load_check_profile(req.profile_file);
  req.checks_root = dir;
  req.confirmation = "unit test: no rollers";
  Steps view, says_no("identified");
  req.observers = {&view, &says_no};
  const checks::CheckResult r = checks::run_check(c, req);
  EXPECT_TRUE(r.end == checks::CheckResult::End::passed || r.end == checks::CheckResult::End::failed)
      << checks::to_string(r.end) << ": " << r.verdict;
  // Both directions of each of the three sets: six forces applied.
  std::vector<std::string> want = {"check_started", "identified"};
  want.insert(want.end(), 6, "force_applied");
  want.insert(want.end(), {"analysed", "check_finished"});
  EXPECT_EQ(view.types, want);
  EXPECT_EQ(says_no.types, std::vector<std::string>({"check_started", "identified"}));
  std::vector<nlohmann::json> recs;
  ASSERT_TRUE(record::read_log(r.folder + "/events.jsonl", &recs).ok);
  std::vector<std::string> logged;
  for (const auto& j : recs) logged.push_back(j.value("type", ""));
  EXPECT_EQ(std::count(logged.begin(), logged.end(), "observer_dropped"), 1);
  EXPECT_TRUE(record::verify_session_folder(r.folder).ok);
  std::filesystem::remove_all(dir);
}

// The record's result strings read back through one function (session::outcome_from_string), the inverse of
// to_string(Outcome) as docs/session.md spells the results; anything else is not an outcome.
TEST(Events, OutcomesReadBackFromTheirRecordedSpelling) {
  const std::map<std::string, Outcome> spelled = {
      {"accepted", Outcome::accepted},       {"not-accepted", Outcome::not_accepted},
      {"refused", Outcome::refused},         {"controller-fault", Outcome::controller_fault},
      {"interrupted", Outcome::interrupted}, {"record-failure", Outcome::record_failure}};
  for (const auto& [text, o] : spelled) {
    EXPECT_EQ(outcome_from_string(text), o) << text;
    EXPECT_EQ(to_string(o), text);
    // Final (sealed, not resumable) exactly for the three verdicts (events.hpp).
    EXPECT_EQ(is_final(text), o == Outcome::accepted || o == Outcome::not_accepted || o == Outcome::refused);
  }
  for (const char* other : {"", "not_accepted", "Accepted", "unknown", "finished"}) {
    EXPECT_FALSE(outcome_from_string(other)) << other;
    EXPECT_FALSE(is_final(std::string(other))) << other;
  }
}

// The vehicle history store (record/vehicle_history.hpp) writes what the session runner wrote before it moved
// to record/: the members utc, vehicle, session, target, final_set, road loads in the record's spelling
// (session::to_json), and reads it back.
TEST(Events, VehicleHistoryFileKeepsItsFormat) {
  namespace fs = std::filesystem;
  std::string dir = (fs::temp_directory_path() / "loadtrim-history-XXXXXX").string();
  ASSERT_NE(::mkdtemp(dir.data()), nullptr);
  const std::string file = record::vehicle_history_file(dir, "cell (A)", "car/1");
  // "car/1" and "car_1" get two files (the earlier safe_name gave both "car_1.json"); an id a file name can
  // hold keeps its name; an id spelled like another's hashed name gets its own (common practice, no source: a
  // name that two ids can share is a collision waiting to happen).
  EXPECT_EQ(file, (fs::path(dir) / record::identity_name("cell (A)") /
                   ("car_1~" + record::sha256_hex("car/1").substr(0, 8) + ".json"))
                      .string());
  EXPECT_NE(file, record::vehicle_history_file(dir, "cell (A)", "car_1"));
  const std::string look_alike = fs::path(file).stem().string();  // "car_1~xxxxxxxx" as an id
  EXPECT_NE(record::vehicle_history_file(dir, "cell (A)", look_alike), file);
  EXPECT_EQ(fs::path(record::vehicle_history_file(dir, "cell (A)", "car_1")).filename().string(),
            "car_1.json");
  {
    // An earlier version's file (the shared name) is read while the new one does not exist; its `vehicle`
    // member decides whose it is.
    const std::string legacy =
        (fs::path(dir) / record::identity_name("cell (A)") / (record::safe_name("car/1") + ".json")).string();
    std::string e;
    ASSERT_TRUE(record::save_vehicle_history(legacy, "car/1", "/s/old", {142.0, 0.35, 0.033}, kSet, e)) << e;
    EXPECT_EQ(record::vehicle_history_file_to_read(dir, "cell (A)", "car/1"), legacy);
    EXPECT_TRUE(record::load_vehicle_history(legacy, &e, "car/1")) << e;
    EXPECT_FALSE(record::load_vehicle_history(record::vehicle_history_file_to_read(dir, "cell (A)", "car_1"),
                                              &e, "car_1"));
    EXPECT_NE(e.find("the entry is for vehicle \"car/1\", not \"car_1\""), std::string::npos) << e;
    // Once the new name exists it is the one read, the earlier one left alone.
    ASSERT_TRUE(record::save_vehicle_history(file, "car/1", "/s/new", {142.0, 0.35, 0.033}, kSet, e)) << e;
    EXPECT_EQ(record::vehicle_history_file_to_read(dir, "cell (A)", "car/1"), file);
    fs::remove(legacy);
  }
  const core::RoadLoad target{142.0, 0.35, 0.033}, final_set = kSet;
  std::string err;
  ASSERT_TRUE(record::save_vehicle_history(file, "car/1", "/s/folder", target, final_set, err)) << err;
  std::ifstream in(file);
  const std::string text((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  nlohmann::json j = nlohmann::json::parse(text);
  ASSERT_TRUE(j.contains("utc"));
  const nlohmann::json as_before = {{"utc", j["utc"]},
                                    {"vehicle", "car/1"},
                                    {"session", "/s/folder"},
                                    {"target", to_json(target)},
                                    {"final_set", to_json(final_set)}};
  EXPECT_EQ(text, as_before.dump(2) + "\n");
  const auto back = record::load_vehicle_history(file);
  ASSERT_TRUE(back);
  EXPECT_EQ(back->utc, j["utc"].get<std::string>());
  EXPECT_TRUE(back->target == target);
  EXPECT_TRUE(back->final_set == final_set);
  EXPECT_FALSE(back->measured);  // a file without "measured" (every file written before it): none
  // From an iterative session the last measured curve is kept as "measured" and read back.
  const core::RoadLoad measured{146.5, 0.33, 0.0335};
  ASSERT_TRUE(record::save_vehicle_history(file, "car/1", "/s/folder", target, final_set, err, measured))
      << err;
  const auto with = record::load_vehicle_history(file);
  ASSERT_TRUE(with && with->measured);
  EXPECT_TRUE(*with->measured == measured);
  EXPECT_TRUE(with->final_set == final_set);
  EXPECT_FALSE(with->warm_up);
  // And the session's first warm-up hold as "warm_up", read back window by window.
  const core::WarmUpRecord warm{80.0, {{30.0, 212.5}, {90.0, 208.25}}};
  ASSERT_TRUE(
      record::save_vehicle_history(file, "car/1", "/s/folder", target, final_set, err, measured, warm))
      << err;
  const auto warmed = record::load_vehicle_history(file);
  ASSERT_TRUE(warmed && warmed->warm_up);
  EXPECT_EQ(warmed->warm_up->speed_kmh, 80.0);
  ASSERT_EQ(warmed->warm_up->windows.size(), 2u);
  EXPECT_EQ(warmed->warm_up->windows[1].t_s, 90.0);
  EXPECT_EQ(warmed->warm_up->windows[1].force_n, 208.25);
  // A window that is not a pair of numbers: no warm-up (the rest of the entry still reads).
  {
    nlohmann::json broken = nlohmann::json::parse(std::ifstream(file));
    broken["warm_up"]["windows"][0]["force_n"] = "212.5";
    std::ofstream(file) << broken.dump();
  }
  const auto no_warm = record::load_vehicle_history(file);
  ASSERT_TRUE(no_warm);
  EXPECT_FALSE(no_warm->warm_up);
  EXPECT_TRUE(no_warm->measured);
  // From a record: only the session's initial hold ("initial": true); a re-warm's, or an older record
  // without the member, gives none.
  nlohmann::json rec = {{"type", "warm_up"},
                        {"speed_kmh", 80.0},
                        {"windows", {{{"t_s", 30.0}, {"force_n", 150.5}}}},
                        {"initial", true}};
  const auto initial = record::initial_warm_up_from_record(rec);
  ASSERT_TRUE(initial);
  ASSERT_EQ(initial->windows.size(), 1u);
  EXPECT_EQ(initial->windows[0].force_n, 150.5);
  rec["initial"] = false;
  EXPECT_FALSE(record::initial_warm_up_from_record(rec));
  rec["initial"] = "true";
  EXPECT_FALSE(record::initial_warm_up_from_record(rec));
  rec.erase("initial");
  EXPECT_FALSE(record::initial_warm_up_from_record(rec));
  // Never believed as written (common practice, no source: a file is checked before it moves anything). An
  // entry written for another vehicle is refused by name; so is one whose loss no credible vehicle has (the
  // safe envelope's vehicle-loss limit, 1000 N, docs/safety.md) or a coefficient that is not a finite number;
  // a warm-up hold whose windows run back in time or whose speed is outside warm_up.speed_kmh's 10–250 km/h
  // is left out and the rest reads.
  ASSERT_TRUE(
      record::save_vehicle_history(file, "car/1", "/s/folder", target, final_set, err, measured, warm))
      << err;
  err.clear();
  EXPECT_TRUE(record::load_vehicle_history(file, &err, "car/1")) << err;
  EXPECT_FALSE(record::load_vehicle_history(file, &err, "car/2"));
  EXPECT_NE(err.find("the entry is for vehicle \"car/1\", not \"car/2\""), std::string::npos) << err;
  const nlohmann::json good = nlohmann::json::parse(std::ifstream(file));
  auto with_member = [&](const std::function<void(nlohmann::json&)>& edit) {
    nlohmann::json j = good;
    edit(j);
    { std::ofstream(file) << j.dump(); }
    err.clear();
    return record::load_vehicle_history(file, &err, "car/1");
  };
  // target − final set: 1,142 N at 0 km/h (by hand: 142 − (−1000)).
  EXPECT_FALSE(with_member([](nlohmann::json& j) { j["final_set"]["f0_n"] = -1000.0; }));
  EXPECT_NE(err.find("beyond the vehicle-loss limit"), std::string::npos) << err;
  EXPECT_NE(err.find("target − final set"), std::string::npos) << err;
  EXPECT_FALSE(with_member([](nlohmann::json& j) { j["measured"]["f2_n_per_kmh2"] = 1.0; }));
  EXPECT_NE(err.find("measured − final set"), std::string::npos) << err;
  EXPECT_TRUE(with_member([](nlohmann::json& j) { j["final_set"]["f0_n"] = -800.0; })) << err;
  // JSON holds no infinity (a parser refuses 1e400), but two huge finite values make one in the loss: refused
  // by the loss check, not believed (common practice, no source: never let a NaN pass a comparison).
  EXPECT_FALSE(with_member([](nlohmann::json& j) {
    j["target"]["f0_n"] = 1e308;
    j["final_set"]["f0_n"] = -1e308;
    j["target"]["f1_n_per_kmh"] = -1e308;
    j["final_set"]["f1_n_per_kmh"] = 1e308;
  }));
  EXPECT_NE(err.find("not a finite number"), std::string::npos) << err;
  const auto back_in_time = with_member([](nlohmann::json& j) { j["warm_up"]["windows"][1]["t_s"] = 10.0; });
  ASSERT_TRUE(back_in_time) << err;
  EXPECT_FALSE(back_in_time->warm_up);
  EXPECT_TRUE(back_in_time->measured);
  const auto too_fast = with_member([](nlohmann::json& j) { j["warm_up"]["speed_kmh"] = 400.0; });
  ASSERT_TRUE(too_fast) << err;
  EXPECT_FALSE(too_fast->warm_up);
  const auto as_written = with_member([](nlohmann::json&) {});
  ASSERT_TRUE(as_written && as_written->warm_up) << err;
  EXPECT_EQ(as_written->warm_up->windows.size(), 2u);
  EXPECT_FALSE(record::load_vehicle_history(dir + "/none.json"));
  { std::ofstream(file) << R"({"utc": "x", "target": {"f0_n": 1}})"; }
  err.clear();
  EXPECT_FALSE(record::load_vehicle_history(file, &err));
  EXPECT_FALSE(err.empty());
  fs::remove_all(dir);
}

TEST(Events, MeasuredCoefficientsAreReadUnderEitherName) {
  // One name for As, Bs, Cs ("measured"); folders written before the name was unified say "simulated", the
  // standard's word (GTR 15 §8.1.3, docs/standards.md §1.5). Both read the same; neither is a refusal.
  const nlohmann::json now = {{"measured", {{"f0_n", 1.0}, {"f1_n_per_kmh", 2.0}, {"f2_n_per_kmh2", 3.0}}}};
  const nlohmann::json before = {
      {"simulated", {{"f0_n", 1.0}, {"f1_n_per_kmh", 2.0}, {"f2_n_per_kmh2", 3.0}}}};
  EXPECT_TRUE(loadtrim::session::measured_of(now) == loadtrim::session::measured_of(before));
  EXPECT_EQ(loadtrim::session::measured_of(now).f2_n_per_kmh2, 3.0);
  EXPECT_THROW((void)loadtrim::session::measured_of(nlohmann::json::object()), std::exception);
}

TEST(Events, TheAdjustmentBasisIsRecordedAndReadBack) {
  // method.adjust_from (docs/standards.md §3.17): the record says which curve the adjustment took the loss
  // from and gives it; a resume replays from it. A record without it (the band regression, or a folder
  // written before) reads as the measured coefficients.
  CoastdownRecord r = usable_run();
  nlohmann::json plain = to_json(r);
  EXPECT_FALSE(plain.contains("adjustment"));
  EXPECT_TRUE(loadtrim::session::adjust_basis_of(plain) == r.evaluation.fit.coefficients);
  r.evaluation.adjust_basis = r.evaluation.whole_trace.coefficients;
  r.evaluation.adjust_from_whole_trace = true;
  r.evaluation.adjust_why =
      "whole-trace curve (within the band regression's noise of it at every reference speed)";
  const nlohmann::json j = to_json(r);
  ASSERT_TRUE(j.contains("adjustment"));
  EXPECT_EQ(j["adjustment"]["from"], "whole-trace");
  EXPECT_EQ(j["adjustment"]["why"], r.evaluation.adjust_why);
  EXPECT_FALSE(j["adjustment"].contains("band_equivalent"));
  EXPECT_EQ(j["whole_trace"]["converged"], r.evaluation.whole_trace.converged);
  r.evaluation.adjust_band_equivalent = core::RoadLoad{129.5, 0.21, 0.0301};
  EXPECT_EQ(to_json(r)["adjustment"]["band_equivalent"]["f0_n"], 129.5);
  EXPECT_TRUE(loadtrim::session::adjust_basis_of(j) == r.evaluation.whole_trace.coefficients);
  EXPECT_FALSE(loadtrim::session::adjust_basis_of(j) == loadtrim::session::measured_of(j));
  nlohmann::json broken = j;
  broken["adjustment"].erase("measured");
  EXPECT_THROW((void)loadtrim::session::adjust_basis_of(broken), std::exception);
  // The anticipation says how many coast-downs it aimed at and the last one's time.
  r.decision.anticipation = anticipation();
  r.decision.anticipation.aimed = 2;
  r.decision.anticipation.to_last_s = 1540.0;
  const nlohmann::json a = to_json(r)["decision"]["anticipation"];
  EXPECT_EQ(a["aimed"], 2);
  EXPECT_EQ(a["to_last_s"], 1540.0);
}

// The console's and operator.log's sentence for every event kind: never a JSON object, never float noise
// (more than 6 decimals), never empty; with a controller that was never reached no sentence speaks of a
// watchdog stopping rollers. (Common practice, no source: the project's own console rules, docs/session.md
// "Observers".)
TEST(Events, EveryEventReadsAsASentenceWithoutJsonOrFloatNoise) {
  auto noisy = [](const std::string& t) {
    for (std::size_t i = 0; i < t.size(); ++i) {
      if (t[i] != '.' || i == 0 || !std::isdigit(static_cast<unsigned char>(t[i - 1]))) continue;
      std::size_t n = 0;
      while (i + 1 + n < t.size() && std::isdigit(static_cast<unsigned char>(t[i + 1 + n]))) ++n;
      if (n > 6) return true;
    }
    return false;
  };
  for (const Payload& p : every_event())
    for (bool connected : {false, true}) {
      const std::string t = event_sentence(Event{p, std::nullopt, nullptr}, TextContext{connected});
      EXPECT_FALSE(t.empty()) << type_of(p);
      EXPECT_EQ(t.find("{\""), std::string::npos) << type_of(p) << ": " << t;
      EXPECT_FALSE(noisy(t)) << type_of(p) << ": " << t;
    }
  // A lost link before any controller answered: nothing moved, so no watchdog sentence.
  const std::string never =
      event_sentence(Event{ev::LinkLost{"connect refused", 1}, std::nullopt, nullptr}, {false});
  EXPECT_NE(never.find("nothing was moved"), std::string::npos) << never;
  EXPECT_EQ(never.find("watchdog"), std::string::npos) << never;
  const std::string lost = event_sentence(Event{ev::LinkLost{"timeout", 1}, std::nullopt, nullptr}, {true});
  EXPECT_NE(lost.find("watchdog"), std::string::npos) << lost;
  // Float noise in a recorded number is rounded away, and the final set says it is rounded.
  Summary s;
  s.outcome = Outcome::accepted;
  s.stop_reason = "2 consecutive coast-down(s) within tolerance";
  s.cell_time_s = 1653.4899999999998;
  s.final_set = core::RoadLoad{39.599999999999994, 0.29800000000000004, 0.030070000000000003};
  const std::string fin = event_sentence(Event{ev::Finished{s}, std::nullopt, nullptr}, {true});
  EXPECT_NE(fin.find("27 min 33 s"), std::string::npos) << fin;  // 1653.49 s = 27 × 60 + 33.49 s
  EXPECT_NE(fin.find("f0 39.60 N"), std::string::npos) << fin;
  EXPECT_NE(fin.find("rounded"), std::string::npos) << fin;
  EXPECT_FALSE(noisy(fin)) << fin;
}

TEST(Events, TheConsoleSpeaksTheTargetsUnits) {
  // US coefficients from metric by the exact NIST SP 811 App. B factors (1 lbf = 4.4482216152605 N,
  // 1 mph = 1.609344 km/h): A = f0/4.4482216152605, B = f1·1.609344/4.4482216152605,
  // C = f2·1.609344²/4.4482216152605. The record stays SI; only the console changes.
  constexpr double kN = 4.4482216152605, kKmh = 1.609344;
  const core::RoadLoad final_set{118.0, 0.24, 0.0305};
  auto console_text = [&](Console::Units u) {
    char* buf = nullptr;
    std::size_t len = 0;
    std::FILE* f = ::open_memstream(&buf, &len);
    {
      Console c(Console::Mode::normal, f);
      c.set_units(u);
      ev::StartCommon common;
      common.target = {150.0, 0.3, 0.035};
      common.tolerance_n = 10.0;
      c.on_event(Event{ev::SessionStarted{common, "iterative", nlohmann::json::array(), 4100, "", false,
                                          nlohmann::json::array(), false, "tcp:127.0.0.1:4100", ""},
                       std::nullopt, nullptr});
      c.on_event(Event{ev::Coastdown{usable_run()}, std::nullopt, nullptr});
      Summary s = summary();
      s.final_set = final_set;
      c.on_event(Event{ev::Finished{s}, std::nullopt, nullptr});
    }
    std::fclose(f);
    std::string t(buf, len);
    std::free(buf);
    return t;
  };
  auto has = [](const std::string& t, const std::string& w) { return t.find(w) != std::string::npos; };
  char a[32], b[32], c[32], tol[32];
  std::snprintf(a, sizeof a, "A %.2f lbf", final_set.f0_n / kN);
  std::snprintf(b, sizeof b, "B %.4f lbf/mph", final_set.f1_n_per_kmh * kKmh / kN);
  std::snprintf(c, sizeof c, "C %.6f lbf/mph²", final_set.f2_n_per_kmh2 * kKmh * kKmh / kN);
  std::snprintf(tol, sizeof tol, "±%.2f lbf", 10.0 / kN);
  const std::string us = console_text(Console::Units::us);
  EXPECT_TRUE(has(us, a) && has(us, b) && has(us, c)) << a << " " << b << " " << c << "\n" << us;
  EXPECT_TRUE(has(us, tol)) << tol << "\n" << us;
  EXPECT_FALSE(has(us, "N/(km/h)")) << us;
  const std::string metric = console_text(Console::Units::metric);
  EXPECT_TRUE(has(metric, "f0 118.0 N, f1 0.240 N/(km/h), f2 0.03050 N/(km/h)²")) << metric;
  EXPECT_TRUE(has(metric, "±10.0 N")) << metric;
  EXPECT_FALSE(has(metric, "lbf")) << metric;
  const std::string both = console_text(Console::Units::both);
  EXPECT_TRUE(has(both, a) && has(both, "f0 118.0 N") && has(both, "±10.0 N (" + std::string(tol + 2)))
      << both;
}
