// The framed ASCII dialect (docs/framed.md): short commands in STX ... ETX frames whose codes, fields, units
// and scaling come from the cell file's [framed] table, so a lab maps its own device. Pure: the command
// table, its validation, the frame codec and the field scaling; no sockets, no clocks. Shared by the adapter
// (framed_controller.hpp), the simulator's framed front end (src/sim/framed_front_end.hpp) and the tests.
//
// Request:  STX <code> SP <channel> [SP <value>]... [';' <XX>] ETX
// Reply:    STX <code> SP <status digit> [SP <value>]... [';' <XX>] ETX
//   code     1 to 6 characters A-Z 0-9, from the table; a reply repeats the request's code
//   channel  decimal 0 to 99 (framed.channel): which of the device's controllers is meant
//   status   one digit: 0 done; 1 frame not understood (sending it again may work); 2 unknown code or bad
//            argument; 3 outside the device's limits; 4 not allowed now; 5 a fault is latched (clear it
//            first); 6 refused by the device for its own reasons; 9 internal device error
//   value    printable ASCII without spaces: a decimal number, or a literal word of the table
//   XX       with framed.checksum = "xor": the XOR of every byte after STX and before ';', as two upper-case
//            hex digits
// At most kMaxPayload bytes between STX and ETX; bytes outside a frame are noise and are dropped.
#pragma once

#include <array>
#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "controller/controller.hpp"
#include "core/problem.hpp"

namespace loadtrim::config {
class TomlReader;
}

namespace loadtrim::framed {

inline constexpr char kStx = 0x02;
inline constexpr char kEtx = 0x03;
inline constexpr char kChecksumMark = ';';
inline constexpr std::size_t kMaxPayload = 200;

// The controller operations a table maps (the protected do_* hooks of controller::Controller). The names are
// the table's keys: [framed.ops.<name>].
enum class Op : std::uint8_t {
  identify,
  status,
  sample,  // one polled sample (the dialect has no stream: samples are polled at framed.poll_rate_hz)
  hold,
  roadload,
  stop,
  idle,
  force,  // optional: constant force (the dyno's own checks)
  free,   // optional: free coast (the dyno's own checks)
  write_inertia,
  read_inertia,
  write_coefficients,
  read_coefficients,
  heartbeat,
  clear_fault,
  count
};
inline constexpr std::size_t kOps = static_cast<std::size_t>(Op::count);
const char* to_string(Op op);

// The values a field may carry, in the tool's own units (the field's scale converts to the device's).
enum class Qty : std::uint8_t {
  speed_kmh,
  force_n,
  time_s,
  mode,   // the device's mode number, mapped by [framed.modes]
  flags,  // the device's status word (decimal), mapped bit by bit by [framed.flags]
  inertia_kg,
  f0_n,
  f1_n_per_kmh,
  f2_n_per_kmh2,
  roller_diameter_m,
  base_inertia_kg,
  max_speed_kmh,
  max_force_n,
  time_scale,
  channel,  // replies only: the controller that answers (must be framed.channel)
  count
};
inline constexpr std::size_t kQtys = static_cast<std::size_t>(Qty::count);
const char* to_string(Qty q);

// One position in a request or a reply: a quantity (optionally scaled: the wire carries the integer
// round(value × scale)), a literal word (sent as written; in a reply it must come back as written), or "-"
// (a reply value that is read and ignored).
struct Field {
  enum class Kind : std::uint8_t { quantity, literal, skip } kind = Kind::skip;
  Qty q = Qty::speed_kmh;
  double scale = 0.0;  // 0: a plain decimal number in the tool's unit; else integer counts of 1/scale unit
  std::string literal;
  // Half the step the wire can carry (0 for a plain decimal): how far a read-back may differ from a write.
  double resolution() const { return scale > 0.0 ? 0.5 / scale : 0.0; }
};

// The coarsest scale a scaled field of inertia or set coefficients may have (0: any), so that what the
// device holds after a write differs from what the tool records by at most half a count: set coefficients
// as finely as they are reported (f0 to 0.1 N, f1 to 0.001 N/(km/h), f2 to 0.00001 N/(km/h)²,
// docs/standards.md §1.2), inertia to 1 kg (common practice, no source).
double min_scale(Qty q);

struct Command {
  bool present = false;
  std::string code;
  std::vector<Field> request, reply;
};

// The device's mode numbers (status and sample replies; free coast is reported as idle).
struct ModeCodes {
  int idle = 0, hold = 1, roadload = 2, stop = 3, force = 4;
};
// The device's status-word bits for the controller's flags (controller::kFlag*).
struct FlagBits {
  std::uint32_t fault = 1, estop = 2, watchdog = 4, limit = 8, at_setpoint = 16;
};

struct Table {
  std::string name = "framed device";  // what identify reports as the controller's name
  unsigned channel = 1;
  bool checksum = true;
  double poll_rate_hz = 50.0;
  ModeCodes modes;
  FlagBits flags;
  std::array<Command, kOps> ops;
  const Command& operator[](Op op) const { return ops[static_cast<std::size_t>(op)]; }
  Command& operator[](Op op) { return ops[static_cast<std::size_t>(op)]; }
};

// "speed_kmh*100 force_n*10 mode flags - =GO": the fields of a request or reply as the table writes them.
// Returns an error message (empty when fine).
std::string parse_fields(std::string_view spec, std::vector<Field>& out);
std::string format_fields(const std::vector<Field>& fields);

// Every rule a table must follow, with keys as in the cell file ("framed.ops.hold.request"): the required
// operations present, each request and reply carrying exactly the quantities its operation needs (and only
// ones it may; the sample and status replies must carry the controller's clock, time_s), codes well formed,
// operations sharing a code told apart by a literal, modes and flag bits distinct, and the fields that carry
// set coefficients and inertia no coarser than min_scale() allows.
core::Problems validate(const Table& t);

// Reads [framed] (problems go to the reader, with the whole file's).
Table read_table(config::TomlReader& r);
// Only the table of a file (the simulator): throws config::InputError on any error in it.
Table load_table(const std::string& path, core::Problems* warnings = nullptr);

// ---- frames

// The frame for these words (code first), with its checksum when asked and STX/ETX.
std::string encode_frame(const std::vector<std::string>& words, bool checksum);

struct Decoded {
  std::vector<std::string> words;  // code first
  std::string error;               // empty when the frame is good
  bool ok() const { return error.empty(); }
};
// One payload (the bytes between STX and ETX). Never throws.
Decoded decode_payload(std::string_view payload, bool checksum);

// Splits a byte stream into frame payloads: feed bytes in any chunks. Bytes outside STX ... ETX, and frames
// longer than kMaxPayload, are reported as noise (once per run of such bytes).
class FrameSplitter {
 public:
  using Sink = std::function<void(std::string_view payload, bool noise)>;
  void feed(std::string_view bytes, const Sink& sink);
  void reset() {
    buffer_.clear();
    in_frame_ = false;
    noise_ = false;
  }

