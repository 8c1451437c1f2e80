// The framed ASCII registry rows: "framed-tcp" (controller.host, controller.port) and "framed-serial"
// (controller.device, baud, parity, stop_bits, data_bits), both with the [framed] command table. Their
// settings are a framed::Settings.
#pragma once

#include "adapter_row.hpp"

namespace loadtrim::framed {

adapters::Row tcp_row();
adapters::Row serial_row();

}  // namespace loadtrim::framed
