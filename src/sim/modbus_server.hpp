// The simulated controller as a Modbus server (libmodbus): TCP on 127.0.0.1 (port 0 = a free one, printed) or
// RTU on a serial device (e.g. one end of a socat pseudo-terminal pair), serving the register map of a cell
// file from the same typed simulator core as the line protocol. Setpoints take effect when the strobe is
// raised; the strobe is then cleared and the error register holds 0 or the refusal's code. The watchdog
// watches the heartbeat counter.
#pragma once

#include <functional>
#include <string>

#include "modbus/register_map.hpp"
#include "sim/sim_server.hpp"

namespace loadtrim::sim {

int run_modbus_server(const physics::Truth& truth, const SimSettings& sim, const ServerSettings& server,
                      const modbus::RegisterMap& map, const std::string& rtu_device,
                      const std::function<void(const std::string&)>& announce);

}  // namespace loadtrim::sim
