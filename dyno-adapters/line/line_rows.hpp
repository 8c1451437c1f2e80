// The line protocol's registry rows: "line-tcp" (controller.host, controller.port) and "line-serial"
// (controller.device, baud, parity, stop_bits, data_bits). Their settings are an adapters::TcpAddress and an
// adapters::SerialLine.
#pragma once

#include "adapter_row.hpp"

namespace loadtrim::line {

adapters::Row tcp_row();
adapters::Row serial_row();

}  // namespace loadtrim::line
