// The console observer: live progress and the per-coast-down table for the operator, or nothing but the
// result (quiet), or one JSON object per line for scripts (json).
#pragma once

#include <cstdio>

#include "session/event_text.hpp"
#include "session/session.hpp"

namespace loadtrim::session {

class Console : public Observer {
 public:
  enum class Mode { normal, quiet, json };
  // The units coefficients and forces are shown in (the record is always SI): metric (N, N/(km/h),
  // N/(km/h)²), US (A, B, C in lbf, lbf/mph, lbf/mph²; exact NIST factors), or both.
  enum class Units { metric, us, both };
  Console(Mode mode, std::FILE* out = stdout);
  void set_units(Units u) { units_ = u; }
  bool on_event(const Event& e) override;
  void on_progress(const Progress& p) override;
  std::string name() const override { return "the console"; }

 private:
  Mode mode_;
  Units units_ = Units::metric;
  std::FILE* out_;
  bool tty_;
  bool progress_shown_ = false;
  TextContext text_;
  double last_json_progress_ = -1e9;
  void clear_progress();
  std::string coefficients(const core::RoadLoad& c) const;  // one table cell, in the console's units
  std::string units_words() const;                          // what the coefficients' columns hold
  std::string force(double n, int decimals) const;          // "10.0 N", "2.25 lbf" or "10.0 N (2.25 lbf)"
};

}  // namespace loadtrim::session
