// The simulated controller's dialect-neutral core: the physics model with the controller's limits, a
// heartbeat watchdog and fault injection, as typed calls. Pure: no sockets, no clocks, no wire format. Each
// dialect has its own front end over it (line_front_end.hpp: the line protocol; framed_front_end.hpp: the
// framed ASCII dialect; modbus_server.hpp: the Modbus register map), which decodes requests into these calls,
// passes wall time in for the watchdog and encodes the answers. Refusals carry a cause of the core's own
// (SimError) and latched faults come out as typed events (FaultEvent); each front end maps them to its
// dialect's codes and words.
#pragma once

#include <cstdint>
#include <optional>
#include <random>
#include <string>
#include <variant>
#include <vector>

#include "controller/controller.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::sim {

struct FaultPlan {
  std::optional<double> drop_at_s;               // close the link once when simulated time passes this
  std::optional<controller::Mode> drop_in_mode;  // ...or when this mode, as reported, has lasted drop_after_s
  double drop_after_s = 0.0;
  std::optional<std::uint64_t> corrupt_line;  // corrupt the Nth line sent (1-based), once
  std::uint64_t corrupt_every = 0;            // corrupt every Nth line sent (0 = never)
  std::optional<double> stall_at_s;           // stop the sample stream at this simulated time
  double delay_replies_ms = 0.0;     // hold every reply back this long (wall time; the server applies it)
  std::vector<std::string> refuse;   // requests refused by the front end: the dialect's verbs or operations
  std::optional<double> estop_at_s;  // raise an emergency stop at this simulated time
  std::optional<double> report_roller_diameter_m;  // IDENT reports this instead of the truth
  std::optional<double> report_base_inertia_kg;
};

struct SimSettings {
  std::string name = "loadtrim-sim";
  double max_speed_kmh = 200.0;
  double max_force_n = 10000.0;
  double watchdog_s = 1.0;  // wall seconds without a request while motoring or simulating → controlled stop
  double time_scale = 1.0;  // simulated seconds per wall second, stated in IDENT (time_scale=) so the tool
                            // can check the clock
  // The vehicle-in-neutral signal (controller::kFlagNeutral) and its capability word are left out: the tool
  // must find the driver's release from the speed trace.
  bool hide_neutral = false;
  FaultPlan faults;
};

// Why the simulated controller refused a call. Each front end maps a cause to its dialect's code: the line
// protocol's error code (line_error_code), the framed dialect's status digit (framed_status), the Modbus
// error register (modbus_error_code).
enum class Cause : std::uint8_t {
  bad_argument,   // a value the call cannot take (not a number, a rate outside its range, a version)
  out_of_limits,  // outside the controller's speed, force or inertia limits
  wrong_state,    // not allowed in the current state (during road-load simulation, rollers turning)
  fault_active,   // a fault is latched: clear it first
};

// A refusal by the simulated controller: its cause and a short message for the operator.
struct SimError {
  Cause cause;
  std::string message;
};

// A fault the simulated controller latches on its own; it then goes to its safe state (controlled stop, or
// idle at rest) and refuses motoring until the fault is cleared.
// overspeed: the rollers turned faster than the controller's trip speed (kOverspeedTripFactor times its
// stated maximum speed), whatever drove them there (a constant force on empty rollers, a vehicle that would
// not stop).
enum class FaultKind : std::uint8_t { watchdog, estop, overspeed };
// Above this multiple of its stated maximum speed (SimSettings::max_speed_kmh) the simulated controller
// trips: controlled stop and a latched OVERSPEED fault, as a drive's own over-speed protection does whatever
// it was told. The 2 % above the rating is common practice, no source; speed holds never reach it (they stop
// at the held speed, which the controller refuses above the maximum).
inline constexpr double kOverspeedTripFactor = 1.02;
// "WATCHDOG", "ESTOP", "OVERSPEED": the words of controller::StatusReport::fault (and of every dialect that
// names faults).
const char* to_string(FaultKind k);

struct FaultEvent {
  FaultKind kind;
  std::string detail;   // a short sentence (with spaces)
  double time_s = 0.0;  // simulated time when it latched
};
// A latched fault as the text of a controller event that the controller interface hands up
// (controller.hpp, do_take_events): "FAULT kind=<WATCHDOG|ESTOP|OVERSPEED> detail=<words joined by _>
// time_s=<s>". In-process adapters hand it up as it is, and the simulator says it to its operator; each
// dialect puts the same words on its own wire its own way.
std::string event_text(const FaultEvent& e);

