// Bad input: every problem of one file, with its name and, where known, line. Thrown only while setting up.
#pragma once

#include <stdexcept>
#include <string>

#include "core/problem.hpp"

namespace loadtrim::config {

class InputError : public std::runtime_error {
 public:
  InputError(std::string file, core::Problems problems);
  const std::string& file() const { return file_; }
  const core::Problems& problems() const { return problems_; }

 private:
  std::string file_;
  core::Problems problems_;
};

// "file: key: message" lines, errors first.
std::string format_problems(const std::string& file, const core::Problems& problems);

}  // namespace loadtrim::config
