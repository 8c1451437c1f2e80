// The one controller interface loadtrim drives a dyno through. Adapters (dyno-adapters/) implement the
// protected do_* hooks only; the public, non-virtual calls wrap them with the deadlines from the cell
// configuration, the cell's limits, read-back checks, heartbeat scheduling and link statistics, and turn
// anything an adapter throws into a fatal status.
//
// Threading: one thread drives a Controller; calls block for at most their deadline. A KeepAlive (below) may feed
// the watchdog from a second thread: every public call holds the controller's lock, and the keep-alive only takes
// it when it is free, so it never delays the driving thread and never interleaves with a call.
// Time: every sample carries the controller's own timestamp; callers time the test from those, never from the
// host clock. The host clock (steady_clock) is used here for deadlines and heartbeats only.
#pragma once

#include <algorithm>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdint>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "core/road_load.hpp"

namespace loadtrim::controller {

using Clock = std::chrono::steady_clock;
using Deadline = Clock::time_point;

// The result of every call: ok; retryable (a timeout, a dropped link: reconnecting may help); fatal (refused,
// inconsistent, a fault latched: stop).
struct Result {
  enum class Status : std::uint8_t { ok, retryable, fatal };
  Status status = Status::ok;
  std::string message;
  int code = 0;  // controller error code when it sent one
  bool ok() const { return status == Status::ok; }
  static Result success() { return {}; }
  static Result retry(std::string m, int c = 0) { return {Status::retryable, std::move(m), c}; }
  static Result fail(std::string m, int c = 0) { return {Status::fatal, std::move(m), c}; }
};
const char* to_string(Result::Status s);

// free_coast is a command only (motor off at speed, no simulation: the rollers coast on their own inertia and
// losses); the controller reports idle while they do. constant_force: the motor applies a set force, parasitic
// compensation on, no inertia or road-load simulation. Both serve the dyno's own checks with no vehicle.
enum class Mode : std::uint8_t { idle, speed_hold, road_load, controlled_stop, constant_force, free_coast };
const char* to_string(Mode m);

// Fault and state flags, as every adapter reports them.
inline constexpr std::uint32_t kFlagFault = 0x01;
inline constexpr std::uint32_t kFlagEstop = 0x02;
inline constexpr std::uint32_t kFlagWatchdog = 0x04;
inline constexpr std::uint32_t kFlagLimit = 0x08;
inline constexpr std::uint32_t kFlagAtSetpoint = 0x10;

struct ControllerInfo {
  std::string name;
  int protocol_version = 0;
  std::string capabilities;  // comma-separated words
  double roller_diameter_m = 0.0;
  double base_inertia_kg = 0.0;
  double max_speed_kmh = 0.0;
  double max_force_n = 0.0;
  bool has(std::string_view capability) const;
};

struct Sample {
  std::uint64_t index = 0;  // the controller's sample counter: consecutive, no gaps
  double time_s = 0.0;      // the controller's clock
  double speed_kmh = 0.0;
  double force_n = 0.0;
  Mode mode = Mode::idle;
  std::uint32_t flags = 0;
};

struct StatusReport {
  Mode mode = Mode::idle;
  double speed_kmh = 0.0;
  double time_s = 0.0;
  std::uint32_t flags = 0;
  std::string fault;  // empty when none
};

struct Timeouts {
  std::chrono::milliseconds connect{3000};
  std::chrono::milliseconds reply{1000};
  std::chrono::milliseconds sample_gap{1000};          // no sample for this long while streaming = link trouble
  std::chrono::milliseconds heartbeat_interval{200};
};

struct Limits {
  double max_speed_kmh = 0.0;  // never command more (the cell's and the vehicle's, whichever is lower)
  double max_force_n = 0.0;    // never command a constant force of more (the cell's limit)
};

struct LinkStats {
  std::uint64_t lines_rejected = 0;   // corrupted or malformed lines received and dropped
  std::uint64_t lines_lost = 0;       // gaps in the controller's line sequence
  std::uint64_t samples_lost = 0;     // gaps in the sample index
  std::uint64_t samples_received = 0;
  std::uint64_t heartbeats = 0;
  std::string last_rejected;          // what the last rejection was
};

class Controller {
 public:
  Controller(Timeouts timeouts, Limits limits) : timeouts_(timeouts), limits_(limits) {}
  virtual ~Controller() = default;
  Controller(const Controller&) = delete;
  Controller& operator=(const Controller&) = delete;

