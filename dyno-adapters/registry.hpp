// The adapter registry: a cell configuration's `controller.adapter` string → a Controller.
//   line-tcp       line protocol over TCP (dyno-adapters/line)
//   line-serial    line protocol over a serial port (dyno-adapters/line)
//   inprocess-sim  line protocol to the simulated controller inside this process (dyno-adapters/inprocess)
#pragma once

#include <memory>
#include <string>
#include <vector>

#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "physics/roller_model.hpp"

namespace loadtrim::adapters {

std::vector<std::string> names();
// Throws std::invalid_argument for an unknown adapter (the cell loader refuses those first).
std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell);
// An in-process simulated controller for a truth given directly (fleet runs, benchmarks).
std::unique_ptr<controller::Controller> make_inprocess_controller(const controller::CellConfig& cell,
                                                                  const physics::Truth& truth);

}  // namespace loadtrim::adapters
