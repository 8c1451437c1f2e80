// The loadtrim line protocol (docs/protocol.md), framing and codec only: no sockets, no clocks. Shared by the
// line adapter, the simulated controller and the tests, so the constants live here once.
//
// Frame: one ASCII line  "<seq> <TYPE> <field> <field> ...*<CRC>\n"
//   seq    decimal 0..4294967295, the sender's own counter, +1 per line it sends (wraps to 0)
//   TYPE   upper-case word: a request verb (tool → controller) or OK, ERR, SMP, EVT (controller → tool)
//   CRC    CRC-16/CCITT-FALSE of every byte before '*', as 4 upper-case hex digits
// Printable ASCII only (0x20..0x7E), at most kMaxLineLength bytes before the '\n'; a trailing '\r' is
// ignored.
#pragma once

#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace loadtrim::line {

inline constexpr int kProtocolVersion = 1;
inline constexpr std::size_t kMaxLineLength = 240;

// CRC-16/CCITT-FALSE: poly 0x1021, init 0xFFFF, no reflection, no final xor (check value of "123456789":
// 0x29B1).
std::uint16_t crc16(std::string_view data);

struct Message {
  std::uint32_t seq = 0;
  std::string type;
  std::vector<std::string> fields;
};

// The frame for a message, with its CRC and the '\n'.
std::string encode(const Message& m);

enum class DecodeError : std::uint8_t { none, empty, too_long, bad_char, no_crc, bad_crc, bad_seq, bad_type };
const char* to_string(DecodeError e);

struct Decoded {
  DecodeError error = DecodeError::none;
  Message message;
  std::string detail;
  bool ok() const { return error == DecodeError::none; }
};

// Decodes one line (without its '\n'). Never throws; any defect is reported and the line must not be acted
// on.
Decoded decode(std::string_view line);

// Splits a byte stream into lines. Pure state machine: feed bytes in any chunks, get whole lines out. A line
// longer than kMaxLineLength is reported once as too long and skipped up to its '\n'.
class LineSplitter {
 public:
  using Sink = std::function<void(std::string_view line, bool too_long)>;
  void feed(std::string_view bytes, const Sink& sink);
  std::size_t pending() const { return buffer_.size(); }

 private:
  std::string buffer_;
  bool discarding_ = false;
};

// key=value fields.
std::optional<std::string> field(const Message& m, std::string_view key);
std::optional<double> number_field(const Message& m, std::string_view key);
std::string kv(std::string_view key, double value);  // "key=<%.17g>"
std::string kv(std::string_view key, std::string_view value);
std::optional<double> parse_number(std::string_view s);
std::string format_number(double v);  // %.17g: parses back to the same double

// Error codes in ERR replies.
enum class ErrorCode : int {
  bad_frame = 10,  // not a valid line (CRC, characters, length)
  unknown_verb = 20,
  bad_argument = 21,
  out_of_limits = 30,  // refused: outside the controller's speed, force or inertia limits
  wrong_state = 31,    // refused in the current mode or before HELLO
  fault_active = 40,   // refused while a fault is latched; CLEAR first
  refused = 41,        // refused by the controller for its own reasons (e.g. an operator lock)
  internal = 50,
};

// Request verbs (tool -> controller) and message types (controller -> tool), spelled once for the line
// adapter and the simulator's line front end (src/sim/line_front_end.cpp).
inline constexpr const char* kVerbHello = "HELLO";
inline constexpr const char* kVerbIdent = "IDENT";
inline constexpr const char* kVerbInertia = "INERTIA";
inline constexpr const char* kVerbCoef = "COEF";
inline constexpr const char* kVerbMode = "MODE";
inline constexpr const char* kVerbStream = "STREAM";
inline constexpr const char* kVerbBeat = "BEAT";
inline constexpr const char* kVerbStatus = "STATUS";
inline constexpr const char* kVerbClear = "CLEAR";
// DRIVER ACCEL <km/h> | DRIVER NEUTRAL | DRIVER OFF: the driver display (capability "driver").
inline constexpr const char* kVerbDriver = "DRIVER";
inline constexpr const char* kDriverAccel = "ACCEL";
inline constexpr const char* kDriverNeutral = "NEUTRAL";
inline constexpr const char* kDriverOff = "OFF";
inline constexpr const char* kArgSet = "SET";  // INERTIA SET <kg>, COEF SET <f0> <f1> <f2>
inline constexpr const char* kArgGet = "GET";
inline constexpr const char* kTypeOk = "OK";
inline constexpr const char* kTypeErr = "ERR";
inline constexpr const char* kTypeSample = "SMP";
inline constexpr const char* kTypeEvent = "EVT";

// Controller modes as they appear on the wire.
inline constexpr const char* kModeIdle = "IDLE";
inline constexpr const char* kModeHold = "HOLD";
inline constexpr const char* kModeRoadLoad = "ROADLOAD";
inline constexpr const char* kModeStop = "STOP";
inline constexpr const char* kModeForce = "FORCE";  // MODE FORCE <N>: constant force, no simulation
inline constexpr const char* kModeFree =
    "FREE";  // MODE FREE: motor off at speed, the rollers coast (reported IDLE)

// Flag bits in SMP and STATUS.
inline constexpr std::uint32_t kFlagFault = 0x01;
inline constexpr std::uint32_t kFlagEstop = 0x02;
inline constexpr std::uint32_t kFlagWatchdog = 0x04;
inline constexpr std::uint32_t kFlagLimit = 0x08;
inline constexpr std::uint32_t kFlagAtSetpoint = 0x10;
inline constexpr std::uint32_t kFlagNeutral = 0x20;  // capability "neutral", while a driver prompt is shown

}  // namespace loadtrim::line
