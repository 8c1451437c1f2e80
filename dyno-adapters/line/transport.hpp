// Byte transports under the line protocol engine: TCP (Asio) and serial (Asio serial_port), each call bounded
// by a deadline. The engine never sees which one it has.
#pragma once

#include <memory>
#include <string>
#include <string_view>

#include "controller/controller.hpp"
#include "link.hpp"

namespace loadtrim::line {

using controller::Deadline;
using controller::Result;

class Transport {
 public:
  virtual ~Transport() = default;
  virtual Result open(Deadline d) = 0;
  virtual void close() = 0;
  virtual bool is_open() const = 0;
  virtual Result write(std::string_view bytes, Deadline d) = 0;
  // Appends what arrives before the deadline (possibly nothing: ok with no bytes is a timeout). A closed or
  // failed link is retryable.
  virtual Result read_some(std::string& append_to, Deadline d) = 0;
  virtual std::string describe() const = 0;
};

// The serial line as the cell file gives it (shared with the Modbus RTU adapter).
using SerialSettings = adapters::SerialLine;

std::unique_ptr<Transport> make_tcp_transport(std::string host, unsigned short port);
std::unique_ptr<Transport> make_serial_transport(SerialSettings settings);

}  // namespace loadtrim::line
