// The line-protocol adapter: one protocol engine over any Transport (TCP, serial, or an in-process loopback
// to the simulated controller). Implements the Controller hooks; see docs/protocol.md for the messages.
#pragma once

#include <deque>
#include <memory>
#include <string>
#include <vector>

#include "controller/controller.hpp"
#include "line/line_protocol.hpp"
#include "line/transport.hpp"

namespace loadtrim::line {

class LineController : public controller::Controller {
 public:
  LineController(std::unique_ptr<Transport> transport, controller::Timeouts t, controller::Limits l);
  ~LineController() override;
  std::string describe() const { return transport_->describe(); }
  // Bounds on what is kept between calls: a flooding controller loses its oldest lines, never the tool its
  // memory. Samples: 10 s of the stream (at least 65,536), enough for any reply the tool waits for behind
  // queued samples.
  static constexpr std::size_t kMaxEvents = 256, kMaxReplies = 64, kMinSampleBound = 65536;
  static constexpr double kSampleBoundWallS = 10.0;

 protected:
  Result do_connect(Deadline d) override;
  void do_disconnect() override;
  Result do_identify(controller::ControllerInfo& out, Deadline d) override;
  Result do_write_inertia(double kg, Deadline d) override;
  Result do_read_inertia(double& kg, Deadline d) override;
  Result do_write_coefficients(const core::RoadLoad& c, Deadline d) override;
  Result do_read_coefficients(core::RoadLoad& c, Deadline d) override;
  Result do_command(controller::Mode mode, double hold_kmh, Deadline d) override;
  Result do_stream(double rate_hz, Deadline d) override;
  Result do_receive_samples(std::vector<controller::Sample>& out, Deadline d) override;
  Result do_heartbeat(Deadline d) override;
  Result do_status(controller::StatusReport& out, Deadline d) override;
  Result do_clear_fault(Deadline d) override;
  Result do_prompt_driver(controller::DriverPrompt p, double speed_kmh, Deadline d) override;
  // The protocol carries the driver display (DRIVER); whether this controller has one, IDENT's "driver".
  std::string driver_prompt_unavailable() const override { return ""; }
  void do_take_events(std::vector<std::string>& out) override;
  void on_stream_rate(double samples_per_wall_s) override;

 private:
  // Sends a request and waits for its OK/ERR, handling every other line that arrives meanwhile.
  Result request(const std::string& verb, std::vector<std::string> fields, Message& reply, Deadline d);
  // Reads once from the transport and handles the complete lines; `reply_seq` set when a reply arrived.
  Result pump(Deadline d);
  void handle_line(std::string_view line, bool too_long);
  std::unique_ptr<Transport> transport_;
  LineSplitter splitter_;
  std::string inbox_;
  std::uint32_t next_seq_ = 1;
  bool have_peer_seq_ = false;
  std::uint32_t expected_peer_seq_ = 0;
  std::deque<Message> replies_;
  std::deque<controller::Sample> samples_;
  std::size_t max_samples_ = kMinSampleBound;
  std::deque<std::string> events_;
  std::string hello_caps_;  // the capabilities HELLO's reply stated
};

bool parse_mode(std::string_view wire, controller::Mode& out);
const char* wire_mode(controller::Mode m);
// An SMP message to a sample; false when malformed.
bool parse_sample(const Message& m, controller::Sample& out);

}  // namespace loadtrim::line
