// The in-process simulated controller's registry row, "inprocess-sim" (controller.truth: the truth file of
// the simulated vehicle and dyno, relative to the cell file), and the registry of the loadtrim tool: the
// production adapters plus this row. It lives in loadtrim_sim_adapters, apart from the production adapters,
// because it carries the simulator and the file loaders: a program that drives only real dynos links
// loadtrim_adapters and never this.
#pragma once

#include <memory>
#include <string>

#include "adapter_row.hpp"
#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "physics/roller_model.hpp"
#include "registry.hpp"

namespace loadtrim::inprocess {

struct Settings {
  std::string truth_path;  // controller.truth, made absolute against the cell file's folder
};

adapters::Row sim_row();
// A simulated controller for a truth given directly rather than by the cell file (the demo's own truth,
// fleet runs): the line protocol over a loopback to the simulator front end in this process.
std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell,
                                                        const physics::Truth& truth);

}  // namespace loadtrim::inprocess

namespace loadtrim::adapters {

// Every adapter the loadtrim tool offers: production() and the in-process simulated controller's row.
const Registry& tool_registry();

}  // namespace loadtrim::adapters
