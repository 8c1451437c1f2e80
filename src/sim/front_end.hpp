// What the simulator's byte-stream server (sim_server.hpp) drives: one front end per dialect over the
// dialect-neutral core (sim_controller.hpp). A front end turns request bytes into calls on the core and its
// answers into reply bytes, and says on each tick what the core did on its own (samples, fault events). Pure:
// no sockets, no clocks; wall time is passed in.
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "sim/sim_controller.hpp"

namespace loadtrim::sim {

class FrontEnd {
 public:
  virtual ~FrontEnd() = default;
  // Bytes from the client, in any chunks; whole replies are appended to `out`, one element per message.
  virtual void on_bytes(std::string_view bytes, double wall_s, std::vector<std::string>& out) = 0;
  // Advances simulated time and checks the watchdog: unsolicited messages go to `out`, and a line for the
  // simulator's operator for every fault latched goes to `notes`.
  virtual void tick(double sim_dt_s, double wall_s, std::vector<std::string>& out,
                    std::vector<std::string>& notes) = 0;
  // The client went away (the watchdog then looks after the rollers).
  virtual void on_disconnect() = 0;
  virtual SimController& core() = 0;
  // True once when the fault plan says the link must drop now.
  bool take_drop_request() { return core().take_drop_request(); }
  double delay_replies_ms() { return core().delay_replies_ms(); }
};

}  // namespace loadtrim::sim
