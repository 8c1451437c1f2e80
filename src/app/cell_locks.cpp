#include "app/cell_locks.hpp"

#include <arpa/inet.h>
#include <netdb.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <unistd.h>

#include <algorithm>
#include <cstring>
#include <filesystem>
#include <vector>

#include "record/session_folder.hpp"
#include "record/sha256.hpp"

namespace loadtrim::app {

namespace fs = std::filesystem;

namespace {

// One name for one host however the cell file spells it ("localhost", "127.0.0.1", "127.000.000.001"): the
// first, in byte order of its text, of the addresses it resolves to, and every loopback address as "loopback"
// (a server on 127.0.0.1 is also reached as ::1's name). A name that does not resolve keeps its spelling (the
// connect fails anyway).
std::string host_key(const std::string& host) {
  addrinfo hints{};
  hints.ai_family = AF_UNSPEC;
  hints.ai_socktype = SOCK_STREAM;
  addrinfo* res = nullptr;
  if (::getaddrinfo(host.c_str(), nullptr, &hints, &res) != 0 || !res) return host;
  std::vector<std::string> found;
  bool loopback = false;
  for (addrinfo* a = res; a; a = a->ai_next) {
    char buf[INET6_ADDRSTRLEN] = "";
    if (a->ai_family == AF_INET) {
      const auto* in = reinterpret_cast<const sockaddr_in*>(a->ai_addr);
      if ((ntohl(in->sin_addr.s_addr) >> 24) == 127) loopback = true;
      ::inet_ntop(AF_INET, &in->sin_addr, buf, sizeof buf);
    } else if (a->ai_family == AF_INET6) {
      const auto* in6 = reinterpret_cast<const sockaddr_in6*>(a->ai_addr);
      if (IN6_IS_ADDR_LOOPBACK(&in6->sin6_addr)) loopback = true;
      if (IN6_IS_ADDR_V4MAPPED(&in6->sin6_addr)) {  // ::ffff:a.b.c.d is a.b.c.d
        in_addr v4{};
        std::memcpy(&v4, &in6->sin6_addr.s6_addr[12], 4);
        if ((ntohl(v4.s_addr) >> 24) == 127) loopback = true;
        ::inet_ntop(AF_INET, &v4, buf, sizeof buf);
      } else {
        ::inet_ntop(AF_INET6, &in6->sin6_addr, buf, sizeof buf);
      }
    }
    if (*buf) found.emplace_back(buf);
  }
  ::freeaddrinfo(res);
  if (loopback) return "loopback";
  if (found.empty()) return host;
  std::sort(found.begin(), found.end());
  return found.front();
}

}  // namespace

std::string endpoint_key(const controller::CellConfig& cell) {
  if (cell.adapter == "line-tcp" || cell.adapter == "modbus-tcp")
    return "tcp-" + host_key(cell.host) + "-" + std::to_string(cell.port);
  if (cell.adapter == "line-serial" || cell.adapter == "modbus-rtu") {
    std::error_code ec;
    const fs::path real = fs::weakly_canonical(cell.serial.device, ec);
    return "serial-" + (ec ? cell.serial.device : real.string());
  }
  return "";
}

namespace {

record::LockHolder me(const std::string& command, const std::string& folder) {
  record::LockHolder h;
  h.pid = static_cast<long>(::getpid());
  h.command = command;
  h.folder = folder;
  h.utc = record::utc_now();
  char host[256] = "";
  if (::gethostname(host, sizeof host - 1) == 0) h.host = host;
  return h;
}

bool take(const std::string& path, record::LockMode mode, const record::LockHolder& who,
          const std::string& what, std::optional<record::FileLock>& held, std::string& message) {
  std::string busy, stale;
  held = record::FileLock::try_acquire(path, mode, who, what, busy, &stale);
  message = held ? stale : busy;
  return held.has_value();
}

}  // namespace

bool lock_cell(const controller::CellConfig& cell, record::LockMode mode, const std::string& command,
               const std::string& folder, std::optional<record::FileLock>& held, std::string& message) {
  held.reset();
  message.clear();
  const std::string key = endpoint_key(cell);
  if (key.empty()) return true;
  try {
    return take(record::cell_lock_path(record::lock_dir(), key), mode, me(command, folder), "cell", held,
                message);
  } catch (const std::exception& e) {
    message = std::string("cannot lock the cell: ") + e.what();
    return false;
  }
}

bool lock_folder(const std::string& folder, const std::string& command, std::optional<record::FileLock>& held,
                 std::string& message) {
  held.reset();
  message.clear();
  std::error_code ec;
  const std::string abs = fs::weakly_canonical(folder, ec).string();
  try {
    const std::string path = (fs::path(record::lock_dir()) /
                              ("folder-" + record::sha256_hex(ec ? folder : abs).substr(0, 32) + ".lock"))
                                 .string();
    return take(path, record::LockMode::exclusive, me(command, ec ? folder : abs), "folder", held, message);
  } catch (const std::exception& e) {
    message = std::string("cannot lock the folder: ") + e.what();
    return false;
  }
}

}  // namespace loadtrim::app
