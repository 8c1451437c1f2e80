// A scripted lying controller for tests: an in-process TCP proxy on 127.0.0.1 (ephemeral port) between the
// tool and a real controller (loadtrim-sim). It forwards line-protocol frames both ways and, from a trigger
// onwards, applies ONE scripted lie to what the controller says (or to what reaches the controller). It
// records every request the tool sent, so a test can ask "was MODE STOP sent after the lie began?".
//
// Line numbering. Lines the proxy passes unchanged keep their bytes. An altered line is re-encoded with a
// correct CRC. Tool-bound lines are numbered as the controller numbered them, shifted by the lines the proxy
// dropped or added on this connection, so that a lie which drops or adds lines (a slow stream, a flood, an
// injected event or reply) is not also seen as a gap in the line numbering (lost lines): the tool sees one
// consistent liar. With no line dropped or added the shift is zero and every seq is the controller's own. A
// half line keeps its number. Requests reach the controller with the tool's own numbers.
//
// Threads and memory: one worker thread (poll on non-blocking sockets), stopped and joined in the destructor.
// Buffers are bounded: past kMaxPendingBytes the proxy stops reading the side that feeds the full buffer (TCP
// back-pressure, as a slow link would), at most kMaxConnections pairs are open at once, and the request
// record keeps the last kMaxRecordedRequests requests (older ones are counted in stats().requests_forgotten).
//
// The lie state (armed, begun) is the proxy's, not a connection's: a tool that reconnects meets the same
// liar.
#pragma once

#include <chrono>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace loadtrim::testing {

// The lies. Unless stated, a lie acts on every matching line once its trigger has fired.
enum class Lie : std::uint8_t {
  none,             // transparent: forwards everything unchanged
  clock_frozen,     // the controller's clock (SMP time_s, STATUS time_s) stops at its value when triggered
  clock_creeps,     // each SMP time_s = the previous one + 1e-9 s (STATUS: the last SMP time)
  clock_backwards,  // the clock steps back by 100 s once, then runs on from there
  clock_reset_to_zero,  // the clock reads true + 1e6 s until triggered, then restarts from 0
  clock_jumps_ahead,    // the clock steps ahead by 1000 s once, then runs on from there
  clock_runs_fast,      // the clock runs 10x faster than the controller's from the trigger on
  clock_runs_slow,      // the clock runs at 0.55 of the controller's from the trigger on (above the guard's
                        // minimum rate: found by its growing lag on the wall)
  status_clock_ahead,   // STATUS replies' time_s = true + 5000 s; samples keep the true clock
  status_fault_hidden,  // STATUS replies say flags=07 fault=none (fault, emergency-stop and watchdog bits
                        // set, the fault's name left out)
  setting_not_applied,  // COEF SET after the first: answered OK by the proxy, not forwarded; COEF GET then
                        // answered by the proxy with what the tool last wrote
  readback_differs,     // replies to COEF GET report f0 + 1 N
  never_stops,      // MODE STOP reaches the controller as MODE HOLD 30; the reply, STATUS and SMP say STOP
                    // instead of HOLD until the tool commands another mode
  nan_speed,        // SMP speed field "nan"
  inf_force,        // SMP force field "inf"
  negative_speed,   // SMP speed -50 km/h
  index_backwards,  // SMP index, in turn: true, a repeat of the previous one, 50 back (not below 0)
  over_speed,       // SMP speed x 1.5 while the controller is in HOLD above 100 km/h
  fault_event,      // once: EVT FAULT kind=ESTOP detail=injected (no flag in the samples, nothing latched)
  fault_flag,       // SMP flags |= 0x02 (emergency stop)
  at_limit,         // SMP flags |= 0x08 (the controller at one of its limits)
  half_lines,       // every SMP cut in half (no CRC left): rejected by any reader
  silence,          // nothing more reaches the tool; the TCP connection stays open, requests still go through
  wrong_reply_seq,  // OK replies name request seq + 1 instead of the request's own
  wrong_mode,       // SMP mode always ROADLOAD
  slow_stream,      // only every 50th SMP forwarded, renumbered without gaps (a controller streaming at 1/50
                    // of the asked rate, not a link losing samples)
  trickle,          // tool-bound bytes delivered one per 20 ms
  sample_dup_flood,  // every SMP sent 20 times (same index, consecutive line numbers)
  event_flood,       // 20000 lines "EVT INFO kind=NOTE ..." per wall second
};
const char* to_string(Lie lie);

