// The typed events of a setting session and of the dyno's own checks: one struct per record kind, one JSON
// mapping each (to_json below), and the observer interface that every consumer implements (the record
// writer, the console, the check runner's log, the test hooks, the benchmark).
//
// The JSON mappings ARE the on-disk record format (docs/records.md, docs/session.md): events.jsonl holds, for
// each event, {"seq", "utc", "type": type_of(event), ...record_json(event), "prev"}. The report, verify,
// resume and the tamper tests read those field names, so a mapping changes only with the format. Field
// names carry their unit; a road-load curve is always written by to_json(core::RoadLoad), the one place
// that spells "f0_n", "f1_n_per_kmh", "f2_n_per_kmh2".
//
// An event is built complete, once, by whoever knows its facts; nothing is added to it afterwards. What is
// added around it is not the event's: the session's stamp (state and clocks at the moment it was emitted,
// Event::stamp) and, in the record writer, the files the writer itself wrote for it (a trace, summary.json).
//
// Pure: no files, clocks or threads (a check's or session's emitter owns those).
#pragma once

#include <cstdint>
#include <functional>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <variant>
#include <vector>

#include "controller/controller.hpp"
#include "core/combination.hpp"
#include "core/dyno_checks.hpp"
#include "core/evaluation.hpp"
#include "core/road_load.hpp"
#include "core/setting.hpp"
#include "core/strategy.hpp"
#include "core/warm_up_drift.hpp"

