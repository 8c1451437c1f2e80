// The framed ASCII dialect without any I/O (docs/framed.md): frames and their checksum, the splitter, field
// specs and scaling, the table's validation messages, and the simulator's framed front end answering requests
// built by the same codec. Checksum values are worked by hand from the ASCII table (XOR of the bytes).
#include "framed/framed_dialect.hpp"

#include <gtest/gtest.h>

#include <cmath>
#include <fstream>
#include <limits>

#include "config/input_error.hpp"
#include "config/toml_reader.hpp"
#include "sim/framed_front_end.hpp"

using namespace loadtrim;
using namespace loadtrim::framed;

namespace {
const std::string kCell = std::string(LOADTRIM_SOURCE_DIR) + "/config/cells/sim-framed.toml";

Table shipped_table() {
  auto r = config::TomlReader::from_file(kCell);
  Table t = read_table(r);
  return t;
}

// The problems a [framed] section gets, as one text.
std::string problems_of(const std::string& framed_toml) {
  auto r = config::TomlReader::from_text(framed_toml, "cell.toml");
  read_table(r);
  try {
    r.finish();
  } catch (const config::InputError& e) {
    return e.what();
  }
  return "";
}

std::string minimal_ops() {
  return R"(
[framed.ops.identify]
code = "ID"
reply = "roller_diameter_m base_inertia_kg max_speed_kmh max_force_n"
[framed.ops.status]
code = "RS"
reply = "mode speed_kmh flags time_s"
[framed.ops.sample]
code = "RV"
reply = "time_s speed_kmh force_n mode flags"
[framed.ops.hold]
code = "SH"
request = "speed_kmh*100"
[framed.ops.roadload]
code = "RL"
[framed.ops.stop]
code = "ST"
[framed.ops.idle]
code = "IL"
[framed.ops.write_inertia]
code = "WI"
request = "inertia_kg"
[framed.ops.read_inertia]
code = "RI"
reply = "inertia_kg"
[framed.ops.write_coefficients]
code = "WC"
request = "f0_n f1_n_per_kmh f2_n_per_kmh2"
[framed.ops.read_coefficients]
code = "RC"
reply = "f0_n f1_n_per_kmh f2_n_per_kmh2"
[framed.ops.heartbeat]
code = "HB"
[framed.ops.clear_fault]
code = "CL"
)";
}
}  // namespace

TEST(FramedDialect, FrameAndChecksum) {
  // "HB 1": H=0x48 B=0x42 ' '=0x20 '1'=0x31; 0x48^0x42 = 0x0A, ^0x20 = 0x2A, ^0x31 = 0x1B.
  EXPECT_EQ(encode_frame({"HB", "1"}, true), std::string("\x02HB 1;1B\x03"));
  EXPECT_EQ(encode_frame({"HB", "1"}, false), std::string("\x02HB 1\x03"));
  const Decoded good = decode_payload("HB 1;1B", true);
  ASSERT_TRUE(good.ok()) << good.error;
  EXPECT_EQ(good.words, (std::vector<std::string>{"HB", "1"}));
  EXPECT_EQ(decode_payload("HB 1;1C", true).error, "checksum mismatch");
  EXPECT_EQ(decode_payload("HB 1;1b", true).error, "checksum is not two upper-case hex digits");
  EXPECT_EQ(decode_payload("HB 1", true).error, "no checksum");
  EXPECT_FALSE(decode_payload("HB 1;1B", false).ok());  // a ';' where checksums are off
  EXPECT_FALSE(decode_payload("HB  1", false).ok());    // empty field
  EXPECT_FALSE(decode_payload("hb 1", false).ok());     // codes are upper case
  EXPECT_FALSE(decode_payload("HB \x7F", false).ok());  // DEL inside the frame
  EXPECT_FALSE(decode_payload(std::string(kMaxPayload + 1, 'A'), false).ok());
}

