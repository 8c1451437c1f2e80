// The one controller interface loadtrim drives a dyno through. Adapters (dyno-adapters/) implement the
// protected do_* hooks only; the public, non-virtual calls wrap them with the deadlines from the cell
// configuration, the cell's limits, read-back checks, heartbeat scheduling and link statistics, and turn
// anything an adapter throws into a fatal status.
//
// Threading: one thread drives a Controller; calls block for at most their deadline. A KeepAlive (below) may
// feed the watchdog from a second thread: every public call holds the controller's lock, and the keep-alive
// only takes it when it is free, so it never delays the driving thread and never interleaves with a call.
// Time: every sample carries the controller's own timestamp; callers time the test from those. The host clock
// (steady_clock) bounds every call, checks the controller's clock (clock_guard.hpp) and leases the
// keep-alive. Nothing the controller sends is believed unchecked: samples with non-finite or impossible
// values, or a sample counter that runs backwards, are dropped and counted (too many is a fault); exact
// repeats are dropped; fault events end the next receive with a fatal status; the event queue is bounded.
#pragma once

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdint>
#include <mutex>
#include <optional>
#include <string>
#include <thread>
#include <vector>

#include "controller/clock_guard.hpp"
#include "core/mode.hpp"
#include "core/road_load.hpp"

namespace loadtrim::controller {

using Clock = std::chrono::steady_clock;
using Deadline = Clock::time_point;

// The result of every call: ok; retryable (a timeout, a dropped link: reconnecting may help); fatal (refused,
// inconsistent, a fault latched: stop).
struct Result {
  enum class Status : std::uint8_t { ok, retryable, fatal };
  Status status = Status::ok;
  std::string message;
  int code = 0;  // controller error code when it sent one
  bool ok() const { return status == Status::ok; }
  static Result success() { return {}; }
  static Result retry(std::string m, int c = 0) { return {Status::retryable, std::move(m), c}; }
  static Result fail(std::string m, int c = 0) { return {Status::fatal, std::move(m), c}; }
};
const char* to_string(Result::Status s);

// The controller's modes (core/mode.hpp, shared with the physics model). free_coast is a command only (motor
// off at speed, no simulation: the rollers coast on their own inertia and losses); the controller reports
// idle while they do. constant_force: the motor applies a set force, parasitic compensation on, no inertia or
// road-load simulation. Both serve the dyno's own checks with no vehicle.
using Mode = core::Mode;
using core::to_string;

// Fault and state flags, as every adapter reports them.
inline constexpr std::uint32_t kFlagFault = 0x01;
inline constexpr std::uint32_t kFlagEstop = 0x02;
inline constexpr std::uint32_t kFlagWatchdog = 0x04;
inline constexpr std::uint32_t kFlagLimit = 0x08;
inline constexpr std::uint32_t kFlagAtSetpoint = 0x10;
// The vehicle is in neutral: set only by a controller that states the capability "neutral", and only while a
// driver prompt is shown (from "accelerate" until "off"; docs/protocol.md, "Driver prompts").
inline constexpr std::uint32_t kFlagNeutral = 0x20;

using DriverPrompt = core::DriverPrompt;

struct ControllerInfo {
  std::string name;
  int protocol_version = 0;
  std::string capabilities;  // comma-separated words
  double roller_diameter_m = 0.0;
  double base_inertia_kg = 0.0;
  double max_speed_kmh = 0.0;
  double max_force_n = 0.0;
  double time_scale = 1.0;  // controller seconds per wall second (1 for hardware; a simulator may run faster)
  bool has(std::string_view capability) const;
};

struct Sample {
  std::uint64_t index = 0;  // the controller's sample counter: consecutive, no gaps
  double time_s = 0.0;      // the controller's clock
  double speed_kmh = 0.0;
  double force_n = 0.0;
  Mode mode = Mode::idle;
  std::uint32_t flags = 0;
  // Set by the public layer: how many commands the controller had acknowledged when this sample was read off
  // the link. A step waits only for samples with epoch ≥ the epoch its command returned (samples buffered
  // before the acknowledgement belong to the phase before), without trusting the controller's timestamps for
  // that.
  std::uint64_t epoch = 0;
};

struct StatusReport {
  Mode mode = Mode::idle;
  double speed_kmh = 0.0;
  double time_s = 0.0;
  std::uint32_t flags = 0;
  std::string fault;  // empty when none
};

// The one fault the tool clears on its own (docs/safety.md, "Faults the tool clears"): the watchdog stop its
// own silence caused (a killed tool, a lost link), named WATCHDOG with the watchdog flag set and the
// emergency-stop flag clear. An emergency stop, a fault of the controller's own, an unknown name or a name
// the flags do not bear out stays latched for the operator at the cell.
bool tool_may_clear(const StatusReport& st);

struct Timeouts {
  std::chrono::milliseconds connect{3000};
  std::chrono::milliseconds reply{1000};
  std::chrono::milliseconds sample_gap{1000};  // no sample for this long while streaming = link trouble
  std::chrono::milliseconds heartbeat_interval{200};
  // The keep-alive feeds the watchdog only while the driving thread has called within this, or within a
  // longer lease it took for a known slow step (Controller::lease): a stalled tool lets the controller's
  // watchdog trip.
  std::chrono::milliseconds progress_grace{2000};
};

struct Limits {
  double max_speed_kmh = 0.0;  // never command more (the cell's and the vehicle's, whichever is lower)
  double max_force_n = 0.0;    // never command a constant force of more (the cell's limit)
  double max_time_scale =
      1.0;  // a controller stating a faster clock is refused at identify (simulators only)
  bool clock_wall_related = true;  // false only for a controller simulated inside the tool's process
};

// A warning an adapter raises: something the controller or the link did that does not end the call but must
// not pass unseen (status bits the map does not define, a busy or gateway exception retried, late bytes
// discarded, a heartbeat counter that could not be continued). `code` is a short fixed word naming it
// (docs/modbus.md, "Warnings"), `text` says what was seen; `count` is how many times the same code and text
// were raised since the last take_warnings (repeats are coalesced, never dropped silently).
struct Warning {
  std::string code;
  std::string text;
  std::uint64_t count = 1;
};

struct LinkStats {
  std::uint64_t lines_rejected = 0;  // corrupted or malformed lines received and dropped
  std::uint64_t lines_lost = 0;      // gaps in the controller's line sequence
  std::uint64_t samples_lost = 0;    // gaps in the sample index
  std::uint64_t samples_received = 0;
  std::uint64_t heartbeats = 0;
  std::string last_rejected;            // what the last rejection was
  std::uint64_t samples_malformed = 0;  // dropped: non-finite or impossible values, counter running backwards
  std::uint64_t samples_duplicate = 0;  // dropped: exact repeats, or the time of the sample before
  std::string last_malformed;
  std::uint64_t events = 0;          // EVT lines (or their equivalent) received
  std::uint64_t events_dropped = 0;  // beyond the bounded queue
  std::string last_event;
  std::uint64_t warnings = 0;          // raised by the adapter (Controller::warn), repeats included
  std::uint64_t warnings_dropped = 0;  // beyond the bounded warning queue (reported by take_warnings)
};

class Controller {
 public:
  Controller(Timeouts timeouts, Limits limits) : timeouts_(timeouts), limits_(limits) {}
  virtual ~Controller() = default;
  Controller(const Controller&) = delete;
  Controller& operator=(const Controller&) = delete;

