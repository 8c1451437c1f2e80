#include "controller/controller.hpp"

#include <algorithm>
#include <cmath>
#include <exception>

#include "core/envelope.hpp"
#include "core/problem.hpp"

namespace loadtrim::controller {

using core::num;

const char* to_string(Result::Status s) {
  switch (s) {
    case Result::Status::ok:
      return "ok";
    case Result::Status::retryable:
      return "retryable";
    case Result::Status::fatal:
      return "fatal";
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

namespace {
// Bounds on what a controller may state or read back, whatever the adapter: they catch what cannot be a
// reading at all (garbage, a sign or unit error of orders of magnitude), not a wrong dyno (check_identity
// and the read-back comparison do that). Every test is written so that NaN fails it. The ceilings are
// beyond any chassis dyno (common practice, no source); 1e6 N is the samples' bound (ingest).
constexpr double kMaxRollerDiameterM = 10.0;
constexpr double kMaxInertiaKg = 1e6;
constexpr double kMaxSpeedKmh = 1000.0;
constexpr double kMaxForceN = 1e6;

// "" when 0 < v ≤ most, else what is wrong.
std::string positive_up_to(const char* what, double v, double most, const char* unit) {
  if (v > 0.0 && v <= most) return "";
  return std::string(what) + " of " + num(v) + " " + unit + " (allowed: above 0, up to " + num(most) + " " +
         unit + ")";
}

// "" when the curve is finite and |F(v)| ≤ kMaxForceN from standstill to the speed limit (200 km/h when none
// is configured: common practice, no source).
std::string plausible_curve(const core::RoadLoad& c, double max_speed_kmh) {
  if (!c.finite())
    return "coefficients (" + num(c.f0_n) + ", " + num(c.f1_n_per_kmh) + ", " + num(c.f2_n_per_kmh2) +
           ") are not finite";
  const double top = max_speed_kmh > 0.0 ? max_speed_kmh : 200.0;
  const core::CurvePoint p = core::max_abs_on(c, 0.0, top);
  if (std::abs(p.force_n) <= kMaxForceN) return "";
  return "coefficients (" + num(c.f0_n) + ", " + num(c.f1_n_per_kmh) + ", " + num(c.f2_n_per_kmh2) +
         ") give " + num(p.force_n) + " N at " + num(p.speed_kmh) + " km/h, beyond any dyno (" +
         num(kMaxForceN) + " N)";
}
}  // namespace

double Controller::wall_s() const {
  return std::chrono::duration<double>(Clock::now() - t0_).count();
}

void Controller::lease(std::chrono::milliseconds d) {
  alive_until_.store((Clock::now() + d).time_since_epoch().count());
}
bool Controller::lease_valid() const {
  return Clock::now().time_since_epoch().count() < alive_until_.load();
}

void Controller::set_stopping(bool on) {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  // The clock was not checked while stopping: its history starts afresh when moving resumes.
  if (stopping_ && !on) {
    clock_.reset();
    time_fresh_start_ = true;
  }
  stopping_ = on;
}

std::uint64_t Controller::epoch() const {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  return epoch_;
}
std::uint64_t Controller::clear_epoch() const {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  return clear_epoch_;
}
double Controller::time_scale() const {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  return time_scale_;
}

template <class F>
Result Controller::guarded(const char* what, F&& f, bool renews_lease) {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  if (renews_lease) lease(timeouts_.progress_grace);
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
  return guarded("connect", [&] {
    have_index_ = false;
    pending_.clear();
    pending_fault_.reset();
    pending_fault_is_event_ = false;
    last_sample_wall_ = Clock::now();
    clock_.reset();
    time_fresh_start_ = true;
    malformed_run_ = 0;
    return do_connect(Clock::now() + timeouts_.connect);
  });
}

void Controller::disconnect() {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  try {
    do_disconnect();
  } catch (...) {  // closing never throws into the caller
  }
}

Result Controller::identify(ControllerInfo& out) {
  return guarded("identify", [&] {
    out.time_scale = 1.0;
    if (Result r = do_identify(out, reply_deadline()); !r.ok()) return r;
    for (const std::string& bad :
         {positive_up_to("roller diameter", out.roller_diameter_m, kMaxRollerDiameterM, "m"),
          positive_up_to("base inertia", out.base_inertia_kg, kMaxInertiaKg, "kg"),
          positive_up_to("maximum speed", out.max_speed_kmh, kMaxSpeedKmh, "km/h"),
          positive_up_to("maximum force", out.max_force_n, kMaxForceN, "N")})
      if (!bad.empty()) return Result::fail("the controller states a " + bad + "; refusing to go on");
    if (!(std::isfinite(out.time_scale) && out.time_scale >= 1e-3))
      return Result::fail("the controller states a clock rate of " + num(out.time_scale) +
                          "× real time, not a rate");
    if (out.time_scale > limits_.max_time_scale)
      return Result::fail("the controller states that its clock runs " + num(out.time_scale) +
                          "× real time; the cell file allows at most " + num(limits_.max_time_scale) +
                          "× (controller.max_time_scale: 1 for a real dyno)");
    // A clock stated slower than real time would stretch every wall deadline: never below real time here.
    time_scale_ = std::max(1.0, out.time_scale);
    ClockRules rules = clock_.rules();
    rules.scale = time_scale_;
    rules.wall_related = limits_.clock_wall_related;
    clock_.set_rules(rules);
    return Result::success();
  });
}

Result Controller::set_inertia(double kg) {
  return guarded("set inertia", [&] {
    if (!(kg > 0.0 && std::isfinite(kg)))
      return Result::fail("inertia " + num(kg) + " kg is not a positive number");
    if (Result r = do_write_inertia(kg, reply_deadline()); !r.ok()) return r;
    double back = 0.0;
    if (Result r = do_read_inertia(back, reply_deadline()); !r.ok()) return r;
    if (std::string bad = positive_up_to("inertia", back, kMaxInertiaKg, "kg"); !bad.empty())
      return Result::fail(readback_source() + " " + bad + "; refusing to go on");
    if (!(std::abs(back - kg) <= setting_tolerance(Setting::inertia, kg)))
      return Result::fail(readback_source() + " " + num(back) + " kg differs from the " + num(kg) +
                          " kg written; refusing to go on");
    return Result::success();
  });
}

Result Controller::set_coefficients(const core::RoadLoad& c) {
  return guarded("set coefficients", [&] {
    if (!c.finite()) return Result::fail("coefficients are not finite");
    if (Result r = do_write_coefficients(c, reply_deadline()); !r.ok()) return r;
    core::RoadLoad back;
    if (Result r = do_read_coefficients(back, reply_deadline()); !r.ok()) return r;
    if (std::string bad = plausible_curve(back, limits_.max_speed_kmh); !bad.empty())
      return Result::fail(readback_source() + " " + bad + "; refusing to go on");
    auto same = [&](Setting q, double b, double w) { return std::abs(b - w) <= setting_tolerance(q, w); };
    if (!same(Setting::f0, back.f0_n, c.f0_n) || !same(Setting::f1, back.f1_n_per_kmh, c.f1_n_per_kmh) ||
        !same(Setting::f2, back.f2_n_per_kmh2, c.f2_n_per_kmh2))
      return Result::fail(readback_source() + " (" + num(back.f0_n) + ", " + num(back.f1_n_per_kmh) + ", " +
                          num(back.f2_n_per_kmh2) + ") differs from what was written (" + num(c.f0_n) + ", " +
                          num(c.f1_n_per_kmh) + ", " + num(c.f2_n_per_kmh2) + "); refusing to go on");
    return Result::success();
  });
}

Result Controller::read_inertia(double& kg) {
  return guarded("read inertia", [&] {
    if (Result r = do_read_inertia(kg, reply_deadline()); !r.ok()) return r;
    if (std::string bad = positive_up_to("inertia", kg, kMaxInertiaKg, "kg"); !bad.empty())
      return Result::fail("the controller reads back an " + bad);
    return Result::success();
  });
}
Result Controller::read_coefficients(core::RoadLoad& c) {
  return guarded("read coefficients", [&] {
    if (Result r = do_read_coefficients(c, reply_deadline()); !r.ok()) return r;
    if (std::string bad = plausible_curve(c, limits_.max_speed_kmh); !bad.empty())
      return Result::fail("the controller reads back " + bad);
    return Result::success();
  });
}

Result Controller::hold_speed(double kmh) {
  return guarded("speed hold", [&] {
    if (!(kmh >= 0.0) || !std::isfinite(kmh)) return Result::fail("speed " + num(kmh) + " km/h is not valid");
    if (!(limits_.max_speed_kmh > 0.0))
      return Result::fail("no speed limit configured: refusing to motor the rollers");
    if (kmh > limits_.max_speed_kmh)
      return Result::fail("speed " + num(kmh) + " km/h is above the limit of " + num(limits_.max_speed_kmh) +
                          " km/h; not sent");
    return command_done(do_command(Mode::speed_hold, kmh, reply_deadline()));
  });
}
Result Controller::release_road_load() {
  return guarded("road-load simulation",
                 [&] { return command_done(do_command(Mode::road_load, 0.0, reply_deadline())); });
}
Result Controller::prompt_driver(DriverPrompt p, double speed_kmh) {
  return guarded("driver prompt", [&] {
    if (p == DriverPrompt::accelerate &&
        !(speed_kmh > 0.0 && (limits_.max_speed_kmh <= 0.0 || speed_kmh <= limits_.max_speed_kmh)))
      return Result::fail("a driver prompt to " + num(speed_kmh) + " km/h is outside the speed limit of " +
                          num(limits_.max_speed_kmh) + " km/h");
    return command_done(do_prompt_driver(p, speed_kmh, reply_deadline()));
  });
}
Result Controller::controlled_stop() {
  return guarded("controlled stop",
                 [&] { return command_done(do_command(Mode::controlled_stop, 0.0, reply_deadline())); });
}
Result Controller::idle() {
  return guarded("idle", [&] { return command_done(do_command(Mode::idle, 0.0, reply_deadline())); });
}
Result Controller::apply_force(double n) {
  return guarded("constant force", [&] {
    if (!std::isfinite(n)) return Result::fail("force " + num(n) + " N is not valid");
    if (!(limits_.max_force_n > 0.0))
      return Result::fail("no force limit configured: refusing to motor the rollers");
    if (std::abs(n) > limits_.max_force_n)
      return Result::fail("force " + num(n) + " N is above the limit of " + num(limits_.max_force_n) +
                          " N; not sent");
    if (Result r = do_command(Mode::constant_force, n, reply_deadline()); !r.ok()) return r;
    // The force the controller holds is read back and compared like the inertia and coefficients.
    std::optional<double> back;
    if (Result r = do_read_force(back, reply_deadline()); !r.ok()) return r;
    if (back && !(std::abs(*back - n) <= setting_tolerance(Setting::force, n)))
      return Result::fail("read-back force " + num(*back) + " N differs from the " + num(n) +
                          " N written; refusing to go on");
    return command_done(Result::success());
  });
}
Result Controller::free_coast() {
  return guarded("free coast",
                 [&] { return command_done(do_command(Mode::free_coast, 0.0, reply_deadline())); });
}

Result Controller::start_stream(double rate_hz) {
  return guarded("start stream", [&] {
    if (!(rate_hz >= 10.0 && rate_hz <= 1000.0))
      return Result::fail("rate " + num(rate_hz) + " Hz, allowed 10 to 1000 Hz");
    Result r = do_stream(rate_hz, reply_deadline());
    if (!r.ok()) return r;
    // A new stream: what was buffered before it is dropped with the old epoch; its counter and clock start
    // afresh.
    drain_adapter();
    pending_.clear();
    have_index_ = false;
    clock_.reset();
    ClockRules rules = clock_.rules();
    rules.stream_rate_hz = streamed() ? rate_hz : 0.0;
    clock_.set_rules(rules);
    stream_rate_hz_ = rate_hz;
    on_stream_rate(rate_hz * time_scale_);
    ++epoch_;
    return r;
  });
}
Result Controller::stop_stream() {
  return guarded("stop stream", [&] {
    Result r = do_stream(0.0, reply_deadline());
    pending_.clear();
    stream_rate_hz_ = 0.0;
    return r;
  });
}

Result Controller::command_done(Result r) {
  if (!r.ok()) return r;
  drain_adapter();
  ++epoch_;
  return r;
}

void Controller::drain_adapter() {
  std::vector<Sample> raw;
  // A deadline already passed: only what the adapter has read, no waiting (a polled adapter may take one
  // reading).
  const Result r = do_receive_samples(raw, Clock::now() - std::chrono::milliseconds(1));
  if (!r.ok() && !pending_fault_ && r.status == Result::Status::fatal) pending_fault_ = r;
  ingest(raw, pending_);
}

namespace {
std::string describe_sample(const Sample& s) {
  return "index " + std::to_string(s.index) + ", time " + num(s.time_s) + " s, speed " + num(s.speed_kmh) +
         " km/h, force " + num(s.force_n) + " N";
}
}  // namespace

double Controller::continued_time(double raw_s, const char* what) {
  double t = raw_s + time_offset_s_;
  if (!time_fresh_start_ || !std::isfinite(t)) return t;
  time_fresh_start_ = false;
  if (!have_time_seen_ || t >= last_time_seen_s_) return t;
  const double since_s =
      limits_.clock_wall_related
          ? std::chrono::duration<double>(Clock::now() - last_time_seen_wall_).count() * time_scale_
          : 0.0;
  const double to = last_time_seen_s_ + since_s;
  time_offset_s_ += to - t;
  warn("clock_restarted", std::string("the controller's clock started again: its ") + what + " read " +
                              num(raw_s) + " s after " + num(last_time_seen_s_) +
                              " s had been handed up; its times continue from " + num(to) +
                              " s (the tool's own time since, at the stated rate)");
  return to;
}

void Controller::ingest(std::vector<Sample>& raw, std::vector<Sample>& accepted) {
  std::vector<std::string> events;
  do_take_events(events);
  for (auto& e : events) {
    ++stats_.events;
    stats_.last_event = e.substr(0, 200);
    if (!pending_fault_ && e.rfind("FAULT", 0) == 0) {
      pending_fault_ = Result::fail("the controller reports a fault event: " + e.substr(0, 200));
      pending_fault_is_event_ = true;
    }
    // A warning the controller sends of its own accord goes on to the session's log.
    if (e.rfind("WARNING", 0) == 0) warn("controller_event", "the controller warns: " + e.substr(0, 200));
  }
  const double w = wall_s();
  for (auto& s : raw) {
    s.time_s += time_offset_s_;  // the layer's continuous time (continued_time); a NaN stays one
    // Exact repeats (a controller or a link that sends a line twice) are harmless: dropped and counted.
    if (have_index_ && s.index == last_sample_.index && s.time_s == last_sample_.time_s &&
        s.speed_kmh == last_sample_.speed_kmh && s.force_n == last_sample_.force_n &&
        s.flags == last_sample_.flags) {
      ++stats_.samples_duplicate;
      continue;
    }
    std::string bad;
    if (!std::isfinite(s.time_s) || !std::isfinite(s.speed_kmh) || !std::isfinite(s.force_n))
      bad = "a value is not a finite number";
    else if (s.speed_kmh < -2.0)
      bad = "negative speed";
    else if (s.speed_kmh < 0.0 && have_index_ && last_sample_.speed_kmh > 2.0)
      // Noise at rest may read a little below zero; rollers turning at more than 2 km/h cannot read below
      // zero one sample later (a glitch: dropped and counted, so one such sample never ends a coast-down; a
      // run of them is a fault). Common practice, no source.
      bad = "negative speed " + num(s.speed_kmh) + " km/h one sample after " + num(last_sample_.speed_kmh) +
            " km/h";
    else if (std::abs(s.force_n) > 1e6)
      bad = "force beyond any dyno";
    else if (have_index_ && s.index < next_index_)
      bad = "the sample counter ran backwards (expected " + std::to_string(next_index_) + ")";
    if (!bad.empty()) {
      ++stats_.samples_malformed;
      ++recent_malformed_;
      ++malformed_run_;
      stats_.last_malformed = bad + " (" + describe_sample(s) + ")";
      if (!pending_fault_ && !stopping_ && (malformed_run_ > 20 || (recent_malformed_ > 50)))
        pending_fault_ = Result::fail(
            "the controller sends malformed samples: " + std::to_string(stats_.samples_malformed) +
            " dropped so far (last: " + stats_.last_malformed + ")");
      continue;
    }
    malformed_run_ = 0;
    if (++recent_valid_ + recent_malformed_ >= 500) recent_valid_ = recent_malformed_ = 0;
    s.time_s = continued_time(s.time_s - time_offset_s_, "sample");
    if (!stopping_)
      if (auto v = clock_.on_sample(s.time_s, w, have_index_ ? s.index - last_sample_.index : 0);
          v && !pending_fault_)
        pending_fault_ = Result::fail(*v);
    if (have_index_ && s.index != next_index_) stats_.samples_lost += s.index - next_index_;
    next_index_ = s.index + 1;
    // Every sample is a moment of its own: one with the time of the last one (a polled device one poll
    // behind, a time register coarser than the poll period, a frozen clock) is no new sample, and the trace
    // analysis needs time to ascend. Dropped and counted here, after the clock guard has seen it, so that a
    // clock that stopped still reads as "the controller's clock stopped", never as a quiet link.
    // While stopping the guard is off and the time not needed to ascend: a frozen clock's samples go on to
    // the stop's own rules (its progress, its standstill held on the tool's clock).
    // A repeat that shows a fault or a limit is handed up all the same: a fault is never hidden behind a
    // clock.
    if (!stopping_ && have_index_ && s.time_s == last_sample_.time_s &&
        (s.flags & (kFlagFault | kFlagEstop | kFlagWatchdog | kFlagLimit)) == 0) {
      last_sample_wall_ = Clock::now();  // a sample came: the link is alive (the sample gap is for silence)
      ++stats_.samples_duplicate;
      warn("sample_time_repeated",
           "a sample carried the controller time of the one before: not a new sample, dropped");
      continue;
    }
    have_index_ = true;
    last_sample_ = s;
    last_sample_wall_ = Clock::now();
    if (!have_time_seen_ || s.time_s > last_time_seen_s_) {
      last_time_seen_s_ = s.time_s;
      last_time_seen_wall_ = last_sample_wall_;
    }
    have_time_seen_ = true;
    s.epoch = epoch_;
    ++stats_.samples_received;
    accepted.push_back(s);
  }
}

Result Controller::receive_samples(std::vector<Sample>& out) {
  return guarded("receive samples", [&] {
    if (pending_fault_ && !stopping_) return *pending_fault_;
    // A heartbeat that fails here is usually a controller that fell silent: say what was missing on both
    // counts.
    auto silent = [&](Result r) {
      const auto quiet =
          std::chrono::duration_cast<std::chrono::milliseconds>(Clock::now() - last_sample_wall_).count();
      if (r.status == Result::Status::retryable && quiet >= timeouts_.sample_gap.count() / 2)
        r.message = "no sample for " + std::to_string(quiet) + " ms and " + r.message;
      return r;
    };
    if (Result r = heartbeat_if_due(); !r.ok()) return silent(r);
    const std::size_t before = out.size();
    out.insert(out.end(), pending_.begin(), pending_.end());
    pending_.clear();
    const std::uint64_t rejected_before = stats_.lines_rejected, malformed_before = stats_.samples_malformed;
    // Wait in slices no longer than the heartbeat interval so heartbeats keep going while samples are
    // awaited.
    const Deadline gap = Clock::now() + timeouts_.sample_gap;
    std::vector<Sample> raw;
    while (out.size() == before) {
      const Deadline slice = std::min(gap, Clock::now() + timeouts_.heartbeat_interval);
      raw.clear();
      if (Result r = do_receive_samples(raw, slice); !r.ok()) return r;
      const std::uint64_t repeats = stats_.samples_duplicate;
      ingest(raw, out);
      if (pending_fault_ && !stopping_) return *pending_fault_;
      // Samples came, though none new (each with the time of the one before): no silence; the caller's
      // own deadlines and the clock guard judge a clock that does not move.
      if (out.size() > before || stats_.samples_duplicate != repeats) break;
      if (Clock::now() >= gap) {
        std::string why = "no sample for " + std::to_string(timeouts_.sample_gap.count()) +
                          " ms (stalled stream or lost link";
        if (const auto n = stats_.lines_rejected - rejected_before; n > 0)
          why += "; " + std::to_string(n) + " lines rejected meanwhile, last: " + stats_.last_rejected;
        if (const auto n = stats_.samples_malformed - malformed_before; n > 0)
          why += "; " + std::to_string(n) +
                 " malformed samples dropped meanwhile, last: " + stats_.last_malformed;
        return Result::retry(why + ")");
      }
      if (Result r = heartbeat_if_due(); !r.ok()) return silent(r);
    }
    last_sample_wall_ = Clock::now();
    return Result::success();
  });
}

Result Controller::heartbeat() {
  return guarded(
      "heartbeat",
      [&] {
        last_heartbeat_ = Clock::now();
        ++stats_.heartbeats;
        return do_heartbeat(reply_deadline());
      },
      /*renews_lease=*/false);
}

Result Controller::heartbeat_if_due() {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  if (Clock::now() - last_heartbeat_ < timeouts_.heartbeat_interval) return Result::success();
  return heartbeat();
}

void Controller::heartbeat_if_due_and_free() {
  // Only while the driving thread is alive and within its announced steps: a stalled tool must let the
  // controller's watchdog stop the rollers.
  if (!lease_valid()) return;
  const std::unique_lock<std::recursive_mutex> lock(mu_, std::try_to_lock);
  // A failed beat is not kept: the driving thread meets the link's state in its own next call, and this
  // thread tries the next beat when it is due (if none gets through, the controller's watchdog stops the
  // rollers). A beat tried here holds the link for its retries: a stop command waits behind them.
  if (lock.owns_lock()) heartbeat_if_due();
}

void Controller::warn(std::string code, std::string text) {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  ++stats_.warnings;
  for (Warning& w : warnings_)
    if (w.code == code && w.text == text) {
      ++w.count;
      return;
    }
  if (warnings_.size() >= kMaxWarnings) {
    ++warnings_dropped_;
    ++stats_.warnings_dropped;
    return;
  }
  warnings_.push_back(Warning{std::move(code), std::move(text), 1});
}

std::vector<Warning> Controller::take_warnings() {
  const std::lock_guard<std::recursive_mutex> lock(mu_);
  std::vector<Warning> out;
  out.swap(warnings_);
  if (warnings_dropped_ > 0) {
    out.push_back(Warning{"warnings_dropped",
                          std::to_string(warnings_dropped_) + " more warnings did not fit the queue of " +
                              std::to_string(kMaxWarnings) +
                              " distinct warnings between two reads and are counted here only",
                          warnings_dropped_});
    warnings_dropped_ = 0;
  }
  return out;
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

bool tool_may_clear(const StatusReport& st) {
  return st.fault == "WATCHDOG" && (st.flags & kFlagWatchdog) != 0 && (st.flags & kFlagEstop) == 0;
}

Result Controller::status(StatusReport& out) {
  return guarded("status", [&] {
    if (Result r = do_status(out, reply_deadline()); !r.ok()) return r;
    if (!std::isfinite(out.speed_kmh) || out.speed_kmh < -2.0)
      return Result::fail("the controller's status reports a speed of " + num(out.speed_kmh) +
                          " km/h, not a speed");
    // Checked while stopping too (the clock guard is not): a stop is never confirmed on a time that is not
    // one.
    if (!std::isfinite(out.time_s))
      return Result::fail("the controller's status reports a time of " + num(out.time_s) + " s, not a time");
    out.time_s = continued_time(out.time_s, "status");
    // A fault the flags show is a fault, whatever name the status gives (or leaves out): the emergency stop
    // named first, the one that must never be taken for a watchdog stop.
    if (out.fault.empty() && (out.flags & (kFlagFault | kFlagEstop | kFlagWatchdog)) != 0)
      out.fault = (out.flags & kFlagEstop) ? "ESTOP" : (out.flags & kFlagWatchdog) ? "WATCHDOG" : "FAULT";
    if (!stopping_)
      if (auto v = clock_.on_status(out.time_s, wall_s())) return Result::fail(*v);
    return Result::success();
  });
}
Result Controller::clear_fault() {
  return guarded("clear fault", [&] {
    Result r = command_done(do_clear_fault(reply_deadline()));
    // The fault events that led here are answered by the clear; anything else found on the way stands.
    if (r.ok()) {
      clear_epoch_ = epoch_;
      if (pending_fault_is_event_) pending_fault_.reset();
    }
    return r;
  });
}

}  // namespace loadtrim::controller
