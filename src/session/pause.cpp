#include "session/pause.hpp"

namespace loadtrim::session {

bool PauseControl::request_pause(PauseRequest r) {
  const std::lock_guard<std::mutex> lock(m_);
  if (pause_) return false;
  pause_ = std::move(r);
  continue_.reset();
  paused_.store(true);
  return true;
}

bool PauseControl::request_continue(PauseRequest r) {
  const std::lock_guard<std::mutex> lock(m_);
  if (!pause_ || continue_) return false;
  continue_ = std::move(r);
  return true;
}

std::optional<PauseRequest> PauseControl::pause_request() const {
  const std::lock_guard<std::mutex> lock(m_);
  return pause_;
}

std::optional<PauseRequest> PauseControl::take_continue() {
  const std::lock_guard<std::mutex> lock(m_);
  if (!continue_) return std::nullopt;
  std::optional<PauseRequest> c = std::move(continue_);
  continue_.reset();
  pause_.reset();
  paused_.store(false);
  return c;
}

}  // namespace loadtrim::session
