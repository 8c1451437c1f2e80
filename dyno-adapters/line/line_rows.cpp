#include "line/line_rows.hpp"

#include "line/line_controller.hpp"
#include "link.hpp"

namespace loadtrim::line {

using adapters::SerialLine;
using adapters::TcpAddress;

adapters::Row tcp_row() {
  return {
      "line-tcp",
      [](config::TomlReader& r) -> std::any { return adapters::read_tcp_address(r); },
      [](const controller::CellConfig& cell) -> std::unique_ptr<controller::Controller> {
        const auto& a = std::any_cast<const TcpAddress&>(cell.adapter_settings);
        return std::make_unique<LineController>(
            make_tcp_transport(a.host, static_cast<unsigned short>(a.port)), cell.timeouts,
            adapters::cell_limits(cell));
      },
      [](const std::any& s) { return adapters::link_key(std::any_cast<const TcpAddress&>(s)); },
      [](std::any& s, const adapters::LinkOverrides& o) {
        if (o.port > 0) std::any_cast<TcpAddress&>(s).port = o.port;
      },
  };
}

adapters::Row serial_row() {
  return {
      "line-serial",
      [](config::TomlReader& r) -> std::any { return adapters::read_serial_line(r); },
      [](const controller::CellConfig& cell) -> std::unique_ptr<controller::Controller> {
        return std::make_unique<LineController>(
            make_serial_transport(std::any_cast<const SerialLine&>(cell.adapter_settings)), cell.timeouts,
            adapters::cell_limits(cell));
      },
      [](const std::any& s) { return adapters::link_key(std::any_cast<const SerialLine&>(s)); },
      [](std::any& s, const adapters::LinkOverrides& o) {
        if (!o.device.empty()) std::any_cast<SerialLine&>(s).device = o.device;
      },
  };
}

}  // namespace loadtrim::line
