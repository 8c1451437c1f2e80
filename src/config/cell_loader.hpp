// Loader for cell configurations (config/cells/*.toml). Validates the whole file before anything connects.
#pragma once

#include <string>

#include "controller/cell.hpp"
#include "core/problem.hpp"

namespace loadtrim::config {

controller::CellConfig load_cell(const std::string& path, core::Problems* warnings = nullptr);
// The [modbus] register map of a file (a cell file); the simulated controller serves the same map.
modbus::RegisterMap load_register_map(const std::string& path, core::Problems* warnings = nullptr);
class TomlReader;
modbus::RegisterMap read_register_map(TomlReader& r);
controller::CellConfig parse_cell(const std::string& text, const std::string& name,
                                  core::Problems* warnings = nullptr);

}  // namespace loadtrim::config
