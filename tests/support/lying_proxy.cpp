#include "support/lying_proxy.hpp"

#include <fcntl.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <sys/resource.h>
#include <sys/socket.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <deque>
#include <list>
#include <mutex>
#include <stdexcept>
#include <thread>

#include "line/line_protocol.hpp"

namespace loadtrim::testing {

const char* to_string(Lie lie) {
  switch (lie) {
    case Lie::none:
      return "none";
    case Lie::clock_frozen:
      return "clock_frozen";
    case Lie::clock_creeps:
      return "clock_creeps";
    case Lie::clock_backwards:
      return "clock_backwards";
    case Lie::clock_reset_to_zero:
      return "clock_reset_to_zero";
    case Lie::clock_jumps_ahead:
      return "clock_jumps_ahead";
    case Lie::clock_runs_fast:
      return "clock_runs_fast";
    case Lie::clock_runs_slow:
      return "clock_runs_slow";
    case Lie::status_clock_ahead:
      return "status_clock_ahead";
    case Lie::status_fault_hidden:
      return "status_fault_hidden";
    case Lie::setting_not_applied:
      return "setting_not_applied";
    case Lie::readback_differs:
      return "readback_differs";
    case Lie::never_stops:
      return "never_stops";
    case Lie::nan_speed:
      return "nan_speed";
    case Lie::inf_force:
      return "inf_force";
    case Lie::negative_speed:
      return "negative_speed";
    case Lie::index_backwards:
      return "index_backwards";
    case Lie::over_speed:
      return "over_speed";
    case Lie::fault_event:
      return "fault_event";
    case Lie::fault_flag:
      return "fault_flag";
    case Lie::at_limit:
      return "at_limit";
    case Lie::half_lines:
      return "half_lines";
    case Lie::silence:
      return "silence";
    case Lie::wrong_reply_seq:
      return "wrong_reply_seq";
    case Lie::wrong_mode:
      return "wrong_mode";
    case Lie::slow_stream:
      return "slow_stream";
    case Lie::trickle:
      return "trickle";
    case Lie::sample_dup_flood:
      return "sample_dup_flood";
    case Lie::event_flood:
      return "event_flood";
  }
  return "?";
}

std::string describe(const Trigger& t) {
  char b[64];
  switch (t.kind) {
    case Trigger::Kind::at_start:
      return "from the start";
    case Trigger::Kind::in_mode:
      std::snprintf(b, sizeof b, "%g", t.after_s);
      return "after " + t.what + " for " + b + " s";
    case Trigger::Kind::after_reply_to:
      return "after the reply to " + t.what;
  }
  return "?";
}

namespace {

using Clock = WallClock;
using line::Message;

// Lie parameters (what each lie in the header says).
constexpr double kBackwardsStepS = 100.0;
constexpr double kJumpAheadS = 1000.0;
constexpr double kResetLargeOffsetS = 1e6;
constexpr double kCreepS = 1e-9;
constexpr double kFastFactor = 10.0;
constexpr double kSlowFactor = 0.55;
constexpr double kStatusAheadS = 5000.0;
constexpr double kOverSpeedAboveKmh = 100.0;
constexpr double kOverSpeedFactor = 1.5;
constexpr int kSlowStreamEvery = 50;
constexpr int kDupCopies = 20;
constexpr auto kTrickleEvery = std::chrono::milliseconds(20);
constexpr std::size_t kMaxPendingReplies = 1024;
constexpr std::size_t kReadChunk = 65536;

struct Pair {
  int id = 0;
  int tool = -1, ctrl = -1;
  line::LineSplitter from_tool, from_ctrl;
  std::string to_tool, to_ctrl;
  std::size_t to_tool_off = 0, to_ctrl_off = 0;               // bytes already written from the front
  std::deque<std::pair<std::uint32_t, std::string>> pending;  // request seq → "VERB FIELD0", for replies
  std::deque<std::uint32_t> faked_stops;  // never_stops: request seqs rewritten to HOLD 30
  std::uint32_t seq_shift = 0;            // added (wrapping) to the controller's numbers
  std::uint32_t last_out_seq = 0;
  bool have_out_seq = false;
  Clock::time_point next_byte{};  // trickle
  bool dead = false;

