// The simulated controller as a Modbus server (libmodbus): TCP on 127.0.0.1 (port 0 = a free one, printed) or
// RTU on a serial device (e.g. one end of a socat pseudo-terminal pair), serving the register map of a cell
// file from the same typed simulator core as the line protocol. Setpoints take effect when the strobe is
// raised; the strobe is then cleared and the error register holds 0 or the refusal's code; the applied-value
// registers report what the simulated controller runs. The watchdog watches the heartbeat counter: only a
// change of its value is a sign of life (a master writing the same value, or only reading, lets it trip).
#pragma once

#include <functional>
#include <string>

#include "modbus/register_map.hpp"
#include "sim/line_front_end.hpp"
#include "sim/sim_server.hpp"

namespace loadtrim::sim {

// A refusal's cause as the value of the error register after a strobe: the line protocol's error code
// (docs/modbus.md, register "error"; the codes are docs/protocol.md section 10).
inline int modbus_error_code(Cause c) {
  return static_cast<int>(line_error_code(c));
}

// The watchdog's view of the heartbeat register: a sign of life only when its value changed since the last
// look (a counter the master increments). A master that writes the same value forever, or only reads, is
// silent to it.
class HeartbeatWatch {
 public:
  explicit HeartbeatWatch(double initial) : last_(initial) {}
  // Whether `value` differs from the value seen last (and remembers it).
  bool changed(double value) {
    if (value == last_) return false;
    last_ = value;
    return true;
  }

 private:
  double last_;
};

struct ModbusOptions {
  std::string rtu_device;  // "" = Modbus TCP
  // The controller had been running this long when the simulation starts: its time register counts from
  // here, and an integer one wraps at its period (modbus::counter_period_s) as a real counter does.
  double clock_offset_s = 0.0;
  // A lie, for tests: every coefficient setting after the first is acknowledged (strobe cleared, error 0, the
  // setpoint registers keep what was written) but never applied; the applied-value registers keep reporting
  // the first.
  bool coefficients_not_applied = false;
  // A lie, for tests: every driver prompt is acknowledged (strobe cleared, error 0) but not shown: the driver
  // is not prompted and the prompt registers read back what the display showed before.
  bool prompt_not_shown = false;
  // A fault, for tests: the status register also sets these bits always (e.g. 0x40, one the map does not
  // define), whatever the simulated controller's own flags.
  unsigned extra_status_bits = 0;
};

int run_modbus_server(const physics::Truth& truth, const SimSettings& sim, const ServerSettings& server,
                      const modbus::RegisterMap& map, const ModbusOptions& options,
                      const std::function<void(const std::string&)>& announce);

}  // namespace loadtrim::sim
