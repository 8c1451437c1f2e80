// The simulator's framed ASCII front end (docs/framed.md) over the dialect-neutral core: serves the command
// table of a cell file's [framed] section (loadtrim-sim --framed-table), so the adapter and the simulator
// read the same table. Requests are matched to an operation by code, field count and literals; refusals of
// the core become status digits. Faults latched by the core are seen by the tool in the status word of the
// next sample or status reply (the dialect has no unsolicited messages). A polled dialect reads the state at
// the moment of the request: simulated time first catches up with the request's wall time (at the settings'
// time scale), so two polls never read the same instant. Pure: bytes and wall time in.
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "framed/framed_dialect.hpp"
#include "sim/front_end.hpp"

namespace loadtrim::sim {

// A refusal's cause as the framed dialect's status digit (docs/framed.md section 1).
int framed_status(Cause c);

class FramedFrontEnd : public FrontEnd {
 public:
  FramedFrontEnd(const physics::Truth& truth, SimSettings settings, framed::Table table);

  void on_bytes(std::string_view bytes, double wall_s, std::vector<std::string>& out) override;
  void tick(double sim_dt_s, double wall_s, std::vector<std::string>& out,
            std::vector<std::string>& notes) override;
  void on_disconnect() override;
  SimController& core() override { return sim_; }

 private:
  void on_payload(std::string_view payload, double wall_s, std::vector<std::string>& out);
  void send(std::vector<std::string> words, std::vector<std::string>& out);
  void reply(const std::string& code, int status, std::vector<std::string>& out);
  void catch_up(double wall_s);  // advances simulated time to this wall time

  SimController sim_;
  framed::Table table_;
  framed::FrameSplitter splitter_;
  std::uint64_t frames_sent_ = 0;
  double last_wall_s_ = 0.0;
  std::vector<FaultEvent> events_;  // fault events latched, said on the next tick
};

}  // namespace loadtrim::sim
