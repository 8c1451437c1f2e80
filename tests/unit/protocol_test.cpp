// The line protocol codec as a pure state machine (no socket), and docs/protocol.md's examples fed to it.
#include <gtest/gtest.h>

#include <fstream>
#include <sstream>

#include "line/line_controller.hpp"
#include "line/line_protocol.hpp"
#include "sim/line_front_end.hpp"

using namespace loadtrim;
using namespace loadtrim::line;

TEST(Protocol, CrcCheckValue) {
  // CRC-16/CCITT-FALSE check value of "123456789" is 0x29B1 (CRC catalogue check value, from memory; the same
  // figure from Python's binascii.crc_hqx(b"123456789", 0xFFFF)).
  EXPECT_EQ(crc16("123456789"), 0x29B1);
  EXPECT_EQ(crc16(""), 0xFFFF);
}

TEST(Protocol, EncodeDecodeRoundTrip) {
  const Message m{42, "COEF", {"SET", "42.38", "0.3135", "0.03013"}};
  const std::string wire = encode(m);
  ASSERT_EQ(wire.back(), '\n');
  const Decoded d = decode(std::string_view(wire).substr(0, wire.size() - 1));
  ASSERT_TRUE(d.ok()) << to_string(d.error);
  EXPECT_EQ(d.message.seq, 42u);
  EXPECT_EQ(d.message.type, "COEF");
  EXPECT_EQ(d.message.fields, m.fields);
  // CR LF is accepted.
  EXPECT_TRUE(decode(wire.substr(0, wire.size() - 1) + "\r").ok());
  EXPECT_EQ(format_number(0.1), "0.10000000000000001");
  EXPECT_EQ(*parse_number(format_number(0.03013)), 0.03013);  // 17 digits parse back to the same double
}

TEST(Protocol, CorruptedAndMalformedLinesAreRejected) {
  std::string good = encode({7, "MODE", {"HOLD", "80"}});
  good.pop_back();
  // Every single-character corruption of the body is caught by the CRC (or by the framing rules).
  for (std::size_t i = 0; i < good.size(); ++i) {
    std::string bad = good;
    bad[i] = bad[i] == '5' ? '6' : '5';
    EXPECT_FALSE(decode(bad).ok()) << bad;
  }
  EXPECT_EQ(decode("7 MODE HOLD 80").error, DecodeError::no_crc);
  EXPECT_EQ(decode("").error, DecodeError::empty);
  EXPECT_EQ(decode(std::string(300, 'A')).error, DecodeError::too_long);
  EXPECT_EQ(decode("7 MODE\x01 HOLD*0000").error, DecodeError::bad_char);
  auto framed = [](const std::string& body) {
    char crc[8];
    std::snprintf(crc, sizeof crc, "*%04X", crc16(body));
    return body + crc;
  };
  EXPECT_EQ(decode(framed("x7 MODE HOLD")).error, DecodeError::bad_seq);
  EXPECT_EQ(decode(framed("99999999999 MODE")).error, DecodeError::bad_seq);
  EXPECT_EQ(decode(framed("7 mode HOLD")).error, DecodeError::bad_type);
  EXPECT_EQ(decode(framed("7 MODE  HOLD")).error, DecodeError::bad_type);
  EXPECT_EQ(decode(framed("7")).error, DecodeError::bad_type);
  EXPECT_TRUE(decode(framed("7 MODE HOLD")).ok());
}

TEST(Protocol, SplitterHandlesChunksAndOverlongLines) {
  LineSplitter s;
  std::vector<std::string> lines;
  int too_long = 0;
  auto sink = [&](std::string_view l, bool tl) {
    if (tl)
      ++too_long;
    else
      lines.emplace_back(l);
  };
  const std::string a = encode({1, "BEAT", {}}), b = encode({2, "STATUS", {}});
  const std::string stream = a + std::string(500, 'Z') + "\n" + b;
  for (char c : stream) s.feed(std::string_view(&c, 1), sink);  // byte by byte
  ASSERT_EQ(lines.size(), 2u);
  EXPECT_EQ(too_long, 1);
  EXPECT_TRUE(decode(lines[0]).ok());
  EXPECT_TRUE(decode(lines[1]).ok());
  EXPECT_EQ(s.pending(), 0u);
}

TEST(Protocol, SampleLines) {
  controller::Sample smp;
  ASSERT_TRUE(parse_sample({5, "SMP", {"17", "612.3400", "142.0312", "188.41", "HOLD", "10"}}, smp));
  EXPECT_EQ(smp.index, 17u);
  EXPECT_DOUBLE_EQ(smp.time_s, 612.34);
  EXPECT_DOUBLE_EQ(smp.speed_kmh, 142.0312);
  EXPECT_EQ(smp.mode, controller::Mode::speed_hold);
  EXPECT_EQ(smp.flags, kFlagAtSetpoint);
  EXPECT_FALSE(parse_sample({5, "SMP", {"17", "612.3400", "fast", "188.41", "HOLD", "10"}}, smp));
  EXPECT_FALSE(parse_sample({5, "SMP", {"17", "612.3400", "1", "188.41", "FLY", "10"}}, smp));
  EXPECT_FALSE(parse_sample({5, "SMP", {"17"}}, smp));
}

TEST(Protocol, DocumentedExamplesParseAndTheSimulatorAnswersThem) {
  // Every example line in docs/protocol.md decodes (their CRCs were computed by Python's binascii, an
  // independent implementation), and feeding the documented requests to the simulated controller, in order,
  // gives replies of the documented kind (OK with the same verb, or ERR with the same code) to the same
  // request numbers.
  std::ifstream in(std::string(LOADTRIM_SOURCE_DIR) + "/docs/protocol.md");
  ASSERT_TRUE(in);
  std::string line;
  bool in_wire = false;
  int requests = 0, replies = 0, checked = 0;
  sim::LineFrontEnd sim(physics::Truth{}, sim::SimSettings{});
  std::vector<std::string> pending;  // simulator replies not yet compared
  while (std::getline(in, line)) {
    if (line.rfind("```", 0) == 0) {
      in_wire = line == "```wire";
      continue;
    }
    if (!in_wire || line.size() < 3 || (line[0] != '>' && line[0] != '<')) continue;
    const Decoded d = decode(line.substr(2));
    ASSERT_TRUE(d.ok()) << line << ": " << to_string(d.error);
    if (line[0] == '>') {
      ++requests;
      sim.on_line(line.substr(2), 0.0, pending);
      continue;
    }
    ++replies;
    if (d.message.type != "OK" && d.message.type != "ERR") continue;  // SMP / EVT examples: decoded above
    ASSERT_FALSE(pending.empty()) << "documented reply without a request: " << line;
    std::string got = pending.front();
    pending.erase(pending.begin());
    got.pop_back();
    const Decoded g = decode(got);
    ASSERT_TRUE(g.ok());
    EXPECT_EQ(g.message.type, d.message.type) << line << "\nsimulator: " << got;
    ASSERT_GE(g.message.fields.size(), 2u);
    EXPECT_EQ(g.message.fields[0], d.message.fields[0]) << line;
    EXPECT_EQ(g.message.fields[1], d.message.fields[1]) << line << "\nsimulator: " << got;
    ++checked;
  }
  // 24: sections 1 to 11, and the four driver prompts of section 12.
  EXPECT_EQ(requests, 24);
  EXPECT_GE(replies, 24);
  EXPECT_EQ(checked, 24);
}
