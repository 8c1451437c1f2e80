// The simulated controller's dialect-neutral core: the physics model with the controller's limits, a
// heartbeat watchdog and fault injection, as typed calls. Pure: no sockets, no clocks, no wire format. Each
// dialect has its own front end over it (line_front_end.hpp: the line protocol; framed_front_end.hpp: the
// framed ASCII dialect; modbus_server.cpp: the Modbus register map), which decodes requests into these calls,
// passes wall time in for the watchdog and encodes the answers. Refusals carry the line protocol's error
// codes (docs/protocol.md section 10), which every front end maps to its own.
#pragma once

#include <cstdint>
#include <optional>
#include <random>
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

  // The capability words of info().capabilities (the line protocol's spelling, docs/protocol.md section 2).
  static constexpr const char* kCapabilities =
      "hold,hold-force,roadload,stop,stream,watchdog,status,force,free";

  // What any front end (a dialect, a direct in-process adapter) calls.
  // Checks a client's protocol version against the one this simulator states in info() (no state kept).
  std::optional<SimError> hello(int version);
  controller::ControllerInfo info() const;
  std::optional<SimError> set_inertia(double kg);
  std::optional<SimError> set_coefficients(const core::RoadLoad& c);
  std::optional<SimError> command(controller::Mode mode, double hold_kmh);
  std::optional<SimError> stream(double rate_hz);
  std::optional<SimError> clear();
  // The speed in it is the encoder's reading, with its noise (at rest too: never an exact zero by design).
  controller::StatusReport status() const;
  void touch(double wall_s) { last_request_wall_s_ = wall_s; }  // a sign of life from the tool
  // A reading now (noisy), with mode and flags: what register-based front ends publish.
  controller::Sample reading();
  // Advances simulated time; samples at the stream rate and fault events ("FAULT kind=... detail=...")
  // appended.
  void advance_typed(double sim_dt_s, std::vector<controller::Sample>& samples,
                     std::vector<std::string>& events);
  void check_watchdog_typed(double wall_s, std::vector<std::string>& events);

  // The link went away: the stream stops (the watchdog then takes over).
  void on_disconnect() { stream_hz_ = 0.0; }
  double stream_hz() const { return stream_hz_; }
  const SimSettings& settings() const { return settings_; }
  // True once when the fault plan says the link must drop now.
  bool take_drop_request();

  const physics::RollerModel& model() const { return model_; }
  double time_s() const { return model_.time_s(); }
  std::string fault() const { return fault_; }
  double delay_replies_ms() const { return settings_.faults.delay_replies_ms; }

 private:
  void latch_fault(const std::string& kind, const std::string& detail, std::vector<std::string>& events);
  std::string wire_mode() const;
  std::uint32_t flags() const;

  physics::RollerModel model_;
  SimSettings settings_;
  double stream_hz_ = 0.0;
  double next_sample_s_ = 0.0;
  std::uint64_t sample_index_ = 0;
  double last_request_wall_s_ = 0.0;
  double mode_since_s_ = 0.0;
  std::string fault_;  // latched: WATCHDOG, ESTOP
  bool dropped_once_ = false;
  bool drop_pending_ = false;
  bool estop_done_ = false;
  // The status reply's encoder noise (its own generator: the samples' noise sequence stays as it was).
  mutable std::mt19937_64 status_rng_;
  mutable std::normal_distribution<double> status_normal_{0.0, 1.0};
};

}  // namespace loadtrim::sim
