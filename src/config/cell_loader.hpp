// Loader for cell configurations (config/cells/*.toml). Validates the whole file before anything connects.
#pragma once

#include <string>

#include "controller/cell.hpp"
#include "core/problem.hpp"

namespace loadtrim::config {

controller::CellConfig load_cell(const std::string& path, core::Problems* warnings = nullptr);
controller::CellConfig parse_cell(const std::string& text, const std::string& name, core::Problems* warnings = nullptr);

}  // namespace loadtrim::config
