// Loader for cell configurations (config/cells/*.toml). Validates the whole file before anything connects.
// It reads the cell's own keys (name, timeouts, reconnect, limits, dyno, checks, records, and of [controller]
// adapter, max_time_scale and sample_rate_hz); the adapter's own keys belong to the adapter and are read by
// the reader the caller passes in.
#pragma once

#include <any>
#include <functional>
#include <string>
#include <vector>

#include "controller/cell.hpp"
#include "core/problem.hpp"

namespace loadtrim::config {

class TomlReader;

// The adapters a cell file may name and the reader of the named one's own keys. config/ sits below the
// adapters and knows neither their names nor their keys, so the caller passes them in (the adapter registry's
// sections(), dyno-adapters/registry.hpp). `read` records its problems in the reader like the loader's own
// (file, key, allowed range), so one InputError lists every problem of the file before anything connects.
// What it returns becomes CellConfig::adapter_settings.
struct AdapterSections {
  std::vector<std::string> names;  // the choices of controller.adapter, in the order messages list them
  std::function<std::any(const std::string& adapter, TomlReader& r)> read;
};

controller::CellConfig load_cell(const std::string& path, const AdapterSections& adapters,
                                 core::Problems* warnings = nullptr);
controller::CellConfig parse_cell(const std::string& text, const std::string& name,
                                  const AdapterSections& adapters, core::Problems* warnings = nullptr);

}  // namespace loadtrim::config
