#include "modbus/modbus_rows.hpp"

#include "link.hpp"
#include "modbus/map_file.hpp"
#include "modbus/modbus_controller.hpp"

namespace loadtrim::modbus {

namespace {

std::unique_ptr<controller::Controller> make(const controller::CellConfig& cell) {
  return std::make_unique<ModbusController>(cell);
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
          make, adapters::variant_link_key<Settings>, adapters::override_variant_link<Settings>};
}

adapters::Row rtu_row() {
  return {"modbus-rtu",
          [](config::TomlReader& r) -> std::any {
            Settings s;
            s.link = adapters::read_serial_line(r);
            s.map = read_register_map(r);
            return s;
          },
          make, adapters::variant_link_key<Settings>, adapters::override_variant_link<Settings>};
}

}  // namespace loadtrim::modbus
