#include "modbus/modbus_controller.hpp"

#include <modbus/modbus.h>
#include <sys/ioctl.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <thread>

#include "adapter_row.hpp"

namespace loadtrim::modbus {

using controller::Result;
using Clock = std::chrono::steady_clock;

ModbusController::ModbusController(Settings settings, controller::Timeouts t, controller::Limits l)
    : Controller(t, l), settings_(std::move(settings)), block_(sample_block(settings_.map)) {}

ModbusController::ModbusController(const controller::CellConfig& cell)
    : ModbusController(std::any_cast<const Settings&>(cell.adapter_settings), cell.timeouts,
                       adapters::cell_limits(cell)) {}

ModbusController::~ModbusController() {
  do_disconnect();
}

Result ModbusController::fail(const std::string& what, int e) {
  const std::string text = std::string(modbus_strerror(e));
  // Exceptions the controller answered with are its refusals (busy and gateway ones once the retry policy is
  // spent: busy stays a refusal, a gateway's is a timeout); timeouts and closed links are retryable.
  if (e > MODBUS_ENOBASE && e < MODBUS_ENOBASE + 12) {
    const int code = e - MODBUS_ENOBASE;
    const std::string m =
        what + ": Modbus exception " + std::to_string(code) + " from the controller: " + text;
    return code == 0x0A || code == 0x0B ? Result::retry(m, code) : Result::fail(m, code);
  }
  std::string m = what + ": " + text;
  if (e == ETIMEDOUT)
    m += " (no complete reply: the first byte is awaited timeouts.reply_ms = " +
         std::to_string(timeouts().reply.count()) + " ms, each next one modbus.byte_timeout_ms = " +
         std::to_string(std::min<long long>(settings_.map.retry.byte_timeout_ms, timeouts().reply.count())) +
         " ms)";
  // A serial device that went away (unplugged, its driver gone) is named by its path.
  if (const auto* line = std::get_if<adapters::SerialLine>(&settings_.link)) {
    std::error_code ec;
    m += std::filesystem::exists(line->device, ec) ? " (RTU device " + line->device + ")"
                                                   : " (the RTU device " + line->device + " is gone)";
  }
  return Result::retry(m);
}

template <class F>
Result ModbusController::transact(const std::string& what, F&& request) {
  const RetryPolicy& p = settings_.map.retry;
  const auto first = Clock::now();
  for (int attempt = 0;; ++attempt) {
    const auto t0 = Clock::now();
    errno = 0;
    const int rc = request();
    const int e = errno;
    if (rc >= 0) {
      // libmodbus bounds the first byte (response timeout) and each gap (byte timeout), not the whole reply:
      // a controller trickling its bytes is a link that does not answer in time.
      const auto took = std::chrono::duration_cast<std::chrono::milliseconds>(Clock::now() - t0);
      if (took > timeouts().reply)
        return Result::retry(
            what + ": no complete reply within timeouts.reply_ms = " +
            std::to_string(timeouts().reply.count()) + " ms: it took " + std::to_string(took.count()) +
            " ms in all, its bytes each within " + "modbus.byte_timeout_ms = " +
            std::to_string(std::min<long long>(p.byte_timeout_ms, timeouts().reply.count())) +
            " ms of the last (a controller trickling its bytes is no slow link)");
      return Result::success();
    }
    const bool exception = e > MODBUS_ENOBASE && e < MODBUS_ENOBASE + 12;
    std::string discarded;
    if (!exception && ctx_) {
      // A late reply must not answer the next request. Over TCP the transaction id tells replies apart; an
      // RTU frame carries no such id, and a late reply of the same function and length would pass for the
      // next one's: after a timeout the line is given one more reply timeout to bring what was still on its
      // way, and then flushed (a reply later than twice the timeout cannot be told apart on RTU at all).
      // What the flush throws away is counted in the link statistics and named in the failure.
      if (e == ETIMEDOUT && std::holds_alternative<adapters::SerialLine>(settings_.link))
        std::this_thread::sleep_for(timeouts().reply);
      int waiting = 0;
      if (::ioctl(modbus_get_socket(ctx_), FIONREAD, &waiting) != 0) waiting = 0;
      modbus_flush(ctx_);
      if (waiting > 0) {
        discarded = std::to_string(waiting) + " bytes that came after the failure (a late reply) discarded";
        ++stats_.lines_rejected;
        stats_.last_rejected = what + ": " + discarded;
        warn("late_reply_discarded", "bytes that came after a failed request (a late reply) were discarded");
      }
    }
    const bool again = exception && retryable_exception(e - MODBUS_ENOBASE);
    const auto next = Clock::now() + std::chrono::milliseconds(p.delay_ms);
    if (again && attempt < p.attempts && next - first < std::chrono::milliseconds(p.within_ms)) {
      ++exception_retries_;
      // Counted per exception code between two reads of the warnings (Controller::warn coalesces).
      warn("exception_retried",
           "the controller answered Modbus exception " + std::to_string(e - MODBUS_ENOBASE) + " (" +
               modbus_strerror(e) +
               "); the request was sent again (modbus.retry_attempts = " + std::to_string(p.attempts) + ")");
      std::this_thread::sleep_until(next);
      continue;
    }
    Result r = fail(what, e);
    if (!discarded.empty()) r.message += "; " + discarded;
    if (again)
      r.message += " (still after " + std::to_string(attempt) + " retries within " +
                   std::to_string(
                       std::chrono::duration_cast<std::chrono::milliseconds>(Clock::now() - first).count()) +
                   " ms: modbus.retry_attempts = " + std::to_string(p.attempts) +
                   ", modbus.retry_within_ms = " + std::to_string(p.within_ms) + ")";
    return r;
  }
}

Result ModbusController::do_connect(controller::Deadline) {
  do_disconnect();
  if (const auto* tcp = std::get_if<adapters::TcpAddress>(&settings_.link)) {
    ctx_ = modbus_new_tcp(tcp->host.c_str(), static_cast<int>(tcp->port));
  } else {
    const auto& s = std::get<adapters::SerialLine>(settings_.link);
    using P = adapters::SerialLine::Parity;
    const char parity = s.parity == P::odd ? 'O' : s.parity == P::even ? 'E' : 'N';
    ctx_ = modbus_new_rtu(s.device.c_str(), static_cast<int>(s.baud), parity, static_cast<int>(s.data_bits),
                          s.stop_bits == adapters::SerialLine::StopBits::two ? 2 : 1);
  }
  if (!ctx_) return Result::fail("cannot create the Modbus context");
  // A new link: the counter is read afresh, at the rate the controller stated before (1 until it states one).
  counter_.reset(counter_period_s(settings_.map[Q::time]), stated_rate_);
  // Without a time register the host clock stands in, from the first connection on: a reconnection does not
  // restart it (the controller layer would take that for a controller whose clock started again).
  if (!have_t0_) {
    t0_ = Clock::now();
    have_t0_ = true;
  }
  undefined_mode_run_ = 0;
  modbus_set_slave(ctx_, settings_.map.unit_id);
  const auto reply = timeouts().reply;
  modbus_set_response_timeout(ctx_, static_cast<std::uint32_t>(reply.count() / 1000),
                              static_cast<std::uint32_t>(reply.count() % 1000) * 1000);
  // The longest gap between two bytes of one reply (libmodbus waits for each byte this long).
  const int gap_ms = std::min<int>(settings_.map.retry.byte_timeout_ms, static_cast<int>(reply.count()));
  modbus_set_byte_timeout(ctx_, static_cast<std::uint32_t>(gap_ms / 1000),
                          static_cast<std::uint32_t>(gap_ms % 1000) * 1000);
  if (modbus_connect(ctx_) != 0) {
    Result r = fail("connect", errno);
    modbus_free(ctx_);
    ctx_ = nullptr;
    return Result::retry(r.message);
  }
  return Result::success();
}

void ModbusController::do_disconnect() {
  if (ctx_) {
    modbus_close(ctx_);
    modbus_free(ctx_);
    ctx_ = nullptr;
  }
  pacer_.stop();
}

Result ModbusController::read_any(Q q, double& value) {
  std::uint16_t w[4] = {0, 0, 0, 0};
  if (Result res = read_words(q, w); !res.ok()) return res;
  value = decode(settings_.map[q], w);
  return Result::success();
}

Result ModbusController::read(Q q, double& value) {
  const Register& r = settings_.map[q];
  std::uint16_t w[4] = {0, 0, 0, 0};
  if (Result res = read_words(q, w); !res.ok()) return res;
  value = decode(r, w);
  if (!std::isfinite(value))
    return Result::fail(std::string("the controller sent a non-finite ") + kQuantities[q].name + " (" +
                        to_string(r.table) + " " + std::to_string(r.address) + ")");
  return Result::success();
}

Result ModbusController::read_words(Q q, std::uint16_t* w) {
  if (!ctx_) return Result::retry("link not open");
  const Register& r = settings_.map[q];
  return transact(std::string("read ") + kQuantities[q].name + " (" + to_string(r.table) + " " +
                      std::to_string(r.address) + ")",
                  [&] {
                    if (r.table == Table::coil) {
                      std::uint8_t bit = 0;
                      const int rc = modbus_read_bits(ctx_, r.address, 1, &bit);
                      w[0] = bit;
                      return rc;
                    }
                    if (r.table == Table::input)
                      return modbus_read_input_registers(ctx_, r.address, r.words(), w);
                    return modbus_read_registers(ctx_, r.address, r.words(), w);
                  });
}

Result ModbusController::write(Q q, double value) {
  const Register& r = settings_.map[q];
  std::uint16_t w[4] = {0, 0, 0, 0};
  if (!encode(r, value, w))
    return Result::fail(std::string("cannot write ") + kQuantities[q].name + " = " + std::to_string(value) +
                        ": it does not fit the " + to_string(r.type) + " register at " + to_string(r.table) +
                        " " + std::to_string(r.address) + " with scale " + std::to_string(r.scale));
  return write_words(q, w);
}

Result ModbusController::write_words(Q q, const std::uint16_t* w) {
  if (!ctx_) return Result::retry("link not open");
  const Register& r = settings_.map[q];
  return transact(std::string("write ") + kQuantities[q].name + " (" + to_string(r.table) + " " +
                      std::to_string(r.address) + ")",
                  [&] {
                    if (r.table == Table::coil) return modbus_write_bit(ctx_, r.address, w[0] ? 1 : 0);
                    if (r.words() == 1) return modbus_write_register(ctx_, r.address, w[0]);
                    return modbus_write_registers(ctx_, r.address, r.words(), w);
                  });
}

Result ModbusController::strobe(controller::Deadline d) {
  if (Result r = write(Q::strobe, 1); !r.ok()) return r;
  for (;;) {
    double s = 1.0;
    if (Result r = read(Q::strobe, s); !r.ok()) return r;
    if (s == 0.0) break;
    if (Clock::now() >= d)
      return Result::retry(
          "the controller did not take the setpoints (strobe not cleared) before the deadline");
    std::this_thread::sleep_for(std::chrono::milliseconds(2));
  }
  if (settings_.map[Q::error].present) {
    double e = 0.0;
    if (Result r = read(Q::error, e); !r.ok()) return r;
    int code = 0;
    if (std::string bad = decode_error_code(e, code); !bad.empty()) return Result::fail(bad);
    if (code != 0)
      return Result::fail(
          "the controller refused the setpoints (error register " + std::to_string(code) + ")", code);
  }
  return Result::success();
}

Result ModbusController::do_identify(controller::ControllerInfo& out, controller::Deadline) {
  out.name = "modbus unit " + std::to_string(settings_.map.unit_id);
  out.protocol_version = 1;
  out.capabilities = "hold,hold-force,roadload,stop,stream,watchdog,status";
  // The checks' modes only where the map names their codes and registers.
  if (missing_for(settings_.map, controller::Mode::constant_force).empty()) out.capabilities += ",force";
  if (missing_for(settings_.map, controller::Mode::free_coast).empty()) out.capabilities += ",free";
  // Logged with the controller in every session and shown on the report: the read-back proves only that the
  // write arrived.
  if (!settings_.map.reads_applied()) out.capabilities += ",readback-setpoint-only";
  // The driver display and the neutral signal only where the map names their registers and bit.
  if (settings_.map.has_driver_display()) out.capabilities += ",driver";
  if (settings_.map.neutral_bit != 0) out.capabilities += ",neutral";
  if (Result r = read(Q::roller_diameter, out.roller_diameter_m); !r.ok()) return r;
  if (Result r = read(Q::base_inertia, out.base_inertia_kg); !r.ok()) return r;
  if (Result r = read(Q::max_speed, out.max_speed_kmh); !r.ok()) return r;
  if (settings_.map[Q::time_scale].present)
    if (Result r = read(Q::time_scale, out.time_scale); !r.ok()) return r;
  // The time counter's unwrapping judges long gaps between reads by the stated rate.
  stated_rate_ = std::isfinite(out.time_scale) ? std::max(1.0, out.time_scale) : 1.0;
  counter_.reset(counter_period_s(settings_.map[Q::time]), stated_rate_);
  if (Result r = read(Q::max_force, out.max_force_n); !r.ok()) return r;
  // The heartbeat counter goes on from the value the register holds (left by an earlier connection or
  // process), so the next beat changes it: a controller's watchdog sees a beat only as a change.
  std::uint16_t w[4] = {0, 0, 0, 0};
  if (Result r = read_words(Q::heartbeat, w); !r.ok()) return r;
  if (const auto count = heartbeat_count(settings_.map[Q::heartbeat], w)) {
    beat_ = *count;
  } else {
    const Register& h = settings_.map[Q::heartbeat];
    warn("heartbeat_counter", "the heartbeat register (" + std::string(to_string(h.table)) + " " +
                                  std::to_string(h.address) + ", float32) holds " + core::num(decode(h, w)) +
                                  ", not a whole count from 0 to 65535: the counter starts again from 0");
    beat_ = 0;
  }
  return Result::success();
}

Result ModbusController::do_write_inertia(double kg, controller::Deadline d) {
  if (Result r = write(Q::inertia, kg); !r.ok()) return r;
  return strobe(d);
}
Result ModbusController::do_read_inertia(double& kg, controller::Deadline) {
  return read(settings_.map.reads_applied() ? Q::applied_inertia : Q::inertia, kg);
}

Result ModbusController::do_write_coefficients(const core::RoadLoad& c, controller::Deadline d) {
  if (Result r = write(Q::f0, c.f0_n); !r.ok()) return r;
  if (Result r = write(Q::f1, c.f1_n_per_kmh); !r.ok()) return r;
  if (Result r = write(Q::f2, c.f2_n_per_kmh2); !r.ok()) return r;
  return strobe(d);
}

Result ModbusController::do_read_coefficients(core::RoadLoad& c, controller::Deadline) {
  // What the controller reports running, when the map names it; else (accepted by the cell file) the setpoint
  // registers just written.
  const bool applied = settings_.map.reads_applied();
  if (Result r = read(applied ? Q::applied_f0 : Q::f0, c.f0_n); !r.ok()) return r;
  if (Result r = read(applied ? Q::applied_f1 : Q::f1, c.f1_n_per_kmh); !r.ok()) return r;
  return read(applied ? Q::applied_f2 : Q::f2, c.f2_n_per_kmh2);
}

std::string ModbusController::readback_source() const {
  if (!settings_.map.reads_applied())
    return "read-back of the setpoint registers (setpoint-only read-back, accepted by the cell file)";
  const Register& r = settings_.map[Q::applied_inertia];
  return std::string("read-back of the applied values the controller reports (") + to_string(r.table) +
         " registers from " + std::to_string(r.address) + ")";
}

double ModbusController::setting_tolerance(Setting what, double written) const {
  // The setpoint register rounds what is written to its resolution, and the register it is read back from
  // (the applied value's, or the same one) rounds it again: half a count of each integer register, and
  // float32's last place.
  const Q set = what == Setting::inertia ? Q::inertia
                : what == Setting::f0    ? Q::f0
                : what == Setting::f1    ? Q::f1
                : what == Setting::f2    ? Q::f2
                                         : Q::force_setpoint;
  // The force is read back from its setpoint register (the map names no applied force).
  const Q back = !settings_.map.reads_applied() || what == Setting::force ? set
                 : what == Setting::inertia                               ? Q::applied_inertia
                 : what == Setting::f0                                    ? Q::applied_f0
                 : what == Setting::f1                                    ? Q::applied_f1
                                                                          : Q::applied_f2;
  const auto half_count = [&](Q q) {
    const Register& r = settings_.map[q];
    return r.type == Type::float32 ? 0.0 : std::abs(r.scale) / 2.0;
  };
  return readback_tolerance(written) + half_count(set) + (back == set ? 0.0 : half_count(back));
}

Result ModbusController::do_command(controller::Mode mode, double value, controller::Deadline d) {
  const RegisterMap& m = settings_.map;
  const int code = command_code(m, mode);
  if (code < 0) return Result::fail(missing_for(m, mode));
  // The value registers first, then the command, then one strobe: the controller takes them together.
  if (mode == controller::Mode::speed_hold)
    if (Result r = write(Q::hold_speed, value); !r.ok()) return r;
  if (mode == controller::Mode::constant_force)
    if (Result r = write(Q::force_setpoint, value); !r.ok()) return r;
  // A beat just before a command that sets the rollers moving: a controller whose watchdog has seen no beat
  // while the tool was idle (connected, identifying, analysing) must not take its first motoring command for
  // a lapsed watchdog. Stops and idle need none.
  if (mode != controller::Mode::idle && mode != controller::Mode::controlled_stop)
    if (Result r = beat(); !r.ok()) return r;
  if (Result r = write(Q::command, code); !r.ok()) return r;
  return strobe(d);
}

Result ModbusController::do_prompt_driver(controller::DriverPrompt p, double speed_kmh,
                                          controller::Deadline d) {
  const RegisterMap& m = settings_.map;
  if (!m.has_driver_display()) return Result::fail(missing_for_driver(m));
  const bool accelerate = p == controller::DriverPrompt::accelerate;
  if (accelerate) {
    if (Result r = write(Q::prompt_speed, speed_kmh); !r.ok()) return r;
    // The driver sets the rollers moving: a beat first, as before a motoring command.
    if (Result r = beat(); !r.ok()) return r;
  }
  const int code = prompt_code(p);
  if (Result r = write(Q::driver_prompt, code); !r.ok()) return r;
  if (Result r = strobe(d); !r.ok()) return r;
  // What the display shows, read back like every setpoint: a controller that clears the strobe but shows
  // another prompt (or none) must not leave a driver waiting for a prompt that never came.
  const Register& pr = m[Q::driver_prompt];
  double shown = -1.0;
  if (Result r = read(Q::driver_prompt, shown); !r.ok()) return r;
  if (shown != code)
    return Result::fail(
        "the controller reads back the driver prompt code " + core::num(shown) + " (" + to_string(pr.table) +
        " " + std::to_string(pr.address) + ") after the strobe, not the " + std::to_string(code) + " (" +
        controller::to_string(p) + ") written (0 off, 1 accelerate, 2 neutral); refusing to go on");
  if (accelerate) {
    const Register& sp = m[Q::prompt_speed];
    double back = 0.0;
    if (Result r = read(Q::prompt_speed, back); !r.ok()) return r;
    // Half a count of an integer register (written and read back through the same one), float32's last place.
    const double tol =
        readback_tolerance(speed_kmh) + (sp.type == Type::float32 ? 0.0 : std::abs(sp.scale) / 2.0);
    if (!(std::abs(back - speed_kmh) <= tol))
      return Result::fail("the controller reads back a prompt speed of " + core::num(back) + " km/h (" +
                          to_string(sp.table) + " " + std::to_string(sp.address) +
                          ") after the strobe, not the " + core::num(speed_kmh) +
                          " km/h written; refusing to go on");
  }
  return Result::success();
}

std::string ModbusController::driver_prompt_unavailable() const {
  const RegisterMap& m = settings_.map;
  if (std::string why = missing_for_driver(m); !why.empty()) return why;
  // Every speed the tool may prompt, up to the cell's speed limit, must fit the register (checked before
  // connecting, not at the first run-up after the warm-up).
  const Register& sp = m[Q::prompt_speed];
  std::uint16_t w[4] = {0, 0, 0, 0};
  const double top = limits().max_speed_kmh;
  if (top > 0.0 && !encode(sp, top, w))
    return "the register map's modbus.prompt_speed (" + std::string(to_string(sp.type)) + ", scale " +
           core::num(sp.scale) + ") cannot carry the cell's speed limit of " + core::num(top) + " km/h";
  return "";
}

Result ModbusController::do_read_force(std::optional<double>& force_n, controller::Deadline) {
  // The force setpoint register, read after the strobe; the controller layer compares it with what was
  // written (setting_tolerance).
  force_n.reset();
  if (!settings_.map[Q::force_setpoint].present) return Result::success();
  double back = 0.0;
  if (Result r = read(Q::force_setpoint, back); !r.ok()) return r;
  force_n = back;
  return Result::success();
}

std::string ModbusController::mode_unavailable(controller::Mode mode) const {
  return missing_for(settings_.map, mode);
}

Result ModbusController::do_stream(double rate_hz, controller::Deadline) {
  if (rate_hz > 0.0)
    pacer_.start();
  else
    pacer_.stop();
  return Result::success();
}

Result ModbusController::do_receive_samples(std::vector<controller::Sample>& out, controller::Deadline d) {
  // The shared pacer (poller.hpp): one poll per period of the map's rate, none when it is due after the
  // deadline, no burst after a stall. A poll already due is taken even with the deadline passed (the
  // controller layer collecting what was read before a command's acknowledgement).
  const RegisterMap& m = settings_.map;
  const auto turn = pacer_.wait_turn(d, m.poll_rate_hz);
  if (!turn) return Result::success();
  const auto now = turn->now;
  if (!m[Q::time].present)
    worst_jitter_s_ =
        std::max(worst_jitter_s_, std::abs(std::chrono::duration<double>(now - turn->due).count()));
  controller::Sample s;
  double mode = 0, status = 0, raw_time = 0;
  if (block_) {
    // One request: the controller answers every register of the sample from one moment
    // (docs/modbus.md, "One sample, one moment").
    std::uint16_t w[kMaxReadRegisters] = {};
    const Block b = *block_;
    if (Result r = transact(
            std::string("read the sample (") + to_string(b.table) + " " + std::to_string(b.address) + " to " +
                std::to_string(b.address + b.count - 1) + ")",
            [&] {
              return b.table == Table::input ? modbus_read_input_registers(ctx_, b.address, b.count, w)
                                             : modbus_read_registers(ctx_, b.address, b.count, w);
            });
        !r.ok())
      return r;
    const auto at = [&](Q q) { return decode(m[q], w + (m[q].address - b.address)); };
    s.speed_kmh = at(Q::speed);
    s.force_n = at(Q::force);
    mode = at(Q::mode);
    status = at(Q::status);
    if (m[Q::time].present) raw_time = at(Q::time);
  } else {
    // Register by register, the time right after the speed; the whole poll within one poll period, or its
    // values are not of one moment (below).
    const auto first = Clock::now();
    if (Result r = read_any(Q::speed, s.speed_kmh); !r.ok()) return r;
    if (m[Q::time].present)
      if (Result r = read_any(Q::time, raw_time); !r.ok()) return r;
    if (Result r = read_any(Q::force, s.force_n); !r.ok()) return r;
    if (Result r = read_any(Q::mode, mode); !r.ok()) return r;
    if (Result r = read_any(Q::status, status); !r.ok()) return r;
    const auto took = Clock::now() - first;
    const auto period = std::chrono::duration<double>(1.0 / m.poll_rate_hz);
    if (took > period) {
      // The sample's time would name a moment up to `took` away from its speed: a pairing no better than the
      // sampling itself is the bound (lab policy, common practice, no source). Dropped and counted.
      const auto ms = std::chrono::duration_cast<std::chrono::milliseconds>(took).count();
      ++stats_.lines_rejected;
      stats_.last_rejected = "a sample whose reads took " + std::to_string(ms) +
                             " ms, longer than the poll period of " + core::num(1000.0 / m.poll_rate_hz) +
                             " ms: its time and speed are not of one moment";
      warn("sample_reads_slow",
           "the reads of a sample took longer than one poll period (1/modbus.poll_rate_hz): the sample was "
           "dropped (its time and speed are not of one moment; a map with the sample's registers in one "
           "block is read in one request)");
      // The time counter still learns the reading (its unwrapping follows every read).
      if (m[Q::time].present)
        counter_.read(raw_time, std::chrono::duration<double>(Clock::now().time_since_epoch()).count());
      return Result::success();
    }
  }
  if (m[Q::time].present)
    s.time_s =
        counter_.read(raw_time, std::chrono::duration<double>(Clock::now().time_since_epoch()).count());
  else
    s.time_s = host_time_s(now);
  // A status that is no bit field may hide a fault: fatal, as in a status reply.
  std::uint32_t raw = 0;
  if (std::string bad = decode_flags(status, raw); !bad.empty()) return Result::fail(bad);
  check_status_bits(raw);
  s.flags = controller_flags(m, raw);
  if (std::string bad = decode_mode(mode, s.mode, m.modes); !bad.empty()) {
    // A sample in no mode we know is malformed: dropped and counted, as the controller layer does with a
    // non-finite value; but not when its status names a fault (that must not wait for the sample gap).
    if (const std::string fault = adapters::fault_name(s.flags); !fault.empty())
      return Result::fail(bad + ", with the status register reporting " + fault);
    ++stats_.samples_malformed;
    // A run of them is a controller that sends no sample we can read, not a link that went quiet (the
    // controller layer's own bound for malformed samples: more than 20 in a row).
    if (++undefined_mode_run_ > 20) return Result::fail("the controller sends samples in no mode: " + bad);
    stats_.last_malformed = bad + " (time " + core::num(s.time_s) + " s, speed " + core::num(s.speed_kmh) +
                            " km/h, force " + core::num(s.force_n) + " N)";
    warn("sample_malformed", "a sample's mode register held no mode code: the sample was dropped");
    return Result::success();
  }
  undefined_mode_run_ = 0;
  // A poll that reads the time of the last one again is handed up as it is: the controller layer drops it
  // as no new sample after its clock guard has seen it (a frozen clock must read as one, not as a gap).
  s.index = index_++;
  out.push_back(s);
  return Result::success();
}

void ModbusController::check_status_bits(std::uint32_t flags) {
  const std::uint32_t fresh = flags & ~settings_.map.defined_status_bits() & ~warned_status_bits_;
  if (!fresh) return;
  warned_status_bits_ |= fresh;
  char hex[16];
  std::snprintf(hex, sizeof hex, "0x%X", fresh);
  // A warning the first time each bit is seen, not a stop (the defined bits still act, the at-limit bit
  // among them); the operator should learn what they mean from the controller's documentation.
  const std::string neutral = settings_.map.neutral_bit != 0
                                  ? ", " + std::to_string(settings_.map.neutral_bit) + " vehicle in neutral"
                                  : std::string();
  warn("status_bits",
       std::string("the controller's status register sets bits the map does not define (") + hex +
           "; defined: 1 fault, 2 emergency stop, 4 watchdog, 8 at a limit, 16 at setpoint" + neutral + ")");
}

double ModbusController::host_time_s(Clock::time_point at) const {
  // In the controller's seconds: the wall time since the connection at the rate the controller stated.
  return stated_rate_ * std::chrono::duration<double>(at - t0_).count();
}

Result ModbusController::read_time(double& time_s) {
  double raw = 0.0;
  if (Result r = read(Q::time, raw); !r.ok()) return r;
  time_s = counter_.read(raw, std::chrono::duration<double>(Clock::now().time_since_epoch()).count());
  return Result::success();
}

Result ModbusController::do_heartbeat(controller::Deadline) {
  return beat();
}

Result ModbusController::beat() {
  const Register& h = settings_.map[Q::heartbeat];
  const std::uint64_t next = next_heartbeat(h, beat_);
  std::uint16_t w[4] = {0, 0, 0, 0};
  heartbeat_words(h, next, w);
  if (Result r = write_words(Q::heartbeat, w); !r.ok()) return r;
  beat_ = next;
  return Result::success();
}

Result ModbusController::do_status(controller::StatusReport& out, controller::Deadline) {
  double mode = 0, status = 0;
  if (Result r = read(Q::speed, out.speed_kmh); !r.ok()) return r;
  if (Result r = read(Q::mode, mode); !r.ok()) return r;
  if (Result r = read(Q::status, status); !r.ok()) return r;
  // The status's clock is the samples' clock: the time register, or the same host clock.
  if (settings_.map[Q::time].present) {
    if (Result r = read_time(out.time_s); !r.ok()) return r;
  } else {
    out.time_s = host_time_s(Clock::now());
  }
  if (std::string bad = decode_mode(mode, out.mode, settings_.map.modes); !bad.empty())
    return Result::fail(bad);
  std::uint32_t raw = 0;
  if (std::string bad = decode_flags(status, raw); !bad.empty()) return Result::fail(bad);
  check_status_bits(raw);
  out.flags = controller_flags(settings_.map, raw);
  out.fault = adapters::fault_name(out.flags);
  return Result::success();
}

Result ModbusController::do_clear_fault(controller::Deadline d) {
  if (Result r = write(Q::command, kCommandClearFault); !r.ok()) return r;
  return strobe(d);
}

double ModbusController::readback_tolerance(double written) const {
  // float32 keeps 24 bits of mantissa; integer registers keep the scale's resolution. Either way, one unit of
  // the register's last place (plus the scale's rounding).
  const double v = std::max(1e-30, std::abs(written));
  return std::max(v * 1.2e-7, 1e-9 * std::max(1.0, v));
}

}  // namespace loadtrim::modbus