  std::size_t tool_pending() const { return to_tool.size() - to_tool_off; }
  std::size_t ctrl_pending() const { return to_ctrl.size() - to_ctrl_off; }
};

void set_nodelay(int fd) {
  int one = 1;
  ::setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
}

sockaddr_in loopback(unsigned short port) {
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  a.sin_port = htons(port);
  return a;
}

// Connects to 127.0.0.1:port within the timeout; a non-blocking socket, or -1.
int connect_loopback(unsigned short port, std::chrono::milliseconds timeout) {
  const int fd = ::socket(AF_INET, SOCK_STREAM | SOCK_NONBLOCK | SOCK_CLOEXEC, 0);
  if (fd < 0) return -1;
  sockaddr_in a = loopback(port);
  if (::connect(fd, reinterpret_cast<sockaddr*>(&a), sizeof a) != 0) {
    if (errno != EINPROGRESS) {
      ::close(fd);
      return -1;
    }
    pollfd p{fd, POLLOUT, 0};
    int err = 0;
    socklen_t len = sizeof err;
    if (::poll(&p, 1, static_cast<int>(timeout.count())) != 1 ||
        ::getsockopt(fd, SOL_SOCKET, SO_ERROR, &err, &len) != 0 || err != 0) {
      ::close(fd);
      return -1;
    }
  }
  set_nodelay(fd);
  return fd;
}

std::optional<double> number(std::string_view s) {
  return line::parse_number(s);
}

std::optional<std::uint64_t> unsigned_number(std::string_view s) {
  std::uint64_t v = 0;
  const auto r = std::from_chars(s.data(), s.data() + s.size(), v);
  if (s.empty() || r.ec != std::errc() || r.ptr != s.data() + s.size()) return std::nullopt;
  return v;
}

// The index of the field "key=..." in m, or -1.
int field_index(const Message& m, std::string_view key) {
  for (std::size_t i = 0; i < m.fields.size(); ++i)
    if (m.fields[i].size() > key.size() && m.fields[i].compare(0, key.size(), key) == 0 &&
        m.fields[i][key.size()] == '=')
      return static_cast<int>(i);
  return -1;
}

}  // namespace

struct LyingProxy::Impl {
  Script script;
  unsigned short ctrl_port = 0;
  unsigned short port = 0;
  int listen_fd = -1;
  int wake[2] = {-1, -1};
  std::atomic<bool> stopping{false};
  std::thread worker;

  // What the test may read, under mu.
  mutable std::mutex mu;
  std::optional<Clock::time_point> armed_at, began_at;
  std::deque<Request> requests;
  ProxyStats stats;

  // The worker's own state.
  std::list<Pair> pairs;
  int next_pair_id = 1;
  bool armed = false;
  bool began = false;
  // Trigger: the controller's mode as its samples report it, and since when (controller time).
  std::string mode;
  double mode_since_s = 0.0;
  double last_true_time_s = 0.0;
  // Clock lies.
  bool have_anchor = false;
  double anchor_s = 0.0;  // the true controller time when the lie first touched a timestamp
  bool have_time_out = false;
  double last_time_out_s = 0.0;  // the last SMP time the tool was sent
  // Sample-index lies.
  std::uint64_t index_shift = 0;  // slow_stream: samples not forwarded so far
  std::uint64_t lied_samples = 0;
  bool have_index_out = false;
  std::uint64_t last_index_out = 0;
  // setting_not_applied.
  int coef_sets = 0;
  bool coef_lying = false;
  std::vector<std::string> last_written;  // the tool's last COEF SET arguments
  // never_stops.
  bool stop_faked = false;
  // fault_event.
  bool fault_event_sent = false;
  // event_flood.
  bool flood_started = false;
  Clock::time_point flood_start{};
  std::uint64_t flood_due_done = 0;

  void count(std::uint64_t ProxyStats::*what, std::uint64_t n = 1) {
    std::lock_guard<std::mutex> l(mu);
    stats.*what += n;
  }

  void arm() {
    if (armed) return;
    armed = true;
    std::lock_guard<std::mutex> l(mu);
    armed_at = Clock::now();
  }

