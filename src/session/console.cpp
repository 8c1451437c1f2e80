#include "session/console.hpp"

#include <unistd.h>

#include <string>

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
  char band[32] = "";
  if (p.band_kmh > 0) std::snprintf(band, sizeof band, "  band %.0f km/h", p.band_kmh);
  std::fprintf(out_, "\r\033[K  [%s] coast-down %d  %6.1f km/h%s  cell time %s  about %s left",
               to_string(p.state), p.coastdown, p.speed_kmh, band, clock_text(p.cell_time_s).c_str(),
               clock_text(p.remaining_estimate_s).c_str());
  std::fflush(out_);
  progress_shown_ = true;
}

bool Console::on_event(const Event& e) {
  const auto& d = e.data;
  if (mode_ == Mode::json) {
    nlohmann::json j = d;
    j["type"] = e.type;
    std::fprintf(out_, "%s\n", j.dump().c_str());
    std::fflush(out_);
    return true;
  }
  const bool unconfirmed_stop = e.type == "finished" && !d.value("rollers_stopped", true);
  if (mode_ == Mode::quiet) {
    if (e.type == "finished")
      std::fprintf(out_, "%s: %s\n", d.value("result", "").c_str(), d.value("stop_reason", "").c_str());
    if (unconfirmed_stop) std::fprintf(out_, "WARNING: %s\n", d.value("stop_note", "").c_str());
    return true;
  }
  clear_progress();
  auto c3 = [](const nlohmann::json& c) {
    char b[64];
    std::snprintf(b, sizeof b, "%8.2f %7.4f %8.5f", c.value("f0_n", 0.0), c.value("f1_n_per_kmh", 0.0),
                  c.value("f2_n_per_kmh2", 0.0));
    return std::string(b);
  };
  if (e.type == "state" && d.value("to", "") != "analyse" && d.value("to", "") != "write_set" &&
      d.value("to", "") != "run_up" && d.value("to", "") != "coast_down") {
    std::fprintf(out_, "  -> %s%s\n", d.value("to", "").c_str(),
                 d.value("why", "").empty() ? "" : (" (" + d.value("why", "") + ")").c_str());
  } else if (e.type == "controller") {
    std::fprintf(out_, "  controller %s: rollers %.4f m, base inertia %.0f kg, limit %.0f km/h\n",
                 d.value("name", "").c_str(), d.value("roller_diameter_m", 0.0),
                 d.value("base_inertia_kg", 0.0), d.value("max_speed_kmh", 0.0));
  } else if (e.type == "inertia") {
    std::fprintf(out_, "  inertia %.1f kg set and read back (TM %.1f kg, m_r %.2f kg, %s)\n",
                 d.value("inertia_kg", 0.0), d.value("test_mass_kg", 0.0), d.value("rotating_mass_kg", 0.0),
                 d.value("axles", "").c_str());
  } else if (e.type == "loss_map_point") {
    std::fprintf(out_, "  loss map: %.0f km/h holds with %.1f N\n", d.value("speed_kmh", 0.0),
                 d.value("force_n", 0.0));
  } else if (e.type == "first_setting") {
    std::fprintf(out_, "  first setting (%s): %s\n", d.value("strategy", "").c_str(), c3(d["set"]).c_str());
    std::fprintf(out_, "  %3s  %-26s  %-26s  %8s %8s %6s  %s\n", "run", "set f0 / f1 / f2",
                 "measured f0 / f1 / f2", "worst N", "est.diff", "result", "decision");
  } else if (e.type == "coastdown") {
    if (!d.value("usable", false))
      std::fprintf(out_, "  %3d  %s  unusable: %s\n", d.value("run", 0), c3(d["set"]).c_str(),
                   d.value("unusable_reason", "").c_str());
    else
      std::fprintf(out_, "  %3d  %s  %s  %8.2f %8.2f %6s  %s\n", d.value("run", 0), c3(d["set"]).c_str(),
                   c3(d["simulated"]).c_str(), d["check"].value("worst_abs_deviation_n", 0.0),
                   d.value("estimator_disagreement_n", 0.0),
                   d["check"].value("pass", false) ? "pass" : "FAIL",
                   d["decision"].value("reason", "").c_str());
  } else if (e.type == "timing_rule_missed" || e.type == "link_lost" || e.type == "link_restored" ||
             e.type == "fault" || e.type == "refused" || e.type == "interrupted" ||
             e.type == "coastdown_discarded" || e.type == "resumed" || e.type == "fault_cleared" ||
             e.type == "safe_stop") {
    std::fprintf(out_, "  %s: %s\n", e.type.c_str(), d.dump().c_str());
  } else if (e.type == "envelope_refused" || e.type == "diverging" || e.type == "observer_dropped" ||
             e.type == "not_settled") {
    std::fprintf(out_, "  STOPPING: %s\n", d.value("why", d.value("message", "")).c_str());
  } else if (e.type == "finished") {
    if (unconfirmed_stop)
      std::fprintf(
          out_, "\n  WARNING: %s. Keep out of the roller area until the rollers are seen to stand still.\n",
          d.value("stop_note", "").c_str());
    std::fprintf(out_, "\n  %s: %s after %d coast-downs, %s of cell time\n", d.value("result", "").c_str(),
                 d.value("stop_reason", "").c_str(), d.value("coastdowns", 0),
                 clock_text(d.value("cell_time_s", 0.0)).c_str());
    if (d.contains("final_set"))
      std::fprintf(out_, "  final set coefficients: f0 %.1f N, f1 %.3f N/(km/h), f2 %.5f N/(km/h)²\n",
                   d["final_set"].value("f0_n", 0.0), d["final_set"].value("f1_n_per_kmh", 0.0),
                   d["final_set"].value("f2_n_per_kmh2", 0.0));
  }
  std::fflush(out_);
  return true;
}

}  // namespace loadtrim::session
