#include "link.hpp"

#include <arpa/inet.h>
#include <netdb.h>
#include <netinet/in.h>
#include <sys/socket.h>

#include <algorithm>
#include <cstring>
#include <filesystem>
#include <string>
#include <vector>

#include "config/toml_reader.hpp"

namespace loadtrim::adapters {

TcpAddress read_tcp_address(config::TomlReader& r) {
  TcpAddress a;
  a.host = r.string_or("controller.host", "127.0.0.1");
  if (a.host.empty())
    r.error("controller.host", "is empty: a host name or address (127.0.0.1 when left out)");
  a.port = static_cast<unsigned>(r.integer_or("controller.port", 0, 1, 65535));
  // integer_or accepts a missing key (it is optional for the reader); an address without a port is not.
  if (!r.has("controller.port")) r.error("controller.port", "is missing, allowed 1 to 65535");
  return a;
}

SerialLine read_serial_line(config::TomlReader& r) {
  SerialLine s;
  s.device = r.string("controller.device");
  if (r.has("controller.device") && s.device.empty())
    r.error("controller.device", "is empty: the serial device's path (e.g. /dev/ttyUSB0)");
  s.baud = static_cast<unsigned>(r.integer_or("controller.baud", 115200, 1200, 4000000));
  const std::string parity = r.choice("controller.parity", {"none", "odd", "even"}, std::string("none"));
  s.parity = parity == "odd"    ? SerialLine::Parity::odd
             : parity == "even" ? SerialLine::Parity::even
                                : SerialLine::Parity::none;
  s.stop_bits = r.integer_or("controller.stop_bits", 1, 1, 2) == 2 ? SerialLine::StopBits::two
                                                                   : SerialLine::StopBits::one;
  s.data_bits = static_cast<unsigned>(r.integer_or("controller.data_bits", 8, 7, 8));
  return s;
}

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

std::string link_key(const TcpAddress& a) {
  return "tcp-" + host_key(a.host) + "-" + std::to_string(a.port);
}

std::string link_key(const SerialLine& s) {
  // Two names of one port (a udev symlink and the device node) must take the same lock.
  std::error_code ec;
  const std::filesystem::path real = std::filesystem::weakly_canonical(s.device, ec);
  return "serial-" + (ec ? s.device : real.string());
}

}  // namespace loadtrim::adapters
