// The Modbus adapter (libmodbus, TCP or RTU) behind the controller interface, driven by a register map.
// Setpoints: write the value registers, raise the strobe, wait until the controller clears it (the write
// handshake, with a deadline), then read back. Live quantities are polled at the map's rate; the controller's
// time register gives the sample and status time when the map has one, else the host clock does (since
// connect, at the controller's stated rate) and the poll jitter is measured. Heartbeat: a counter register
// the controller's watchdog watches, continued from its value at identify and beaten once more just before
// every command that sets the rollers moving; it wraps at the register's width. A driver display where the
// map names one (driver_prompt, prompt_speed) and the vehicle-in-neutral bit of the status register
// (status_bits.neutral, reported as controller::kFlagNeutral). What the controller or the
// link does that is no failure but must not pass unseen (undefined status bits, exceptions retried, late
// bytes discarded, a heartbeat register holding no count) is raised as a warning (Controller::warn).
#pragma once

#include <chrono>
#include <optional>
#include <string>
#include <variant>

#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "link.hpp"
#include "modbus/register_map.hpp"
#include "poller.hpp"

typedef struct _modbus modbus_t;

namespace loadtrim::modbus {

// The adapter's settings (CellConfig::adapter_settings of a modbus-tcp or modbus-rtu cell): the link from the
// [controller] keys and the register map from [modbus].
struct Settings {
  std::variant<adapters::TcpAddress, adapters::SerialLine> link;
  RegisterMap map;
};

class ModbusController : public controller::Controller {
 public:
  ModbusController(Settings settings, controller::Timeouts t, controller::Limits l);
  // A cell whose adapter_settings are a modbus::Settings (std::bad_any_cast otherwise).
  explicit ModbusController(const controller::CellConfig& cell);
  ~ModbusController() override;
  // Poll timing when the map has no time register: worst deviation from the nominal period, s.
  double worst_jitter_s() const { return worst_jitter_s_; }
  // Requests sent again after a busy or gateway exception (the retry policy), since construction.
  std::uint64_t exception_retries() const { return exception_retries_; }

 protected:
  controller::Result do_connect(controller::Deadline d) override;
  void do_disconnect() override;
  controller::Result do_identify(controller::ControllerInfo& out, controller::Deadline d) override;
  controller::Result do_write_inertia(double kg, controller::Deadline d) override;
  controller::Result do_read_inertia(double& kg, controller::Deadline d) override;
  controller::Result do_write_coefficients(const core::RoadLoad& c, controller::Deadline d) override;
  controller::Result do_read_coefficients(core::RoadLoad& c, controller::Deadline d) override;
  controller::Result do_command(controller::Mode mode, double value, controller::Deadline d) override;
  controller::Result do_read_force(std::optional<double>& force_n, controller::Deadline d) override;
  controller::Result do_stream(double rate_hz, controller::Deadline d) override;
  controller::Result do_receive_samples(std::vector<controller::Sample>& out,
                                        controller::Deadline d) override;
  bool streamed() const override {
    return false;
  }  // polled at the map's poll_rate_hz, not streamed at a rate asked
  controller::Result do_heartbeat(controller::Deadline d) override;
  controller::Result do_status(controller::StatusReport& out, controller::Deadline d) override;
  controller::Result do_clear_fault(controller::Deadline d) override;
  double readback_tolerance(double written) const override;
  double setting_tolerance(Setting what, double written) const override;
  std::string readback_source() const override;
  std::string mode_unavailable(controller::Mode mode) const override;
  // The driver display (docs/modbus.md, "Driver prompts"): the prompt speed (accelerate only) and the prompt
  // code, one strobe, then both read back and compared with what was written.
  controller::Result do_prompt_driver(controller::DriverPrompt p, double speed_kmh,
                                      controller::Deadline d) override;
  // The map's driver-display keys it lacks, or a prompt-speed register that cannot carry the cell's speed
  // limit; "" when a driver can be prompted.
  std::string driver_prompt_unavailable() const override;
  double polled_rate_hz() const override { return settings_.map.poll_rate_hz; }

 private:
  controller::Result read(Q q, double& value);
  // The register decoded as it is, a non-finite value included (a sample's values: the controller layer drops
  // and counts a sample with one).
  controller::Result read_any(Q q, double& value);
  controller::Result write(Q q, double value);
  // The register's words as they are (Register::words() of them): read, and written without encoding.
  controller::Result read_words(Q q, std::uint16_t* words);
  controller::Result write_words(Q q, const std::uint16_t* words);
  controller::Result beat();  // the next count of the heartbeat counter (register_map.hpp)
  controller::Result strobe(controller::Deadline d);          // raise, wait for the controller to clear it
  controller::Result fail(const std::string& what, int err);  // from an errno, naming Modbus exceptions
  // One request (a libmodbus call returning < 0 on failure), under the map's retry policy for busy and
  // gateway exceptions and the whole-reply bound (timeouts.reply_ms).
  template <class F>
  controller::Result transact(const std::string& what, F&& request);
  // Status bits the map does not define: a warning ("status_bits") the first time each bit is seen.
  void check_status_bits(std::uint32_t flags);
  Settings settings_;
  modbus_t* ctx_ = nullptr;
  adapters::PollPacer pacer_;  // the live quantities' polls (poller.hpp)
  std::uint64_t index_ = 0;
  std::optional<Block> block_;  // the one read of a sample's registers (sample_block), when the map allows it
  int undefined_mode_run_ = 0;  // samples in a row whose mode register held no mode code
  std::uint64_t beat_ = 0;      // the heartbeat counter's raw count, wrapped at the register's width
  std::chrono::steady_clock::time_point
      t0_{};  // without a time register: the host clock's origin (first connect)
  bool have_t0_ = false;
  double worst_jitter_s_ = 0.0;
  TimeCounter counter_;       // the time register unwrapped (register_map.hpp)
  double stated_rate_ = 1.0;  // the clock rate the controller stated at its last identify
  std::uint64_t exception_retries_ = 0;
  std::uint32_t warned_status_bits_ = 0;         // the undefined bits already named
  controller::Result read_time(double& time_s);  // read and unwrapped
  // Without a time register, samples and status alike: the host clock since connect, at the stated rate.
  double host_time_s(std::chrono::steady_clock::time_point at) const;
};

}  // namespace loadtrim::modbus
