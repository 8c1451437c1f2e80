// libFuzzer target: the TOML loaders for profile, target, truth, cell (with every adapter's own keys, the
// Modbus register map among them) and check profile on arbitrary text. Bad input must come back as
// config::InputError, never as a crash or another exception.
#include <cstdint>
#include <string>

#include "config/cell_loader.hpp"
#include "config/input_error.hpp"
#include "config/loaders.hpp"
#include "inprocess/sim_rows.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace loadtrim::config;
  const std::string text(reinterpret_cast<const char*>(data), size);
  try {
    parse_profile(text, "fuzz.toml");
  } catch (const InputError&) {
  }
  try {
    parse_target(text, "fuzz.toml");
  } catch (const InputError&) {
  }
  try {
    parse_truth(text, "fuzz.toml");
  } catch (const InputError&) {
  }
  try {
    parse_cell(text, "fuzz.toml", loadtrim::adapters::tool_registry().sections());
  } catch (const InputError&) {
  }
  try {
    parse_check_profile(text, "fuzz.toml");
  } catch (const InputError&) {
  }
  return 0;
}
