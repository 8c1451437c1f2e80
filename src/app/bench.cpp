// `loadtrim bench`: complete setting sessions — the same session code the operator runs — against the
// simulated controller for a fleet of real road-load targets, each with a randomised truth drawn from a seed,
// so every first-setting strategy meets exactly the same vehicles and truths. The controller is the
// in-process direct adapter (dyno-adapters/inprocess/direct_controller.hpp): same interface, same simulator
// core, no text codec. Also: the compute figures (trace analysis, simulator speed) against baselines measured
// in the same run, and the estimators' spread over repeated coast-downs beside the spread the noise model
// predicts (docs/performance.md).
#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <map>
#include <mutex>
#include <numeric>
#include <random>
#include <thread>

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
#include "session/session.hpp"

namespace loadtrim::app {

namespace {

using Clock = std::chrono::steady_clock;

struct BenchOptions {
  std::string epa;
  int vehicles = 0;  // 0 = every plausible row
  bool quick = false;
  unsigned seed = 2026;
  int jobs = 2;
  double rate_hz = 10.0;
  std::string json_out;
  int estimator_repeats = 200;
};

struct Strategy {
  std::string name;
  core::FirstSetting first;
  bool history = false;  // a second session of the same vehicle after a first (loss-map) one
};

struct Result {
  bool accepted = false;
  int coastdowns = 0;
  double cell_min = 0.0;
  double after_warm_min = 0.0;  // cell time from the warm-up's end
  double worst_n = 0.0;
  std::string reason;
};

double quantile(std::vector<double> x, double q) {
  if (x.empty()) return NAN;
  std::sort(x.begin(), x.end());
  const double pos = q * (x.size() - 1);
  const std::size_t i = static_cast<std::size_t>(pos);
  return i + 1 < x.size() ? x[i] + (pos - i) * (x[i + 1] - x[i]) : x[i];
}

// Observer that notes the warm-up's end (controller time) and nothing else.
class WarmEnd : public session::Observer {
 public:
  bool on_event(const session::Event& e) override {
    if (std::holds_alternative<session::ev::WarmUpEnded>(e.payload) && !seen) {
      seen = true;
      cell_time_s = e.stamp && e.stamp->cell_time_s ? *e.stamp->cell_time_s : 0.0;
    }
    return true;
  }
  bool seen = false;
  double cell_time_s = 0.0;
};

session::Summary run_one(const session::Inputs& in, const physics::Truth& truth, session::Options opt,
                         double* warm_end_s) {
  inprocess::DirectController c(truth, in.cell.timeouts,
                                {in.cell.max_speed_kmh, in.cell.max_force_n, 1e9, false});
  WarmEnd w;
  opt.whole_trace_estimator =
      false;  // the band method decides; the whole-trace fit is measured separately below
  session::Session s(in, opt, c, {&w});
  auto sum = s.run();
  if (warm_end_s) *warm_end_s = w.cell_time_s;
  return sum;
}

struct Vehicle {
  core::VehicleTarget target;
  physics::Truth truth;
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
         axles + "\"\n";
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

int run_bench(BenchOptions o) {
  const auto wall0 = Clock::now();
  if (o.quick && o.vehicles == 0) o.vehicles = 16;
  const core::Profile iterative =
      config::load_profile(config::profile_path(data_dir() + "/config/profiles", "wltp-iterative"));
  const core::Profile fixed =
      config::load_profile(config::profile_path(data_dir() + "/config/profiles", "wltp-fixed-run"));
  const config::EpaFile f = config::read_epa_csv(o.epa);
  // Fleet model from the same file (in-sample: the benchmark's fleet figure is optimistic by that much).
  const core::FleetLossModel fleet = core::fit_fleet_loss(config::fleet_rows(f));

  // The vehicles: every plausible row (or a seeded sample), each with its own seeded truth.
  std::vector<std::size_t> order(f.rows.size());
  std::iota(order.begin(), order.end(), 0);
  std::mt19937_64 pick(o.seed);
  if (o.vehicles > 0) std::shuffle(order.begin(), order.end(), pick);
  std::vector<Vehicle> fleet_v;
  int screened = 0;
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
                                    v.layout, {}, rng);
    v.target = t;
    fleet_v.push_back(std::move(v));
  }
  const controller::CellConfig cell_single = config::parse_cell(
      cell_toml("single-axle", o.rate_hz), "bench-cell.toml", adapters::tool_registry().sections());
  const controller::CellConfig cell_two = config::parse_cell(
      cell_toml("two-axle", o.rate_hz), "bench-cell.toml", adapters::tool_registry().sections());

