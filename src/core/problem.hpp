// A validation problem: which key is wrong and what is allowed. Loaders add the file name.
#pragma once

#include <cstdio>
#include <string>
#include <vector>

namespace loadtrim::core {

struct Problem {
  enum class Severity { error, warning };
  Severity severity = Severity::error;
  std::string key;      // dotted key path, e.g. "bands.half_width_kmh"
  std::string message;  // what is wrong and the allowed range
};

using Problems = std::vector<Problem>;

// A number as people write it in a message: 6 significant digits, no trailing zeros.
inline std::string num(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.6g", v);
  return buf;
}

// A number with a fixed count of decimals (reports and verdicts).
inline std::string num(double v, int decimals) {
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

inline bool has_errors(const Problems& ps) {
  for (const auto& p : ps)
    if (p.severity == Problem::Severity::error) return true;
  return false;
}

}  // namespace loadtrim::core
