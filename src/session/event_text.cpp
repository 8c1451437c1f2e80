#include "session/event_text.hpp"

#include <cmath>
#include <cstdio>

namespace loadtrim::session {

std::string rounded(double v, int decimals) {
  if (!std::isfinite(v)) return std::isnan(v) ? "not a number" : (v > 0 ? "infinite" : "minus infinite");
  char b[64];
  std::snprintf(b, sizeof b, "%.*f", decimals, v);
  std::string s = b;
  // "-0.0" reads as a sign that is not there.
  if (s.front() == '-' && s.find_first_not_of("-0.") == std::string::npos) s.erase(0, 1);
  return s;
}

std::string first_setting_fallback(const ev::FirstSetting& x) {
  if (x.fallback_reason.empty() || x.requested.empty() || x.requested == x.strategy) return "";
  std::string why = x.fallback_reason;
  if (x.requested == "history" && x.history_lookup.is_object() && x.history_lookup.contains("note") &&
      x.history_lookup["note"].is_string())
    why += ": " + x.history_lookup["note"].get<std::string>();
  return x.strategy + " used, " + x.requested + " asked for (" + why + ")";
}

const char* state_words(State s) {
  switch (s) {
    case State::connect:
      return "connecting";
    case State::check_limits:
      return "checking limits";
    case State::set_inertia:
      return "setting inertia";
    case State::warm_up:
      return "warming up";
    case State::write_set:
      return "writing the setting";
    case State::run_up:
      return "running up";
    case State::coast_down:
      return "coasting down";
    case State::analyse:
      return "analysing";
    case State::paused:
      return "paused";
    case State::safe_stop:
      return "stopping";
    case State::finished:
      return "finished";
  }
  return "?";
}

namespace {

template <class... F>
struct Overloaded : F... {
  using F::operator()...;
};
template <class... F>
Overloaded(F...) -> Overloaded<F...>;

std::string coefficients(const core::RoadLoad& c) {
  return "f0 " + rounded(c.f0_n, 2) + " N, f1 " + rounded(c.f1_n_per_kmh, 4) + " N/(km/h), f2 " +
         rounded(c.f2_n_per_kmh2, 5) + " N/(km/h)²";
}

std::string minutes_seconds(double s) {
  if (!std::isfinite(s) || s < 0) return rounded(s, 0) + " s";
  const long t = std::lround(s);
  char b[32];
  if (t >= 60)
    std::snprintf(b, sizeof b, "%ld min %02ld s", t / 60, t % 60);
  else
    std::snprintf(b, sizeof b, "%ld s", t);
  return b;
}

// A record's members as words: "key value, key value"; nested objects in parentheses, never JSON.
std::string flat(const nlohmann::json& j) {
  if (j.is_number_integer() || j.is_number_unsigned()) return j.dump();
  if (j.is_number_float()) {
    const double v = j.get<double>();
    char b[32];
    std::snprintf(b, sizeof b, "%.6g", v);
    return b;
  }
  if (j.is_string()) return j.get<std::string>();
  if (j.is_boolean()) return j.get<bool>() ? "yes" : "no";
  if (j.is_null()) return "none";
  std::string out;
  if (j.is_array()) {
    for (const auto& x : j) out += (out.empty() ? "" : ", ") + flat(x);
    return "[" + out + "]";
  }
  for (const auto& [k, v] : j.items()) {
    std::string key = k;
    for (auto& ch : key)
      if (ch == '_') ch = ' ';
    out += (out.empty() ? "" : "; ") + key + " " + (v.is_object() ? "(" + flat(v) + ")" : flat(v));
  }
  return out;
}

std::string words(const char* type) {
  std::string s = type;
  for (auto& ch : s)
    if (ch == '_') ch = ' ';
  return s;
}

}  // namespace

std::string event_sentence(const Event& e, const TextContext& ctx) {
  auto generic = [&] {
    nlohmann::json j = to_json(e.payload);
    const std::string body = j.is_object() && !j.empty() ? ": " + flat(j) : std::string();
    return words(type_of(e)) + body;
  };
  return std::visit(
      Overloaded{
          [&](const ev::SessionStarted& x) {
            return "session started: vehicle " + x.common.vehicle + " on cell " + x.common.cell + ", " +
                   x.common.standard + ", target " + coefficients(x.common.target) + ", tolerance ±" +
                   rounded(x.common.tolerance_n, 1) + " N";
          },
          [&](const ev::ResumeStarted& x) {
            return "session resumed: vehicle " + x.common.vehicle + " on cell " + x.common.cell + ", " +
                   std::to_string(x.completed_coastdowns) + " coast-down(s) already recorded, target " +
                   coefficients(x.common.target) + ", tolerance ±" + rounded(x.common.tolerance_n, 1) + " N";
          },
          [&](const ev::StateChanged& x) {
            return std::string("now ") + state_words(x.to) + (x.why.empty() ? "" : " (" + x.why + ")");
          },
          [&](const ev::ControllerIdentified& x) {
            return "controller " + x.info.name + ": rollers " + rounded(x.info.roller_diameter_m, 4) +
                   " m, base inertia " + rounded(x.info.base_inertia_kg, 0) + " kg, limit " +
                   rounded(x.info.max_speed_kmh, 0) + " km/h";
          },
          [&](const ev::ControllerStateOnConnect& x) {
            return "the controller was found " + std::string(controller::to_string(x.mode)) + " at " +
                   rounded(x.speed_kmh, 1) + " km/h" +
                   (x.fault.empty() ? "" : " with a latched fault: " + x.fault);
          },
          [&](const ev::Refused& x) { return "refused: " + x.why; },
          [&](const ev::Limits& x) {
            return "speed limit " + rounded(x.speed_limit_kmh, 0) + " km/h (cell " +
                   rounded(x.cell_max_speed_kmh, 0) + ", vehicle " + rounded(x.vehicle_max_speed_kmh, 0) +
                   ", controller " + rounded(x.controller_max_speed_kmh, 0) + "); coast-downs from " +
                   rounded(x.start_speed_kmh, 0) + " to " + rounded(x.end_speed_kmh, 0) + " km/h";
          },
          [&](const ev::InertiaSet& x) {
            return "inertia " + rounded(x.inertia_kg, 1) + " kg set and read back (test mass " +
                   rounded(x.test_mass_kg, 1) + " kg, rotating mass " + rounded(x.rotating_mass_kg, 1) +
                   " kg, " + core::to_string(x.axles) + ")";
          },
          [&](const ev::WarmUpStarted& x) {
            return "warm-up started: " + rounded(x.speed_kmh, 0) + " km/h for " +
                   minutes_seconds(x.duration_s) +
                   (x.loss_map_planned_s > 0
                        ? ", then about " + minutes_seconds(x.loss_map_planned_s) + " for the loss map"
                        : std::string());
          },
          [&](const ev::WarmUpHeld& x) {
            return "warm-up held " + rounded(x.speed_kmh, 0) + " km/h for " + minutes_seconds(x.held_s) +
                   "; stability " + x.stability +
                   (x.last_window_force_n ? " (last window " + rounded(*x.last_window_force_n, 1) + " N)"
                                          : std::string());
          },
          [&](const ev::LossMapSkipped& x) { return "loss map skipped: " + x.why; },
          [&](const ev::LossMapPointSkipped& x) {
            return "loss map: " + rounded(x.speed_kmh, 0) + " km/h skipped: " + x.why;
          },
          [&](const ev::LossMapPoint& x) {
            return "loss map: " + rounded(x.point.speed_kmh, 0) + " km/h holds with " +
                   rounded(x.point.force_n, 1) + " N";
          },
          [&](const ev::LossMapCoastStarted& x) {
            return "loss map: coasting from " + rounded(x.from_kmh, 0) + " to " + rounded(x.to_kmh, 0) +
                   " km/h with the standard's default setting written";
          },
          [&](const ev::LossMapCoast& x) {
            std::string t =
                "loss map: coasted from " + rounded(x.from_kmh, 0) + " to " + rounded(x.to_kmh, 0) + " km/h";
            for (const auto& pt : x.points)
              t += "; " + rounded(pt.speed_kmh, 0) + " km/h loses " + rounded(pt.coasting_loss_n, 1) +
                   " N coasting";
            return x.note.empty() ? t : t + " (" + x.note + ")";
          },
          [&](const ev::WarmUpEnded&) { return std::string("warm-up ended"); },
          [&](const ev::FirstSetting& x) {
            const std::string fallback = first_setting_fallback(x);
            return "first setting (" + x.strategy + "): " + coefficients(x.set) +
                   (!fallback.empty()           ? "; " + fallback
                    : x.fallback_reason.empty() ? ""
                                                : " (" + x.fallback_reason + ")") +
                   (!x.history ? std::string()
                    : x.history->source == "store"
                        ? "; history from session " + x.history->session_id + " on cell " +
                              x.history->source_cell + " (" + x.history->note + ")"
                        : "; history from the history file (" + x.history->note + ")");
          },
          [&](const ev::EnvelopeRefused& x) {
            return "coast-down " + std::to_string(x.run) + " not run: " + x.why;
          },
          [&](const ev::SetWritten& x) {
            return "coast-down " + std::to_string(x.run) +
                   ": setting written and read back: " + coefficients(x.set);
          },
          [&](const ev::CoastdownStarted& x) {
            return "coast-down " + std::to_string(x.run) + ": running up to " +
                   rounded(x.start_speed_kmh, 1) + " km/h";
          },
          [&](const ev::ReleaseTiming& x) {
            return std::string(x.within ? "timing within the rule: " : "TIMING RULE MISSED: ") +
                   rounded(x.gap_s, 0) + " s after the warm-up (" + x.rule + ")" +
                   (x.within               ? std::string()
                    : x.action == "repeat" ? "; the coast-down is discarded and the vehicle re-warmed"
                                           : "; kept, and shown as a finding on the report's first page");
          },
          [&](const ev::PassesReset& x) {
            return "pass count reset after coast-down " + std::to_string(x.run) + " (" +
                   std::to_string(x.passes) + " pass(es) no longer consecutive): " + x.why;
          },
          [&](const ev::WarmUpDrift& x) {
            return "warming trend at coast-down " + std::to_string(x.run) + ": " + x.verdict +
                   (x.curve.ok ? " (remaining drift " + rounded(x.curve.remaining_drift_n(x.t_s), 1) +
                                     " N against " + rounded(x.threshold_n, 1) + " N)"
                               : std::string());
          },
          [&](const ev::ConsecutiveTiming& x) {
            return "timing: " + rounded(x.gap_since_last_coast_s, 0) + " s since the last coast-down (" +
                   x.rule + ")";
          },
          [&](const ev::Coastdown& x) {
            const auto& r = x.record;
            const auto& v = r.evaluation;
            if (!v.usable) return "coast-down " + std::to_string(r.run) + " unusable: " + v.unusable_reason;
            return "coast-down " + std::to_string(r.run) + ": set " + coefficients(r.set) + "; measured " +
                   coefficients(v.fit.coefficients) + "; worst deviation " +
                   rounded(v.check.worst_abs_deviation_n, 1) + " N against ±" + rounded(r.tolerance_n, 1) +
                   " N: " + (v.check.pass ? "pass" : "FAIL") + "; " + r.decision.reason;
          },
          [&](const ev::CoastdownDiscarded& x) {
            return "coast-down " + std::to_string(x.run) + " discarded: " + x.why +
                   (x.next_set ? "; next setting " + coefficients(*x.next_set) : std::string()) +
                   (x.note ? " (" + *x.note + ")" : std::string());
          },
          [&](const ev::Diverging& x) {
            return "diverging after coast-down " + std::to_string(x.run) + ": " + x.why;
          },
          [&](const ev::LinkLost& x) {
            if (!ctx.connected) return "could not reach the controller: " + x.why + "; nothing was moved";
            return "LINK LOST (" + x.why + "): the controller's watchdog takes the rollers to a stop";
          },
          [&](const ev::Reconnect& x) {
            const std::string n = "attempt " + std::to_string(x.attempt) + " of " + std::to_string(x.of);
            if (!x.ok) return "connecting to the controller, " + n;
            return std::string(*x.ok ? "connected, " : "not connected, ") + n +
                   (x.message.empty() ? "" : ": " + x.message);
          },
          [&](const ev::NotSettled& x) { return "not settled " + x.when + ": " + x.message; },
          [&](const ev::FaultCleared& x) {
            return "controller fault \"" + x.fault + "\" " + (x.ok ? "cleared" : "not cleared") + " " +
                   x.when + ", rollers stopped" + (x.message.empty() ? "" : ": " + x.message);
          },
          [&](const ev::LinkRestored& x) {
            return "link restored on attempt " + std::to_string(x.attempt) + ", rollers stopped";
          },
          [&](const ev::Fault& x) {
            if (!ctx.connected)
              return "could not connect to the controller (during " + x.during + "): " + x.message +
                     "; nothing was moved";
            return "CONTROLLER FAULT during " + x.during + ": " + x.message +
                   (x.code != 0 ? " (code " + std::to_string(x.code) + ")" : std::string());
          },
          [&](const ev::Interrupted& x) { return "interrupted during " + x.during + ": stopping safely"; },
          [&](const ev::Paused& x) {
            return "PAUSED during " + x.during + " by " + x.by + " (" + x.source + ")" +
                   (x.why.empty() ? std::string() : ": " + x.why) + "; " +
                   (x.rollers_stopped ? "rollers stopped" : "rollers NOT confirmed stopped") +
                   "; waiting for continue (at most " + minutes_seconds(x.max_pause_s) + ")";
          },
          [&](const ev::Continued& x) {
            return "continued by " + x.by + " (" + x.source + ")" +
                   (x.why.empty() ? std::string() : ": " + x.why) + " after " + minutes_seconds(x.paused_s) +
                   " paused; re-warming for " + minutes_seconds(x.rewarm_s) + ", the pass count starts again";
          },
          [&](const ev::Resumed& x) {
            const std::string done = std::to_string(x.completed_coastdowns) + " coast-down(s) recorded";
            if (const auto* c = std::get_if<ev::Resumed::Continued>(&x.how))
              return "continuing after " + done + ": next setting " + coefficients(c->next_set) +
                     (c->discarded_run ? " (coast-down " + std::to_string(*c->discarded_run) +
                                             " was cut short and is not counted)"
                                       : std::string()) +
                     (x.note.empty() ? "" : "; " + x.note);
            const auto& f = std::get<ev::Resumed::Finalised>(x.how);
            return "the result was already recorded after " + done + ": finalised without motoring; " +
                   (f.rollers_stopped ? "rollers stopped" : "rollers NOT confirmed stopped") +
                   (f.stop_note.empty() ? "" : " (" + f.stop_note + ")");
          },
          [&](const ev::SafeStopReconnect& x) {
            return std::string(x.ok ? "reconnected to command the stop"
                                    : "could not reconnect to command the stop") +
                   (x.message.empty() ? "" : ": " + x.message);
          },
          [&](const ev::SafeStop& x) {
            if (!x.seen) return "stopped: " + x.how;
            return std::string(x.rollers_stopped ? "rollers stopped: " : "ROLLERS NOT CONFIRMED STOPPED: ") +
                   x.how + "; the controller reports " + rounded(x.seen->speed_kmh, 1) +
                   " km/h (standstill below " + rounded(x.seen->standstill_threshold_kmh, 1) + " km/h)" +
                   (x.seen->note.empty() || x.seen->note == x.how ? "" : "; " + x.seen->note);
          },
          [&](const ev::RunUpPlan& x) {
            if (x.run_up == core::RunUp::dyno)
              return "the dyno accelerates the vehicle for each run-up (" + x.rule + ")";
            return "the vehicle accelerates itself for each run-up, the driver following the display; "
                   "release found "
                   "from the " +
                   x.release_detection + " (" + x.rule + ")";
          },
          [&](const ev::DriverPromptShown& x) {
            return "coast-down " + std::to_string(x.run) + ": driver display: " + x.text;
          },
          [&](const ev::RunUpChecked& x) {
            std::string t = "coast-down " + std::to_string(x.run) + " run-up ";
            if (x.ending == "coasted")
              t += "released at " + rounded(x.release_speed_kmh, 1) + " km/h (peak " +
                   rounded(x.peak_speed_kmh, 1) + " km/h, found by the " + x.detected_by + ")";
            else
              t += "ended without a coast-down (" + x.ending + ")";
            if (x.figure_ok)
              t += std::string("; acceleration × speed ") + rounded(x.mean_av_m2ps3, 1) + " m²/s³ " +
                   (x.meets ? "meets" : "is BELOW") + " the minimum " + rounded(x.min_av_m2ps3, 1) + " m²/s³";
            if (!x.why.empty()) t += ": " + x.why;
            return t;
          },
          [&](const ev::ObserverDropped& x) { return "observer dropped: " + x.why; },
          [&](const ev::ControllerWarning& x) {
            return "controller warning (" + x.code + "): " + x.text +
                   (x.count > 1 ? " (" + std::to_string(x.count) + " times)" : std::string());
          },
          [&](const ev::Finished& x) {
            const auto& s = x.summary;
            std::string t = std::string(to_string(s.outcome)) + ": " + s.stop_reason + " after " +
                            std::to_string(s.coastdowns) + " coast-down(s), " +
                            minutes_seconds(s.cell_time_s) + " of cell time";
            if (s.final_set)
              t += "; final set " + coefficients(*s.final_set) +
                   " (rounded here; the record holds every digit)";
            return t;
          },
          [&](const auto&) { return generic(); },
      },
      e.payload);
}

}  // namespace loadtrim::session
