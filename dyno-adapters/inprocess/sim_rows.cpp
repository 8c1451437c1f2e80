#include "inprocess/sim_rows.hpp"

#include <filesystem>

#include "config/loaders.hpp"
#include "config/toml_reader.hpp"
#include "inprocess/loopback_transport.hpp"
#include "line/line_controller.hpp"
#include "sim/line_front_end.hpp"

namespace loadtrim::inprocess {

adapters::Row sim_row() {
  return {
      "inprocess-sim",
      [](config::TomlReader& r) -> std::any {
        Settings s;
        s.truth_path = r.string("controller.truth");
        // Relative to the cell file, so a cell file and its truth move together.
        if (!s.truth_path.empty() && std::filesystem::path(s.truth_path).is_relative())
          s.truth_path =
              (std::filesystem::path(r.file()).parent_path() / s.truth_path).lexically_normal().string();
        return s;
      },
      [](const controller::CellConfig& cell) {
        return make_controller(
            cell, config::load_truth(std::any_cast<const Settings&>(cell.adapter_settings).truth_path));
      },
      // In the tool's own process: there is no physical link for two processes to share.
      [](const std::any&) { return std::string(); },
      [](std::any&, const adapters::LinkOverrides&) {},
  };
}

std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell,
                                                        const physics::Truth& truth) {
  sim::SimSettings settings;
  settings.watchdog_s = 1e9;  // simulated time races ahead of the host's heartbeats here
  auto sim = std::make_shared<sim::LineFrontEnd>(truth, settings);
  // Its clock races ahead of the wall by design: only order and stream rate are checked, not the rate against
  // the wall.
  return std::make_unique<line::LineController>(
      std::make_unique<LoopbackTransport>(sim), cell.timeouts,
      controller::Limits{cell.max_speed_kmh, cell.max_force_n, 1e9, false});
}

}  // namespace loadtrim::inprocess

namespace loadtrim::adapters {

const Registry& tool_registry() {
  static const Registry table = production().with({inprocess::sim_row()});
  return table;
}

}  // namespace loadtrim::adapters
