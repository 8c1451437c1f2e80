#include "support/modbus_lying_proxy.hpp"

#include <arpa/inet.h>
#include <fcntl.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <pty.h>
#include <sys/socket.h>
#include <termios.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <deque>
#include <list>
#include <map>
#include <mutex>
#include <stdexcept>
#include <thread>
#include <vector>

namespace loadtrim::testing {

using modbus::Q;
using modbus::Table;
using Clock = std::chrono::steady_clock;

const char* to_string(ModbusLie lie) {
  switch (lie) {
    case ModbusLie::none:
      return "none";
    case ModbusLie::clock_frozen:
      return "clock_frozen";
    case ModbusLie::clock_backwards:
      return "clock_backwards";
    case ModbusLie::clock_reset:
      return "clock_reset";
    case ModbusLie::clock_jumps_ahead:
      return "clock_jumps_ahead";
    case ModbusLie::clock_runs_fast:
      return "clock_runs_fast";
    case ModbusLie::fault_flag:
      return "fault_flag";
    case ModbusLie::at_limit:
      return "at_limit";
    case ModbusLie::undefined_bits:
      return "undefined_bits";
    case ModbusLie::over_speed:
      return "over_speed";
    case ModbusLie::busy_sometimes:
      return "busy_sometimes";
    case ModbusLie::busy_always:
      return "busy_always";
    case ModbusLie::gateway_always:
      return "gateway_always";
    case ModbusLie::illegal_address:
      return "illegal_address";
    case ModbusLie::trickle:
      return "trickle";
    case ModbusLie::silence:
      return "silence";
    case ModbusLie::late_reply:
      return "late_reply";
  }
  return "?";
}

std::string describe(const ModbusTrigger& t) {
  if (t.at_start) return "from the start";
  return "after " + std::to_string(static_cast<int>(t.after_s)) + " s in mode " + std::to_string(t.mode_code);
}

namespace {

constexpr std::size_t kMaxBuffer = 1u << 20;

void nonblocking(int fd) {
  ::fcntl(fd, F_SETFL, ::fcntl(fd, F_GETFL) | O_NONBLOCK);
}

struct Pending {  // a request on its way, by transaction id
  int fn = 0, addr = 0, count = 0;
};

struct Pair {
  int tool = -1, ctrl = -1;
  std::vector<std::uint8_t> from_tool, from_ctrl, to_tool, to_ctrl;
  std::map<std::uint16_t, Pending> pending;  // TCP: by transaction id
  std::deque<Pending> rtu_pending;           // RTU: one request at a time, in order
  Clock::time_point next_trickle{};
  std::vector<std::pair<Clock::time_point, std::vector<std::uint8_t>>> held;  // late replies
  bool dead = false;
};

// One complete MBAP frame at the front of `b`, or 0.
std::size_t tcp_frame_length(const std::vector<std::uint8_t>& b) {
  if (b.size() < 7) return 0;
  const std::size_t len = (std::size_t(b[4]) << 8) | b[5];
  return b.size() >= 6 + len ? 6 + len : 0;
}

// One complete RTU frame at the front of `b` (unit, PDU, CRC), or 0; SIZE_MAX when the bytes cannot start a
// frame of the functions the adapter uses (the buffer is then dropped to find the next frame).
constexpr std::size_t kNoFrame = static_cast<std::size_t>(-1);
std::size_t rtu_frame_length(const std::vector<std::uint8_t>& b, bool request) {
  if (b.size() < 2) return 0;
  const int fn = b[1];
  std::size_t n = 0;
  if (!request && (fn & 0x80))
    n = 5;
  else if (fn == 5 || fn == 6 || (request && fn >= 1 && fn <= 4) || (!request && (fn == 15 || fn == 16)))
    n = 8;
  else if (!request && fn >= 1 && fn <= 4)
    n = b.size() >= 3 ? 5 + std::size_t(b[2]) : 0;
  else if (request && (fn == 15 || fn == 16))
    n = b.size() >= 7 ? 9 + std::size_t(b[6]) : 0;
  else
    return kNoFrame;
  return n > 0 && b.size() >= n ? n : 0;
}

// Modbus RTU's CRC-16 (polynomial 0xA001 reflected, initial 0xFFFF; low byte first on the wire).
std::uint16_t crc16(const std::uint8_t* d, std::size_t n) {
  std::uint16_t crc = 0xFFFF;
  for (std::size_t i = 0; i < n; ++i) {
    crc ^= d[i];
    for (int k = 0; k < 8; ++k) crc = (crc & 1) ? static_cast<std::uint16_t>((crc >> 1) ^ 0xA001) : crc >> 1;
  }
  return crc;
}
void put_crc(std::vector<std::uint8_t>& f) {
  const std::uint16_t c = crc16(f.data(), f.size() - 2);
  f[f.size() - 2] = static_cast<std::uint8_t>(c & 0xFF);
  f[f.size() - 1] = static_cast<std::uint8_t>(c >> 8);
}

}  // namespace

struct ModbusLyingProxy::Impl {
  modbus::RegisterMap map;
  ModbusLie lie;
  ModbusTrigger trigger;
  int listen_fd = -1;
  unsigned short port = 0, ctrl_port = 0;
  std::atomic<bool> stop{false};
  std::thread worker;
  mutable std::mutex mu;
  // Guarded by mu:
  bool armed = false;
  std::optional<Clock::time_point> began;
  std::vector<std::pair<int, bool>> commands;  // code written, after the lie began
  ModbusProxyStats stats;
  // The worker's own:
  std::list<Pair> pairs;
  double time_s = 0.0;  // the last true time read
  bool have_time = false;
  int mode = -1;
  double mode_since_s = 0.0;
  double lie_t0 = 0.0;  // the true time when the lie began (clock lies)
  bool lie_t0_set = false;
  std::uint64_t request_count = 0;
  bool illegal_sent = false, late_sent = false;
  std::vector<std::uint8_t> last_exception_request;  // the request last answered with an exception...
  bool last_was_exception = false;                   // ...and whether nothing was forwarded since
  bool run_counted = false;                          // the current run has its entry in exception_runs
  bool rtu = false;
  std::string tool_device, controller_device;
  int slaves[2] = {
      -1, -1};  // the proxy keeps each pseudo-terminal's slave open (no EIO between the tool's opens)

