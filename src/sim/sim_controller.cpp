#include "sim/sim_controller.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace loadtrim::sim {

using line::ErrorCode;
using line::kv;
using physics::Mode;

namespace {
controller::Mode to_controller(Mode m) {
  switch (m) {
    case Mode::idle:
      return controller::Mode::idle;
    case Mode::speed_hold:
      return controller::Mode::speed_hold;
    case Mode::road_load:
      return controller::Mode::road_load;
    case Mode::controlled_stop:
      return controller::Mode::controlled_stop;
    case Mode::constant_force:
      return controller::Mode::constant_force;
  }
  return controller::Mode::idle;
}
const char* wire(controller::Mode m) {
  switch (m) {
    case controller::Mode::idle:
      return line::kModeIdle;
    case controller::Mode::speed_hold:
      return line::kModeHold;
    case controller::Mode::road_load:
      return line::kModeRoadLoad;
    case controller::Mode::controlled_stop:
      return line::kModeStop;
    case controller::Mode::constant_force:
      return line::kModeForce;
    case controller::Mode::free_coast:
      return line::kModeIdle;  // reported as idle while coasting
  }
  return line::kModeIdle;
}
std::string hex2(std::uint32_t f) {
  char b[16];
  std::snprintf(b, sizeof b, "%02X", f);
  return b;
}
const char* kCaps = "caps=hold,hold-force,roadload,stop,stream,watchdog,status,force,free";
}  // namespace

SimController::SimController(const physics::Truth& truth, SimSettings settings)
    : model_(truth), settings_(std::move(settings)) {}

std::string SimController::wire_mode() const {
  return wire(to_controller(model_.mode()));
}

std::uint32_t SimController::flags() const {
  std::uint32_t f = 0;
  if (!fault_.empty()) f |= line::kFlagFault;
  if (fault_ == "ESTOP") f |= line::kFlagEstop;
  if (fault_ == "WATCHDOG") f |= line::kFlagWatchdog;
  if (model_.mode() == Mode::speed_hold && std::abs(model_.speed_kmh() - model_.hold_target_kmh()) < 0.1)
    f |= line::kFlagAtSetpoint;
  return f;
}

// ---- the typed core
// ------------------------------------------------------------------------------------------

std::optional<SimError> SimController::hello(int version) {
  if (version != line::kProtocolVersion)
    return SimError{ErrorCode::bad_argument, "unsupported protocol version"};
  hello_ = true;
  return std::nullopt;
}

controller::ControllerInfo SimController::info() const {
  const auto& d = model_.truth().dyno;
  controller::ControllerInfo i;
  i.name = settings_.name;
  i.protocol_version = line::kProtocolVersion;
  i.capabilities = std::string(kCaps).substr(5);
  i.roller_diameter_m = settings_.faults.report_roller_diameter_m.value_or(d.roller_diameter_m);
  i.base_inertia_kg = settings_.faults.report_base_inertia_kg.value_or(model_.stated_base_inertia_kg());
  i.max_speed_kmh = settings_.max_speed_kmh;
  i.max_force_n = settings_.max_force_n;
  i.time_scale = settings_.time_scale;
  return i;
}

std::optional<SimError> SimController::set_inertia(double kg) {
  if (kg < 100.0 || kg > 10000.0)
    return SimError{ErrorCode::out_of_limits, "inertia allowed 100 to 10000 kg"};
  if (model_.mode() == Mode::road_load)
    return SimError{ErrorCode::wrong_state, "not during road-load simulation"};
  model_.set_inertia_kg(kg);
  return std::nullopt;
}

std::optional<SimError> SimController::set_coefficients(const core::RoadLoad& c) {
  if (std::abs(c.f0_n) > settings_.max_force_n)
    return SimError{ErrorCode::out_of_limits, "f0 above the force limit"};
  if (model_.mode() == Mode::road_load)
    return SimError{ErrorCode::wrong_state, "not during road-load simulation"};
  model_.set_coefficients(c);
  return std::nullopt;
}

