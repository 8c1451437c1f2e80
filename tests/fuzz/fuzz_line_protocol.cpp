// libFuzzer target: the line protocol's splitter, decoder and sample parser on arbitrary bytes.
#include <cstdint>
#include <string_view>

#include "line/line_controller.hpp"
#include "line/line_protocol.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace loadtrim::line;
  const std::string_view bytes(reinterpret_cast<const char*>(data), size);
  LineSplitter s;
  s.feed(bytes, [](std::string_view line, bool too_long) {
    if (too_long) return;
    const Decoded d = decode(line);
    if (d.ok()) {
      loadtrim::controller::Sample smp;
      parse_sample(d.message, smp);
      field(d.message, "version");
      number_field(d.message, "speed_kmh");
      encode(d.message);
    }
  });
  return 0;
}
