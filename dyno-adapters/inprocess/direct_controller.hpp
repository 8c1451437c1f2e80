// A direct in-process adapter to the simulated controller's typed core: no text protocol at all, for fleet
// benchmarks where the session code, not the codec, is what is measured. Simulated time advances in `chunk_s`
// steps as the tool waits for samples, so it runs as fast as the host allows; the watchdog is off (simulated
// time races ahead of the host's heartbeats).
#pragma once

#include <memory>

#include "controller/controller.hpp"
#include "sim/sim_controller.hpp"

namespace loadtrim::inprocess {

class DirectController : public controller::Controller {
 public:
  DirectController(const physics::Truth& truth, controller::Timeouts t, controller::Limits l,
                   double chunk_s = 1.0);
  sim::SimController& sim() { return *sim_; }

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
  controller::Result do_heartbeat(controller::Deadline) override { return controller::Result::success(); }
  controller::Result do_status(controller::StatusReport& out, controller::Deadline) override;
  controller::Result do_clear_fault(controller::Deadline) override;
  controller::Result do_prompt_driver(controller::DriverPrompt p, double speed_kmh,
                                      controller::Deadline) override;
  std::string driver_prompt_unavailable() const override { return ""; }

 private:
  std::unique_ptr<sim::SimController> sim_;
  double chunk_s_;
  std::vector<sim::FaultEvent> events_;  // not handed up: the watchdog is off and no fault is planned
};

}  // namespace loadtrim::inprocess
