// `loadtrim bench`: complete setting sessions — the same session code the operator runs — against the
// simulated controller for a fleet of real road-load targets, each with a randomised truth drawn from a seed,
// so every first-setting strategy meets exactly the same vehicles and truths. The controller is the
// in-process direct adapter (dyno-adapters/inprocess/direct_controller.hpp): same interface, same simulator
// core, no text codec. Every accepted session is judged by the hidden truth (physics/truth_judge.hpp): what a
// noise-free coast-down of the final setting would measure, in the vehicle's state at the last coast-down and
// fully warm, and the steady force on the rollers. The truths' spreads are named presets with options
// (physics::truth_preset). Also: the compute figures (trace analysis, simulator speed) against baselines
// measured in the same run, and the estimators' spread over repeated coast-downs beside the spread the noise
// model predicts (docs/performance.md).
#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <iostream>
#include <map>
#include <mutex>
#include <numeric>
#include <optional>
#include <random>
#include <thread>
#include <utility>

#include "app/exit_codes.hpp"
#include "app/subcommands.hpp"
#include "config/cell_loader.hpp"
#include "config/epa_csv.hpp"
#include "config/loaders.hpp"
#include "core/evaluation.hpp"
#include "core/predict.hpp"
#include "inprocess/direct_controller.hpp"
#include "inprocess/sim_rows.hpp"
#include "physics/truth_generator.hpp"
#include "physics/truth_judge.hpp"
#include "session/session.hpp"

namespace loadtrim::app {

namespace {

using Clock = std::chrono::steady_clock;

// A spread the operator changed from the preset (docs/performance.md, "Truth presets").
struct TruthOverrides {
  std::optional<double> hold_bias_sd_n, inertia_error_sd_pct, compensation_error_sd_pct, speed_noise_kmh;
  std::optional<double> warm_up_tau_min_s, warm_up_tau_max_s, cold_excess_min, cold_excess_max;
  std::optional<double> day_loss_sd_pct, day_hold_bias_sd_n;
  std::optional<double> loss_mass_correlation, hold_bias_speed_sd_n, load_cell_gain_sd_pct,
      load_cell_offset_sd_n;
  bool any() const {
    return hold_bias_sd_n || inertia_error_sd_pct || compensation_error_sd_pct || speed_noise_kmh ||
           warm_up_tau_min_s || warm_up_tau_max_s || cold_excess_min || cold_excess_max || day_loss_sd_pct ||
           day_hold_bias_sd_n || loss_mass_correlation || hold_bias_speed_sd_n || load_cell_gain_sd_pct ||
           load_cell_offset_sd_n;
  }
};

struct BenchOptions {
  std::string epa;
  int vehicles = 0;  // 0 = every plausible row
  bool quick = false;
  unsigned seed = 2026;
  int jobs = 2;
  double rate_hz = 10.0;
  std::string json_out;
  int estimator_repeats = 200;
  std::string truths = "typical";
  TruthOverrides overrides;
  std::vector<double> compare_rates_hz;  // the sample-rate lever: these rates side by side (empty: not run)
};

struct Strategy {
  std::string name;
  core::FirstSetting first;
  bool history = false;  // a second session of the same vehicle after a first (loss-map) one
  // The history's two levers (docs/store.md, "The history first setting"), each turned off in a row of its
  // own so that its contribution is measured side by side: the loss from the first session's last measured
  // curve (off: target − accepted set) and the day-to-day scale from the two warm-ups.
  bool history_measured = true;
  bool history_day_scale = true;
  bool shipped = true;  // a strategy as shipped (false: a row with a lever turned off, for comparison)
};

// Controller time spent in each part of a session, s.
struct TimeSplit {
  double warm_up_s = 0.0, loss_map_s = 0.0, run_up_s = 0.0, coastdown_s = 0.0, other_s = 0.0;
};

struct Result {
  bool accepted = false;
  int coastdowns = 0;
  double cell_min = 0.0;
  double after_warm_min = 0.0;  // cell time from the warm-up's end
  double tool_worst_n = 0.0;    // the tool's own worst final deviation (what it believed)
  std::string reason;
  bool verification_failed = false;  // fixed-run: the final setting failed its verification coast-down
  TimeSplit split;
  // The truth's verdict on the final setting (accepted sessions; judged = false when it could not be formed).
  bool judged = false;
  double true_last_n = 0.0;    // worst |coast-down-equivalent error| in the state at the last coast-down
  double true_warm_n = 0.0;    // the same, fully warm
  double steady_warm_n = 0.0;  // worst |steady force − target|, fully warm
  // Every pass whose next coast-down was predicted (docs/standards.md §3.19) and that coasted on at the same
  // setting: the predicted chance to fail, and whether the next usable coast-down failed.
  std::vector<std::pair<double, bool>> next_pass;
};

double quantile(std::vector<double> x, double q) {
  if (x.empty()) return NAN;
  std::sort(x.begin(), x.end());
  const double pos = q * (x.size() - 1);
  const std::size_t i = static_cast<std::size_t>(pos);
  return i + 1 < x.size() ? x[i] + (pos - i) * (x[i + 1] - x[i]) : x[i];
}

// Observer that notes the warm-up's end and splits the controller time by what the session was doing: the
// interval from one stamped event to the next belongs to the state the first one left the session in; the
// warm-up state after the plain hold (WarmUpHeld) until WarmUpEnded is the loss map.
class Phases : public session::Observer {
 public:
  bool on_event(const session::Event& e) override {
    note_next_pass(e);
    if (!e.stamp || !e.stamp->t_s) return true;
    const double t = *e.stamp->t_s;
    if (have_) {
      const double dt = std::max(0.0, t - last_t_);
      switch (state_) {
        case session::State::warm_up:
          (in_map_ ? split.loss_map_s : split.warm_up_s) += dt;
          break;
        case session::State::run_up:
          split.run_up_s += dt;
          break;
        case session::State::coast_down:
          split.coastdown_s += dt;
          break;
        default:
          split.other_s += dt;
          break;
      }
    }
    have_ = true;
    last_t_ = t;
    state_ = e.stamp->state;
    if (const auto* held = std::get_if<session::ev::WarmUpHeld>(&e.payload)) {
      in_map_ = true;
      if (!warm_up && held->initial) warm_up = core::WarmUpRecord{held->speed_kmh, held->windows};
    }
    if (std::holds_alternative<session::ev::WarmUpStarted>(e.payload)) in_map_ = false;
    if (std::holds_alternative<session::ev::WarmUpEnded>(e.payload)) {
      in_map_ = false;
      if (!seen) {
        seen = true;
        warm_end_cell_s = e.stamp->cell_time_s ? *e.stamp->cell_time_s : 0.0;
      }
    }
    return true;
  }
  bool seen = false;
  double warm_end_cell_s = 0.0;
  TimeSplit split;
  std::optional<core::WarmUpRecord> warm_up;       // the first warm-up hold, as its record keeps it
  std::vector<std::pair<double, bool>> next_pass;  // Result::next_pass

 private:
  // A pass's predicted chance that the next coast-down fails, paired with that coast-down's verdict when the
  // setting was not adjusted in between and nothing broke the passes (a discarded run, a stop, a re-warm).
  void note_next_pass(const session::Event& e) {
    if (std::holds_alternative<session::ev::CoastdownDiscarded>(e.payload) ||
        std::holds_alternative<session::ev::PassesReset>(e.payload)) {
      pending_.reset();
      return;
    }
    const auto* cd = std::get_if<session::ev::Coastdown>(&e.payload);
    if (!cd) return;
    const auto& r = cd->record;
    if (!r.evaluation.usable) {
      pending_.reset();
      return;
    }
    if (pending_) next_pass.emplace_back(*pending_, !r.evaluation.check.pass);
    pending_.reset();
    const auto& np = r.decision.next_pass;
    if (np && np->predicted && !np->adjusted && r.decision.kind == core::Decision::Kind::run_again &&
        std::isfinite(np->fail_probability))
      pending_ = np->fail_probability;
  }
  std::optional<double> pending_;
  bool have_ = false, in_map_ = false;
  double last_t_ = 0.0;
  session::State state_ = session::State::connect;
};

// The direct adapter, watched: during each road-load simulation (a coast-down) it notes the simulator's speed
// and drivetrain warmth after every chunk of samples, keeping the last coast-down's, so the truth can judge
// the final setting in the state the vehicle was in when the coast passed each reference speed.
class WatchedController : public inprocess::DirectController {
 public:
  using inprocess::DirectController::DirectController;
  struct Point {
    double speed_kmh, warmth;
  };
  std::vector<Point> last_coast;
  double last_coast_inertia_kg = 0.0;
  core::RoadLoad last_coast_set;

  // The warmth when the last coast-down first came down to v (its last point when it never did; 1 when no
  // coast-down ran).
  double warmth_at(double v_kmh) const {
    for (const auto& p : last_coast)
      if (p.speed_kmh <= v_kmh) return p.warmth;
    return last_coast.empty() ? 1.0 : last_coast.back().warmth;
  }

 protected:
  controller::Result do_receive_samples(std::vector<controller::Sample>& out,
                                        controller::Deadline d) override {
    auto r = inprocess::DirectController::do_receive_samples(out, d);
    const physics::RollerModel& m = sim().model();
    if (m.mode() == physics::Mode::road_load) {
      if (!coasting_) {
        last_coast.clear();
        last_coast_inertia_kg = m.inertia_set_kg();
        last_coast_set = m.coefficients();
      }
      coasting_ = true;
      last_coast.push_back({m.speed_kmh(), m.warmth()});
    } else {
      coasting_ = false;
    }
    return r;
  }