TEST(FramedDialect, SplitterFindsFramesAcrossChunksAndReportsNoise) {
  FrameSplitter s;
  std::vector<std::pair<std::string, bool>> got;
  auto sink = [&](std::string_view p, bool noise) { got.emplace_back(std::string(p), noise); };
  const std::string a = encode_frame({"RV", "0", "1", "2"}, true);
  s.feed("junk", sink);
  s.feed(a.substr(0, 3), sink);
  s.feed(a.substr(3) + "\r\n", sink);
  ASSERT_EQ(got.size(), 2u);
  EXPECT_TRUE(got[0].second);  // "junk" once
  EXPECT_FALSE(got[1].second);
  EXPECT_TRUE(decode_payload(got[1].first, true).ok());
  got.clear();
  s.feed(std::string("\x02") + std::string(kMaxPayload + 5, 'A') + "\x03" + a, sink);
  ASSERT_EQ(got.size(), 2u);
  EXPECT_TRUE(got[0].second);  // the overlong frame, skipped to its ETX
  EXPECT_FALSE(got[1].second);
}

TEST(FramedDialect, FieldsScaleToWholeCountsAndRefuseWhatDoesNotFit) {
  std::vector<Field> f;
  ASSERT_EQ(parse_fields("=H speed_kmh*100 -", f), "");
  ASSERT_EQ(f.size(), 3u);
  EXPECT_EQ(format_fields(f), "=H speed_kmh*100 -");
  EXPECT_DOUBLE_EQ(f[1].resolution(), 0.005);
  EXPECT_NE(parse_fields("speed", f).find("unknown field \"speed\""), std::string::npos);
  EXPECT_NE(parse_fields("mode*10", f).find("take no scale"), std::string::npos);
  EXPECT_NE(parse_fields("force_n*0", f).find("scale"), std::string::npos);

  const Table t = shipped_table();
  std::vector<std::string> words;
  Values in;
  in.set(Qty::speed_kmh, 142.037);
  ASSERT_EQ(encode_values(t, t[Op::hold].request, in, words), "");
  EXPECT_EQ(words, (std::vector<std::string>{"H", "14204"}));  // km/h × 100, rounded to the count
  words.clear();
  in.set(Qty::speed_kmh, std::numeric_limits<double>::quiet_NaN());
  EXPECT_NE(encode_values(t, t[Op::hold].request, in, words).find("not a finite"), std::string::npos);
  in.set(Qty::speed_kmh, 1e14);
  EXPECT_NE(encode_values(t, t[Op::hold].request, in, words).find("does not fit"), std::string::npos);

  // A sample reply: ms, km/h × 100, N × 10, the device's mode number and status word.
  Values out;
  ASSERT_EQ(decode_values(t, t[Op::sample].reply, {"612340", "14203", "1884", "1", "17"}, out), "");
  EXPECT_DOUBLE_EQ(out.get(Qty::time_s), 612.34);
  EXPECT_DOUBLE_EQ(out.get(Qty::speed_kmh), 142.03);
  EXPECT_DOUBLE_EQ(out.get(Qty::force_n), 188.4);
  EXPECT_EQ(static_cast<controller::Mode>(static_cast<int>(out.get(Qty::mode))),
            controller::Mode::speed_hold);
  EXPECT_EQ(static_cast<std::uint32_t>(out.get(Qty::flags)),
            controller::kFlagFault | controller::kFlagAtSetpoint);
  EXPECT_NE(decode_values(t, t[Op::sample].reply, {"1", "2", "3", "7", "0"}, out).find("unknown mode 7"),
            std::string::npos);
  EXPECT_NE(decode_values(t, t[Op::sample].reply, {"1", "2", "3"}, out).find("expected 5 values"),
            std::string::npos);
  EXPECT_NE(decode_values(t, t[Op::sample].reply, {"1", "x", "3", "0", "0"}, out).find("not a finite number"),
            std::string::npos);
}

