#include "checks/procedure.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <limits>

#include "core/predict.hpp"
#include "core/problem.hpp"
#include "core/units.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"

namespace loadtrim::checks {

namespace fs = std::filesystem;
namespace u = core::units;
namespace ev = session::ev;
using controller::Mode;
using controller::Result;
using controller::Sample;
using core::num;

namespace budget {
double hold_s(double cell_max_speed_kmh, double settle_s, double latency_s) {
  return u::kmh_to_mps(cell_max_speed_kmh) / kSlowestRamp_mps2 + settle_s + kGrace_s + latency_s;
}
double stop_s(double cell_max_speed_kmh, double latency_s) {
  return u::kmh_to_mps(cell_max_speed_kmh) / kSlowestRamp_mps2 + kGrace_s + latency_s;
}
double run_s(double nominal_s, double latency_s) {
  return kMargin * std::max(0.0, nominal_s) + kGrace_s + latency_s;
}
}  // namespace budget

double Procedure::latency_s() const {
  return std::chrono::duration<double>(c_.timeouts().reply).count() * c_.time_scale();
}

Procedure::Procedure(controller::Controller& c, const CheckRequest& req, record::EventLog& log,
                     std::string folder, const std::atomic<bool>* stop)
    : c_(c),
      req_(req),
      log_(log),
      folder_(std::move(folder)),
      motion_(c, rules(req), stop),
      observers_(req.observers) {
  // The controller's warnings into the check's own log, as a session logs them. A log that cannot take one
  // fails the next step's record (Procedure::record), which ends the check as a record failure.
  motion_.on_warning = [this](const controller::Warning& w) {
    (void)log_event(ev::ControllerWarning{w.code, w.text, w.count});
  };
  motion_.on_sample = [this](const Sample& x) { on_sample(x); };
}

// Progress for the views (the live page; the console ignores a check's): every 0.1 s of controller time at
// most (common practice, no source: the page draws at most four times a second).
void Procedure::on_sample(const Sample& x) {
  if (t_first_s_ < 0.0) t_first_s_ = x.time_s;
  if (x.time_s - last_progress_s_ < 0.1) return;
  last_progress_s_ = x.time_s;
  session::Progress p;
  p.state = tracing_ ? session::State::coast_down : session::State::run_up;
  p.coastdown = tracing_ ? trace_run_ : 0;
  p.speed_kmh = x.speed_kmh;
  p.cell_time_s = x.time_s - t_first_s_;
  p.step = step_.empty() ? std::string("connecting") : step_;
  observers_.progress(p);
}

motion::Rules Procedure::rules(const CheckRequest& req) {
  motion::Rules r;
  r.speed_limit_kmh = req.cell.max_speed_kmh;
  r.standstill_kmh = req.cell.standstill_kmh;
  return r;
}

void Procedure::record(session::Payload event) {
  // A coast's start: the samples collected next are its trace on the live page.
  if (std::holds_alternative<ev::FreeCoastStarted>(event)) {
    ++trace_run_;
    tracing_ = true;
    step_ = "the free coast";
  } else if (const auto* cs = std::get_if<ev::CheckCoastStarted>(&event)) {
    trace_run_ = cs->run;
    tracing_ = true;
    step_ = "coast-down " + std::to_string(cs->run) + " at " + num(cs->inertia_kg, 0) + " kg";
  }
  if (!log_event(std::move(event))) throw Abort{CheckResult::End::record_failure, log_.error()};
}

bool Procedure::log_event(session::Payload event) {
  const session::Event e{std::move(event), std::nullopt, nullptr};
  if (!log_.append(session::type_of(e), session::to_json(e.payload), record::utc_now())) return false;
  // The console is quick: the controller's keep-alive goes on for the cell's progress grace meanwhile.
  const auto d = observers_.deliver(e, [this](bool) { c_.lease(req_.cell.timeouts.progress_grace); });
  for (const auto& why : d.dropped) {
    std::fprintf(stderr, "loadtrim: %s\n", why.c_str());
    const session::Payload dropped = ev::ObserverDropped{why};
    if (!log_.append(session::type_of(dropped), session::to_json(dropped), record::utc_now())) return false;
  }
  // A view that calls itself critical is still a view here: the check's record is its log.
  return true;
}

void Procedure::must(const Result& r, const char* what) {
  if (r.ok()) return;
  throw Abort{CheckResult::End::controller_fault, std::string(what) + ": " + r.message};
}

void Procedure::must_step(const Result& r) {
  if (r.ok()) return;
  const auto end = r.code == motion::kTooSlow       ? CheckResult::End::failed
                   : r.code == motion::kInterrupted ? CheckResult::End::interrupted
                                                    : CheckResult::End::controller_fault;
  throw Abort{end, r.message};
}

void Procedure::collect(std::vector<Sample>& out, const std::function<bool(const Sample&)>& done,
                        double budget_s, const char* step, std::initializer_list<Mode> modes,
                        std::optional<std::uint64_t> since_epoch) {
  motion::Step st;
  st.what = step;
  st.budget_s = budget_s;
  st.modes = modes;
  st.since_epoch = since_epoch.value_or(c_.epoch());
  if (!tracing_) step_ = step;
  struct EndTrace {
    bool& tracing;
    ~EndTrace() { tracing = false; }
  } end_trace{tracing_};
  must_step(motion_.collect(st, done, &out));
}

void Procedure::hold_and_settle(double v_kmh) {
  if (v_kmh > req_.cell.max_speed_kmh)
    throw Abort{CheckResult::End::refused, "start speed " + num(v_kmh) + " km/h is above the cell limit of " +
                                               num(req_.cell.max_speed_kmh) + " km/h"};
  step_ = "settling at " + num(v_kmh, 0) + " km/h";
  must_step(motion_.hold(v_kmh, req_.profile.settle_s, "settling at the start speed",
                         budget::hold_s(req_.cell.max_speed_kmh, req_.profile.settle_s, latency_s())));
}

void Procedure::stop_rollers() {
  step_ = "stopping the rollers";
  bool stopped = false;
  must_step(motion_.stop_and_wait(stop_budget_s(), stopped));
}

nlohmann::json Procedure::write_trace(const std::string& name, const std::vector<Sample>& tr) {
  const std::string rel = "traces/" + name + ".csv";
  const std::string csv = record::trace_csv(tr);
  std::string err;
  if (!record::write_durable((fs::path(folder_) / rel).string(), csv, err))
    throw Abort{CheckResult::End::record_failure, err};
  return {{"path", rel}, {"sha256", record::sha256_hex(csv)}, {"samples", tr.size()}};
}

void Procedure::split(const std::vector<Sample>& tr, std::vector<double>& t, std::vector<double>& v,
                      std::vector<double>* f) {
  for (const auto& s : tr) {
    t.push_back(s.time_s);
    v.push_back(s.speed_kmh);
    if (f) f->push_back(s.force_n);
  }
}

namespace {

void refuse_above_limit(const CheckRequest& req, double speed_kmh, const std::string& what) {
  if (speed_kmh > req.cell.max_speed_kmh)
    throw Abort{CheckResult::End::refused, what + " " + num(speed_kmh, 1) +
                                               " km/h is above the cell limit of " +
                                               num(req.cell.max_speed_kmh) + " km/h"};
}
void refuse_force(const CheckRequest& req, double force_n, const std::string& what) {
  if (std::abs(force_n) > req.cell.max_force_n)
    throw Abort{CheckResult::End::refused, what + " needs " + num(std::abs(force_n), 0) +
                                               " N, above the cell's force limit of " +
                                               num(req.cell.max_force_n) + " N"};
}

}  // namespace

// --- the parasitic loss (free coast of the empty rollers) -------------------------------------------------
nlohmann::json run_parasitic(Procedure& p, const std::optional<core::RoadLoad>& stored, bool& passed,
                             std::string& verdict, std::optional<core::RoadLoad>& new_curve) {
  const auto& req = p.request();
  const auto& o = req.profile.parasitic;
  const double top = *std::max_element(o.speeds_kmh.begin(), o.speeds_kmh.end()) + o.half_band_kmh +
                     req.profile.parasitic_run_up_margin_kmh;
  // The coast ends one crossing-fit width (2 km/h, common practice, no source) below the lowest band.
  const double bottom = *std::min_element(o.speeds_kmh.begin(), o.speeds_kmh.end()) - o.half_band_kmh - 2.0;
  // Budget: the coast the stored curve predicts, else one at the smallest loss a dyno may have.
  const double inertia = req.cell.base_inertia_kg;
  std::optional<double> predicted;
  if (stored) predicted = core::coastdown_time_s(*stored, inertia, top, bottom);
  const double nominal =
      predicted ? *predicted : inertia * u::kmh_to_mps(top - bottom) / budget::kSmallestLoss_n;
  p.hold_and_settle(top);
  p.record(ev::FreeCoastStarted{top});
  p.must(p.controller().free_coast(), "free coast");
  std::vector<Sample> tr;
  p.collect(tr, [&](const Sample& x) { return x.speed_kmh < bottom; }, p.run_budget_s(nominal),
            "the free coast", {Mode::idle});
  p.stop_rollers();
  const auto file = p.write_trace("free-coast", tr);
  std::vector<double> t, v;
  Procedure::split(tr, t, v);
  const core::ParasiticDetermination d = core::determine_parasitic({t, v}, inertia, stored, o);
  passed = d.passed;
  // "pass (40 CFR 1066.255): ..." as every check's verdict names its clause.
  verdict = std::string(d.passed ? "pass" : "FAIL") + " (40 CFR " +
            core::clause_of(core::CheckKind::parasitic) + ")" + d.verdict.substr(d.verdict.find(':'));
  if (d.ok) new_curve = d.fit.coefficients;
  session::Payload analysed = ev::ParasiticAnalysed{inertia, d, stored, file};
  nlohmann::json j = session::to_json(analysed);
  p.record(std::move(analysed));
  return j;
}

// --- 1066.270 / 1066.275: the unloaded coast-down ---------------------------------------------------------
nlohmann::json run_coastdowns(Procedure& p, bool readiness, bool& passed, std::string& verdict) {
  const auto& req = p.request();
  auto& c = p.controller();
  const auto& cell = req.cell;
  if (!(cell.min_inertia_kg > 0.0 && cell.max_inertia_kg > 0.0))
    throw Abort{CheckResult::End::refused,
                "the cell file gives no dyno.min_inertia_kg / dyno.max_inertia_kg: the unloaded coast-down "
                "runs at both"};
  std::vector<std::pair<double, core::RoadLoad>> runs;
  // The daily readiness check runs at the smallest inertia only: there the same force error is the largest
  // share of the force, so uncompensated losses and inertia errors show first.
  runs.push_back({cell.min_inertia_kg, req.profile.smallest_inertia_setting});
  if (!readiness) runs.push_back({cell.max_inertia_kg, req.profile.largest_inertia_setting});
  const auto& o = req.profile.coastdown;
  const double start = u::mph_to_kmh(o.v_start_mph + req.profile.coastdown_run_up_margin_mph);
  const double end = u::mph_to_kmh(o.v_end_mph) - 2.0;  // one crossing-fit width below the last edge
  nlohmann::json out = nlohmann::json::array();
  passed = true;
  verdict.clear();
  int n = 0;
  for (const auto& [inertia, setting] : runs) {
    ++n;
    // Budget: the coast the setting predicts (closed form, docs/standards.md §6.4).
    const auto predicted = core::coastdown_time_s(setting, inertia, start, end);
    if (!predicted)
      throw Abort{CheckResult::End::refused, "the profile's coefficients at " + num(inertia, 0) +
                                                 " kg do not decelerate the rollers to " + num(end, 1) +
                                                 " km/h"};
    p.must(c.set_inertia(inertia), "set inertia");
    p.must(c.set_coefficients(setting), "set coefficients");
    p.hold_and_settle(start);
    p.record(ev::CheckCoastStarted{n, inertia, setting, start});
    p.must(c.release_road_load(), "road-load simulation");
    std::vector<Sample> tr;
    p.collect(tr, [&](const Sample& x) { return x.speed_kmh < end; }, p.run_budget_s(*predicted),
              "the coast-down", {Mode::road_load});
    p.stop_rollers();
    const auto file = p.write_trace("coastdown-" + std::to_string(n), tr);
    std::vector<double> t, v;
    Procedure::split(tr, t, v);
    const core::UnloadedCoastdown r = core::check_unloaded_coastdown({t, v}, inertia, setting, o);
    session::Payload analysed = ev::UnloadedCoastdownAnalysed{n, inertia, setting, r, file};
    out.push_back(session::to_json(analysed));
    p.record(std::move(analysed));
    passed = passed && r.passed;
    verdict += (verdict.empty() ? "" : "; ") + r.verdict;
  }
  // One verdict for the check, naming its clause, then each inertia's own.
  verdict = std::string(passed ? "pass" : "FAIL") + " (40 CFR " +
            core::clause_of(readiness ? core::CheckKind::readiness : core::CheckKind::coastdown) +
            "): " + verdict;
  return {{"runs", out}};
}

// --- 1066.250: base inertia, both directions ---------------------------------------------------------------
nlohmann::json run_base_inertia(Procedure& p, bool& passed, std::string& verdict) {
  const auto& req = p.request();
  auto& c = p.controller();
  const auto& o = req.profile.inertia;
  const double stated = req.cell.base_inertia_kg;
  const double top_kmh = u::mph_to_kmh(o.v_high_mph + o.margin_mph);
  const double bottom_kmh = u::mph_to_kmh(o.v_low_mph - o.margin_mph);
  refuse_above_limit(req, top_kmh, "the base-inertia check's top speed");
  for (std::size_t k = 0; k < o.accel_rates_mph_per_s.size(); ++k) {
    refuse_force(req, stated * o.accel_rates_mph_per_s[k] * u::kMpsPerMph, "the base-inertia check");
    refuse_force(req, stated * o.decel_rates_mph_per_s[k] * u::kMpsPerMph, "the base-inertia check");
  }
  std::vector<core::InertiaSet> sets;
  nlohmann::json files = nlohmann::json::array();
  for (std::size_t k = 0; k < o.accel_rates_mph_per_s.size(); ++k) {
    const double up = o.accel_rates_mph_per_s[k], down = o.decel_rates_mph_per_s[k];
    // F = m·a (simulation off: the rollers turn their base inertia only), signed.
    const double f_up = stated * up * u::kMpsPerMph, f_down = -stated * down * u::kMpsPerMph;
    for (int s = 1; s <= o.sets_per_rate_pair; ++s) {
      p.hold_and_settle(u::mph_to_kmh(o.start_mph));
      // Each run takes the samples from its command on, read before its acknowledgement too (a command's
      // first samples may share a read with its reply): the mode, or the speeds, tell the phases apart.
      p.record(ev::ForceApplied{f_up, stated});
      const std::uint64_t e_up = c.epoch();
      p.must(c.apply_force(f_up), "constant force");
      std::vector<Sample> a, d;
      p.collect(
          a, [&](const Sample& x) { return x.speed_kmh > top_kmh; },
          p.run_budget_s((o.v_high_mph + o.margin_mph - o.start_mph) / up), "the constant-force acceleration",
          {Mode::constant_force}, e_up);
      p.record(ev::ForceApplied{f_down, stated});
      const std::uint64_t e_down = c.epoch();
      p.must(c.apply_force(f_down), "constant force");
      p.collect(
          d, [&](const Sample& x) { return x.speed_kmh < bottom_kmh; },
          p.run_budget_s((o.v_high_mph - o.v_low_mph + 2.0 * o.margin_mph) / down),
          "the constant-force deceleration", {Mode::constant_force}, e_down);
      const std::string name = "inertia-pair" + std::to_string(k + 1) + "-set" + std::to_string(s);
      files.push_back(p.write_trace(name + "-accel", a));
      files.push_back(p.write_trace(name + "-decel", d));
      std::vector<double> ta, va, fa, td, vd, fd;
      Procedure::split(a, ta, va, &fa);
      Procedure::split(d, td, vd, &fd);
      core::InertiaSet set = core::analyse_inertia_set(
          core::analyse_constant_force_run({ta, va}, fa, true, o.v_low_mph, o.v_high_mph),
          core::analyse_constant_force_run({td, vd}, fd, false, o.v_low_mph, o.v_high_mph), stated, o);
      set.rate_pair = static_cast<int>(k) + 1;
      set.set = s;
      set.accel_rate_mph_per_s = up;
      set.decel_rate_mph_per_s = down;
      sets.push_back(std::move(set));
    }
  }
  p.stop_rollers();
  const core::BaseInertiaCheck r = core::summarise_base_inertia(std::move(sets), stated, o);
  passed = r.passed;
  verdict = r.verdict;
  session::Payload analysed = ev::InertiaAnalysed{r, files};
  nlohmann::json j = session::to_json(analysed);
  p.record(std::move(analysed));
  return j;
}

// --- 1066.260: friction compensation ----------------------------------------------------------------------
nlohmann::json run_friction(Procedure& p, const std::optional<core::RoadLoad>& stored, bool& passed,
                            std::string& verdict) {
  const auto& req = p.request();
  auto& c = p.controller();
  const auto& o = req.profile.friction;
  if (!stored)
    throw Abort{CheckResult::End::refused,
                "the friction compensation check (40 CFR 1066.260) follows the parasitic loss determination "
                "(1066.255), and the cell's history holds no parasitic curve: run `loadtrim check parasitic` "
                "first"};
  const double v_kmh = u::mph_to_kmh(o.speed_mph);
  refuse_above_limit(req, v_kmh, "the friction compensation check's speed");
  const double base = req.cell.base_inertia_kg;
  const core::RoadLoad zero{0.0, 0.0, 0.0};
  // Base inertia (no simulated inertia beyond it) and A, B, C zero: in road-load simulation the rollers then
  // keep their speed, but for what the compensation leaves.
  p.must(c.set_inertia(base), "set inertia");
  p.must(c.set_coefficients(zero), "set coefficients");
  p.hold_and_settle(v_kmh);
  p.record(ev::CheckCoastStarted{1, base, zero, v_kmh});
  const std::uint64_t e_coast = c.epoch();  // the coast's samples from its command on (see run_base_inertia)
  p.must(c.release_road_load(), "road-load simulation");
  std::vector<Sample> tr;
  std::optional<double> t0;
  p.collect(
      tr,
      [&](const Sample& x) {
        if (!t0) t0 = x.time_s;
        return x.time_s - *t0 >= o.coast_s;
      },
      p.run_budget_s(o.coast_s), "the coast at base inertia", {Mode::road_load}, e_coast);
  p.stop_rollers();
  const auto file = p.write_trace("friction-coast", tr);
  std::vector<double> t, v;
  Procedure::split(tr, t, v);
  const core::FrictionCheck r = core::check_friction_compensation({t, v}, base, o);
  passed = r.ok && r.passed;
  verdict = r.verdict;
  session::Payload analysed = ev::FrictionAnalysed{r, o.speed_mph, file};
  nlohmann::json j = session::to_json(analysed);
  p.record(std::move(analysed));
  return j;
}

// --- 1066.265: acceleration and deceleration, force-controlled ---------------------------------------------
nlohmann::json run_accel_decel(Procedure& p, bool& passed, std::string& verdict) {
  const auto& req = p.request();
  auto& c = p.controller();
  const auto& o = req.profile.accel_decel;
  std::vector<double> inertias = o.inertias_kg;
  if (inertias.empty()) {
    if (!(req.cell.min_inertia_kg > 0.0 && req.cell.max_inertia_kg > 0.0))
      throw Abort{CheckResult::End::refused,
                  "the cell file gives no dyno.min_inertia_kg / dyno.max_inertia_kg and the profile no "
                  "accel_decel.inertias_kg: the acceleration/deceleration check runs at those inertias"};
    inertias = {req.cell.min_inertia_kg, req.cell.max_inertia_kg};
  }
  const auto rates = core::accel_decel_rates_mph_per_s(o);
  const double start_kmh = u::mph_to_kmh(o.start_mph);
  const double top_kmh = u::mph_to_kmh(o.v_high_mph + o.margin_mph);
  const double bottom_kmh = u::mph_to_kmh(o.v_low_mph - o.margin_mph);
  refuse_above_limit(req, top_kmh, "the acceleration/deceleration check's top speed");
  for (double m : inertias)
    refuse_force(req, m * rates.back() * u::kMpsPerMph, "the acceleration/deceleration check");
  std::vector<core::RateRun> runs;
  nlohmann::json files = nlohmann::json::array();
  for (double m : inertias) {
    // Settings change only outside road-load simulation: hold first.
    p.hold_and_settle(start_kmh);
    p.must(c.set_inertia(m), "set inertia");
    for (double rate : rates) {
      // The set force alone (no speed terms) moves the simulated inertia at the nominal rate: F = I·a.
      const double force = m * rate * u::kMpsPerMph;
      for (int run = 1; run <= o.runs_per_rate; ++run) {
        std::vector<Sample> a, d, held;
        // Acceleration: a negative set force drives the rollers, as a vehicle's tractive force would.
        const core::RoadLoad drive{-force, 0.0, 0.0}, brake{force, 0.0, 0.0};
        p.hold_and_settle(start_kmh);
        p.must(c.set_coefficients(drive), "set coefficients");
        p.record(ev::RateRunStarted{m, rate, run, true, drive, start_kmh});
        // The run's samples from its command on (see run_base_inertia); the mode tells the phases apart.
        const std::uint64_t e_up = c.epoch();
        p.must(c.release_road_load(), "road-load simulation");
        p.collect(
            a, [&](const Sample& x) { return x.speed_kmh > top_kmh; },
            p.run_budget_s((o.v_high_mph + o.margin_mph - o.start_mph) / rate), "the acceleration",
            {Mode::road_load}, e_up);
        // Deceleration: hold where the acceleration ended (the setting cannot change in road-load
        // simulation), then the positive set force brakes the rollers.
        p.must(c.hold_speed(top_kmh), "speed hold");
        p.collect(held, [](const Sample&) { return true; }, p.run_budget_s(0.0), "the hold at the top speed",
                  {Mode::speed_hold});
        p.must(c.set_coefficients(brake), "set coefficients");
        p.record(ev::RateRunStarted{m, rate, run, false, brake, top_kmh});
        const std::uint64_t e_down = c.epoch();
        p.must(c.release_road_load(), "road-load simulation");
        p.collect(
            d, [&](const Sample& x) { return x.speed_kmh < bottom_kmh; },
            p.run_budget_s((o.v_high_mph - o.v_low_mph + 2.0 * o.margin_mph) / rate), "the deceleration",
            {Mode::road_load}, e_down);
        const std::string name =
            "accel-decel-" + num(m, 0) + "kg-" + num(rate) + "mphps-run" + std::to_string(run);
        files.push_back(p.write_trace(name + "-accel", a));
        files.push_back(p.write_trace(name + "-decel", d));
        std::vector<double> ta, va, td, vd;
        Procedure::split(a, ta, va);
        Procedure::split(d, td, vd);
        core::RateRun ra = core::analyse_rate_run({ta, va}, true, m, rate, o);
        core::RateRun rd = core::analyse_rate_run({td, vd}, false, m, rate, o);
        ra.run = rd.run = run;
        runs.push_back(std::move(ra));
        runs.push_back(std::move(rd));
      }
    }
  }
  p.stop_rollers();
  const core::AccelDecelCheck r = core::summarise_accel_decel(std::move(runs), o);
  passed = r.passed;
  verdict = r.verdict;
  session::Payload analysed = ev::AccelDecelAnalysed{r, files};
  nlohmann::json j = session::to_json(analysed);
  p.record(std::move(analysed));
  return j;
}

// --- 1066.245: response time ------------------------------------------------------------------------------
nlohmann::json run_response(Procedure& p, bool& passed, std::string& verdict) {
  const auto& req = p.request();
  auto& c = p.controller();
  const auto& o = req.profile.response;
  const double base = req.cell.base_inertia_kg;
  const double start_kmh = u::mph_to_kmh(o.start_mph);
  refuse_above_limit(req, start_kmh, "the response check's start speed");
  for (double rate : o.rates_mph_per_s) {
    refuse_force(req, base * rate * u::kMpsPerMph, "the response check");
    // The window's acceleration must stay under the cell's limit.
    refuse_above_limit(req, start_kmh + u::mph_to_kmh(rate * o.window_s) * budget::kMargin,
                       "the response check's speed at the end of its window (with margin)");
  }
  // The samples must be the controller's own, at most max_sample_period_s apart: the stream is asked for this
  // check's rate.
  p.must(c.start_stream(o.sample_rate_hz), "start stream at the response check's rate");
  // The last sample the motion library passed on before each step's command (the hold's), for when none is
  // read between the hold's end and the command.
  struct Watch {
    motion::Motion& m;
    std::optional<Sample> last;
    explicit Watch(motion::Motion& mo) : m(mo) {
      m.on_sample = [this](const Sample& s) { last = s; };
    }
    ~Watch() { m.on_sample = nullptr; }
  } watch(p.motion());
  std::vector<core::ResponseStep> steps;
  nlohmann::json files = nlohmann::json::array();
  int k = 0;
  for (double rate : o.rates_mph_per_s) {
    ++k;
    const double force = base * rate * u::kMpsPerMph;
    p.hold_and_settle(start_kmh);
    p.record(ev::ForceApplied{force, base});
    // The samples of the hold after it settled and of the step, in order: the step is between the last one
    // in speed hold and the first in constant force.
    const std::optional<Sample> prior = watch.last;
    const std::uint64_t lost_before = c.stats().samples_lost;
    const std::uint64_t before = c.epoch();
    p.must(c.apply_force(force), "constant force");
    std::vector<Sample> tr;
    std::optional<double> t_first;
    p.collect(
        tr,
        [&](const Sample& x) {
          if (x.mode != Mode::constant_force) return false;
          if (!t_first) t_first = x.time_s;
          return x.time_s - *t_first >= o.window_s;
        },
        p.run_budget_s(o.window_s), "the force step", {Mode::speed_hold, Mode::constant_force}, before);
    if (prior && prior->mode == Mode::speed_hold && (tr.empty() || tr.front().mode == Mode::constant_force))
      tr.insert(tr.begin(), *prior);
    files.push_back(p.write_trace("response-step-" + std::to_string(k), tr));
    std::size_t first = 0;
    while (first < tr.size() && tr[first].mode != Mode::constant_force) ++first;
    std::vector<double> t, v, f;
    Procedure::split(tr, t, v, &f);
    core::ResponseStep step;
    step.force_n = force;
    if (c.stats().samples_lost != lost_before) {
      step.message = "samples were lost on the link around the step: the step's time is not known";
    } else if (first > 0 && first + 1 < tr.size() && tr[first].index != tr[first - 1].index + 1) {
      // The samples between the hold's last one seen and the first in constant force were read before the
      // command was sent (the motion library ends a wait at the sample its condition holds for; the rest of
      // that read is not passed on), so they precede the step, and none was lost on the link: the last sample
      // before the step is the one just before the first in constant force, one period earlier (the samples
      // are consecutive and evenly spaced by the controller's counter).
      const std::size_t last = tr.size() - 1;
      const double period =
          (tr[last].time_s - tr[first].time_s) / static_cast<double>(tr[last].index - tr[first].index);
      std::vector<double> ts = {tr[first].time_s - period}, fs = {tr[first - 1].force_n};
      ts.insert(ts.end(), t.begin() + static_cast<std::ptrdiff_t>(first), t.end());
      fs.insert(fs.end(), f.begin() + static_cast<std::ptrdiff_t>(first), f.end());
      step = core::analyse_response_step(ts, fs, 1, force, o);
    } else {
      step = core::analyse_response_step(t, f, first, force, o);
    }
    step.rate_mph_per_s = rate;
    if (step.stream_too_slow) {
      p.stop_rollers();
      throw Abort{CheckResult::End::refused,
                  "the response time (40 CFR 1066.245) cannot be measured on this stream: " + step.message};
    }
    steps.push_back(std::move(step));
  }
  p.stop_rollers();
  const core::ResponseCheck r = core::summarise_response(std::move(steps), o);
  passed = r.passed;
  verdict = r.verdict;
  session::Payload analysed = ev::ResponseAnalysed{r, o.limit_s, o.band_fraction, files};
  nlohmann::json j = session::to_json(analysed);
  p.record(std::move(analysed));
  return j;
}

}  // namespace loadtrim::checks