  void mark_lie() {
    if (began) return;
    began = true;
    std::lock_guard<std::mutex> l(mu);
    began_at = Clock::now();
  }

  void note_buffer(const Pair& p) {
    const std::size_t n = std::max(p.to_tool.size(), p.to_ctrl.size());
    std::lock_guard<std::mutex> l(mu);
    stats.peak_buffer_bytes = std::max(stats.peak_buffer_bytes, n);
  }

  void push_tool(Pair& p, const std::string& bytes) {
    p.to_tool += bytes;
    note_buffer(p);
    count(&ProxyStats::lines_to_tool);
  }

  void push_ctrl(Pair& p, const std::string& bytes) {
    p.to_ctrl += bytes;
    note_buffer(p);
    count(&ProxyStats::lines_to_controller);
  }

  // A line the proxy makes up: numbered after the last one the tool got on this pair.
  void inject(Pair& p, Message m) {
    m.seq = p.last_out_seq + 1;
    p.last_out_seq = m.seq;
    ++p.seq_shift;
    push_tool(p, line::encode(m));
    count(&ProxyStats::lines_injected);
  }

  // ---- the controller's clock as the lie reports it
  // ----------------------------------------------------------

  void take_anchor(double t) {
    if (!have_anchor) {
      have_anchor = true;
      anchor_s = t;
    }
  }

  // The time to report for a true controller time t (sample: an SMP's time; otherwise a STATUS reply's), or
  // nullopt to leave it as it is.
  std::optional<double> clock_lie(double t, bool sample) {
    if (script.lie == Lie::clock_reset_to_zero && !armed)
      return t + kResetLargeOffsetS;  // the large value before
    if (!armed) return std::nullopt;
    switch (script.lie) {
      case Lie::clock_frozen:
        take_anchor(t);
        return anchor_s;
      case Lie::clock_creeps: {
        const double prev = have_time_out ? last_time_out_s : t;
        return sample ? prev + kCreepS : prev;
      }
      case Lie::clock_backwards:
        return t - kBackwardsStepS;
      case Lie::clock_reset_to_zero:
        take_anchor(t);
        return t - anchor_s;
      case Lie::clock_jumps_ahead:
        return t + kJumpAheadS;
      case Lie::clock_runs_fast:
        take_anchor(t);
        return anchor_s + kFastFactor * (t - anchor_s);
      case Lie::clock_runs_slow:
        take_anchor(t);
        return anchor_s + kSlowFactor * (t - anchor_s);
      case Lie::status_clock_ahead:
        return sample ? std::nullopt : std::optional<double>(t + kStatusAheadS);
      default:
        return std::nullopt;
    }
  }

  // ---- controller → tool
  // ---------------------------------------------------------------------------------------