// IEEE 754 (ISO/IEC 60559) has non-finite values: NaN and the infinities, which std::from_chars parses from
// "nan" and "inf", and a decimal beyond the largest double (about 1.8e308) is not representable. None of them
// is a reading.
TEST(FramedDialect, NonFiniteNumbersAreRefused) {
  const Table t = shipped_table();
  for (const std::string bad : {"nan", "-nan", "inf", "-inf", "infinity", "NaN", "1e400"}) {
    Values out;
    const std::string e = decode_values(t, t[Op::identify].reply, {bad, "1250", "16000", "80000", "1"}, out);
    EXPECT_NE(e.find("roller_diameter_m"), std::string::npos) << bad << ": " << e;
    EXPECT_NE(e.find("not a finite number"), std::string::npos) << bad << ": " << e;
  }
  // A scaled field carries whole counts up to 10^15 (docs/framed.md section 2), e.g. inertia_kg*10: counts
  // of 0.1 kg. 1e305 counts, or a fraction of a count, are not what such a field carries.
  for (const std::string bad : {"1e305", "14910.5", "1000000000000001"}) {
    Values out;
    EXPECT_NE(decode_values(t, t[Op::read_inertia].reply, {bad}, out).find("not a whole number of counts"),
              std::string::npos)
        << bad;
  }
  Values out;
  EXPECT_EQ(decode_values(t, t[Op::read_inertia].reply, {"1000000000000000"}, out), "");  // 10^15: the bound
  // The simulator shares the codec: a request with "nan" is refused (status 2), not acted on.
  sim::FramedFrontEnd fe(physics::Truth{}, sim::SimSettings{}, t);
  std::vector<std::string> replies;
  fe.on_bytes(encode_frame({"MD", "1", "H", "nan"}, true), 0.0, replies);
  ASSERT_EQ(replies.size(), 1u);
  EXPECT_EQ(decode_payload(std::string_view(replies[0]).substr(1, replies[0].size() - 2), true).words,
            (std::vector<std::string>{"MD", "2"}));
}

// docs/framed.md section 1: a reply may name the channel that answers; it must be this cell's.
TEST(FramedDialect, AReplyFromAnotherChannelIsRefused) {
  Table t = shipped_table();
  ASSERT_EQ(parse_fields("channel inertia_kg*10", t[Op::read_inertia].reply), "");
  EXPECT_TRUE(validate(t).empty());
  Values out;
  EXPECT_EQ(decode_values(t, t[Op::read_inertia].reply, {"1", "14910"}, out), "");
  EXPECT_DOUBLE_EQ(out.get(Qty::inertia_kg), 1491.0);
  const std::string e = decode_values(t, t[Op::read_inertia].reply, {"2", "14910"}, out);
  EXPECT_NE(e.find("channel 2"), std::string::npos) << e;
  EXPECT_NE(e.find("framed.channel"), std::string::npos) << e;
  std::vector<Field> f;
  EXPECT_NE(parse_fields("channel*10", f).find("take no scale"), std::string::npos);
}

// Status-word bits are mapped one by one by [framed.flags]; the others are reported, not silently mapped.
TEST(FramedDialect, UnmappedStatusBitsAreReported) {
  const Table t = shipped_table();  // bits 1, 2, 4, 8, 16
  Values out;
  ASSERT_EQ(decode_values(t, t[Op::sample].reply, {"1", "2", "3", "0", "48"}, out), "");  // 48 = 32 + 16
  EXPECT_EQ(static_cast<std::uint32_t>(out.get(Qty::flags)), controller::kFlagAtSetpoint);
  EXPECT_EQ(out.unmapped_flags, 32u);
  EXPECT_EQ(unmapped_bits(t, 4294967296ull), 4294967296ull);  // 2^32: no 32-bit flag can name it
  EXPECT_EQ(unmapped_bits(t, 31), 0u);
}

TEST(FramedDialect, TheShippedTableIsCompleteAndValid) {
  const Table t = shipped_table();
  EXPECT_TRUE(validate(t).empty());
  for (std::size_t i = 0; i < kOps; ++i) EXPECT_TRUE(t.ops[i].present) << to_string(static_cast<Op>(i));
  EXPECT_EQ(problems_of(minimal_ops()), "");
}

TEST(FramedDialect, BadTablesAreRefusedWithKeyAndAllowedRange) {
  struct Case {
    std::string toml, must;
  };
  const std::vector<Case> cases = {
      {"[framed]\nchannel = 100\n" + minimal_ops(), "framed.channel"},
      {"[framed]\nchecksum = \"crc\"\n" + minimal_ops(), "framed.checksum"},
      {"[framed.ops.identify]\ncode = \"ID\"\n", "framed.ops.status"},  // required operations missing
      {minimal_ops() + "[framed.ops.force]\ncode = \"sh\"\nrequest = \"force_n\"\n", "framed.ops.force.code"},
      {minimal_ops() + "[framed.ops.force]\ncode = \"FF\"\n", "must carry force_n"},
      {minimal_ops() + "[framed.ops.free]\ncode = \"FR\"\nrequest = \"speed_kmh\"\n",
       "speed_kmh has no place here"},
      {minimal_ops() + "[framed.ops.free]\ncode = \"RL\"\n", "is also the code of roadload"},
      {minimal_ops() + "[framed.modes]\nhold = 0\n", "framed.modes.hold"},
      {minimal_ops() + "[framed.flags]\nlimit = 3\n", "framed.flags.limit"},
      {minimal_ops() + "[framed.ops.free]\ncode = \"FR\"\nrequest = \"-\"\n", "for replies only"},
      {minimal_ops() + "[framed.ops.free]\ncode = \"FR\"\nrequest = \"channel\"\n",
       "channel has no place here"},
  };
  for (const auto& c : cases) {
    const std::string msg = problems_of(c.toml);
    EXPECT_NE(msg.find("cell.toml"), std::string::npos) << msg;
    EXPECT_NE(msg.find(c.must), std::string::npos) << "expected: " << c.must << "\ngot: " << msg;
  }
}

