// `loadtrim demo`: a full setting session against the simulated controller for a demo vehicle of our own
// invention. By default the simulator runs as a separate process (loadtrim-sim) over TCP on loopback, at an
// accelerated time scale; --in-process uses the in-process simulated controller instead. --epa draws vehicles
// from an EPA-format CSV, each with a randomised truth, and runs the same session code for each in-process.
#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <iostream>
#include <numeric>
#include <random>
#include <string>
#include <utility>
#include <vector>

#include "app/exit_codes.hpp"
#include "app/session_runner.hpp"
#include "app/sim_launcher.hpp"
#include "app/store_hook.hpp"
#include "app/subcommands.hpp"
#include "config/epa_csv.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "config/target_writer.hpp"
#include "physics/truth_generator.hpp"
#include "record/session_folder.hpp"

namespace loadtrim::app {

namespace {

struct DemoOptions {
  RunRequest req;
  std::string truth;
  double time_scale = 200.0;
  bool in_process = false;
  std::string epa;
  int vehicles = 20;
  unsigned seed = 2026;
  std::vector<std::string> given;  // the options given on the command line, by name
};

// Options that only one kind of demo uses: given to the other they would be ignored, so the demo refuses them
// by name (exit 2) rather than ignore them. --vehicles and --seed draw vehicles from --epa; with --epa each
// vehicle's target is a CSV row and its truth is drawn at random, every session runs in-process (no
// loadtrim-sim, so no time scale) and no live page is served; --in-process runs no loadtrim-sim either.
void refuse_unused(const DemoOptions& o) {
  auto given = [&](const std::string& name) {
    return std::find(o.given.begin(), o.given.end(), name) != o.given.end();
  };
  const auto E = core::Problem::Severity::error;
  core::Problems ps;
  if (o.epa.empty()) {
    for (const char* name : {"--vehicles", "--seed"})
      if (given(name))
        ps.push_back(
            {E, name,
             "draws the vehicles from the CSV that --epa names, and no --epa is given: give --epa CSV, "
             "or drop " +
                 std::string(name) + " (without --epa the demo runs the one vehicle of --target)"});
    if (!o.req.live && given("--live-bind"))
      ps.push_back({E, "--live-bind",
                    "sets where the live page listens, and --no-live serves none: drop one of them"});
    if (o.in_process && given("--time-scale"))
      ps.push_back({E, "--time-scale",
                    "sets loadtrim-sim's time scale, and --in-process runs no loadtrim-sim (the in-process "
                    "controller runs as fast as it can): drop one of them"});
  } else {
    for (const auto& [name, why] :
         {std::pair<const char*, const char*>{"--target", "each vehicle's target is a row of the CSV"},
          {"--truth", "each vehicle's truth is drawn at random (--seed)"},
          {"--time-scale", "the sessions run in-process, with no loadtrim-sim"},
          {"--live-bind", "a fleet of sessions serves no live page"}})
      if (given(name))
        ps.push_back({E, name, std::string("is not used with --epa (") + why + "): drop it, or drop --epa"});
  }
  if (!ps.empty()) throw config::InputError("command line", ps);
}

int demo_one(DemoOptions o) {
  std::printf("loadtrim demo: the rollers are simulated (loadtrim-sim); nothing physical moves.\n");
  o.req.simulator = true;
  if (o.in_process) {
    o.req.cell_file = data_dir() + "/config/cells/sim-inprocess.toml";
    o.req.inprocess_truth = config::load_truth(o.truth);
    return run_new_session(o.req);
  }
  // Everything is validated before the simulator starts, so bad input is refused with nothing running.
  config::load_truth(o.truth);
  o.req.cell_file = data_dir() + "/config/cells/sim-tcp.toml";
  check_inputs(o.req);
  char scale[32];
  std::snprintf(scale, sizeof scale, "%g", o.time_scale);
  SimLauncher sim({"--truth", o.truth, "--port", "0", "--time-scale", scale});
  std::printf("simulated controller started: pid %d, tcp 127.0.0.1:%u, %s× real time\n",
              static_cast<int>(sim.pid()), sim.port(), scale);
  o.req.port = sim.port();
  return run_new_session(o.req);
}

int demo_fleet(DemoOptions o) {
  std::printf("loadtrim demo: %d vehicles from %s, randomised truths, in-process simulated controller.\n",
              o.vehicles, o.epa.c_str());
  const config::EpaFile f = config::read_epa_csv(o.epa);
  std::cerr << config::skipped_rows_note(o.epa, f);  // rows that cannot be used, each with why
  const std::string profile_name = o.req.profile.empty() ? "wltp-iterative" : o.req.profile;
  const core::Profile profile = config::load_profile(
      profile_name.ends_with(".toml") ? profile_name
                                      : config::profile_path(data_dir() + "/config/profiles", profile_name));
  o.req.simulator = true;
  o.req.cell_file = data_dir() + "/config/cells/sim-inprocess.toml";
  if (o.req.console == session::Console::Mode::normal) o.req.console = session::Console::Mode::quiet;
  const std::string targets = (std::filesystem::path(o.req.sessions_dir) / "demo-targets").string();
  std::filesystem::create_directories(targets);
  std::vector<std::size_t> order(f.rows.size());
  std::iota(order.begin(), order.end(), 0);
  std::mt19937_64 rng(o.seed);
  std::shuffle(order.begin(), order.end(), rng);
  int done = 0, accepted = 0, screened = 0;
  std::vector<int> counts;
  for (std::size_t idx : order) {
    if (done >= o.vehicles) break;
    core::VehicleTarget v = config::target_from_epa(f.rows[idx], profile.name);
    if (core::has_errors(core::plausibility(v))) {
      ++screened;
      continue;
    }
    const auto layout = core::axle_layout_for(v.drive);
    physics::Truth truth = physics::random_truth(
        v.test_mass_kg, core::resolved_rotating_mass_kg(v, profile.mass), layout, {}, rng);
    const std::string file = targets + "/" + record::safe_name(v.id) + ".toml";
    std::string err;
    record::write_durable(
        file,
        config::target_toml(v, "Target from the public US EPA Test Car List (samples/data), for the demo."),
        err);
    RunRequest r = o.req;
    // An all-wheel-drive vehicle runs on a two-axle cell (a single-axle cell refuses it: docs/safety.md).
    if (layout == core::AxleLayout::two_axle)
      r.cell_file = data_dir() + "/config/cells/sim-inprocess-two-axle.toml";
    r.target_file = file;
    r.profile = profile_name;
    r.inprocess_truth = truth;
    std::printf("vehicle %-22s TM %6.0f kg  %s: ", v.id.c_str(), v.test_mass_kg,
                layout == core::AxleLayout::two_axle ? "two-axle   " : "single-axle");
    std::fflush(stdout);
    std::string folder;
    const int rc = run_new_session(r, &folder);
    ++done;
    if (rc == kAccepted) {
      ++accepted;
      std::ifstream in(folder + "/summary.json");
      const auto j = nlohmann::json::parse(in, nullptr, false);
      counts.push_back(j.is_object() ? j.value("coastdowns", 0) : 0);
    }
  }
  std::sort(counts.begin(), counts.end());
  std::printf(
      "\n%d of %d vehicles accepted (%d rows screened out as implausible); coast-downs to acceptance: median "
      "%d, max %d\n",
      accepted, done, screened, counts.empty() ? 0 : counts[counts.size() / 2],
      counts.empty() ? 0 : counts.back());
  return accepted == done ? kAccepted : kNotAccepted;
}

}  // namespace

void register_demo(CLI::App& app, Runner& run) {
  auto o = std::make_shared<DemoOptions>();
  o->req.target_file = data_dir() + "/samples/targets/demo-hatchback.toml";
  o->truth = data_dir() + "/samples/truths/demo-hatchback.toml";
  auto* sub = app.add_subcommand(
      "demo", "a full session against the simulated controller for an invented demo vehicle");
  sub->add_option("--target", o->req.target_file, "vehicle target file (TOML)")->capture_default_str();
  sub->add_option("--truth", o->truth, "the simulator's hidden truth (TOML)")->capture_default_str();
  sub->add_option("--profile", o->req.profile, "standard profile name or file (default: the target's)");
  sub->add_option("--first-setting", o->req.first_setting, "standard, fleet, loss-map or history")
      ->check(CLI::IsMember({"standard", "fleet", "loss-map", "history"}))
      ->capture_default_str();
  sub->add_option("--time-scale", o->time_scale, "simulated seconds per wall second")
      ->check(config::number_in(1.0, 2000.0))
      ->capture_default_str();
  sub->add_flag("--in-process", o->in_process, "run the simulated controller inside this process");
  // The live status page is on for a single demo session (docs/live.md), on a loopback port.
  o->req.live = true;
  sub->add_flag_function(
      "--no-live", [o](std::int64_t) { o->req.live = false; }, "do not serve the live status page");
  sub->add_option(
         "--live-bind", o->req.live_bind,
         "where the live page listens, HOST:PORT (port 0: any free port); not a loopback address only "
         "with an access token in LOADTRIM_LIVE_TOKEN")
      ->capture_default_str();
  sub->add_option("--data-dir", o->req.data_dir,
                  "the lab's data root (default: as for run; see loadtrim run --help)");
  sub->add_option("--sessions", o->req.sessions_dir,
                  "where session folders go (default: <data root>/sessions)");
  sub->add_option("--epa", o->epa,
                  "run vehicles drawn from this EPA-format CSV (in-process, randomised truths)");
  sub->add_option("--vehicles", o->vehicles, "how many vehicles with --epa")
      ->check(CLI::Range(1, 100000))
      ->capture_default_str();
  sub->add_option("--seed", o->seed, "seed for drawing vehicles and truths")->capture_default_str();
  auto* q = sub->add_flag_function(
      "--quiet", [o](std::int64_t) { o->req.console = session::Console::Mode::quiet; }, "print only results");
  auto* j = sub->add_flag_function(
      "--json", [o](std::int64_t) { o->req.console = session::Console::Mode::json; }, "JSON lines");
  q->excludes(j);
  sub->callback([o, sub, &run] {
    o->given.clear();
    for (const CLI::Option* opt : sub->get_options())
      if (opt->count() > 0) o->given.push_back(opt->get_name());
    run = [o] {
      refuse_unused(*o);
      record::DataRoot root;
      if (!resolve_lab(o->req, root)) return static_cast<int>(kBadInput);
      if (!o->epa.empty()) o->req.live = false;  // a fleet of sessions: no page for each
      ensure_demo_store(root, o->req.console == session::Console::Mode::normal);
      return o->epa.empty() ? demo_one(*o) : demo_fleet(*o);
    };
  });
}

}  // namespace loadtrim::app