  void on_controller_line(Pair& p, std::string_view raw, bool too_long) {
    if (too_long) return;  // the controller never sends one; nothing to forward
    const line::Decoded d = line::decode(raw);
    if (!d.ok()) {
      if (d.error == line::DecodeError::empty) return;
      push_tool(p, std::string(raw) + "\n");  // not ours to judge: forwarded as it came
      return;
    }
    Message m = d.message;
    const std::uint32_t orig_seq = m.seq;
    const bool smp = m.type == "SMP" && m.fields.size() == 6;
    std::optional<double> t_true;
    std::optional<std::uint64_t> idx_true;
    if (smp) {
      t_true = number(m.fields[1]);
      idx_true = unsigned_number(m.fields[0]);
      if (t_true) {
        last_true_time_s = *t_true;
        if (m.fields[4] != mode) {
          mode = m.fields[4];
          mode_since_s = *t_true;
        }
        const Trigger& tr = script.trigger;
        if (tr.kind == Trigger::Kind::in_mode && mode == tr.what && *t_true - mode_since_s >= tr.after_s)
          arm();
      }
    }
    // Which request a reply answers.
    std::string replied;
    bool faked_stop_reply = false;
    if ((m.type == "OK" || m.type == "ERR") && !m.fields.empty()) {
      if (const auto req = unsigned_number(m.fields[0])) {
        for (auto it = p.pending.begin(); it != p.pending.end(); ++it)
          if (it->first == *req) {
            replied = it->second;
            p.pending.erase(it);
            break;
          }
        for (auto it = p.faked_stops.begin(); it != p.faked_stops.end(); ++it)
          if (*it == *req) {
            faked_stop_reply = true;
            p.faked_stops.erase(it);
            break;
          }
      }
    }
    const bool status_reply = m.type == "OK" && m.fields.size() >= 2 && m.fields[1] == "STATUS";

    bool changed = false, drop = false, cut = false;
    int copies = 1;
    std::vector<Message> after;
    auto set_field = [&](std::size_t i, std::string v) {
      if (m.fields[i] != v) {
        m.fields[i] = std::move(v);
        changed = true;
      }
    };
    auto set_kv = [&](std::string_view key, std::string v) {
      const int i = field_index(m, key);
      if (i >= 0) set_field(static_cast<std::size_t>(i), std::string(key) + "=" + v);
    };

    switch (script.lie) {
      case Lie::none:
        break;
      case Lie::clock_frozen:
      case Lie::clock_creeps:
      case Lie::clock_backwards:
      case Lie::clock_reset_to_zero:
      case Lie::clock_jumps_ahead:
      case Lie::clock_runs_fast:
      case Lie::clock_runs_slow:
      case Lie::status_clock_ahead: {
        if (smp && t_true) {
          if (const auto t = clock_lie(*t_true, true)) set_field(1, line::format_number(*t));
        } else if (status_reply) {
          const int i = field_index(m, "time_s");
          const auto t = i >= 0 ? number(m.fields[static_cast<std::size_t>(i)].substr(7)) : std::nullopt;
          if (t)
            if (const auto lied = clock_lie(*t, false)) set_kv("time_s", line::format_number(*lied));
        }
        break;
      }
      case Lie::status_fault_hidden:
        if (armed && status_reply) {
          set_kv("flags", "07");
          set_kv("fault", "none");
        }
        break;
      case Lie::setting_not_applied:
        break;  // acts on requests
      case Lie::readback_differs:
        if (armed && m.type == "OK" && replied == "COEF GET") {
          const int i = field_index(m, "f0_n");
          const auto f0 = i >= 0 ? number(m.fields[static_cast<std::size_t>(i)].substr(5)) : std::nullopt;
          if (f0) {
            set_kv("f0_n", line::format_number(*f0 + 1.0));
            mark_lie();
          }
        }
        break;
      case Lie::never_stops:
        if (faked_stop_reply && m.type == "OK") set_kv("mode", line::kModeStop);
        if (stop_faked) {
          if (smp && m.fields[4] == line::kModeHold) set_field(4, line::kModeStop);
          const int i = status_reply ? field_index(m, "mode") : -1;
          if (i >= 0 && m.fields[static_cast<std::size_t>(i)] == "mode=HOLD") set_kv("mode", line::kModeStop);
        }
        break;
      case Lie::nan_speed:
        if (armed && smp) set_field(2, "nan");
        break;
      case Lie::inf_force:
        if (armed && smp) set_field(3, "inf");
        break;
      case Lie::negative_speed:
        if (armed && smp) set_field(2, "-50");
        break;
      case Lie::index_backwards:
        if (armed && smp && idx_true) {
          const std::uint64_t k = lied_samples++ % 3;
          std::uint64_t out = *idx_true;
          if (k == 1 && have_index_out) out = last_index_out;
          if (k == 2) out = *idx_true >= 50 ? *idx_true - 50 : 0;
          set_field(0, std::to_string(out));
        }
        break;
      case Lie::over_speed:
        if (armed && smp && m.fields[4] == line::kModeHold) {
          const auto v = number(m.fields[2]);
          if (v && *v > kOverSpeedAboveKmh) set_field(2, line::format_number(*v * kOverSpeedFactor));
        }
        break;
      case Lie::fault_event:
        if (armed && !fault_event_sent) {
          fault_event_sent = true;
          after.push_back(
              {0, "EVT", {"FAULT", "kind=ESTOP", "detail=injected", line::kv("time_s", last_true_time_s)}});
        }
        break;
      case Lie::fault_flag:
      case Lie::at_limit:
        if (armed && smp) {
          std::uint32_t flags = 0;
          std::from_chars(m.fields[5].data(), m.fields[5].data() + m.fields[5].size(), flags, 16);
          char b[16];
          std::snprintf(b, sizeof b, "%02X", flags | (script.lie == Lie::at_limit ? 0x08u : 0x02u));
          set_field(5, b);
        }
        break;
      case Lie::half_lines:
        if (armed && smp) cut = true;
        break;
      case Lie::silence:
        if (armed) drop = true;
        break;
      case Lie::wrong_reply_seq:
        if (armed && m.type == "OK" && !m.fields.empty()) {
          if (const auto req = unsigned_number(m.fields[0]))
            set_field(0, std::to_string(static_cast<std::uint32_t>(*req + 1)));
        }
        break;
      case Lie::wrong_mode:
        if (armed && smp) set_field(4, line::kModeRoadLoad);
        break;
      case Lie::slow_stream:
        if (armed && smp && idx_true) {
          if (lied_samples++ % kSlowStreamEvery != 0) {
            drop = true;
            ++index_shift;
          }
        }
        if (smp && idx_true && !drop && index_shift > 0)
          set_field(0, std::to_string(*idx_true - index_shift));
        break;
      case Lie::trickle:
        break;  // acts on the delivery
      case Lie::sample_dup_flood:
        if (armed && smp) copies = kDupCopies;
        break;
      case Lie::event_flood:
        break;  // acts on a timer
    }
    if (changed || drop || cut || copies > 1 || !after.empty()) {
      // The pre-trigger offset of clock_reset_to_zero is the set-up, not the lie.
      if (armed) mark_lie();
    }

    if (drop) {
      --p.seq_shift;
      count(&ProxyStats::lines_dropped);
    } else {
      m.seq = orig_seq + p.seq_shift;
      std::string out = changed || p.seq_shift != 0 ? line::encode(m) : std::string(raw) + "\n";
      if (changed) count(&ProxyStats::lines_altered);
      if (cut) {
        out = out.substr(0, (out.size() - 1) / 2) + "\n";
        count(&ProxyStats::lines_altered);
      }
      push_tool(p, out);
      p.last_out_seq = m.seq;
      p.have_out_seq = true;
      if (smp) {
        if (const auto t = number(m.fields[1])) {
          have_time_out = true;
          last_time_out_s = *t;
        }
        if (const auto i = unsigned_number(m.fields[0])) {
          have_index_out = true;
          last_index_out = *i;
        }
      }
      for (int i = 1; i < copies; ++i) inject(p, m);
    }
    for (auto& e : after) inject(p, std::move(e));
    if (script.trigger.kind == Trigger::Kind::after_reply_to && !replied.empty() &&
        replied.substr(0, replied.find(' ')) == script.trigger.what)
      arm();
  }