// The controller's clock must time the samples (docs/framed.md section 2): a table whose sample or status
// reply has no time_s is refused when the file is read, naming the key.
TEST(FramedDialect, SampleAndStatusRepliesMustCarryTheControllersClock) {
  auto without = [](const std::string& from, const std::string& to) {
    std::string ops = minimal_ops();
    ops.replace(ops.find(from), from.size(), to);
    return ops;
  };
  std::string msg = problems_of(without("reply = \"time_s speed_kmh", "reply = \"speed_kmh"));
  EXPECT_NE(msg.find("framed.ops.sample.reply"), std::string::npos) << msg;
  EXPECT_NE(msg.find("must carry time_s"), std::string::npos) << msg;
  msg = problems_of(without(" flags time_s\"", " flags\""));
  EXPECT_NE(msg.find("framed.ops.status.reply"), std::string::npos) << msg;
  EXPECT_NE(msg.find("must carry time_s"), std::string::npos) << msg;
}

// Set coefficients are reported as f0 to 0.1 N, f1 to 0.001 N/(km/h), f2 to 0.00001 N/(km/h)²
// (docs/standards.md §1.2): a table whose counts are coarser would let the device hold a value rounded more
// than the record shows (f2 counted in 0.01: 0.0349 is sent as 3 and held as 0.03). Refused when the file is
// read, with the key and the allowed scales; exactly the reported resolution passes.
TEST(FramedDialect, CoarseCountsForSetCoefficientsAndInertiaAreRefused) {
  auto with = [](const std::string& op, const std::string& part, const std::string& fields) {
    std::string ops = minimal_ops();
    const std::string head = "[framed.ops." + op + "]\n";
    const auto at = ops.find(head);
    const auto line = ops.find(part + " = ", at);
    ops.replace(line, ops.find('\n', line) - line, part + " = \"" + fields + "\"");
    return problems_of(ops);
  };
  std::string msg = with("write_coefficients", "request", "f0_n f1_n_per_kmh f2_n_per_kmh2*100");
  EXPECT_NE(msg.find("framed.ops.write_coefficients.request"), std::string::npos) << msg;
  EXPECT_NE(msg.find("counts of 0.01 N/(km/h)²"), std::string::npos) << msg;
  EXPECT_NE(msg.find("allowed scale 100000 to 1000000000"), std::string::npos) << msg;
  msg = with("read_coefficients", "reply", "f0_n*1 f1_n_per_kmh f2_n_per_kmh2");
  EXPECT_NE(msg.find("framed.ops.read_coefficients.reply"), std::string::npos) << msg;
  EXPECT_NE(msg.find("allowed scale 10 to 1000000000"), std::string::npos) << msg;
  msg = with("read_coefficients", "reply", "f0_n f1_n_per_kmh*100 f2_n_per_kmh2");
  EXPECT_NE(msg.find("allowed scale 1000 to 1000000000"), std::string::npos) << msg;
  msg = with("read_inertia", "reply", "inertia_kg*0.1");  // counts of 10 kg
  EXPECT_NE(msg.find("framed.ops.read_inertia.reply"), std::string::npos) << msg;
  EXPECT_NE(msg.find("allowed scale 1 to 1000000000"), std::string::npos) << msg;
  EXPECT_EQ(with("write_coefficients", "request", "f0_n*10 f1_n_per_kmh*1000 f2_n_per_kmh2*100000"), "");
  EXPECT_EQ(with("write_inertia", "request", "inertia_kg*1"), "");
  // Scales of other quantities are the lab's business (a hold speed in whole km/h is a valid table).
  EXPECT_EQ(with("hold", "request", "speed_kmh*1"), "");
}