  const std::vector<Strategy> strategies = {{"standard", core::FirstSetting::standard},
                                            {"fleet", core::FirstSetting::fleet},
                                            {"loss-map", core::FirstSetting::loss_map},
                                            {"history", core::FirstSetting::history, true}};
  const std::vector<const core::Profile*> methods = {&iterative, &fixed};
  // results[method][strategy][vehicle]
  std::vector<std::vector<std::vector<Result>>> results(
      2, std::vector<std::vector<Result>>(strategies.size(), std::vector<Result>(fleet_v.size())));
  std::atomic<std::size_t> next{0};
  auto worker = [&] {
    for (;;) {
      const std::size_t i = next++;
      if (i >= fleet_v.size()) return;
      const Vehicle& v = fleet_v[i];
      for (std::size_t m = 0; m < methods.size(); ++m) {
        core::VehicleTarget target = v.target;
        target.profile = methods[m]->name;
        session::Inputs in = session::plan_inputs(
            v.layout == core::AxleLayout::two_axle ? cell_two : cell_single, *methods[m], std::move(target));
        for (std::size_t s = 0; s < strategies.size(); ++s) {
          session::Options opt;
          opt.first_setting = strategies[s].first;
          opt.fleet = fleet;
          opt.sample_rate_hz = o.rate_hz;
          if (strategies[s].history) {
            // History: this vehicle was set on this cell before (a first, loss-map session); its accepted
            // setting seeds the second session, which is the one measured.
            session::Options first = opt;
            first.first_setting = core::FirstSetting::loss_map;
            const auto s1 = run_one(in, v.truth, first, nullptr);
            if (s1.final_set) opt.history = core::HistoryEntry{"", v.target.target, *s1.final_set};
          }
          double warm_end = 0.0;
          const auto sum = run_one(in, v.truth, opt, &warm_end);
          Result& r = results[m][s][i];
          r.accepted = sum.outcome == session::Outcome::accepted;
          r.coastdowns = sum.coastdowns;
          r.cell_min = sum.cell_time_s / 60.0;
          r.after_warm_min = (sum.cell_time_s - warm_end) / 60.0;
          for (const auto& d : sum.deviations) r.worst_n = std::max(r.worst_n, std::abs(d.deviation_n));
          r.reason = r.accepted ? "" : std::string(session::to_string(sum.outcome)) + ": " + sum.stop_reason;
        }
      }
    }
  };
  std::vector<std::thread> pool;
  for (int j = 0; j < std::max(1, o.jobs); ++j) pool.emplace_back(worker);
  for (auto& t : pool) t.join();
  const double fleet_wall_s = std::chrono::duration<double>(Clock::now() - wall0).count();

