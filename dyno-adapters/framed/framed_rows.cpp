#include "framed/framed_rows.hpp"

#include "framed/framed_controller.hpp"
#include "link.hpp"

namespace loadtrim::framed {

namespace {

std::unique_ptr<controller::Controller> make(const controller::CellConfig& cell) {
  return std::make_unique<FramedController>(cell);
}

}  // namespace

adapters::Row tcp_row() {
  return {"framed-tcp",
          [](config::TomlReader& r) -> std::any {
            Settings s;
            s.link = adapters::read_tcp_address(r);
            s.table = read_table(r);
            return s;
          },
          make, adapters::variant_link_key<Settings>, adapters::override_variant_link<Settings>};
}

adapters::Row serial_row() {
  return {"framed-serial",
          [](config::TomlReader& r) -> std::any {
            Settings s;
            s.link = adapters::read_serial_line(r);
            s.table = read_table(r);
            return s;
          },
          make, adapters::variant_link_key<Settings>, adapters::override_variant_link<Settings>};
}

}  // namespace loadtrim::framed