namespace loadtrim::session {

enum class State : std::uint8_t {
  connect,
  check_limits,
  set_inertia,
  warm_up,
  write_set,
  run_up,
  coast_down,
  analyse,
  paused,
  safe_stop,
  finished
};
const char* to_string(State s);

enum class Outcome : std::uint8_t {
  accepted,
  not_accepted,
  refused,
  controller_fault,
  interrupted,
  record_failure
};
const char* to_string(Outcome o);
// A final result is a verdict (accepted, not accepted, refused): the session is over and its folder is
// sealed. The others (a controller fault, an interruption, a record failure) leave a session that `resume`
// may continue.
bool is_final(Outcome o);
bool is_final(const std::string& result);  // as to_string(Outcome) writes it
// The inverse of to_string(Outcome): nullopt for any other text. Pure; the record's "result" strings (the
// finished record, the seal) are read back only through it.
std::optional<Outcome> outcome_from_string(const std::string& s);

// The one JSON spelling of a road-load curve: {"f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"}.
nlohmann::json to_json(const core::RoadLoad& c);
// Its inverse; throws nlohmann::json::exception when a member is missing or not a number.
core::RoadLoad road_load_from_json(const nlohmann::json& j);
// A usable coast-down record's measured coefficients (As, Bs, Cs; the standard's "simulated"): "measured", or
// "simulated" in folders written before the name was unified. Throws like road_load_from_json when absent.
core::RoadLoad measured_of(const nlohmann::json& coastdown_record);
// The curve its adjustment took the loss from (method.adjust_from): "adjustment.measured" when the record has
// it, else the measured coefficients (the band regression's). Throws likewise.
core::RoadLoad adjust_basis_of(const nlohmann::json& coastdown_record);

// The per-coast-down record (the "coastdown" event).
struct CoastdownRecord {
  int run = 0;
  core::RoadLoad set;
  core::CoastdownEvaluation evaluation;
  core::Decision decision;      // meaningful only when the evaluation is usable
  double release_time_s = 0.0;  // controller time
  double duration_s = 0.0;
  double run_up_s = 0.0;
  bool verifying = false;
  double tolerance_n = 0.0;  // the profile's, beside the check it was judged by
  // Per band (same order as evaluation.bands): the band time the target predicts at TM + m_r, when it can
  // be predicted. Written beside the measured times of a usable run only.
  std::vector<std::optional<double>> predicted_delta_t_s;
};
nlohmann::json to_json(const CoastdownRecord& r);

struct Summary {
  Outcome outcome = Outcome::not_accepted;
  std::string stop_reason;
  int iterations = 0;  // distinct settings tried
  int coastdowns = 0;
  int usable_coastdowns = 0;
  double cell_time_s = 0.0;
  std::optional<core::RoadLoad> final_set;
  std::optional<core::RoadLoad> measured;
  std::vector<core::SpeedDeviation> deviations;
  std::string first_setting;
  bool rollers_stopped = false;       // standstill confirmed by the controller at the end
  std::string stop_note;              // how the rollers were stopped, or why that could not be confirmed
  std::vector<std::string> findings;  // timing and validity findings the report shows on page one
};
nlohmann::json to_json(const Summary& s);  // also summary.json

// One struct per record kind. The record type each is written as is in type_of (events.cpp); a struct
// whose record kind depends on a fact says so.
namespace ev {

// --- the start of a session (built by the app, which knows the lab's context) ---
// What both start records hold. The members that are JSON come ready-made from their own libraries
// (record::copy_input, the dyno-check gate, the operator's identity) and are written as they are.
struct StartCommon {
  std::string vehicle, cell, profile;
  nlohmann::json dyno_checks;  // the gate's finding
  nlohmann::json operator_id;  // {"name", "from"}; written as "operator"
  std::string data_root_path, data_root_from;
  std::string signing_key;   // the key's fingerprint, or why there is none
  std::string confirmation;  // how the operator allowed the rollers to move
  core::RoadLoad target;
  std::string vehicle_description;
  double test_mass_kg = 0.0;
  std::string standard;
  double tolerance_n = 0.0;
  std::vector<double> reference_speeds_kmh;  // the vehicle's (core::plan_reference_speeds)
  std::vector<core::DroppedSpeed> dropped_reference_speeds;
  std::string software_version, software_build;
  std::string operator_note;
  std::string first_setting_requested;
  std::string history_file;
  bool history_available = false;
};
struct SessionStarted {  // "session_started"
  StartCommon common;
  std::string method;
  nlohmann::json files;  // the input copies, with their hashes
  int port_override = 0;
  std::string device_override;
  bool inprocess = false;
  nlohmann::json combination_warnings = nlohmann::json::array();
  bool two_wheel_drive_mode = false;
  std::string cell_lock_endpoint;
  std::string stale_lock_taken_over;
};
struct ResumeStarted {  // "resume_started"
  StartCommon common;
  std::size_t records_before = 0;
  std::size_t completed_coastdowns = 0;
  std::string folder_verified;
};

// --- the session's state machine ---
struct StateChanged {  // "state"
  State from = State::connect, to = State::connect;
  std::string why;
};
struct ControllerIdentified {  // "controller"
  controller::ControllerInfo info;
};
struct ControllerStateOnConnect {  // "controller_state_on_connect"
  std::string fault;
  double speed_kmh = 0.0;
  controller::Mode mode = controller::Mode::idle;
};
struct Refused {  // "refused"
  std::string why;
};
struct Limits {  // "limits"
  double speed_limit_kmh = 0.0, start_speed_kmh = 0.0, end_speed_kmh = 0.0;
  double cell_max_speed_kmh = 0.0, vehicle_max_speed_kmh = 0.0, controller_max_speed_kmh = 0.0;
  double max_motoring_s = 0.0;
};
struct InertiaSet {  // "inertia" (always read back and matching: a mismatch is a fault instead)
  double test_mass_kg = 0.0, rotating_mass_kg = 0.0, force_mass_kg = 0.0, inertia_kg = 0.0;
  core::AxleLayout axles = core::AxleLayout::single_axle;
};
struct WarmUpStarted {  // "warm_up_started"
  double speed_kmh = 0.0, duration_s = 0.0, loss_map_planned_s = 0.0;
  // When the continuous motoring period this warm-up belongs to began (controller clock; the first sample
  // after the command that started the rollers): the cell's motoring-time limit counts from it.
  double motoring_since_s = 0.0;
};
struct WarmUpHeld {  // "warm_up"
  double speed_kmh = 0.0, held_s = 0.0;
  // "not checked" (the profile's stability rule is off), "stable" or "not stable within the extra time".
  std::string stability;
  double stability_threshold_n = 0.0;
  std::optional<double> last_window_force_n;  // null when no stability window completed
  // Every stability window of this hold from a controller that reports force in speed hold (else none): its
  // middle in seconds since the session's warm-up began (after a pause: since its re-warm began) and its mean
  // force. The history's day-to-day correction compares a later session's initial hold with these.
  std::vector<core::DriftPoint> windows;
  // The session's initial hold: not a re-warm, not in a resumed session, no pause before it.
  bool initial = false;
};
struct LossMapSkipped {  // "loss_map_skipped"
  std::string why;
};
struct LossMapPointSkipped {  // "loss_map_point_skipped"
  double speed_kmh = 0.0;
  std::string why;
};
struct LossMapPoint {  // "loss_map_point"
  core::HoldPoint point;
};
// The loss map's coast from one hold to the next (loss_map.coast_between_holds, docs/standards.md §3.15): the
// set written for it, and at each reference speed the coast spans whole the band force, the set's force there
// and the difference, the vehicle's loss as a coast-down sees it.
struct LossMapCoastPoint {
  double speed_kmh = 0.0, band_force_n = 0.0, set_force_n = 0.0, coasting_loss_n = 0.0;
};
struct LossMapCoastStarted {  // "loss_map_coast_started": before the set is written and road load released
  double from_kmh = 0.0, to_kmh = 0.0;
  core::RoadLoad set;
};
struct LossMapCoast {  // "loss_map_coast"
  double from_kmh = 0.0, to_kmh = 0.0;
  core::RoadLoad set;
  std::vector<LossMapCoastPoint> points;
  std::string note;  // why a point or the whole coast was not used ("" when all were)
};
struct WarmUpEnded {};  // "warm_up_ended": the stamp's t_s is the warm-up's end (controller time)
struct FirstSetting {   // "first_setting"
  std::string requested, strategy, fallback_reason;
  core::RoadLoad set;
  // The inputs the strategy used ("inputs": only those present are written).
  std::optional<std::string> history_utc;
  std::optional<core::RoadLoad> loss_map_fit;
  std::optional<double> loss_map_residual_sd_n;
  std::optional<core::RoadLoad> loss;
  // The history's sessions when its loss was used (written as inputs.history): the vehicle's session, the
  // source cell, each pair's two sessions and the correction (docs/store.md, "The history first setting").
  std::optional<core::HistoryBasis> history;
  // Where the history was looked for and what was not used (written as "history_lookup" when the history
  // strategy was requested or used; null: not written). Made by the app, which knows the store.
  nlohmann::json history_lookup;
  // The steady-versus-coasting difference taken off the loss map (written as inputs.coast_correction).
  std::optional<core::CoastCorrection> coast_correction;
  // The warming the map's setting anticipates (written as inputs.anticipation; docs/standards.md §3.16).
  std::optional<core::Anticipation> anticipation;
  // The history's day-to-day correction (written as inputs.history_day_scale whenever the history's loss was
  // used; docs/store.md, "The history first setting").
  std::optional<core::DayScale> day_scale;
};
struct EnvelopeRefused {  // "envelope_refused"
  int run = 0;
  core::RoadLoad set;
  std::string why;
};
struct SetWritten {  // "set_written" (always read back and matching: a mismatch is a fault instead)
  int run = 0;
  core::RoadLoad set;
  int iteration = 0;
};
struct CoastdownStarted {  // "coastdown_started"
  int run = 0;
  core::RoadLoad set;
  double start_speed_kmh = 0.0;
};
// The first coast-down's release after the warm-up: "timing" when within the rule, else
// "timing_rule_missed" (the standard's rule decides the record kind, so an auditor can search for it).
struct ReleaseTiming {
  std::string rule;
  double gap_s = 0.0;
  bool within = true;
  std::string action;  // when not within: "repeat" (discarded, re-warmed) or "finding" (kept, on page one)
};
struct PassesReset {  // "passes_reset": passes that no longer count as consecutive
  int run = 0;
  int passes = 0;
  std::string why;
};
struct WarmUpDrift {  // "warm_up_drift": the vehicle's warming trend when a setting is about to be accepted
  int run = 0;
  double t_s = 0.0;  // controller time since the warm-up hold began (since_warm_up_s)
  core::WarmUpCurve curve;
  std::string rule;  // "warn" or "require"
  double threshold_n = 0.0;
  // "settled" (below the threshold), "still warming: accepted with a finding", "still warming: coasting
  // again at the accepted setting", "not estimated: ..." (then nothing is decided by it), or with the
  // fully-warm check (below) "settled, but outside tolerance once fully warm: " and "adjusted for the warm
  // vehicle", "coasting again at the accepted setting", "not accepted" or "accepted with a finding".
  std::string verdict;
  // With warm_up.check_fully_warm and "require", once settled: the setting as it will be fully warm
  // (docs/standards.md §3.18).
  std::optional<core::FullyWarmOutlook> fully_warm;
};
struct RunUpPlan {  // "run_up": who accelerates the vehicle (the cell's dyno.run_up), and how a release is
                    // found
  core::RunUp run_up = core::RunUp::dyno;
  std::string release_detection;  // "neutral signal", "speed trace", or "" for dyno run-ups
  std::string rule;               // the method rule it satisfies (GTR 15 Annex 4 §8.1.3.4)
};
struct DriverPromptShown {  // "driver_prompt": what the driver display was asked to show
  int run = 0;
  core::DriverPrompt prompt = core::DriverPrompt::off;
  double speed_kmh = 0.0;  // the start speed of the run
  std::string text;        // as the console says it: "accelerate to 130 km/h", "shift to neutral", ...
};
struct RunUpChecked {  // "run_up_checked": a run-up under the vehicle's own power
  int run = 0;
  std::string ending;  // "coasted", "early_release", "not_reached", "no_release"
  double start_speed_kmh = 0.0, peak_speed_kmh = 0.0, release_speed_kmh = 0.0;
  std::string detected_by;       // "neutral signal" or "speed trace"
  bool figure_ok = false;        // an acceleration could be measured
  double mean_av_m2ps3 = 0.0;    // acceleration × speed, mean over the accelerating part
  double peak_av_m2ps3 = 0.0;    // its highest 1 s value
  double min_av_m2ps3 = 6.0;     // GTR 15 Annex 4 §8.1.3.4
  bool meets = true;             // mean_av ≥ min_av
  double run_up_s = 0.0;         // from the prompt to the start speed (or to the ending)
  double release_delay_s = 0.0;  // from the prompt to shift to neutral to the release (coasted only)
  std::string why;               // an ending other than coasted, or a too slow run-up
};
struct ConsecutiveTiming {  // "timing"
  std::string rule;
  double gap_since_last_coast_s = 0.0;
};
struct Coastdown {  // "coastdown"; Event::trace holds its samples
  CoastdownRecord record;
};
struct CoastdownDiscarded {  // "coastdown_discarded"
  int run = 0;
  std::string why;
  std::optional<core::RoadLoad> next_set;  // a fallback setting, when the discard chose one
  std::optional<std::string> note;
};
struct Diverging {  // "diverging"
  int run = 0;
  std::string why;
};
struct LinkLost {  // "link_lost"
  std::string why;
  int incident = 0;
};
struct Reconnect {  // "reconnect"
  int attempt = 0, of = 0;
  std::optional<bool> ok;  // absent while connecting at the start (the attempt is announced before it)
  std::string message;
};
struct NotSettled {  // "not_settled"
  std::string when, message;
};
struct FaultCleared {  // "fault_cleared" (only ever with the rollers stopped)
  std::string fault, when;
  bool ok = false;
  std::string message;
};
struct LinkRestored {  // "link_restored" (only ever with the rollers stopped)
  int attempt = 0;
};
struct Fault {  // "fault"
  std::string during, message;
  controller::Result::Status status = controller::Result::Status::fatal;
  int code = 0;
};
struct Interrupted {  // "interrupted"
  std::string during;
};
// The "why" of a coast-down discarded by a pause begins with this: such a run counts neither as unusable nor
// as discarded (the session and resume alike).
inline constexpr const char* kPausedDiscardWhy = "paused by the operator during ";
// "paused": the operator asked for a pause; the rollers were stopped (a run in progress was discarded first).
struct Paused {
  int run = 0;         // the run in progress or next
  std::string during;  // the step the pause ended ("warm-up", "coast-down", ...)
  std::string by, why, source;
  bool rollers_stopped = false;  // standstill confirmed before the wait
  double max_pause_s = 0.0;      // the wait's limit on the tool's own clock
};
// "continued": the operator asked to go on; the session re-warms (the pass count was reset) and goes on.
struct Continued {
  int run = 0;
  std::string by, why, source;
  double paused_s = 0.0;  // the tool's own clock, from the standstill to the continue
  double rewarm_s = 0.0;  // the re-warm that follows
};
// "resumed": a session continuing from its log (continued), or a recorded verdict finalised without
// motoring (finalised); the note says which.
struct Resumed {
  std::size_t completed_coastdowns = 0;
  std::string note;
  struct Continued {
    int unusable = 0;
    core::RoadLoad next_set;
    std::optional<int> discarded_run;
  };
  struct Finalised {
    bool rollers_stopped = false;
    std::string stop_note;
  };
  std::variant<Continued, Finalised> how;
};
struct SafeStopReconnect {  // "safe_stop_reconnect"
  bool ok = false;
  std::string message;
};
struct SafeStop {  // "safe_stop"
  std::string how;
  bool rollers_stopped = false;
  // The controller's view at the end; absent when nothing was ever commanded to move.
  struct Seen {
    double speed_kmh = 0.0;
    controller::Mode mode = controller::Mode::idle;
    double standstill_threshold_kmh = 0.0;
    std::string note;
  };
  std::optional<Seen> seen;
};
struct ObserverDropped {  // "observer_dropped"
  std::string why;
};
// A warning the controller layer raised (controller::Warning: undefined status bits, exceptions retried, late
// replies discarded, ...), in sessions and dyno checks alike.
struct ControllerWarning {  // "controller_warning"
  std::string code;         // a fixed word (docs/modbus.md, "Warnings")
  std::string text;
  std::uint64_t count = 1;  // how many times it was raised since the last such record
};
struct Finished {  // "finished"; summary.json when the result is final
  Summary summary;
};

// --- the dyno's own checks (no vehicle on the rollers) ---
struct CheckStarted {  // "check_started"
  std::string check, cell;
  nlohmann::json files;  // the input copies, with their hashes
  std::string confirmation, note;
  nlohmann::json operator_id;  // written as "operator"
  std::string signing_key;
  std::optional<core::RoadLoad> stored_parasitic_curve;
  std::string stored_parasitic_utc;
};
struct CheckIdentified {  // "identified"
  std::string name;
  double roller_diameter_m = 0.0, base_inertia_kg = 0.0;
  std::size_t problems = 0;
};
struct FreeCoastStarted {  // "coast_started" (parasitic determination: simulation off)
  double from_kmh = 0.0;
};
struct CheckCoastStarted {  // "coast_started" (unloaded coast-down at a set inertia and setting)
  int run = 0;
  double inertia_kg = 0.0;
  core::RoadLoad set;
  double from_kmh = 0.0;
};
struct ForceApplied {  // "force_applied" (base-inertia and response checks: simulation off)
  double force_n = 0.0, stated_base_inertia_kg = 0.0;
};
struct RateRunStarted {  // "rate_run_started" (acceleration/deceleration check: road-load simulation)
  double inertia_kg = 0.0, rate_mph_per_s = 0.0;
  int run = 0;
  bool rising = true;
  core::RoadLoad set;
  double from_kmh = 0.0;
};
// The "analysed" records; the same JSON is the check's part of result.json.
struct ParasiticAnalysed {
  double base_inertia_kg = 0.0;
  core::ParasiticDetermination determination;
  std::optional<core::RoadLoad> stored;
  nlohmann::json file;  // the trace's entry (path, sha256, samples)
};
struct UnloadedCoastdownAnalysed {
  int run = 0;
  double inertia_kg = 0.0;
  core::RoadLoad set;
  core::UnloadedCoastdown result;
  nlohmann::json file;
};
struct InertiaAnalysed {  // the base-inertia check: every set, both directions, and the mean
  core::BaseInertiaCheck result;
  nlohmann::json files;  // the traces' entries (path, sha256, samples), two per set
};
struct FrictionAnalysed {
  core::FrictionCheck result;
  double speed_mph = 0.0;
  nlohmann::json file;
};
struct AccelDecelAnalysed {
  core::AccelDecelCheck result;
  nlohmann::json files;  // one per run
};
struct ResponseAnalysed {
  core::ResponseCheck result;
  double limit_s = 0.0, band_fraction = 0.0;
  nlohmann::json files;  // one per step
};
struct CheckFinished {  // "check_finished"
  std::string check, end;
  bool passed = false;
  std::string verdict;
  nlohmann::json file;  // result.json's entry
};

}  // namespace ev

using Payload = std::variant<
    ev::SessionStarted, ev::ResumeStarted, ev::StateChanged, ev::ControllerIdentified,
    ev::ControllerStateOnConnect, ev::Refused, ev::Limits, ev::InertiaSet, ev::WarmUpStarted, ev::WarmUpHeld,
    ev::LossMapSkipped, ev::LossMapPointSkipped, ev::LossMapPoint, ev::LossMapCoastStarted, ev::LossMapCoast,
    ev::WarmUpEnded, ev::FirstSetting, ev::EnvelopeRefused, ev::SetWritten, ev::CoastdownStarted,
    ev::ReleaseTiming, ev::RunUpPlan, ev::DriverPromptShown, ev::RunUpChecked, ev::PassesReset,
    ev::WarmUpDrift, ev::ConsecutiveTiming, ev::Coastdown, ev::CoastdownDiscarded, ev::Diverging,
    ev::LinkLost, ev::Reconnect, ev::NotSettled, ev::FaultCleared, ev::LinkRestored, ev::Fault,
    ev::Interrupted, ev::Paused, ev::Continued, ev::Resumed, ev::SafeStopReconnect, ev::SafeStop,
    ev::ObserverDropped, ev::Finished, ev::CheckStarted, ev::CheckIdentified, ev::FreeCoastStarted,
    ev::CheckCoastStarted, ev::ForceApplied, ev::RateRunStarted, ev::ParasiticAnalysed,
    ev::UnloadedCoastdownAnalysed, ev::InertiaAnalysed, ev::FrictionAnalysed, ev::AccelDecelAnalysed,
    ev::ResponseAnalysed, ev::CheckFinished, ev::ControllerWarning>;

// The record type an event is written as (the "type" member of its line).
const char* type_of(const Payload& p);
// The record's data: every member but seq, utc, type, prev and the stamp.
nlohmann::json to_json(const Payload& p);

// The session's state and clocks when it emitted an event (none before the first sample's clock).
struct Stamp {
  State state = State::connect;
  std::optional<double> t_s;          // controller time
  std::optional<double> cell_time_s;  // controller time this session (with its earlier runs) has used
};

// What observers receive.
struct Event {
  Payload payload;
  std::optional<Stamp> stamp;  // the session's events have one; the start records and the checks' do not
  const std::vector<controller::Sample>* trace = nullptr;  // a coast-down's samples (Coastdown only)
};
const char* type_of(const Event& e);
// to_json(payload) with the stamp's members ("state", "t_s", "cell_time_s"): the record as it is logged.
nlohmann::json record_json(const Event& e);

struct Progress {
  State state = State::connect;
  int coastdown = 0;
  double speed_kmh = 0.0;
  double band_kmh = 0.0;     // reference speed whose band the coast is in (0 = none)
  double cell_time_s = 0.0;  // controller time since the session started
  double remaining_estimate_s = 0.0;
  // A dyno check's step in words ("the free coast", "settling at 80 km/h"); empty in a session, whose state
  // says it. A check's state is coast_down while a coast's samples are its trace (coastdown = its number).
  std::string step;
};

// Observers: the record writer, the console, anything else. on_event returning false (or throwing) means the
// observer could not do its job. For a critical observer (the record: an event that could not be made
// durable) the session stops safely with Outcome::record_failure, and the non-critical observers do not see
// that event (the console never shows a result whose record was not written). Any other observer that fails
// is logged once and dropped; it never ends the session. While an observer runs, the controller's keep-alive
// goes on for at most record_budget (critical) or the cell's progress grace (others): an observer that hangs
// longer lets the controller's watchdog stop the rollers.
class Observer {
 public:
  virtual ~Observer() = default;
  virtual bool on_event(const Event& e) = 0;
  virtual void on_progress(const Progress&) {}
  virtual std::string error() const { return {}; }
  virtual bool critical() const { return false; }
  virtual std::string name() const { return "an observer"; }
};

// The delivery rule above, shared by the session and the dyno checks so they cannot drift apart. Never
// throws: an observer's exception is caught here.
class Observers {
 public:
  Observers() = default;
  // Who is critical is settled here, once: the first observer that says so (the record), asked inside a
  // try (one that throws is a view). A second observer claiming to be critical is a view too: only the
  // record can fail a session, and no observer can change its role later.
  explicit Observers(const std::vector<Observer*>& list);
  struct Delivery {
    bool critical_failed = false;
    std::string critical_error;        // what the failing critical observer said
    std::vector<std::string> dropped;  // one line per observer dropped by this delivery
  };
  // `before_each(critical)` runs before each observer is called (the session extends the controller's
  // keep-alive lease by the observer's budget there).
  Delivery deliver(const Event& e, const std::function<void(bool critical)>& before_each = {});
  void progress(const Progress& p);  // views only: a failing one is ignored
  bool empty() const { return list_.empty(); }

 private:
  struct Entry {
    Observer* observer;
    bool critical;
  };
  std::vector<Entry> list_;
};

}  // namespace loadtrim::session
