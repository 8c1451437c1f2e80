// A scripted lying Modbus TCP controller for tests: an in-process proxy on 127.0.0.1 (ephemeral port) between
// the tool and loadtrim-sim's Modbus server. It knows the register map, so it reads every reply as the tool
// will (the time, speed, mode and status registers) and, from a trigger onwards, tells ONE scripted lie: it
// alters those registers in read replies, answers requests with Modbus exceptions itself, holds replies back
// or delivers them byte by byte. It records the command codes the tool wrote, so a test can ask "was the stop
// commanded after the lie began?". The line protocol's proxy (lying_proxy.hpp) is its twin; the lies are the
// same where the dialects allow.
//
// Frames: Modbus TCP (MBAP header: transaction id, protocol id 0, length, unit id; then the PDU), requests
// matched to replies by transaction id; or Modbus RTU over pseudo-terminals (unit id, PDU, CRC-16), one
// request at a time. Threads: one worker (poll on non-blocking sockets), joined in the
// destructor. The lie state is the proxy's, not a connection's: a tool that reconnects meets the same liar.
#pragma once

#include <chrono>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "modbus/register_map.hpp"

namespace loadtrim::testing {

enum class ModbusLie : std::uint8_t {
  none,             // transparent
  clock_frozen,     // the time register keeps the value it had when the lie began
  clock_backwards,  // the time register steps back 100 s once, then runs on from there
  clock_reset,      // the time register restarts from 0 (a controller that restarted; the counter is far from
                    // its limit, so this is no wrap)
  clock_jumps_ahead,  // the time register steps ahead 1000 s once, then runs on from there
  clock_runs_fast,    // the time register runs 10x faster from the trigger on
  fault_flag,         // status |= 0x02 (emergency stop)
  at_limit,           // status |= 0x08 (at a limit)
  undefined_bits,     // status |= 0x40 (a bit the map does not define)
  over_speed,         // speed x 1.5 while the mode register reads speed hold and the speed is above 100 km/h
  busy_sometimes,     // every 5th request answered with exception 06 (server busy), not forwarded
  busy_always,        // every request answered with exception 06
  gateway_always,     // every request answered with exception 0B (gateway target failed to respond)
  illegal_address,    // one request answered with exception 02 (illegal data address)
  trickle,            // tool-bound bytes delivered one per 150 ms
  silence,            // requests still reach the controller; no reply reaches the tool
  late_reply,  // RTU: the first reply to a read of the mode register held back 1.5 s, then delivered (after
               // the tool's reply timeout: when it has asked something else)
};
const char* to_string(ModbusLie lie);

struct ModbusTrigger {
  bool at_start = true;
  int mode_code = 0;     // the mode register's value (1 speed hold, 2 road load)...
  double after_s = 0.0;  // ...held for this long in the controller's time register
  static ModbusTrigger start() { return {}; }
  static ModbusTrigger in_mode(int code, double after_s) { return {false, code, after_s}; }
};
std::string describe(const ModbusTrigger& t);

struct ModbusProxyStats {
  int connections = 0;
  std::uint64_t requests = 0, replies = 0;
  std::uint64_t values_altered = 0;   // register values changed in replies
  std::uint64_t exceptions_sent = 0;  // replies the proxy made up
  std::uint64_t replies_dropped = 0;  // silence
  // The busy and gateway lies: for each run of consecutive identical requests (the transaction id aside) the
  // proxy answered with an exception, how many there were: 1 + the retries the tool sent (the first 64 runs).
  std::vector<int> exception_runs;
  // For each of those runs, the request's function code and first address (what was asked).
  std::vector<std::pair<int, int>> exception_run_requests;
  std::uint64_t late_replies_delivered = 0;  // late_reply: held-back replies sent on to the tool
};

class ModbusLyingProxy {
 public:
  // Listens on 127.0.0.1 at an ephemeral port; each connection is forwarded to 127.0.0.1:controller_port.
  // Throws std::runtime_error when it cannot listen.
  ModbusLyingProxy(unsigned short controller_port, modbus::RegisterMap map, ModbusLie lie,
                   ModbusTrigger trigger);
  // Modbus RTU: two pseudo-terminal pairs the proxy opens itself, the tool on one (tool_device()), the
  // controller (loadtrim-sim --modbus-rtu) on the other (controller_device()); frames are told apart by their
  // function code's length and carry a recomputed CRC when altered. Throws std::runtime_error without ptys.
  ModbusLyingProxy(modbus::RegisterMap map, ModbusLie lie, ModbusTrigger trigger);
  const std::string& tool_device() const;
  const std::string& controller_device() const;
  ~ModbusLyingProxy();
  ModbusLyingProxy(const ModbusLyingProxy&) = delete;
  ModbusLyingProxy& operator=(const ModbusLyingProxy&) = delete;

  unsigned short port() const;
  bool lie_began() const;
  std::optional<std::chrono::steady_clock::time_point> lie_began_at() const;
  // Whether the tool wrote `code` to the command register at all / after the lie began.
  bool commanded(int code) const;
  bool commanded_after_lie(int code) const;
  ModbusProxyStats stats() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace loadtrim::testing
