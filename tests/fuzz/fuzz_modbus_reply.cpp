// libFuzzer target: Modbus reply decoding. The first bytes pick a register layout (table, type, word order,
// scale); the next eight are up to four register words as a controller would send them. The decoded value
// goes through the same interpretation the adapter applies (finite check, mode code, status bit field, error
// code) and, when it is a value the tool could write, back through encode, which must then reproduce a value
// within the type's resolution.
#include <cmath>
#include <cstdint>
#include <cstdlib>

#include "modbus/register_map.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace loadtrim::modbus;
  if (size < 10) return 0;
  static constexpr double kScales[] = {1.0, 0.1, 0.01, 0.001, 1e-6, 10.0, -1.0, 3.0e38};
  Register r;
  r.present = true;
  r.table = static_cast<Table>(data[0] % 3);
  r.type = static_cast<Type>((data[0] / 3) % 6);  // uint64 (four words) included
  r.order = (data[1] & 1) ? WordOrder::little : WordOrder::big;
  r.scale = kScales[(data[1] >> 1) % 8];
  const std::uint16_t words[4] = {
      static_cast<std::uint16_t>(data[2] << 8 | data[3]), static_cast<std::uint16_t>(data[4] << 8 | data[5]),
      static_cast<std::uint16_t>(data[6] << 8 | data[7]), static_cast<std::uint16_t>(data[8] << 8 | data[9])};
  const double v = decode(r, words);
  loadtrim::controller::Mode mode;
  std::uint32_t flags = 0;
  int code = 0;
  (void)decode_mode(v, mode);
  (void)decode_flags(v, flags);
  (void)decode_error_code(v, code);
  std::uint16_t back[4] = {0, 0, 0, 0};
  if (std::isfinite(v) && encode(r, v, back)) {
    // Round trip: the words re-encoded from the decoded value decode to the same value (integer types
    // exactly; float32 through the double product may differ in the last place of the float).
    const double again = decode(r, back);
    const double tol =
        r.type == Type::float32 ? std::abs(v) * 1.2e-7 : std::abs(r.scale) * 1e-9 + std::abs(v) * 1e-15;
    if (!(std::abs(again - v) <= tol)) std::abort();
  }
  return 0;
}