std::optional<SimError> SimController::command(controller::Mode mode, double hold_kmh) {
  const bool moving = mode == controller::Mode::speed_hold || mode == controller::Mode::road_load ||
                      mode == controller::Mode::constant_force;
  if (moving && !fault_.empty())
    return SimError{ErrorCode::fault_active, "fault " + fault_ + " latched: CLEAR first"};
  switch (mode) {
    case controller::Mode::speed_hold:
      if (!(hold_kmh >= 0.0)) return SimError{ErrorCode::bad_argument, "MODE HOLD needs a speed in km/h"};
      if (hold_kmh > settings_.max_speed_kmh)
        return SimError{ErrorCode::out_of_limits, "speed above the controller limit"};
      model_.hold_speed(hold_kmh);
      break;
    case controller::Mode::road_load:
      model_.release_road_load();
      break;
    case controller::Mode::controlled_stop:
      model_.controlled_stop();
      break;
    case controller::Mode::idle:
      if (model_.speed_kmh() > 0.5) return SimError{ErrorCode::wrong_state, "rollers turning: STOP first"};
      model_.idle();
      break;
    case controller::Mode::free_coast:
      model_.idle();
      break;  // the motor lets go at any speed
    case controller::Mode::constant_force:
      if (!(std::abs(hold_kmh) <= settings_.max_force_n))
        return SimError{ErrorCode::out_of_limits, "force above the controller limit"};
      model_.apply_force(hold_kmh);
      break;
  }
  mode_since_s_ = model_.time_s();
  return std::nullopt;
}

std::optional<SimError> SimController::stream(double rate_hz) {
  if (!(rate_hz == 0.0 || (rate_hz >= 10.0 && rate_hz <= 1000.0)))
    return SimError{ErrorCode::bad_argument, "STREAM <rate_hz> with 10 to 1000 Hz, or 0 to stop"};
  stream_hz_ = rate_hz;
  next_sample_s_ = model_.time_s();
  return std::nullopt;
}

std::optional<SimError> SimController::clear() {
  if (model_.speed_kmh() > 0.5) return SimError{ErrorCode::wrong_state, "rollers still turning"};
  fault_.clear();
  return std::nullopt;
}

controller::Sample SimController::reading() {
  const physics::Sample s = model_.sample();
  return {sample_index_++, s.time_s, std::max(0.0, s.speed_kmh), s.force_n, to_controller(model_.mode()),
          flags()};
}

controller::StatusReport SimController::status() const {
  return {to_controller(model_.mode()), model_.speed_kmh(), model_.time_s(), flags(), fault_};
}

void SimController::latch_fault(const std::string& kind, const std::string& detail,
                                std::vector<std::string>& events) {
  fault_ = kind;
  if (model_.speed_kmh() > 0.0)
    model_.controlled_stop();
  else
    model_.idle();
  std::string d = detail;  // one field on the wire: no spaces
  for (char& ch : d)
    if (ch == ' ') ch = '_';
  events.push_back("FAULT " + kv("kind", kind) + " " + kv("detail", d) + " " + kv("time_s", model_.time_s()));
}

void SimController::advance_typed(double dt, std::vector<controller::Sample>& samples,
                                  std::vector<std::string>& events) {
  const double end = model_.time_s() + dt;
  const auto& fp = settings_.faults;
  // Fixed 10 ms integration steps at most: the dynamics are slow and smooth (RK4 error far below the noise).
  constexpr double kStep = 0.01;
  while (stream_hz_ > 0.0 && next_sample_s_ <= end + 1e-12) {
    model_.advance(next_sample_s_ - model_.time_s(), kStep);
    if (!(fp.stall_at_s && model_.time_s() >= *fp.stall_at_s)) {
      const physics::Sample s = model_.sample();
      samples.push_back({sample_index_++, s.time_s, std::max(0.0, s.speed_kmh), s.force_n,
                         to_controller(model_.mode()), flags()});
    }
    next_sample_s_ += 1.0 / stream_hz_;
  }
  model_.advance(end - model_.time_s(), kStep);
  if (fp.estop_at_s && !estop_done_ && model_.time_s() >= *fp.estop_at_s) {
    estop_done_ = true;
    latch_fault("ESTOP", "emergency stop raised at the controller", events);
  }
  if (!dropped_once_) {
    const bool by_time = fp.drop_at_s && model_.time_s() >= *fp.drop_at_s;
    const bool by_mode = fp.drop_in_mode && wire_mode() == *fp.drop_in_mode &&
                         model_.time_s() - mode_since_s_ >= fp.drop_after_s;
    if (by_time || by_mode) {
      dropped_once_ = true;
      drop_pending_ = true;
    }
  }
}

void SimController::check_watchdog_typed(double wall_s, std::vector<std::string>& events) {
  const Mode m = model_.mode();
  if ((m == Mode::speed_hold || m == Mode::road_load || m == Mode::constant_force) &&
      wall_s - last_request_wall_s_ > settings_.watchdog_s)
    latch_fault("WATCHDOG", "no request within the watchdog window: controlled stop", events);
}

