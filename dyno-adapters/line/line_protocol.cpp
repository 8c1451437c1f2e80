#include "line/line_protocol.hpp"

#include <charconv>
#include <cmath>
#include <cstdio>

namespace loadtrim::line {

std::uint16_t crc16(std::string_view data) {
  std::uint16_t crc = 0xFFFF;
  for (unsigned char c : data) {
    crc ^= static_cast<std::uint16_t>(c) << 8;
    for (int i = 0; i < 8; ++i)
      crc = (crc & 0x8000) ? static_cast<std::uint16_t>((crc << 1) ^ 0x1021)
                           : static_cast<std::uint16_t>(crc << 1);
  }
  return crc;
}

std::string encode(const Message& m) {
  std::string body = std::to_string(m.seq) + " " + m.type;
  for (const auto& f : m.fields) body += " " + f;
  char tail[8];
  std::snprintf(tail, sizeof tail, "*%04X\n", crc16(body));
  return body + tail;
}

const char* to_string(DecodeError e) {
  switch (e) {
    case DecodeError::none:
      return "ok";
    case DecodeError::empty:
      return "empty line";
    case DecodeError::too_long:
      return "line too long";
    case DecodeError::bad_char:
      return "non-printable character";
    case DecodeError::no_crc:
      return "no CRC";
    case DecodeError::bad_crc:
      return "CRC mismatch";
    case DecodeError::bad_seq:
      return "bad sequence number";
    case DecodeError::bad_type:
      return "bad message type";
  }
  return "unknown";
}

namespace {
int hexval(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  if (c >= 'a' && c <= 'f') return c - 'a' + 10;
  return -1;
}
}  // namespace

Decoded decode(std::string_view line) {
  Decoded d;
  if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
  if (line.empty()) return d.error = DecodeError::empty, d;
  if (line.size() > kMaxLineLength) return d.error = DecodeError::too_long, d;
  for (char c : line)
    if (c < 0x20 || c > 0x7E) return d.error = DecodeError::bad_char, d;
  const auto star = line.rfind('*');
  if (star == std::string_view::npos || line.size() - star != 5) return d.error = DecodeError::no_crc, d;
  unsigned crc = 0;
  for (std::size_t i = star + 1; i < line.size(); ++i) {
    const int h = hexval(line[i]);
    if (h < 0) return d.error = DecodeError::no_crc, d;
    crc = crc * 16 + static_cast<unsigned>(h);
  }
  const std::string_view body = line.substr(0, star);
  if (crc16(body) != crc) {
    d.error = DecodeError::bad_crc;
    d.detail = "CRC of the line does not match its *" + std::string(line.substr(star + 1));
    return d;
  }
  // Tokens separated by single spaces.
  std::vector<std::string_view> tokens;
  std::size_t pos = 0;
  while (pos <= body.size()) {
    const auto sp = body.find(' ', pos);
    const auto end = sp == std::string_view::npos ? body.size() : sp;
    tokens.push_back(body.substr(pos, end - pos));
    if (sp == std::string_view::npos) break;
    pos = sp + 1;
  }
  if (tokens.size() < 2) return d.error = DecodeError::bad_type, d;
  const auto& s = tokens[0];
  std::uint32_t seq = 0;
  auto r = std::from_chars(s.data(), s.data() + s.size(), seq);
  if (s.empty() || r.ec != std::errc() || r.ptr != s.data() + s.size())
    return d.error = DecodeError::bad_seq, d;
  const auto& t = tokens[1];
  if (t.empty()) return d.error = DecodeError::bad_type, d;
  for (char c : t)
    if (!(c >= 'A' && c <= 'Z')) return d.error = DecodeError::bad_type, d;
  d.message.seq = seq;
  d.message.type = std::string(t);
  for (std::size_t i = 2; i < tokens.size(); ++i) {
    if (tokens[i].empty()) {
      d.error = DecodeError::bad_type;
      d.detail = "empty field (double space)";
      return d;
    }
    d.message.fields.emplace_back(tokens[i]);
  }
  return d;
}

void LineSplitter::feed(std::string_view bytes, const Sink& sink) {
  for (char c : bytes) {
    if (c == '\n') {
      if (discarding_)
        discarding_ = false;
      else
        sink(buffer_, false);
      buffer_.clear();
      continue;
    }
    if (discarding_) continue;
    buffer_ += c;
    if (buffer_.size() > kMaxLineLength + 1) {  // +1: a '\r' before the '\n' is allowed
      sink(buffer_, true);
      buffer_.clear();
      discarding_ = true;
    }
  }
}

std::optional<std::string> field(const Message& m, std::string_view key) {
  for (const auto& f : m.fields)
    if (f.size() > key.size() && f.compare(0, key.size(), key) == 0 && f[key.size()] == '=')
      return f.substr(key.size() + 1);
  return std::nullopt;
}

std::optional<double> parse_number(std::string_view s) {
  double v = 0.0;
  auto r = std::from_chars(s.data(), s.data() + s.size(), v);
  if (s.empty() || r.ec != std::errc() || r.ptr != s.data() + s.size() || !std::isfinite(v))
    return std::nullopt;
  return v;
}

std::optional<double> number_field(const Message& m, std::string_view key) {
  const auto f = field(m, key);
  return f ? parse_number(*f) : std::nullopt;
}

std::string format_number(double v) {
  char buf[40];
  std::snprintf(buf, sizeof buf, "%.17g", v);
  return buf;
}

std::string kv(std::string_view key, double value) {
  return std::string(key) + "=" + format_number(value);
}
std::string kv(std::string_view key, std::string_view value) {
  return std::string(key) + "=" + std::string(value);
}

}  // namespace loadtrim::line
