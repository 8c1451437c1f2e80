#include "support/fake_controller.hpp"

#include <algorithm>
#include <stdexcept>

#include "config/loaders.hpp"
#include "sim/line_front_end.hpp"

namespace loadtrim::testing {

using controller::Mode;
using controller::Result;

namespace {
// A refusal as the line protocol's error code, as a line adapter would report it.
Result from(const std::optional<sim::SimError>& e) {
  if (!e) return Result::success();
  const int code = static_cast<int>(sim::line_error_code(e->cause));
  return Result::fail("controller refused (error " + std::to_string(code) + "): " + e->message, code);
}
}  // namespace

physics::Truth demo_truth() {
  return config::load_truth(std::string(LOADTRIM_SOURCE_DIR) + "/samples/truths/demo-hatchback.toml");
}

controller::Timeouts FakeController::fast_timeouts() {
  controller::Timeouts t;
  t.connect = std::chrono::milliseconds(500);
  t.reply = std::chrono::milliseconds(500);
  t.sample_gap = std::chrono::milliseconds(300);
  t.heartbeat_interval = std::chrono::milliseconds(20);
  t.progress_grace = std::chrono::milliseconds(300);
  return t;
}

FakeController::FakeController(const physics::Truth& truth, controller::Timeouts t, controller::Limits l)
    : Controller(t, l) {
  sim::SimSettings s;
  s.watchdog_s = 1e18;  // simulated time races ahead of any wall clock here
  sim_ = std::make_unique<sim::SimController>(truth, s);
}

bool FakeController::sent(Mode m) const {
  return std::any_of(commands.begin(), commands.end(), [&](const auto& c) { return c.first == m; });
}

Result FakeController::do_connect(controller::Deadline) {
  return from(sim_->hello(1));
}
Result FakeController::do_identify(controller::ControllerInfo& out, controller::Deadline) {
  out = sim_->info();
  out.capabilities += script.extra_capabilities;
  if (script.identify_lie) script.identify_lie(out);
  return Result::success();
}
Result FakeController::do_write_inertia(double kg, controller::Deadline) {
  return from(sim_->set_inertia(kg));
}
Result FakeController::do_read_inertia(double& kg, controller::Deadline) {
  kg = sim_->model().inertia_set_kg();
  if (script.inertia_lie) script.inertia_lie(kg);
  return Result::success();
}
Result FakeController::do_write_coefficients(const core::RoadLoad& c, controller::Deadline) {
  ++coefficient_writes;
  written_ = c;
  const bool apply = !(script.coefficients_not_applied && have_written_);
  have_written_ = true;
  return apply ? from(sim_->set_coefficients(c)) : Result::success();
}
Result FakeController::do_read_coefficients(core::RoadLoad& c, controller::Deadline) {
  // What a lying controller says it runs: what was written (not what it applied), plus any offset.
  c = script.coefficients_not_applied && have_written_ ? written_ : sim_->model().coefficients();
  c.f0_n += script.readback_offset_n;
  return Result::success();
}
Result FakeController::do_command(Mode mode, double value, controller::Deadline) {
  commands.emplace_back(mode, value);
  if (script.throw_in == "command") throw std::runtime_error("scripted failure in the command hook");
  if (mode == Mode::controlled_stop && script.never_stops) {
    sim_->command(sim::cmd::HoldSpeed{30.0});
    return Result::success();
  }
  return from(sim_->command(sim::command_for(mode, value)));
}
Result FakeController::do_prompt_driver(controller::DriverPrompt p, double speed_kmh, controller::Deadline) {
  return from(sim_->prompt_driver(p, speed_kmh));
}
Result FakeController::do_stream(double rate_hz, controller::Deadline) {
  return from(sim_->stream(rate_hz));
}
Result FakeController::do_receive_samples(std::vector<controller::Sample>& out, controller::Deadline) {
  ++receives;
  if (script.throw_in == "receive") throw std::runtime_error("scripted failure in the receive hook");
  if (script.silent) return Result::success();
  std::vector<controller::Sample> got;
  sim_->advance_typed(script.chunk_s, got, sim_events_);
  for (auto& s : got) {
    if (script.sample_lie) script.sample_lie(s);
    out.push_back(s);
  }
  return Result::success();
}
Result FakeController::do_heartbeat(controller::Deadline) {
  ++heartbeats;
  return Result::success();
}
Result FakeController::do_status(controller::StatusReport& out, controller::Deadline) {
  if (script.throw_in == "status") throw std::runtime_error("scripted failure in the status hook");
  // Time passes between requests at a real controller: a little simulated time per status request.
  std::vector<controller::Sample> unused;
  sim_->advance_typed(script.chunk_s / 10.0, unused, sim_events_);
  out = sim_->status();
  if (script.status_lie) script.status_lie(out);
  return Result::success();
}
Result FakeController::do_clear_fault(controller::Deadline) {
  return from(sim_->clear());
}
void FakeController::do_take_events(std::vector<std::string>& out) {
  for (const auto& e : sim_events_) out.push_back(sim::event_text(e));
  sim_events_.clear();
  out.insert(out.end(), script.events.begin(), script.events.end());
  script.events.clear();
}

}  // namespace loadtrim::testing