TEST(FramedDialect, SimulatorFrontEndServesTheTable) {
  const Table t = shipped_table();
  sim::SimSettings s;
  s.faults.refuse = {"clear_fault"};
  sim::FramedFrontEnd fe(physics::Truth{}, s, t);
  auto ask = [&](std::vector<std::string> words) {
    std::vector<std::string> out;
    fe.on_bytes(encode_frame(words, t.checksum), 0.0, out);
    if (out.size() != 1) return std::vector<std::string>{"<" + std::to_string(out.size()) + " replies>"};
    const std::string& f = out[0];
    const Decoded d = decode_payload(std::string_view(f).substr(1, f.size() - 2), t.checksum);
    return d.ok() ? d.words : std::vector<std::string>{d.error};
  };
  const auto id = ask({"ID", "1"});
  ASSERT_EQ(id.size(), 7u);
  EXPECT_EQ(id[1], "0");
  EXPECT_EQ(ask({"MD", "1", "H", "5000"}), (std::vector<std::string>{"MD", "0", "1"}));  // 50 km/h, hold
  EXPECT_EQ(ask({"MD", "1", "H", "99999"})[1], "3");  // 999.99 km/h: outside the limits
  EXPECT_EQ(ask({"MD", "2", "S"})[1], "2");           // another channel
  EXPECT_EQ(ask({"MD", "1", "Q"})[1], "2");           // no operation has this literal
  EXPECT_EQ(ask({"CL", "1"})[1], "6");                // refused by the fault plan
  EXPECT_EQ(ask({"WC", "1", "4238", "3135", "3013"}),
            (std::vector<std::string>{"WC", "0", "4238", "3135", "3013"}));
  EXPECT_EQ(ask({"RC", "1"}), (std::vector<std::string>{"RC", "0", "4238", "3135", "3013"}));
  // A damaged request is never acted on and is answered with status 1.
  std::vector<std::string> out;
  std::string bad = encode_frame({"MD", "1", "R"}, true);
  bad[bad.size() - 2] = bad[bad.size() - 2] == '0' ? '1' : '0';
  fe.on_bytes(bad, 0.0, out);
  ASSERT_EQ(out.size(), 1u);
  EXPECT_EQ(decode_payload(std::string_view(out[0]).substr(1, out[0].size() - 2), true).words,
            (std::vector<std::string>{"MD", "1"}));
  EXPECT_EQ(ask({"RS", "1"})[2], "1");  // still holding
}

// docs/framed.md section 3: every frame decodes with its checksum and its values fit the table; the requests
// replayed against the simulator's front end get the documented code and status digit.
TEST(FramedDialect, DocumentedExchangeDecodesAndReplays) {
  std::ifstream in(std::string(LOADTRIM_SOURCE_DIR) + "/docs/framed.md");
  ASSERT_TRUE(in);
  const Table t = shipped_table();
  sim::FramedFrontEnd fe(physics::Truth{}, sim::SimSettings{}, t);
  const std::string stx = "\u2402", etx = "\u2403";  // the symbols the page shows for STX and ETX
  std::vector<std::string> pending;
  int frames = 0;
  std::string line;
  while (std::getline(in, line)) {
    const auto a = line.find(stx), b = line.find(etx);
    const bool exchange = line.rfind("    > ", 0) == 0 || line.rfind("    < ", 0) == 0;
    if (!exchange || a == std::string::npos || b == std::string::npos) continue;
    const std::string payload = line.substr(a + stx.size(), b - a - stx.size());
    const Decoded d = decode_payload(payload, true);
    ASSERT_TRUE(d.ok()) << line << ": " << d.error;
    ++frames;
    if (line.find("    >") == 0) {
      fe.on_bytes(encode_frame(d.words, true), 0.0, pending);
      continue;
    }
    ASSERT_FALSE(pending.empty()) << "documented reply without a request: " << line;
    const std::string got = pending.front();
    pending.erase(pending.begin());
    const Decoded g = decode_payload(std::string_view(got).substr(1, got.size() - 2), true);
    ASSERT_TRUE(g.ok());
    ASSERT_GE(g.words.size(), 2u);
    EXPECT_EQ(g.words[0], d.words[0]) << line;
    EXPECT_EQ(g.words[1], d.words[1]) << line << "\nsimulator: " << got;
  }
  EXPECT_EQ(frames, 10);
}
