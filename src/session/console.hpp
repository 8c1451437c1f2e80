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
  Console(Mode mode, std::FILE* out = stdout);
  bool on_event(const Event& e) override;
  void on_progress(const Progress& p) override;
  std::string name() const override { return "the console"; }

 private:
  Mode mode_;
  std::FILE* out_;
  bool tty_;
  bool progress_shown_ = false;
  TextContext text_;
  double last_json_progress_ = -1e9;
  void clear_progress();
};

}  // namespace loadtrim::session