  nlohmann::json report = {{"vehicles", fleet_v.size()},
                           {"screened_out", screened},
                           {"sample_rate_hz", o.rate_hz},
                           {"seed", o.seed},
                           {"jobs", o.jobs},
                           {"file", o.epa}};
  std::printf(
      "loadtrim bench: %zu vehicles from %s (%d implausible rows screened out), seed %u, %g Hz samples,\n"
      "in-process direct simulated controller, %d worker threads. Every strategy meets the same vehicles and "
      "truths.\n\n",
      fleet_v.size(), o.epa.c_str(), screened, o.seed, o.rate_hz, o.jobs);
  bool sane = !fleet_v.empty();
  for (std::size_t m = 0; m < methods.size(); ++m) {
    std::printf("%s method (%s)\n", core::to_string(methods[m]->method), methods[m]->name.c_str());
    std::printf(
        "  %-9s %5s %6s | coast-downs      | cell minutes      | after warm-up | worst final | vs standard "
        "(median)\n",
        "strategy", "n", "failed");
    std::printf(
        "  %-9s %5s %6s | median  p95  max | median    p95     | median        | deviation N | coast-downs  "
        "cell time\n",
        "", "", "");
    double std_cd = NAN, std_min = NAN;
    for (std::size_t s = 0; s < strategies.size(); ++s) {
      std::vector<double> cd, mins, after, worst;
      std::map<std::string, int> reasons;
      int failed = 0;
      for (const auto& r : results[m][s]) {
        if (!r.accepted) {
          ++failed;
          ++reasons[r.reason.substr(0, 90)];
          continue;
        }
        cd.push_back(r.coastdowns);
        mins.push_back(r.cell_min);
        after.push_back(r.after_warm_min);
        worst.push_back(r.worst_n);
      }
      const double mcd = quantile(cd, 0.5), mmin = quantile(mins, 0.5);
      if (s == 0) {
        std_cd = mcd;
        std_min = mmin;
      }
      const double worst_max = worst.empty() ? NAN : *std::max_element(worst.begin(), worst.end());
      std::printf(
          "  %-9s %5zu %6d | %6.1f %4.1f %4.0f | %6.1f %7.1f     | %6.1f        | %8.2f    | %6.2f      "
          "%6.2f\n",
          strategies[s].name.c_str(), results[m][s].size(), failed, mcd, quantile(cd, 0.95),
          cd.empty() ? NAN : *std::max_element(cd.begin(), cd.end()), mmin, quantile(mins, 0.95),
          quantile(after, 0.5), worst_max, mcd / std_cd, mmin / std_min);
      for (const auto& [why, n] : reasons) std::printf("      not accepted x%d: %s\n", n, why.c_str());
      const double at2 =
          cd.empty() ? 0.0
                     : std::count(cd.begin(), cd.end(), 2.0) / static_cast<double>(results[m][s].size());
      report["methods"][core::to_string(methods[m]->method)][strategies[s].name] = {
          {"n", results[m][s].size()},
          {"failed", failed},
          {"coastdowns_median", mcd},
          {"coastdowns_p95", quantile(cd, 0.95)},
          {"coastdowns_max", cd.empty() ? 0.0 : *std::max_element(cd.begin(), cd.end())},
          {"share_at_2", at2},
          {"cell_min_median", mmin},
          {"cell_min_p95", quantile(mins, 0.95)},
          {"after_warm_up_min_median", quantile(after, 0.5)},
          {"worst_final_deviation_n", worst_max},
          {"ratio_coastdowns_vs_standard", mcd / std_cd},
          {"ratio_cell_time_vs_standard", mmin / std_min}};
      if (!(worst_max <= methods[m]->tolerance_n) && !worst.empty()) sane = false;
    }
    std::printf("\n");
  }

