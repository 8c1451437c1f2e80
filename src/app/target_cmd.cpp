// `loadtrim target`: prepare a target file from any supported form (a target file in metric or US units, the
// three coefficients in metric or US units on the command line, or a row of an EPA-format CSV), and show what
// a session will work with: the exact conversions, the masses and the dyno inertia by the profile's rules,
// the target force and the predicted coast-down time at each reference speed, the plausibility findings, and
// the dyno's initial setting under each first-setting strategy. Nothing connects and nothing moves.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <iostream>
#include <limits>
#include <memory>
#include <optional>
#include <utility>

#include "app/exit_codes.hpp"
#include "app/session_runner.hpp"
#include "app/store_hook.hpp"
#include "app/subcommands.hpp"
#include "config/cell_loader.hpp"
#include "config/epa_csv.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "config/target_writer.hpp"
#include "core/combination.hpp"
#include "core/predict.hpp"
#include "core/setting.hpp"
#include "core/strategy.hpp"
#include "core/trace_analysis.hpp"
#include "core/units.hpp"
#include "inprocess/sim_rows.hpp"
#include "record/data_root.hpp"
#include "record/road_load_json.hpp"
#include "record/session_folder.hpp"
#include "record/vehicle_history.hpp"

namespace loadtrim::app {

namespace {

struct TargetOptions {
  std::string from, epa, epa_id, cell, profile = "wltp-iterative", out, id, description, drive = "front",
                                       history;
  std::vector<double> metric, us;
  int epa_line = 0;
  double test_mass_kg = 0, test_mass_lb = 0, mass_in_running_order_kg = 0, rotating_mass_kg = -1,
         max_speed_kmh = 180.0, cycle_max_speed_kmh = 0;
  std::string data_dir;  // the lab's data root, for its record store (the history strategy)
  bool json = false;
  bool estimate_mro = false;  // --estimate-mass-in-running-order: the estimate accepted explicitly (recorded)
  std::vector<std::string> given;  // the options given on the command line, by name
};

// The options a source takes its facts from itself: given with --from (the file states them) or --epa (the
// row does), they would be ignored, so the command refuses them by name rather than ignore them silently.
void refuse_ignored(const TargetOptions& o, const std::string& kind) {
  if (kind != "file" && kind != "epa") return;
  const std::vector<std::string> from_file = {"--id",
                                              "--description",
                                              "--test-mass-kg",
                                              "--test-mass-lb",
                                              "--mass-in-running-order-kg",
                                              "--rotating-mass-kg",
                                              "--estimate-mass-in-running-order",
                                              "--drive",
                                              "--max-speed-kmh"};
  const std::vector<std::string> from_row = {"--id", "--description", "--test-mass-kg", "--test-mass-lb",
                                             "--drive"};
  std::string ignored;
  for (const auto& name : kind == "file" ? from_file : from_row)
    for (const auto& g : o.given)
      if (g == name) ignored += (ignored.empty() ? "" : ", ") + name;
  if (ignored.empty()) return;
  throw config::InputError(
      "command line",
      {{core::Problem::Severity::error, kind == "file" ? "--from" : "--epa",
        "takes the vehicle's facts from the " + std::string(kind == "file" ? "target file" : "CSV row") +
            ", so " + ignored + " would be ignored: drop " +
            (ignored.find(',') == std::string::npos ? "it" : "them") + ", or edit the " +
            (kind == "file" ? "file" : "target file written with --out") + " instead"}});
}

// --epa-line and --epa-id each pick the row of the CSV --epa names: both at once (the line was used, the id
// not looked at), either without --epa (ignored), or --epa with neither (no row) is refused, naming them; so
// is --estimate-mass-in-running-order beside a mass given (the estimate would be ignored).
void check_row_choice(const TargetOptions& o) {
  auto given = [&](const char* name) {
    return std::find(o.given.begin(), o.given.end(), name) != o.given.end();
  };
  const bool line = given("--epa-line"), id = given("--epa-id");
  const auto E = core::Problem::Severity::error;
  core::Problems ps;
  if (line && id)
    ps.push_back({E, "--epa-line",
                  "and --epa-id both pick the CSV row (--epa-line " + std::to_string(o.epa_line) +
                      ", --epa-id " + o.epa_id + "): give one of them"});
  else if ((line || id) && o.epa.empty())
    ps.push_back(
        {E, line ? "--epa-line" : "--epa-id",
         "picks a row of the CSV that --epa names, and no --epa is given: give --epa CSV, or drop it"});
  else if (!o.epa.empty() && !line && !id)
    ps.push_back({E, "--epa", "needs the row to take: give --epa-line N or --epa-id ID"});
  // The estimate is used only when no mass is given: with one it would be ignored. (With --from all three are
  // the file's, and refuse_ignored names every one given.)
  if (o.from.empty() && given("--estimate-mass-in-running-order"))
    for (const char* mass : {"--mass-in-running-order-kg", "--rotating-mass-kg"})
      if (given(mass))
        ps.push_back({E, "--estimate-mass-in-running-order",
                      std::string("accepts an estimate when no mass is given, and ") + mass +
                          " is given: drop one of them"});
  if (!ps.empty()) throw config::InputError("command line", ps);
}

// How the mass in running order was settled: given, or an estimate the operator accepted explicitly. Without
// either (and without a rotating mass), nothing is invented: the command is refused, naming the options.
// `estimate`: the estimate this source offers and how it is made.
void settle_mass_in_running_order(const TargetOptions& o, core::VehicleTarget& v, double estimate_kg,
                                  const std::string& how, std::string& basis) {
  if (o.rotating_mass_kg >= 0) {
    v.rotating_mass_kg = o.rotating_mass_kg;
    v.mass_in_running_order_kg.reset();
    v.mass_in_running_order_estimated = false;
    basis = "not used: the rotating mass is given (--rotating-mass-kg)";
    return;
  }
  if (o.mass_in_running_order_kg > 0) {
    v.mass_in_running_order_kg = o.mass_in_running_order_kg;
    v.mass_in_running_order_estimated = false;
    basis = "given (--mass-in-running-order-kg)";
    return;
  }
  if (o.estimate_mro) {
    v.mass_in_running_order_kg = estimate_kg;
    v.mass_in_running_order_estimated = true;
    basis = "estimated: " + how + " (--estimate-mass-in-running-order; recorded in the target file)";
    return;
  }
  throw config::InputError(
      "command line",
      {{core::Problem::Severity::error, "--mass-in-running-order-kg",
        "is missing: m_r follows from the mass in running order by the profile's rule. Give "
        "--mass-in-running-order-kg (or --rotating-mass-kg), or accept the estimate (" +
            how + ", " + core::num(estimate_kg, 1) + " kg) with --estimate-mass-in-running-order"}});
}

std::string where_from(const TargetOptions& o) {
  int n = !o.from.empty() + !o.metric.empty() + !o.us.empty() + !o.epa.empty();
  if (n != 1)
    throw config::InputError("command line",
                             {{core::Problem::Severity::error, "target",
                               "give exactly one of --from FILE, --metric F0 F1 F2, --us A B C, --epa CSV"}});
  return !o.from.empty() ? "file" : !o.metric.empty() ? "metric" : !o.us.empty() ? "us" : "epa";
}

// `from_file`: the target file --from names, already loaded (its profile decides `profile`).
core::VehicleTarget build(const TargetOptions& o, const core::Profile& profile,
                          const std::optional<core::VehicleTarget>& from_file, std::string& source,
                          std::string& mro_basis) {
  const std::string kind = where_from(o);
  core::VehicleTarget v;
  if (kind == "file") {
    v = *from_file;
    if (o.cycle_max_speed_kmh > 0) v.cycle_max_speed_kmh = o.cycle_max_speed_kmh;
    source = "target file " + o.from;
    mro_basis = v.rotating_mass_kg                  ? "not used: the file gives the rotating mass"
                : v.mass_in_running_order_estimated ? "estimated (the file says so)"
                                                    : "as the file gives it";
    return v;
  }
  if (kind == "epa") {
    const config::EpaFile f = config::read_epa_csv(o.epa);
    for (const auto& r : f.rows)
      if ((o.epa_line > 0 && r.line == o.epa_line) || (!o.epa_id.empty() && r.id == o.epa_id)) {
        v = config::target_from_epa(r, profile.name, o.max_speed_kmh);
        // A row that cannot give a target is refused before anything is shown, naming its line and column.
        if (const core::Problems bad = config::row_errors(r, core::plausibility(v)); !bad.empty())
          throw config::InputError(o.epa, bad);
        if (o.cycle_max_speed_kmh > 0) v.cycle_max_speed_kmh = o.cycle_max_speed_kmh;
        // The row gives the equivalent test weight only: its mass in running order is an estimate.
        settle_mass_in_running_order(o, v, *v.mass_in_running_order_kg,
                                     "the row's equivalent test weight less 100 kg", mro_basis);
        source =
            o.epa + " line " + std::to_string(r.line) + " (US units: A, B, C and the equivalent test weight)";
        return v;
      }
    // Not found: why the row asked for is not there, or cannot be used.
    if (o.epa_line > 0) {
      for (const auto& sk : f.skipped)
        if (sk.line == o.epa_line)
          throw config::InputError(
              o.epa,
              {{core::Problem::Severity::error, "line " + std::to_string(sk.line) + ", column " + sk.column,
                sk.message + "; the row cannot be used (--epa-line " + std::to_string(o.epa_line) + ")"}});
      throw config::InputError(
          o.epa, {{core::Problem::Severity::error, "--epa-line",
                   "is " + std::to_string(o.epa_line) + ": " +
                       (o.epa_line == 1            ? "line 1 is the header"
                        : o.epa_line > f.last_line ? "the file ends at line " + std::to_string(f.last_line)
                                                   : "that line is empty") +
                       "; allowed a data row's line, 2 to " + std::to_string(f.last_line)}});
    }
    for (const auto& sk : f.skipped)
      if (!sk.id.empty() && sk.id == o.epa_id)
        throw config::InputError(
            o.epa,
            {{core::Problem::Severity::error, "line " + std::to_string(sk.line) + ", column " + sk.column,
              sk.message + "; the row cannot be used (--epa-id " + o.epa_id + ")"}});
    throw config::InputError(
        o.epa, {{core::Problem::Severity::error, "--epa-id",
                 "no row has the id \"" + o.epa_id + "\" (model_year/test_vehicle_id/test_veh_config_num)" +
                     (f.skipped.empty() ? std::string()
                                        : "; " + std::to_string(f.skipped.size()) +
                                              " row(s) of the file cannot be used, the first at line " +
                                              std::to_string(f.skipped.front().line) + ", column " +
                                              f.skipped.front().column + ": " + f.skipped.front().message)}});
  }
  core::Problems problems;
  const auto E = core::Problem::Severity::error;
  if (o.id.empty()) problems.push_back({E, "--id", "give the vehicle's id"});
  if ((o.test_mass_kg > 0) == (o.test_mass_lb > 0))
    problems.push_back({E, "--test-mass-kg", "give exactly one of --test-mass-kg and --test-mass-lb"});
  if (!core::parse(o.drive, v.drive))
    problems.push_back({E, "--drive", "\"" + o.drive + "\" is not one of front, rear, all"});
  // The coefficients typed, each against the range a target file's own key has (config::kMetricCoefficients,
  // kUsCoefficients), named as typed: "--us A: is nan, must be a finite number, allowed -1200 to 1200 lbf".
  const std::vector<double>& typed = kind == "metric" ? o.metric : o.us;
  for (std::size_t i = 0; i < 3 && i < typed.size(); ++i) {
    const config::CoefficientRange& k =
        (kind == "metric" ? config::kMetricCoefficients : config::kUsCoefficients)[i];
    if (!(typed[i] >= k.lo && typed[i] <= k.hi))
      problems.push_back({E, "--" + kind + " " + k.name,
                          "is " + core::num(typed[i]) +
                              (std::isfinite(typed[i]) ? "" : ", must be a finite number") + ", allowed " +
                              core::num(k.lo) + " to " + core::num(k.hi) + " " + k.unit});
  }
  if (!problems.empty()) throw config::InputError("command line", problems);
  v.id = o.id;
  v.description = o.description;
  v.test_mass_kg = o.test_mass_kg > 0 ? o.test_mass_kg : core::units::lb_to_kg(o.test_mass_lb);
  settle_mass_in_running_order(o, v, v.test_mass_kg, "taken equal to the test mass", mro_basis);
  v.max_speed_kmh = o.max_speed_kmh;
  if (o.cycle_max_speed_kmh > 0) v.cycle_max_speed_kmh = o.cycle_max_speed_kmh;
  v.profile = profile.name;
  if (kind == "metric") {
    v.target = {o.metric[0], o.metric[1], o.metric[2]};
    source = "metric coefficients (N, N/(km/h), N/(km/h)²)";
  } else {
    v.target = core::to_metric({o.us[0], o.us[1], o.us[2]});
    source = "US coefficients (lbf, lbf/mph, lbf/mph²), converted with the exact NIST SP 811 factors";
  }
  return v;
}

nlohmann::json coef(const core::RoadLoad& c) {
  return record::road_load_json(c);
}

int run_target(const TargetOptions& o) {
  check_row_choice(o);
  refuse_ignored(o, where_from(o));
  // --from: the file is read as `run` reads it, its warnings (an unknown key, a typo?) kept for the findings;
  // the profile is the file's own (checked against the known ones), unless --profile gives another, as for
  // `run`.
  const bool profile_given = std::find(o.given.begin(), o.given.end(), "--profile") != o.given.end();
  core::Problems file_warnings;
  std::optional<core::VehicleTarget> from_file;
  if (!o.from.empty()) {
    from_file = config::load_target(o.from, &file_warnings,
                                    profile_given ? std::vector<std::string>{} : profile_names());
    // What is tabled is what --out writes: the profile given, in the file's body as in its header.
    if (profile_given) from_file->profile = o.profile;
  }
  const std::string pfile = profile_file(from_file ? from_file->profile : o.profile);
  core::Problems profile_warnings;  // the profile file's own (printed with its name; in the JSON with "file")
  const core::Profile profile = config::load_profile(pfile, &profile_warnings);
  std::string source, mro_basis;
  core::VehicleTarget v = build(o, profile, from_file, source, mro_basis);
  if (v.profile.empty()) v.profile = profile.name;
  core::AxleLayout layout = core::axle_layout_for(v.drive);
  std::optional<controller::CellConfig> cell;
  if (!o.cell.empty()) {
    cell = config::load_cell(o.cell, adapters::tool_registry().sections());
    layout = cell->axles;
  }
  // Coefficients the operator gave in US units (--us, or a file's [target_us]): the findings on them name the
  // option or the file's key, with ranges in lbf, lbf/mph, lbf/mph² (config::in_us_units).
  const bool given_in_us = !o.us.empty() || (!o.from.empty() && v.target_given_in_us);
  const core::RoadLoadUs typed_us =
      o.us.size() == 3 ? core::RoadLoadUs{o.us[0], o.us[1], o.us[2]} : core::to_us(v.target);
  static const std::string us_options[3] = {"--us A", "--us B", "--us C"};
  static const std::string us_keys[3] = {"target_us.a_lbf", "target_us.b_lbf_per_mph",
                                         "target_us.c_lbf_per_mph2"};
  auto as_given = [&](const core::Problems& ps) {
    return given_in_us ? config::in_us_units(ps, typed_us, o.us.empty() ? us_keys : us_options) : ps;
  };
  // The file's own warnings first (with their lines), then what the checks below find that they did not say.
  core::Problems found = file_warnings;
  for (const core::Problem& p : as_given(core::plausibility(v)))
    if (std::none_of(found.begin(), found.end(),
                     [&](const core::Problem& q) { return q.message == p.message; }))
      found.push_back(p);
  // The same reference-speed rule as `run` (core::plan_reference_speeds): what is dropped and why.
  const core::ReferenceSpeedPlan plan =
      core::plan_reference_speeds(profile, v.max_speed_kmh, v.cycle_max_speed_kmh);
  if (plan.refusal)
    found.push_back({core::Problem::Severity::error, "bands.reference_speeds_kmh", *plan.refusal});
  // The rest of run's check of how the files combine (core::check_combination), so that target refuses what
  // run would refuse: the warm-up and start speeds against the vehicle's maximum, the force envelope and,
  // with
  // --cell, the cell's limits and inertia range. Without --cell the cell's limits are not known and are not
  // checked. A problem of the profile or the cell names its file.
  {
    constexpr double kUnbounded = std::numeric_limits<double>::infinity();
    const core::CellFacts facts =
        cell ? core::CellFacts{cell->max_speed_kmh,  cell->max_force_n,    cell->max_motoring_s, cell->axles,
                               cell->min_inertia_kg, cell->max_inertia_kg, cell->run_up}
             : core::CellFacts{kUnbounded, kUnbounded, kUnbounded, layout, 0.0, 0.0, std::nullopt};
    const core::CombinationProblems cp = core::check_combination(v, profile, facts);
    auto add = [&](const core::Problems& ps, const std::string& file) {
      for (core::Problem p : ps) {
        if (!file.empty()) p.key = file + ": " + p.key;
        // The plausibility checks and the reference-speed plan above may have said it already.
        const bool known = std::any_of(found.begin(), found.end(),
                                       [&](const core::Problem& q) { return q.message == p.message; });
        if (!known) found.push_back(p);
      }
    };
    add(as_given(cp.target), "");
    add(cp.profile, pfile);
    if (cell) add(cp.cell, o.cell);
  }
  // Metric coefficients typed on the command line: a finding on one names the option as well as the file's
  // key (US ones are named above, in their units).
  if (!o.metric.empty())
    for (core::Problem& p : found)
      for (std::size_t i = 0; i < 3; ++i)
        if (p.key == std::string("target.") + config::kMetricCoefficients[i].key)
          p.key = std::string("--metric ") + config::kMetricCoefficients[i].name + " (" + p.key + ")";
  const double m_r = core::resolved_rotating_mass_kg(v, profile.mass);
  const double force_mass = core::force_mass_kg(v.test_mass_kg, m_r);
  const double inertia = core::dyno_inertia_kg(v.test_mass_kg, m_r, layout, profile.mass);
  const auto times = core::predicted_band_times_s(v.target, force_mass, profile.reference_speeds_kmh,
                                                  profile.band_half_width_kmh);
  const core::RoadLoadUs us = core::to_us(v.target);

  // Initial settings, as the session would choose them before it has measured anything (no loss map yet):
  // each strategy through the session's own choice (core::choose_first_setting); a strategy whose data is
  // missing shows why instead of the setting the session would fall back to.
  std::optional<core::FleetLossModel> fleet = fleet_model(default_fleet_csv());  // first: its messages first
  // The history as a session on this cell would find it: the lab's record store when it can be used, else
  // the history file (docs/store.md, "The history first setting").
  std::optional<core::HistoryEntry> hist;
  nlohmann::json hist_lookup;
  if (cell) {
    // The folder `run` saves to: <data root>/history unless given.
    const std::string dir = o.history.empty() ? record::find_data_root(o.data_dir).history() : o.history;
    HistoryFound found =
        find_history(record::find_data_root(o.data_dir), cell->name, v.id,
                     record::vehicle_history_file_to_read(dir, cell->name, v.id),
                     [&](std::string& why_not) { return history_for(dir, *cell, v, &why_not); });
    hist = std::move(found.entry);
    hist_lookup = std::move(found.lookup);
  }
  core::FirstSettingInputs choice_in{.requested = core::FirstSetting::standard,
                                     .target = v.target,
                                     .test_mass_kg = v.test_mass_kg,
                                     .layout = layout,
                                     .rule = profile.initial,
                                     .target_file_set = std::nullopt,  // each strategy, not the file's set
                                     .fleet = std::move(fleet),
                                     .history = hist,
                                     // no warm-up here: the session scales the history by its own
                                     .warm_up_today = std::nullopt,
                                     .loss_map = {},
                                     .coast_points = {}};
  auto choice = [&](core::FirstSetting f) {
    choice_in.requested = f;
    return core::choose_first_setting(choice_in);
  };
  auto chosen = [](const core::FirstSettingChoice& c, core::FirstSetting f) {
    return c.used == core::to_string(f);
  };
  nlohmann::json initial = nlohmann::json::array();
  initial.push_back({{"strategy", "standard"},
                     {"set", coef(choice(core::FirstSetting::standard).set)},
                     {"note", "the standard's initial setting (docs/standards.md §3, from memory)"}});
  if (const auto c = choice(core::FirstSetting::fleet); chosen(c, core::FirstSetting::fleet))
    initial.push_back(
        {{"strategy", "fleet"},
         {"set", coef(c.set)},
         {"note", "target minus the loss the EPA fleet shows at this test mass and axle layout"}});
  else
    initial.push_back({{"strategy", "fleet"}, {"note", "no fleet data: the session falls back to standard"}});
  initial.push_back({{"strategy", "loss-map"},
                     {"note",
                      "measured in speed hold at the end of the warm-up, in the session; falls back to "
                      "standard if it cannot be measured"}});
  if (const auto c = choice(core::FirstSetting::history); chosen(c, core::FirstSetting::history)) {
    std::string note = "target minus the loss of the accepted session of " + *c.history_utc;
    if (c.history_basis) {
      const core::HistoryBasis& b = *c.history_basis;
      note += b.session_id.empty() ? " (the history file " + b.where + ")"
                                   : " (session " + b.session_id + " on cell " + b.source_cell +
                                         ", from the store " + b.where + "): " + b.note;
      if (!b.pairs.empty())
        note += "; correction f0 " + std::to_string(b.correction.f0_n) + " N, f1 " +
                std::to_string(b.correction.f1_n_per_kmh) + " N/(km/h), f2 " +
                std::to_string(b.correction.f2_n_per_kmh2) + " N/(km/h)^2";
    }
    if (!c.history_basis || c.history_basis->same_cell)
      note +=
          "; a session scales this loss by its own warm-up hold force over the earlier session's (same cell; "
          "docs/store.md, \"The history first setting\"), which this command cannot know";
    nlohmann::json h = {{"strategy", "history"}, {"set", coef(c.set)}, {"note", note}};
    if (c.loss) h["loss"] = coef(*c.loss);
    if (!hist_lookup.is_null()) h["lookup"] = hist_lookup;
    initial.push_back(h);
  } else {
    nlohmann::json h = {{"strategy", "history"},
                        {"note", cell ? "no earlier accepted session of this vehicle (" +
                                            hist_lookup.value("note", std::string()) + ")"
                                      : "give --cell to look up the history (the store was not looked in)"}};
    if (!hist_lookup.is_null()) h["lookup"] = hist_lookup;
    initial.push_back(h);
  }

  nlohmann::json rows = nlohmann::json::array();
  for (std::size_t j = 0; j < profile.reference_speeds_kmh.size(); ++j) {
    const double s = profile.reference_speeds_kmh[j];
    nlohmann::json r = {{"speed_kmh", s},
                        {"speed_mph", core::units::kmh_to_mph(s)},
                        {"force_n", v.target.force_n(s)},
                        {"force_lbf", core::units::n_to_lbf(v.target.force_n(s))}};
    // The band time the standard's formula turns back into F_tj (F = (1/3.6)·(TM + m_r)·2Δv/Δt,
    // docs/standards.md §2), and the exact coast time through the band under the target (closed form,
    // docs/standards.md §6.4).
    r["band_time_s"] = core::band_time_s(force_mass, profile.band_half_width_kmh, v.target.force_n(s));
    if (times[j]) r["band_time_exact_s"] = *times[j];
    for (const auto& d : plan.dropped)
      if (d.speed_kmh == s) r["note"] = "dropped: " + d.why;
    rows.push_back(r);
  }
  nlohmann::json warnings = nlohmann::json::array();
  for (const auto& p : found)
    warnings.push_back({{"severity", p.severity == core::Problem::Severity::error ? "error" : "warning"},
                        {"key", p.key},
                        {"message", p.message}});
  for (const auto& p : profile_warnings)
    warnings.push_back({{"severity", "warning"}, {"key", p.key}, {"message", p.message}, {"file", pfile}});

  // --out: written only when the target is accepted, and only after the prepared text reads back through the
  // loader as what was prepared; until then nothing is written, so a refused target never replaces a file
  // already there (record::write_durable then writes a temporary file and renames it over).
  const bool errors = core::has_errors(found);
  std::string written, not_written;
  if (!o.out.empty() && errors)
    not_written = "not written: the target is refused (the errors above); " + o.out + " is left as it was";
  if (!o.out.empty() && !errors) {
    std::string err;
    const std::string text =
        config::target_toml(v, "Prepared by loadtrim target from " + source + "\non " + record::utc_now() +
                                   " for profile " + profile.name + "\nmass in running order: " + mro_basis);
    core::VehicleTarget back;
    try {
      back = config::parse_target(text, o.out);
    } catch (const config::InputError& e) {
      std::cerr << "loadtrim target: the file prepared for --out " << o.out << " does not read back:\n"
                << e.what() << "nothing was written; " << o.out << " is left as it was\n";
      return kBadInput;
    }
    if (!(back.target == v.target) || back.test_mass_kg != v.test_mass_kg ||
        back.mass_in_running_order_estimated != v.mass_in_running_order_estimated) {
      std::cerr << "loadtrim target: the file prepared for --out " << o.out
                << " does not read back as prepared; nothing was written\n";
      return kInternalError;
    }
    // README step 3 writes into targets/ of a fresh clone: the folder is made when it is missing.
    const std::filesystem::path parent = std::filesystem::path(o.out).parent_path();
    std::error_code ec;
    if (!parent.empty() && !std::filesystem::is_directory(parent, ec)) {
      std::filesystem::create_directories(parent, ec);
      if (ec) {
        std::cerr << "loadtrim target: cannot create the folder " << parent.string() << " for --out " << o.out
                  << ": " << ec.message() << "; nothing was written\n";
        return kBadInput;
      }
    }
    if (!record::write_durable(o.out, text, err)) {
      std::cerr << "loadtrim target: cannot write " << o.out << ": " << err << "\n";
      return kRecordFailure;
    }
    written = o.out;
  }
  if (o.json) {
    nlohmann::json j = {
        {"vehicle", v.id},
        {"source", source},
        {"profile", profile.name},
        {"target", coef(v.target)},
        {"target_us",
         {{"a_lbf", us.a_lbf}, {"b_lbf_per_mph", us.b_lbf_per_mph}, {"c_lbf_per_mph2", us.c_lbf_per_mph2}}},
        {"test_mass_kg", v.test_mass_kg},
        {"mass_in_running_order",
         {{"kg", v.mass_in_running_order_kg ? nlohmann::json(*v.mass_in_running_order_kg) : nlohmann::json()},
          {"estimated", v.mass_in_running_order_estimated},
          {"basis", mro_basis}}},
        {"rotating_mass_kg", m_r},
        {"force_mass_kg", force_mass},
        {"dyno_inertia_kg", inertia},
        {"axles", core::to_string(layout)},
        {"half_band_kmh", profile.band_half_width_kmh},
        {"reference_speeds_kmh", plan.kept_kmh},
        {"rows", rows},
        {"findings", warnings},
        {"initial_settings", initial},
        {"written", written}};
    std::printf("%s\n", j.dump().c_str());
  } else {
    std::printf("vehicle %s, from %s\n", v.id.c_str(), source.c_str());
    std::printf("target (exact):  f0 %.10g N, f1 %.10g N/(km/h), f2 %.10g N/(km/h)^2\n", v.target.f0_n,
                v.target.f1_n_per_kmh, v.target.f2_n_per_kmh2);
    std::printf("         in US:  A %.10g lbf, B %.10g lbf/mph, C %.10g lbf/mph^2\n", us.a_lbf,
                us.b_lbf_per_mph, us.c_lbf_per_mph2);
    const core::RoadLoad r = core::rounded(v.target, profile.rounding);
    std::printf("  as reported:  f0 %.1f N, f1 %.3f N/(km/h), f2 %.5f N/(km/h)^2 (rounding of the profile)\n",
                r.f0_n, r.f1_n_per_kmh, r.f2_n_per_kmh2);
    std::printf(
        "masses: TM %.1f kg, m_r %.2f kg, forces with TM + m_r = %.2f kg; dyno inertia %.2f kg (%s, profile "
        "%s)\n",
        v.test_mass_kg, m_r, force_mass, inertia, core::to_string(layout), profile.name.c_str());
    std::printf(
        "mass in running order: %s%s\n",
        v.mass_in_running_order_kg ? (core::num(*v.mass_in_running_order_kg, 1) + " kg, ").c_str() : "",
        mro_basis.c_str());
    std::printf("\n  v (km/h)   F_t (N)   Δt by the formula (s)   exact coast time (s)   [band ±%.1f km/h]\n",
                profile.band_half_width_kmh);
    for (const auto& row : rows)
      std::printf("  %8.1f  %8.1f   %21s   %20s   %s\n", row["speed_kmh"].get<double>(),
                  row["force_n"].get<double>(), core::num(row["band_time_s"].get<double>(), 3).c_str(),
                  row.contains("band_time_exact_s")
                      ? core::num(row["band_time_exact_s"].get<double>(), 3).c_str()
                      : "never",
                  row.value("note", "").c_str());
    std::printf("\ninitial dyno setting by strategy:\n");
    for (const auto& i : initial) {
      if (i.contains("set")) {
        const core::RoadLoad c = record::road_load_from_json(i["set"]);
        std::printf("  %-9s f0 %8.2f N, f1 %8.4f N/(km/h), f2 %8.5f N/(km/h)^2   %s\n",
                    i["strategy"].get<std::string>().c_str(), c.f0_n, c.f1_n_per_kmh, c.f2_n_per_kmh2,
                    i["note"].get<std::string>().c_str());
      } else
        std::printf("  %-9s %s\n", i["strategy"].get<std::string>().c_str(),
                    i["note"].get<std::string>().c_str());
    }
    if (!found.empty()) std::cerr << config::format_problems(o.from.empty() ? "target" : o.from, found);
    if (!profile_warnings.empty()) std::cerr << config::format_problems(pfile, profile_warnings);
    if (!written.empty()) std::printf("\nwritten: %s (read back: identical)\n", written.c_str());
  }
  if (!not_written.empty()) std::cerr << not_written << "\n";
  return errors ? kBadInput : kAccepted;
}

}  // namespace

void register_target_command(CLI::App& app, Runner& run) {
  auto o = std::make_shared<TargetOptions>();
  auto* s = app.add_subcommand("target",
                               "prepare a target file from metric, US or EPA-row targets; show forces, "
                               "predicted times and initial settings");
  s->add_option("--from", o->from, "a target file (metric [target] or US [target_us])");
  s->add_option("--metric", o->metric, "f0 f1 f2 in N, N/(km/h), N/(km/h)^2")->expected(3);
  s->add_option("--us", o->us, "A B C in lbf, lbf/mph, lbf/mph^2")->expected(3);
  s->add_option("--epa", o->epa, "an EPA-format CSV (samples/data)");
  s->add_option("--epa-line", o->epa_line, "the row's line in the CSV")->check(CLI::PositiveNumber);
  s->add_option("--epa-id", o->epa_id, "the row's vehicle id (model year / test vehicle / configuration)");
  s->add_option("--id", o->id, "vehicle id (metric and US forms)");
  s->add_option("--description", o->description, "vehicle description");
  s->add_option("--test-mass-kg", o->test_mass_kg, "test mass TM")
      ->check(config::number_in(core::kMinTestMass_kg, core::kMaxTestMass_kg, "kg"));
  s->add_option("--test-mass-lb", o->test_mass_lb, "test mass in lb (converted exactly)")
      ->check(config::number_in(core::units::kg_to_lb(core::kMinTestMass_kg),
                                core::units::kg_to_lb(core::kMaxTestMass_kg), "lb"));
  s->add_option("--mass-in-running-order-kg", o->mass_in_running_order_kg,
                "for m_r by the profile's rule (required unless --rotating-mass-kg or "
                "--estimate-mass-in-running-order)")
      ->check(config::number_in(0.5 * core::kMinTestMass_kg, core::kMaxTestMass_kg, "kg"));
  s->add_flag(
      "--estimate-mass-in-running-order", o->estimate_mro,
      "no measured mass in running order: accept the estimate (the test mass; for an EPA row its test "
      "weight less 100 kg), recorded as an estimate in the target file");
  s->add_option("--rotating-mass-kg", o->rotating_mass_kg, "m_r when known")
      ->check(config::number_in(0.0, 4000.0, "kg"));
  s->add_option("--drive", o->drive, "front, rear or all")->capture_default_str();
  s->add_option("--max-speed-kmh", o->max_speed_kmh, "the vehicle's maximum speed")
      ->check(config::number_in(30.0, 400.0, "km/h"))
      ->capture_default_str();
  s->add_option("--cycle-max-speed-kmh", o->cycle_max_speed_kmh,
                "the test cycle's maximum speed: the top reference speed is the one just above it")
      ->check(config::number_in(10.0, 400.0, "km/h"));
  s->add_option("--profile", o->profile, "standard profile name or file")->capture_default_str();
  s->add_option("--cell", o->cell, "cell file: its axle layout, and the history of this vehicle on it");
  s->add_option("--history", o->history,
                "history file folder, read when no record store can be used (default: <data root>/history, "
                "as for run)");
  s->add_option("--data-dir", o->data_dir,
                "the lab's data root, whose record store the history strategy reads (default: as for run)");
  s->add_option("--out", o->out, "write the target file here");
  s->add_flag("--json", o->json, "print everything as one JSON object");
  s->callback([o, s, &run] {
    o->given.clear();
    for (const CLI::Option* opt : s->get_options())
      if (opt->count() > 0) o->given.push_back(opt->get_name());
    run = [o] { return run_target(*o); };
  });
}

}  // namespace loadtrim::app
