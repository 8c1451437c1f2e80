// The one line loadtrim-sim prints when it is ready, and its parser for the programs that start it:
//   "loadtrim-sim listening <tcp|modbus-tcp> <host>:<port> pid=<n>" or "loadtrim-sim listening
//   <pty|modbus-rtu> <path> pid=<n>"
#pragma once

#include <string>

namespace loadtrim::sim {

struct Announcement {
  bool ok = false;
  unsigned short port = 0;  // TCP kinds
  std::string device;       // pty / serial kinds
};

inline Announcement parse_announcement(const std::string& line) {
  Announcement a;
  const std::string key = "loadtrim-sim listening ";
  const auto p = line.find(key);
  if (p == std::string::npos) return a;
  const auto kind_end = line.find(' ', p + key.size());
  if (kind_end == std::string::npos) return a;
  const std::string kind = line.substr(p + key.size(), kind_end - p - key.size());
  const auto where_end = line.find(' ', kind_end + 1);
  const std::string where = line.substr(
      kind_end + 1, where_end == std::string::npos ? std::string::npos : where_end - kind_end - 1);
  if (kind == "tcp" || kind == "modbus-tcp") {
    const auto colon = where.rfind(':');
    if (colon == std::string::npos) return a;
    try {
      a.port = static_cast<unsigned short>(std::stoi(where.substr(colon + 1)));
    } catch (...) {
      return a;
    }
  } else {
    a.device = where;
  }
  a.ok = true;
  return a;
}

}  // namespace loadtrim::sim
