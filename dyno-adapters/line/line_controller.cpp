#include "line/line_controller.hpp"

#include <charconv>
#include <optional>

#include "core/problem.hpp"

namespace loadtrim::line {

using controller::Mode;

bool parse_mode(std::string_view w, Mode& out) {
  if (w == kModeIdle) return out = Mode::idle, true;
  if (w == kModeHold) return out = Mode::speed_hold, true;
  if (w == kModeRoadLoad) return out = Mode::road_load, true;
  if (w == kModeStop) return out = Mode::controlled_stop, true;
  if (w == kModeForce) return out = Mode::constant_force, true;
  return false;
}

const char* wire_mode(Mode m) {
  switch (m) {
    case Mode::idle:
      return kModeIdle;
    case Mode::speed_hold:
      return kModeHold;
    case Mode::road_load:
      return kModeRoadLoad;
    case Mode::controlled_stop:
      return kModeStop;
    case Mode::constant_force:
      return kModeForce;
    case Mode::free_coast:
      return kModeFree;
  }
  return kModeIdle;
}

bool parse_sample(const Message& m, controller::Sample& s) {
  if (m.type != kTypeSample || m.fields.size() != 6) return false;
  const auto& f = m.fields;
  std::uint64_t n = 0;
  auto r = std::from_chars(f[0].data(), f[0].data() + f[0].size(), n);
  if (r.ec != std::errc() || r.ptr != f[0].data() + f[0].size()) return false;
  // A well-framed sample with a non-finite value ("nan", "inf") is still a sample: it goes up to the
  // controller layer, which drops it, counts it and names it ("malformed samples"); only text that is not a
  // number is refused here.
  auto number = [](std::string_view x) -> std::optional<double> {
    double d = 0.0;
    const auto r = std::from_chars(x.data(), x.data() + x.size(), d);
    if (x.empty() || r.ec != std::errc() || r.ptr != x.data() + x.size()) return std::nullopt;
    return d;
  };
  const auto t = number(f[1]), v = number(f[2]), force = number(f[3]);
  if (!t || !v || !force || !parse_mode(f[4], s.mode)) return false;
  std::uint32_t flags = 0;
  auto rf = std::from_chars(f[5].data(), f[5].data() + f[5].size(), flags, 16);
  if (rf.ec != std::errc() || rf.ptr != f[5].data() + f[5].size()) return false;
  s.index = n;
  s.time_s = *t;
  s.speed_kmh = *v;
  s.force_n = *force;
  s.flags = flags;
  return true;
}

LineController::LineController(std::unique_ptr<Transport> transport, controller::Timeouts t,
                               controller::Limits l)
    : Controller(t, l), transport_(std::move(transport)) {}

LineController::~LineController() {
  do_disconnect();
}

void LineController::handle_line(std::string_view line, bool too_long) {
  if (too_long) {
    ++stats_.lines_rejected;
    stats_.last_rejected = "line too long";
    return;
  }
  const Decoded d = decode(line);
  if (!d.ok()) {
    if (d.error == DecodeError::empty) return;
    ++stats_.lines_rejected;  // never acted on
    stats_.last_rejected = std::string(to_string(d.error)) + ": " + std::string(line.substr(0, 80));
    return;
  }
  if (have_peer_seq_ && d.message.seq != expected_peer_seq_)
    stats_.lines_lost += d.message.seq - expected_peer_seq_;
  have_peer_seq_ = true;
  expected_peer_seq_ = d.message.seq + 1;
  const Message& m = d.message;
  if (m.type == kTypeSample) {
    controller::Sample s;
    if (parse_sample(m, s)) {
      if (samples_.size() >= max_samples_) samples_.pop_front();  // shows as a gap in the sample counter
      samples_.push_back(s);
    } else {
      ++stats_.lines_rejected;
      stats_.last_rejected = "malformed SMP";
    }
  } else if (m.type == kTypeEvent) {
    std::string e;
    for (const auto& f : m.fields) e += (e.empty() ? "" : " ") + f;
    if (events_.size() >= kMaxEvents) {
      events_.pop_front();
      ++stats_.events_dropped;
    }
    events_.push_back(std::move(e));
  } else if (m.type == kTypeOk || m.type == kTypeErr) {
    if (replies_.size() >= kMaxReplies) replies_.pop_front();
    replies_.push_back(m);
  } else {
    ++stats_.lines_rejected;
    stats_.last_rejected = "unexpected message type " + m.type;
  }
}

Result LineController::pump(Deadline d) {
  std::string bytes;
  if (Result r = transport_->read_some(bytes, d); !r.ok()) return r;
  splitter_.feed(bytes, [&](std::string_view line, bool too_long) { handle_line(line, too_long); });
  return Result::success();
}

Result LineController::request(const std::string& verb, std::vector<std::string> fields, Message& reply,
                               Deadline d) {
  if (!transport_->is_open()) return Result::retry("link not open");
  Message m;
  m.type = verb;
  m.fields = std::move(fields);
  // A reply lost to a corrupted line is asked for once more (every request is idempotent), with the same time
  // allowance; a reply that simply does not come is not.
  const auto allowance = d - controller::Clock::now();
  bool resent = false;
  const std::uint64_t rejected_before = stats_.lines_rejected;
  m.seq = next_seq_++;
  if (Result r = transport_->write(encode(m), d); !r.ok()) return r;
  for (;;) {
    if (controller::Clock::now() >= d && !resent && stats_.lines_rejected > rejected_before) {
      resent = true;
      d = controller::Clock::now() + allowance;
      m.seq = next_seq_++;
      if (Result r = transport_->write(encode(m), d); !r.ok()) return r;
    }
    while (!replies_.empty()) {
      Message rep = std::move(replies_.front());
      replies_.pop_front();
      if (rep.fields.empty() || rep.fields[0] != std::to_string(m.seq)) {  // a stale reply
        warn("late_reply_discarded",
             "a reply to an earlier request came after its deadline and was discarded");
        continue;
      }
      if (rep.type == kTypeErr) {
        int code = 0;
        if (rep.fields.size() > 1)
          std::from_chars(rep.fields[1].data(), rep.fields[1].data() + rep.fields[1].size(), code);
        std::string text;
        for (std::size_t i = 2; i < rep.fields.size(); ++i) text += (text.empty() ? "" : " ") + rep.fields[i];
        const std::string msg =
            "controller refused " + verb + " (error " + std::to_string(code) + "): " + text;
        // Our request was damaged on the way: sending it again may work. Anything else is the controller's
        // no.
        return code == static_cast<int>(ErrorCode::bad_frame) ? Result::retry(msg, code)
                                                              : Result::fail(msg, code);
      }
      reply = std::move(rep);
      return Result::success();
    }
    if (controller::Clock::now() >= d) return Result::retry("no reply to " + verb + " before the deadline");
    if (Result r = pump(d); !r.ok()) return r;
  }
}

Result LineController::do_connect(Deadline d) {
  transport_->close();
  splitter_ = LineSplitter{};
  replies_.clear();
  samples_.clear();
  have_peer_seq_ = false;
  if (Result r = transport_->open(d); !r.ok()) return r;
  Message rep;
  if (Result r = request(kVerbHello, {kv("version", kProtocolVersion), "client=loadtrim"}, rep, d); !r.ok())
    return r;
  hello_caps_ = field(rep, "caps").value_or("");
  const auto v = number_field(rep, "version");
  // Exactly the version, a whole number: 1.9 is not 1 (and a huge value is never cast).
  if (!v || *v != static_cast<double>(kProtocolVersion))
    return Result::fail("controller speaks protocol version " + field(rep, "version").value_or("?") +
                        ", loadtrim speaks " + std::to_string(kProtocolVersion));
  return Result::success();
}

void LineController::do_disconnect() {
  if (transport_) transport_->close();
}

Result LineController::do_identify(controller::ControllerInfo& out, Deadline d) {
  Message rep;
  if (Result r = request(kVerbIdent, {}, rep, d); !r.ok()) return r;
  const auto dia = number_field(rep, "roller_diameter_m"), inertia = number_field(rep, "base_inertia_kg"),
             vmax = number_field(rep, "max_speed_kmh"), fmax = number_field(rep, "max_force_n");
  if (!dia || !inertia || !vmax || !fmax) return Result::fail("IDENT reply lacks a required field");
  out.name = field(rep, "name").value_or("");
  // IDENT's own list when it states one, else the handshake's (docs/protocol.md section 3).
  out.capabilities = field(rep, "caps").value_or(hello_caps_);
  const auto pv = number_field(rep, "version");
  out.protocol_version = pv && *pv >= 0.0 && *pv <= 1e6 ? static_cast<int>(*pv) : 0;
  out.roller_diameter_m = *dia;
  out.base_inertia_kg = *inertia;
  out.max_speed_kmh = *vmax;
  out.max_force_n = *fmax;
  // Absent: a real-time clock (docs/protocol.md section 3). Present, it must be a number.
  const auto ts = number_field(rep, "time_scale");
  if (field(rep, "time_scale") && !ts)
    return Result::fail("IDENT reply's time_scale=" + *field(rep, "time_scale") + " is not a number");
  out.time_scale = ts.value_or(1.0);
  return Result::success();
}

Result LineController::do_write_inertia(double kg, Deadline d) {
  Message rep;
  return request(kVerbInertia, {kArgSet, format_number(kg)}, rep, d);
}

Result LineController::do_read_inertia(double& kg, Deadline d) {
  Message rep;
  if (Result r = request(kVerbInertia, {kArgGet}, rep, d); !r.ok()) return r;
  const auto v = number_field(rep, "inertia_kg");
  if (!v) return Result::fail("INERTIA reply lacks inertia_kg");
  kg = *v;
  return Result::success();
}

Result LineController::do_write_coefficients(const core::RoadLoad& c, Deadline d) {
  Message rep;
  return request(
      kVerbCoef,
      {kArgSet, format_number(c.f0_n), format_number(c.f1_n_per_kmh), format_number(c.f2_n_per_kmh2)}, rep,
      d);
}

Result LineController::do_read_coefficients(core::RoadLoad& c, Deadline d) {
  Message rep;
  if (Result r = request(kVerbCoef, {kArgGet}, rep, d); !r.ok()) return r;
  const auto a = number_field(rep, "f0_n"), b = number_field(rep, "f1_n_per_kmh"),
             k = number_field(rep, "f2_n_per_kmh2");
  if (!a || !b || !k) return Result::fail("COEF reply lacks a coefficient");
  c = {*a, *b, *k};
  return Result::success();
}

Result LineController::do_command(Mode mode, double value, Deadline d) {
  Message rep;
  std::vector<std::string> f = {wire_mode(mode)};
  if (mode == Mode::speed_hold || mode == Mode::constant_force) f.push_back(format_number(value));
  return request(kVerbMode, std::move(f), rep, d);
}

Result LineController::do_prompt_driver(controller::DriverPrompt p, double speed_kmh, Deadline d) {
  Message rep;
  switch (p) {
    case controller::DriverPrompt::accelerate:
      return request(kVerbDriver, {kDriverAccel, format_number(speed_kmh)}, rep, d);
    case controller::DriverPrompt::neutral:
      return request(kVerbDriver, {kDriverNeutral}, rep, d);
    case controller::DriverPrompt::off:
      return request(kVerbDriver, {kDriverOff}, rep, d);
  }
  return Result::fail("unknown driver prompt");
}

Result LineController::do_stream(double rate_hz, Deadline d) {
  Message rep;
  if (rate_hz == 0.0) samples_.clear();
  return request(kVerbStream, {format_number(rate_hz)}, rep, d);
}

Result LineController::do_receive_samples(std::vector<controller::Sample>& out, Deadline d) {
  while (samples_.empty() && controller::Clock::now() < d)
    if (Result r = pump(d); !r.ok()) return r;
  out.insert(out.end(), samples_.begin(), samples_.end());
  samples_.clear();
  return Result::success();
}

Result LineController::do_heartbeat(Deadline d) {
  Message rep;
  return request(kVerbBeat, {}, rep, d);
}

Result LineController::do_status(controller::StatusReport& out, Deadline d) {
  Message rep;
  if (Result r = request(kVerbStatus, {}, rep, d); !r.ok()) return r;
  const auto mode = field(rep, "mode");
  const auto v = number_field(rep, "speed_kmh"), t = number_field(rep, "time_s");
  const auto flags = field(rep, "flags");
  if (!mode || !parse_mode(*mode, out.mode) || !v || !t || !flags)
    return Result::fail("STATUS reply is incomplete");
  out.speed_kmh = *v;
  out.time_s = *t;
  // The flags as docs/protocol.md section 7 gives them: hex, every character a digit, within 32 bits.
  std::uint32_t fl = 0;
  const auto [end, ec] = std::from_chars(flags->data(), flags->data() + flags->size(), fl, 16);
  if (flags->empty() || ec != std::errc() || end != flags->data() + flags->size())
    return Result::fail("STATUS reply's flags=" + *flags + " is not a hex bit field");
  out.flags = fl;
  // The fault's name must be there and agree with the flags: a latched fault with "none", or a name with no
  // fault flag, is a reply that cannot be believed either way.
  const auto fault = field(rep, "fault");
  if (!fault) return Result::fail("STATUS reply is incomplete (no fault field)");
  const bool flagged =
      (fl & (controller::kFlagFault | controller::kFlagEstop | controller::kFlagWatchdog)) != 0;
  if (flagged != (*fault != "none"))
    return Result::fail("STATUS reply's fault=" + *fault + " disagrees with its flags=" + *flags);
  out.fault = *fault == "none" ? "" : *fault;
  return Result::success();
}

void LineController::on_stream_rate(double samples_per_wall_s) {
  const double want = samples_per_wall_s * kSampleBoundWallS;
  max_samples_ =
      std::max<std::size_t>(kMinSampleBound, want < 5e7 ? static_cast<std::size_t>(want) : 50000000u);
}

void LineController::do_take_events(std::vector<std::string>& out) {
  out.insert(out.end(), events_.begin(), events_.end());
  events_.clear();
}

Result LineController::do_clear_fault(Deadline d) {
  Message rep;
  return request(kVerbClear, {}, rep, d);
}

}  // namespace loadtrim::line