  void begin() {
    std::lock_guard<std::mutex> l(mu);
    if (!began) began = Clock::now();
  }
  bool is_armed() {
    std::lock_guard<std::mutex> l(mu);
    return armed;
  }

  void update_trigger() {
    if (trigger.at_start || !have_time) return;
    if (mode == trigger.mode_code && time_s - mode_since_s >= trigger.after_s) {
      std::lock_guard<std::mutex> l(mu);
      armed = true;
    }
  }

  // The value the tool is told for quantity q (its true value v).
  double lie_about(Q q, double v) {
    if (!is_armed()) return v;
    if (q == Q::time) {
      if (!lie_t0_set) lie_t0_set = true, lie_t0 = v;
      switch (lie) {
        case ModbusLie::clock_frozen:
          return lie_t0;
        case ModbusLie::clock_backwards:
          return v - 100.0;
        case ModbusLie::clock_reset:
          return v - lie_t0;
        case ModbusLie::clock_jumps_ahead:
          return v + 1000.0;
        case ModbusLie::clock_runs_fast:
          return lie_t0 + 10.0 * (v - lie_t0);
        default:
          return v;
      }
    }
    if (q == Q::status) {
      const auto bits = static_cast<std::uint32_t>(v);
      if (lie == ModbusLie::fault_flag) return bits | 0x02u;
      if (lie == ModbusLie::at_limit) return bits | 0x08u;
      if (lie == ModbusLie::undefined_bits) return bits | 0x40u;
    }
    if (q == Q::speed && lie == ModbusLie::over_speed && mode == modbus::kCommandHold && v > 100.0)
      return v * 1.5;
    return v;
  }

