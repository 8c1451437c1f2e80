#include "session/console.hpp"

#include <unistd.h>

#include <string>

#include "core/road_load.hpp"
#include "core/units.hpp"
#include "session/event_text.hpp"

namespace loadtrim::session {

Console::Console(Mode mode, std::FILE* out) : mode_(mode), out_(out), tty_(::isatty(::fileno(out)) != 0) {}

void Console::clear_progress() {
  if (progress_shown_) {
    std::fputs("\r\033[K", out_);
    progress_shown_ = false;
  }
}

namespace {
std::string clock_text(double s) {
  char b[32];
  const int t = static_cast<int>(s + 0.5);
  std::snprintf(b, sizeof b, "%d:%02d:%02d", t / 3600, t / 60 % 60, t % 60);
  return b;
}
}  // namespace

void Console::on_progress(const Progress& p) {
  if (!p.step.empty()) return;  // a dyno check: the console shows its steps as records, not a progress line
  if (mode_ == Mode::json) {
    if (p.cell_time_s - last_json_progress_ < 5.0) return;
    last_json_progress_ = p.cell_time_s;
    nlohmann::json j = {{"type", "progress"},
                        {"state", to_string(p.state)},
                        {"coastdown", p.coastdown},
                        {"speed_kmh", p.speed_kmh},
                        {"band_kmh", p.band_kmh},
                        {"cell_time_s", p.cell_time_s},
                        {"remaining_estimate_s", p.remaining_estimate_s}};
    std::fprintf(out_, "%s\n", j.dump().c_str());
    std::fflush(out_);
    return;
  }
  if (mode_ != Mode::normal || !tty_) return;
  // The state in words; a coast-down number only while one runs (write the setting, run up, coast, analyse),
  // so the line never speaks of "coast-down 1" while connecting or warming up.
  const State st = p.state;
  const bool in_run =
      st == State::write_set || st == State::run_up || st == State::coast_down || st == State::analyse;
  char run[48] = "";
  if (in_run) std::snprintf(run, sizeof run, " coast-down %d", p.coastdown);
  char band[32] = "";
  if (in_run && p.band_kmh > 0) std::snprintf(band, sizeof band, "  band %.0f km/h", p.band_kmh);
  std::fprintf(out_, "\r\033[K  [%s]%s  %6.1f km/h%s  cell time %s  about %s left", state_words(st), run,
               p.speed_kmh, band, clock_text(p.cell_time_s).c_str(),
               clock_text(p.remaining_estimate_s).c_str());
  std::fflush(out_);
  progress_shown_ = true;
}

namespace {
template <class... F>
struct Overloaded : F... {
  using F::operator()...;
};
template <class... F>
Overloaded(F...) -> Overloaded<F...>;

std::string c3_metric(const core::RoadLoad& c) {
  char b[64];
  std::snprintf(b, sizeof b, "%8.2f %7.4f %8.5f", c.f0_n, c.f1_n_per_kmh, c.f2_n_per_kmh2);
  return b;
}
std::string c3_us(const core::RoadLoad& c) {
  const core::RoadLoadUs u = core::to_us(c);
  char b[64];
  std::snprintf(b, sizeof b, "%8.3f %7.5f %8.6f", u.a_lbf, u.b_lbf_per_mph, u.c_lbf_per_mph2);
  return b;
}
}  // namespace

std::string Console::coefficients(const core::RoadLoad& c) const {
  switch (units_) {
    case Units::metric:
      return c3_metric(c);
    case Units::us:
      return c3_us(c);
    case Units::both:
      return c3_metric(c) + " (US " + c3_us(c) + ")";
  }
  return c3_metric(c);
}

std::string Console::units_words() const {
  switch (units_) {
    case Units::metric:
      return "(f0 N, f1 N/(km/h), f2 N/(km/h)²)";
    case Units::us:
      return "(A lbf, B lbf/mph, C lbf/mph²)";
    case Units::both:
      return "(f0 N, f1 N/(km/h), f2 N/(km/h)²; US A lbf, B lbf/mph, C lbf/mph²)";
  }
  return "";
}

std::string Console::force(double n, int decimals) const {
  const std::string lbf = rounded(core::units::n_to_lbf(n), decimals + 1) + " lbf";
  const std::string metric = rounded(n, decimals) + " N";
  return units_ == Units::metric ? metric : units_ == Units::us ? lbf : metric + " (" + lbf + ")";
}

bool Console::on_event(const Event& e) {
  if (mode_ == Mode::json) {
    nlohmann::json j = record_json(e);
    j["type"] = type_of(e);
    std::fprintf(out_, "%s\n", j.dump().c_str());
    std::fflush(out_);
    return true;
  }
  const auto* fin = std::get_if<ev::Finished>(&e.payload);
  const bool unconfirmed_stop = fin && !fin->summary.rollers_stopped;
  if (mode_ == Mode::quiet) {
    if (fin)
      std::fprintf(out_, "%s: %s\n", to_string(fin->summary.outcome), fin->summary.stop_reason.c_str());
    if (unconfirmed_stop) std::fprintf(out_, "WARNING: %s\n", fin->summary.stop_note.c_str());
    return true;
  }
  clear_progress();
  if (std::holds_alternative<ev::ControllerIdentified>(e.payload) ||
      std::holds_alternative<ev::CheckIdentified>(e.payload))
    text_.connected = true;
  // The events an operator must notice, as one sentence each (event_text.hpp): never the record's JSON.
  auto raw = [&] { std::fprintf(out_, "  %s\n", event_sentence(e, text_).c_str()); };
  auto stopping = [&](const std::string& why) { std::fprintf(out_, "  STOPPING: %s\n", why.c_str()); };
  std::visit(
      Overloaded{
          [&](const ev::SessionStarted& x) {
            std::fprintf(out_, "  target %s %s; tolerance ±%s (%s)\n", units_words().c_str(),
                         coefficients(x.common.target).c_str(), force(x.common.tolerance_n, 1).c_str(),
                         x.common.standard.c_str());
          },
          [&](const ev::ResumeStarted& x) {
            std::fprintf(out_, "  target %s %s; tolerance ±%s (%s); %zu coast-down(s) already recorded\n",
                         units_words().c_str(), coefficients(x.common.target).c_str(),
                         force(x.common.tolerance_n, 1).c_str(), x.common.standard.c_str(),
                         x.completed_coastdowns);
          },
          [&](const ev::StateChanged& x) {
            // The per-run states show as the run's table row instead.
            if (x.to == State::analyse || x.to == State::write_set || x.to == State::run_up ||
                x.to == State::coast_down)
              return;
            std::fprintf(out_, "  -> %s%s\n", state_words(x.to),
                         x.why.empty() ? "" : (" (" + x.why + ")").c_str());
          },
          [&](const ev::ControllerIdentified& x) {
            std::fprintf(out_, "  controller %s: rollers %.4f m, base inertia %.0f kg, limit %.0f km/h\n",
                         x.info.name.c_str(), x.info.roller_diameter_m, x.info.base_inertia_kg,
                         x.info.max_speed_kmh);
          },
          [&](const ev::InertiaSet& x) {
            std::fprintf(out_, "  inertia %.1f kg set and read back (TM %.1f kg, m_r %.2f kg, %s)\n",
                         x.inertia_kg, x.test_mass_kg, x.rotating_mass_kg, core::to_string(x.axles));
          },
          [&](const ev::LossMapPoint& x) {
            std::fprintf(out_, "  loss map: %.0f km/h holds with %.1f N\n", x.point.speed_kmh,
                         x.point.force_n);
          },
          [&](const ev::LossMapCoast& x) {
            std::fprintf(out_, "  loss map: coast %.0f -> %.0f km/h, %zu point(s)%s%s\n", x.from_kmh,
                         x.to_kmh, x.points.size(), x.note.empty() ? "" : ": ", x.note.c_str());
          },
          [&](const ev::FirstSetting& x) {
            std::fprintf(out_, "  first setting (%s): %s\n", x.strategy.c_str(), coefficients(x.set).c_str());
            // A strategy asked for and not used is said plainly, with why (docs/store.md, "The history first
            // setting").
            if (const std::string fb = first_setting_fallback(x); !fb.empty())
              std::fprintf(out_, "  first setting: %s\n", fb.c_str());
            const bool us = units_ == Units::us;
            const int w = static_cast<int>(coefficients(x.set).size());
            std::fprintf(out_, "  %3s  %-*s  %-*s  %8s %8s %6s  %s\n", "run", w,
                         us ? "set A / B / C" : "set f0 / f1 / f2", w,
                         us ? "measured A / B / C" : "measured f0 / f1 / f2", us ? "worst lbf" : "worst N",
                         "est.diff", "result", "decision");
            std::fprintf(
                out_,
                "       (coefficients %s; worst: the largest deviation from the target at a reference "
                "speed, against the tolerance above; est.diff: how far the band estimate and the "
                "whole-trace fit differ, %s)\n",
                units_words().c_str(), us ? "lbf" : "N");
          },
          [&](const ev::Coastdown& x) {
            const auto& r = x.record;
            const auto& v = r.evaluation;
            if (!v.usable)
              std::fprintf(out_, "  %3d  %s  unusable: %s\n", r.run, coefficients(r.set).c_str(),
                           v.unusable_reason.c_str());
            else {
              const double k = units_ == Units::us ? core::units::n_to_lbf(1.0) : 1.0;
              std::fprintf(out_, "  %3d  %s  %s  %8.2f %8.2f %6s  %s\n", r.run, coefficients(r.set).c_str(),
                           coefficients(v.fit.coefficients).c_str(), k * v.check.worst_abs_deviation_n,
                           k * v.estimator_disagreement_n, v.check.pass ? "pass" : "FAIL",
                           r.decision.reason.c_str());
            }
          },
          [&](const ev::ReleaseTiming& x) {
            if (!x.within) raw();
          },
          // What the driver display asks, as the driver sees it; a run-up that failed its check in full.
          [&](const ev::DriverPromptShown& x) {
            if (x.prompt != core::DriverPrompt::off) std::fprintf(out_, "  DRIVER: %s\n", x.text.c_str());
          },
          [&](const ev::RunUpChecked& x) {
            if (!x.meets || x.ending != "coasted") raw();
          },
          [&](const ev::LinkLost&) { raw(); }, [&](const ev::LinkRestored&) { raw(); },
          [&](const ev::Fault&) { raw(); }, [&](const ev::Refused&) { raw(); },
          [&](const ev::Interrupted&) { raw(); }, [&](const ev::Paused&) { raw(); },
          [&](const ev::Continued&) { raw(); }, [&](const ev::CoastdownDiscarded&) { raw(); },
          [&](const ev::Resumed&) { raw(); }, [&](const ev::FaultCleared&) { raw(); },
          [&](const ev::SafeStop&) { raw(); }, [&](const ev::EnvelopeRefused& x) { stopping(x.why); },
          [&](const ev::Diverging& x) { stopping(x.why); },
          [&](const ev::ObserverDropped& x) { stopping(x.why); },
          [&](const ev::ControllerWarning& x) {
            std::fprintf(out_, "  WARNING from the controller link (%s%s): %s\n", x.code.c_str(),
                         x.count > 1 ? (", " + std::to_string(x.count) + " times").c_str() : "",
                         x.text.c_str());
          },
          [&](const ev::NotSettled& x) { stopping(x.message); },
          [&](const ev::Finished& x) {
            const auto& s = x.summary;
            if (unconfirmed_stop)
              std::fprintf(out_,
                           "\n  WARNING: %s. Keep out of the roller area until the rollers are seen to stand "
                           "still.\n",
                           s.stop_note.c_str());
            std::fprintf(out_, "\n  %s: %s after %d coast-downs, %s of cell time\n", to_string(s.outcome),
                         s.stop_reason.c_str(), s.coastdowns, clock_text(s.cell_time_s).c_str());
            // Rounded as the profile reports them (f0 1, f1 3, f2 5 decimals: docs/standards.md §3; US one
            // more).
            if (s.final_set && units_ != Units::us)
              std::fprintf(out_,
                           "  final set coefficients (rounded; the record holds every digit): f0 %.1f N, "
                           "f1 %.3f N/(km/h), f2 %.5f N/(km/h)²\n",
                           s.final_set->f0_n, s.final_set->f1_n_per_kmh, s.final_set->f2_n_per_kmh2);
            if (s.final_set && units_ != Units::metric) {
              const core::RoadLoadUs u = core::to_us(*s.final_set);
              std::fprintf(
                  out_,
                  "  final set coefficients, US (rounded; the record holds every digit in SI): A %.2f "
                  "lbf, B %.4f lbf/mph, C %.6f lbf/mph²\n",
                  u.a_lbf, u.b_lbf_per_mph, u.c_lbf_per_mph2);
            }
          },
          // The dyno's own checks: each step as it happens.
          [&](const ev::CheckIdentified& x) {
            std::fprintf(out_, "  controller %s: rollers %.4f m, base inertia %.0f kg%s\n", x.name.c_str(),
                         x.roller_diameter_m, x.base_inertia_kg,
                         x.problems ? " (does not match the cell file)" : "");
          },
          [&](const ev::FreeCoastStarted& x) {
            std::fprintf(out_, "  free coast of the empty rollers from %.1f km/h\n", x.from_kmh);
          },
          [&](const ev::CheckCoastStarted& x) {
            std::fprintf(out_, "  coast-down %d at %.0f kg from %.1f km/h, set %s\n", x.run, x.inertia_kg,
                         x.from_kmh, coefficients(x.set).c_str());
          },
          [&](const ev::ForceApplied& x) {
            std::fprintf(out_, "  constant force %.1f N against the stated base inertia %.0f kg\n", x.force_n,
                         x.stated_base_inertia_kg);
          },
          [&](const ev::ParasiticAnalysed& x) {
            std::fprintf(out_, "  parasitic loss: %s\n", x.determination.verdict.c_str());
          },
          [&](const ev::UnloadedCoastdownAnalysed& x) {
            std::fprintf(out_, "  coast-down %d: %s\n", x.run, x.result.verdict.c_str());
          },
          [&](const ev::RateRunStarted& x) {
            std::fprintf(out_, "  %s %d at %.0f kg, %.1f (mph)/s nominal, from %.1f km/h\n",
                         x.rising ? "acceleration" : "deceleration", x.run, x.inertia_kg, x.rate_mph_per_s,
                         x.from_kmh);
          },
          [&](const ev::InertiaAnalysed& x) {
            std::fprintf(out_, "  base inertia: %s\n", x.result.verdict.c_str());
          },
          [&](const ev::FrictionAnalysed& x) {
            std::fprintf(out_, "  friction compensation: %s\n", x.result.verdict.c_str());
          },
          [&](const ev::AccelDecelAnalysed& x) {
            std::fprintf(out_, "  acceleration/deceleration: %s\n", x.result.verdict.c_str());
          },
          [&](const ev::ResponseAnalysed& x) {
            std::fprintf(out_, "  response time: %s\n", x.result.verdict.c_str());
          },
          [&](const auto&) {},  // the rest is in the record and the operator log
      },
      e.payload);
  std::fflush(out_);
  return true;
}

}  // namespace loadtrim::session
