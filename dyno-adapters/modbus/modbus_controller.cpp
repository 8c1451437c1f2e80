#include "modbus/modbus_controller.hpp"

#include <modbus/modbus.h>

#include <cerrno>
#include <cmath>
#include <thread>

#include "adapter_row.hpp"

namespace loadtrim::modbus {

using controller::Result;
using Clock = std::chrono::steady_clock;

ModbusController::ModbusController(Settings settings, controller::Timeouts t, controller::Limits l)
    : Controller(t, l), settings_(std::move(settings)) {}

ModbusController::ModbusController(const controller::CellConfig& cell)
    : ModbusController(std::any_cast<const Settings&>(cell.adapter_settings), cell.timeouts,
                       adapters::cell_limits(cell)) {}

ModbusController::~ModbusController() {
  do_disconnect();
}

Result ModbusController::fail(const std::string& what) {
  const int e = errno;
  const std::string text = std::string(modbus_strerror(e));
  // Exceptions the controller answered with are its refusals; timeouts and closed links are retryable.
  if (e > MODBUS_ENOBASE && e < MODBUS_ENOBASE + 12)
    return Result::fail(what + ": Modbus exception from the controller: " + text, e - MODBUS_ENOBASE);
  return Result::retry(what + ": " + text);
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
  modbus_set_slave(ctx_, settings_.map.unit_id);
  const auto reply = timeouts().reply;
  modbus_set_response_timeout(ctx_, static_cast<std::uint32_t>(reply.count() / 1000),
                              static_cast<std::uint32_t>(reply.count() % 1000) * 1000);
  if (modbus_connect(ctx_) != 0) {
    Result r = fail("connect");
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
  streaming_ = false;
}

Result ModbusController::read(Q q, double& value) {
  if (!ctx_) return Result::retry("link not open");
  const Register& r = settings_.map[q];
  std::uint16_t w[2] = {0, 0};
  int rc;
  if (r.table == Table::coil) {
    std::uint8_t bit = 0;
    rc = modbus_read_bits(ctx_, r.address, 1, &bit);
    w[0] = bit;
  } else if (r.table == Table::input) {
    rc = modbus_read_input_registers(ctx_, r.address, r.words(), w);
  } else {
    rc = modbus_read_registers(ctx_, r.address, r.words(), w);
  }
  if (rc < 0)
    return fail(std::string("read ") + kQuantities[q].name + " (" + to_string(r.table) + " " +
                std::to_string(r.address) + ")");
  value = decode(r, w);
  if (!std::isfinite(value))
    return Result::fail(std::string("the controller sent a non-finite ") + kQuantities[q].name + " (" +
                        to_string(r.table) + " " + std::to_string(r.address) + ")");
  return Result::success();
}

Result ModbusController::write(Q q, double value) {
  if (!ctx_) return Result::retry("link not open");
  const Register& r = settings_.map[q];
  std::uint16_t w[2] = {0, 0};
  if (!encode(r, value, w))
    return Result::fail(std::string("cannot write ") + kQuantities[q].name + " = " + std::to_string(value) +
                        ": it does not fit the " + to_string(r.type) + " register at " + to_string(r.table) +
                        " " + std::to_string(r.address) + " with scale " + std::to_string(r.scale));
  int rc;
  if (r.table == Table::coil)
    rc = modbus_write_bit(ctx_, r.address, w[0] ? 1 : 0);
  else if (r.words() == 1)
    rc = modbus_write_register(ctx_, r.address, w[0]);
  else
    rc = modbus_write_registers(ctx_, r.address, 2, w);
  if (rc < 0)
    return fail(std::string("write ") + kQuantities[q].name + " (" + to_string(r.table) + " " +
                std::to_string(r.address) + ")");
  return Result::success();
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
  if (Result r = read(Q::roller_diameter, out.roller_diameter_m); !r.ok()) return r;
  if (Result r = read(Q::base_inertia, out.base_inertia_kg); !r.ok()) return r;
  if (Result r = read(Q::max_speed, out.max_speed_kmh); !r.ok()) return r;
  if (settings_.map[Q::time_scale].present)
    if (Result r = read(Q::time_scale, out.time_scale); !r.ok()) return r;
  return read(Q::max_force, out.max_force_n);
}

Result ModbusController::do_write_inertia(double kg, controller::Deadline d) {
  if (Result r = write(Q::inertia, kg); !r.ok()) return r;
  return strobe(d);
}
Result ModbusController::do_read_inertia(double& kg, controller::Deadline) {
  return read(Q::inertia, kg);
}

Result ModbusController::do_write_coefficients(const core::RoadLoad& c, controller::Deadline d) {
  if (Result r = write(Q::f0, c.f0_n); !r.ok()) return r;
  if (Result r = write(Q::f1, c.f1_n_per_kmh); !r.ok()) return r;
  if (Result r = write(Q::f2, c.f2_n_per_kmh2); !r.ok()) return r;
  return strobe(d);
}

Result ModbusController::do_read_coefficients(core::RoadLoad& c, controller::Deadline) {
  if (Result r = read(Q::f0, c.f0_n); !r.ok()) return r;
  if (Result r = read(Q::f1, c.f1_n_per_kmh); !r.ok()) return r;
  return read(Q::f2, c.f2_n_per_kmh2);
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
  if (Result r = write(Q::command, code); !r.ok()) return r;
  if (Result r = strobe(d); !r.ok()) return r;
  if (mode == controller::Mode::constant_force) {
    // The force the controller holds is read back like every other setpoint (the public layer reads back
    // inertia and coefficients, not a command's value).
    double back = 0.0;
    if (Result r = read(Q::force_setpoint, back); !r.ok()) return r;
    if (!(std::abs(back - value) <= readback_tolerance(value) + m[Q::force_setpoint].scale / 2))
      return Result::fail("read-back force setpoint " + std::to_string(back) + " N differs from the " +
                          std::to_string(value) + " N written; refusing to go on");
  }
  return Result::success();
}

std::string ModbusController::mode_unavailable(controller::Mode mode) const {
  return missing_for(settings_.map, mode);
}

Result ModbusController::do_stream(double rate_hz, controller::Deadline) {
  streaming_ = rate_hz > 0.0;
  t0_ = next_poll_ = Clock::now();
  return Result::success();
}

Result ModbusController::do_receive_samples(std::vector<controller::Sample>& out, controller::Deadline d) {
  if (!streaming_) return Result::success();
  const auto period = std::chrono::duration_cast<Clock::duration>(
      std::chrono::duration<double>(1.0 / settings_.map.poll_rate_hz));
  if (next_poll_ > d) return Result::success();
  std::this_thread::sleep_until(next_poll_);
  const auto now = Clock::now();
  if (!settings_.map[Q::time].present)
    worst_jitter_s_ =
        std::max(worst_jitter_s_, std::abs(std::chrono::duration<double>(now - next_poll_).count()));
  next_poll_ += period;
  if (next_poll_ < now) next_poll_ = now + period;  // fell behind: no burst to catch up
  controller::Sample s;
  double mode = 0, status = 0;
  if (Result r = read(Q::speed, s.speed_kmh); !r.ok()) return r;
  if (Result r = read(Q::force, s.force_n); !r.ok()) return r;
  if (Result r = read(Q::mode, mode); !r.ok()) return r;
  if (Result r = read(Q::status, status); !r.ok()) return r;
  if (settings_.map[Q::time].present) {
    if (Result r = read(Q::time, s.time_s); !r.ok()) return r;
  } else {
    s.time_s = std::chrono::duration<double>(now - t0_).count();
  }
  if (std::string bad = decode_mode(mode, s.mode, settings_.map.modes); !bad.empty())
    return Result::fail(bad);
  if (std::string bad = decode_flags(status, s.flags); !bad.empty()) return Result::fail(bad);
  s.index = index_++;
  out.push_back(s);
  return Result::success();
}

Result ModbusController::do_heartbeat(controller::Deadline) {
  return write(Q::heartbeat, ++beat_);
}

Result ModbusController::do_status(controller::StatusReport& out, controller::Deadline) {
  double mode = 0, status = 0;
  if (Result r = read(Q::speed, out.speed_kmh); !r.ok()) return r;
  if (Result r = read(Q::mode, mode); !r.ok()) return r;
  if (Result r = read(Q::status, status); !r.ok()) return r;
  if (settings_.map[Q::time].present)
    if (Result r = read(Q::time, out.time_s); !r.ok()) return r;
  if (std::string bad = decode_mode(mode, out.mode, settings_.map.modes); !bad.empty())
    return Result::fail(bad);
  if (std::string bad = decode_flags(status, out.flags); !bad.empty()) return Result::fail(bad);
  out.fault = (out.flags & controller::kFlagWatchdog) ? "WATCHDOG"
              : (out.flags & controller::kFlagEstop)  ? "ESTOP"
              : (out.flags & controller::kFlagFault)  ? "FAULT"
                                                      : "";
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
