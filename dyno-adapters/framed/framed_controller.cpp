#include "framed/framed_controller.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "adapter_row.hpp"

namespace loadtrim::framed {

using controller::Result;
using Clock = std::chrono::steady_clock;

namespace {
std::unique_ptr<line::Transport> transport_for(const Settings& s) {
  if (const auto* tcp = std::get_if<adapters::TcpAddress>(&s.link))
    return line::make_tcp_transport(tcp->host, static_cast<unsigned short>(tcp->port));
  return line::make_serial_transport(std::get<adapters::SerialLine>(s.link));
}
controller::Mode to_mode(double v) {
  return static_cast<controller::Mode>(static_cast<int>(v));
}
// The modes a device may state in its reply to a command: the one commanded; a stop at standstill may end in
// idle at once, and free coast reads as idle (docs/framed.md).
bool mode_answers(controller::Mode commanded, controller::Mode stated) {
  using M = controller::Mode;
  switch (commanded) {
    case M::controlled_stop:
      return stated == M::controlled_stop || stated == M::idle;
    case M::free_coast:
      return stated == M::idle;
    default:
      return stated == commanded;
  }
}
}  // namespace

FramedController::FramedController(std::unique_ptr<line::Transport> transport, Table table,
                                   controller::Timeouts t, controller::Limits l)
    : Controller(t, l), transport_(std::move(transport)), table_(std::move(table)) {}

FramedController::FramedController(const controller::CellConfig& cell)
    : FramedController(transport_for(std::any_cast<const Settings&>(cell.adapter_settings)),
                       std::any_cast<const Settings&>(cell.adapter_settings).table, cell.timeouts,
                       adapters::cell_limits(cell)) {}

Result FramedController::do_connect(controller::Deadline d) {
  // dirty_ stays: on a serial line a late reply may still arrive after the port is opened again.
  do_disconnect();
  splitter_.reset();
  frames_.clear();
  return transport_->open(d);
}

void FramedController::do_disconnect() {
  if (transport_->is_open()) transport_->close();
  pacer_.stop();
}

Result FramedController::read_frames(controller::Deadline d) {
  std::string bytes;
  if (Result r = transport_->read_some(bytes, d); !r.ok()) return r;
  splitter_.feed(bytes, [&](std::string_view payload, bool noise) {
    if (noise) {
      ++stats_.lines_rejected;
      stats_.last_rejected = "bytes outside a frame, or a frame cut off or too long";
      return;
    }
    Decoded dd = decode_payload(payload, table_.checksum);
    if (!dd.ok()) {
      ++stats_.lines_rejected;
      stats_.last_rejected = dd.error + ": " + std::string(payload.substr(0, 80));
      return;
    }
    frames_.push_back(std::move(dd.words));
  });
  return Result::success();
}

Clock::duration FramedController::quiet_window() const {
  return std::clamp<Clock::duration>(timeouts().reply / 4, std::chrono::milliseconds(10),
                                     std::chrono::milliseconds(250));
}

Result FramedController::resync(controller::Deadline d, const std::string& before) {
  // Over TCP a new connection leaves a late reply on the old one; a serial port opened again may still
  // receive it, hence the quiet window too.
  transport_->close();
  splitter_.reset();
  frames_.clear();
  if (Result r = transport_->open(d); !r.ok()) return r;
  const auto quiet = quiet_window();
  auto last_bytes = Clock::now();
  std::size_t dropped = 0;
  for (;;) {
    const auto now = Clock::now();
    if (now - last_bytes >= quiet) break;
    if (now >= d)
      return Result::retry("replies still arriving after an earlier request timed out (" +
                           std::to_string(dropped) + " dropped); " + before + " not sent");
    const std::size_t frames_before = frames_.size();
    const auto rejected_before = stats_.lines_rejected;
    if (Result r = read_frames(std::min(d, last_bytes + quiet)); !r.ok()) return r;
    if (frames_.size() != frames_before || stats_.lines_rejected != rejected_before)
      last_bytes = Clock::now();
    for (const auto& f : frames_) {
      ++dropped;
      ++stats_.lines_rejected;
      stats_.last_rejected = "late reply " + f[0] + " (after its request timed out)";
    }
    frames_.clear();
  }
  splitter_.reset();  // a frame cut off by the quiet window is not a reply either
  dirty_ = false;
  return Result::success();
}

Result FramedController::transact(Op op, const Values& in, Values& out, controller::Deadline d) {
  const Command& c = table_[op];
  const std::string what = std::string(to_string(op)) + " (" + c.code + ")";
  if (!c.present)
    return Result::fail(std::string("the [framed] table maps no ") + to_string(op) + " command");
  if (!transport_->is_open()) return Result::retry("link not open");
  std::vector<std::string> words{c.code, std::to_string(table_.channel)};
  if (std::string e = encode_values(table_, c.request, in, words); !e.empty())
    return Result::fail("cannot send " + what + ": " + e);
  if (dirty_)
    if (Result r = resync(d, what); !r.ok()) return r;
  // One request at a time: whatever was read before this request is a late reply to an earlier one.
  for (const auto& f : frames_) {
    ++stats_.lines_rejected;
    stats_.last_rejected = "late reply " + f[0];
  }
  frames_.clear();
  // From here until its reply is read, a reply to this request may be on its way.
  dirty_ = true;
  if (Result r = transport_->write(encode_frame(words, table_.checksum), d); !r.ok()) return r;
  for (;;) {
    while (!frames_.empty()) {
      std::vector<std::string> w = std::move(frames_.front());
      frames_.erase(frames_.begin());
      if (w[0] != c.code) {
        ++stats_.lines_rejected;
        stats_.last_rejected = "reply " + w[0] + " while waiting for " + c.code;
        continue;
      }
      dirty_ = false;  // this request's reply: the link is in step again
      if (w.size() < 2 || w[1].size() != 1 || w[1][0] < '0' || w[1][0] > '9')
        return Result::fail("reply to " + what + " has no status digit");
      const int status = w[1][0] - '0';
      if (status != 0) {
        const std::string m = "controller refused " + what + " (status " + std::to_string(status) + ": " +
                              status_text(status) + ")";
        return status_retryable(status) ? Result::retry(m, status) : Result::fail(m, status);
      }
      const std::vector<std::string> values(w.begin() + 2, w.end());
      if (std::string e = decode_values(table_, c.reply, values, out); !e.empty())
        return Result::fail("reply to " + what + ": " + e);
      if (const std::uint64_t fresh = out.unmapped_flags & ~warned_bits_; fresh != 0) {
        warned_bits_ |= fresh;
        char hex[24];
        std::snprintf(hex, sizeof hex, "0x%llX", static_cast<unsigned long long>(fresh));
        warn("status_bits", std::string("the status word sets bits ") + hex + " (in the reply to " + what +
                                ") that [framed.flags] does not map (fault, estop, watchdog, limit, "
                                "at_setpoint): they are ignored");
      }
      return Result::success();
    }
    if (Clock::now() >= d) return Result::retry("no reply to " + what + " before the deadline");
    if (Result r = read_frames(d); !r.ok()) return r;
  }
}

Result FramedController::do_identify(controller::ControllerInfo& out, controller::Deadline d) {
  Values v;
  if (Result r = transact(Op::identify, {}, v, d); !r.ok()) return r;
  out.name = table_.name;
  out.protocol_version = 1;
  out.capabilities = "hold,hold-force,roadload,stop,stream,watchdog,status";
  if (table_[Op::force].present) out.capabilities += ",force";
  if (table_[Op::free].present) out.capabilities += ",free";
  out.roller_diameter_m = v.get(Qty::roller_diameter_m);
  out.base_inertia_kg = v.get(Qty::base_inertia_kg);
  out.max_speed_kmh = v.get(Qty::max_speed_kmh);
  out.max_force_n = v.get(Qty::max_force_n);
  out.time_scale = v.contains(Qty::time_scale) ? v.get(Qty::time_scale) : 1.0;
  return Result::success();
}

void FramedController::remember_resolution(double written, const std::vector<Field>& fields, Qty q) {
  for (const auto& f : fields)
    if (f.kind == Field::Kind::quantity && f.q == q) resolutions_.emplace_back(written, f.resolution());
}

Result FramedController::do_write_inertia(double kg, controller::Deadline d) {
  resolutions_.clear();
  Values in, out;
  in.set(Qty::inertia_kg, kg);
  remember_resolution(kg, table_[Op::write_inertia].request, Qty::inertia_kg);
  remember_resolution(kg, table_[Op::read_inertia].reply, Qty::inertia_kg);
  return transact(Op::write_inertia, in, out, d);
}

Result FramedController::do_read_inertia(double& kg, controller::Deadline d) {
  Values v;
  if (Result r = transact(Op::read_inertia, {}, v, d); !r.ok()) return r;
  kg = v.get(Qty::inertia_kg);
  return Result::success();
}

Result FramedController::do_write_coefficients(const core::RoadLoad& c, controller::Deadline d) {
  resolutions_.clear();
  Values in, out;
  const std::pair<Qty, double> qs[] = {
      {Qty::f0_n, c.f0_n}, {Qty::f1_n_per_kmh, c.f1_n_per_kmh}, {Qty::f2_n_per_kmh2, c.f2_n_per_kmh2}};
  for (const auto& [q, v] : qs) {
    in.set(q, v);
    remember_resolution(v, table_[Op::write_coefficients].request, q);
    remember_resolution(v, table_[Op::read_coefficients].reply, q);
  }
  return transact(Op::write_coefficients, in, out, d);
}

Result FramedController::do_read_coefficients(core::RoadLoad& c, controller::Deadline d) {
  Values v;
  if (Result r = transact(Op::read_coefficients, {}, v, d); !r.ok()) return r;
  c = {v.get(Qty::f0_n), v.get(Qty::f1_n_per_kmh), v.get(Qty::f2_n_per_kmh2)};
  return Result::success();
}

double FramedController::readback_tolerance(double written) const {
  double tol = 1e-9 * std::max(1.0, std::abs(written));
  double step = 0.0;
  for (const auto& [value, half_count] : resolutions_)
    if (value == written) step += half_count;  // written with one field's counts, read back with another's
  return tol + step;
}

Result FramedController::do_command(controller::Mode mode, double value, controller::Deadline d) {
  Values in, out;
  Op op = Op::idle;
  switch (mode) {
    case controller::Mode::idle:
      op = Op::idle;
      break;
    case controller::Mode::speed_hold:
      op = Op::hold;
      in.set(Qty::speed_kmh, value);
      break;
    case controller::Mode::road_load:
      op = Op::roadload;
      break;
    case controller::Mode::controlled_stop:
      op = Op::stop;
      break;
    case controller::Mode::constant_force:
      op = Op::force;
      in.set(Qty::force_n, value);
      break;
    case controller::Mode::free_coast:
      op = Op::free;
      break;
  }
  if (Result r = transact(op, in, out, d); !r.ok()) return r;
  // The reply's mode is the device's word on what it now does: another mode is not this command's answer
  // (a late reply to an earlier command) or a command not carried out.
  if (out.contains(Qty::mode) && !mode_answers(mode, to_mode(out.get(Qty::mode))))
    return Result::fail(std::string("the reply to ") + to_string(op) + " (" + table_[op].code +
                        ") states mode " + controller::to_string(to_mode(out.get(Qty::mode))) + ", not the " +
                        controller::to_string(mode) + " commanded");
  return Result::success();
}

Result FramedController::do_stream(double rate_hz, controller::Deadline) {
  if (rate_hz > 0.0)
    pacer_.start();
  else
    pacer_.stop();
  return Result::success();
}

Result FramedController::do_receive_samples(std::vector<controller::Sample>& out, controller::Deadline d) {
  // A deadline already passed (the controller layer collecting what was read before a command's
  // acknowledgement) leaves no time for a reply: no poll then, or its reply would come late.
  if (Clock::now() >= d || !pacer_.wait_turn(d, table_.poll_rate_hz)) return Result::success();
  // A poll due by `d` is one request with its own deadline: timeouts.reply_ms for its reply from when it is
  // sent, after the quiet window when the link must be brought back in step first (docs/framed.md), however
  // short the slice the caller waits in (the controller layer slices its waits at the heartbeat interval,
  // which is shorter than a slow device's reply). One request at a time: no heartbeat can go out meanwhile.
  const auto own = Clock::now() + timeouts().reply + (dirty_ ? quiet_window() : Clock::duration::zero());
  Values v;
  if (Result r = transact(Op::sample, {}, v, own); !r.ok()) return r;
  if (!v.contains(Qty::time_s))  // validate() requires it; never the host's clock in its place
    return Result::fail("the sample reply carries no time_s (framed.ops.sample.reply)");
  controller::Sample s;
  s.speed_kmh = v.get(Qty::speed_kmh);
  s.force_n = v.get(Qty::force_n);
  s.mode = to_mode(v.get(Qty::mode));
  s.flags = static_cast<std::uint32_t>(v.get(Qty::flags));
  s.time_s = v.get(Qty::time_s);
  // A reply with the time of the last one (a device answering each request twice and so one poll behind, a
  // time field coarser than the poll period) is handed up as it is: the controller layer drops it as no new
  // sample after its clock guard has seen it (a frozen clock must read as one, not as a gap).
  s.index = index_++;
  out.push_back(s);
  return Result::success();
}

Result FramedController::do_heartbeat(controller::Deadline d) {
  Values v;
  return transact(Op::heartbeat, {}, v, d);
}

Result FramedController::do_status(controller::StatusReport& out, controller::Deadline d) {
  Values v;
  if (Result r = transact(Op::status, {}, v, d); !r.ok()) return r;
  out.mode = to_mode(v.get(Qty::mode));
  out.speed_kmh = v.get(Qty::speed_kmh);
  out.flags = static_cast<std::uint32_t>(v.get(Qty::flags));
  if (v.contains(Qty::time_s)) out.time_s = v.get(Qty::time_s);
  out.fault = adapters::fault_name(out.flags);
  return Result::success();
}

Result FramedController::do_clear_fault(controller::Deadline d) {
  Values v;
  return transact(Op::clear_fault, {}, v, d);
}

}  // namespace loadtrim::framed