  Result connect();
  void disconnect();
  Result identify(ControllerInfo& out);
  // Write, read back and compare (1e-9 relative): a mismatch is fatal and nothing else is sent.
  Result set_inertia(double inertia_kg);
  Result set_coefficients(const core::RoadLoad& set);
  Result read_inertia(double& inertia_kg);
  Result read_coefficients(core::RoadLoad& set);
  // Motoring: refused here, before anything is sent, above the configured speed limit.
  Result hold_speed(double speed_kmh);
  Result release_road_load();
  // The driver display (capability "driver"): accelerate to a speed (refused here above the configured speed
  // limit), shift to neutral, or clear it. Like a command it closes an epoch (samples read before its
  // acknowledgement belong to the phase before).
  Result prompt_driver(DriverPrompt p, double speed_kmh = 0.0);
  // What the configuration alone (no link) says against prompting a driver: "" when nothing stands in the
  // way (the capabilities at identify have the last word), else why (e.g. the register map keys it lacks).
  std::string driver_unavailable() const { return driver_prompt_unavailable(); }
  Result controlled_stop();
  Result idle();
  // The dyno's own checks (no vehicle on the rollers): refused here above the cell's force limit; the force
  // is read back and compared when the adapter can read it (do_read_force), a mismatch being fatal.
  Result apply_force(double force_n);
  Result free_coast();
  Result start_stream(double rate_hz);  // 10 to 1000 Hz
  Result stop_stream();
  // Appends the samples that have arrived, waiting up to the sample-gap deadline for at least one. Sends a
  // heartbeat when one is due. A gap in the sample index is counted in stats().samples_lost. Fatal: a fault
  // event, a clock violation (clock_guard.hpp), or malformed samples beyond the bound (more than 20 in a row,
  // or more than 50 of the last 500). Retryable: no valid sample within the sample gap (the message counts
  // the lines rejected meanwhile and names the last).
  Result receive_samples(std::vector<Sample>& out);
  Result heartbeat();  // sends one now
  Result heartbeat_if_due();
  // For KeepAlive: a heartbeat if one is due and no call is in progress (then the call sends its own).
  void heartbeat_if_due_and_free();
  Result status(StatusReport& out);
  Result clear_fault();

