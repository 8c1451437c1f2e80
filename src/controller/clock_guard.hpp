// The controller's clock, checked against the tool's own monotonic clock. Pure: both times are passed in.
//
// loadtrim times a test from the controller's sample timestamps (the standard's timing is the measuring
// system's), but never trusts them blindly: a clock that stops, crawls, runs backwards, jumps or races would
// otherwise hold a wait open for ever or end a step early. Every sample and every status reply goes through
// this guard; the first violation is returned as one sentence naming what the controller's clock did, and the
// caller treats it as a fault (the rollers are stopped).
//
// The rules (docs/safety.md; the bounds are lab policy, common practice, no source). With `scale` the
// controller's stated rate, a sample's offset is (its time − scale × the wall time it was read at). A sample
// can be read late (buffered while the tool was busy) but never early, so its offset is at most the true
// offset of the two clocks, and equal to it when read promptly: the largest offset seen is the best estimate
// of the truth, and a backlog only ever lowers offsets. Hence:
//   - a timestamp is a finite number ≥ 0, and never decreases from one sample to the next ("ran backwards");
//   - on a streamed link, consecutive samples are 1/rate apart: a step beyond 2 × what the samples in between
//   explain
//     plus 1 s "jumped ahead";
//   - samples keep arriving but the clock has not advanced for 3 s of wall time ("stopped");
//   - ahead: a sample's offset may exceed the largest offset seen at least `fast_window_wall_s` earlier by no
//   more
//     than (max_rate − 1) × scale × the wall time between, plus scale × slack ("jumped ahead" when the last
//     step alone explains it, else "runs too fast"). The reference is old enough that a racing clock cannot
//     drag it along;
//   - behind: at the end of each `window_wall_s` of wall time, the largest offset read in that window may
//   fall below
//     the largest offset seen at least `slow_window_wall_s` earlier by no more than (1 − min_rate) × scale ×
//     the wall time between, plus scale × slack ("stopped" when the clock did not advance at all, else "runs
//     too slow"). A tool that falls behind reading its stream also lowers the offsets it reads: the window is
//     long enough that a lag of up to 8.5 s is never taken for a slow clock;
//   - a status reply's time (read promptly: it answers a request) may be neither ahead of the largest sample
//   offset
//     by more than scale × 2 × slack nor behind the last sample by more than scale × 1 s ("status clock and
//     sample clock disagree");
//   - with a streamed (not polled) link, the samples per controller second over at least 5 s of controller
//     time (and 2 s of wall time) stay within [0.5, 2] × the rate asked ("streams at N Hz"); for a
//     wall-related clock the samples per wall second must be out of the same band around rate × scale as
//     well, so a racing or crawling clock is named as a clock.
// With `wall_related` false (a controller simulated inside the tool's own process, whose clock races ahead of
// the wall by design) only the order and the stream rate are checked.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

namespace loadtrim::controller {

struct ClockRules {
  double scale = 1.0;        // controller seconds per wall second the controller declared (1 for hardware)
  bool wall_related = true;  // false: no rate bounds against the wall clock
  double min_rate = 0.25;    // × scale
  double max_rate = 1.5;     // × scale
  double window_wall_s =
      0.25;  // the behind check runs at the end of each such window (and a checkpoint is kept)
  double slow_window_wall_s =
      10.0;  // ...against a reference at least this old (a tool lagging behind its own stream by
             // less than 0.75 × this + slack is never taken for a slow clock)
  double fast_window_wall_s = 0.5;  // the ahead check's reference is at least this old
  double slack_wall_s = 1.0;        // allowance for batching and scheduling
  double stream_rate_hz = 0.0;      // the rate asked of a streamed link (0: not streamed or not checked)
};

class ClockGuard {
 public:
  void set_rules(const ClockRules& r) { rules_ = r; }
  const ClockRules& rules() const { return rules_; }
  // Forget the history (a new connection, a new stream).
  void reset();
  // A sample's time, the wall time it was read at, and how many samples its counter says it is after the last
  // one given (1 when consecutive; 0 when not known). Returns the violation, if any.
  std::optional<std::string> on_sample(double controller_s, double wall_s, std::uint64_t index_gap = 0);
  // A status reply's time and the wall time it was read at.
  std::optional<std::string> on_status(double controller_s, double wall_s);
  bool have_samples() const { return have_; }
  double last_time_s() const { return last_c_; }

 private:
  struct Checkpoint {
    double w = 0.0;             // the wall time the window ended
    double c = 0.0;             // the last sample time by then
    double max_offset = 0.0;    // the largest offset seen by then
    std::uint64_t samples = 0;  // samples counted by then
  };
  const Checkpoint* reference(double w, double age_s) const;  // the newest checkpoint at least age_s old
  std::optional<std::string> close_window(double w);
  ClockRules rules_;
  bool have_ = false;
  double last_c_ = 0.0, last_w_ = 0.0, last_advance_w_ = 0.0;
  double max_offset_ = 0.0;  // the largest offset seen since the reset
  double win_w0_ = 0.0, win_max_offset_ = 0.0;
  bool win_have_ = false;
  std::uint64_t samples_ = 0;
  double big_step_ = 0.0, big_step_w_ = 0.0;
  double rate_c0_ = 0.0, rate_w0_ = 0.0;
  std::uint64_t rate_n_ = 0;
  std::vector<Checkpoint>
      checkpoints_;  // one per closed window, the oldest dropped beyond what the checks need
};

}  // namespace loadtrim::controller
