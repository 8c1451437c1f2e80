#include "config/input_error.hpp"

namespace loadtrim::config {

std::string format_problems(const std::string& file, const core::Problems& problems) {
  std::string out;
  for (int pass = 0; pass < 2; ++pass) {
    const auto want = pass == 0 ? core::Problem::Severity::error : core::Problem::Severity::warning;
    for (const auto& p : problems) {
      if (p.severity != want) continue;
      out += file + ": " + (pass == 0 ? "error: " : "warning: ") + (p.key.empty() ? "" : p.key + ": ") +
             p.message + "\n";
    }
  }
  return out;
}

InputError::InputError(std::string file, core::Problems problems)
    : std::runtime_error(format_problems(file, problems)),
      file_(std::move(file)),
      problems_(std::move(problems)) {}

}  // namespace loadtrim::config