 private:
  bool coasting_ = false;
};

struct Run {
  session::Summary summary;
  Phases phases;
  std::vector<double> warmth_per_speed;
  double inertia_kg = 0.0;
};

Run run_one(const session::Inputs& in, const physics::Truth& truth, session::Options opt) {
  WatchedController c(truth, in.cell.timeouts, {in.cell.max_speed_kmh, in.cell.max_force_n, 1e9, false});
  Run out;
  // The band method decides; the whole-trace fit runs only where the profile uses it (a confirmation, the
  // adjustment's loss: docs/standards.md §3.11, §3.17) and is measured on its own below.
  opt.whole_trace_estimator = false;
  {
    session::Session s(in, opt, c, {&out.phases});  // gone before `out` is returned
    out.summary = s.run();
  }
  for (const auto& d : out.summary.deviations) out.warmth_per_speed.push_back(c.warmth_at(d.speed_kmh));
  out.inertia_kg = c.last_coast_inertia_kg;
  return out;
}

struct Vehicle {
  core::VehicleTarget target;
  physics::Truth truth;
  physics::Truth truth_day2;  // the same vehicle on another day (history's second session)
  core::AxleLayout layout;
};

std::string cell_toml(const std::string& axles, double rate) {
  char r[32];
  std::snprintf(r, sizeof r, "%g", rate);
  return "name = \"bench cell (invented)\"\n[controller]\nadapter = \"inprocess-sim\"\ntruth = "
         "\"unused\"\nsample_rate_hz = " +
         std::string(r) +
         "\n[limits]\nmax_speed_kmh = 160.0\nmax_force_n = 8000.0\nmax_motoring_s = 14400.0\n"
         "[dyno]\nroller_diameter_m = 1.2192\nbase_inertia_kg = 1250.0\naxles = \"" +
         axles + "\"\nrun_up = \"vehicle\"\n";  // the simulated driver accelerates the vehicle
}

// Expected band-force SD from white speed noise (derivation in docs/performance.md and trace_analysis_test).
double expected_band_sd(const core::RoadLoad& load, double mass, double v_ref, double half_band,
                        double sigma_v, double rate, double w) {
  auto sigma_t = [&](double level) {
    const double a = 3.6 * load.force_n(level) / mass;  // km/h per s
    const double n = 2.0 * (w / a) * rate;
    return 1.5 * sigma_v / (a * std::sqrt(n));
  };
  const auto dt = core::coastdown_time_s(load, mass, v_ref + half_band, v_ref - half_band);
  if (!dt) return NAN;
  return core::band_force_n(mass, half_band, *dt) *
         std::hypot(sigma_t(v_ref + half_band), sigma_t(v_ref - half_band)) / *dt;
}

// Expected whole-trace force SD: the linearised least-squares covariance σ_v²·(JᵀJ)⁻¹ of (f0, f1, f2, v0), J
// the sensitivities of the modelled speed at each sample time, by central differences of the ODE solution.
std::vector<double> expected_whole_sd(const core::RoadLoad& load, double mass, double v0, double v_end,
                                      double rate, double sigma_v, const std::vector<double>& speeds) {
  auto simulate = [&](const double* p, std::vector<double>& out) {
    out.clear();
    double v = p[3];
    const double h = 1.0 / rate, k = 3.6 / mass;
    auto f = [&](double x) { return -k * (p[0] + (p[1] + p[2] * x) * x); };
    while (v > v_end && out.size() < 200000) {
      out.push_back(v);
      const double k1 = f(v), k2 = f(v + 0.5 * h * k1), k3 = f(v + 0.5 * h * k2), k4 = f(v + h * k3);
      v += h / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4);
    }
  };
  const double p0[4] = {load.f0_n, load.f1_n_per_kmh, load.f2_n_per_kmh2, v0};
  std::vector<double> base;
  simulate(p0, base);
  const std::size_t n = base.size();
  Eigen::MatrixXd J(static_cast<Eigen::Index>(n), 4);
  for (int j = 0; j < 4; ++j) {
    double hp[4], hm[4];
    std::copy(p0, p0 + 4, hp);
    std::copy(p0, p0 + 4, hm);
    const double step = 1e-4 * std::max(1e-3, std::abs(p0[j]));
    hp[j] += step;
    hm[j] -= step;
    std::vector<double> a, b;
    simulate(hp, a);
    simulate(hm, b);
    for (std::size_t i = 0; i < n; ++i) {
      const double va = i < a.size() ? a[i] : a.back(), vb = i < b.size() ? b[i] : b.back();
      J(static_cast<Eigen::Index>(i), j) = (va - vb) / (2 * step);
    }
  }
  const Eigen::Matrix4d cov = sigma_v * sigma_v * (J.transpose() * J).inverse();
  std::vector<double> out;
  for (double v : speeds) {
    const Eigen::Vector4d g(1.0, v, v * v, 0.0);
    out.push_back(std::sqrt(std::max(0.0, g.dot(cov * g))));
  }
  return out;
}

// The preset named on the command line with the operator's changes; a message naming the option and its
// range when a combination is refused (the ranges of single options are CLI11's checks).
std::optional<std::string> resolve_truths(const BenchOptions& o, physics::TruthPreset& out) {
  const physics::TruthPreset* p = physics::truth_preset(o.truths);
  if (!p) return "--truths: is \"" + o.truths + "\", allowed typical or harsh";
  out = *p;
  const TruthOverrides& v = o.overrides;
  if (v.hold_bias_sd_n) out.spread.hold_bias_sd_n = *v.hold_bias_sd_n;
  if (v.inertia_error_sd_pct) out.spread.inertia_error_sd = *v.inertia_error_sd_pct / 100.0;
  if (v.compensation_error_sd_pct) out.spread.compensation_error_sd = *v.compensation_error_sd_pct / 100.0;
  if (v.speed_noise_kmh) out.speed_noise_kmh = *v.speed_noise_kmh;
  if (v.warm_up_tau_min_s) out.spread.warm_up_tau_min_s = *v.warm_up_tau_min_s;
  if (v.warm_up_tau_max_s) out.spread.warm_up_tau_max_s = *v.warm_up_tau_max_s;
  if (v.cold_excess_min) out.spread.cold_excess_min = *v.cold_excess_min;
  if (v.cold_excess_max) out.spread.cold_excess_max = *v.cold_excess_max;
  if (v.day_loss_sd_pct) out.day.loss_sd = *v.day_loss_sd_pct / 100.0;
  if (v.day_hold_bias_sd_n) out.day.hold_bias_sd_n = *v.day_hold_bias_sd_n;
  if (v.loss_mass_correlation) out.spread.loss_mass_correlation = *v.loss_mass_correlation;
  if (v.hold_bias_speed_sd_n) out.spread.hold_bias_speed_sd_n = *v.hold_bias_speed_sd_n;
  if (v.load_cell_gain_sd_pct) out.spread.load_cell_gain_sd = *v.load_cell_gain_sd_pct / 100.0;
  if (v.load_cell_offset_sd_n) out.spread.load_cell_offset_sd_n = *v.load_cell_offset_sd_n;
  char buf[200];
  if (out.spread.warm_up_tau_min_s > out.spread.warm_up_tau_max_s) {
    std::snprintf(
        buf, sizeof buf,
        "--warm-up-tau-min-s: is %g s, above --warm-up-tau-max-s (%g s); allowed 60 s to the maximum",
        out.spread.warm_up_tau_min_s, out.spread.warm_up_tau_max_s);
    return std::string(buf);
  }
  if (out.spread.cold_excess_min > out.spread.cold_excess_max) {
    std::snprintf(buf, sizeof buf,
                  "--cold-excess-min: is %g, above --cold-excess-max (%g); allowed 0 to the maximum",
                  out.spread.cold_excess_min, out.spread.cold_excess_max);
    return std::string(buf);
  }
  return std::nullopt;
}

int run_bench(BenchOptions o) {
  const auto wall0 = Clock::now();
  physics::TruthPreset preset;
  if (auto why = resolve_truths(o, preset)) {
    std::cerr << "loadtrim bench: error: " << *why << "\nrefused: nothing was started.\n";
    return kBadInput;
  }
  const bool custom = o.overrides.any();
  const std::string truths_name = std::string(preset.name) + (custom ? " with changes" : "");
  if (o.quick && o.vehicles == 0) o.vehicles = 16;
  const core::Profile iterative =
      config::load_profile(config::profile_path(data_dir() + "/config/profiles", "wltp-iterative"));
  const core::Profile fixed =
      config::load_profile(config::profile_path(data_dir() + "/config/profiles", "wltp-fixed-run"));
  const config::EpaFile f = config::read_epa_csv(o.epa);
  std::cerr << config::skipped_rows_note(o.epa, f);  // rows that cannot be used, each with why
  // Fleet model from the same file (in-sample: the benchmark's fleet figure is optimistic by that much).
  const core::FleetLossModel fleet = core::fit_fleet_loss(config::fleet_rows(f));

  // The vehicles: every plausible row (or a seeded sample), each with its own seeded truth (and its truth on
  // a second day, drawn from the same vehicle's generator after the first).
  std::vector<std::size_t> order(f.rows.size());
  std::iota(order.begin(), order.end(), 0);
  std::mt19937_64 pick(o.seed);
  if (o.vehicles > 0) std::shuffle(order.begin(), order.end(), pick);
  std::vector<Vehicle> fleet_v;
  int screened = 0;
  physics::DynoTruth dyno;
  dyno.speed_noise_kmh = preset.speed_noise_kmh;
  for (std::size_t idx : order) {
    if (o.vehicles > 0 && static_cast<int>(fleet_v.size()) >= o.vehicles) break;
    core::VehicleTarget t = config::target_from_epa(f.rows[idx], iterative.name);
    if (core::has_errors(core::plausibility(t))) {
      ++screened;
      continue;
    }
    Vehicle v;
    v.layout = core::axle_layout_for(t.drive);
    std::mt19937_64 rng(o.seed * 1000003ULL + idx);
    v.truth = physics::random_truth(t.test_mass_kg, core::resolved_rotating_mass_kg(t, iterative.mass),
                                    v.layout, dyno, rng, preset.spread);
    v.truth_day2 = physics::redraw_day(v.truth, rng, preset.day);
    v.target = t;
    fleet_v.push_back(std::move(v));
  }
  // The bench cell at a sample rate: single- and two-axle.
  struct Cells {
    controller::CellConfig single, two;
  };
  auto cells_at = [](double rate) {
    return Cells{config::parse_cell(cell_toml("single-axle", rate), "bench-cell.toml",
                                    adapters::tool_registry().sections()),
                 config::parse_cell(cell_toml("two-axle", rate), "bench-cell.toml",
                                    adapters::tool_registry().sections())};
  };
  const Cells cells = cells_at(o.rate_hz);

  const std::vector<Strategy> strategies = {
      {"standard", core::FirstSetting::standard},
      {"fleet", core::FirstSetting::fleet},
      {"loss-map", core::FirstSetting::loss_map},
      {"history", core::FirstSetting::history, true},
      {"history-no-day-scale", core::FirstSetting::history, true, true, false, false},
      {"history-target-less-set", core::FirstSetting::history, true, false, false, false}};
  // The iterative profile with the drift rule "require" (docs/standards.md §3.12): the vehicle must be stable
  // at acceptance; measured for the default first setting (the loss map) only.
  core::Profile iterative_require = iterative;
  iterative_require.warm_up.drift_rule = core::WarmUp::DriftRule::require;
  // The iterative profile with a stability-ended warm-up (lab policy; the road rule is "at least 20 minutes
  // until stable" and the dyno-side wording is not known: docs/standards.md §3): at least kStableMinS at the
  // warm-up speed, then until the warming curve across the 60 s windows says less than the profile's drift
  // threshold is still to come (stable_by "trend", docs/standards.md §3.12), at most the profile's 20 minutes
  // in all; measured for the loss map with the drift rule "warn", against the iterative standard's fixed
  // 20-minute warm-up (issue 17's total-cell-time goal).
  constexpr double kStableMinS = 300.0;   // lab policy for the bench, no source
  constexpr double kWaitExtraS = 7200.0;  // the profile's limit on warm_up.max_extra_s
  core::Profile iterative_stable = iterative;
  iterative_stable.warm_up.max_extra_s = std::max(0.0, iterative.warm_up.duration_s - kStableMinS);
  iterative_stable.warm_up.duration_s = kStableMinS;
  iterative_stable.warm_up.stable_within_n = iterative.warm_up.drift_threshold_n;
  iterative_stable.warm_up.stable_window_s = 60.0;
  iterative_stable.warm_up.stable_by = core::WarmUp::StableBy::trend;
  // The iterative profile with the guard-band decision rule (docs/standards.md §3.11, lab
  // policy): a coast-down passes only when |deviation| + k·u <= tolerance, k = 2; a lever against acceptances
  // that the truth finds outside tolerance.
  core::Profile iterative_guard = iterative;
  iterative_guard.decision_rule.kind = core::DecisionRule::Kind::guard_band;
  iterative_guard.decision_rule.coverage_k = 2.0;
  // The iterative profile whose passes the whole-trace curve must confirm (acceptance.whole_trace_confirms,
  // docs/standards.md §3.11, lab policy): the whole-trace estimator as a tie-breaker against acceptances the
  // truth finds outside tolerance, at a smaller cost than the guard band where the whole trace is the less
  // noisy estimate.
  core::Profile iterative_confirm = iterative;
  iterative_confirm.whole_trace_confirms = true;
  // The shipped profiles' loss map coasts between its holds and takes the steady-versus-coasting difference
  // off the map (loss_map.coast_between_holds, docs/standards.md §3.15, lab policy); this row is the map as
  // it was before, holds only, so that the lever's contribution is measured side by side.
  core::Profile iterative_holds_only = iterative;
  iterative_holds_only.loss_map.coast_between_holds = false;
  core::Profile iterative_stable_require = iterative_stable;
  iterative_stable_require.warm_up.drift_rule = core::WarmUp::DriftRule::require;
  // The iterative profile that waits for a stable vehicle (issue 17's fully-warm goal): the fixed profile's
  // 20 minutes as the least warm-up, then on until the warming trend says less than the drift threshold is
  // still to come, at most the profile limit of 2 hours more (lab policy for the bench, no source), and the
  // drift rule "require" at acceptance. Measured for the loss map.
  core::Profile iterative_wait = iterative;
  iterative_wait.warm_up.max_extra_s = kWaitExtraS;
  iterative_wait.warm_up.stable_within_n = iterative.warm_up.drift_threshold_n;
  iterative_wait.warm_up.stable_window_s = 60.0;
  iterative_wait.warm_up.stable_by = core::WarmUp::StableBy::trend;
  iterative_wait.warm_up.drift_rule = core::WarmUp::DriftRule::require;
  // The same without judging the settled setting as it will be fully warm (warm_up.check_fully_warm,
  // docs/standards.md §3.18, on in the shipped profiles): the lever's contribution, side by side.
  core::Profile iterative_wait_no_check = iterative_wait;
  iterative_wait_no_check.warm_up.check_fully_warm = false;
  // The shipped profiles anticipate the warming still to come in the loss map's first setting, each adjusted
  // setting and the fixed-run final setting (warm_up.anticipate_drift, docs/standards.md §3.16, lab policy);
  // these rows are the standard's adjustment as it is, so that the lever's contribution is measured side by
  // side.
  core::Profile iterative_plain = iterative;
  iterative_plain.warm_up.anticipate_drift = false;
  core::Profile fixed_plain = fixed;
  fixed_plain.warm_up.anticipate_drift = false;
  // The shipped iterative profiles predict, after a pass, whether the warming will take the next coast-down
  // outside and adjust at once above a 0.3 chance (warm_up.predict_next_pass, next_pass_risk;
  // docs/standards.md §3.19, lab policy); these rows coast on after every pass, as before, and adjust only
  // above a 0.5 chance, so that the lever and its risk are measured side by side.
  core::Profile iterative_no_predict = iterative;
  iterative_no_predict.warm_up.predict_next_pass = false;
  core::Profile iterative_risk_half = iterative;
  iterative_risk_half.warm_up.next_pass_risk = 0.5;
  // The shipped profiles aim each anticipated setting at the coast-downs it must pass in a row
  // (warm_up.anticipate_for = "passes", docs/standards.md §3.16); this row aims at the next one only, as the
  // previous step did, so that the aim's contribution is measured side by side.
  core::Profile iterative_next = iterative;
  iterative_next.warm_up.anticipate_for = core::WarmUp::AnticipateFor::next;
  // The shipped profiles fit each crossing time over a window as wide as the band and take each adjustment's
  // loss from the whole-trace curve (bands.crossing_fit_half_width_kmh, method.adjust_from; docs/standards.md
  // §2.10, §3.17, lab policy); these rows are the earlier 2.5 km/h window and the band regression's loss,
  // side by side.
  core::Profile iterative_narrow = iterative;
  iterative_narrow.crossing_fit_half_width_kmh = 2.5;
  core::Profile iterative_band_loss = iterative;
  iterative_band_loss.adjust_from = core::Profile::AdjustFrom::band_regression;
  core::Profile fixed_band_loss = fixed;
  fixed_band_loss.adjust_from = core::Profile::AdjustFrom::band_regression;
  struct Method {
    std::string key;
    const core::Profile* profile;
    std::vector<std::size_t> strategies;  // indices into `strategies`
  };
  const std::vector<Method> methods = {
      {"iterative", &iterative, {0, 1, 2, 3, 4, 5}},
      {"fixed-run", &fixed, {0, 1, 2, 3}},
      {"iterative-require", &iterative_require, {2}},
      {"iterative-stable-warm-up", &iterative_stable, {2}},
      {"iterative-stable-warm-up-require", &iterative_stable_require, {2}},
      {"iterative-guard-band", &iterative_guard, {2}},
      {"iterative-wait-for-stable-require", &iterative_wait, {2}},
      {"iterative-wait-for-stable-require-no-fully-warm-check", &iterative_wait_no_check, {2}},
      {"iterative-whole-trace-confirms", &iterative_confirm, {2}},
      {"iterative-map-holds-only", &iterative_holds_only, {2}},
      {"iterative-no-anticipation", &iterative_plain, {2}},
      {"iterative-no-next-pass-prediction", &iterative_no_predict, {2}},
      {"iterative-next-pass-risk-0.5", &iterative_risk_half, {2}},
      {"fixed-run-no-anticipation", &fixed_plain, {2}},
      {"iterative-anticipates-next-only", &iterative_next, {2}},
      {"iterative-crossing-fit-2.5-kmh", &iterative_narrow, {2}},
      {"iterative-loss-from-band-regression", &iterative_band_loss, {2}},
      {"fixed-run-loss-from-band-regression", &fixed_band_loss, {2}}};
  std::size_t sessions_run = 0;
  for (const auto& m : methods)
    for (std::size_t s : m.strategies) sessions_run += fleet_v.size() * (strategies[s].history ? 2 : 1);
  // One measured session (two for history) of vehicle v with profile prof, strategy st, at rate_hz, judged by
  // the truth.
  auto run_session = [&](const Vehicle& v, const core::Profile& prof, const Strategy& st, const Cells& cl,
                         double rate_hz) {
    core::VehicleTarget target = v.target;
    target.profile = prof.name;
    session::Inputs in = session::plan_inputs(v.layout == core::AxleLayout::two_axle ? cl.two : cl.single,
                                              prof, std::move(target));
    const double force_mass =
        core::force_mass_kg(v.target.test_mass_kg, core::resolved_rotating_mass_kg(v.target, prof.mass));
    session::Options opt;
    opt.first_setting = st.first;
    opt.fleet = fleet;
    opt.sample_rate_hz = rate_hz;
    const physics::Truth* truth = &v.truth;
    if (st.history) {
      // History: this vehicle was set on this cell on an earlier day (a first, loss-map session); its
      // accepted setting seeds the second session, which is the one measured, and which meets the vehicle
      // as it is on the second day.
      session::Options first = opt;
      first.first_setting = core::FirstSetting::loss_map;
      const auto s1 = run_one(in, v.truth, first);
      if (s1.summary.final_set) {
        core::HistoryEntry h;
        h.target = v.target.target;
        h.final_set = *s1.summary.final_set;
        // As the store gives it: the last measured curve of an iterative session only, and the first
        // session's first warm-up hold as its record keeps it.
        if (prof.method == core::SettingMethod::iterative && st.history_measured)
          h.measured = s1.summary.measured;
        if (st.history_day_scale) h.warm_up = s1.phases.warm_up;
        opt.history = h;
      }
      truth = &v.truth_day2;
    }
    const Run run = run_one(in, *truth, opt);
    const auto& sum = run.summary;
    Result r;
    r.accepted = sum.outcome == session::Outcome::accepted;
    r.coastdowns = sum.coastdowns;
    r.cell_min = sum.cell_time_s / 60.0;
    r.after_warm_min = (sum.cell_time_s - run.phases.warm_end_cell_s) / 60.0;
    r.split = run.phases.split;
    r.next_pass = run.phases.next_pass;
    for (const auto& d : sum.deviations) r.tool_worst_n = std::max(r.tool_worst_n, std::abs(d.deviation_n));
    r.reason = r.accepted ? "" : std::string(session::to_string(sum.outcome)) + ": " + sum.stop_reason;
    r.verification_failed = !r.accepted && sum.stop_reason.find("verification") != std::string::npos;
    if (r.accepted && sum.final_set && !sum.deviations.empty()) {
      std::vector<double> speeds;
      for (const auto& d : sum.deviations) speeds.push_back(d.speed_kmh);
      const physics::SettingOnDyno on{run.inertia_kg, *sum.final_set, force_mass};
      const auto last = physics::judge_setting(*truth, on, v.target.target, speeds, prof.band_half_width_kmh,
                                               run.warmth_per_speed);
      const std::vector<double> warm(speeds.size(), 1.0);
      const auto hot =
          physics::judge_setting(*truth, on, v.target.target, speeds, prof.band_half_width_kmh, warm);
      r.judged = last.ok && hot.ok;
      r.true_last_n = last.worst_coastdown_n;
      r.true_warm_n = hot.worst_coastdown_n;
      r.steady_warm_n = hot.worst_steady_n;
    }
    return r;
  };
  // results[method][strategy][vehicle]
  std::vector<std::vector<std::vector<Result>>> results(
      methods.size(),
      std::vector<std::vector<Result>>(strategies.size(), std::vector<Result>(fleet_v.size())));
  std::atomic<std::size_t> next{0};
  auto worker = [&] {
    for (;;) {
      const std::size_t i = next++;
      if (i >= fleet_v.size()) return;
      for (std::size_t m = 0; m < methods.size(); ++m)
        for (std::size_t s : methods[m].strategies)
          results[m][s][i] = run_session(fleet_v[i], *methods[m].profile, strategies[s], cells, o.rate_hz);
    }
  };
  std::vector<std::thread> pool;
  for (int j = 0; j < std::max(1, o.jobs); ++j) pool.emplace_back(worker);
  for (auto& t : pool) t.join();
  const double fleet_wall_s = std::chrono::duration<double>(Clock::now() - wall0).count();

  const auto& sp = preset.spread;
  nlohmann::json report = {{"vehicles", fleet_v.size()},
                           {"screened_out", screened},
                           {"sample_rate_hz", o.rate_hz},
                           {"seed", o.seed},
                           {"jobs", o.jobs},
                           {"file", o.epa},
                           {"truths",
                            {{"preset", preset.name},
                             {"changed", custom},
                             {"hold_bias_sd_n", sp.hold_bias_sd_n},
                             {"inertia_error_sd", sp.inertia_error_sd},
                             {"compensation_error_sd", sp.compensation_error_sd},
                             {"speed_noise_kmh", preset.speed_noise_kmh},
                             {"warm_up_tau_s", {sp.warm_up_tau_min_s, sp.warm_up_tau_max_s}},
                             {"cold_excess", {sp.cold_excess_min, sp.cold_excess_max}},
                             {"loss_mass_correlation", sp.loss_mass_correlation},
                             {"hold_bias_speed_sd_n_at_130_kmh", sp.hold_bias_speed_sd_n},
                             {"load_cell_gain_sd", sp.load_cell_gain_sd},
                             {"load_cell_offset_sd_n", sp.load_cell_offset_sd_n},
                             {"day_to_day",
                              {{"loss_sd", preset.day.loss_sd},
                               {"hold_bias_sd_n", preset.day.hold_bias_sd_n},
                               {"warm_up_sd", preset.day.warm_up_sd},
                               {"compensation_error_sd", preset.day.compensation_error_sd}}}}}};
  std::printf(
      "loadtrim bench: %zu vehicles from %s (%d implausible rows screened out), seed %u, %g Hz samples,\n"
      "in-process direct simulated controller, %d worker threads. Every strategy meets the same vehicles and "
      "truths.\n",
      fleet_v.size(), o.epa.c_str(), screened, o.seed, o.rate_hz, o.jobs);
  std::printf(
      "Truths: %s (hold bias sd %g N, inertia error sd %g %%, compensation error sd %g %%, speed noise %g "
      "km/h, "
      "warm-up tau %g-%g s, cold excess %g-%g, loss-mass correlation %g, hold bias speed part sd %g N at 130 "
      "km/h, load-cell gain sd %g %% and offset sd %g N; day to day: loss sd %g %%, hold bias sd %g N).\n\n",
      truths_name.c_str(), sp.hold_bias_sd_n, 100 * sp.inertia_error_sd, 100 * sp.compensation_error_sd,
      preset.speed_noise_kmh, sp.warm_up_tau_min_s, sp.warm_up_tau_max_s, sp.cold_excess_min,
      sp.cold_excess_max, sp.loss_mass_correlation, sp.hold_bias_speed_sd_n, 100 * sp.load_cell_gain_sd,
      sp.load_cell_offset_sd_n, 100 * preset.day.loss_sd, preset.day.hold_bias_sd_n);
  bool sane = !fleet_v.empty();
  int unjudged = 0;
  double ref_cd = NAN, ref_min = NAN;  // the iterative standard's medians, for a method without its own
  double fixed_ref_cd = NAN, fixed_ref_min = NAN;  // the fixed-run standard's, for a fixed-run row without
  auto num_min = [](double s) {
    char b[32];
    std::snprintf(b, sizeof b, "%g", s / 60.0);
    return std::string(b);
  };
  for (std::size_t m = 0; m < methods.size(); ++m) {
    const core::Profile& prof = *methods[m].profile;
    // The shipped profile of the same method: what a row's note says the row differs from.
    const core::Profile& base = prof.method == core::SettingMethod::fixed_run ? fixed : iterative;
    const double tol = prof.tolerance_n;
    const bool stable_end = prof.warm_up.stable_within_n > 0.0,
               require = prof.warm_up.drift_rule == core::WarmUp::DriftRule::require,
               guard = prof.decision_rule.kind == core::DecisionRule::Kind::guard_band,
               confirm = prof.whole_trace_confirms,
               holds_only = !prof.loss_map.coast_between_holds && iterative.loss_map.coast_between_holds,
               anticipate_differs = prof.warm_up.anticipate_drift != base.warm_up.anticipate_drift,
               narrow = prof.crossing_fit_half_width_kmh != base.crossing_fit_half_width_kmh,
               loss_differs = prof.adjust_from != base.adjust_from,
               aim_differs = prof.warm_up.anticipate_drift &&
                             prof.warm_up.anticipate_for != base.warm_up.anticipate_for,
               predict_differs = prof.warm_up.predict_next_pass != base.warm_up.predict_next_pass ||
                                 prof.warm_up.next_pass_risk != base.warm_up.next_pass_risk;
    const std::string note =
        (stable_end ? ", warm-up ended on stability: at least " + num_min(prof.warm_up.duration_s) +
                          " min, then until the warming trend says less than the drift threshold is to come, "
                          "at most " +
                          num_min(prof.warm_up.duration_s + prof.warm_up.max_extra_s) + " min"
                    : std::string()) +
        (require ? ", drift rule \"require\": a stable vehicle at acceptance" : "") +
        (require
             ? prof.warm_up.check_fully_warm
                   ? ", the settled setting judged as it will be fully warm (warm_up.check_fully_warm)"
                   : ", the settled setting not judged as it will be fully warm (no warm_up.check_fully_warm)"
             : "") +
        (guard ? ", decision rule guard band: |deviation| + 2u <= tolerance" : "") +
        (confirm ? ", a pass needs the whole-trace curve within tolerance too" : "") +
        (holds_only ? ", the loss map from its holds only (no coasts between them)" : "") +
        (anticipate_differs ? prof.warm_up.anticipate_drift
                                  ? ", the settings anticipate the warming the warm-up's curve predicts"
                                  : ", the settings do not anticipate the warming (the standard's adjustment)"
                            : "") +
        (aim_differs ? prof.warm_up.anticipate_for == core::WarmUp::AnticipateFor::next
                           ? ", each anticipated setting aims at the next coast-down only"
                           : ", each anticipated setting aims at the coast-downs it must pass in a row"
                     : "") +
        (predict_differs
             ? prof.warm_up.predict_next_pass
                   ? ", a pass adjusted at once when the next coast-down fails with a chance above " +
                         core::num(prof.warm_up.next_pass_risk) + " (warm_up.next_pass_risk)"
                   : ", coasting on after every pass (no warm_up.predict_next_pass)"
             : std::string()) +
        (narrow
             ? ", each crossing time fitted within ±" + core::num(prof.crossing_fit_half_width_kmh) + " km/h"
             : std::string()) +
        (loss_differs ? prof.adjust_from == core::Profile::AdjustFrom::band_regression
                            ? ", each adjustment's loss from the band regression"
                            : ", each adjustment's loss from the whole-trace curve"
                      : "") +
        (stable_end || require || guard || confirm || holds_only || anticipate_differs || aim_differs ||
                 narrow || loss_differs || predict_differs
             ? (prof.method == core::SettingMethod::fixed_run ? "; vs standard: the fixed-run one"
                                                              : "; vs standard: the iterative one")
             : "");
    std::printf("%s method (%s%s); failed sessions count as the limit of %d coast-downs\n",
                core::to_string(prof.method), prof.name.c_str(), note.c_str(), prof.max_coastdowns);
    std::printf(
        "  %-9s %5s %6s | coast-downs      | at 2   | cell minutes  | after warm-up | vs standard (median)\n",
        "strategy", "n", "failed");
    std::printf(
        "  %-9s %5s %6s | median  p95  max |        | median   p95  | median        | coast-downs  "
        "cell time\n",
        "", "", "");
    const bool fixed_method = prof.method == core::SettingMethod::fixed_run;
    double std_cd = fixed_method ? fixed_ref_cd : ref_cd, std_min = fixed_method ? fixed_ref_min : ref_min;
    std::vector<nlohmann::json> rows;
    for (std::size_t s : methods[m].strategies) {
      std::vector<double> cd, mins, after;
      std::map<std::string, int> reasons;
      int failed = 0, at2 = 0, verification = 0;
      for (const auto& r : results[m][s]) {
        cd.push_back(r.accepted ? r.coastdowns : std::max(r.coastdowns, prof.max_coastdowns));
        mins.push_back(r.cell_min);
        after.push_back(r.after_warm_min);
        if (r.accepted && r.coastdowns == 2) ++at2;
        if (!r.accepted) {
          ++failed;
          ++reasons[r.reason.substr(0, 90)];
          if (r.verification_failed) ++verification;
        }
      }
      const double n = static_cast<double>(results[m][s].size());
      const double mcd = quantile(cd, 0.5), mmin = quantile(mins, 0.5);
      if (s == 0) {
        std_cd = mcd;
        std_min = mmin;
        if (m == 0) {
          ref_cd = mcd;
          ref_min = mmin;
        }
        if (fixed_method && std::isnan(fixed_ref_cd)) {
          fixed_ref_cd = mcd;
          fixed_ref_min = mmin;
        }
      }
      std::printf(
          "  %-9s %5zu %6d | %6.1f %4.1f %4.0f | %5.1f%% | %6.1f %6.1f | %6.1f        | %6.2f      %6.2f\n",
          strategies[s].name.c_str(), results[m][s].size(), failed, mcd, quantile(cd, 0.95),
          cd.empty() ? NAN : *std::max_element(cd.begin(), cd.end()), 100.0 * at2 / n, mmin,
          quantile(mins, 0.95), quantile(after, 0.5), mcd / std_cd, mmin / std_min);
      for (const auto& [why, k] : reasons) std::printf("      not accepted x%d: %s\n", k, why.c_str());
      auto med = [&](double TimeSplit::*field) {
        std::vector<double> x;
        for (const auto& r : results[m][s]) x.push_back(r.split.*field / 60.0);
        return quantile(x, 0.5);
      };
      // The truth's verdict on the accepted sessions.
      int out_last = 0, out_warm = 0, out_steady = 0;
      double worst_last = 0.0, worst_warm = 0.0, worst_steady = 0.0, worst_tool = 0.0;
      for (const auto& r : results[m][s]) {
        if (!r.accepted) continue;
        if (!r.judged) {
          ++unjudged;
          continue;
        }
        out_last += r.true_last_n > tol;
        out_warm += r.true_warm_n > tol;
        out_steady += r.steady_warm_n > tol;
        worst_last = std::max(worst_last, r.true_last_n);
        worst_warm = std::max(worst_warm, r.true_warm_n);
        worst_steady = std::max(worst_steady, r.steady_warm_n);
        worst_tool = std::max(worst_tool, r.tool_worst_n);
      }
      rows.push_back({{"strategy", strategies[s].name},
                      {"n", results[m][s].size()},
                      {"failed", failed},
                      {"verification_failures", verification},
                      {"coastdowns_median", mcd},
                      {"coastdowns_p95", quantile(cd, 0.95)},
                      {"coastdowns_max", cd.empty() ? 0.0 : *std::max_element(cd.begin(), cd.end())},
                      {"share_at_2", at2 / n},
                      {"cell_min_median", mmin},
                      {"cell_min_p95", quantile(mins, 0.95)},
                      {"after_warm_up_min_median", quantile(after, 0.5)},
                      {"split_min_median",
                       {{"warm_up", med(&TimeSplit::warm_up_s)},
                        {"loss_map", med(&TimeSplit::loss_map_s)},
                        {"run_ups", med(&TimeSplit::run_up_s)},
                        {"coastdowns", med(&TimeSplit::coastdown_s)},
                        {"other", med(&TimeSplit::other_s)}}},
                      {"tool_worst_final_deviation_n", worst_tool},
                      {"truly_outside_last_coastdown_share", out_last / n},
                      {"truly_outside_fully_warm_share", out_warm / n},
                      {"steady_force_outside_fully_warm_share", out_steady / n},
                      {"true_worst_last_coastdown_n", worst_last},
                      {"true_worst_fully_warm_n", worst_warm},
                      {"true_worst_steady_fully_warm_n", worst_steady},
                      {"ratio_coastdowns_vs_standard", mcd / std_cd},
                      {"ratio_cell_time_vs_standard", mmin / std_min}});
      // The next-pass chance (docs/standards.md §3.19) against what the next coast-down did: the passes that
      // coasted on, by predicted chance. The outcome is the next coast-down's own verdict, measured on the
      // simulator's truth, not the model's; a calibrated chance has its observed share near its mean.
      {
        const std::vector<double> edges = {0.0, 0.02, 0.1, 0.2, 0.3, 1.0000001};
        nlohmann::json bins = nlohmann::json::array();
        std::size_t total = 0, failed_next = 0;
        double predicted = 0.0;
        for (std::size_t b = 0; b + 1 < edges.size(); ++b) {
          std::size_t k = 0, f = 0;
          double sum = 0.0;
          for (const auto& r : results[m][s])
            for (const auto& [chance, fail] : r.next_pass)
              if (chance >= edges[b] && chance < edges[b + 1]) {
                ++k;
                f += fail;
                sum += chance;
              }
          total += k;
          failed_next += f;
          predicted += sum;
          bins.push_back({{"from", edges[b]},
                          {"to", std::min(1.0, edges[b + 1])},
                          {"passes", k},
                          {"mean_predicted", k ? sum / k : 0.0},
                          {"observed_failure_share", k ? static_cast<double>(f) / k : 0.0}});
        }
        if (total > 0)
          rows.back()["next_pass_calibration"] = {{"passes", total},
                                                  {"predicted_failures", predicted},
                                                  {"observed_failures", failed_next},
                                                  {"bins", bins}};
      }
      report["methods"][methods[m].key][strategies[s].name] = rows.back();
    }
    std::printf("  cell time split, median minutes: warm-up | loss map | run-ups | coast-downs | other\n");
    for (const auto& row : rows) {
      const auto& t = row["split_min_median"];
      std::printf("  %-9s %25.1f %10.1f %9.1f %13.1f %7.1f\n", row["strategy"].get<std::string>().c_str(),
                  t["warm_up"].get<double>(), t["loss_map"].get<double>(), t["run_ups"].get<double>(),
                  t["coastdowns"].get<double>(), t["other"].get<double>());
    }
    std::printf(
        "  judged by the truth (accepted sessions; share of all sessions truly outside +-%g N, worst N):\n"
        "  %-9s | tool's worst | at the last coast-down | fully warm        | steady force, fully warm\n",
        tol, "strategy");
    for (const auto& row : rows)
      std::printf("  %-9s | %8.2f     | %6.2f %%  worst %6.2f | %5.2f %% w %6.2f | %5.2f %%  worst %6.2f\n",
                  row["strategy"].get<std::string>().c_str(),
                  row["tool_worst_final_deviation_n"].get<double>(),
                  100 * row["truly_outside_last_coastdown_share"].get<double>(),
                  row["true_worst_last_coastdown_n"].get<double>(),
                  100 * row["truly_outside_fully_warm_share"].get<double>(),
                  row["true_worst_fully_warm_n"].get<double>(),
                  100 * row["steady_force_outside_fully_warm_share"].get<double>(),
                  row["true_worst_steady_fully_warm_n"].get<double>());
    bool calibration_header = false;
    for (const auto& row : rows) {
      if (!row.contains("next_pass_calibration")) continue;
      if (!calibration_header) {
        std::printf(
            "  next-pass chance (docs/standards.md §3.19) against the next coast-down's verdict, passes that "
            "coasted on:\n"
            "  %-9s | passes | failures predicted / seen | by chance: passes, mean chance -> share that "
            "failed\n",
            "strategy");
        calibration_header = true;
      }
      const auto& c = row["next_pass_calibration"];
      std::printf("  %-9s | %6zu | %8.1f / %-6zu         |", row["strategy"].get<std::string>().c_str(),
                  c["passes"].get<std::size_t>(), c["predicted_failures"].get<double>(),
                  c["observed_failures"].get<std::size_t>());
      for (const auto& b : c["bins"])
        if (b["passes"].get<std::size_t>() > 0)
          std::printf(" [%g-%g) %zu, %.3f -> %.3f;", b["from"].get<double>(), b["to"].get<double>(),
                      b["passes"].get<std::size_t>(), b["mean_predicted"].get<double>(),
                      b["observed_failure_share"].get<double>());
      std::printf("\n");
    }
    std::printf("\n");
  }
  if (unjudged > 0) {
    std::printf("%d accepted session(s) could not be judged by the truth (a band that never ends)\n\n",
                unjudged);
    sane = false;
  }

  // Goals (issue 17's list), beside the measured figures.
  const bool harsh = std::string(preset.name) == "harsh";
  // A --quick run is a smoke test: too few sessions to judge the development goals, so they are shown as a
  // development view and never as a verdict ("NOT met") to whoever runs it.
  const bool quick = o.quick;
  auto yes = [quick](bool b) {
    if (quick)
      return b ? "met in this quick run (development view)" : "not met in this quick run (development view)";
    return b ? "met" : "NOT met";
  };
  const auto& mr = report["methods"];
  if (quick)
    std::printf(
        "Development goals, a development view (--quick runs too few sessions to judge them; run loadtrim "
        "bench without --quick for the verdicts):\n");
  std::printf(
      "%s (truths: %s%s):\n", quick ? "Development goals" : "Goals", truths_name.c_str(),
      custom ? "; the goals are stated for the unchanged presets, judged here against the preset's limits"
             : "");
  {
    const double limit = harsh ? 0.01 : 0.001;
    // Judged over the methods and first-setting strategies as shipped (the iterative and fixed-run profiles,
    // the four strategies); the rows that turn a lever off or try a lab policy are shown beside it.
    auto is_shipped = [&](const std::string& method, const std::string& name) {
      return (method == "iterative" || method == "fixed-run") &&
             std::any_of(strategies.begin(), strategies.end(),
                         [&](const Strategy& st) { return st.shipped && st.name == name; });
    };
    double worst = 0.0, worst_n = 0.0, any = 0.0;
    std::string where, any_where;
    for (const auto& [method, strat] : mr.items())
      for (const auto& [name, row] : strat.items()) {
        const double share = row["truly_outside_last_coastdown_share"];
        if (share >= any) {
          any = share;
          any_where = method + " " + name;
        }
        if (!is_shipped(method, name)) continue;
        if (share >= worst) {
          worst = share;
          where = method + " " + name;
        }
        worst_n = std::max(worst_n, row["true_worst_last_coastdown_n"].get<double>());
      }
    std::printf(
        "  accepted but truly outside +-10 N at the last coast-down's state <= %.1f %% of sessions, every "
        "strategy and method as shipped\n    measured: at most %.2f %% (%s), worst %.2f N   %s\n"
        "    (every row, with the levers turned off and the lab-policy rows: at most %.2f %%, %s)\n",
        100 * limit, 100 * worst, where.c_str(), worst_n, yes(worst <= limit), 100 * any, any_where.c_str());
    report["goals"]["truly_outside_last_coastdown"] = {
        {"limit_share", limit},  {"worst_share", worst},         {"where", where},
        {"met", worst <= limit}, {"every_row_worst_share", any}, {"every_row_where", any_where}};
    double warm = 0.0;
    for (const auto& key : {"iterative", "fixed-run"})
      for (const auto& [name, row] : mr[key].items())
        if (is_shipped(key, name)) warm = std::max(warm, row["truly_outside_fully_warm_share"].get<double>());
    const double lm_min = mr["iterative"]["loss-map"]["cell_min_median"];
    std::printf(
        "  fully warm: <= 1 %% with harsh when the profile requires a stable vehicle (drift rule "
        "\"require\", "
        "iterative, loss map; share of all sessions and of the accepted ones; with \"warn\": up to %.2f %% "
        "of "
        "all sessions truly outside fully warm, median cell time %.1f min)\n",
        100 * warm, lm_min);
    // Two profiles that require a stable vehicle: the fixed 20-minute warm-up (which then coasts on at the
    // accepted setting until the drift is below the threshold, within the coast-down limit) and one whose
    // warm-up waits for the trend. The verdict is the waiting one's: a lab that requires a stable vehicle
    // gives it the time; the fixed one is shown beside it. Both shares must hold: a profile that accepts few
    // sessions can show a small share of all of them while most of what it accepts is outside.
    bool wait_met = false;
    for (const char* key : {"iterative-require", "iterative-wait-for-stable-require",
                            "iterative-wait-for-stable-require-no-fully-warm-check"}) {
      const auto& rq = mr[key]["loss-map"];
      const double n = rq["n"].get<double>(), failed = rq["failed"].get<double>();
      const double share = rq["truly_outside_fully_warm_share"];
      const double of_accepted = n > failed ? share * n / (n - failed) : 0.0;
      const bool met = n > failed && share <= 0.01 && of_accepted <= 0.01;
      // The verdict is the waiting row's, which judges the settled setting fully warm
      // (warm_up.check_fully_warm, set in the shipped profiles, acts with "require"); the row without that
      // check is shown beside it, as the lever's contribution.
      const bool waits = std::string(key) == "iterative-wait-for-stable-require";
      const bool unchecked = std::string(key).ends_with("no-fully-warm-check");
      if (waits) wait_met = met;
      std::printf(
          "    %-33s %.2f %% of all, %.2f %% of accepted (worst %.2f N; %.1f %% not accepted); median cell "
          "time %.1f min (warm-up %.1f)   %s\n",
          waits       ? "warm-up waits for stable:"
          : unchecked ? "the same, no fully-warm check:"
                      : "fixed 20-minute warm-up:",
          100 * share, 100 * of_accepted, rq["true_worst_fully_warm_n"].get<double>(), 100 * failed / n,
          rq["cell_min_median"].get<double>(), rq["split_min_median"]["warm_up"].get<double>(),
          !harsh  ? "(goal for harsh only)"
          : waits ? yes(met)
                  : "(shown beside it)");
      report["goals"]["truly_outside_fully_warm_require"][key] = {{"share", share},
                                                                  {"share_of_accepted", of_accepted},
                                                                  {"not_accepted_share", failed / n},
                                                                  {"cell_min_median", rq["cell_min_median"]},
                                                                  {"met", met}};
    }
    report["goals"]["truly_outside_fully_warm_require"]["warn_worst_share"] = warm;
    report["goals"]["truly_outside_fully_warm_require"]["met"] = wait_met;
  }
  {
    const auto& lm = mr["iterative"]["loss-map"];
    const double med = lm["coastdowns_median"], p95 = lm["coastdowns_p95"];
    std::printf(
        "  iterative, the default first setting (loss map): median 2 and p95 <= 3 coast-downs   measured "
        "%.1f "
        "and %.1f   %s\n",
        med, p95, yes(med <= 2.0 && p95 <= 3.0));
    // The next-pass prediction's rows beside it (warm_up.predict_next_pass, docs/standards.md §3.19).
    for (const char* key : {"iterative-no-next-pass-prediction", "iterative-next-pass-risk-0.5"})
      if (mr.contains(key) && mr[key].contains("loss-map")) {
        const auto& r = mr[key]["loss-map"];
        std::printf("    %s: median %.1f, p95 %.1f, %.1f %% at 2\n", key,
                    r["coastdowns_median"].get<double>(), r["coastdowns_p95"].get<double>(),
                    100 * r["share_at_2"].get<double>());
      }
    const double h = mr["iterative"]["history"]["share_at_2"];
    std::printf(
        "  history: >= 95 %% at 2 coast-downs with typical (day-to-day variation on)   measured %.1f %%   "
        "%s\n",
        100 * h, harsh ? "(goal for typical only)" : yes(h >= 0.95));
    int ver = 0;
    std::size_t nf = 0;
    for (const auto& [name, row] : mr["fixed-run"].items()) {
      ver += row["verification_failures"].get<int>();
      nf += row["n"].get<std::size_t>();
    }
    const double ver_share = nf ? static_cast<double>(ver) / nf : 0.0;
    std::printf("  fixed-run verification failures <= 1 %% with harsh   measured %.2f %% (%d of %zu)   %s\n",
                100 * ver_share, ver, nf, harsh ? yes(ver_share <= 0.01) : "(goal for harsh only)");
    const double after = lm["after_warm_up_min_median"].get<double>() /
                         mr["iterative"]["standard"]["after_warm_up_min_median"].get<double>();
    const double total = lm["ratio_cell_time_vs_standard"];
    std::printf(
        "  cell time after the warm-up >= 30 %% less than the standard's default first setting (iterative, "
        "loss "
        "map)   measured %.1f %% less (negative: more)   %s\n",
        100 * (1 - after), yes(after <= 0.70));
    // The stability-ended warm-up's total against the iterative standard's (fixed 20-minute warm-up), and
    // what the truth says of the settings it accepts; with the drift rule "warn" and "require".
    std::printf(
        "  total cell time >= 30 %% less where the profile allows a stability-ended warm-up (iterative, loss "
        "map; with the fixed warm-up: %.1f %% less, truly outside fully warm %.2f %%)\n",
        100 * (1 - total), 100 * lm["truly_outside_fully_warm_share"].get<double>());
    bool stable_met = false;
    for (const char* key : {"iterative-stable-warm-up", "iterative-stable-warm-up-require"}) {
      const auto& sw = mr[key]["loss-map"];
      const double st_total = sw["ratio_cell_time_vs_standard"];
      const double not_accepted = sw["failed"].get<double>() / sw["n"].get<double>();
      // Met only when the time is saved without giving up acceptance: the sessions it accepts are truly
      // within tolerance at the last coast-down as often as the goal above asks of every method.
      const double out_last = sw["truly_outside_last_coastdown_share"];
      const bool met = st_total <= 0.70 && out_last <= (harsh ? 0.01 : 0.001);
      stable_met = stable_met || met;
      std::printf(
          "    drift rule %-7s measured %.1f %% less (negative: more); warm-up median %.1f min; %.1f %% not "
          "accepted; truly outside at the last coast-down %.2f %%, fully warm %.2f %%   %s\n",
          std::string(key).ends_with("require") ? "require" : "warn", 100 * (1 - st_total),
          sw["split_min_median"]["warm_up"].get<double>(), 100 * not_accepted, 100 * out_last,
          100 * sw["truly_outside_fully_warm_share"].get<double>(), yes(met));
      report["goals"]["total_30pct_less_stability_ended_warm_up"][key] = {{"ratio", st_total}, {"met", met}};
    }
    (void)stable_met;
    int unstated = 0;
    for (std::size_t m = 0; m < methods.size(); ++m)
      for (std::size_t s : methods[m].strategies)
        for (const auto& r : results[m][s]) unstated += !r.accepted && r.reason.empty();
    std::printf("  every non-accepted session has a reason: %d without   %s\n", unstated, yes(unstated == 0));
    report["goals"]["loss_map_median_2_p95_3"] = med <= 2.0 && p95 <= 3.0;
    report["goals"]["history_95pct_at_2"] = h >= 0.95;
    report["goals"]["fixed_run_verification_failures_share"] = ver_share;
    report["goals"]["after_warm_up_30pct_less"] = after <= 0.70;
    report["goals"]["unstated_reasons"] = unstated;
  }

  // The sample-rate lever: the same vehicles and truths (the encoder noise's sd per sample unchanged) at each
  // rate, side by side: iterative with the standard's first setting and the loss map, iterative with the loss
  // map and the guard-band decision rule (its guard band narrows as the noise falls), fixed-run with the loss
  // map.
  if (!o.compare_rates_hz.empty()) {
    const auto lever0 = Clock::now();
    struct LeverRow {
      const char* method;
      const core::Profile* profile;
      std::size_t strategy;
    };
    const std::vector<LeverRow> lever = {{"iterative", &iterative, 0},
                                         {"iterative", &iterative, 2},
                                         {"guard-band", &iterative_guard, 2},
                                         {"fixed-run", &fixed, 2}};
    const std::size_t nr = o.compare_rates_hz.size();
    int lever_unjudged = 0;
    std::vector<Cells> lever_cells;
    for (double rate : o.compare_rates_hz) lever_cells.push_back(cells_at(rate));
    // lr[rate][row][vehicle]
    std::vector<std::vector<std::vector<Result>>> lr(
        nr, std::vector<std::vector<Result>>(lever.size(), std::vector<Result>(fleet_v.size())));
    std::atomic<std::size_t> job{0};
    const std::size_t jobs_n = nr * fleet_v.size();
    auto lever_worker = [&] {
      for (;;) {
        const std::size_t k = job++;
        if (k >= jobs_n) return;
        const std::size_t ri = k / fleet_v.size(), i = k % fleet_v.size();
        for (std::size_t row = 0; row < lever.size(); ++row)
          lr[ri][row][i] = run_session(fleet_v[i], *lever[row].profile, strategies[lever[row].strategy],
                                       lever_cells[ri], o.compare_rates_hz[ri]);
      }
    };
    std::vector<std::thread> lp;
    for (int j = 0; j < std::max(1, o.jobs); ++j) lp.emplace_back(lever_worker);
    for (auto& t : lp) t.join();
    const double lever_wall_s = std::chrono::duration<double>(Clock::now() - lever0).count();
    std::printf(
        "Sample-rate lever (truths: %s; the same %zu vehicles, truths and seeds at every rate; encoder noise "
        "%g km/h sd per sample):\n"
        "  rate Hz | method    first     | failed | coast-downs median p95 | at 2    | truly outside: last "
        "coast-down (worst) | fully warm | steady | cell min | after warm-up | run-ups | coast-downs | "
        "verification failures\n",
        truths_name.c_str(), fleet_v.size(), preset.speed_noise_kmh);
    for (std::size_t ri = 0; ri < nr; ++ri)
      for (std::size_t row = 0; row < lever.size(); ++row) {
        const auto& rs = lr[ri][row];
        const core::Profile& prof = *lever[row].profile;
        std::vector<double> cd, mins, after, runups, coasts;
        int failed = 0, at2 = 0, ver = 0, out_last = 0, out_warm = 0, out_steady = 0;
        double worst_last = 0.0;
        for (const auto& r : rs) {
          cd.push_back(r.accepted ? r.coastdowns : std::max(r.coastdowns, prof.max_coastdowns));
          mins.push_back(r.cell_min);
          after.push_back(r.after_warm_min);
          runups.push_back(r.split.run_up_s / 60.0);
          coasts.push_back(r.split.coastdown_s / 60.0);
          failed += !r.accepted;
          at2 += r.accepted && r.coastdowns == 2;
          ver += r.verification_failed;
          if (r.accepted && !r.judged) ++lever_unjudged;
          if (!r.accepted || !r.judged) continue;
          out_last += r.true_last_n > prof.tolerance_n;
          out_warm += r.true_warm_n > prof.tolerance_n;
          out_steady += r.steady_warm_n > prof.tolerance_n;
          worst_last = std::max(worst_last, r.true_last_n);
        }
        const double n = std::max<std::size_t>(1, rs.size());
        const std::string& sname = strategies[lever[row].strategy].name;
        std::printf(
            "  %7g | %-9s %-9s | %6d | %6.1f %4.1f            | %5.1f %% | %5.2f %% (%5.1f N)               "
            "  | %6.2f %%   | %5.1f %% | %8.1f | %13.1f | %7.1f | %11.1f | %d\n",
            o.compare_rates_hz[ri], lever[row].method, sname.c_str(), failed, quantile(cd, 0.5),
            quantile(cd, 0.95), 100.0 * at2 / n, 100.0 * out_last / n, worst_last, 100.0 * out_warm / n,
            100.0 * out_steady / n, quantile(mins, 0.5), quantile(after, 0.5), quantile(runups, 0.5),
            quantile(coasts, 0.5), ver);
        char key[32];
        std::snprintf(key, sizeof key, "%g", o.compare_rates_hz[ri]);
        report["rate_lever"][key][lever[row].method][sname] = {
            {"n", rs.size()},
            {"failed", failed},
            {"coastdowns_median", quantile(cd, 0.5)},
            {"coastdowns_p95", quantile(cd, 0.95)},
            {"share_at_2", at2 / n},
            {"truly_outside_last_coastdown_share", out_last / n},
            {"true_worst_last_coastdown_n", worst_last},
            {"truly_outside_fully_warm_share", out_warm / n},
            {"steady_force_outside_fully_warm_share", out_steady / n},
            {"cell_min_median", quantile(mins, 0.5)},
            {"after_warm_up_min_median", quantile(after, 0.5)},
            {"split_min_median", {{"run_ups", quantile(runups, 0.5)}, {"coastdowns", quantile(coasts, 0.5)}}},
            {"verification_failures", ver}};
      }
    std::printf("  lever wall time: %.1f s\n\n", lever_wall_s);
    report["rate_lever_wall_s"] = lever_wall_s;
    if (lever_unjudged > 0) {
      std::printf(
          "%d accepted lever session(s) could not be judged by the truth (a band that never ends)\n\n",
          lever_unjudged);
      sane = false;
    }
  }

  // Compute figures, each against a baseline measured here.
  {
    // A 100 Hz coast-down trace of a mid-size vehicle (closed-form speeds plus noise).
    physics::Truth t;
    physics::RollerModel model(t);
    model.set_inertia_kg(1521.0);
    model.set_coefficients({40.0, 0.2, 0.025});
    const physics::Trace tr = physics::record_coastdown(model, 142.0, 12.0, 100.0);
    const std::vector<double>& speeds = iterative.reference_speeds_kmh;
    const std::size_t n = tr.time_s.size();
    // Interleaved rounds, the two alternating which goes first, each figure the median of its rounds: one
    // timing of each, back to back, swung the ratio from 0.97 to 2.34 between runs of the same binary (the
    // scan's own rate moved 2.5x), which says more about the host's moment than about the code.
    const int rounds = o.quick ? 5 : 11;
    const int reps = o.quick ? 40 : 200;  // per round
    double sink = 0.0;
    // The shipped profile's band and crossing window (bands.crossing_fit_half_width_kmh: 5 km/h in the
    // shipped WLTP profiles, twice the default's samples per crossing fit).
    core::BandOptions shipped;
    shipped.fit_half_width_kmh = iterative.crossing_fit_half_width_kmh;
    auto time_bands = [&] {
      const auto t0 = Clock::now();
      for (int k = 0; k < reps; ++k) {
        const auto b = core::analyse_bands({tr.time_s, tr.speed_kmh}, speeds, iterative.band_half_width_kmh,
                                           1542.75, shipped);
        sink += b[3].force_n;
      }
      return std::chrono::duration<double>(Clock::now() - t0).count();
    };
    // Baseline: one plain pass over the samples per band edge (the "first sample below" method, no fit).
    auto time_scan = [&] {
      const auto t0 = Clock::now();
      for (int k = 0; k < reps; ++k)
        for (double v : speeds)
          for (double level : {v + iterative.band_half_width_kmh, v - iterative.band_half_width_kmh}) {
            std::size_t i = 0;
            while (i < n && tr.speed_kmh[i] >= level) ++i;
            sink += i < n ? tr.time_s[i] : 0.0;
          }
      return std::chrono::duration<double>(Clock::now() - t0).count();
    };
    std::vector<double> band_rates, scan_rates, ratios;
    for (int r = 0; r < rounds; ++r) {
      double band_s = 0.0, naive_s = 0.0;
      if (r % 2 == 0) {
        band_s = time_bands();
        naive_s = time_scan();
      } else {
        naive_s = time_scan();
        band_s = time_bands();
      }
      band_rates.push_back(n * reps / band_s);
      scan_rates.push_back(n * reps / naive_s);
      ratios.push_back(naive_s / band_s);
    }
    const double sps = quantile(band_rates, 0.5), naive_sps = quantile(scan_rates, 0.5);
    const double ratio_lo = *std::min_element(ratios.begin(), ratios.end()),
                 ratio_hi = *std::max_element(ratios.begin(), ratios.end());
    // Simulator speed: simulated seconds per wall second, 100 Hz stream, one core.
    sim::SimController sim(t, {});
    sim.set_inertia(1521.0);
    sim.stream(100.0);
    sim.command(sim::cmd::HoldSpeed{80.0});
    std::vector<controller::Sample> smp;
    std::vector<sim::FaultEvent> ev;
    const auto t0 = Clock::now();
    const double sim_span = o.quick ? 2000.0 : 20000.0;
    for (double s = 0; s < sim_span; s += 10.0) {
      smp.clear();
      sim.advance_typed(10.0, smp, ev);
    }
    const double sim_wall = std::chrono::duration<double>(Clock::now() - t0).count();
    std::printf("Compute (one core each):\n");
    std::printf(
        "  trace analysis: %.1f million samples/s (%zu-sample trace, 12 bands with local fits); baseline "
        "first-crossing scan %.1f million/s; ratio %.2f (medians of %d interleaved rounds; ratio per round "
        "%.2f to %.2f)\n    goal >= 10 million/s and at least as fast as the scan: %s\n",
        sps / 1e6, n, naive_sps / 1e6, sps / naive_sps, rounds, ratio_lo, ratio_hi,
        yes(sps >= 1e7 && sps >= naive_sps));
    std::printf(
        "  simulator: %.0f x real time in-process (100 Hz stream, physics and samples; baseline real time = "
        "1x)   goal >= 1000x: %s\n",
        sim_span / sim_wall, yes(sim_span / sim_wall >= 1000.0));
    std::printf("  fleet wall time: %.1f s for %zu sessions\n\n", fleet_wall_s, sessions_run);
    report["compute"] = {{"trace_analysis_samples_per_s", sps},
                         {"baseline_scan_samples_per_s", naive_sps},
                         {"trace_vs_scan_ratio", sps / naive_sps},
                         {"trace_vs_scan_rounds", rounds},
                         {"trace_vs_scan_ratio_per_round", {{"min", ratio_lo}, {"max", ratio_hi}}},
                         {"simulator_x_real_time", sim_span / sim_wall},
                         {"fleet_wall_s", fleet_wall_s},
                         {"sink", sink}};
    sane = sane && sps > 0 && sim_span / sim_wall > 1.0;
  }

  // Estimator quality: the same coast-down repeated with fresh noise.
  {
    const int reps = o.quick ? 20 : o.estimator_repeats;
    std::printf(
        "Estimator spread over %d repeats of the same coast-down (100 Hz, 0.05 km/h speed noise), SD in N\n"
        "(the whole-trace fit uses at most 3000 of the samples; its expectation is for the samples it "
        "used):\n",
        reps);
    const double speeds_show[] = {20, 50, 80, 110, 130};
    const core::RoadLoad vehicles[] = {{100, 0.5, 0.03}, {180, 1.2, 0.035}, {70, -0.3, 0.022}};
    nlohmann::json est = nlohmann::json::array();
    for (const auto& load : vehicles) {
      const double mass = 1542.75;
      physics::Truth t;
      t.vehicle.tyre_loss_flat_n = t.vehicle.tyre_loss_flat_n_per_kmh = t.vehicle.drivetrain_loss_n = 0.0;
      t.vehicle.drivetrain_loss_n_per_kmh2 = t.vehicle.brake_drag_n = t.vehicle.rotating_mass_on_rollers_kg =
          0.0;
      t.dyno.parasitic_compensation_error = t.dyno.inertia_simulation_error = 0.0;
      std::map<double, std::vector<double>> band, whole;
      double whole_rate_hz = 100.0;  // the whole-trace fit decimates the trace; its effective sample rate
      for (int k = 0; k < reps; ++k) {
        t.noise_seed = 7 + static_cast<std::uint64_t>(k);
        physics::RollerModel m(t);
        m.set_inertia_kg(mass);
        m.set_coefficients(load);
        const physics::Trace tr = physics::record_coastdown(m, 142.0, 12.0, 100.0);
        const auto e = core::evaluate_coastdown({tr.time_s, tr.speed_kmh}, iterative, load, mass);
        if (!e.usable) continue;
        for (const auto& b : e.bands)
          if (b.ok()) band[b.reference_speed_kmh].push_back(b.force_n);
        if (e.whole_trace.ok) {
          for (double v : speeds_show) whole[v].push_back(e.whole_trace.coefficients.force_n(v));
          const std::size_t in_range = static_cast<std::size_t>(std::count_if(
              tr.speed_kmh.begin(), tr.speed_kmh.end(), [](double v) { return v <= 137.5 && v >= 15.0; }));
          whole_rate_hz = 100.0 * e.whole_trace.points_used / std::max<std::size_t>(1, in_range);
        }
      }
      auto sd = [](const std::vector<double>& x) {
        if (x.size() < 2) return std::nan("");
        const double mu = std::accumulate(x.begin(), x.end(), 0.0) / x.size();
        double s2 = 0;
        for (double y : x) s2 += (y - mu) * (y - mu);
        return std::sqrt(s2 / (x.size() - 1));
      };
      const std::vector<double> sv(std::begin(speeds_show), std::end(speeds_show));
      const auto exp_whole = expected_whole_sd(load, mass, 137.5, 15.0, whole_rate_hz, 0.05, sv);
      std::printf("  target (%g, %g, %g):\n    %-22s", load.f0_n, load.f1_n_per_kmh, load.f2_n_per_kmh2,
                  "speed km/h");
      for (double v : speeds_show) std::printf(" %7.0f", v);
      std::printf("\n    %-22s", "band method measured");
      for (double v : speeds_show) std::printf(" %7.3f", sd(band[v]));
      std::printf("\n    %-22s", "band method expected");
      for (double v : speeds_show)
        std::printf(" %7.3f",
                    expected_band_sd(load, mass, v, 5.0, 0.05, 100.0, iterative.crossing_fit_half_width_kmh));
      std::printf("\n    %-22s", "whole trace measured");
      for (double v : speeds_show) std::printf(" %7.3f", sd(whole[v]));
      std::printf("\n    %-22s", "whole trace expected");
      for (double e : exp_whole) std::printf(" %7.3f", e);
      std::printf("\n");
      nlohmann::json row = {{"target", {load.f0_n, load.f1_n_per_kmh, load.f2_n_per_kmh2}}};
      for (std::size_t j = 0; j < sv.size(); ++j)
        row["speeds"].push_back({{"speed_kmh", sv[j]},
                                 {"band_sd", sd(band[sv[j]])},
                                 {"band_expected", expected_band_sd(load, mass, sv[j], 5.0, 0.05, 100.0,
                                                                    iterative.crossing_fit_half_width_kmh)},
                                 {"whole_sd", sd(whole[sv[j]])},
                                 {"whole_expected", exp_whole[j]}});
      est.push_back(row);
    }
    report["estimators"] = est;
  }
  if (!o.json_out.empty()) std::ofstream(o.json_out) << report.dump(2) << "\n";
  std::printf("\nbench %s\n", sane ? "completed" : "completed with figures out of range");
  return sane ? kAccepted : kNotAccepted;
}

}  // namespace