  // A read reply's words: learn the true time and mode, and tell the lie.
  void alter(const Pending& p, std::uint8_t* data, int words) {
    const Table t = p.fn == 0x04 ? Table::input : Table::holding;
    // Time first (the trigger reads it), then mode, then the rest.
    for (Q q : {Q::time, Q::mode, Q::status, Q::speed}) {
      const auto& r = map[q];
      if (!r.present || r.table != t || r.address < p.addr || r.address + r.words() > p.addr + words)
        continue;
      std::uint16_t w[4] = {0, 0, 0, 0};
      const int off = r.address - p.addr;
      for (int i = 0; i < r.words(); ++i)
        w[i] = static_cast<std::uint16_t>(data[2 * (off + i)] << 8 | data[2 * (off + i) + 1]);
      const double v = modbus::decode(r, w);
      if (q == Q::time) {
        time_s = v;
        have_time = true;
      }
      if (q == Q::mode) {
        const int m = static_cast<int>(v);
        if (m != mode) mode = m, mode_since_s = time_s;
      }
      update_trigger();
      const double told = lie_about(q, v);
      if (told == v) continue;
      if (!modbus::encode(r, std::max(0.0, told), w)) continue;
      for (int i = 0; i < r.words(); ++i) {
        data[2 * (off + i)] = static_cast<std::uint8_t>(w[i] >> 8);
        data[2 * (off + i) + 1] = static_cast<std::uint8_t>(w[i] & 0xFF);
      }
      begin();
      std::lock_guard<std::mutex> l(mu);
      ++stats.values_altered;
    }
  }

  void record_command(int fn, int addr, const std::uint8_t* pdu, std::size_t n) {
    const auto& c = map[Q::command];
    if (!c.present || c.table != Table::holding) return;
    int value = -1;
    if (fn == 0x06 && n >= 5 && addr == c.address) value = pdu[3] << 8 | pdu[4];
    if (fn == 0x10 && n >= 6) {
      const int count = pdu[3] << 8 | pdu[4];
      const int off = c.address - addr;
      if (off >= 0 && off < count && n >= static_cast<std::size_t>(6 + 2 * (off + 1)))
        value = pdu[6 + 2 * off] << 8 | pdu[6 + 2 * off + 1];
    }
    if (value < 0) return;
    std::lock_guard<std::mutex> l(mu);
    commands.emplace_back(value, began.has_value());
  }

  std::size_t header() const { return rtu ? 1 : 7; }  // bytes before the PDU
  std::size_t trailer() const { return rtu ? 2 : 0; }

  void exception_reply(Pair& pr, const std::vector<std::uint8_t>& f, int code) {
    std::vector<std::uint8_t> out;
    if (rtu)
      out = {f[0], static_cast<std::uint8_t>(f[1] | 0x80), static_cast<std::uint8_t>(code), 0, 0};
    else
      out = {f[0],
             f[1],
             0,
             0,
             0,
             3,
             f[6],
             static_cast<std::uint8_t>(f[7] | 0x80),
             static_cast<std::uint8_t>(code)};
    if (rtu) put_crc(out);
    pr.to_tool.insert(pr.to_tool.end(), out.begin(), out.end());
    begin();
    std::lock_guard<std::mutex> l(mu);
    ++stats.exceptions_sent;
  }

