#include "sim/line_front_end.hpp"

#include <cstdio>

namespace loadtrim::sim {

using namespace line;

namespace {
const char* wire(controller::Mode m) {
  switch (m) {
    case controller::Mode::idle:
      return kModeIdle;
    case controller::Mode::speed_hold:
      return kModeHold;
    case controller::Mode::road_load:
      return kModeRoadLoad;
    case controller::Mode::controlled_stop:
      return kModeStop;
    case controller::Mode::constant_force:
      return kModeForce;
    case controller::Mode::free_coast:
      return kModeIdle;  // reported as idle while coasting
  }
  return kModeIdle;
}
std::string hex2(std::uint32_t f) {
  char b[16];
  std::snprintf(b, sizeof b, "%02X", f);
  return b;
}
static_assert(SimController::kProtocolVersion == kProtocolVersion,
              "the simulator states the line protocol's version in IDENT and checks it at HELLO");
}  // namespace

ErrorCode line_error_code(Cause c) {
  switch (c) {
    case Cause::bad_argument:
      return ErrorCode::bad_argument;
    case Cause::out_of_limits:
      return ErrorCode::out_of_limits;
    case Cause::wrong_state:
      return ErrorCode::wrong_state;
    case Cause::fault_active:
      return ErrorCode::fault_active;
  }
  return ErrorCode::internal;
}

std::vector<std::string> line_event_fields(const FaultEvent& e) {
  std::string d = e.detail;  // one field on the wire: no spaces
  for (char& ch : d)
    if (ch == ' ') ch = '_';
  // The fault's words are the controller interface's (to_string(FaultKind)), as section 9 spells them.
  return {"FAULT", kv("kind", to_string(e.kind)), kv("detail", d), kv("time_s", e.time_s)};
}

LineFrontEnd::LineFrontEnd(const physics::Truth& truth, SimSettings settings)
    : sim_(truth, std::move(settings)) {}

void LineFrontEnd::on_bytes(std::string_view bytes, double wall_s, std::vector<std::string>& out) {
  splitter_.feed(bytes, [&](std::string_view l, bool too_long) {
    if (too_long)
      on_line("0 TOOLONG*0000", wall_s, out);  // answered as a bad frame
    else
      on_line(l, wall_s, out);
  });
}

void LineFrontEnd::tick(double sim_dt_s, double wall_s, std::vector<std::string>& out,
                        std::vector<std::string>& notes) {
  const std::size_t first = out.size();
  advance(sim_dt_s, out);
  check_watchdog(wall_s, out);
  // Latched faults are also said on the simulator's own output (for its operator and the tests).
  for (std::size_t i = first; i < out.size(); ++i)
    if (out[i].find(" EVT FAULT ") != std::string::npos) notes.push_back(out[i].substr(0, out[i].find('*')));
}

void LineFrontEnd::on_disconnect() {
  hello_ = false;
  splitter_ = LineSplitter{};
  sim_.on_disconnect();
}

void LineFrontEnd::send(line::Message m, std::vector<std::string>& out) {
  m.seq = seq_++;
  std::string s = line::encode(m);
  ++lines_sent_;
  const bool corrupt =
      (sim_.settings().faults.corrupt_line && *sim_.settings().faults.corrupt_line == lines_sent_) ||
      (sim_.settings().faults.corrupt_every && lines_sent_ % sim_.settings().faults.corrupt_every == 0);
  if (corrupt && s.size() > 8) s[s.size() / 2] = s[s.size() / 2] == 'X' ? 'Y' : 'X';  // CRC no longer matches
  out.push_back(std::move(s));
}

void LineFrontEnd::send_events(const std::vector<FaultEvent>& events, std::vector<std::string>& out) {
  if (!hello_) return;
  for (const auto& e : events) send({0, kTypeEvent, line_event_fields(e)}, out);
}

void LineFrontEnd::reply_ok(std::uint32_t req, const std::string& verb, std::vector<std::string> fields,
                            std::vector<std::string>& out) {
  fields.insert(fields.begin(), verb);
  fields.insert(fields.begin(), std::to_string(req));
  send({0, kTypeOk, std::move(fields)}, out);
}

void LineFrontEnd::reply_err(std::uint32_t req, ErrorCode code, const std::string& text,
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
  send({0, kTypeErr, std::move(f)}, out);
}

void LineFrontEnd::on_line(std::string_view text, double wall_s, std::vector<std::string>& out) {
  const line::Decoded d = line::decode(text);
  if (!d.ok()) {
    if (d.error == line::DecodeError::empty) return;
    // Never acted on: tell the sender which line could not be read when its sequence number is legible.
    std::uint32_t req = 0;
    std::sscanf(std::string(text.substr(0, 10)).c_str(), "%u", &req);
    reply_err(req, ErrorCode::bad_frame, std::string("line rejected: ") + line::to_string(d.error), out);
    return;
  }
  sim_.touch(wall_s);
  const line::Message& m = d.message;
  const std::uint32_t req = m.seq;
  const auto& f = m.fields;
  auto answer = [&](const std::optional<SimError>& e, const std::string& verb,
                    std::vector<std::string> fields) {
    if (e)
      reply_err(req, line_error_code(e->cause), e->message, out);
    else
      reply_ok(req, verb, std::move(fields), out);
  };
  for (const auto& v : sim_.settings().faults.refuse)
    if (v == m.type) return reply_err(req, ErrorCode::refused, "refused by fault injection", out);
  if (m.type == kVerbHello) {
    const auto v = line::number_field(m, "version");
    const auto e = sim_.hello(v ? static_cast<int>(*v) : -1);
    if (!e) hello_ = true;
    return answer(e, kVerbHello, {kv("version", line::kProtocolVersion), "caps=" + sim_.info().capabilities});
  }
  if (!hello_) return reply_err(req, ErrorCode::wrong_state, "send HELLO first", out);
  if (m.type == kVerbBeat) return reply_ok(req, kVerbBeat, {}, out);
  if (m.type == kVerbIdent) {
    const auto i = sim_.info();
    return reply_ok(
        req, kVerbIdent,
        {kv("name", i.name), kv("version", i.protocol_version), kv("roller_diameter_m", i.roller_diameter_m),
         kv("base_inertia_kg", i.base_inertia_kg), kv("max_speed_kmh", i.max_speed_kmh),
         kv("max_force_n", i.max_force_n), kv("time_scale", i.time_scale)},
        out);
  }
  if (m.type == kVerbStatus) {
    const auto st = sim_.status();
    return reply_ok(
        req, kVerbStatus,
        {kv("mode", wire(st.mode)), kv("speed_kmh", st.speed_kmh), kv("time_s", st.time_s),
         kv("flags", hex2(st.flags)), kv("fault", st.fault.empty() ? std::string("none") : st.fault)},
        out);
  }
  if (m.type == kVerbInertia) {
    if (f.size() == 1 && f[0] == kArgGet)
      return reply_ok(req, kVerbInertia, {kv("inertia_kg", sim_.model().inertia_set_kg())}, out);
    if (f.size() == 2 && f[0] == kArgSet) {
      const auto v = line::parse_number(f[1]);
      if (!v) return reply_err(req, ErrorCode::bad_argument, "INERTIA SET needs a number in kg", out);
      const auto e = sim_.set_inertia(*v);
      return answer(e, kVerbInertia, {kv("inertia_kg", sim_.model().inertia_set_kg())});
    }
    return reply_err(req, ErrorCode::bad_argument, "INERTIA GET or INERTIA SET <kg>", out);
  }
  if (m.type == kVerbCoef) {
    auto echo = [&] {
      const auto& c = sim_.model().coefficients();
      return std::vector<std::string>{kv("f0_n", c.f0_n), kv("f1_n_per_kmh", c.f1_n_per_kmh),
                                      kv("f2_n_per_kmh2", c.f2_n_per_kmh2)};
    };
    if (f.size() == 1 && f[0] == kArgGet) return reply_ok(req, kVerbCoef, echo(), out);
    if (f.size() == 4 && f[0] == kArgSet) {
      const auto a = line::parse_number(f[1]), b = line::parse_number(f[2]), c = line::parse_number(f[3]);
      if (!a || !b || !c) return reply_err(req, ErrorCode::bad_argument, "COEF SET needs three numbers", out);
      const auto e = sim_.set_coefficients({*a, *b, *c});
      return answer(e, kVerbCoef, echo());
    }
    return reply_err(req, ErrorCode::bad_argument, "COEF GET or COEF SET <f0> <f1> <f2>", out);
  }
  if (m.type == kVerbMode) {
    if (f.empty())
      return reply_err(req, ErrorCode::bad_argument, "MODE IDLE|HOLD <km/h>|ROADLOAD|STOP|FORCE <N>|FREE",
                       out);
    Command command;
    if (f[0] == line::kModeHold) {
      const auto v = f.size() == 2 ? line::parse_number(f[1]) : std::nullopt;
      if (!v) return reply_err(req, ErrorCode::bad_argument, "MODE HOLD needs a speed in km/h", out);
      command = cmd::HoldSpeed{*v};
    } else if (f[0] == line::kModeForce) {
      const auto v = f.size() == 2 ? line::parse_number(f[1]) : std::nullopt;
      if (!v) return reply_err(req, ErrorCode::bad_argument, "MODE FORCE needs a force in N", out);
      command = cmd::ApplyForce{*v};
    } else if (f[0] == line::kModeFree)
      command = cmd::FreeCoast{};
    else if (f[0] == line::kModeRoadLoad)
      command = cmd::ReleaseRoadLoad{};
    else if (f[0] == line::kModeStop)
      command = cmd::ControlledStop{};
    else if (f[0] == line::kModeIdle)
      command = cmd::Idle{};
    else
      return reply_err(req, ErrorCode::bad_argument, "unknown mode " + f[0], out);
    const auto e = sim_.command(command);
    return answer(e, kVerbMode, {kv("mode", wire(sim_.status().mode))});
  }
  if (m.type == kVerbStream) {
    const auto r = f.size() == 1 ? line::parse_number(f[0]) : std::nullopt;
    const auto e = sim_.stream(r ? *r : -1.0);
    return answer(e, kVerbStream, {kv("rate_hz", sim_.stream_hz())});
  }
  if (m.type == kVerbClear) return answer(sim_.clear(), kVerbClear, {});
  if (m.type == kVerbDriver) {
    // DRIVER ACCEL <km/h> | DRIVER NEUTRAL | DRIVER OFF (docs/protocol.md, "Driver prompts")
    std::optional<SimError> e;
    if (f.size() == 2 && f[0] == kDriverAccel) {
      const auto v = parse_number(f[1]);
      if (!v) return reply_err(req, ErrorCode::bad_argument, "DRIVER ACCEL needs a speed in km/h", out);
      e = sim_.prompt_driver(controller::DriverPrompt::accelerate, *v);
    } else if (f.size() == 1 && f[0] == kDriverNeutral) {
      e = sim_.prompt_driver(controller::DriverPrompt::neutral, 0.0);
    } else if (f.size() == 1 && f[0] == kDriverOff) {
      e = sim_.prompt_driver(controller::DriverPrompt::off, 0.0);
    } else {
      return reply_err(req, ErrorCode::bad_argument, "DRIVER ACCEL <km/h>|NEUTRAL|OFF", out);
    }
    return answer(e, kVerbDriver, {});
  }
  reply_err(req, ErrorCode::unknown_verb, "unknown verb " + m.type, out);
}

void LineFrontEnd::advance(double dt, std::vector<std::string>& out) {
  std::vector<controller::Sample> samples;
  std::vector<FaultEvent> events;
  sim_.advance_typed(dt, samples, events);
  char b[160];
  for (const auto& s : samples) {
    std::snprintf(b, sizeof b, "%.4f", s.time_s);
    std::string t = b;
    std::snprintf(b, sizeof b, "%.4f", s.speed_kmh);
    std::string v = b;
    std::snprintf(b, sizeof b, "%.2f", s.force_n);
    send({0, kTypeSample, {std::to_string(s.index), t, v, b, wire(s.mode), hex2(s.flags)}}, out);
  }
  send_events(events, out);
}

void LineFrontEnd::check_watchdog(double wall_s, std::vector<std::string>& out) {
  std::vector<FaultEvent> events;
  sim_.check_watchdog_typed(wall_s, events);
  send_events(events, out);
}

}  // namespace loadtrim::sim
