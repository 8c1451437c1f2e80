#include "modbus/modbus_rows.hpp"

#include "link.hpp"
#include "modbus/map_file.hpp"
#include "modbus/modbus_controller.hpp"

namespace loadtrim::modbus {

namespace {

std::unique_ptr<controller::Controller> make(const controller::CellConfig& cell) {
  return std::make_unique<ModbusController>(cell);
}

std::string key(const std::any& s) {
  return std::visit([](const auto& link) { return adapters::link_key(link); },
                    std::any_cast<const Settings&>(s).link);
}

void override_link(std::any& s, const adapters::LinkOverrides& o) {
  auto& link = std::any_cast<Settings&>(s).link;
  if (auto* tcp = std::get_if<adapters::TcpAddress>(&link); tcp && o.port > 0) tcp->port = o.port;
  if (auto* serial = std::get_if<adapters::SerialLine>(&link); serial && !o.device.empty())
    serial->device = o.device;
}

}  // namespace

adapters::Row tcp_row() {
  return {"modbus-tcp",
          [](config::TomlReader& r) -> std::any {
            Settings s;
            s.link = adapters::read_tcp_address(r);
            s.map = read_register_map(r);
            return s;
          },
          make, key, override_link};
}

adapters::Row rtu_row() {
  return {"modbus-rtu",
          [](config::TomlReader& r) -> std::any {
            Settings s;
            s.link = adapters::read_serial_line(r);
            s.map = read_register_map(r);
            return s;
          },
          make, key, override_link};
}

}  // namespace loadtrim::modbus
