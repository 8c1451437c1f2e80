// A scripted fake controller for unit tests: the simulated controller's typed core (physics with a hidden
// truth) behind the controller interface in this process, with no protocol, no socket and no simulator
// process, plus a script of lies and faults a test switches on. It proves the non-virtual safety layer
// (limits refused before anything is sent, read-back, a throwing hook becoming a fault, malformed samples,
// fault events, the keep-alive lease), the motion library and the session state machine.
//
// Time: each receive advances simulated time by `chunk_s` (samples at the stream rate), as fast as the host
// allows; the controller's clock is not related to the wall clock (Limits::clock_wall_related = false).
#pragma once

#include <atomic>
#include <functional>
#include <memory>
#include <string>
#include <utility>
#include <vector>

#include "controller/controller.hpp"
#include "physics/roller_model.hpp"
#include "sim/sim_controller.hpp"

namespace loadtrim::testing {

struct FakeScript {
  double chunk_s = 0.5;                                       // simulated seconds per receive
  std::function<void(controller::Sample&)> sample_lie;        // alters every sample before it is handed up
  std::function<void(controller::StatusReport&)> status_lie;  // alters every status reply
  std::function<void(controller::ControllerInfo&)> identify_lie;  // alters what identify reports
  std::function<void(double&)> inertia_lie;                       // alters every inertia read-back
  bool coefficients_not_applied =
      false;  // acknowledges COEF writes after the first without applying them; reads back what was written
  double readback_offset_n = 0.0;   // added to f0 on every read-back
  bool never_stops = false;         // a controlled stop is acknowledged but the rollers are held at 30 km/h
  std::string throw_in;             // "command", "receive", "status": that hook throws
  std::vector<std::string> events;  // handed up (once) with the next receive
  bool silent = false;              // receive returns no samples at all
  std::string extra_capabilities;  // appended to the identity's capabilities (e.g. ",readback-setpoint-only")
};

class FakeController : public controller::Controller {
 public:
  explicit FakeController(const physics::Truth& truth, controller::Timeouts t = fast_timeouts(),
                          controller::Limits l = {160.0, 8000.0, 1e9, false});
  static controller::Timeouts fast_timeouts();

  FakeScript script;
  // What was asked of the fake, in order (commands with their value), and how many heartbeats arrived.
  std::vector<std::pair<controller::Mode, double>> commands;
  std::atomic<int> heartbeats{0};
  int coefficient_writes = 0, receives = 0;
  sim::SimController& sim() { return *sim_; }
  bool sent(controller::Mode m) const;

 protected:
  controller::Result do_connect(controller::Deadline) override;
  void do_disconnect() override {}
  controller::Result do_identify(controller::ControllerInfo& out, controller::Deadline) override;
  controller::Result do_write_inertia(double kg, controller::Deadline) override;
  controller::Result do_read_inertia(double& kg, controller::Deadline) override;
  controller::Result do_write_coefficients(const core::RoadLoad& c, controller::Deadline) override;
  controller::Result do_read_coefficients(core::RoadLoad& c, controller::Deadline) override;
  controller::Result do_command(controller::Mode mode, double value, controller::Deadline) override;
  controller::Result do_stream(double rate_hz, controller::Deadline) override;
  controller::Result do_receive_samples(std::vector<controller::Sample>& out, controller::Deadline) override;
  controller::Result do_heartbeat(controller::Deadline) override;
  controller::Result do_status(controller::StatusReport& out, controller::Deadline) override;
  controller::Result do_clear_fault(controller::Deadline) override;
  // The simulated driver, as the in-process adapters reach it (docs/session.md, the run-up).
  controller::Result do_prompt_driver(controller::DriverPrompt p, double speed_kmh,
                                      controller::Deadline) override;
  std::string driver_prompt_unavailable() const override { return ""; }
  void do_take_events(std::vector<std::string>& out) override;

 private:
  std::unique_ptr<sim::SimController> sim_;
  std::vector<sim::FaultEvent> sim_events_;
  core::RoadLoad written_{};
  bool have_written_ = false;
};

// The demo vehicle's truth (samples/truths) with the noise as the simulator's defaults.
physics::Truth demo_truth();

}  // namespace loadtrim::testing
