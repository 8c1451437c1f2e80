#include "controller/clock_guard.hpp"

#include <algorithm>
#include <cmath>

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
}

const ClockGuard::Checkpoint* ClockGuard::reference(double w, double age_s) const {
  const Checkpoint* ref = nullptr;
  for (const auto& cp : checkpoints_)
    if (cp.w <= w - age_s) ref = &cp;  // checkpoints are in time order: the last one old enough
  return ref;
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
        v = "the controller's clock stopped: it read " + num(last_c_) + " s for " + num(dw, 1) + " s of wall time while samples arrived";
      else
        v = "the controller's clock runs too slow: " + num(last_c_ - ref->c) + " s in " + num(dw, 1) + " s of wall time (" +
            num((last_c_ - ref->c) / dw) + "× real time; it stated " + num(rules_.scale) + "×, at least " +
            num(rules_.min_rate * rules_.scale) + "× accepted)";
    }
  }
  if (!v && ref && rules_.stream_rate_hz > 0.0 && last_c_ > ref->c) {
    const double hz = static_cast<double>(samples_ - ref->samples) / (last_c_ - ref->c);
    if (hz < 0.5 * rules_.stream_rate_hz || hz > 2.0 * rules_.stream_rate_hz)
      v = "the controller streams at " + num(hz, 1) + " Hz; " + num(rules_.stream_rate_hz) + " Hz was asked";
  }
  checkpoints_.push_back({w, last_c_, max_offset_, samples_});
  // Keep what the references need: the newest checkpoint older than the longer window, and everything after it.
  const double keep_from = w - std::max(rules_.slow_window_wall_s, rules_.fast_window_wall_s) - 2.0 * rules_.window_wall_s;
  while (checkpoints_.size() > 2 && checkpoints_[1].w <= keep_from) checkpoints_.erase(checkpoints_.begin());
  win_w0_ = w;
  win_have_ = false;
  return v;
}

std::optional<std::string> ClockGuard::on_sample(double c, double w) {
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
    return std::nullopt;
  }
  if (c < last_c_)
    return "the controller's clock ran backwards from " + num(last_c_) + " s to " + num(c) + " s (" + num(last_c_ - c) + " s back)";
  if (rules_.wall_related) {
    if (const Checkpoint* ref = reference(w, rules_.fast_window_wall_s)) {
      const double allowed = (rules_.max_rate - 1.0) * scale * (w - ref->w) + scale * rules_.slack_wall_s;
      if (offset > ref->max_offset + allowed) {
        const double step = c - last_c_, step_allowed = rules_.max_rate * scale * (w - last_w_ + rules_.slack_wall_s);
        if (step > step_allowed || (big_step_ > 0.0 && big_step_w_ >= ref->w))
          return "the controller's clock jumped ahead by " + num(std::max(step, big_step_)) + " s between two samples (its stated rate is " +
                 num(rules_.scale) + "× real time)";
        return "the controller's clock runs too fast: " + num(offset - ref->max_offset + scale * (w - ref->w)) + " s in " +
               num(w - ref->w, 1) + " s of wall time (it stated " + num(rules_.scale) + "× real time, at most " +
               num(rules_.max_rate * rules_.scale) + "× accepted)";
      }
    }
  }
  // A single step larger than the clock could make in the wall time between (a jump, or samples lost in bulk): kept
  // so that the ahead check, once it has a reference, can name a jump as a jump.
  if (rules_.wall_related && c - last_c_ > rules_.max_rate * scale * (w - last_w_ + rules_.slack_wall_s)) {
    big_step_ = c - last_c_;
    big_step_w_ = w;
  }
  last_c_ = c;
  last_w_ = w;
  ++samples_;
  max_offset_ = std::max(max_offset_, offset);
  win_max_offset_ = win_have_ ? std::max(win_max_offset_, offset) : offset;
  win_have_ = true;
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
    return "the controller's status clock and sample clock disagree: status says " + num(c) + " s, the last sample " + num(last_c_) +
           " s, read " + num(w - last_w_, 3) + " s ago";
  return std::nullopt;
}

}  // namespace loadtrim::controller
