// The simulated controller's protocol front end: the physics model behind the line protocol, with limits, a
// heartbeat watchdog and fault injection. Pure: no sockets, no clocks — the server (or an in-process
// loopback) passes request lines in, advances simulated time, and sends the returned lines. Wall time for the
// watchdog is passed in too.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "controller/controller.hpp"
#include "line/line_protocol.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::sim {

struct FaultPlan {
  std::optional<double> drop_at_s;          // close the link once when simulated time passes this
  std::optional<std::string> drop_in_mode;  // ...or when this mode (HOLD, ROADLOAD) has lasted drop_after_s
  double drop_after_s = 0.0;
  std::optional<std::uint64_t> corrupt_line;  // corrupt the Nth line sent (1-based), once
  std::uint64_t corrupt_every = 0;            // corrupt every Nth line sent (0 = never)
  std::optional<double> stall_at_s;           // stop the sample stream at this simulated time
  double delay_replies_ms = 0.0;     // hold every reply back this long (wall time; the server applies it)
  std::vector<std::string> refuse;   // verbs answered with ERR 41
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
  FaultPlan faults;
};

// A refusal by the simulated controller: the protocol's error code and a short text.
struct SimError {
  line::ErrorCode code;
  std::string text;
};

class SimController {
 public:
  SimController(const physics::Truth& truth, SimSettings settings);

  // The typed core: what any front end (the line protocol, a direct in-process adapter) calls.
  std::optional<SimError> hello(int version);
  controller::ControllerInfo info() const;
  std::optional<SimError> set_inertia(double kg);
  std::optional<SimError> set_coefficients(const core::RoadLoad& c);
  std::optional<SimError> command(controller::Mode mode, double hold_kmh);
  std::optional<SimError> stream(double rate_hz);
  std::optional<SimError> clear();
  controller::StatusReport status() const;
  void touch(double wall_s) { last_request_wall_s_ = wall_s; }  // a sign of life from the tool
  // A reading now (noisy), with mode and flags: what register-based front ends publish.
  controller::Sample reading();
  // Advances simulated time; samples at the stream rate and fault events ("FAULT kind=... detail=...")
  // appended.
  void advance_typed(double sim_dt_s, std::vector<controller::Sample>& samples,
                     std::vector<std::string>& events);
  void check_watchdog_typed(double wall_s, std::vector<std::string>& events);

  // The line-protocol front end over the typed core.
  // A request line in (without '\n'); the encoded reply lines are appended to out.
  void on_line(std::string_view line, double wall_s, std::vector<std::string>& out);
  // Advances simulated time, appending SMP (and EVT) lines at the stream rate.
  void advance(double sim_dt_s, std::vector<std::string>& out);
  // Checks the heartbeat watchdog against the wall clock the caller passes.
  void check_watchdog(double wall_s, std::vector<std::string>& out);
  // The link went away (the server calls this; the watchdog then takes over).
  void on_disconnect() {
    hello_ = false;
    stream_hz_ = 0.0;
  }
  // True once when the fault plan says the link must drop now.
  bool take_drop_request();

  const physics::RollerModel& model() const { return model_; }
  double time_s() const { return model_.time_s(); }
  std::string fault() const { return fault_; }
  double delay_replies_ms() const { return settings_.faults.delay_replies_ms; }

 private:
  void reply_ok(std::uint32_t req, const std::string& verb, std::vector<std::string> fields,
                std::vector<std::string>& out);
  void reply_err(std::uint32_t req, line::ErrorCode code, const std::string& text,
                 std::vector<std::string>& out);
  void send(line::Message m, std::vector<std::string>& out);
  void latch_fault(const std::string& kind, const std::string& detail, std::vector<std::string>& events);
  void send_events(const std::vector<std::string>& events, std::vector<std::string>& out);
  std::string wire_mode() const;
  std::uint32_t flags() const;

  physics::RollerModel model_;
  SimSettings settings_;
  std::uint32_t seq_ = 0;
  std::uint64_t lines_sent_ = 0;
  bool hello_ = false;
  double stream_hz_ = 0.0;
  double next_sample_s_ = 0.0;
  std::uint64_t sample_index_ = 0;
  double last_request_wall_s_ = 0.0;
  double mode_since_s_ = 0.0;
  std::string fault_;  // latched: WATCHDOG, ESTOP
  bool dropped_once_ = false;
  bool drop_pending_ = false;
  bool estop_done_ = false;
};

}  // namespace loadtrim::sim
