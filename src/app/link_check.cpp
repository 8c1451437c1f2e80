// `loadtrim link-check`: connect to the cell's controller, print what it reports, check it against the cell
// file, round-trip the set coefficients and inertia (writing back what is already there), and stream a few
// seconds of samples with the rollers idle. Nothing moves.
#include <algorithm>
#include <cstdio>
#include <iostream>

#include "app/cell_locks.hpp"
#include "app/exit_codes.hpp"
#include "app/session_runner.hpp"
#include "app/subcommands.hpp"
#include "config/cell_loader.hpp"
#include "config/input_error.hpp"
#include "inprocess/sim_rows.hpp"
#include "motion/motion.hpp"

namespace loadtrim::app {

namespace {

struct LinkCheckOptions {
  std::string cell;
  int port = 0;
  std::string device;
  double seconds = 3.0;
  double rate_hz = 100.0;
};

int fail(const controller::Result& r) {
  std::fprintf(stderr, "link-check: %s (%s)\n", r.message.c_str(), controller::to_string(r.status));
  return kControllerFault;
}

int run_link_check(const LinkCheckOptions& o) {
  install_stop_handlers();
  core::Problems w;
  controller::CellConfig cell = config::load_cell(o.cell, adapters::tool_registry().sections(), &w);
  if (!w.empty()) std::cerr << config::format_problems(o.cell, w);
  adapters::tool_registry().override_link(cell, {o.port > 0 ? static_cast<unsigned>(o.port) : 0u, o.device});
  // A link-check moves nothing and shares the cell with other link-checks; a session or check holding it
  // refuses it.
  std::optional<record::FileLock> cell_lock;
  std::string lock_msg;
  if (!lock_cell(cell, record::LockMode::shared, "link-check", "", cell_lock, lock_msg)) {
    std::fprintf(stderr, "link-check: refused: %s\n", lock_msg.c_str());
    return kBadInput;
  }
  auto c = adapters::tool_registry().make_controller(cell);
  std::printf("cell %s: adapter %s\n", cell.name.c_str(), cell.adapter.c_str());
  if (auto r = c->connect(); !r.ok()) return fail(r);
  controller::ControllerInfo info;
  if (auto r = c->identify(info); !r.ok()) return fail(r);
  std::printf("controller %s, protocol %d, capabilities %s\n", info.name.c_str(), info.protocol_version,
              info.capabilities.c_str());
  std::printf("  roller diameter %.4f m, base inertia %.1f kg, max speed %.1f km/h, max force %.0f N\n",
              info.roller_diameter_m, info.base_inertia_kg, info.max_speed_kmh, info.max_force_n);
  const core::Problems mismatch = controller::check_identity(cell, info);
  if (!mismatch.empty()) std::cerr << config::format_problems(o.cell, mismatch);
  core::RoadLoad set;
  double inertia = 0.0;
  if (auto r = c->read_coefficients(set); !r.ok()) return fail(r);
  if (auto r = c->read_inertia(inertia); !r.ok()) return fail(r);
  if (auto r = c->set_coefficients(set); !r.ok()) return fail(r);
  if (auto r = c->set_inertia(inertia); !r.ok()) return fail(r);
  std::printf("round trip ok: set f0 %.4f N, f1 %.6f N/(km/h), f2 %.7f N/(km/h)^2, inertia %.2f kg\n",
              set.f0_n, set.f1_n_per_kmh, set.f2_n_per_kmh2, inertia);
  controller::StatusReport st;
  if (auto r = c->status(st); !r.ok()) return fail(r);
  std::printf("status: mode %s, speed %.2f km/h, controller time %.3f s, fault %s\n",
              controller::to_string(st.mode), st.speed_kmh, st.time_s,
              st.fault.empty() ? "none" : st.fault.c_str());
  if (auto r = c->start_stream(o.rate_hz); !r.ok()) return fail(r);
  // Only samples read after the stream's start was acknowledged count, over the asked seconds of controller
  // time; the wait is bounded in wall time too (motion/motion.hpp), and the controller's clock is checked
  // against the tool's.
  motion::Rules rules;
  rules.speed_limit_kmh = cell.max_speed_kmh;
  rules.standstill_kmh = cell.standstill_kmh;
  motion::Motion m(*c, rules, &stop_flag());
  // The controller's warnings (undefined status bits, retried exceptions, late replies): a link-check shows
  // every one; it passes with them (they are no failure), but the operator sees what to look into.
  std::size_t warnings = 0;
  m.on_warning = [&](const controller::Warning& w) {
    ++warnings;
    std::fprintf(stderr, "link-check: WARNING (%s%s): %s\n", w.code.c_str(),
                 w.count > 1 ? (", " + std::to_string(w.count) + " times").c_str() : "", w.text.c_str());
  };
  m.drain_warnings();  // what identify and the round trip raised
  motion::Step stream_step;
  stream_step.what = "the stream check";
  // A polled link also gets the 1 s of wall time its rate is judged over (below), in controller time.
  stream_step.budget_s = o.seconds + 10.0 + (c->streams() ? 0.0 : 2.0 * c->time_scale());
  stream_step.since_epoch = c->epoch();
  std::vector<controller::Sample> samples;
  double t0 = -1.0;
  // A polled link's rate is judged per wall second: over at least 1 s of wall time, however fast the
  // controller's clock runs, so that one slow reply does not decide it (common practice, no source).
  const bool polled = !c->streams();
  const auto min_wall = std::chrono::seconds(polled ? 1 : 0);
  std::chrono::steady_clock::time_point w0{}, w1{};
  if (auto r = m.collect(
          stream_step,
          [&](const controller::Sample& s) {
            const auto now = std::chrono::steady_clock::now();
            if (t0 < 0.0) {
              t0 = s.time_s;
              w0 = now;
            }
            w1 = now;
            return s.time_s - t0 >= o.seconds && now - w0 >= min_wall;
          },
          &samples);
      !r.ok()) {
    c->stop_stream();
    return fail(r);
  }
  c->stop_stream();
  m.drain_warnings();  // what the stream's end raised
  const auto s = c->stats();
  const double span = samples.size() > 1 ? samples.back().time_s - samples.front().time_s : 0.0;
  const double hz = span > 0 ? (samples.size() - 1) / span : 0.0;
  std::printf(
      "stream: %zu samples over %.3f s of controller time (%.1f Hz), lost %llu, rejected lines %llu, "
      "malformed %llu, repeated %llu\n",
      samples.size(), span, hz, static_cast<unsigned long long>(s.samples_lost),
      static_cast<unsigned long long>(s.lines_rejected), static_cast<unsigned long long>(s.samples_malformed),
      static_cast<unsigned long long>(s.samples_duplicate));
  // A streamed link must deliver the rate asked (within 10 %, common practice, no source); a polled one the
  // poll rate its adapter states (the register map's or the framed table's poll_rate_hz, in samples per wall
  // second), judged by the samples it delivered per second of the tool's own clock. A link that cannot keep
  // up with its own rate (slow replies, retries, a loaded gateway) fails below 80 % of it (common practice,
  // no source); the rate itself is at least the speed signal's 10 Hz (GTR 15 §3.1, docs/standards.md §2.7),
  // which the map's validation enforces.
  bool rate_ok = true;
  if (!polled) {
    rate_ok = hz >= 0.9 * o.rate_hz && hz <= 1.1 * o.rate_hz;
    if (!rate_ok)
      std::fprintf(stderr, "link-check: the controller streams at %.1f Hz; %.0f Hz was asked\n", hz,
                   o.rate_hz);
  } else {
    const double required_hz = c->poll_rate_hz();
    const double wall_span = std::chrono::duration<double>(w1 - w0).count();
    const double achieved_hz = wall_span > 0.0 ? (samples.size() - 1) / wall_span : 0.0;
    rate_ok = achieved_hz >= 0.8 * required_hz;
    std::printf("polled: %.1f samples per wall second achieved, %.1f Hz stated (poll_rate_hz)\n", achieved_hz,
                required_hz);
    if (!rate_ok)
      std::fprintf(stderr,
                   "link-check: the link is polled at %.1f Hz achieved, below the %.1f Hz required (80 %% of "
                   "the adapter's poll_rate_hz = %.1f Hz): the controller's replies are too slow for it\n",
                   achieved_hz, 0.8 * required_hz, required_hz);
  }
  c->disconnect();
  const bool ok = mismatch.empty() && s.samples_lost == 0 && s.samples_malformed == 0 && rate_ok;
  if (warnings > 0) std::printf("warnings from the controller link: %zu (see above)\n", warnings);
  std::printf("link-check %s\n", ok ? "passed" : "found problems (see above)");
  if (ok) return kAccepted;
  const bool link_ok = s.samples_lost == 0 && s.samples_malformed == 0 && rate_ok;
  // A controller that does not match the cell file is what `run` refuses before it moves anything (exit 2):
  // the same code here, so a script reads both alike. A link that loses samples is a link fault (exit 3).
  if (link_ok) {
    std::fprintf(stderr,
                 "link-check: the controller does not match the cell file %s (a session would be refused "
                 "the same way): correct the cell file or the controller, then check again\n",
                 o.cell.c_str());
    return kBadInput;
  }
  return kControllerFault;
}

}  // namespace

void register_link_check(CLI::App& app, Runner& run) {
  auto o = std::make_shared<LinkCheckOptions>();
  auto* sub = app.add_subcommand("link-check", "check the link to the cell's controller (nothing moves)");
  sub->add_option("--cell", o->cell, "cell configuration (TOML)")->required();
  sub->add_option("--port", o->port, "override the TCP port of the cell file")->check(CLI::Range(1, 65535));
  sub->add_option("--device", o->device, "override the serial device of the cell file");
  sub->add_option("--seconds", o->seconds, "controller seconds of samples to stream")
      ->check(config::number_in(0.1, 600.0, "s"))
      ->capture_default_str();
  sub->add_option("--rate-hz", o->rate_hz, "sample rate to request")
      ->check(config::number_in(10.0, 1000.0, "Hz"))
      ->capture_default_str();
  sub->callback([o, &run] { run = [o] { return run_link_check(*o); }; });
}

}  // namespace loadtrim::app
