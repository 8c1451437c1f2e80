#include "framed/framed_rows.hpp"

#include "framed/framed_controller.hpp"
#include "link.hpp"

namespace loadtrim::framed {

namespace {

std::unique_ptr<controller::Controller> make(const controller::CellConfig& cell) {
  return std::make_unique<FramedController>(cell);
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
  return {"framed-tcp",
          [](config::TomlReader& r) -> std::any {
            Settings s;
            s.link = adapters::read_tcp_address(r);
            s.table = read_table(r);
            return s;
          },
          make, key, override_link};
}

adapters::Row serial_row() {
  return {"framed-serial",
          [](config::TomlReader& r) -> std::any {
            Settings s;
            s.link = adapters::read_serial_line(r);
            s.table = read_table(r);
            return s;
          },
          make, key, override_link};
}

}  // namespace loadtrim::framed
