// The steps every dyno check is made of (check_runner.hpp runs them): record an event, command the
// controller, hold and settle, collect the samples of a step until a condition, stop, write a trace. A step
// that cannot complete throws Abort with the check's end; run_check catches it and brings the rollers to the
// safe stop.
//
// Budgets: every wait has a controller-time budget derived from what the step does (its speeds, rates and the
// profile's times), never a literal: see the Budget functions below and docs/dyno-checks.md ("Budgets").
#pragma once

#include <functional>
#include <initializer_list>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "checks/check_runner.hpp"
#include "motion/motion.hpp"
#include "record/event_log.hpp"

namespace loadtrim::checks {

struct Abort {
  CheckResult::End end;
  std::string why;
};

// Controller-time budgets of the checks' steps. A step that outlasts its budget fails the check (the dyno did
// not do what it was told in the time it should take); the motion library adds the wall deadline. Each budget
// is the step's nominal time times a margin, plus a grace: kGrace_s, and the cell's reply deadline in the
// controller's time (a command may take that long to be acknowledged, and the step's clock may have started
// with the samples read meanwhile).
namespace budget {
// A step may take this many times its nominal time before it fails (common practice, no source: a working
// dyno is close to nominal; twice is far outside any tolerance of the checks).
inline constexpr double kMargin = 2.0;
// Added to every budget: the first samples of the step (common practice, no source; ten seconds is long
// against any controller's sample period).
inline constexpr double kGrace_s = 10.0;
// A speed hold or controlled stop slower than this ramp is a controller fault (common practice, no source:
// about a fortieth of g).
inline constexpr double kSlowestRamp_mps2 = 0.25;
// A free coast of the empty rollers with no stored curve to predict it: a loss below this (at the base
// inertia) would take longer than any dyno's (common practice, no source).
inline constexpr double kSmallestLoss_n = 5.0;

// `latency_s`: the cell's reply deadline in controller seconds (Procedure::latency_s).
// Reaching and settling at a speed from anywhere up to the cell's limit.
double hold_s(double cell_max_speed_kmh, double settle_s, double latency_s);
// Bringing the rollers to a stop from the cell's limit.
double stop_s(double cell_max_speed_kmh, double latency_s);
// A run whose nominal duration is known (a set rate over a speed span, a closed-form coast, a timed window).
double run_s(double nominal_s, double latency_s);
}  // namespace budget

class Procedure {
 public:
  Procedure(controller::Controller& c, const CheckRequest& req, record::EventLog& log, std::string folder,
            const std::atomic<bool>* stop);

  controller::Controller& controller() { return c_; }
  const CheckRequest& request() const { return req_; }
  motion::Motion& motion() { return motion_; }
  // The cell's reply deadline in controller seconds (the controller's stated clock rate).
  double latency_s() const;
  // budget::run_s with this cell's latency.
  double run_budget_s(double nominal_s) const { return budget::run_s(nominal_s, latency_s()); }
  double stop_budget_s() const { return budget::stop_s(req_.cell.max_speed_kmh, latency_s()); }

  // A step's event: into the log first (the record), then to the observers, which therefore never show a
  // step the record does not hold. Throws Abort when the record cannot hold it.
  void record(session::Payload event);
  // The same without throwing: false when the log could not hold the event.
  bool log_event(session::Payload event);

  // A command's result: a failure is a controller fault.
  void must(const controller::Result& r, const char* what);
  // A step's result as the check's end: the controller budget running out is the check failing; the
  // operator's stop an interruption; anything else (a fault, over-speed, the clock, the link, the wall
  // deadline) a controller fault.
  void must_step(const controller::Result& r);

  // Receives samples of the step just commanded until `done` says so (motion/motion.hpp: deadlines in
  // controller and wall time; fault flags and over-speed checked on every sample first). `since_epoch`: the
  // samples read before this many acknowledged commands belong to the phase before (default: now).
  void collect(std::vector<controller::Sample>& out,
               const std::function<bool(const controller::Sample&)>& done, double budget_s, const char* step,
               std::initializer_list<controller::Mode> modes,
               std::optional<std::uint64_t> since_epoch = std::nullopt);

  // Speed hold at v and wait until settled for the profile's settle time; refused above the cell's limit.
  void hold_and_settle(double v_kmh);
  // Controlled stop and wait for standstill.
  void stop_rollers();

  // Writes a trace file and returns its record entry.
  nlohmann::json write_trace(const std::string& name, const std::vector<controller::Sample>& tr);

  static void split(const std::vector<controller::Sample>& tr, std::vector<double>& t, std::vector<double>& v,
                    std::vector<double>* f = nullptr);

 private:
  static motion::Rules rules(const CheckRequest& req);
  // Every sample as progress to the observers (the live page), at most every kProgressEvery_s of controller
  // time: the step in words, and a coast's samples as its trace.
  void on_sample(const controller::Sample& s);
  std::string step_;         // the step running now, in words
  int trace_run_ = 0;        // the coast whose samples are being collected (1, 2, ...), 0 = none
  bool tracing_ = false;     // a coast_started record was made and its samples are being collected
  double t_first_s_ = -1.0;  // the first sample's controller time
  double last_progress_s_ = -1e300;
  controller::Controller& c_;
  const CheckRequest& req_;
  record::EventLog& log_;
  std::string folder_;
  motion::Motion motion_;
  session::Observers observers_;
};

// Each check's procedure: drives the rollers, analyses with the pure core (core/dyno_checks.hpp), records its
// "analysed" event and returns that event's JSON (also the check's part of result.json).
nlohmann::json run_parasitic(Procedure& p, const std::optional<core::RoadLoad>& stored, bool& passed,
                             std::string& verdict, std::optional<core::RoadLoad>& new_curve);
nlohmann::json run_coastdowns(Procedure& p, bool readiness, bool& passed, std::string& verdict);
nlohmann::json run_base_inertia(Procedure& p, bool& passed, std::string& verdict);
nlohmann::json run_friction(Procedure& p, const std::optional<core::RoadLoad>& stored, bool& passed,
                            std::string& verdict);
nlohmann::json run_accel_decel(Procedure& p, bool& passed, std::string& verdict);
nlohmann::json run_response(Procedure& p, bool& passed, std::string& verdict);

}  // namespace loadtrim::checks
