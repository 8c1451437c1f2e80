#include "controller/clock_guard.hpp"

#include <algorithm>
#include <cmath>
#include <iterator>

#include "core/problem.hpp"

namespace loadtrim::controller {

using core::num;

void ClockGuard::reset() {
  have_ = false;
  last_c_ = last_w_ = 0.0;
  max_offset_ = 0.0;
  win_w0_ = win_max_offset_ = 0.0;
  win_have_ = false;
  samples_ = 0;
  checkpoints_.clear();
  big_step_ = big_step_w_ = 0.0;
  rate_c0_ = rate_w0_ = 0.0;
  rate_n_ = 0;
}

const ClockGuard::Checkpoint* ClockGuard::reference(double w, double age_s) const {
  // Checkpoints are in time order: the last one old enough (a binary search: this runs for every sample).
  const auto it = std::upper_bound(checkpoints_.begin(), checkpoints_.end(), w - age_s,
                                   [](double t, const Checkpoint& cp) { return t < cp.w; });
  return it == checkpoints_.begin() ? nullptr : &*std::prev(it);
}

std::optional<std::string> ClockGuard::close_window(double w) {
  const double scale = std::max(rules_.scale, 1e-9);
  const Checkpoint* ref = reference(w, rules_.slow_window_wall_s);
  std::optional<std::string> v;
  if (ref && rules_.wall_related) {
    const double dw = w - ref->w;
    const double floor = ref->max_offset - (1.0 - rules_.min_rate) * scale * dw - scale * rules_.slack_wall_s;
    if (win_have_ && win_max_offset_ < floor) {
      if (last_c_ <= ref->c)
        v = "the controller's clock stopped: it read " + num(last_c_) + " s for " + num(dw, 1) +
            " s of wall time while samples arrived";
      else
        // Either fast enough in this window but behind since (its lag on the wall grew past the allowance),
        // or slower than the minimum rate now: the sentence gives both figures.
        v = "the controller's clock runs too slow: " + num(last_c_ - ref->c) + " s in " + num(dw, 1) +
            " s of wall time (" + num((last_c_ - ref->c) / dw) + "× real time; it stated " +
            num(rules_.scale) + "×), and it has fallen " +
            num((ref->max_offset - win_max_offset_) / scale, 2) +
            " s of wall time behind the time it kept before, beyond the " +
            num((ref->max_offset - floor) / scale, 2) + " s accepted (at least " +
            num(rules_.min_rate * rules_.scale) + "× over " + num(dw, 1) + " s, plus " +
            num(rules_.slack_wall_s) + " s)";
    }
  }
  checkpoints_.push_back({w, last_c_, max_offset_, samples_});
  // Keep what the references need: the newest checkpoint older than the longer window, and everything after
  // it.
  const double keep_from =
      w - std::max(rules_.slow_window_wall_s, rules_.fast_window_wall_s) - 2.0 * rules_.window_wall_s;
  while (checkpoints_.size() > 2 && checkpoints_[1].w <= keep_from) checkpoints_.erase(checkpoints_.begin());
  win_w0_ = w;
  win_have_ = false;
  return v;
}

std::optional<std::string> ClockGuard::on_sample(double c, double w, std::uint64_t index_gap) {
  if (!std::isfinite(c) || c < 0.0) return "the controller's clock reads " + num(c) + " s, not a time";
  const double scale = std::max(rules_.scale, 1e-9);
  const double offset = c - scale * w;
  if (!have_) {
    have_ = true;
    last_c_ = c;
    last_w_ = w;
    max_offset_ = offset;
    win_w0_ = w;
    win_max_offset_ = offset;
    win_have_ = true;
    samples_ = 1;
    last_advance_w_ = w;
    checkpoints_.push_back(
        {w, c, offset, samples_});  // the first reference: what the clocks said at the start
    rate_c0_ = c;
    rate_w0_ = w;
    rate_n_ = 0;
    return std::nullopt;
  }
  if (c < last_c_)
    return "the controller's clock ran backwards from " + num(last_c_) + " s to " + num(c) + " s (" +
           num(last_c_ - c) + " s back)";
  // On a streamed link consecutive samples are 1/rate apart in the controller's time: a step far beyond what
  // the samples in between explain is a jump, whatever the wall clock says (index_gap: samples since the last
  // one read).
  if (rules_.stream_rate_hz > 0.0 && index_gap > 0) {
    const double expected = static_cast<double>(index_gap) / rules_.stream_rate_hz;
    if (c - last_c_ > 2.0 * expected + 1.0)
      return "the controller's clock jumped ahead by " + num(c - last_c_) +
             " s between two consecutive samples (" + num(expected) + " s expected at " +
             num(rules_.stream_rate_hz) + " Hz)";
  }
  if (rules_.wall_related) {
    if (const Checkpoint* ref = reference(w, rules_.fast_window_wall_s)) {
      const double allowed = (rules_.max_rate - 1.0) * scale * (w - ref->w) + scale * rules_.slack_wall_s;
      if (offset > ref->max_offset + allowed) {
        const double step = c - last_c_,
                     step_allowed = rules_.max_rate * scale * (w - last_w_ + rules_.slack_wall_s);
        if (step > step_allowed || (big_step_ > 0.0 && big_step_w_ >= ref->w))
          return "the controller's clock jumped ahead by " + num(std::max(step, big_step_)) +
                 " s between two samples (its stated rate is " + num(rules_.scale) + "× real time)";
        return "the controller's clock runs too fast: " +
               num(offset - ref->max_offset + scale * (w - ref->w)) + " s in " + num(w - ref->w, 1) +
               " s of wall time (it stated " + num(rules_.scale) + "× real time, at most " +
               num(rules_.max_rate * rules_.scale) + "× accepted)";
      }
    }
  }
  // A single step larger than the clock could make in the wall time between (a jump, or samples lost in
  // bulk): kept so that the ahead check, once it has a reference, can name a jump as a jump.
  if (rules_.wall_related && c - last_c_ > rules_.max_rate * scale * (w - last_w_ + rules_.slack_wall_s)) {
    big_step_ = c - last_c_;
    big_step_w_ = w;
  }
  // Stopped: samples keep arriving but the clock has not advanced for 3 s of wall time (a clock that ticks at
  // least once a second passes; the tool's own pauses do not count: they leave no samples read in between).
  if (c > last_c_)
    last_advance_w_ = w;
  else if (rules_.wall_related && w - last_advance_w_ >= 3.0)
    return "the controller's clock stopped: it read " + num(c) + " s for " + num(w - last_advance_w_, 1) +
           " s of wall time while samples arrived";
  last_c_ = c;
  last_w_ = w;
  ++samples_;
  max_offset_ = std::max(max_offset_, offset);
  win_max_offset_ = win_have_ ? std::max(win_max_offset_, offset) : offset;
  win_have_ = true;
  // The stream rate, over at least 5 s of controller time (and 2 s of wall time for wall-related clocks):
  // samples per controller second outside [0.5, 2] × the rate asked — and, when the clock is tied to the
  // wall, samples per wall second outside the same band around rate × scale too, so that a racing or crawling
  // clock (which changes the first but not the second) is named as a clock by the rules above, not as a
  // stream.
  // The wall window is 2 s: long enough that a tool reading its stream in bursts on a loaded host does not
  // see a wall rate off by a factor of 2, and that a racing clock is named by the rule above first.
  if (rules_.stream_rate_hz > 0.0 && c - rate_c0_ >= 5.0 && (!rules_.wall_related || w - rate_w0_ >= 2.0)) {
    const double hz = static_cast<double>(rate_n_) / (c - rate_c0_);
    const bool off = hz < 0.5 * rules_.stream_rate_hz || hz > 2.0 * rules_.stream_rate_hz;
    const double per_wall = rules_.wall_related ? static_cast<double>(rate_n_) / (w - rate_w0_) : 0.0;
    const double want_wall = rules_.stream_rate_hz * scale;
    const bool off_wall = !rules_.wall_related || per_wall < 0.5 * want_wall || per_wall > 2.0 * want_wall;
    rate_c0_ = c;
    rate_w0_ = w;
    rate_n_ = 0;
    if (off && off_wall)
      return "the controller streams at " + num(hz, 1) + " Hz; " + num(rules_.stream_rate_hz) +
             " Hz was asked";
  }
  ++rate_n_;
  if (w - win_w0_ >= rules_.window_wall_s) return close_window(w);
  return std::nullopt;
}

std::optional<std::string> ClockGuard::on_status(double c, double w) {
  if (!std::isfinite(c) || c < 0.0) return "the controller's status clock reads " + num(c) + " s, not a time";
  if (!have_) return std::nullopt;
  const double scale = std::max(rules_.scale, 1e-9);
  bool bad = c < last_c_ - 1.0 * std::max(scale, 1.0);
  if (rules_.wall_related) bad = bad || c - scale * w > max_offset_ + 2.0 * scale * rules_.slack_wall_s;
  if (bad)
    return "the controller's status clock and sample clock disagree: status says " + num(c) +
           " s, the last sample " + num(last_c_) + " s, read " + num(w - last_w_, 3) + " s ago";
  return std::nullopt;
}

}  // namespace loadtrim::controller