  Result connect();
  void disconnect();
  Result identify(ControllerInfo& out);
  // Write, read back and compare (1e-9 relative): a mismatch is fatal and nothing else is sent.
  Result set_inertia(double inertia_kg);
  Result set_coefficients(const core::RoadLoad& set);
  Result read_inertia(double& inertia_kg);
  Result read_coefficients(core::RoadLoad& set);
  // Motoring: refused here, before anything is sent, above the configured speed limit.
  Result hold_speed(double speed_kmh);
  Result release_road_load();
  Result controlled_stop();
  Result idle();
  // The dyno's own checks (no vehicle on the rollers): refused here above the cell's force limit.
  Result apply_force(double force_n);
  Result free_coast();
  Result start_stream(double rate_hz);  // 10 to 1000 Hz
  Result stop_stream();
  // Appends the samples that have arrived, waiting up to the sample-gap deadline for at least one. Sends a
  // heartbeat when one is due. A gap in the sample index is counted in stats().samples_lost.
  Result receive_samples(std::vector<Sample>& out);
  Result heartbeat();                    // sends one now
  Result heartbeat_if_due();
  // For KeepAlive: a heartbeat if one is due and no call is in progress (then the call sends its own).
  void heartbeat_if_due_and_free();
  Result status(StatusReport& out);
  Result clear_fault();

  LinkStats stats() const;  // a copy, taken under the lock
  const Timeouts& timeouts() const { return timeouts_; }
  const Limits& limits() const { return limits_; }
  void set_speed_limit(double max_speed_kmh) { limits_.max_speed_kmh = max_speed_kmh; }

 protected:
  virtual Result do_connect(Deadline d) = 0;
  virtual void do_disconnect() = 0;
  virtual Result do_identify(ControllerInfo& out, Deadline d) = 0;
  virtual Result do_write_inertia(double inertia_kg, Deadline d) = 0;
  virtual Result do_read_inertia(double& inertia_kg, Deadline d) = 0;
  virtual Result do_write_coefficients(const core::RoadLoad& set, Deadline d) = 0;
  virtual Result do_read_coefficients(core::RoadLoad& set, Deadline d) = 0;
  // value: the hold speed in km/h for speed_hold, the force in N for constant_force, else unused.
  virtual Result do_command(Mode mode, double value, Deadline d) = 0;
  virtual Result do_stream(double rate_hz, Deadline d) = 0;
  virtual Result do_receive_samples(std::vector<Sample>& out, Deadline d) = 0;
  virtual Result do_heartbeat(Deadline d) = 0;
  virtual Result do_status(StatusReport& out, Deadline d) = 0;
  virtual Result do_clear_fault(Deadline d) = 0;

  // How far a read-back may differ from what was written: the register's resolution (e.g. float32 in Modbus).
  virtual double readback_tolerance(double written) const { return 1e-9 * std::max(1.0, std::abs(written)); }

  LinkStats stats_;

 private:
  template <class F>
  Result guarded(const char* what, F&& f);
  mutable std::recursive_mutex mu_;
  Deadline reply_deadline() const { return Clock::now() + timeouts_.reply; }
  Timeouts timeouts_;
  Limits limits_;
  Clock::time_point last_heartbeat_{};
  std::uint64_t next_index_ = 0;
  bool have_index_ = false;
};

// Feeds the controller's watchdog from a thread of its own for as long as it lives, so that a slow disk, a large
// trace being hashed and written, or report rendering on the driving thread never lets the heartbeat lapse while
// the rollers turn. Destroy it before the controller.
class KeepAlive {
 public:
  explicit KeepAlive(Controller& c);
  ~KeepAlive();
  KeepAlive(const KeepAlive&) = delete;
  KeepAlive& operator=(const KeepAlive&) = delete;

 private:
  Controller& c_;
  std::mutex m_;
  std::condition_variable cv_;
  bool stop_ = false;
  std::thread thread_;
};

}  // namespace loadtrim::controller