  // Goals, beside the measured figures (iterative method).
  const auto& it = report["methods"]["iterative"];
  auto yes = [](bool b) { return b ? "met" : "NOT met"; };
  const double lm_med = it["loss-map"]["coastdowns_median"], lm_p95 = it["loss-map"]["coastdowns_p95"];
  const double hist_share = it["history"]["share_at_2"];
  const double time_ratio = it["loss-map"]["ratio_cell_time_vs_standard"];
  const double after_ratio = it["loss-map"]["after_warm_up_min_median"].get<double>() /
                             it["standard"]["after_warm_up_min_median"].get<double>();
  std::printf("Goals (iterative method):\n");
  std::printf("  loss map: median coast-downs = 2 and p95 <= 3   measured %.1f and %.1f   %s\n", lm_med,
              lm_p95, yes(lm_med <= 2.0 && lm_p95 <= 3.0));
  std::printf("  history: >= 95 %% of sessions at 2 coast-downs    measured %.1f %%          %s\n",
              100 * hist_share, yes(hist_share >= 0.95));
  std::printf("  >= 30 %% less median cell time than the standard's default first setting\n");
  std::printf(
      "    measured with the warm-up: %.1f %% less   %s   (the profile's 20-minute warm-up is the same for "
      "every strategy)\n",
      100 * (1 - time_ratio), yes(time_ratio <= 0.70));
  std::printf("    after the warm-up:         %.1f %% less   %s\n", 100 * (1 - after_ratio),
              yes(after_ratio <= 0.70));
  int unstated = 0, outside = 0;
  for (const auto& mr : results)
    for (const auto& sr : mr)
      for (const auto& r : sr) {
        if (!r.accepted && r.reason.empty()) ++unstated;
        if (r.accepted && r.worst_n > 10.0) ++outside;
      }
  std::printf(
      "  no session ends accepted outside tolerance: %d found %s; every non-accepted session has a reason: "
      "%d without %s\n\n",
      outside, yes(outside == 0), unstated, yes(unstated == 0));
  report["goals"] = {{"loss_map_median_2_p95_3", lm_med <= 2.0 && lm_p95 <= 3.0},
                     {"history_95pct_at_2", hist_share >= 0.95},
                     {"cell_time_30pct_less", time_ratio <= 0.70},
                     {"after_warm_up_30pct_less", after_ratio <= 0.70},
                     {"accepted_outside_tolerance", outside},
                     {"unstated_reasons", unstated}};

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
    const int reps = o.quick ? 200 : 2000;
    double sink = 0.0;
    auto t0 = Clock::now();
    for (int k = 0; k < reps; ++k) {
      const auto b = core::analyse_bands({tr.time_s, tr.speed_kmh}, speeds, 5.0, 1542.75);
      sink += b[3].force_n;
    }
    const double band_s = std::chrono::duration<double>(Clock::now() - t0).count();
    // Baseline: one plain pass over the samples per band edge (the "first sample below" method, no fit).
    t0 = Clock::now();
    for (int k = 0; k < reps; ++k)
      for (double v : speeds)
        for (double level : {v + 5.0, v - 5.0}) {
          std::size_t i = 0;
          while (i < n && tr.speed_kmh[i] >= level) ++i;
          sink += i < n ? tr.time_s[i] : 0.0;
        }
    const double naive_s = std::chrono::duration<double>(Clock::now() - t0).count();
    const double sps = n * reps / band_s, naive_sps = n * reps / naive_s;
    // Simulator speed: simulated seconds per wall second, 100 Hz stream, one core.
    sim::SimController sim(t, {});
    sim.set_inertia(1521.0);
    sim.stream(100.0);
    sim.command(sim::cmd::HoldSpeed{80.0});
    std::vector<controller::Sample> smp;
    std::vector<sim::FaultEvent> ev;
    t0 = Clock::now();
    const double sim_span = o.quick ? 2000.0 : 20000.0;
    for (double s = 0; s < sim_span; s += 10.0) {
      smp.clear();
      sim.advance_typed(10.0, smp, ev);
    }
    const double sim_wall = std::chrono::duration<double>(Clock::now() - t0).count();
    std::printf("Compute (one core each):\n");
    std::printf(
        "  trace analysis: %.1f million samples/s (%zu-sample trace, 12 bands with local fits); baseline "
        "first-crossing scan %.1f million/s; ratio %.2f   goal >= 10 million/s: %s\n",
        sps / 1e6, n, naive_sps / 1e6, sps / naive_sps, yes(sps >= 1e7));
    std::printf(
        "  simulator: %.0f x real time in-process (100 Hz stream, physics and samples; baseline real time = "
        "1x)   goal >= 1000x: %s\n",
        sim_span / sim_wall, yes(sim_span / sim_wall >= 1000.0));
    std::printf("  fleet wall time: %.1f s for %zu sessions\n\n", fleet_wall_s,
                fleet_v.size() * methods.size() * (strategies.size() + 1));
    report["compute"] = {{"trace_analysis_samples_per_s", sps},
                         {"baseline_scan_samples_per_s", naive_sps},
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
        std::printf(" %7.3f", expected_band_sd(load, mass, v, 5.0, 0.05, 100.0,
                                               core::BandOptions{}.fit_half_width_kmh));
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
                                                                    core::BandOptions{}.fit_half_width_kmh)},
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
      ->check(CLI::Range(10.0, 1000.0))
      ->capture_default_str();
  sub->add_option("--json-out", o->json_out, "also write the figures as JSON here");
  sub->callback([o, &run] { run = [o] { return run_bench(*o); }; });
}

}  // namespace loadtrim::app
