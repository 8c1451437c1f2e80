// The simulator's line-protocol front end (docs/protocol.md) over the dialect-neutral core: request lines in,
// encoded reply, SMP and EVT lines out, with the line-level faults of the plan (corrupted lines, refused
// verbs). Pure: the server (sim_server.hpp) or an in-process loopback passes bytes and wall time in.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "line/line_protocol.hpp"
#include "sim/front_end.hpp"

namespace loadtrim::sim {

// A refusal's cause as the line protocol's error code (docs/protocol.md section 10).
line::ErrorCode line_error_code(Cause c);
// A latched fault as the fields of the EVT line that tells it (docs/protocol.md section 9): FAULT,
// kind=<WATCHDOG|ESTOP>, detail=<words joined by _>, time_s=<simulated s>.
std::vector<std::string> line_event_fields(const FaultEvent& e);

class LineFrontEnd : public FrontEnd {
 public:
  LineFrontEnd(const physics::Truth& truth, SimSettings settings);

  void on_bytes(std::string_view bytes, double wall_s, std::vector<std::string>& out) override;
  void tick(double sim_dt_s, double wall_s, std::vector<std::string>& out,
            std::vector<std::string>& notes) override;
  void on_disconnect() override;
  SimController& core() override { return sim_; }

  // One request line (without '\n'); the encoded reply lines are appended to out.
  void on_line(std::string_view line, double wall_s, std::vector<std::string>& out);
  // Advances simulated time, appending SMP (and EVT) lines at the stream rate.
  void advance(double sim_dt_s, std::vector<std::string>& out);
  // Checks the heartbeat watchdog against the wall clock the caller passes.
  void check_watchdog(double wall_s, std::vector<std::string>& out);
  double time_s() const { return sim_.time_s(); }

 private:
  void reply_ok(std::uint32_t req, const std::string& verb, std::vector<std::string> fields,
                std::vector<std::string>& out);
  void reply_err(std::uint32_t req, line::ErrorCode code, const std::string& text,
                 std::vector<std::string>& out);
  void send(line::Message m, std::vector<std::string>& out);
  void send_events(const std::vector<FaultEvent>& events, std::vector<std::string>& out);

  SimController sim_;
  line::LineSplitter splitter_;
  std::uint32_t seq_ = 0;
  std::uint64_t lines_sent_ = 0;
  bool hello_ = false;
};

}  // namespace loadtrim::sim
