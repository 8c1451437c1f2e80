// The Modbus registry rows: "modbus-tcp" (controller.host, controller.port) and "modbus-rtu"
// (controller.device, baud, parity, stop_bits, data_bits), both with the [modbus] register map. Their
// settings are a modbus::Settings.
#pragma once

#include "adapter_row.hpp"

namespace loadtrim::modbus {

adapters::Row tcp_row();
adapters::Row rtu_row();

}  // namespace loadtrim::modbus
