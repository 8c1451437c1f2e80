// `loadtrim demo`: the whole setting loop in-process against the physics model, for a demo vehicle of our own
// invention or for vehicles drawn from an EPA-format CSV with randomised truths. No controller, no rollers.
#include <algorithm>
#include <cstdio>
#include <iostream>
#include <numeric>
#include <random>

#include "app/exit_codes.hpp"
#include "app/subcommands.hpp"
#include "config/epa_csv.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "core/evaluation.hpp"
#include "core/setting.hpp"
#include "physics/roller_model.hpp"
#include "physics/truth_generator.hpp"

namespace loadtrim::app {

namespace {

struct DemoOptions {
  std::string target, truth, profile, epa;
  int vehicles = 20;
  unsigned seed = 2026;
  double rate_hz = 100.0;
  double warmup_s = 1200.0;
  double warmup_speed_kmh = 80.0;
};

void print_warnings(const std::string& file, const core::Problems& ws) {
  if (!ws.empty()) std::cerr << config::format_problems(file, ws);
}

core::Profile profile_for(const DemoOptions& o, const std::string& name) {
  const std::string p = o.profile.empty() ? name : o.profile;
  const std::string path = p.find('/') != std::string::npos || p.ends_with(".toml")
                               ? p
                               : config::profile_path(data_dir() + "/config/profiles", p);
  core::Problems w;
  core::Profile prof = config::load_profile(path, &w);
  print_warnings(path, w);
  return prof;
}

struct Outcome {
  bool accepted = false;
  int coastdowns = 0;
  double worst_n = 0.0;
  std::string reason;
};

Outcome run_vehicle(const core::VehicleTarget& v, const physics::Truth& truth, const core::Profile& profile,
                    const DemoOptions& o) {
  const core::AxleLayout layout = v.drive == core::Drive::all ? core::AxleLayout::two_axle : core::AxleLayout::single_axle;
  const double m_r = core::resolved_rotating_mass_kg(v, profile.mass);
  const double force_mass = core::force_mass_kg(v.test_mass_kg, m_r);
  const double inertia = core::dyno_inertia_kg(v.test_mass_kg, m_r, layout, profile.mass);
  std::printf("\nvehicle %s  (%s)\n", v.id.c_str(), v.description.c_str());
  std::printf("  profile %s, %s method; TM %.1f kg, m_r %.2f kg, dyno inertia %.1f kg (%s)\n", profile.name.c_str(),
              core::to_string(profile.method), v.test_mass_kg, m_r, inertia, core::to_string(layout));
  std::printf("  target   f0 %8.2f N  f1 %8.4f N/(km/h)  f2 %8.5f N/(km/h)²\n", v.target.f0_n, v.target.f1_n_per_kmh,
              v.target.f2_n_per_kmh2);

  physics::RollerModel model(truth);
  model.set_inertia_kg(inertia);
  model.hold_speed(o.warmup_speed_kmh);
  model.advance(o.warmup_s, 0.05);

  core::RoadLoad set = v.initial_set ? *v.initial_set : core::standard_initial_setting(v.target, layout, profile.initial);
  core::SettingMethodState method(profile, v.target);
  std::printf("  %3s  %26s  %26s  %9s %8s %6s  %s\n", "run", "set f0 / f1 / f2", "measured f0 / f1 / f2", "worst N",
              "est.diff", "result", "decision");
  Outcome out;
  int unusable = 0;
  for (int run = 1; run <= profile.max_coastdowns; ++run) {
    model.set_coefficients(set);
    const physics::Trace tr = physics::record_coastdown(model, profile.start_speed_kmh(), profile.end_speed_kmh(), o.rate_hz);
    const core::CoastdownEvaluation e =
        core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, profile, v.target, force_mass);
    out.coastdowns = run;
    if (!e.usable) {
      std::printf("  %3d  %8.2f %7.4f %9.5f  unusable: %s\n", run, set.f0_n, set.f1_n_per_kmh, set.f2_n_per_kmh2,
                  e.unusable_reason.c_str());
      if (++unusable >= profile.max_unusable_runs) {
        out.reason = "too many unusable coast-downs";
        return out;
      }
      continue;
    }
    const core::RoadLoad& s = e.fit.coefficients;
    const core::Decision d = method.on_coastdown(set, s, e.check.pass);
    std::printf("  %3d  %8.2f %7.4f %9.5f  %8.2f %7.4f %9.5f  %9.2f %8.2f %6s  %s\n", run, set.f0_n, set.f1_n_per_kmh,
                set.f2_n_per_kmh2, s.f0_n, s.f1_n_per_kmh, s.f2_n_per_kmh2, e.check.worst_abs_deviation_n,
                e.estimator_disagreement_n, e.check.pass ? "pass" : "FAIL", d.reason.c_str());
    out.worst_n = e.check.worst_abs_deviation_n;
    if (d.kind == core::Decision::Kind::accepted) {
      const core::RoadLoad f = core::rounded(d.next_set, profile.rounding);
      std::printf("  ACCEPTED after %d coast-downs. Final set coefficients: f0 %.1f N, f1 %.3f N/(km/h), f2 %.5f N/(km/h)²\n",
                  run, f.f0_n, f.f1_n_per_kmh, f.f2_n_per_kmh2);
      out.accepted = true;
      return out;
    }
    if (d.kind == core::Decision::Kind::rejected) {
      out.reason = d.reason;
      std::printf("  NOT ACCEPTED: %s\n", d.reason.c_str());
      return out;
    }
    set = d.next_set;
  }
  out.reason = "iteration limit of " + std::to_string(profile.max_coastdowns) + " coast-downs reached";
  std::printf("  NOT ACCEPTED: %s\n", out.reason.c_str());
  return out;
}

int run_demo(const DemoOptions& o) {
  std::printf("loadtrim demo: in-process physics model, no controller and no rollers are involved.\n");
  if (o.epa.empty()) {
    core::Problems w;
    const core::VehicleTarget v = config::load_target(o.target, &w);
    print_warnings(o.target, w);
    w.clear();
    const physics::Truth truth = config::load_truth(o.truth, &w);
    print_warnings(o.truth, w);
    const Outcome r = run_vehicle(v, truth, profile_for(o, v.profile), o);
    return r.accepted ? kAccepted : kNotAccepted;
  }
  const config::EpaFile f = config::read_epa_csv(o.epa);
  const core::Profile profile = profile_for(o, "wltp-iterative");
  std::vector<std::size_t> order(f.rows.size());
  std::iota(order.begin(), order.end(), 0);
  std::mt19937_64 rng(o.seed);
  std::shuffle(order.begin(), order.end(), rng);
  int done = 0, accepted = 0, screened = 0;
  std::vector<int> counts;
  for (std::size_t idx : order) {
    if (done >= o.vehicles) break;
    const core::VehicleTarget v = config::target_from_epa(f.rows[idx], profile.name);
    if (core::has_errors(core::plausibility(v))) {
      ++screened;
      continue;
    }
    const core::AxleLayout layout = v.drive == core::Drive::all ? core::AxleLayout::two_axle : core::AxleLayout::single_axle;
    physics::Truth truth = physics::random_truth(v.test_mass_kg, core::resolved_rotating_mass_kg(v, profile.mass), layout,
                                                 physics::DynoTruth{}, rng);
    truth.vehicle.name = v.id;
    const Outcome r = run_vehicle(v, truth, profile, o);
    ++done;
    if (r.accepted) {
      ++accepted;
      counts.push_back(r.coastdowns);
    }
  }
  std::sort(counts.begin(), counts.end());
  std::printf("\n%d of %d vehicles accepted (%d rows screened out as implausible); coast-downs to acceptance: median %d, max %d\n",
              accepted, done, screened, counts.empty() ? 0 : counts[counts.size() / 2], counts.empty() ? 0 : counts.back());
  return accepted == done ? kAccepted : kNotAccepted;
}

}  // namespace