// A command with the setpoint its mode takes, typed so that a speed and a force never share a parameter.
namespace cmd {
struct Idle {};
struct HoldSpeed {
  double speed_kmh = 0.0;
};
struct ReleaseRoadLoad {};  // into road-load simulation with the set inertia and coefficients
struct ControlledStop {};
struct ApplyForce {
  double force_n = 0.0;
};
struct FreeCoast {};
}  // namespace cmd
using Command = std::variant<cmd::Idle, cmd::HoldSpeed, cmd::ReleaseRoadLoad, cmd::ControlledStop,
                             cmd::ApplyForce, cmd::FreeCoast>;
// The mode a command leads to.
controller::Mode mode_of(const Command& c);
// The controller interface's command (controller::Controller::do_command: a mode and one value, the speed in
// km/h for speed_hold, the force in N for constant_force, else unused) as a typed one, for in-process
// adapters.
Command command_for(controller::Mode mode, double value);

class SimController {
 public:
  SimController(const physics::Truth& truth, SimSettings settings);

  // The capability words of info().capabilities (the controller interface's spelling, which the line protocol
  // uses: docs/protocol.md section 2).
  // info().capabilities adds "neutral" unless SimSettings::hide_neutral.
  static constexpr const char* kCapabilities =
      "hold,hold-force,roadload,stop,stream,watchdog,status,force,free,driver";
  // The version of the controller interface this simulator states in info() (the line protocol's version:
  // its front end checks that they agree).
  static constexpr int kProtocolVersion = 1;

  // What any front end (a dialect, a direct in-process adapter) calls.
  // Checks a client's protocol version against kProtocolVersion (no state kept).
  std::optional<SimError> hello(int version);
  controller::ControllerInfo info() const;
  std::optional<SimError> set_inertia(double kg);
  std::optional<SimError> set_coefficients(const core::RoadLoad& c);
  std::optional<SimError> command(const Command& c);
  std::optional<SimError> stream(double rate_hz);
  // The driver display: accelerate to speed_kmh (0 to the controller's speed limit), neutral, or off.
  std::optional<SimError> prompt_driver(controller::DriverPrompt p, double speed_kmh);
  std::optional<SimError> clear();
  // The speed in it is the encoder's reading, with its noise (at rest too: never an exact zero by design).
  controller::StatusReport status() const;
  void touch(double wall_s) { last_request_wall_s_ = wall_s; }  // a sign of life from the tool
  // A reading now (noisy), with mode and flags: what register-based front ends publish.
  controller::Sample reading();
  // Advances simulated time; samples at the stream rate and the faults latched meanwhile are appended.
  void advance_typed(double sim_dt_s, std::vector<controller::Sample>& samples,
                     std::vector<FaultEvent>& events);
  void check_watchdog_typed(double wall_s, std::vector<FaultEvent>& events);

  // The link went away: the stream stops (the watchdog then takes over).
  void on_disconnect() { stream_hz_ = 0.0; }
  double stream_hz() const { return stream_hz_; }
  const SimSettings& settings() const { return settings_; }
  // True once when the fault plan says the link must drop now.
  bool take_drop_request();

  const physics::RollerModel& model() const { return model_; }
  double time_s() const { return model_.time_s(); }
  std::optional<FaultKind> fault() const { return fault_; }
  double delay_replies_ms() const { return settings_.faults.delay_replies_ms; }

 private:
  std::optional<SimError> run(const cmd::HoldSpeed& h);
  std::optional<SimError> run(const cmd::ApplyForce& f);
  std::optional<SimError> run(const cmd::ReleaseRoadLoad&);
  std::optional<SimError> run(const cmd::ControlledStop&);
  std::optional<SimError> run(const cmd::Idle&);
  std::optional<SimError> run(const cmd::FreeCoast&);
  void latch_fault(FaultKind kind, std::string detail, std::vector<FaultEvent>& events);
  // Latches OVERSPEED when the rollers are above the trip speed (kOverspeedTripFactor) and no fault is
  // latched.
  void check_overspeed(std::vector<FaultEvent>& events);
  // The mode as the controller reports it: idle while the rollers coast freely (docs/protocol.md section 11).
  controller::Mode reported_mode() const;
  std::uint32_t flags() const;

  physics::RollerModel model_;
  SimSettings settings_;
  double stream_hz_ = 0.0;
  double next_sample_s_ = 0.0;
  std::uint64_t sample_index_ = 0;
  double last_request_wall_s_ = 0.0;
  double mode_since_s_ = 0.0;
  std::optional<FaultKind> fault_;  // latched
  bool dropped_once_ = false;
  bool drop_pending_ = false;
  bool estop_done_ = false;
  // The status reply's encoder noise (its own generator: the samples' noise sequence stays as it was).
  mutable std::mt19937_64 status_rng_;
  mutable std::normal_distribution<double> status_normal_{0.0, 1.0};
};

}  // namespace loadtrim::sim
