#include "framed/framed_dialect.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdio>

#include "config/toml_reader.hpp"

namespace loadtrim::framed {

using core::Problem;

namespace {

constexpr std::array<const char*, kOps> kOpNames = {"identify",
                                                    "status",
                                                    "sample",
                                                    "hold",
                                                    "roadload",
                                                    "stop",
                                                    "idle",
                                                    "force",
                                                    "free",
                                                    "write_inertia",
                                                    "read_inertia",
                                                    "write_coefficients",
                                                    "read_coefficients",
                                                    "heartbeat",
                                                    "clear_fault"};

constexpr std::array<const char*, kQtys> kQtyNames = {
    "speed_kmh",       "force_n",       "time_s",       "mode",          "flags",
    "inertia_kg",      "f0_n",          "f1_n_per_kmh", "f2_n_per_kmh2", "roller_diameter_m",
    "base_inertia_kg", "max_speed_kmh", "max_force_n",  "time_scale",    "channel"};

using Qs = std::vector<Qty>;

// What each operation's request and reply must carry, and may carry besides.
struct Rule {
  bool required;
  Qs request_needs;
  Qs reply_needs;
  Qs reply_may;
};

Rule rule(Op op) {
  using Q = Qty;
  switch (op) {
    case Op::identify:
      return {true,
              {},
              {Q::roller_diameter_m, Q::base_inertia_kg, Q::max_speed_kmh, Q::max_force_n},
              {Q::time_scale}};
    // The controller's clock in both: samples are timed by it (never by the host's clock, which would
    // defeat the clock guard), and the guard compares the status clock with the samples'.
    case Op::status:
      return {true, {}, {Q::mode, Q::speed_kmh, Q::flags, Q::time_s}, {Q::force_n}};
    case Op::sample:
      return {true, {}, {Q::speed_kmh, Q::force_n, Q::mode, Q::flags, Q::time_s}, {}};
    case Op::hold:
      return {true, {Q::speed_kmh}, {}, {Q::mode}};
    case Op::force:
      return {false, {Q::force_n}, {}, {Q::mode}};
    case Op::roadload:
    case Op::stop:
    case Op::idle:
      return {true, {}, {}, {Q::mode}};
    case Op::free:
      return {false, {}, {}, {Q::mode}};
    case Op::write_inertia:
      return {true, {Q::inertia_kg}, {}, {Q::inertia_kg}};
    case Op::read_inertia:
      return {true, {}, {Q::inertia_kg}, {}};
    case Op::write_coefficients:
      return {true,
              {Q::f0_n, Q::f1_n_per_kmh, Q::f2_n_per_kmh2},
              {},
              {Q::f0_n, Q::f1_n_per_kmh, Q::f2_n_per_kmh2}};
    case Op::read_coefficients:
      return {true, {}, {Q::f0_n, Q::f1_n_per_kmh, Q::f2_n_per_kmh2}, {}};
    case Op::heartbeat:
    case Op::clear_fault:
    case Op::count:
      break;
  }
  return {op != Op::count, {}, {}, {}};
}

bool contains(const Qs& qs, Qty q) {
  return std::find(qs.begin(), qs.end(), q) != qs.end();
}

bool printable_word(std::string_view w) {
  if (w.empty()) return false;
  for (char c : w)
    if (c <= 0x20 || c > 0x7E || c == kChecksumMark) return false;
  return true;
}

bool good_code(std::string_view c) {
  if (c.empty() || c.size() > 6) return false;
  for (char ch : c)
    if (!((ch >= 'A' && ch <= 'Z') || (ch >= '0' && ch <= '9'))) return false;
  return true;
}

// A finite decimal number: "nan", "inf" and values beyond a double are not numbers here.
std::optional<double> parse_double(std::string_view s) {
  double d = 0.0;
  const auto r = std::from_chars(s.data(), s.data() + s.size(), d);
  if (s.empty() || r.ec != std::errc() || r.ptr != s.data() + s.size() || !std::isfinite(d))
    return std::nullopt;
  return d;
}

std::optional<long long> parse_integer(std::string_view s) {
  long long n = 0;
  const auto r = std::from_chars(s.data(), s.data() + s.size(), n);
  if (s.empty() || r.ec != std::errc() || r.ptr != s.data() + s.size()) return std::nullopt;
  return n;
}

std::string shortest(double v) {
  char b[64];
  const auto r = std::to_chars(b, b + sizeof b, v);
  return std::string(b, r.ptr);
}

std::uint8_t xor_of(std::string_view s) {
  std::uint8_t x = 0;
  for (char c : s) x ^= static_cast<std::uint8_t>(c);
  return x;
}

// The largest count a scaled field carries either way (well inside the doubles' exact integers, 2^53).
constexpr double kMaxCounts = 1e15;

bool is_power_of_two(long v) {
  return v > 0 && (v & (v - 1)) == 0;
}

}  // namespace

const char* to_string(Op op) {
  return op < Op::count ? kOpNames[static_cast<std::size_t>(op)] : "?";
}
const char* to_string(Qty q) {
  return q < Qty::count ? kQtyNames[static_cast<std::size_t>(q)] : "?";
}

double min_scale(Qty q) {
  switch (q) {
    case Qty::f0_n:
      return 10.0;  // 0.1 N (docs/standards.md §1.2)
    case Qty::f1_n_per_kmh:
      return 1e3;  // 0.001 N/(km/h) (docs/standards.md §1.2)
    case Qty::f2_n_per_kmh2:
      return 1e5;  // 0.00001 N/(km/h)² (docs/standards.md §1.2)
    case Qty::inertia_kg:
      return 1.0;  // 1 kg (common practice, no source)
    default:
      return 0.0;
  }
}

std::string parse_fields(std::string_view spec, std::vector<Field>& out) {
  out.clear();
  std::size_t p = 0;
  while (p < spec.size()) {
    if (spec[p] == ' ' || spec[p] == '\t') {
      ++p;
      continue;
    }
    std::size_t q = p;
    while (q < spec.size() && spec[q] != ' ' && spec[q] != '\t') ++q;
    const std::string_view w = spec.substr(p, q - p);
    p = q;
    Field f;
    if (w == "-") {
      f.kind = Field::Kind::skip;
    } else if (w[0] == '=') {
      f.kind = Field::Kind::literal;
      f.literal = std::string(w.substr(1));
      if (!printable_word(f.literal) || f.literal.size() > 16)
        return "literal \"" + std::string(w) + "\": '=' then 1 to 16 printable characters, no ';'";
    } else {
      f.kind = Field::Kind::quantity;
      const auto star = w.find('*');
      const std::string_view name = w.substr(0, star);
      bool found = false;
      for (std::size_t i = 0; i < kQtys; ++i)
        if (name == kQtyNames[i]) {
          f.q = static_cast<Qty>(i);
          found = true;
        }
      if (!found) {
        std::string all;
        for (const char* n : kQtyNames) all += std::string(all.empty() ? "" : ", ") + n;
        return "unknown field \"" + std::string(name) + "\"; allowed: " + all + ", - (ignored) or =<literal>";
      }
      if (star != std::string_view::npos) {
        const auto s = parse_double(w.substr(star + 1));
        if (!s || !(*s >= 1e-6 && *s <= 1e9))
          return "field \"" + std::string(w) + "\": the scale after '*' must be a number from 1e-06 to 1e+09";
        if (f.q == Qty::mode || f.q == Qty::flags || f.q == Qty::channel)
          return "field \"" + std::string(w) +
                 "\": mode, flags and channel are device codes and take no scale";
        f.scale = *s;
      }
    }
    out.push_back(std::move(f));
  }
  return {};
}

std::string format_fields(const std::vector<Field>& fields) {
  std::string s;
  for (const auto& f : fields) {
    if (!s.empty()) s += ' ';
    if (f.kind == Field::Kind::skip)
      s += '-';
    else if (f.kind == Field::Kind::literal)
      s += "=" + f.literal;
    else
      s += std::string(to_string(f.q)) + (f.scale > 0.0 ? "*" + shortest(f.scale) : "");
  }
  return s;
}

core::Problems validate(const Table& t) {
  core::Problems ps;
  auto err = [&](const std::string& key, std::string m) {
    ps.push_back({Problem::Severity::error, key, std::move(m)});
  };
  if (t.channel > 99) err("framed.channel", "allowed 0 to 99");
  // At least 10 Hz: the speed signal's minimum rate (GTR 15 §3.1, docs/standards.md §2.7).
  if (!(t.poll_rate_hz >= 10.0 && t.poll_rate_hz <= 1000.0))
    err("framed.poll_rate_hz", "allowed 10 to 1000 Hz");
  for (std::size_t i = 0; i < kOps; ++i) {
    const Op op = static_cast<Op>(i);
    const Command& c = t.ops[i];
    const std::string key = std::string("framed.ops.") + kOpNames[i];
    const Rule r = rule(op);
    if (!c.present) {
      if (r.required) err(key, "is missing: every table maps this operation (code, request, reply)");
      continue;
    }
    if (!good_code(c.code)) err(key + ".code", "must be 1 to 6 characters A-Z or 0-9, e.g. \"SH\"");
    auto check = [&](const std::vector<Field>& fs, const Qs& needs, const Qs& may, const char* which) {
      const std::string k = key + "." + which;
      std::array<int, kQtys> seen{};
      for (const auto& f : fs) {
        if (f.kind != Field::Kind::quantity) continue;
        const auto qi = static_cast<std::size_t>(f.q);
        if (++seen[qi] == 2) err(k, std::string("names ") + kQtyNames[qi] + " twice");
        if (!contains(needs, f.q) && !contains(may, f.q)) {
          std::string allowed;
          for (Qty q : needs) allowed += std::string(allowed.empty() ? "" : ", ") + to_string(q);
          for (Qty q : may) allowed += std::string(allowed.empty() ? "" : ", ") + to_string(q);
          err(k, std::string(kQtyNames[qi]) + " has no place here; allowed: " +
                     (allowed.empty() ? std::string("only literals (=WORD) and -") : allowed));
        }
      }
      for (Qty q : needs)
        if (!seen[static_cast<std::size_t>(q)])
          err(k, std::string("must carry ") + to_string(q) +
                     (q == Qty::time_s ? " (the controller's clock: samples are timed by it, never by the "
                                         "host's, and the clock guard checks it)"
                                       : ""));
      if (fs.size() > 24) err(k, "allowed at most 24 fields");
    };
    check(c.request, r.request_needs, {}, "request");
    for (const auto& f : c.request)
      if (f.kind == Field::Kind::skip) err(key + ".request", "\"-\" is for replies only");
    Qs reply_may = r.reply_may;
    reply_may.push_back(Qty::channel);  // any reply may name the controller that answers
    check(c.reply, r.reply_needs, reply_may, "reply");
    // A coarse count would let the device hold a rounded value while the record keeps the one written.
    for (const char* which : {"request", "reply"})
      for (const auto& f : std::string_view(which) == "request" ? c.request : c.reply) {
        const double least = min_scale(f.q);
        if (f.kind != Field::Kind::quantity || f.scale == 0.0 || least == 0.0 || f.scale >= least) continue;
        const bool inertia = f.q == Qty::inertia_kg;
        const char* unit = inertia                    ? "kg"
                           : f.q == Qty::f0_n         ? "N"
                           : f.q == Qty::f1_n_per_kmh ? "N/(km/h)"
                                                      : "N/(km/h)²";
        const char* finest = inertia                    ? "1"
                             : f.q == Qty::f0_n         ? "0.1"
                             : f.q == Qty::f1_n_per_kmh ? "0.001"
                                                        : "0.00001";
        char allowed[32];
        std::snprintf(allowed, sizeof allowed, "%.0f", least);
        err(key + "." + which, format_fields({f}) + " carries counts of " + shortest(1.0 / f.scale) + " " +
                                   unit + ", coarser than the " + finest + " " + unit + " it must resolve (" +
                                   (inertia ? "common practice, no source"
                                            : "set coefficients as finely as they are reported, "
                                              "docs/standards.md §1.2") +
                                   "): allowed scale " + allowed +
                                   " to 1000000000, or no scale (a plain decimal)");
      }
    for (std::size_t j = 0; j < i; ++j) {
      const Command& o = t.ops[j];
      if (!o.present || o.code != c.code || o.request.size() != c.request.size()) continue;
      bool told_apart = false;
      for (std::size_t k = 0; k < c.request.size(); ++k)
        if (c.request[k].kind == Field::Kind::literal && o.request[k].kind == Field::Kind::literal &&
            c.request[k].literal != o.request[k].literal)
          told_apart = true;
      // Two reading operations may be served by one command (status and sample from one read-out).
      auto reads = [](Op x) {
        return x == Op::identify || x == Op::status || x == Op::sample || x == Op::read_inertia ||
               x == Op::read_coefficients;
      };
      const bool same_command = reads(op) && reads(static_cast<Op>(j)) &&
                                format_fields(c.request) == format_fields(o.request) &&
                                format_fields(c.reply) == format_fields(o.reply);
      if (!told_apart && !same_command)
        err(key + ".code",
            "\"" + c.code + "\" is also the code of " + kOpNames[j] +
                ": operations sharing a code need a literal (=WORD) at the same place that differs, "
                "or (two reading operations) the same request and reply");
    }
  }
  const std::array<std::pair<const char*, int>, 5> modes = {{{"idle", t.modes.idle},
                                                             {"hold", t.modes.hold},
                                                             {"roadload", t.modes.roadload},
                                                             {"stop", t.modes.stop},
                                                             {"force", t.modes.force}}};
  for (std::size_t i = 0; i < modes.size(); ++i)
    for (std::size_t j = 0; j < i; ++j)
      if (modes[i].second == modes[j].second)
        err(std::string("framed.modes.") + modes[i].first,
            "the same number as framed.modes." + std::string(modes[j].first) + "; each mode needs its own");
  const std::array<std::pair<const char*, std::uint32_t>, 5> bits = {{{"fault", t.flags.fault},
                                                                      {"estop", t.flags.estop},
                                                                      {"watchdog", t.flags.watchdog},
                                                                      {"limit", t.flags.limit},
                                                                      {"at_setpoint", t.flags.at_setpoint}}};
  for (std::size_t i = 0; i < bits.size(); ++i) {
    if (!is_power_of_two(static_cast<long>(bits[i].second)))
      err(std::string("framed.flags.") + bits[i].first, "must be one bit: 1, 2, 4, ... up to 1073741824");
    for (std::size_t j = 0; j < i; ++j)
      if (bits[i].second == bits[j].second)
        err(std::string("framed.flags.") + bits[i].first,
            "the same bit as framed.flags." + std::string(bits[j].first) + "; each flag needs its own");
  }
  return ps;
}

Table read_table(config::TomlReader& r) {
  Table t;
  t.name = r.string_or("framed.name", t.name);
  t.channel = static_cast<unsigned>(r.integer_or("framed.channel", 1, 0, 99));
  t.checksum = r.choice("framed.checksum", {"xor", "none"}, std::string("xor")) == "xor";
  t.poll_rate_hz = r.number_or("framed.poll_rate_hz", 50.0, 10.0, 1000.0, "Hz");
  t.modes.idle = r.integer_or("framed.modes.idle", 0, 0, 9999);
  t.modes.hold = r.integer_or("framed.modes.hold", 1, 0, 9999);
  t.modes.roadload = r.integer_or("framed.modes.roadload", 2, 0, 9999);
  t.modes.stop = r.integer_or("framed.modes.stop", 3, 0, 9999);
  t.modes.force = r.integer_or("framed.modes.force", 4, 0, 9999);
  auto bit = [&](const char* name, std::uint32_t fallback) {
    return static_cast<std::uint32_t>(
        r.integer_or(std::string("framed.flags.") + name, static_cast<int>(fallback), 1, 1 << 30));
  };
  t.flags.fault = bit("fault", 1);
  t.flags.estop = bit("estop", 2);
  t.flags.watchdog = bit("watchdog", 4);
  t.flags.limit = bit("limit", 8);
  t.flags.at_setpoint = bit("at_setpoint", 16);
  for (std::size_t i = 0; i < kOps; ++i) {
    const std::string key = std::string("framed.ops.") + kOpNames[i];
    if (!r.has(key)) continue;
    Command& c = t.ops[i];
    c.present = true;
    c.code = r.string(key + ".code");
    for (const char* part : {"request", "reply"}) {
      const std::string spec = r.string_or(key + "." + part, "");
      auto& fs = std::string_view(part) == "request" ? c.request : c.reply;
      if (std::string e = parse_fields(spec, fs); !e.empty()) r.error(key + "." + part, e);
    }
  }
  r.add(validate(t));
  return t;
}

Table load_table(const std::string& path, core::Problems* w) {
  config::TomlReader r = config::TomlReader::from_file(path);
  Table t = read_table(r);
  const core::Problems ws = r.finish();  // throws InputError on any error in the table
  if (w)
    for (const auto& p : ws)
      if (p.key.rfind("framed", 0) == 0) w->push_back(p);
  return t;
}

std::string encode_frame(const std::vector<std::string>& words, bool checksum) {
  std::string payload;
  for (const auto& w : words) {
    if (!payload.empty()) payload += ' ';
    payload += w;
  }
  if (checksum) {
    char b[4];
    std::snprintf(b, sizeof b, "%02X", xor_of(payload));
    payload += kChecksumMark;
    payload += b;
  }
  return std::string(1, kStx) + payload + std::string(1, kEtx);
}

Decoded decode_payload(std::string_view payload, bool checksum) {
  Decoded d;
  if (payload.size() > kMaxPayload) {
    d.error = "frame too long";
    return d;
  }
  for (char c : payload)
    if (c < 0x20 || c > 0x7E) {
      d.error = "control or non-ASCII byte inside the frame";
      return d;
    }
  std::string_view body = payload;
  const auto mark = payload.rfind(kChecksumMark);
  if (checksum) {
    if (mark == std::string_view::npos || payload.size() - mark != 3) {
      d.error = "no checksum";
      return d;
    }
    const auto x = payload.substr(mark + 1);
    unsigned v = 0;
    const auto r = std::from_chars(x.data(), x.data() + 2, v, 16);
    const bool upper = std::all_of(x.begin(), x.end(),
                                   [](char c) { return (c >= '0' && c <= '9') || (c >= 'A' && c <= 'F'); });
    if (r.ec != std::errc() || r.ptr != x.data() + 2 || !upper) {
      d.error = "checksum is not two upper-case hex digits";
      return d;
    }
    body = payload.substr(0, mark);
    if (xor_of(body) != v) {
      d.error = "checksum mismatch";
      return d;
    }
  } else if (mark != std::string_view::npos) {
    d.error = "unexpected ';' (checksums are off for this table)";
    return d;
  }
  std::size_t p = 0;
  while (p <= body.size()) {
    const auto q = body.find(' ', p);
    const std::string_view w = body.substr(p, q == std::string_view::npos ? std::string_view::npos : q - p);
    if (w.empty()) {
      d.error = "empty field (double space, or a space at either end)";
      d.words.clear();
      return d;
    }
    d.words.emplace_back(w);
    if (q == std::string_view::npos) break;
    p = q + 1;
  }
  if (!good_code(d.words[0])) {
    d.error = "bad command code \"" + d.words[0].substr(0, 8) + "\"";
    d.words.clear();
  }
  return d;
}

void FrameSplitter::feed(std::string_view bytes, const Sink& sink) {
  for (char c : bytes) {
    if (c == kStx) {
      if (in_frame_ && !noise_) sink(buffer_, true);  // a frame cut off by a new one
      buffer_.clear();
      in_frame_ = true;
      noise_ = false;
    } else if (!in_frame_) {
      if (!noise_ && c != '\r' && c != '\n') {
        noise_ = true;
        sink("", true);
      }
    } else if (c == kEtx) {
      in_frame_ = false;
      if (!noise_) sink(buffer_, false);
      buffer_.clear();
      noise_ = false;
    } else if (!noise_) {
      buffer_ += c;
      if (buffer_.size() > kMaxPayload) {
        sink("", true);
        buffer_.clear();
        noise_ = true;  // skip to the ETX
      }
    }
  }
}

std::string encode_values(const Table& t, const std::vector<Field>& fields, const Values& in,
                          std::vector<std::string>& words) {
  for (const auto& f : fields) {
    if (f.kind == Field::Kind::literal) {
      words.push_back(f.literal);
      continue;
    }
    if (f.kind == Field::Kind::skip) {
      words.emplace_back("0");
      continue;
    }
    if (!in.contains(f.q)) return std::string("no value for ") + to_string(f.q);
    const double v = in.get(f.q);
    if (!std::isfinite(v)) return std::string(to_string(f.q)) + " is not a finite number";
    if (f.q == Qty::mode) {
      words.push_back(std::to_string(mode_to_device(t, static_cast<controller::Mode>(static_cast<int>(v)))));
    } else if (f.q == Qty::channel) {
      if (!(v >= 0.0 && v <= 99.0 && v == std::floor(v))) return "channel " + shortest(v) + " is not 0 to 99";
      words.push_back(std::to_string(static_cast<int>(v)));
    } else if (f.q == Qty::flags) {
      words.push_back(std::to_string(flags_to_device(t, static_cast<std::uint32_t>(v))));
    } else if (f.scale > 0.0) {
      const double x = std::round(v * f.scale);
      if (!(std::abs(x) <= kMaxCounts))
        return std::string(to_string(f.q)) + " = " + shortest(v) + " does not fit the field's counts of 1/" +
               shortest(f.scale);
      words.push_back(std::to_string(static_cast<long long>(x)));
    } else {
      words.push_back(shortest(v));
    }
  }
  return {};
}

std::string decode_values(const Table& t, const std::vector<Field>& fields,
                          const std::vector<std::string>& words, Values& out) {
  if (words.size() != fields.size())
    return "expected " + std::to_string(fields.size()) + " values (" + format_fields(fields) + "), got " +
           std::to_string(words.size());
  for (std::size_t i = 0; i < fields.size(); ++i) {
    const Field& f = fields[i];
    const std::string& w = words[i];
    if (f.kind == Field::Kind::skip) continue;
    if (f.kind == Field::Kind::literal) {
      if (w != f.literal)
        return "value " + std::to_string(i + 1) + " must be " + f.literal + ", got " + w.substr(0, 16);
      continue;
    }
    if (f.q == Qty::mode) {
      const auto n = parse_integer(w);
      const auto m = n ? mode_from_device(t, static_cast<long>(*n)) : std::nullopt;
      if (!m) return "unknown mode " + w.substr(0, 16) + " (see [framed.modes])";
      out.set(f.q, static_cast<double>(static_cast<int>(*m)));
      continue;
    }
    if (f.q == Qty::flags) {
      const auto n = parse_integer(w);
      if (!n || *n < 0) return "status word " + w.substr(0, 16) + " is not a non-negative integer";
      out.set(f.q, static_cast<double>(flags_from_device(t, static_cast<std::uint64_t>(*n))));
      out.unmapped_flags |= unmapped_bits(t, static_cast<std::uint64_t>(*n));
      continue;
    }
    if (f.q == Qty::channel) {
      const auto n = parse_integer(w);
      if (!n || *n != static_cast<long long>(t.channel))
        return "the reply names channel " + w.substr(0, 16) + "; this cell's controller is channel " +
               std::to_string(t.channel) + " (framed.channel)";
      out.set(f.q, static_cast<double>(*n));
      continue;
    }
    const auto v = parse_double(w);
    if (!v) return std::string(to_string(f.q)) + " \"" + w.substr(0, 16) + "\" is not a finite number";
    // A scaled field carries whole counts, within the bound encode_values keeps (exact in a double).
    if (f.scale > 0.0 && !(*v == std::floor(*v) && std::abs(*v) <= kMaxCounts))
      return std::string(to_string(f.q)) + " \"" + w.substr(0, 16) +
             "\" is not a whole number of counts of 1/" + shortest(f.scale) + " up to 10^15";
    const double x = f.scale > 0.0 ? *v / f.scale : *v;
    if (!std::isfinite(x))
      return std::string(to_string(f.q)) + " \"" + w.substr(0, 16) +
             "\" is beyond any number in counts of 1/" + shortest(f.scale);
    out.set(f.q, x);
  }
  return {};
}

const char* status_text(int s) {
  switch (s) {
    case 0:
      return "done";
    case 1:
      return "frame not understood";
    case 2:
      return "unknown code or bad argument";
    case 3:
      return "outside the device's limits";
    case 4:
      return "not allowed now";
    case 5:
      return "a fault is latched: clear it first";
    case 6:
      return "refused by the device";
    case 9:
      return "internal device error";
    default:
      return "unknown status";
  }
}

bool status_retryable(int s) {
  return s == 1;
}

std::optional<controller::Mode> mode_from_device(const Table& t, long code) {
  using M = controller::Mode;
  if (code == t.modes.idle) return M::idle;
  if (code == t.modes.hold) return M::speed_hold;
  if (code == t.modes.roadload) return M::road_load;
  if (code == t.modes.stop) return M::controlled_stop;
  if (code == t.modes.force) return M::constant_force;
  return std::nullopt;
}

long mode_to_device(const Table& t, controller::Mode m) {
  using M = controller::Mode;
  switch (m) {
    case M::speed_hold:
      return t.modes.hold;
    case M::road_load:
      return t.modes.roadload;
    case M::controlled_stop:
      return t.modes.stop;
    case M::constant_force:
      return t.modes.force;
    case M::idle:
    case M::free_coast:
      break;
  }
  return t.modes.idle;
}

std::uint32_t flags_from_device(const Table& t, std::uint64_t w) {
  std::uint32_t f = 0;
  if (w & t.flags.fault) f |= controller::kFlagFault;
  if (w & t.flags.estop) f |= controller::kFlagEstop;
  if (w & t.flags.watchdog) f |= controller::kFlagWatchdog;
  if (w & t.flags.limit) f |= controller::kFlagLimit;
  if (w & t.flags.at_setpoint) f |= controller::kFlagAtSetpoint;
  return f;
}

std::uint64_t unmapped_bits(const Table& t, std::uint64_t w) {
  return w & ~static_cast<std::uint64_t>(t.flags.fault | t.flags.estop | t.flags.watchdog | t.flags.limit |
                                         t.flags.at_setpoint);
}

std::uint64_t flags_to_device(const Table& t, std::uint32_t f) {
  std::uint64_t w = 0;
  if (f & controller::kFlagFault) w |= t.flags.fault;
  if (f & controller::kFlagEstop) w |= t.flags.estop;
  if (f & controller::kFlagWatchdog) w |= t.flags.watchdog;
  if (f & controller::kFlagLimit) w |= t.flags.limit;
  if (f & controller::kFlagAtSetpoint) w |= t.flags.at_setpoint;
  return w;
}

}  // namespace loadtrim::framed