  void on_request(Pair& pr, std::vector<std::uint8_t> f) {
    {
      std::lock_guard<std::mutex> l(mu);
      ++stats.requests;
    }
    ++request_count;
    const std::uint16_t tid = rtu ? 0 : static_cast<std::uint16_t>(f[0] << 8 | f[1]);
    const std::uint8_t* pdu = f.data() + header();
    const std::size_t n = f.size() - header() - trailer();
    Pending p;
    p.fn = n >= 1 ? pdu[0] : 0;
    p.addr = n >= 3 ? (pdu[1] << 8 | pdu[2]) : 0;
    p.count = n >= 5 ? (pdu[3] << 8 | pdu[4]) : 0;
    record_command(p.fn, p.addr, pdu, n);
    if (is_armed()) {
      int code = 0;
      if (lie == ModbusLie::busy_always || (lie == ModbusLie::busy_sometimes && request_count % 5 == 0))
        code = 0x06;
      if (lie == ModbusLie::gateway_always) code = 0x0B;
      if (lie == ModbusLie::illegal_address && !illegal_sent) code = 0x02, illegal_sent = true;
      if (code) {
        // A run of the same request answered with exceptions is one request and its retries.
        std::vector<std::uint8_t> key(f.begin() + (rtu ? 0 : 2), f.end());
        {
          std::lock_guard<std::mutex> l(mu);
          auto& runs = stats.exception_runs;
          if (!(last_was_exception && key == last_exception_request)) {
            run_counted = runs.size() < 64;
            if (run_counted) {
              runs.push_back(0);
              stats.exception_run_requests.emplace_back(p.fn, p.addr);
            }
          }
          if (run_counted) ++runs.back();
        }
        last_exception_request = std::move(key);
        last_was_exception = true;
        return exception_reply(pr, f, code);
      }
    }
    last_was_exception = false;
    if (rtu)
      pr.rtu_pending.push_back(p);
    else
      pr.pending[tid] = p;
    pr.to_ctrl.insert(pr.to_ctrl.end(), f.begin(), f.end());
  }

  void on_reply(Pair& pr, std::vector<std::uint8_t> f) {
    {
      std::lock_guard<std::mutex> l(mu);
      ++stats.replies;
    }
    std::optional<Pending> req;
    if (rtu) {
      if (!pr.rtu_pending.empty()) req = pr.rtu_pending.front(), pr.rtu_pending.pop_front();
    } else if (const auto it = pr.pending.find(static_cast<std::uint16_t>(f[0] << 8 | f[1]));
               it != pr.pending.end()) {
      req = it->second;
      pr.pending.erase(it);
    }
    if (req) {
      std::uint8_t* pdu = f.data() + header();
      const std::size_t n = f.size() - header() - trailer();
      if ((req->fn == 0x03 || req->fn == 0x04) && n >= 2 && pdu[0] == req->fn && n >= 2u + pdu[1])
        alter(*req, pdu + 2, pdu[1] / 2);
      if (rtu) put_crc(f);
      // The late reply: the first reply to a read of the mode register, held back 1.5 s (past the tool's
      // 1 s reply timeout, so it arrives when the tool has asked something else).
      const auto& m = map[Q::mode];
      if (is_armed() && lie == ModbusLie::late_reply && !late_sent && req->fn == 0x04 &&
          m.table == Table::input && req->addr == m.address) {
        late_sent = true;
        begin();
        pr.held.emplace_back(Clock::now() + std::chrono::milliseconds(1500), std::move(f));
        return;
      }
    }
    if (is_armed() && lie == ModbusLie::silence) {
      begin();
      std::lock_guard<std::mutex> l(mu);
      ++stats.replies_dropped;
      return;
    }
    pr.to_tool.insert(pr.to_tool.end(), f.begin(), f.end());
  }

