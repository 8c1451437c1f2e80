#include "registry.hpp"

#include <stdexcept>

#include "config/loaders.hpp"
#include "inprocess/loopback_transport.hpp"
#include "line/line_controller.hpp"
#include "modbus/modbus_controller.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::adapters {

std::vector<std::string> names() {
  return {"line-tcp", "line-serial", "modbus-tcp", "modbus-rtu", "inprocess-sim"};
}

std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell) {
  const controller::Limits limits{cell.max_speed_kmh, cell.max_force_n, cell.max_time_scale, true};
  if (cell.adapter == "line-tcp")
    return std::make_unique<line::LineController>(
        line::make_tcp_transport(cell.host, static_cast<unsigned short>(cell.port)), cell.timeouts, limits);
  if (cell.adapter == "line-serial") {
    line::SerialSettings s;
    s.device = cell.serial.device;
    s.baud = cell.serial.baud;
    s.parity = cell.serial.parity == "odd"    ? line::SerialSettings::Parity::odd
               : cell.serial.parity == "even" ? line::SerialSettings::Parity::even
                                              : line::SerialSettings::Parity::none;
    s.stop_bits = cell.serial.stop_bits == 2 ? line::SerialSettings::StopBits::two
                                             : line::SerialSettings::StopBits::one;
    s.data_bits = cell.serial.data_bits;
    return std::make_unique<line::LineController>(line::make_serial_transport(s), cell.timeouts, limits);
  }
  if (cell.adapter == "modbus-tcp" || cell.adapter == "modbus-rtu")
    return std::make_unique<modbus::ModbusController>(cell);
  if (cell.adapter == "inprocess-sim")
    return make_inprocess_controller(cell, config::load_truth(cell.inprocess_truth));
  throw std::invalid_argument("unknown controller adapter \"" + cell.adapter + "\"");
}

std::unique_ptr<controller::Controller> make_inprocess_controller(const controller::CellConfig& cell,
                                                                  const physics::Truth& truth) {
  sim::SimSettings settings;
  settings.watchdog_s = 1e9;  // simulated time races ahead of the host's heartbeats here
  auto sim = std::make_shared<sim::SimController>(truth, settings);
  // Its clock races ahead of the wall by design: only order and stream rate are checked, not the rate against
  // the wall.
  return std::make_unique<line::LineController>(
      std::make_unique<inprocess::LoopbackTransport>(sim), cell.timeouts,
      controller::Limits{cell.max_speed_kmh, cell.max_force_n, 1e9, false});
}

}  // namespace loadtrim::adapters
