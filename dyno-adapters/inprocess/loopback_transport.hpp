// An in-process transport to the simulated controller's front end: the same line protocol and the same engine
// as over TCP, without a socket or a second process. Simulated time advances only as the tool reads, in steps
// of `chunk_s`, so it runs as fast as the host allows (benchmarks, fast tests). The heartbeat watchdog is
// measured in simulated time here, so give it a window longer than any wait.
#pragma once

#include <memory>

#include "line/transport.hpp"
#include "sim/line_front_end.hpp"

namespace loadtrim::inprocess {

class LoopbackTransport : public line::Transport {
 public:
  LoopbackTransport(std::shared_ptr<sim::LineFrontEnd> sim, double chunk_s = 0.05)
      : sim_(std::move(sim)), chunk_s_(chunk_s) {}
  controller::Result open(controller::Deadline) override;
  void close() override;
  bool is_open() const override { return open_; }
  controller::Result write(std::string_view bytes, controller::Deadline) override;
  controller::Result read_some(std::string& out, controller::Deadline) override;
  std::string describe() const override { return "in-process simulated controller"; }
  sim::SimController& sim() { return sim_->core(); }

 private:
  std::shared_ptr<sim::LineFrontEnd> sim_;
  double chunk_s_;
  bool open_ = false;
  line::LineSplitter splitter_;
  std::string pending_;
};

}  // namespace loadtrim::inprocess