void register_bench(CLI::App& app, Runner& run) {
  auto o = std::make_shared<BenchOptions>();
  o->epa = data_dir() + "/samples/data/epa_test_car_roadload_MY2016_2019.csv";
  auto* sub = app.add_subcommand(
      "bench", "fleet benchmark: coast-downs and cell time to acceptance per first-setting strategy");
  sub->add_option("--epa", o->epa, "CSV with the EPA extract's columns")->capture_default_str();
  sub->add_option("--vehicles", o->vehicles, "vehicles to draw (0 = every plausible row)")
      ->check(CLI::Range(0, 1000000));
  sub->add_flag("--quick", o->quick, "a small fleet and short compute runs (a smoke test, under 30 s)");
  sub->add_option("--seed", o->seed, "seed for vehicles and truths")->capture_default_str();
  sub->add_option("--jobs", o->jobs, "worker threads")->check(CLI::Range(1, 64))->capture_default_str();
  sub->add_option("--rate-hz", o->rate_hz, "sample rate of the sessions (GTR 15 §3.1: at least 10 Hz)")
      ->check(config::number_in(10.0, 1000.0, "Hz"))
      ->capture_default_str();
  sub->add_option("--json-out", o->json_out, "also write the figures as JSON here");
  sub->add_option(
         "--truths", o->truths,
         "the truths' spreads: typical or harsh (docs/performance.md, \"Truth presets\"); the options "
         "below change single spreads of the preset")
      ->check(CLI::IsMember({"typical", "harsh"}))
      ->capture_default_str();
  // Each spread: a value, its range, and where it goes. Kept in a table so the callback applies exactly the
  // options given.
  struct Spread {
    const char* name;
    const char* help;
    double lo, hi;
    const char* unit;
    std::optional<double> TruthOverrides::*field;
  };
  static const Spread spreads[] = {
      {"--hold-bias-sd-n", "speed-hold bias between vehicles, sd, N (0 to 50)", 0.0, 50.0, "N",
       &TruthOverrides::hold_bias_sd_n},
      {"--inertia-error-sd-pct", "inertia simulation error, sd, % (0 to 5)", 0.0, 5.0, "%",
       &TruthOverrides::inertia_error_sd_pct},
      {"--compensation-error-sd-pct", "parasitic compensation error, sd, % (0 to 30)", 0.0, 30.0, "%",
       &TruthOverrides::compensation_error_sd_pct},
      {"--speed-noise-kmh", "encoder noise, sd, km/h, at the sample rate (0 to 1)", 0.0, 1.0, "km/h",
       &TruthOverrides::speed_noise_kmh},
      {"--warm-up-tau-min-s", "drivetrain warm-up time constant, lowest, s (60 to 7200)", 60.0, 7200.0, "s",
       &TruthOverrides::warm_up_tau_min_s},
      {"--warm-up-tau-max-s", "drivetrain warm-up time constant, highest, s (60 to 7200)", 60.0, 7200.0, "s",
       &TruthOverrides::warm_up_tau_max_s},
      {"--cold-excess-min", "spin loss excess when cold, lowest, fraction (0 to 2)", 0.0, 2.0, "",
       &TruthOverrides::cold_excess_min},
      {"--cold-excess-max", "spin loss excess when cold, highest, fraction (0 to 2)", 0.0, 2.0, "",
       &TruthOverrides::cold_excess_max},
      {"--day-loss-sd-pct", "day to day: tyre and spin loss change, sd, % (0 to 20)", 0.0, 20.0, "%",
       &TruthOverrides::day_loss_sd_pct},
      {"--day-hold-bias-sd-n", "day to day: hold bias change, sd, N (0 to 20)", 0.0, 20.0, "N",
       &TruthOverrides::day_hold_bias_sd_n},
      {"--loss-mass-correlation", "correlation of log loss with log test mass (0 to 0.9; EPA data 0.43)", 0.0,
       0.9, "", &TruthOverrides::loss_mass_correlation},
      {"--hold-bias-speed-sd-n",
       "steady-versus-coasting difference, speed part b2*v^2, sd at 130 km/h, N (0 to 50)", 0.0, 50.0, "N",
       &TruthOverrides::hold_bias_speed_sd_n},
      {"--load-cell-gain-sd-pct", "load-cell gain error, sd, % (0 to 5)", 0.0, 5.0, "%",
       &TruthOverrides::load_cell_gain_sd_pct},
      {"--load-cell-offset-sd-n", "load-cell offset, sd, N (0 to 50)", 0.0, 50.0, "N",
       &TruthOverrides::load_cell_offset_sd_n},
  };
  auto values = std::make_shared<std::vector<double>>(std::size(spreads), 0.0);
  std::vector<CLI::Option*> opts;
  for (std::size_t k = 0; k < std::size(spreads); ++k)
    opts.push_back(sub->add_option(spreads[k].name, (*values)[k], spreads[k].help)
                       ->check(config::number_in(spreads[k].lo, spreads[k].hi, spreads[k].unit)));
  sub->add_option(
         "--compare-rates-hz", o->compare_rates_hz,
         "the sample-rate lever: also run iterative (standard, loss map) and fixed-run (loss map) "
         "sessions of the same vehicles at each of these rates, side by side (10 to 1000 Hz, at most 4)")
      ->delimiter(',')
      ->expected(1, 4)
      ->check(config::number_in(10.0, 1000.0, "Hz"));
  sub->callback([o, values, opts, &run] {
    for (std::size_t k = 0; k < opts.size(); ++k)
      if (opts[k]->count() > 0) o->overrides.*(spreads[k].field) = (*values)[k];
    run = [o] { return run_bench(*o); };
  });
}

}  // namespace loadtrim::app