  // ---- tool → controller
  // ---------------------------------------------------------------------------------------

  void on_tool_line(Pair& p, std::string_view raw, bool too_long) {
    if (too_long) return;
    const line::Decoded d = line::decode(raw);
    if (!d.ok()) {
      if (d.error == line::DecodeError::empty) return;
      push_ctrl(p, std::string(raw) + "\n");
      return;
    }
    Message m = d.message;
    Request rec;
    rec.wall = Clock::now();
    rec.connection = p.id;
    rec.seq = m.seq;
    rec.verb = m.type;
    rec.fields = m.fields;
    p.pending.emplace_back(m.seq, m.type + (m.fields.empty() ? std::string() : " " + m.fields[0]));
    if (p.pending.size() > kMaxPendingReplies) p.pending.pop_front();

    bool forward = true, changed = false;
    std::optional<Message> own_reply;
    const bool coef_set = m.type == "COEF" && m.fields.size() == 4 && m.fields[0] == "SET";
    const bool coef_get = m.type == "COEF" && m.fields.size() == 1 && m.fields[0] == "GET";
    auto coef_reply = [&] {
      return Message{0,
                     "OK",
                     {std::to_string(m.seq), "COEF", "f0_n=" + last_written[0],
                      "f1_n_per_kmh=" + last_written[1], "f2_n_per_kmh2=" + last_written[2]}};
    };
    if (armed && script.lie == Lie::setting_not_applied) {
      if (coef_set) {
        last_written.assign(m.fields.begin() + 1, m.fields.end());
        if (++coef_sets > 1) {
          coef_lying = true;
          forward = false;
          own_reply = coef_reply();
        }
      } else if (coef_get && coef_lying) {
        forward = false;
        own_reply = coef_reply();
      }
    }
    if (armed && script.lie == Lie::never_stops && m.type == "MODE" && !m.fields.empty()) {
      if (m.fields[0] == line::kModeStop) {
        m.fields = {line::kModeHold, "30"};
        changed = true;
        stop_faked = true;
        p.faked_stops.push_back(m.seq);
        if (p.faked_stops.size() > kMaxPendingReplies) p.faked_stops.pop_front();
        mark_lie();
      } else {
        stop_faked = false;  // the tool commands something else: the pretence ends
      }
    }
    if (forward) {
      push_ctrl(p, changed ? line::encode(m) : std::string(raw) + "\n");
      if (changed) count(&ProxyStats::lines_altered);
    } else {
      mark_lie();
      p.pending.pop_back();  // answered here
      count(&ProxyStats::lines_dropped);
      inject(p, std::move(*own_reply));
    }
    rec.after_lie = began;
    rec.forwarded = forward;
    std::lock_guard<std::mutex> l(mu);
    requests.push_back(std::move(rec));
    if (requests.size() > LyingProxy::kMaxRecordedRequests) {
      requests.pop_front();
      ++stats.requests_forgotten;
    }
  }

