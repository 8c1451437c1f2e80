#include "sim/sim_controller.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace loadtrim::sim {

using line::ErrorCode;
using line::format_number;
using line::kv;
using physics::Mode;

SimController::SimController(const physics::Truth& truth, SimSettings settings)
    : model_(truth), settings_(std::move(settings)) {}

std::string SimController::wire_mode() const {
  switch (model_.mode()) {
    case Mode::idle: return line::kModeIdle;
    case Mode::speed_hold: return line::kModeHold;
    case Mode::road_load: return line::kModeRoadLoad;
    case Mode::controlled_stop: return line::kModeStop;
  }
  return line::kModeIdle;
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

void SimController::send(line::Message m, std::vector<std::string>& out) {
  m.seq = seq_++;
  std::string s = line::encode(m);
  ++lines_sent_;
  const bool corrupt = (settings_.faults.corrupt_line && *settings_.faults.corrupt_line == lines_sent_) ||
                       (settings_.faults.corrupt_every && lines_sent_ % settings_.faults.corrupt_every == 0);
  if (corrupt && s.size() > 8) s[s.size() / 2] = s[s.size() / 2] == 'X' ? 'Y' : 'X';  // CRC no longer matches
  out.push_back(std::move(s));
}

void SimController::reply_ok(std::uint32_t req, const std::string& verb, std::vector<std::string> fields,
                             std::vector<std::string>& out) {
  fields.insert(fields.begin(), verb);
  fields.insert(fields.begin(), std::to_string(req));
  send({0, "OK", std::move(fields)}, out);
}

void SimController::reply_err(std::uint32_t req, ErrorCode code, const std::string& text, std::vector<std::string>& out) {
  std::vector<std::string> f = {std::to_string(req), std::to_string(static_cast<int>(code))};
  std::string word;
  for (char c : text) {
    if (c == ' ') {
      if (!word.empty()) f.push_back(word);
      word.clear();
    } else word += c;
  }
  if (!word.empty()) f.push_back(word);
  send({0, "ERR", std::move(f)}, out);
}

void SimController::latch_fault(const std::string& kind, const std::string& detail, std::vector<std::string>& out) {
  fault_ = kind;
  if (model_.speed_kmh() > 0.0) model_.controlled_stop();
  else model_.idle();
  std::string d = detail;  // one field on the wire: no spaces
  for (char& ch : d)
    if (ch == ' ') ch = '_';
  if (hello_) send({0, "EVT", {"FAULT", kv("kind", kind), kv("detail", d), kv("time_s", model_.time_s())}}, out);
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
  last_request_wall_s_ = wall_s;
  const line::Message& m = d.message;
  const std::uint32_t req = m.seq;
  const auto& f = m.fields;
  for (const auto& v : settings_.faults.refuse)
    if (v == m.type) return reply_err(req, ErrorCode::refused, "refused by fault injection", out);
  if (m.type == "HELLO") {
    const auto v = line::number_field(m, "version");
    if (!v || static_cast<int>(*v) != line::kProtocolVersion)
      return reply_err(req, ErrorCode::bad_argument, "unsupported protocol version", out);
    hello_ = true;
    return reply_ok(req, "HELLO", {kv("version", line::kProtocolVersion), "caps=hold,hold-force,roadload,stop,stream,watchdog,status"}, out);
  }
  if (!hello_) return reply_err(req, ErrorCode::wrong_state, "send HELLO first", out);
  if (m.type == "BEAT") return reply_ok(req, "BEAT", {}, out);
  if (m.type == "IDENT") {
    const auto& d = model_.truth().dyno;
    return reply_ok(req, "IDENT",
                    {kv("name", settings_.name), kv("version", line::kProtocolVersion),
                     kv("roller_diameter_m", settings_.faults.report_roller_diameter_m.value_or(d.roller_diameter_m)),
                     kv("base_inertia_kg", settings_.faults.report_base_inertia_kg.value_or(d.base_inertia_kg)),
                     kv("max_speed_kmh", settings_.max_speed_kmh), kv("max_force_n", settings_.max_force_n),
                     "caps=hold,hold-force,roadload,stop,stream,watchdog,status"},
                    out);
  }
  if (m.type == "STATUS")
    return reply_ok(req, "STATUS",
                    {kv("mode", wire_mode()), kv("speed_kmh", model_.speed_kmh()), kv("time_s", model_.time_s()),
                     kv("flags", [&] { char b[16]; std::snprintf(b, sizeof b, "%02X", flags()); return std::string(b); }()),
                     kv("fault", fault_.empty() ? std::string("none") : fault_)},
                    out);
  if (m.type == "INERTIA") {
    if (!f.empty() && f[0] == "GET" && f.size() == 1) return reply_ok(req, "INERTIA", {kv("inertia_kg", model_.inertia_set_kg())}, out);
    if (f.size() == 2 && f[0] == "SET") {
      const auto v = line::parse_number(f[1]);
      if (!v) return reply_err(req, ErrorCode::bad_argument, "INERTIA SET needs a number in kg", out);
      if (*v < 100.0 || *v > 10000.0) return reply_err(req, ErrorCode::out_of_limits, "inertia allowed 100 to 10000 kg", out);
      if (model_.mode() == Mode::road_load) return reply_err(req, ErrorCode::wrong_state, "not during road-load simulation", out);
      model_.set_inertia_kg(*v);
      return reply_ok(req, "INERTIA", {kv("inertia_kg", model_.inertia_set_kg())}, out);
    }
    return reply_err(req, ErrorCode::bad_argument, "INERTIA GET or INERTIA SET <kg>", out);
  }
  if (m.type == "COEF") {
    auto echo = [&] {
      const auto& c = model_.coefficients();
      return std::vector<std::string>{kv("f0_n", c.f0_n), kv("f1_n_per_kmh", c.f1_n_per_kmh), kv("f2_n_per_kmh2", c.f2_n_per_kmh2)};
    };
    if (f.size() == 1 && f[0] == "GET") return reply_ok(req, "COEF", echo(), out);
    if (f.size() == 4 && f[0] == "SET") {
      const auto a = line::parse_number(f[1]), b = line::parse_number(f[2]), c = line::parse_number(f[3]);
      if (!a || !b || !c) return reply_err(req, ErrorCode::bad_argument, "COEF SET needs three numbers", out);
      if (std::abs(*a) > settings_.max_force_n) return reply_err(req, ErrorCode::out_of_limits, "f0 above the force limit", out);
      if (model_.mode() == Mode::road_load) return reply_err(req, ErrorCode::wrong_state, "not during road-load simulation", out);
      model_.set_coefficients({*a, *b, *c});
      return reply_ok(req, "COEF", echo(), out);
    }
    return reply_err(req, ErrorCode::bad_argument, "COEF GET or COEF SET <f0> <f1> <f2>", out);
  }
  if (m.type == "MODE") {
    if (f.empty()) return reply_err(req, ErrorCode::bad_argument, "MODE IDLE|HOLD <km/h>|ROADLOAD|STOP", out);
    const std::string& w = f[0];
    const bool moving = w == line::kModeHold || w == line::kModeRoadLoad;
    if (moving && !fault_.empty()) return reply_err(req, ErrorCode::fault_active, "fault " + fault_ + " latched: CLEAR first", out);
    if (w == line::kModeHold) {
      const auto v = f.size() == 2 ? line::parse_number(f[1]) : std::nullopt;
      if (!v || *v < 0.0) return reply_err(req, ErrorCode::bad_argument, "MODE HOLD needs a speed in km/h", out);
      if (*v > settings_.max_speed_kmh) return reply_err(req, ErrorCode::out_of_limits, "speed above the controller limit", out);
      model_.hold_speed(*v);
    } else if (w == line::kModeRoadLoad) {
      model_.release_road_load();
    } else if (w == line::kModeStop) {
      model_.controlled_stop();
    } else if (w == line::kModeIdle) {
      if (model_.speed_kmh() > 0.5) return reply_err(req, ErrorCode::wrong_state, "rollers turning: STOP first", out);
      model_.idle();
    } else {
      return reply_err(req, ErrorCode::bad_argument, "unknown mode " + w, out);
    }
    mode_since_s_ = model_.time_s();
    return reply_ok(req, "MODE", {kv("mode", wire_mode())}, out);
  }
  if (m.type == "STREAM") {
    const auto r = f.size() == 1 ? line::parse_number(f[0]) : std::nullopt;
    if (!r || !(*r == 0.0 || (*r >= 10.0 && *r <= 1000.0)))
      return reply_err(req, ErrorCode::bad_argument, "STREAM <rate_hz> with 10 to 1000 Hz, or 0 to stop", out);
    stream_hz_ = *r;
    next_sample_s_ = model_.time_s();
    return reply_ok(req, "STREAM", {kv("rate_hz", stream_hz_)}, out);
  }
  if (m.type == "CLEAR") {
    if (model_.speed_kmh() > 0.5) return reply_err(req, ErrorCode::wrong_state, "rollers still turning", out);
    fault_.clear();
    return reply_ok(req, "CLEAR", {}, out);
  }
  reply_err(req, ErrorCode::unknown_verb, "unknown verb " + m.type, out);
}

void SimController::advance(double dt, std::vector<std::string>& out) {
  const double end = model_.time_s() + dt;
  const auto& fp = settings_.faults;
  auto emit_until = [&](double t_to) {
    while (stream_hz_ > 0.0 && next_sample_s_ <= t_to + 1e-12) {
      model_.advance(next_sample_s_ - model_.time_s());
      if (!(fp.stall_at_s && model_.time_s() >= *fp.stall_at_s)) {
        const physics::Sample s = model_.sample();
        char b[160];
        std::snprintf(b, sizeof b, "%.4f %.4f %.2f", s.time_s, std::max(0.0, s.speed_kmh), s.force_n);
        std::string t(b);
        std::vector<std::string> fields = {std::to_string(sample_index_++)};
        std::size_t p = 0;
        for (int k = 0; k < 3; ++k) {
          const auto q = t.find(' ', p);
          fields.push_back(t.substr(p, q - p));
          p = q + 1;
        }
        char fl[8];
        std::snprintf(fl, sizeof fl, "%02X", flags());
        fields.push_back(wire_mode());
        fields.push_back(fl);
        send({0, "SMP", std::move(fields)}, out);
      }
      next_sample_s_ += 1.0 / stream_hz_;
    }
  };
  emit_until(end);
  model_.advance(end - model_.time_s());
  if (fp.estop_at_s && !estop_done_ && model_.time_s() >= *fp.estop_at_s) {
    estop_done_ = true;
    latch_fault("ESTOP", "emergency stop raised at the controller", out);
  }
  if (!dropped_once_) {
    const bool by_time = fp.drop_at_s && model_.time_s() >= *fp.drop_at_s;
    const bool by_mode = fp.drop_in_mode && wire_mode() == *fp.drop_in_mode && model_.time_s() - mode_since_s_ >= fp.drop_after_s;
    if (by_time || by_mode) {
      dropped_once_ = true;
      drop_pending_ = true;
    }
  }
}

void SimController::check_watchdog(double wall_s, std::vector<std::string>& out) {
  const Mode m = model_.mode();
  if ((m == Mode::speed_hold || m == Mode::road_load) && wall_s - last_request_wall_s_ > settings_.watchdog_s)
    latch_fault("WATCHDOG", "no request within the watchdog window: controlled stop", out);
}

bool SimController::take_drop_request() {
  const bool d = drop_pending_;
  drop_pending_ = false;
  return d;
}

}  // namespace loadtrim::sim
