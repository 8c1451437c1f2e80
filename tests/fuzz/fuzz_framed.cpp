// libFuzzer target: the framed ASCII codec (docs/framed.md) on arbitrary bytes from a device. The first byte
// picks the table: the shipped config/cells/sim-framed.toml with checksums on (bit 0 clear) or off (set), and
// with every reply naming its channel (bit 1). The rest is a byte stream fed to the frame splitter in chunks
// (cut where a byte's low bits say). Every payload goes through decode_payload; every decoded frame, for each
// operation of its code, through decode_values against the reply's fields (after the status digit) and the
// request's (after the channel). What decodes must encode back (encode_values may only refuse a value beyond
// its field's counts), and the encoded words must decode to the same values and make a frame that decodes to
// the same words. Any difference aborts.
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <string>
#include <string_view>
#include <vector>

#include "config/toml_reader.hpp"
#include "framed/framed_dialect.hpp"

using namespace loadtrim::framed;

namespace {

Table load(bool checksum, bool channel) {
  auto r = loadtrim::config::TomlReader::from_file(std::string(LOADTRIM_SOURCE_DIR) +
                                                   "/config/cells/sim-framed.toml");
  Table t = read_table(r);
  t.checksum = checksum;
  if (channel)
    for (auto& c : t.ops)
      if (c.present) c.reply.insert(c.reply.begin(), Field{Field::Kind::quantity, Qty::channel, 0.0, {}});
  return t;
}

const Table& table(int i) {
  static const Table tables[4] = {load(true, false), load(false, false), load(true, true), load(false, true)};
  return tables[i & 3];
}

bool same(const Values& a, const Values& b) {
  for (std::size_t i = 0; i < kQtys; ++i) {
    if (a.has[i] != b.has[i]) return false;
    if (a.has[i] && !(a.v[i] == b.v[i])) return false;  // decoded values are finite: exact equality
  }
  return true;
}

// decode → encode → decode gives the same values, and the encoded frame gives the same words back.
void round_trip(const Table& t, const Command& c, const std::vector<Field>& fields, const std::string& second,
                const std::vector<std::string>& values) {
  Values v;
  if (!decode_values(t, fields, values, v).empty()) return;
  for (std::size_t i = 0; i < kQtys; ++i)
    if (v.has[i] && !std::isfinite(v.v[i])) std::abort();  // nothing non-finite is ever decoded
  std::vector<std::string> words{c.code, second};
  const std::string e = encode_values(t, fields, v, words);
  if (!e.empty()) {
    if (e.find("does not fit") == std::string::npos) std::abort();  // the only refusal of a decoded value
    return;
  }
  Values again;
  const std::vector<std::string> back(words.begin() + 2, words.end());
  if (!decode_values(t, fields, back, again).empty() || !same(v, again)) std::abort();
  const std::string f = encode_frame(words, t.checksum);
  if (f.size() - 2 > kMaxPayload) return;
  const Decoded d = decode_payload(std::string_view(f).substr(1, f.size() - 2), t.checksum);
  if (!d.ok() || d.words != words) std::abort();
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size < 1) return 0;
  const Table& t = table(data[0]);
  const std::string_view stream(reinterpret_cast<const char*>(data + 1), size - 1);
  FrameSplitter splitter;
  std::vector<std::string> payloads;
  auto sink = [&](std::string_view p, bool noise) {
    if (noise) return;
    if (p.size() > kMaxPayload || p.find(kStx) != std::string_view::npos ||
        p.find(kEtx) != std::string_view::npos)
      std::abort();  // the splitter hands on only what lies between one STX and its ETX, within the bound
    payloads.emplace_back(p);
  };
  // Chunks of 1 to 8 bytes, cut where the byte before says.
  std::size_t at = 0;
  while (at < stream.size()) {
    const std::size_t n =
        std::min<std::size_t>(stream.size() - at, 1 + (static_cast<unsigned char>(stream[at]) & 7));
    splitter.feed(stream.substr(at, n), sink);
    at += n;
  }
  for (const auto& p : payloads) {
    const Decoded d = decode_payload(p, t.checksum);
    if (!d.ok()) continue;
    if (d.words.empty()) std::abort();
    const std::vector<std::string> rest(d.words.begin() + std::min<std::size_t>(2, d.words.size()),
                                        d.words.end());
    for (const auto& c : t.ops) {
      if (!c.present || c.code != d.words[0] || d.words.size() < 2) continue;
      round_trip(t, c, c.reply, d.words[1], rest);
      round_trip(t, c, c.request, d.words[1], rest);
    }
    (void)status_text(d.words.size() > 1 && d.words[1].size() == 1 ? d.words[1][0] - '0' : -1);
  }
  return 0;
}