  LinkStats stats() const;  // a copy, taken under the lock
  // The number of commands acknowledged so far (see Sample::epoch) and the epoch of the last fault clear.
  std::uint64_t epoch() const;
  std::uint64_t clear_epoch() const;
  // The controller's stated clock rate, as accepted at identify (1 before).
  double time_scale() const;
  // The driving thread announces a step that may keep it from calling for up to `d` (a durable record write,
  // an analysis): the keep-alive goes on feeding the watchdog until then. Every public call renews the lease
  // by timeouts().progress_grace; heartbeats do not.
  void lease(std::chrono::milliseconds d);
  bool lease_valid() const;
  // While the rollers are being brought to a stop, what is wanted from the controller is its speed and mode:
  // a fault it reported earlier (already acted on) and its clock's misbehaviour are counted but no longer end
  // a call, so the stop can still be confirmed. The caller bounds the stop in wall time
  // (motion::Motion::stop_and_wait).
  void set_stopping(bool on);
  // Whether the adapter streams samples at the rate asked (true) or polls at a rate of its own.
  bool streams() const { return streamed(); }
  // What its configuration alone (no link) says about a mode this controller cannot be commanded into: ""
  // when nothing stands in the way (the controller's capabilities, at identify, have the last word), else
  // why, e.g. the register map keys it lacks. The checks ask before anything connects.
  std::string unavailable(Mode m) const { return mode_unavailable(m); }
  const Timeouts& timeouts() const { return timeouts_; }
  const Limits& limits() const { return limits_; }
  void set_speed_limit(double max_speed_kmh) { limits_.max_speed_kmh = max_speed_kmh; }
  // The adapter's own poll rate in wall Hz when it polls (streams() false), else 0: what a polled link must
  // deliver.
  double poll_rate_hz() const { return streamed() ? 0.0 : polled_rate_hz(); }

  // The warnings raised since the last call, oldest first (motion drains them at every step it takes). The
  // queue holds kMaxWarnings distinct entries; a repeat of a queued code and text only counts up, and what
  // did not fit is reported as one more warning, code "warnings_dropped", with its count: nothing is lost
  // unseen.
  static constexpr std::size_t kMaxWarnings = 64;
  std::vector<Warning> take_warnings();

 protected:
  virtual Result do_connect(Deadline d) = 0;
  virtual void do_disconnect() = 0;
  virtual Result do_identify(ControllerInfo& out, Deadline d) = 0;
  virtual Result do_write_inertia(double inertia_kg, Deadline d) = 0;
  virtual Result do_read_inertia(double& inertia_kg, Deadline d) = 0;
  virtual Result do_write_coefficients(const core::RoadLoad& set, Deadline d) = 0;
  virtual Result do_read_coefficients(core::RoadLoad& set, Deadline d) = 0;
  // value: the hold speed in km/h for speed_hold, the force in N for constant_force, else unused.
  virtual Result do_command(Mode mode, double value, Deadline d) = 0;
  virtual Result do_stream(double rate_hz, Deadline d) = 0;
  virtual Result do_receive_samples(std::vector<Sample>& out, Deadline d) = 0;
  virtual Result do_heartbeat(Deadline d) = 0;
  virtual Result do_status(StatusReport& out, Deadline d) = 0;
  virtual Result do_clear_fault(Deadline d) = 0;
  virtual Result do_prompt_driver(DriverPrompt, double /*speed_kmh*/, Deadline) {
    return Result::fail("this controller has no driver display");
  }
  virtual std::string driver_prompt_unavailable() const { return "this controller has no driver display"; }
  // Events the controller sent since the last call ("FAULT kind=... detail=..." and others), oldest first.
  virtual void do_take_events(std::vector<std::string>&) {}
  // Whether samples are streamed by the controller at the rate asked (checked), or polled by the adapter.
  virtual bool streamed() const { return true; }
  virtual std::string mode_unavailable(Mode) const { return ""; }
  // A stream was started: samples arrive at about this many per wall second (the rate asked × the
  // controller's clock rate). Adapters that queue samples size their bounds from it.
  virtual void on_stream_rate(double /*samples_per_wall_s*/) {}

