#include "inprocess/direct_controller.hpp"

#include "sim/line_front_end.hpp"

namespace loadtrim::inprocess {

using controller::Result;

namespace {
// A refusal as the line protocol's error code, as a line adapter would report it.
Result from(const std::optional<sim::SimError>& e) {
  if (!e) return Result::success();
  const int code = static_cast<int>(sim::line_error_code(e->cause));
  return Result::fail("controller refused (error " + std::to_string(code) + "): " + e->message, code);
}
}  // namespace

DirectController::DirectController(const physics::Truth& truth, controller::Timeouts t, controller::Limits l,
                                   double chunk_s)
    : Controller(t, l), chunk_s_(chunk_s) {
  sim::SimSettings s;
  s.watchdog_s = 1e18;
  sim_ = std::make_unique<sim::SimController>(truth, s);
}

Result DirectController::do_connect(controller::Deadline) {
  return from(sim_->hello(sim::SimController::kProtocolVersion));
}
Result DirectController::do_identify(controller::ControllerInfo& out, controller::Deadline) {
  out = sim_->info();
  return Result::success();
}
Result DirectController::do_write_inertia(double kg, controller::Deadline) {
  return from(sim_->set_inertia(kg));
}
Result DirectController::do_read_inertia(double& kg, controller::Deadline) {
  kg = sim_->model().inertia_set_kg();
  return Result::success();
}
Result DirectController::do_write_coefficients(const core::RoadLoad& c, controller::Deadline) {
  return from(sim_->set_coefficients(c));
}
Result DirectController::do_read_coefficients(core::RoadLoad& c, controller::Deadline) {
  c = sim_->model().coefficients();
  return Result::success();
}
Result DirectController::do_command(controller::Mode mode, double value, controller::Deadline) {
  return from(sim_->command(sim::command_for(mode, value)));
}
Result DirectController::do_prompt_driver(controller::DriverPrompt p, double speed_kmh,
                                          controller::Deadline) {
  return from(sim_->prompt_driver(p, speed_kmh));
}
Result DirectController::do_stream(double rate_hz, controller::Deadline) {
  return from(sim_->stream(rate_hz));
}
Result DirectController::do_receive_samples(std::vector<controller::Sample>& out, controller::Deadline) {
  const std::size_t before = out.size();
  for (int i = 0; i < 1000 && out.size() == before; ++i) sim_->advance_typed(chunk_s_, out, events_);
  return Result::success();
}
Result DirectController::do_status(controller::StatusReport& out, controller::Deadline) {
  out = sim_->status();
  return Result::success();
}
Result DirectController::do_clear_fault(controller::Deadline) {
  return from(sim_->clear());
}

}  // namespace loadtrim::inprocess