bool SimController::take_drop_request() {
  const bool d = drop_pending_;
  drop_pending_ = false;
  return d;
}

// ---- the line-protocol front end
// -----------------------------------------------------------------------------

void SimController::send(line::Message m, std::vector<std::string>& out) {
  m.seq = seq_++;
  std::string s = line::encode(m);
  ++lines_sent_;
  const bool corrupt = (settings_.faults.corrupt_line && *settings_.faults.corrupt_line == lines_sent_) ||
                       (settings_.faults.corrupt_every && lines_sent_ % settings_.faults.corrupt_every == 0);
  if (corrupt && s.size() > 8) s[s.size() / 2] = s[s.size() / 2] == 'X' ? 'Y' : 'X';  // CRC no longer matches
  out.push_back(std::move(s));
}

void SimController::send_events(const std::vector<std::string>& events, std::vector<std::string>& out) {
  if (!hello_) return;
  for (const auto& e : events) {
    line::Message m{0, "EVT", {}};
    std::size_t p = 0;
    while (p <= e.size()) {
      const auto q = e.find(' ', p);
      m.fields.push_back(e.substr(p, q == std::string::npos ? std::string::npos : q - p));
      if (q == std::string::npos) break;
      p = q + 1;
    }
    send(std::move(m), out);
  }
}

void SimController::reply_ok(std::uint32_t req, const std::string& verb, std::vector<std::string> fields,
                             std::vector<std::string>& out) {
  fields.insert(fields.begin(), verb);
  fields.insert(fields.begin(), std::to_string(req));
  send({0, "OK", std::move(fields)}, out);
}

void SimController::reply_err(std::uint32_t req, ErrorCode code, const std::string& text,
                              std::vector<std::string>& out) {
  std::vector<std::string> f = {std::to_string(req), std::to_string(static_cast<int>(code))};
  std::string word;
  for (char c : text) {
    if (c == ' ') {
      if (!word.empty()) f.push_back(word);
      word.clear();
    } else
      word += c;
  }
  if (!word.empty()) f.push_back(word);
  send({0, "ERR", std::move(f)}, out);
}

