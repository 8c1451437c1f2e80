// Numbers given on the command line, for loadtrim and loadtrim-sim alike (header only; the two programs link
// CLI11, this library does not). Every floating option takes one of these checks instead of CLI::Range, which
// lets NaN through (every comparison with NaN is false): the text must be a number as a whole, finite and,
// for number_in, within [lo, hi]. CLI11 puts the option's name in front of the message, so the operator reads
// "--time-scale: is nan, must be a finite number, allowed 1 to 2000" and the program exits 2 (README, "Exit
// codes").
#pragma once

#include <CLI/CLI.hpp>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <string>

namespace loadtrim::config {

// The value lies in [lo, hi]; unit (e.g. "N", "%", "" for none) follows the range in the message.
inline CLI::Validator number_in(double lo, double hi, const std::string& unit = "") {
  char range[96];
  std::snprintf(range, sizeof range, "%g to %g%s%s", lo, hi, unit.empty() ? "" : " ", unit.c_str());
  char desc[96];
  std::snprintf(desc, sizeof desc, "FLOAT in [%g - %g]", lo, hi);
  return CLI::Validator(
      [lo, hi, allowed = std::string(range)](std::string& in) -> std::string {
        char* end = nullptr;
        const double x = std::strtod(in.c_str(), &end);
        if (end == in.c_str() || *end != '\0') return "is " + in + ", allowed " + allowed;
        if (!std::isfinite(x)) return "is " + in + ", must be a finite number, allowed " + allowed;
        if (!(x >= lo && x <= hi)) return "is " + in + ", allowed " + allowed;
        return {};
      },
      desc, "number_in");
}

// Any finite number: for an option whose range the program checks elsewhere, or has none.
inline CLI::Validator finite_number() {
  return CLI::Validator(
      [](std::string& in) -> std::string {
        char* end = nullptr;
        const double x = std::strtod(in.c_str(), &end);
        if (end == in.c_str() || *end != '\0') return "is " + in + ", must be a number";
        if (!std::isfinite(x)) return "is " + in + ", must be a finite number";
        return {};
      },
      "FLOAT", "finite_number");
}

}  // namespace loadtrim::config