  // ---- timers
  // --------------------------------------------------------------------------------------------------

  void flood(Clock::time_point now) {
    if (!flood_started) {
      flood_started = true;
      flood_start = now;
    }
    const auto due = static_cast<std::uint64_t>(std::chrono::duration<double>(now - flood_start).count() *
                                                script.event_flood_per_s);
    // At most a quarter second's worth at once after a stall of this thread: a flood, not a burst.
    const std::uint64_t n = std::min<std::uint64_t>(due - flood_due_done,
                                                    static_cast<std::uint64_t>(script.event_flood_per_s / 4));
    for (Pair& p : pairs) {
      if (p.dead || !p.have_out_seq || p.tool_pending() > kMaxPendingBytes) continue;
      for (std::uint64_t i = 0; i < n; ++i)
        inject(p,
               {0, "EVT", {"INFO", "kind=NOTE", "detail=flood", "n=" + std::to_string(flood_due_done + i)}});
      if (n > 0) mark_lie();
    }
    flood_due_done = due;  // what could not be sent is not sent later
  }

  // ---- sockets
  // -------------------------------------------------------------------------------------------------

  // Writes what it can; false when the peer is gone.
  static bool write_some(int fd, std::string& buf, std::size_t& off, std::size_t limit) {
    while (off < buf.size() && limit > 0) {
      const std::size_t len = std::min(buf.size() - off, limit);
      const ssize_t w = ::send(fd, buf.data() + off, len, MSG_NOSIGNAL);
      if (w < 0) {
        if (errno == EINTR) continue;
        return errno == EAGAIN || errno == EWOULDBLOCK;
      }
      off += static_cast<std::size_t>(w);
      limit -= static_cast<std::size_t>(w);
    }
    if (off == buf.size()) {
      buf.clear();
      off = 0;
    } else if (off > kReadChunk && off > buf.size() / 2) {
      buf.erase(0, off);
      off = 0;
    }
    return true;
  }

  // Reads what is there and feeds the lines on; false at end of stream or on an error.
  bool read_side(Pair& p, bool from_tool) {
    char buf[kReadChunk];
    const ssize_t n = ::recv(from_tool ? p.tool : p.ctrl, buf, sizeof buf, 0);
    if (n == 0) return false;
    if (n < 0) return errno == EAGAIN || errno == EWOULDBLOCK || errno == EINTR;
    const std::string_view bytes(buf, static_cast<std::size_t>(n));
    if (from_tool)
      p.from_tool.feed(bytes, [&](std::string_view l, bool too_long) { on_tool_line(p, l, too_long); });
    else
      p.from_ctrl.feed(bytes, [&](std::string_view l, bool too_long) { on_controller_line(p, l, too_long); });
    return true;
  }

