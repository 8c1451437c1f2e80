// The simulated controller's I/O: serves the line protocol on TCP (127.0.0.1 by default, port 0 = any free
// one) or on a pseudo-terminal for any byte-stream dialect's front end (front_end.hpp: the line protocol, the
// framed ASCII dialect), drives it from a wall-clock tick at a chosen time scale, and applies the link faults
// (drop, delayed replies). Single-threaded Asio.
#pragma once

#include <functional>
#include <string>

#include "sim/front_end.hpp"

namespace loadtrim::sim {

struct ServerSettings {
  std::string bind = "127.0.0.1";
  unsigned short port = 0;
  bool pty = false;
  double time_scale = 1.0;    // simulated seconds per wall second
  double exit_after_s = 0.0;  // wall seconds; 0 = run until SIGTERM/SIGINT
};

// Runs until stopped. `announce` receives the one line that says where it listens (announce.hpp), then a line
// for every fault the controller latches.
int run_server(FrontEnd& front_end, const ServerSettings& server,
               const std::function<void(const std::string&)>& announce);
// The line protocol's front end (line_front_end.hpp) over a new core.
int run_server(const physics::Truth& truth, const SimSettings& sim, const ServerSettings& server,
               const std::function<void(const std::string&)>& announce);

}  // namespace loadtrim::sim
