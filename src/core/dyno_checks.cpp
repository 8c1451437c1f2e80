#include "core/dyno_checks.hpp"

#include <algorithm>
#include <cmath>

#include "core/predict.hpp"
#include "core/problem.hpp"
#include "core/units.hpp"

namespace loadtrim::core {

namespace u = units;

double inertia_from_constant_force_kg(double mean_force_n, double delta_t_s, double delta_v_mps) {
  return mean_force_n * delta_t_s / delta_v_mps;
}

InertiaCheck check_base_inertia(TraceView rising, std::span<const double> force_n, double stated_kg,
                                const InertiaCheckOptions& o) {
  InertiaCheck r;
  r.stated_kg = stated_kg;
  if (force_n.size() != rising.size() || rising.size() < 10) {
    r.message = "the trace has fewer than 10 samples or no force for each";
    return r;
  }
  // The crossing finder works on falling traces: a rising speed is a falling negated speed.
  std::vector<double> neg(rising.size());
  for (std::size_t i = 0; i < neg.size(); ++i) neg[i] = -rising.speed_kmh[i];
  const TraceAnalyser a({rising.time_s, neg});
  const double lo_kmh = u::mph_to_kmh(o.v_low_mph), hi_kmh = u::mph_to_kmh(o.v_high_mph);
  const Crossing c_lo = a.crossing(-lo_kmh), c_hi = a.crossing(-hi_kmh);
  if (c_lo.status != BandStatus::ok || c_hi.status != BandStatus::ok) {
    r.message = "speed " + num(o.v_low_mph) + " or " + num(o.v_high_mph) +
                " mph not crossed cleanly: " + (c_lo.status != BandStatus::ok ? c_lo.reason : c_hi.reason);
    return r;
  }
  r.t_low_s = c_lo.time_s;
  r.t_high_s = c_hi.time_s;
  r.delta_t_s = r.t_high_s - r.t_low_s;
  r.delta_v_mps = (o.v_high_mph - o.v_low_mph) * u::kMpsPerMph;
  double sum = 0.0;
  int n = 0;
  for (std::size_t i = 0; i < rising.size(); ++i)
    if (rising.time_s[i] >= r.t_low_s && rising.time_s[i] <= r.t_high_s) {
      sum += force_n[i];
      ++n;
    }
  if (n < 10 || !(r.delta_t_s > 0.0)) {
    r.message = "fewer than 10 force samples between the two speeds";
    return r;
  }
  r.mean_force_n = sum / n;
  r.inertia_kg = inertia_from_constant_force_kg(r.mean_force_n, r.delta_t_s, r.delta_v_mps);
  r.error_fraction = (r.inertia_kg - stated_kg) / stated_kg;
  r.ok = true;
  r.passed = std::abs(r.error_fraction) <= o.tolerance_fraction;
  r.verdict =
      std::string(r.passed ? "pass" : "FAIL") + ": base inertia measured " + num(r.inertia_kg, 1) +
      " kg against " + num(stated_kg, 1) + " kg stated (" + (r.error_fraction >= 0 ? "+" : "") +
      num(100.0 * r.error_fraction, 2) + " %, limit ±" + num(100.0 * o.tolerance_fraction, 2) + " %)" +
      (r.passed ? ""
       : r.error_fraction > 0
           ? ": more inertia turns than the cell states (every simulated inertia is off by it), or losses "
             "the "
             "compensation misses slow the run (a passing parasitic determination rules that out)"
           : ": less inertia turns than the cell states (every simulated inertia is off by it), or the "
             "compensation over-corrects the losses");
  return r;
}

std::vector<double> interval_edges_mph(const UnloadedCoastdownOptions& o) {
  std::vector<double> e;
  for (double v = o.v_start_mph; v >= o.v_end_mph - 1e-9; v -= o.interval_mph) e.push_back(v);
  return e;
}

UnloadedCoastdown check_unloaded_coastdown(TraceView coast, double inertia_kg, const RoadLoad& setting,
                                           const UnloadedCoastdownOptions& o) {
  UnloadedCoastdown out;
  out.inertia_kg = inertia_kg;
  out.setting = setting;
  const TraceAnalyser a(coast);
  const auto edges = interval_edges_mph(o);
  bool all = edges.size() >= 2;
  double worst = 0.0, worst_speed = 0.0;
  for (std::size_t k = 0; k + 1 < edges.size(); ++k) {
    IntervalResult r;
    r.v_high_mph = edges[k];
    r.v_low_mph = edges[k + 1];
    const double hi = u::mph_to_kmh(r.v_high_mph), lo = u::mph_to_kmh(r.v_low_mph);
    const Crossing ch = a.crossing(hi), cl = a.crossing(lo);
    const auto expected = coastdown_time_s(setting, inertia_kg, hi, lo);
    if (ch.status != BandStatus::ok || cl.status != BandStatus::ok || !expected) {
      r.reason = ch.status != BandStatus::ok   ? ch.reason
                 : cl.status != BandStatus::ok ? cl.reason
                                               : "the setting is not positive on the interval";
      all = false;
      out.intervals.push_back(r);
      continue;
    }
    const double dv_mps = (r.v_high_mph - r.v_low_mph) * u::kMpsPerMph;
    r.delta_t_s = cl.time_s - ch.time_s;
    r.expected_delta_t_s = *expected;
    r.mean_force_n = inertia_kg * dv_mps / r.delta_t_s;
    r.expected_force_n = inertia_kg * dv_mps / r.expected_delta_t_s;
    r.deviation_n = r.mean_force_n - r.expected_force_n;
    r.limit_n = std::max(o.tolerance_n, o.tolerance_fraction * std::abs(r.expected_force_n));
    r.passed = std::abs(r.deviation_n) <= r.limit_n;
    all = all && r.passed;
    if (std::abs(r.deviation_n) / r.limit_n > std::abs(worst)) {
      worst = r.deviation_n / r.limit_n;
      worst_speed = 0.5 * (r.v_high_mph + r.v_low_mph);
    }
    out.intervals.push_back(r);
  }
  out.passed = all;
  double mean_dev = 0.0;
  int n = 0;
  for (const auto& r : out.intervals)
    if (r.reason.empty()) {
      mean_dev += r.deviation_n / std::max(1.0, r.expected_force_n);
      ++n;
    }
  mean_dev = n ? mean_dev / n : 0.0;
  if (out.passed) {
    out.verdict = "pass: every interval within its limit at " + num(inertia_kg, 0) + " kg";
  } else if (n < static_cast<int>(out.intervals.size())) {
    out.verdict = "FAIL: not every interval was measured (coast incomplete) at " + num(inertia_kg, 0) + " kg";
  } else {
    out.verdict =
        "FAIL at " + num(inertia_kg, 0) + " kg: mean force " + (mean_dev > 0 ? "above" : "below") +
        " the setting by " + num(100.0 * std::abs(mean_dev), 1) + " % on average, worst near " +
        num(worst_speed, 0) + " mph (" +
        (mean_dev > 0 ? "parasitic loss not compensated, or less inertia turning than set"
                      : "more inertia turning than set (base inertia?), or losses over-compensated") +
        ")";
  }
  return out;
}

ParasiticDetermination determine_parasitic(TraceView coast, double base_inertia_kg,
                                           const std::optional<RoadLoad>& stored, const ParasiticOptions& o) {
  ParasiticDetermination d;
  d.bands = analyse_bands(coast, o.speeds_kmh, o.half_band_kmh, base_inertia_kg);
  std::vector<double> v, f;
  for (const auto& b : d.bands)
    if (b.ok()) {
      v.push_back(b.reference_speed_kmh);
      f.push_back(b.force_n);
    }
  if (v.size() < 4) {
    d.message = "fewer than 4 usable speed bands in the coast of the empty rollers";
    d.verdict = "FAIL: " + d.message;
    return d;
  }
  d.fit = fit_road_load(v, f);
  if (!d.fit.ok) {
    d.message = d.fit.message;
    d.verdict = "FAIL: " + d.message;
    return d;
  }
  d.ok = true;
  d.have_stored = stored.has_value();
  if (!stored) {
    d.passed = true;
    d.verdict = "pass: parasitic loss curve determined (no stored curve to compare: installation)";
    return d;
  }
  bool all = true;
  double ratio = 0.0;
  for (double s : o.speeds_kmh) {
    ParasiticPoint p;
    p.speed_kmh = s;
    p.measured_n = d.fit.coefficients.force_n(s);
    p.stored_n = stored->force_n(s);
    p.deviation_n = p.measured_n - p.stored_n;
    p.limit_n = std::max(o.tolerance_n, o.tolerance_fraction * std::abs(p.stored_n));
    p.passed = std::abs(p.deviation_n) <= p.limit_n;
    all = all && p.passed;
    ratio += p.stored_n != 0.0 ? p.measured_n / p.stored_n : 1.0;
    d.points.push_back(p);
  }
  d.mean_ratio = ratio / static_cast<double>(o.speeds_kmh.size());
  d.passed = all;
  const double pct = 100.0 * (d.mean_ratio - 1.0);
  d.verdict =
      std::string(all ? "pass" : "FAIL") + ": parasitic loss " + (pct >= 0 ? "+" : "") + num(pct, 1) +
      " % against the stored curve on average" +
      (all       ? ""
       : pct > 0 ? ": the rollers lose more than stored (bearings, windage, a dragging brake or belt?)"
                 : ": the rollers lose less than stored (a changed or mis-stored curve?)");
  return d;
}

const char* to_string(CheckKind k) {
  switch (k) {
    case CheckKind::parasitic:
      return "parasitic";
    case CheckKind::coastdown:
      return "coastdown";
    case CheckKind::readiness:
      return "readiness";
    case CheckKind::inertia:
      return "inertia";
  }
  return "unknown";
}

bool parse(const std::string& s, CheckKind& out) {
  for (CheckKind k : kAllChecks)
    if (s == to_string(k)) {
      out = k;
      return true;
    }
  return false;
}

const char* to_string(DueState s) {
  switch (s) {
    case DueState::current:
      return "current";
    case DueState::due_never_done:
      return "due (never passed)";
    case DueState::overdue:
      return "overdue";
    case DueState::failed:
      return "failed (last run)";
    case DueState::after_maintenance:
      return "due after maintenance";
    case DueState::after_failed_check:
      return "due after a failed check";
  }
  return "unknown";
}

std::vector<DueItem> due_checks(std::span<const CheckRecord> history, double now, const DuePolicy& p,
                                std::optional<double> maintenance_utc_s) {
  std::vector<CheckRecord> h(history.begin(), history.end());
  std::stable_sort(h.begin(), h.end(),
                   [](const CheckRecord& a, const CheckRecord& b) { return a.utc_s < b.utc_s; });
  // The latest failure of any check: the parasitic determination is due after it (1066.215) unless a passing
  // determination came later.
  std::optional<double> last_failure;
  for (const auto& r : h)
    if (!r.passed) last_failure = r.utc_s;
  std::vector<DueItem> out;
  for (CheckKind k : kAllChecks) {
    DueItem it;
    it.kind = k;
    std::optional<double> last_pass;
    std::optional<bool> latest_passed;
    for (const auto& r : h)
      if (r.kind == k) {
        latest_passed = r.passed;
        if (r.passed) last_pass = r.utc_s;
      }
    it.last_pass_utc_s = last_pass;
    const double interval = k == CheckKind::coastdown   ? p.coastdown_interval_s
                            : k == CheckKind::readiness ? p.readiness_interval_s
                            : k == CheckKind::inertia   ? p.inertia_interval_s
                                                        : p.parasitic_interval_s;
    if (latest_passed && !*latest_passed) {
      it.state = DueState::failed;
      it.why = "the latest run failed: repeat it after finding the cause";
    } else if (!last_pass) {
      it.state = DueState::due_never_done;
      it.why = "no passing run on record";
    } else if (interval > 0.0 && now - *last_pass > interval) {
      it.state = DueState::overdue;
      it.valid_until_utc_s = *last_pass + interval;
      it.why = "last passed more than " + num(interval / 86400.0, 0) + " day(s) ago";
    } else if ((k == CheckKind::parasitic || k == CheckKind::inertia) && maintenance_utc_s &&
               *maintenance_utc_s > *last_pass) {
      it.state = DueState::after_maintenance;
      it.why = "major maintenance was logged after the last passing run";
    } else if (k == CheckKind::parasitic && last_failure && *last_failure > *last_pass) {
      it.state = DueState::after_failed_check;
      it.why = "a check failed after the last passing determination";
    } else if (interval > 0.0) {
      it.valid_until_utc_s = *last_pass + interval;
    }
    out.push_back(it);
  }
  return out;
}

}  // namespace loadtrim::core