  void close_pair(Pair& p) {
    // What one side sent before it went is still delivered to the other, as far as it goes at once.
    if (p.ctrl >= 0) write_some(p.ctrl, p.to_ctrl, p.to_ctrl_off, p.ctrl_pending());
    if (p.tool >= 0 && !(script.lie == Lie::trickle && armed))
      write_some(p.tool, p.to_tool, p.to_tool_off, p.tool_pending());
    if (p.tool >= 0) ::close(p.tool);
    if (p.ctrl >= 0) ::close(p.ctrl);
    p.tool = p.ctrl = -1;
    p.dead = true;
  }

  void accept_one() {
    const int fd = ::accept4(listen_fd, nullptr, nullptr, SOCK_NONBLOCK | SOCK_CLOEXEC);
    if (fd < 0) return;
    if (static_cast<int>(pairs.size()) >= LyingProxy::kMaxConnections) {
      ::close(fd);
      return;
    }
    set_nodelay(fd);
    const int up = connect_loopback(ctrl_port, std::chrono::milliseconds(3000));
    if (up < 0) {
      ::close(fd);
      return;
    }
    Pair& p = pairs.emplace_back();
    p.id = next_pair_id++;
    p.tool = fd;
    p.ctrl = up;
    std::lock_guard<std::mutex> l(mu);
    ++stats.connections;
  }

  void run() {
    std::vector<pollfd> fds;
    std::vector<std::pair<Pair*, bool>> who;  // for fds[i], i >= 2: the pair and whether it is the tool side
    auto last_cpu = Clock::now();
    while (!stopping.load()) {
      const auto now = Clock::now();
      if (now - last_cpu >= std::chrono::milliseconds(100)) {
        last_cpu = now;
        note_cpu();
      }
      if (armed && script.lie == Lie::event_flood) flood(now);
      const bool trickling = armed && script.lie == Lie::trickle;
      if (trickling) mark_lie();
      int timeout_ms = 50;
      if (armed && script.lie == Lie::event_flood) timeout_ms = 5;
      fds.clear();
      who.clear();
      fds.push_back({wake[0], POLLIN, 0});
      fds.push_back({listen_fd, POLLIN, 0});
      for (Pair& p : pairs) {
        short tev = 0, cev = 0;
        if (p.ctrl_pending() < kMaxPendingBytes) tev |= POLLIN;  // back-pressure on the tool
        if (p.tool_pending() < kMaxPendingBytes) cev |= POLLIN;  // back-pressure on the controller
        if (p.ctrl_pending() > 0) cev |= POLLOUT;
        if (p.tool_pending() > 0) {
          if (!trickling)
            tev |= POLLOUT;
          else {
            const auto wait =
                std::chrono::duration_cast<std::chrono::milliseconds>(p.next_byte - now).count();
            if (wait <= 0)
              tev |= POLLOUT;
            else
              timeout_ms = std::min<int>(timeout_ms, static_cast<int>(wait));
          }
        }
        fds.push_back({p.tool, tev, 0});
        who.emplace_back(&p, true);
        fds.push_back({p.ctrl, cev, 0});
        who.emplace_back(&p, false);
      }
      const int r = ::poll(fds.data(), fds.size(), timeout_ms);
      if (r < 0 && errno != EINTR) break;
      if (r <= 0) continue;
      if (fds[0].revents) {
        char b[64];
        while (::read(wake[0], b, sizeof b) > 0) {
        }
      }
      if (fds[1].revents & POLLIN) accept_one();  // pairs may grow: `who` holds stable pointers (a list)
      for (std::size_t i = 2; i < fds.size(); ++i) {
        Pair& p = *who[i - 2].first;
        const bool tool_side = who[i - 2].second;
        const short ev = fds[i].revents;
        if (p.dead || ev == 0) continue;
        if (ev & (POLLIN | POLLHUP | POLLERR)) {
          if (!read_side(p, tool_side)) {
            close_pair(p);
            continue;
          }
        }
        if (ev & POLLOUT) {
          const bool ok = tool_side
                              ? write_some(p.tool, p.to_tool, p.to_tool_off, trickling ? 1 : p.tool_pending())
                              : write_some(p.ctrl, p.to_ctrl, p.to_ctrl_off, p.ctrl_pending());
          if (!ok)
            close_pair(p);
          else if (tool_side && trickling)
            p.next_byte = Clock::now() + kTrickleEvery;
        }
      }
      pairs.remove_if([](const Pair& p) { return p.dead; });
    }
    for (Pair& p : pairs)
      if (!p.dead) close_pair(p);
    pairs.clear();
    note_cpu();
  }