  void accept_one() {
    const int fd = ::accept4(listen_fd, nullptr, nullptr, SOCK_CLOEXEC);
    if (fd < 0) return;
    const int c = ::socket(AF_INET, SOCK_STREAM | SOCK_CLOEXEC, 0);
    sockaddr_in a{};
    a.sin_family = AF_INET;
    a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    a.sin_port = htons(ctrl_port);
    if (c < 0 || ::connect(c, reinterpret_cast<sockaddr*>(&a), sizeof a) != 0) {
      ::close(fd);
      if (c >= 0) ::close(c);
      return;
    }
    const int one = 1;
    ::setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
    ::setsockopt(c, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
    nonblocking(fd);
    nonblocking(c);
    Pair p;
    p.tool = fd;
    p.ctrl = c;
    pairs.push_back(std::move(p));
    last_was_exception = false;  // a new connection: its requests are new ones
    std::lock_guard<std::mutex> l(mu);
    ++stats.connections;
  }

  // Reads what is there; false when the peer closed.
  static bool drain(int fd, std::vector<std::uint8_t>& into) {
    std::uint8_t buf[4096];
    for (;;) {
      if (into.size() > kMaxBuffer) return true;
      const ssize_t n = ::read(fd, buf, sizeof buf);
      if (n > 0) {
        into.insert(into.end(), buf, buf + n);
        continue;
      }
      if (n == 0) return false;
      // EIO: a pseudo-terminal whose other side is closed for a moment (the tool reconnecting).
      return errno == EAGAIN || errno == EWOULDBLOCK || errno == EINTR || errno == EIO;
    }
  }
  bool flush(int fd, std::vector<std::uint8_t>& from, std::size_t at_most) const {
    const std::size_t k = std::min(from.size(), at_most);
    if (k == 0) return true;
    const ssize_t n = rtu ? ::write(fd, from.data(), k) : ::send(fd, from.data(), k, MSG_NOSIGNAL);
    if (n > 0) from.erase(from.begin(), from.begin() + n);
    return n >= 0 || errno == EAGAIN || errno == EWOULDBLOCK || errno == EINTR;
  }

  void run() {
    while (!stop) {
      if (trigger.at_start) {
        std::lock_guard<std::mutex> l(mu);
        armed = true;
      }
      std::vector<pollfd> fds{{rtu ? -1 : listen_fd, POLLIN, 0}};
      for (auto& p : pairs) {
        fds.push_back({p.tool, static_cast<short>(POLLIN | (p.to_tool.empty() ? 0 : POLLOUT)), 0});
        fds.push_back({p.ctrl, static_cast<short>(POLLIN | (p.to_ctrl.empty() ? 0 : POLLOUT)), 0});
      }
      ::poll(fds.data(), fds.size(), 10);
      if (fds[0].revents & POLLIN) accept_one();
      const bool trickling = lie == ModbusLie::trickle && is_armed();
      for (auto& p : pairs) {
        if (!drain(p.tool, p.from_tool)) p.dead = true;
        if (!drain(p.ctrl, p.from_ctrl)) p.dead = true;
        const auto length = [&](const std::vector<std::uint8_t>& b, bool request) {
          return rtu ? rtu_frame_length(b, request) : tcp_frame_length(b);
        };
        for (std::size_t n; (n = length(p.from_tool, true)) > 0;) {
          if (n == kNoFrame) {
            p.from_tool.clear();
            break;
          }
          std::vector<std::uint8_t> f(p.from_tool.begin(), p.from_tool.begin() + n);
          p.from_tool.erase(p.from_tool.begin(), p.from_tool.begin() + n);
          on_request(p, std::move(f));
        }
        for (std::size_t n; (n = length(p.from_ctrl, false)) > 0;) {
          if (n == kNoFrame) {
            p.from_ctrl.clear();
            break;
          }
          std::vector<std::uint8_t> f(p.from_ctrl.begin(), p.from_ctrl.begin() + n);
          p.from_ctrl.erase(p.from_ctrl.begin(), p.from_ctrl.begin() + n);
          on_reply(p, std::move(f));
        }
        for (auto h = p.held.begin(); h != p.held.end();) {
          if (Clock::now() < h->first) {
            ++h;
            continue;
          }
          p.to_tool.insert(p.to_tool.end(), h->second.begin(), h->second.end());
          h = p.held.erase(h);
          std::lock_guard<std::mutex> l(mu);
          ++stats.late_replies_delivered;
        }
        if (!flush(p.ctrl, p.to_ctrl, p.to_ctrl.size())) p.dead = true;
        if (trickling) {
          if (!p.to_tool.empty() && Clock::now() >= p.next_trickle) {
            begin();
            if (!flush(p.tool, p.to_tool, 1)) p.dead = true;
            p.next_trickle = Clock::now() + std::chrono::milliseconds(150);
          }
        } else if (!flush(p.tool, p.to_tool, p.to_tool.size())) {
          p.dead = true;
        }
      }
      for (auto it = pairs.begin(); it != pairs.end();) {
        if (it->dead) {
          ::close(it->tool);
          ::close(it->ctrl);
          it = pairs.erase(it);
        } else {
          ++it;
        }
      }
    }
    for (auto& p : pairs) {
      ::close(p.tool);
      ::close(p.ctrl);
    }
  }
};

ModbusLyingProxy::ModbusLyingProxy(unsigned short controller_port, modbus::RegisterMap map, ModbusLie lie,
                                   ModbusTrigger trigger)
    : impl_(std::make_unique<Impl>()) {
  impl_->map = std::move(map);
  impl_->lie = lie;
  impl_->trigger = trigger;
  impl_->ctrl_port = controller_port;
  if (lie == ModbusLie::none) impl_->trigger = ModbusTrigger::in_mode(-100, 0.0);  // never armed
  impl_->listen_fd = ::socket(AF_INET, SOCK_STREAM | SOCK_CLOEXEC, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = 0;
  socklen_t len = sizeof a;
  if (impl_->listen_fd < 0 || ::bind(impl_->listen_fd, reinterpret_cast<sockaddr*>(&a), sizeof a) != 0 ||
      ::listen(impl_->listen_fd, 8) != 0 ||
      ::getsockname(impl_->listen_fd, reinterpret_cast<sockaddr*>(&a), &len) != 0) {
    if (impl_->listen_fd >= 0) ::close(impl_->listen_fd);
    throw std::runtime_error("modbus lying proxy: cannot listen");
  }
  nonblocking(impl_->listen_fd);
  impl_->port = ntohs(a.sin_port);
  impl_->worker = std::thread([this] { impl_->run(); });
}

ModbusLyingProxy::ModbusLyingProxy(modbus::RegisterMap map, ModbusLie lie, ModbusTrigger trigger)
    : impl_(std::make_unique<Impl>()) {
  impl_->map = std::move(map);
  impl_->lie = lie;
  impl_->trigger = lie == ModbusLie::none ? ModbusTrigger::in_mode(-100, 0.0) : trigger;
  impl_->rtu = true;
  int masters[2] = {-1, -1};
  std::string* names[2] = {&impl_->tool_device, &impl_->controller_device};
  for (int i = 0; i < 2; ++i) {
    char name[128] = {0};
    if (::openpty(&masters[i], &impl_->slaves[i], name, nullptr, nullptr) != 0)
      throw std::runtime_error("modbus lying proxy: cannot open a pseudo-terminal");
    termios t{};
    ::tcgetattr(impl_->slaves[i], &t);
    ::cfmakeraw(&t);
    ::tcsetattr(impl_->slaves[i], TCSANOW, &t);
    ::fcntl(masters[i], F_SETFD, FD_CLOEXEC);
    ::fcntl(impl_->slaves[i], F_SETFD, FD_CLOEXEC);
    nonblocking(masters[i]);
    *names[i] = name;
  }
  Pair p;
  p.tool = masters[0];
  p.ctrl = masters[1];
  impl_->pairs.push_back(std::move(p));
  impl_->stats.connections = 1;
  impl_->worker = std::thread([this] { impl_->run(); });
}

const std::string& ModbusLyingProxy::tool_device() const {
  return impl_->tool_device;
}
const std::string& ModbusLyingProxy::controller_device() const {
  return impl_->controller_device;
}

ModbusLyingProxy::~ModbusLyingProxy() {
  impl_->stop = true;
  impl_->worker.join();
  if (impl_->listen_fd >= 0) ::close(impl_->listen_fd);
  for (int fd : impl_->slaves)
    if (fd >= 0) ::close(fd);
}

unsigned short ModbusLyingProxy::port() const {
  return impl_->port;
}
bool ModbusLyingProxy::lie_began() const {
  return lie_began_at().has_value();
}
std::optional<std::chrono::steady_clock::time_point> ModbusLyingProxy::lie_began_at() const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return impl_->began;
}
bool ModbusLyingProxy::commanded(int code) const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return std::any_of(impl_->commands.begin(), impl_->commands.end(),
                     [&](const auto& c) { return c.first == code; });
}
bool ModbusLyingProxy::commanded_after_lie(int code) const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return std::any_of(impl_->commands.begin(), impl_->commands.end(),
                     [&](const auto& c) { return c.first == code && c.second; });
}
ModbusProxyStats ModbusLyingProxy::stats() const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return impl_->stats;
}

}  // namespace loadtrim::testing