void SimController::on_line(std::string_view text, double wall_s, std::vector<std::string>& out) {
  const line::Decoded d = line::decode(text);
  if (!d.ok()) {
    if (d.error == line::DecodeError::empty) return;
    // Never acted on: tell the sender which line could not be read when its sequence number is legible.
    std::uint32_t req = 0;
    std::sscanf(std::string(text.substr(0, 10)).c_str(), "%u", &req);
    reply_err(req, ErrorCode::bad_frame, std::string("line rejected: ") + line::to_string(d.error), out);
    return;
  }
  touch(wall_s);
  const line::Message& m = d.message;
  const std::uint32_t req = m.seq;
  const auto& f = m.fields;
  auto answer = [&](const std::optional<SimError>& e, const std::string& verb,
                    std::vector<std::string> fields) {
    if (e)
      reply_err(req, e->code, e->text, out);
    else
      reply_ok(req, verb, std::move(fields), out);
  };
  for (const auto& v : settings_.faults.refuse)
    if (v == m.type) return reply_err(req, ErrorCode::refused, "refused by fault injection", out);
  if (m.type == "HELLO") {
    const auto v = line::number_field(m, "version");
    return answer(hello(v ? static_cast<int>(*v) : -1), "HELLO",
                  {kv("version", line::kProtocolVersion), kCaps});
  }
  if (!hello_) return reply_err(req, ErrorCode::wrong_state, "send HELLO first", out);
  if (m.type == "BEAT") return reply_ok(req, "BEAT", {}, out);
  if (m.type == "IDENT") {
    const auto i = info();
    return reply_ok(
        req, "IDENT",
        {kv("name", i.name), kv("version", i.protocol_version), kv("roller_diameter_m", i.roller_diameter_m),
         kv("base_inertia_kg", i.base_inertia_kg), kv("max_speed_kmh", i.max_speed_kmh),
         kv("max_force_n", i.max_force_n), kv("time_scale", i.time_scale), kCaps},
        out);
  }
  if (m.type == "STATUS") {
    const auto st = status();
    return reply_ok(
        req, "STATUS",
        {kv("mode", wire(st.mode)), kv("speed_kmh", st.speed_kmh), kv("time_s", st.time_s),
         kv("flags", hex2(st.flags)), kv("fault", st.fault.empty() ? std::string("none") : st.fault)},
        out);
  }
  if (m.type == "INERTIA") {
    if (f.size() == 1 && f[0] == "GET")
      return reply_ok(req, "INERTIA", {kv("inertia_kg", model_.inertia_set_kg())}, out);
    if (f.size() == 2 && f[0] == "SET") {
      const auto v = line::parse_number(f[1]);
      if (!v) return reply_err(req, ErrorCode::bad_argument, "INERTIA SET needs a number in kg", out);
      const auto e = set_inertia(*v);
      return answer(e, "INERTIA", {kv("inertia_kg", model_.inertia_set_kg())});
    }
    return reply_err(req, ErrorCode::bad_argument, "INERTIA GET or INERTIA SET <kg>", out);
  }
  if (m.type == "COEF") {
    auto echo = [&] {
      const auto& c = model_.coefficients();
      return std::vector<std::string>{kv("f0_n", c.f0_n), kv("f1_n_per_kmh", c.f1_n_per_kmh),
                                      kv("f2_n_per_kmh2", c.f2_n_per_kmh2)};
    };
    if (f.size() == 1 && f[0] == "GET") return reply_ok(req, "COEF", echo(), out);
    if (f.size() == 4 && f[0] == "SET") {
      const auto a = line::parse_number(f[1]), b = line::parse_number(f[2]), c = line::parse_number(f[3]);
      if (!a || !b || !c) return reply_err(req, ErrorCode::bad_argument, "COEF SET needs three numbers", out);
      const auto e = set_coefficients({*a, *b, *c});
      return answer(e, "COEF", echo());
    }
    return reply_err(req, ErrorCode::bad_argument, "COEF GET or COEF SET <f0> <f1> <f2>", out);
  }
  if (m.type == "MODE") {
    if (f.empty())
      return reply_err(req, ErrorCode::bad_argument, "MODE IDLE|HOLD <km/h>|ROADLOAD|STOP|FORCE <N>|FREE",
                       out);
    controller::Mode mode;
    double hold = 0.0;
    if (f[0] == line::kModeHold) {
      const auto v = f.size() == 2 ? line::parse_number(f[1]) : std::nullopt;
      if (!v) return reply_err(req, ErrorCode::bad_argument, "MODE HOLD needs a speed in km/h", out);
      mode = controller::Mode::speed_hold;
      hold = *v;
    } else if (f[0] == line::kModeForce) {
      const auto v = f.size() == 2 ? line::parse_number(f[1]) : std::nullopt;
      if (!v) return reply_err(req, ErrorCode::bad_argument, "MODE FORCE needs a force in N", out);
      mode = controller::Mode::constant_force;
      hold = *v;
    } else if (f[0] == line::kModeFree)
      mode = controller::Mode::free_coast;
    else if (f[0] == line::kModeRoadLoad)
      mode = controller::Mode::road_load;
    else if (f[0] == line::kModeStop)
      mode = controller::Mode::controlled_stop;
    else if (f[0] == line::kModeIdle)
      mode = controller::Mode::idle;
    else
      return reply_err(req, ErrorCode::bad_argument, "unknown mode " + f[0], out);
    const auto e = command(mode, hold);
    return answer(e, "MODE", {kv("mode", wire_mode())});
  }
  if (m.type == "STREAM") {
    const auto r = f.size() == 1 ? line::parse_number(f[0]) : std::nullopt;
    const auto e = stream(r ? *r : -1.0);
    return answer(e, "STREAM", {kv("rate_hz", stream_hz_)});
  }
  if (m.type == "CLEAR") return answer(clear(), "CLEAR", {});
  reply_err(req, ErrorCode::unknown_verb, "unknown verb " + m.type, out);
}

void SimController::advance(double dt, std::vector<std::string>& out) {
  std::vector<controller::Sample> samples;
  std::vector<std::string> events;
  advance_typed(dt, samples, events);
  char b[160];
  for (const auto& s : samples) {
    std::snprintf(b, sizeof b, "%.4f", s.time_s);
    std::string t = b;
    std::snprintf(b, sizeof b, "%.4f", s.speed_kmh);
    std::string v = b;
    std::snprintf(b, sizeof b, "%.2f", s.force_n);
    send({0, "SMP", {std::to_string(s.index), t, v, b, wire(s.mode), hex2(s.flags)}}, out);
  }
  send_events(events, out);
}

void SimController::check_watchdog(double wall_s, std::vector<std::string>& out) {
  std::vector<std::string> events;
  check_watchdog_typed(wall_s, events);
  send_events(events, out);
}

}  // namespace loadtrim::sim