 private:
  std::string buffer_;
  bool in_frame_ = false;
  bool noise_ = false;
};

// ---- values

// The values of one request or reply, by quantity.
struct Values {
  std::array<double, kQtys> v{};
  std::array<bool, kQtys> has{};
  // Bits of a decoded status word that [framed.flags] does not map (the adapter warns once per bit).
  std::uint64_t unmapped_flags = 0;
  void set(Qty q, double x) {
    v[static_cast<std::size_t>(q)] = x;
    has[static_cast<std::size_t>(q)] = true;
  }
  double get(Qty q) const { return v[static_cast<std::size_t>(q)]; }
  bool contains(Qty q) const { return has[static_cast<std::size_t>(q)]; }
};

// The words for the fields (without code and channel/status). Mode and flags are given in the tool's terms
// (a controller::Mode as a number, controller::kFlag* bits) and written as the device's. Error: a value that
// is not finite or does not fit the field's integer counts (refused, never clamped).
std::string encode_values(const Table& t, const std::vector<Field>& fields, const Values& in,
                          std::vector<std::string>& words);
// Reads `words` (without code and channel/status) against the fields: the count must match, literals must
// come back as written, numbers must parse and be finite (nan, inf and values beyond a double are refused),
// a channel must be framed.channel; mode and flags come back in the tool's terms (status-word bits that
// [framed.flags] does not map in Values::unmapped_flags).
std::string decode_values(const Table& t, const std::vector<Field>& fields,
                          const std::vector<std::string>& words, Values& out);

// The status digit's meaning in a message ("outside the device's limits"), and whether a retry may help.
const char* status_text(int status);
bool status_retryable(int status);

// Mode mapping between the tool and the device.
std::optional<controller::Mode> mode_from_device(const Table& t, long code);
long mode_to_device(const Table& t, controller::Mode m);
std::uint32_t flags_from_device(const Table& t, std::uint64_t word);
std::uint64_t unmapped_bits(const Table& t, std::uint64_t word);  // the bits no [framed.flags] key names
std::uint64_t flags_to_device(const Table& t, std::uint32_t flags);

}  // namespace loadtrim::framed
