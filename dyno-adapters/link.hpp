// The two physical links the adapters share (line and Modbus alike): a TCP address or a serial line, each
// read from the cell file's [controller] keys by the adapter's registry row, with the same keys, ranges and
// messages for every adapter that uses it.
#pragma once

#include <string>

namespace loadtrim::config {
class TomlReader;
}

namespace loadtrim::adapters {

struct TcpAddress {
  std::string host = "127.0.0.1";
  unsigned port = 0;  // 1..65535 once read
};

struct SerialLine {
  std::string device;
  unsigned baud = 115200;
  enum class Parity { none, odd, even } parity = Parity::none;
  enum class StopBits { one, two } stop_bits = StopBits::one;
  unsigned data_bits = 8;  // 7 or 8
};

// controller.host (default 127.0.0.1) and controller.port (required, 1 to 65535); problems go to the reader.
TcpAddress read_tcp_address(config::TomlReader& r);
// controller.device (required), baud, parity, stop_bits, data_bits; problems go to the reader.
SerialLine read_serial_line(config::TomlReader& r);

// The cell lock's name for the link (app/cell_locks.hpp): one controller, one string, whichever adapter
// reaches it. "tcp-<address>-<port>" (the host resolved: every loopback name is "loopback", a mapped IPv4
// address is itself; docs/safety.md); "serial-<device, symlinks resolved>".
std::string link_key(const TcpAddress& a);
std::string link_key(const SerialLine& s);

}  // namespace loadtrim::adapters