  void note_cpu() {
    rusage u{};
    if (::getrusage(RUSAGE_THREAD, &u) != 0) return;
    const double s = static_cast<double>(u.ru_utime.tv_sec + u.ru_stime.tv_sec) +
                     static_cast<double>(u.ru_utime.tv_usec + u.ru_stime.tv_usec) * 1e-6;
    std::lock_guard<std::mutex> l(mu);
    stats.cpu_s = s;
  }
};

LyingProxy::LyingProxy(unsigned short controller_port, Script script) : impl_(std::make_unique<Impl>()) {
  impl_->script = std::move(script);
  impl_->ctrl_port = controller_port;
  if (::pipe2(impl_->wake, O_NONBLOCK | O_CLOEXEC) != 0) throw std::runtime_error("lying proxy: pipe failed");
  impl_->listen_fd = ::socket(AF_INET, SOCK_STREAM | SOCK_NONBLOCK | SOCK_CLOEXEC, 0);
  sockaddr_in a = loopback(0);
  socklen_t len = sizeof a;
  if (impl_->listen_fd < 0 || ::bind(impl_->listen_fd, reinterpret_cast<sockaddr*>(&a), sizeof a) != 0 ||
      ::listen(impl_->listen_fd, 8) != 0 ||
      ::getsockname(impl_->listen_fd, reinterpret_cast<sockaddr*>(&a), &len) != 0) {
    if (impl_->listen_fd >= 0) ::close(impl_->listen_fd);
    ::close(impl_->wake[0]);
    ::close(impl_->wake[1]);
    throw std::runtime_error("lying proxy: cannot listen on 127.0.0.1");
  }
  impl_->port = ntohs(a.sin_port);
  if (impl_->script.trigger.kind == Trigger::Kind::at_start) impl_->arm();
  impl_->worker = std::thread([this] { impl_->run(); });
}

LyingProxy::~LyingProxy() {
  impl_->stopping.store(true);
  const char c = 1;
  [[maybe_unused]] const ssize_t w = ::write(impl_->wake[1], &c, 1);
  if (impl_->worker.joinable()) impl_->worker.join();
  ::close(impl_->listen_fd);
  ::close(impl_->wake[0]);
  ::close(impl_->wake[1]);
}

unsigned short LyingProxy::port() const {
  return impl_->port;
}
const Script& LyingProxy::script() const {
  return impl_->script;
}

std::optional<WallClock::time_point> LyingProxy::armed_at() const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return impl_->armed_at;
}

std::optional<WallClock::time_point> LyingProxy::lie_began_at() const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return impl_->began_at;
}

std::vector<Request> LyingProxy::requests() const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return {impl_->requests.begin(), impl_->requests.end()};
}

namespace {
bool matches(const Request& r, std::string_view verb, std::string_view first_field) {
  return r.verb == verb && (first_field.empty() || (!r.fields.empty() && r.fields[0] == first_field));
}
}  // namespace

bool LyingProxy::sent_after_lie(std::string_view verb, std::string_view first_field) const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return std::any_of(impl_->requests.begin(), impl_->requests.end(),
                     [&](const Request& r) { return r.after_lie && matches(r, verb, first_field); });
}

bool LyingProxy::sent(std::string_view verb, std::string_view first_field) const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return std::any_of(impl_->requests.begin(), impl_->requests.end(),
                     [&](const Request& r) { return matches(r, verb, first_field); });
}

ProxyStats LyingProxy::stats() const {
  std::lock_guard<std::mutex> l(impl_->mu);
  return impl_->stats;
}

}  // namespace loadtrim::testing
