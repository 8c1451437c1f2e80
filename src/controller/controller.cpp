#include "controller/controller.hpp"

#include <algorithm>
#include <cmath>
#include <exception>

#include "core/problem.hpp"

namespace loadtrim::controller {

using core::num;

const char* to_string(Result::Status s) {
  switch (s) {
    case Result::Status::ok: return "ok";
    case Result::Status::retryable: return "retryable";
    case Result::Status::fatal: return "fatal";
  }
  return "unknown";
}

const char* to_string(Mode m) {
  switch (m) {
    case Mode::idle: return "idle";
    case Mode::speed_hold: return "speed-hold";
    case Mode::road_load: return "road-load";
    case Mode::controlled_stop: return "controlled-stop";
    case Mode::constant_force: return "constant-force";
    case Mode::free_coast: return "free-coast";
  }
  return "unknown";
}

bool ControllerInfo::has(std::string_view c) const {
  std::size_t pos = 0;
  while (pos <= capabilities.size()) {
    auto end = capabilities.find(',', pos);
    if (end == std::string::npos) end = capabilities.size();
    if (std::string_view(capabilities).substr(pos, end - pos) == c) return true;
    pos = end + 1;
  }
  return false;
}

template <class F>
Result Controller::guarded(const char* what, F&& f) {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  try {
    Result r = f();
    if (!r.ok() && r.message.rfind(what, 0) != 0) r.message = std::string(what) + ": " + r.message;
    return r;
  } catch (const std::exception& e) {
    return Result::fail(std::string(what) + ": adapter error: " + e.what());
  } catch (...) {
    return Result::fail(std::string(what) + ": adapter error");
  }
}

Result Controller::connect() {
  have_index_ = false;
  return guarded("connect", [&] { return do_connect(Clock::now() + timeouts_.connect); });
}

void Controller::disconnect() {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  try {
    do_disconnect();
  } catch (...) {  // closing never throws into the caller
  }
}

Result Controller::identify(ControllerInfo& out) {
  return guarded("identify", [&] { return do_identify(out, reply_deadline()); });
}


Result Controller::set_inertia(double kg) {
  return guarded("set inertia", [&] {
    if (!(kg > 0.0 && std::isfinite(kg))) return Result::fail("inertia " + num(kg) + " kg is not a positive number");
    if (Result r = do_write_inertia(kg, reply_deadline()); !r.ok()) return r;
    double back = 0.0;
    if (Result r = do_read_inertia(back, reply_deadline()); !r.ok()) return r;
    auto same = [&](double b, double w) { return std::abs(b - w) <= readback_tolerance(w); };
    if (!same(back, kg)) return Result::fail("read-back " + num(back) + " kg differs from the " + num(kg) + " kg written; refusing to go on");
    return Result::success();
  });
}

Result Controller::set_coefficients(const core::RoadLoad& c) {
  return guarded("set coefficients", [&] {
    if (!std::isfinite(c.f0_n) || !std::isfinite(c.f1_n_per_kmh) || !std::isfinite(c.f2_n_per_kmh2))
      return Result::fail("coefficients are not finite");
    if (Result r = do_write_coefficients(c, reply_deadline()); !r.ok()) return r;
    core::RoadLoad back;
    if (Result r = do_read_coefficients(back, reply_deadline()); !r.ok()) return r;
    auto same = [&](double b, double w) { return std::abs(b - w) <= readback_tolerance(w); };
    if (!same(back.f0_n, c.f0_n) || !same(back.f1_n_per_kmh, c.f1_n_per_kmh) || !same(back.f2_n_per_kmh2, c.f2_n_per_kmh2))
      return Result::fail("read-back (" + num(back.f0_n) + ", " + num(back.f1_n_per_kmh) + ", " + num(back.f2_n_per_kmh2) +
                          ") differs from what was written (" + num(c.f0_n) + ", " + num(c.f1_n_per_kmh) + ", " +
                          num(c.f2_n_per_kmh2) + "); refusing to go on");
    return Result::success();
  });
}

Result Controller::read_inertia(double& kg) {
  return guarded("read inertia", [&] { return do_read_inertia(kg, reply_deadline()); });
}
Result Controller::read_coefficients(core::RoadLoad& c) {
  return guarded("read coefficients", [&] { return do_read_coefficients(c, reply_deadline()); });
}

Result Controller::hold_speed(double kmh) {
  return guarded("speed hold", [&] {
    if (!(kmh >= 0.0) || !std::isfinite(kmh)) return Result::fail("speed " + num(kmh) + " km/h is not valid");
    if (!(limits_.max_speed_kmh > 0.0)) return Result::fail("no speed limit configured: refusing to motor the rollers");
    if (kmh > limits_.max_speed_kmh)
      return Result::fail("speed " + num(kmh) + " km/h is above the limit of " + num(limits_.max_speed_kmh) + " km/h; not sent");
    return do_command(Mode::speed_hold, kmh, reply_deadline());
  });
}
Result Controller::release_road_load() {
  return guarded("road-load simulation", [&] { return do_command(Mode::road_load, 0.0, reply_deadline()); });
}
Result Controller::controlled_stop() {
  return guarded("controlled stop", [&] { return do_command(Mode::controlled_stop, 0.0, reply_deadline()); });
}
Result Controller::idle() {
  return guarded("idle", [&] { return do_command(Mode::idle, 0.0, reply_deadline()); });
}
Result Controller::apply_force(double n) {
  return guarded("constant force", [&] {
    if (!std::isfinite(n)) return Result::fail("force " + num(n) + " N is not valid");
    if (!(limits_.max_force_n > 0.0)) return Result::fail("no force limit configured: refusing to motor the rollers");
    if (std::abs(n) > limits_.max_force_n)
      return Result::fail("force " + num(n) + " N is above the limit of " + num(limits_.max_force_n) + " N; not sent");
    return do_command(Mode::constant_force, n, reply_deadline());
  });
}
Result Controller::free_coast() {
  return guarded("free coast", [&] { return do_command(Mode::free_coast, 0.0, reply_deadline()); });
}

Result Controller::start_stream(double rate_hz) {
  return guarded("start stream", [&] {
    if (!(rate_hz >= 10.0 && rate_hz <= 1000.0)) return Result::fail("rate " + num(rate_hz) + " Hz, allowed 10 to 1000 Hz");
    have_index_ = false;
    return do_stream(rate_hz, reply_deadline());
  });
}
Result Controller::stop_stream() {
  return guarded("stop stream", [&] { return do_stream(0.0, reply_deadline()); });
}

Result Controller::receive_samples(std::vector<Sample>& out) {
  return guarded("receive samples", [&] {
    if (Result r = heartbeat_if_due(); !r.ok()) return r;
    const std::size_t before = out.size();
    // Wait in slices no longer than the heartbeat interval so heartbeats keep going while samples are awaited.
    const Deadline gap = Clock::now() + timeouts_.sample_gap;
    for (;;) {
      const Deadline slice = std::min(gap, Clock::now() + timeouts_.heartbeat_interval);
      if (Result r = do_receive_samples(out, slice); !r.ok()) return r;
      if (out.size() > before) break;
      if (Clock::now() >= gap)
        return Result::retry("no sample for " + std::to_string(timeouts_.sample_gap.count()) + " ms (stalled stream or lost link)");
      if (Result r = heartbeat_if_due(); !r.ok()) return r;
    }
    for (std::size_t i = before; i < out.size(); ++i) {
      if (have_index_ && out[i].index != next_index_)
        stats_.samples_lost += out[i].index > next_index_ ? out[i].index - next_index_ : 1;
      next_index_ = out[i].index + 1;
      have_index_ = true;
    }
    stats_.samples_received += out.size() - before;
    return Result::success();
  });
}

Result Controller::heartbeat() {
  return guarded("heartbeat", [&] {
    last_heartbeat_ = Clock::now();
    ++stats_.heartbeats;
    return do_heartbeat(reply_deadline());
  });
}

Result Controller::heartbeat_if_due() {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  if (Clock::now() - last_heartbeat_ < timeouts_.heartbeat_interval) return Result::success();
  return heartbeat();
}

void Controller::heartbeat_if_due_and_free() {
  const std::unique_lock<std::recursive_mutex> lock(mu_, std::try_to_lock);
  if (lock.owns_lock()) heartbeat_if_due();  // a failure shows on the driving thread's next call
}

LinkStats Controller::stats() const {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  return stats_;
}

KeepAlive::KeepAlive(Controller& c) : c_(c) {
  thread_ = std::thread([this] {
    const auto period = std::max(std::chrono::milliseconds(5), c_.timeouts().heartbeat_interval / 4);
    std::unique_lock<std::mutex> lk(m_);
    while (!cv_.wait_for(lk, period, [this] { return stop_; })) {
      lk.unlock();
      c_.heartbeat_if_due_and_free();
      lk.lock();
    }
  });
}

KeepAlive::~KeepAlive() {
  {
    const std::lock_guard<std::mutex> lk(m_);
    stop_ = true;
  }
  cv_.notify_all();
  thread_.join();
}

Result Controller::status(StatusReport& out) {
  return guarded("status", [&] { return do_status(out, reply_deadline()); });
}
Result Controller::clear_fault() {
  return guarded("clear fault", [&] { return do_clear_fault(reply_deadline()); });
}

}  // namespace loadtrim::controller
