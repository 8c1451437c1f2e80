#include "sim/framed_front_end.hpp"

#include <algorithm>

namespace loadtrim::sim {

using framed::Field;
using framed::Op;
using framed::Qty;
using framed::Values;

namespace {
double mode_value(controller::Mode m) {
  return static_cast<double>(static_cast<int>(m));
}
}  // namespace

int framed_status(Cause c) {
  switch (c) {
    case Cause::bad_argument:
      return 2;
    case Cause::out_of_limits:
      return 3;
    case Cause::wrong_state:
      return 4;
    case Cause::fault_active:
      return 5;
  }
  return 9;
}

FramedFrontEnd::FramedFrontEnd(const physics::Truth& truth, SimSettings settings, framed::Table table)
    : sim_(truth, std::move(settings)), table_(std::move(table)) {}

void FramedFrontEnd::on_bytes(std::string_view bytes, double wall_s, std::vector<std::string>& out) {
  splitter_.feed(bytes, [&](std::string_view payload, bool noise) {
    if (!noise) on_payload(payload, wall_s, out);  // noise has no code to answer to
  });
}

void FramedFrontEnd::send(std::vector<std::string> words, std::vector<std::string>& out) {
  std::string s = framed::encode_frame(words, table_.checksum);
  ++frames_sent_;
  const auto& fp = sim_.settings().faults;
  const bool corrupt = (fp.corrupt_line && *fp.corrupt_line == frames_sent_) ||
                       (fp.corrupt_every && frames_sent_ % fp.corrupt_every == 0);
  if (corrupt && s.size() > 6)
    s[s.size() / 2] = s[s.size() / 2] == 'X' ? 'Y' : 'X';  // checksum no longer matches
  out.push_back(std::move(s));
}

void FramedFrontEnd::reply(const std::string& code, int status, std::vector<std::string>& out) {
  send({code, std::to_string(status)}, out);
}

void FramedFrontEnd::on_payload(std::string_view payload, double wall_s, std::vector<std::string>& out) {
  const framed::Decoded d = framed::decode_payload(payload, table_.checksum);
  if (!d.ok()) {
    // Never acted on; answered with status 1 when the code is legible.
    const std::string code(payload.substr(0, std::min(payload.find(' '), payload.size())));
    if (framed::decode_payload(code, false).ok()) reply(code, 1, out);
    return;
  }
  catch_up(wall_s);
  sim_.touch(wall_s);
  const auto& w = d.words;
  const std::string& code = w[0];
  if (w.size() < 2 || w[1] != std::to_string(table_.channel)) return reply(code, 2, out);
  const std::vector<std::string> args(w.begin() + 2, w.end());
  // The operation: same code, same number of fields, every literal as written.
  std::optional<Op> op;
  for (std::size_t i = 0; i < framed::kOps && !op; ++i) {
    const framed::Command& c = table_.ops[i];
    if (!c.present || c.code != code || c.request.size() != args.size()) continue;
    bool match = true;
    for (std::size_t k = 0; k < args.size(); ++k)
      if (c.request[k].kind == Field::Kind::literal && c.request[k].literal != args[k]) match = false;
    if (match) op = static_cast<Op>(i);
  }
  if (!op) return reply(code, 2, out);
  for (const auto& v : sim_.settings().faults.refuse)
    if (v == framed::to_string(*op)) return reply(code, 6, out);
  const framed::Command& c = table_[*op];
  Values in, res;
  if (!framed::decode_values(table_, c.request, args, in).empty()) return reply(code, 2, out);
  res.set(Qty::channel, static_cast<double>(table_.channel));  // for a table whose replies name it
  std::optional<SimError> e;
  auto echo_mode = [&] { res.set(Qty::mode, mode_value(sim_.status().mode)); };
  auto echo_coefficients = [&] {
    const auto& k = sim_.model().coefficients();
    res.set(Qty::f0_n, k.f0_n);
    res.set(Qty::f1_n_per_kmh, k.f1_n_per_kmh);
    res.set(Qty::f2_n_per_kmh2, k.f2_n_per_kmh2);
  };
  switch (*op) {
    case Op::identify: {
      const auto i = sim_.info();
      res.set(Qty::roller_diameter_m, i.roller_diameter_m);
      res.set(Qty::base_inertia_kg, i.base_inertia_kg);
      res.set(Qty::max_speed_kmh, i.max_speed_kmh);
      res.set(Qty::max_force_n, i.max_force_n);
      res.set(Qty::time_scale, i.time_scale);
      break;
    }
    case Op::status:
    case Op::sample: {
      const controller::Sample s = sim_.reading();
      res.set(Qty::mode, mode_value(s.mode));
      res.set(Qty::speed_kmh, s.speed_kmh);
      res.set(Qty::force_n, s.force_n);
      res.set(Qty::time_s, s.time_s);
      res.set(Qty::flags, static_cast<double>(s.flags));
      break;
    }
    case Op::hold:
      e = sim_.command(cmd::HoldSpeed{in.get(Qty::speed_kmh)});
      echo_mode();
      break;
    case Op::force:
      e = sim_.command(cmd::ApplyForce{in.get(Qty::force_n)});
      echo_mode();
      break;
    case Op::roadload:
      e = sim_.command(cmd::ReleaseRoadLoad{});
      echo_mode();
      break;
    case Op::stop:
      e = sim_.command(cmd::ControlledStop{});
      echo_mode();
      break;
    case Op::idle:
      e = sim_.command(cmd::Idle{});
      echo_mode();
      break;
    case Op::free:
      e = sim_.command(cmd::FreeCoast{});
      echo_mode();
      break;
    case Op::write_inertia:
      e = sim_.set_inertia(in.get(Qty::inertia_kg));
      res.set(Qty::inertia_kg, sim_.model().inertia_set_kg());
      break;
    case Op::read_inertia:
      res.set(Qty::inertia_kg, sim_.model().inertia_set_kg());
      break;
    case Op::write_coefficients:
      e = sim_.set_coefficients({in.get(Qty::f0_n), in.get(Qty::f1_n_per_kmh), in.get(Qty::f2_n_per_kmh2)});
      echo_coefficients();
      break;
    case Op::read_coefficients:
      echo_coefficients();
      break;
    case Op::heartbeat:
      break;
    case Op::clear_fault:
      e = sim_.clear();
      break;
    case Op::count:
      return reply(code, 9, out);
  }
  if (e) return reply(code, framed_status(e->cause), out);
  std::vector<std::string> words{code, "0"};
  if (!framed::encode_values(table_, c.reply, res, words).empty()) return reply(code, 9, out);
  send(std::move(words), out);
}

void FramedFrontEnd::catch_up(double wall_s) {
  // Bounded like the server's ticks: after a stall of the host, simulated time jumps at most 50 ms of wall
  // time.
  const double dt = std::clamp(wall_s - last_wall_s_, 0.0, 0.05);
  last_wall_s_ = std::max(last_wall_s_, wall_s);
  std::vector<controller::Sample> unused;  // the dialect polls: nothing is streamed
  sim_.advance_typed(dt * sim_.settings().time_scale, unused, events_);
}

void FramedFrontEnd::tick(double, double wall_s, std::vector<std::string>&, std::vector<std::string>& notes) {
  catch_up(wall_s);
  sim_.check_watchdog_typed(wall_s, events_);
  for (const auto& e : events_) notes.push_back("framed EVT " + event_text(e));
  events_.clear();
}

void FramedFrontEnd::on_disconnect() {
  splitter_.reset();
  sim_.on_disconnect();
}

}  // namespace loadtrim::sim
