#include "core/strategy.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <map>

#include "core/setting.hpp"

namespace loadtrim::core {

HoldPoint hold_point(double speed_kmh, std::span<const double> forces_n) {
  HoldPoint hp;
  hp.speed_kmh = speed_kmh;
  hp.samples = static_cast<int>(forces_n.size());
  if (forces_n.empty()) return hp;
  double s1 = 0.0, s2 = 0.0;
  for (double f : forces_n) {
    s1 += f;
    s2 += f * f;
  }
  const double n = static_cast<double>(forces_n.size());
  hp.force_n = s1 / n;
  hp.force_sd_n = std::sqrt(std::max(0.0, s2 / n - hp.force_n * hp.force_n));
  return hp;
}

HoldPlan plan_hold_points(const LossMap& map, double from_kmh, double speed_limit_kmh) {
  HoldPlan plan;
  double v_prev = from_kmh;
  for (double v : map.speeds_kmh) {
    if (!(v <= speed_limit_kmh - 1.0)) {  // a NaN limit skips every point
      plan.skipped_kmh.push_back(v);
      continue;
    }
    plan.speeds_kmh.push_back(v);
    plan.planned_s +=
        std::abs(v - v_prev) / (3.6 * kHoldRampMps2) + kHoldSettleS + map.settle_s + map.average_s;
    v_prev = v;
  }
  return plan;
}

const char* to_string(FirstSetting f) {
  switch (f) {
    case FirstSetting::standard:
      return "standard";
    case FirstSetting::fleet:
      return "fleet";
    case FirstSetting::loss_map:
      return "loss-map";
    case FirstSetting::history:
      return "history";
  }
  return "unknown";
}

bool parse(const std::string& s, FirstSetting& out) {
  for (FirstSetting f :
       {FirstSetting::standard, FirstSetting::fleet, FirstSetting::loss_map, FirstSetting::history})
    if (s == to_string(f)) return out = f, true;
  return false;
}

RoadLoad FleetLossModel::estimate(double tm, AxleLayout layout) const {
  const Line& l = layout == AxleLayout::two_axle && two_axle.rows >= 10 ? two_axle : single_axle;
  return l.at_zero_kg + l.per_kg.scaled(tm);
}

FleetLossModel fit_fleet_loss(std::span<const FleetRow> rows) {
  FleetLossModel m;
  for (AxleLayout layout : {AxleLayout::single_axle, AxleLayout::two_axle}) {
    std::vector<double> mass, c0, c1, c2;
    for (const auto& r : rows) {
      if (r.layout != layout) continue;
      const RoadLoad loss = r.target - r.set;
      const double l20 = loss.force_n(20.0), l130 = loss.force_n(130.0);
      if (!(l20 >= 0.0 && l20 <= 600.0 && l130 >= 0.0 && l130 <= 600.0)) continue;
      mass.push_back(r.test_mass_kg);
      c0.push_back(loss.f0_n);
      c1.push_back(loss.f1_n_per_kmh);
      c2.push_back(loss.f2_n_per_kmh2);
    }
    FleetLossModel::Line& line = layout == AxleLayout::two_axle ? m.two_axle : m.single_axle;
    const auto p0 = fit_polynomial(mass, c0, 1), p1 = fit_polynomial(mass, c1, 1),
               p2 = fit_polynomial(mass, c2, 1);
    if (!p0.ok || !p1.ok || !p2.ok) continue;
    line.at_zero_kg = {p0.coefficients(0), p1.coefficients(0), p2.coefficients(0)};
    line.per_kg = {p0.coefficients(1), p1.coefficients(1), p2.coefficients(1)};
    line.rows = static_cast<int>(mass.size());
  }
  return m;
}

RoadLoadFit fit_loss_map(std::span<const HoldPoint> points) {
  std::vector<double> v, f;
  for (const auto& p : points) {
    v.push_back(p.speed_kmh);
    f.push_back(p.force_n);
  }
  return fit_road_load(v, f);
}

CoastCorrection fit_coast_correction(const RoadLoad& hold_map, std::span<const CoastPoint> points,
                                     double lo_kmh, double hi_kmh) {
  CoastCorrection c;
  std::vector<double> v, d;
  for (const auto& p : points)
    if (std::isfinite(p.speed_kmh) && p.speed_kmh > 0.0 && std::isfinite(p.coasting_loss_n)) {
      v.push_back(p.speed_kmh);
      d.push_back(hold_map.force_n(p.speed_kmh) - p.coasting_loss_n);
    }
  c.points = static_cast<int>(v.size());
  if (v.empty()) {
    c.why = "no usable coast point";
    return c;
  }
  const double vmin = *std::min_element(v.begin(), v.end()), vmax = *std::max_element(v.begin(), v.end());
  const bool with_d2 = v.size() >= 3 && vmax - vmin >= kCoastMinSpanKmh;
  if (!with_d2) {
    // Too few points or too narrow a span for d2: the difference as a constant, the mean of the points.
    double s = 0.0;
    for (double x : d) s += x;
    c.d0_n = s / static_cast<double>(d.size());
  } else {
    // Least squares of d = d0 + d2·x, x = v² (the normal equations of a straight line in x).
    const double n = static_cast<double>(v.size());
    double sx = 0, sy = 0, sxx = 0, sxy = 0;
    for (std::size_t i = 0; i < v.size(); ++i) {
      const double x = v[i] * v[i];
      sx += x;
      sy += d[i];
      sxx += x * x;
      sxy += x * d[i];
    }
    const double den = n * sxx - sx * sx;
    c.d2_n_per_kmh2 = (n * sxy - sx * sy) / den;
    c.d0_n = (sy - c.d2_n_per_kmh2 * sx) / n;
  }
  // The points' spread about d(v), with the degrees of freedom the fit left (none: 0).
  const std::size_t params = with_d2 ? 2 : 1;
  if (v.size() > params) {
    double ss = 0.0;
    for (std::size_t i = 0; i < v.size(); ++i) {
      const double r = d[i] - (c.d0_n + c.d2_n_per_kmh2 * v[i] * v[i]);
      ss += r * r;
    }
    c.residual_sd_n = std::sqrt(ss / static_cast<double>(v.size() - params));
  }
  if (!std::isfinite(c.d0_n) || !std::isfinite(c.d2_n_per_kmh2) || !std::isfinite(c.residual_sd_n)) {
    c.why = "the difference could not be fitted (not finite)";
    return c;
  }
  if (c.residual_sd_n > kCoastMaxResidualSdN) {
    c.why = "the coast points disagree: residual sd " + num(c.residual_sd_n, 1) + " N about d(v), above " +
            num(kCoastMaxResidualSdN) + " N";
    return c;
  }
  for (double at : {std::min(lo_kmh, vmin), std::max(hi_kmh, vmax)}) {
    const double dv = c.d0_n + c.d2_n_per_kmh2 * at * at;
    if (!(std::abs(dv) <= kCoastMaxDifferenceN)) {
      c.why = "the difference " + num(dv, 1) + " N at " + num(at) + " km/h is beyond ±" +
              num(kCoastMaxDifferenceN) + " N";
      return c;
    }
  }
  c.ok = true;
  return c;
}

std::optional<HistoryEntry> history_from_store(const std::string& this_cell,
                                               std::span<const StoredSession> vehicle_sessions,
                                               std::span<const CellPair> pairs, int max_pairs) {
  // The vehicle's latest accepted session on each cell (ties in time: the first given).
  std::map<std::string, const StoredSession*> latest;
  for (const auto& s : vehicle_sessions) {
    auto& l = latest[s.cell];
    if (!l || s.utc > l->utc) l = &s;
  }
  if (latest.empty()) return std::nullopt;
  HistoryEntry h;
  HistoryBasis b;
  b.source = "store";
  const StoredSession* from = nullptr;
  std::vector<CellPair> used;
  if (auto here = latest.find(this_cell); here != latest.end()) {
    from = here->second;
    b.note = "the vehicle's latest accepted session on this cell: not corrected";
  } else {
    // The other cell with the most pairs; ties: the cell of the newer session.
    std::map<std::string, std::vector<CellPair>> by_cell;
    for (const auto& p : pairs)
      if (p.here.cell == this_cell && latest.count(p.there.cell)) by_cell[p.there.cell].push_back(p);
    for (const auto& [cell, s] : latest) {
      const std::size_t n = by_cell.count(cell) ? by_cell[cell].size() : 0;
      const std::size_t best = from && by_cell.count(from->cell) ? by_cell[from->cell].size() : 0;
      if (!from || n > best || (n == best && s->utc > from->utc)) from = s;
    }
    used = by_cell[from->cell];
    b.pairs_available = static_cast<int>(used.size());
    // The newest pairs first (ties: by vehicle, so the choice does not depend on the order given).
    std::sort(used.begin(), used.end(), [](const CellPair& a, const CellPair& c) {
      return a.newest_utc() != c.newest_utc() ? a.newest_utc() > c.newest_utc() : a.vehicle < c.vehicle;
    });
    if (static_cast<int>(used.size()) > std::max(0, max_pairs)) used.resize(std::max(0, max_pairs));
    b.same_cell = false;
    if (used.empty()) {
      b.note = "no vehicle run on both cells: not corrected";
    } else {
      // The arithmetic mean, per coefficient, of (loss here − loss there) over the pairs used.
      RoadLoad sum;
      for (const auto& p : used) sum = sum + (p.here.loss() - p.there.loss());
      h.correction = sum.scaled(1.0 / static_cast<double>(used.size()));
      b.note = "from cell " + from->cell + ", corrected by the mean difference of " +
               std::to_string(used.size()) + " vehicle(s) run on both cells";
    }
  }
  b.note += "; " + history_loss_note(from->measured.has_value());
  h.utc = from->utc;
  h.target = from->target;
  h.final_set = from->final_set;
  h.measured = from->measured;
  // The day-to-day correction compares warm-ups on the same cell only (another dyno's hold reads its own).
  if (b.same_cell) h.warm_up = from->warm_up;
  b.session_id = from->id;
  b.session_folder = from->folder;
  b.source_cell = from->cell;
  b.pairs = std::move(used);
  b.correction = h.correction;
  h.basis = std::move(b);
  return h;
}

DayScale day_to_day_scale(const WarmUpRecord& then, const WarmUpRecord& now) {
  DayScale d;
  char buf[200];
  if (!std::isfinite(then.speed_kmh) || !std::isfinite(now.speed_kmh) ||
      std::abs(then.speed_kmh - now.speed_kmh) > kDayScaleSpeedKmh) {
    std::snprintf(buf, sizeof buf, "the warm-ups were held at %.1f and %.1f km/h (not the same speed)",
                  then.speed_kmh, now.speed_kmh);
    d.why = buf;
    return d;
  }
  auto last_t = [](const WarmUpRecord& r) {
    double t = -1.0;
    for (const auto& w : r.windows)
      if (std::isfinite(w.t_s) && std::isfinite(w.force_n)) t = std::max(t, w.t_s);
    return t;
  };
  d.at_s = std::min(last_t(then), last_t(now));
  if (!(d.at_s >= kDayScaleMinHeldS)) {
    std::snprintf(buf, sizeof buf, "a warm-up's windows end before %.0f s", kDayScaleMinHeldS);
    d.why = buf;
    d.at_s = 0.0;
    return d;
  }
  auto mean_near = [&](const WarmUpRecord& r, int& count) {
    double sum = 0.0;
    count = 0;
    for (const auto& w : r.windows)
      if (std::isfinite(w.t_s) && std::isfinite(w.force_n) && w.t_s > d.at_s - kDayScaleSpanS &&
          w.t_s <= d.at_s) {
        sum += w.force_n;
        ++count;
      }
    return count > 0 ? sum / count : 0.0;
  };
  d.then_n = mean_near(then, d.windows_then);
  d.now_n = mean_near(now, d.windows_now);
  if (d.windows_then < 2 || d.windows_now < 2) {
    std::snprintf(buf, sizeof buf, "fewer than two windows in the last %.0f s of a warm-up", kDayScaleSpanS);
    d.why = buf;
    return d;
  }
  if (!(d.then_n > 0.0) || !(d.now_n > 0.0)) {
    d.why = "a warm-up's mean force is not positive";
    return d;
  }
  const double r = d.now_n / d.then_n;
  if (!(r >= kDayScaleMin && r <= kDayScaleMax)) {
    std::snprintf(buf, sizeof buf,
                  "today's warm-up force is %.3f times the earlier one's (outside %.2f to %.2f)", r,
                  kDayScaleMin, kDayScaleMax);
    d.why = buf;
    return d;
  }
  d.used = true;
  d.ratio = r;
  return d;
}

std::string history_loss_note(bool measured) {
  return measured ? "its loss as measured at its last coast-down (that curve less the accepted setting)"
                  : "its loss as target − accepted set (no measured curve: only an iterative session's is "
                    "used)";
}

FirstSettingChoice choose_first_setting(const FirstSettingInputs& in) {
  FirstSettingChoice c;
  c.used = to_string(in.requested);
  if (in.target_file_set) {
    c.used = "target-file";
    c.set = *in.target_file_set;
    return c;
  }
  const bool fleet_ok = in.fleet && in.fleet->ok();
  // The history's loss, scaled by the day-to-day correction when it can be made.
  auto history_loss = [&] {
    c.loss = in.history->loss();
    c.history_basis = in.history->basis;
    DayScale d;
    if (in.history->basis && !in.history->basis->same_cell)
      d.why = "the earlier session was on another cell (its warm-up hold was read on other rollers)";
    else if (!in.warm_up_today)
      d.why =
          "this session's initial warm-up hold is not known (a pause or a resume before the first setting, "
          "fewer than two windows, or no force reported in speed hold)";
    else if (!in.history->warm_up)
      d.why = "the earlier session's initial warm-up hold is not known (not recorded, or interrupted)";
    else
      d = day_to_day_scale(*in.history->warm_up, *in.warm_up_today);
    if (d.used) c.loss = c.loss->scaled(d.ratio);
    c.day_scale = std::move(d);
  };
  auto fallback = [&](const std::string& reason) {
    c.why += (c.why.empty() ? "" : "; ") + reason;
    if (in.history) {
      c.used = to_string(FirstSetting::history);
      history_loss();
    } else if (fleet_ok) {
      c.used = to_string(FirstSetting::fleet);
      c.loss = in.fleet->estimate(in.test_mass_kg, in.layout);
    } else {
      c.used = to_string(FirstSetting::standard);
    }
  };
  switch (in.requested) {
    case FirstSetting::standard:
      break;
    case FirstSetting::fleet:
      if (fleet_ok) {
        c.loss = in.fleet->estimate(in.test_mass_kg, in.layout);
      } else {
        c.used = to_string(FirstSetting::standard);
        c.why = "no fleet data";
      }
      break;
    case FirstSetting::history:
      if (in.history) {
        history_loss();
        c.history_utc = in.history->utc;
      } else {
        fallback("no earlier accepted session of this vehicle");
      }
      break;
    case FirstSetting::loss_map: {
      const RoadLoadFit fit = fit_loss_map(in.loss_map);
      if (fit.ok) {
        c.loss = fit.coefficients;
        c.map_fit = fit.coefficients;
        c.map_residual_sd_n = fit.residual_sd_n;
        if (in.coasts_asked || !in.coast_points.empty()) {
          c.coast_correction = fit_coast_correction(fit.coefficients, in.coast_points, in.lo_kmh, in.hi_kmh);
          if (c.coast_correction->ok) c.loss = fit.coefficients - c.coast_correction->as_road_load();
        }
      } else {
        fallback("no loss map (" + (in.loss_map.empty() ? std::string("not measured") : fit.message) + ")");
      }
      break;
    }
  }
  c.set =
      c.loss ? setting_for_loss(in.target, *c.loss) : standard_initial_setting(in.target, in.layout, in.rule);
  return c;
}

}  // namespace loadtrim::core
