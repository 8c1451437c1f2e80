// The framed ASCII adapter (docs/framed.md) behind the controller interface: one request at a time, each a
// frame built from the cell file's command table (framed_dialect.hpp), its reply read within the hook's
// deadline. Samples are polled with the table's `sample` command at framed.poll_rate_hz (streamed() is
// false) and timed by the controller's clock (the table's time_s); faults are seen in the status word of
// every sample. Runs over the line adapter's byte transports (TCP or a serial line).
//
// Replies carry no sequence number, so a reply that comes after its request timed out could be taken for the
// answer to the next request with the same code. After any request that got no reply in time the link is
// dirty: before the next request the adapter opens the link again (over TCP the late reply stays on the old
// connection) and drops whatever arrives until the link has been quiet for a quarter of the reply timeout
// (10 to 250 ms; a serial line opened again may still receive it), all within that request's deadline; a
// link that does not fall quiet fails the request as retryable. A reply that states a mode must state one
// the command leads to (the last guard against a reply later than the quiet window).
#pragma once

#include <chrono>
#include <memory>
#include <string>
#include <variant>
#include <vector>

#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "framed/framed_dialect.hpp"
#include "line/transport.hpp"
#include "link.hpp"
#include "poller.hpp"

namespace loadtrim::framed {

// The adapter's settings (CellConfig::adapter_settings of a framed-tcp or framed-serial cell): the link from
// the [controller] keys and the command table from [framed].
struct Settings {
  std::variant<adapters::TcpAddress, adapters::SerialLine> link;
  Table table;
};

class FramedController : public controller::Controller {
 public:
  FramedController(std::unique_ptr<line::Transport> transport, Table table, controller::Timeouts t,
                   controller::Limits l);
  // A cell whose adapter_settings are a framed::Settings (std::bad_any_cast otherwise).
  explicit FramedController(const controller::CellConfig& cell);

 protected:
  controller::Result do_connect(controller::Deadline d) override;
  void do_disconnect() override;
  controller::Result do_identify(controller::ControllerInfo& out, controller::Deadline d) override;
  controller::Result do_write_inertia(double kg, controller::Deadline d) override;
  controller::Result do_read_inertia(double& kg, controller::Deadline d) override;
  controller::Result do_write_coefficients(const core::RoadLoad& c, controller::Deadline d) override;
  controller::Result do_read_coefficients(core::RoadLoad& c, controller::Deadline d) override;
  controller::Result do_command(controller::Mode mode, double value, controller::Deadline d) override;
  controller::Result do_stream(double rate_hz, controller::Deadline d) override;
  controller::Result do_receive_samples(std::vector<controller::Sample>& out,
                                        controller::Deadline d) override;
  bool streamed() const override { return false; }  // polled at framed.poll_rate_hz
  controller::Result do_heartbeat(controller::Deadline d) override;
  controller::Result do_status(controller::StatusReport& out, controller::Deadline d) override;
  controller::Result do_clear_fault(controller::Deadline d) override;
  // Warnings (once each): status-word bits the table does not map.
  double polled_rate_hz() const override { return table_.poll_rate_hz; }
  // The framed dialect's table has no operation for a driver display (docs/framed.md).
  std::string driver_prompt_unavailable() const override {
    return "the framed dialect's table maps no driver display";
  }
  // A scaled field carries whole counts: a read-back may differ from the value written by half a count of
  // the field that carried it (and by nothing more).
  double readback_tolerance(double written) const override;

 private:
  // Sends the operation's request with these values and reads its reply's values, within the deadline.
  controller::Result transact(Op op, const Values& in, Values& out, controller::Deadline d);
  // Reads what is on the link into frames_ (until the deadline or the first bytes).
  controller::Result read_frames(controller::Deadline d);
  // After a timeout: opens the link again and drops what arrives until it is quiet (see above).
  controller::Result resync(controller::Deadline d, const std::string& before);
  // How long the link must stay quiet before a request after a timeout: a quarter of the reply timeout, 10 to
  // 250 ms.
  std::chrono::steady_clock::duration quiet_window() const;
  void remember_resolution(double written, const std::vector<Field>& fields, Qty q);
  std::unique_ptr<line::Transport> transport_;
  Table table_;
  FrameSplitter splitter_;
  std::vector<std::vector<std::string>> frames_;  // complete reply frames read, not yet taken
  bool dirty_ = false;                            // a request timed out: its reply may still be on its way
  adapters::PollPacer pacer_;
  std::uint64_t index_ = 0;
  std::vector<std::pair<double, double>> resolutions_;  // (value written, half a count of its field)
  std::uint64_t warned_bits_ = 0;                       // unmapped status-word bits already warned about
};

}  // namespace loadtrim::framed
