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

namespace loadtrim::adapters {

std::vector<std::string> names();
// Throws std::invalid_argument for an unknown adapter (the cell loader refuses those first).
std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell);

}  // namespace loadtrim::adapters
