#include "link.hpp"

#include <filesystem>

#include "config/toml_reader.hpp"

namespace loadtrim::adapters {

TcpAddress read_tcp_address(config::TomlReader& r) {
  TcpAddress a;
  a.host = r.string_or("controller.host", "127.0.0.1");
  a.port = static_cast<unsigned>(r.integer_or("controller.port", 0, 1, 65535));
  // integer_or accepts a missing key (it is optional for the reader); an address without a port is not.
  if (!r.has("controller.port")) r.error("controller.port", "is missing, allowed 1 to 65535");
  return a;
}

SerialLine read_serial_line(config::TomlReader& r) {
  SerialLine s;
  s.device = r.string("controller.device");
  s.baud = static_cast<unsigned>(r.integer_or("controller.baud", 115200, 1200, 4000000));
  const std::string parity = r.choice("controller.parity", {"none", "odd", "even"}, std::string("none"));
  s.parity = parity == "odd"    ? SerialLine::Parity::odd
             : parity == "even" ? SerialLine::Parity::even
                                : SerialLine::Parity::none;
  s.stop_bits = r.integer_or("controller.stop_bits", 1, 1, 2) == 2 ? SerialLine::StopBits::two
                                                                   : SerialLine::StopBits::one;
  s.data_bits = static_cast<unsigned>(r.integer_or("controller.data_bits", 8, 7, 8));
  return s;
}

std::string link_key(const TcpAddress& a) {
  return "tcp-" + a.host + "-" + std::to_string(a.port);
}

std::string link_key(const SerialLine& s) {
  // Two names of one port (a udev symlink and the device node) must take the same lock.
  std::error_code ec;
  const std::filesystem::path real = std::filesystem::weakly_canonical(s.device, ec);
  return "serial-" + (ec ? s.device : real.string());
}

}  // namespace loadtrim::adapters