// When the lie starts. It stays on from then (for the proxy's whole life, across reconnections).
struct Trigger {
  enum class Kind : std::uint8_t {
    at_start,  // from the first byte
    in_mode,  // once the controller's samples report `what` (HOLD, ROADLOAD) for >= after_s simulated seconds
    after_reply_to,  // once the controller's reply to the request verb `what` (e.g. HELLO) has been forwarded
  };
  Kind kind = Kind::at_start;
  std::string what;
  double after_s = 0.0;

  static Trigger at_start() { return {}; }
  static Trigger in_mode(std::string mode, double after_s) {
    return {Kind::in_mode, std::move(mode), after_s};
  }
  static Trigger after_reply_to(std::string verb) { return {Kind::after_reply_to, std::move(verb), 0.0}; }
};
std::string describe(const Trigger& t);

struct Script {
  Lie lie = Lie::none;
  Trigger trigger;
  double event_flood_per_s = 20000.0;  // event_flood: events injected per wall second
};

using WallClock = std::chrono::steady_clock;

// A request as the tool sent it (valid frames only; the proxy never sees the tool send anything else).
struct Request {
  WallClock::time_point wall;
  int connection = 0;  // 1-based, in accept order
  std::uint32_t seq = 0;
  std::string verb;                 // e.g. "MODE"
  std::vector<std::string> fields;  // e.g. {"STOP"}
  bool after_lie = false;  // the lie had begun when the proxy had handled this request (the request's own
                           // handling included: for never_stops the rewritten STOP is itself after the lie)
  bool forwarded = true;   // false: the proxy answered it itself (setting_not_applied)
};

struct ProxyStats {
  int connections = 0;
  std::uint64_t lines_to_tool = 0;  // lines delivered into the tool-bound buffer (after the lie)
  std::uint64_t lines_to_controller = 0;
  std::uint64_t lines_altered = 0;       // re-encoded with changed content (renumbering alone not counted)
  std::uint64_t lines_dropped = 0;       // controller lines not forwarded, requests swallowed
  std::uint64_t lines_injected = 0;      // lines the proxy made up
  std::uint64_t requests_forgotten = 0;  // dropped from the front of the bounded record
  std::size_t peak_buffer_bytes = 0;     // the largest either buffer of any pair grew to
  double cpu_s = 0.0;                    // CPU time of the proxy's thread so far (user + system)
};

class LyingProxy {
 public:
  static constexpr std::size_t kMaxPendingBytes = 4u << 20;
  static constexpr std::size_t kMaxRecordedRequests = 20000;
  static constexpr int kMaxConnections = 8;

  // Listens on 127.0.0.1 at an ephemeral port and forwards each accepted connection to
  // 127.0.0.1:controller_port. Throws std::runtime_error when it cannot listen or start its thread.
  LyingProxy(unsigned short controller_port, Script script);
  ~LyingProxy();  // stops the thread, closes every socket
  LyingProxy(const LyingProxy&) = delete;
  LyingProxy& operator=(const LyingProxy&) = delete;

  unsigned short port() const;
  const Script& script() const;
  // When the trigger fired (the lie armed), and when the lie first changed, dropped, added or held back a
  // line.
  std::optional<WallClock::time_point> armed_at() const;
  std::optional<WallClock::time_point> lie_began_at() const;
  bool lie_began() const { return lie_began_at().has_value(); }
  // A copy of the recorded requests, oldest first.
  std::vector<Request> requests() const;
  // Whether the tool sent `verb` (with `first_field` as its first field, when given) after the lie began.
  bool sent_after_lie(std::string_view verb, std::string_view first_field = {}) const;
  // Whether the tool sent it at all.
  bool sent(std::string_view verb, std::string_view first_field = {}) const;
  ProxyStats stats() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace loadtrim::testing
