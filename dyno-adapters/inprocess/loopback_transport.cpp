#include "inprocess/loopback_transport.hpp"

namespace loadtrim::inprocess {

using controller::Result;

Result LoopbackTransport::open(controller::Deadline) {
  open_ = true;
  pending_.clear();
  splitter_ = line::LineSplitter{};
  return Result::success();
}

void LoopbackTransport::close() {
  if (open_) sim_->on_disconnect();
  open_ = false;
  pending_.clear();
}

Result LoopbackTransport::write(std::string_view bytes, controller::Deadline) {
  if (!open_) return Result::retry("link not open");
  std::vector<std::string> out;
  splitter_.feed(bytes, [&](std::string_view l, bool) { sim_->on_line(l, sim_->time_s(), out); });
  for (auto& s : out) pending_ += s;
  return Result::success();
}

Result LoopbackTransport::read_some(std::string& out, controller::Deadline) {
  if (!open_) return Result::retry("link not open");
  if (pending_.empty()) {
    std::vector<std::string> lines;
    sim_->advance(chunk_s_, lines);
    sim_->check_watchdog(sim_->time_s(), lines);
    for (auto& s : lines) pending_ += s;
    if (sim_->take_drop_request()) {
      close();
      return Result::retry("connection closed by the controller (in-process)");
    }
  }
  out += pending_;
  pending_.clear();
  return Result::success();
}

}  // namespace loadtrim::inprocess
