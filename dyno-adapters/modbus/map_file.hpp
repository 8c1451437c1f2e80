// The [modbus] table of a cell file: the register map (register_map.hpp), read and validated with every
// problem named by its key ("modbus.<quantity>.<field>"). The Modbus adapter's registry row reads it with the
// rest of the cell file; the simulated controller serves the same map (loadtrim-sim --modbus-map).
#pragma once

#include <string>

#include "core/problem.hpp"
#include "modbus/register_map.hpp"

namespace loadtrim::config {
class TomlReader;
}

namespace loadtrim::modbus {

// Problems go to the reader (reported with the whole file's).
RegisterMap read_register_map(config::TomlReader& r);
// Only the map of a file: the rest of the file is the cell's business, not unknown keys. Throws
// config::InputError on any error in the map; warnings about the map's own keys go to `warnings`.
RegisterMap load_register_map(const std::string& path, core::Problems* warnings = nullptr);

}  // namespace loadtrim::modbus