  // After a constant-force command: the force the controller reports holding, for this layer to compare with
  // the force written (within setting_tolerance(Setting::force, ...)). An adapter that cannot read it back
  // leaves `force_n` empty.
  virtual Result do_read_force(std::optional<double>& force_n, Deadline /*d*/) {
    force_n.reset();
    return Result::success();
  }

  // How far a read-back may differ from what was written: the register's resolution (e.g. float32 in Modbus).
  virtual double readback_tolerance(double written) const { return 1e-9 * std::max(1.0, std::abs(written)); }
  // The same for one quantity of the setting, or the constant force (their registers may differ in type and
  // scale).
  enum class Setting : std::uint8_t { inertia, f0, f1, f2, force };
  virtual double setting_tolerance(Setting /*what*/, double written) const {
    return readback_tolerance(written);
  }
  // What the read-back reads, named in a mismatch's message ("read-back", "the applied values the
  // controller reports", ...).
  virtual std::string readback_source() const { return "read-back"; }
  // A polling adapter's poll rate (wall Hz); see poll_rate_hz().
  virtual double polled_rate_hz() const { return 0.0; }

  // Raises a warning (see Warning): queued for take_warnings, bounded. Safe from any adapter hook.
  void warn(std::string code, std::string text);

  LinkStats stats_;

 private:
  template <class F>
  Result guarded(const char* what, F&& f, bool renews_lease = true);
  // Pulls what the adapter has already read (a command's acknowledgement closes an epoch), checked.
  void drain_adapter();
  // Validates, de-duplicates, clock-checks and tags samples fresh from the adapter; keeps the first fault.
  void ingest(std::vector<Sample>& raw, std::vector<Sample>& accepted);
  Result command_done(Result r);  // a successful command closes the epoch
  double wall_s() const;
  // The controller's time as this layer hands it up: continuous across the clock guard's fresh starts (a new
  // connection, the end of a stop). The first time read after such a start that is earlier than the latest
  // sample time handed up (a controller that restarted, a counter unwrapped afresh, a clock stepped back
  // while stopping) starts a new offset: the times continue from that latest time plus the tool's own time
  // since, at the stated rate (0 for a clock not related to the wall), and a warning names the step. The
  // session's timing (the 120 s rule, the motoring time, the warming curve) never runs backwards so.
  double continued_time(double raw_s, const char* what);
  mutable std::recursive_mutex mu_;
  Deadline reply_deadline() const { return Clock::now() + timeouts_.reply; }
  Timeouts timeouts_;
  Limits limits_;
  Clock::time_point last_heartbeat_{};
  Clock::time_point t0_ = Clock::now();
  std::atomic<Clock::rep> alive_until_{0};
  std::uint64_t next_index_ = 0;
  bool have_index_ = false;
  Sample last_sample_{};
  Clock::time_point last_sample_wall_ = Clock::now();
  std::uint64_t epoch_ = 0, clear_epoch_ = 0;
  std::vector<Sample> pending_;  // read before the last acknowledgement, not yet handed out
  std::optional<Result> pending_fault_;
  bool pending_fault_is_event_ = false;
  ClockGuard clock_;
  double time_offset_s_ = 0.0;  // added to every time the adapter reads (continued_time)
  bool time_fresh_start_ = false;
  bool have_time_seen_ = false;
  double last_time_seen_s_ = 0.0;  // the latest sample time handed up
  Clock::time_point last_time_seen_wall_{};
  double time_scale_ = 1.0;
  double stream_rate_hz_ = 0.0;
  int malformed_run_ = 0;
  bool stopping_ = false;
  std::uint64_t recent_valid_ = 0, recent_malformed_ = 0;
  std::vector<Warning> warnings_;       // at most kMaxWarnings
  std::uint64_t warnings_dropped_ = 0;  // since the last take_warnings
};

// Feeds the controller's watchdog from a thread of its own for as long as it lives, so that a slow disk, a
// large trace being hashed and written, or report rendering on the driving thread never lets the heartbeat
// lapse while the rollers turn. Destroy it before the controller.
class KeepAlive {
 public:
  explicit KeepAlive(Controller& c);
  ~KeepAlive();
  KeepAlive(const KeepAlive&) = delete;
  KeepAlive& operator=(const KeepAlive&) = delete;

 private:
  Controller& c_;
  std::mutex m_;
  std::condition_variable cv_;
  bool stop_ = false;
  std::thread thread_;
};

}  // namespace loadtrim::controller