void register_demo(CLI::App& app, Runner& run) {
  auto o = std::make_shared<DemoOptions>();
  o->target = data_dir() + "/samples/targets/demo-hatchback.toml";
  o->truth = data_dir() + "/samples/truths/demo-hatchback.toml";
  auto* sub = app.add_subcommand("demo", "run the setting loop in-process against the physics model (no controller)");
  sub->add_option("--target", o->target, "vehicle target file (TOML)")->capture_default_str();
  sub->add_option("--truth", o->truth, "simulated vehicle and dyno truth file (TOML)")->capture_default_str();
  sub->add_option("--profile", o->profile, "standard profile name in config/profiles, or a file; default: the target's");
  sub->add_option("--epa", o->epa, "run vehicles drawn from this EPA-format CSV instead, with randomised truths");
  sub->add_option("--vehicles", o->vehicles, "how many vehicles to draw with --epa")->check(CLI::Range(1, 100000))->capture_default_str();
  sub->add_option("--seed", o->seed, "seed for drawing vehicles and truths")->capture_default_str();
  sub->add_option("--rate-hz", o->rate_hz, "sample rate of the coast-down traces")->check(CLI::Range(10.0, 1000.0))->capture_default_str();
  sub->add_option("--warmup-s", o->warmup_s, "simulated warm-up time in speed hold")->check(CLI::Range(0.0, 7200.0))->capture_default_str();
  sub->callback([o, &run] { run = [o] { return run_demo(*o); }; });
}

}  // namespace loadtrim::app
