// The adapter registry: a table of rows (adapter_row.hpp), one per adapter, each holding the adapter's name,
// the reader of its own cell file keys and its factory. Adding an adapter is a folder of its own and one row
// in the table (registry.cpp); nothing in controller/, config/ or session/ changes.
//
// production(): every adapter that reaches a real dyno (loadtrim_adapters):
//   line-tcp       line protocol over TCP (dyno-adapters/line)
//   line-serial    line protocol over a serial port (dyno-adapters/line)
//   modbus-tcp     Modbus TCP, a register map from the cell file (dyno-adapters/modbus)
//   modbus-rtu     Modbus RTU over a serial port, the same map (dyno-adapters/modbus)
//   framed-tcp     framed ASCII commands over TCP, a command table from the cell file (dyno-adapters/framed)
//   framed-serial  the same over a serial port (dyno-adapters/framed)
// The in-process simulated controller (inprocess-sim) has its row in its own library, loadtrim_sim_adapters
// (inprocess/sim_rows.hpp), which only the loadtrim tool (for its demo) and the tests link.
#pragma once

#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "adapter_row.hpp"
#include "config/cell_loader.hpp"
#include "controller/cell.hpp"
#include "controller/controller.hpp"

namespace loadtrim::adapters {

class Registry {
 public:
  // Throws std::logic_error for a repeated name or a row missing a function (a programming error).
  explicit Registry(std::vector<Row> rows);
  // The same table with more rows after these.
  Registry with(const std::vector<Row>& more) const;

  const std::vector<Row>& rows() const { return rows_; }
  std::vector<std::string> names() const;
  const Row* find(std::string_view name) const;  // nullptr when no row has that name

  // What config::load_cell needs to read the adapter's own keys: the names and the named row's reader.
  config::AdapterSections sections() const;
  // Throws std::invalid_argument for an adapter no row names (the cell loader refuses those first).
  std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell) const;
  std::string link_key(const controller::CellConfig& cell) const;
  void override_link(controller::CellConfig& cell, const LinkOverrides& o) const;

 private:
  const Row& row(const controller::CellConfig& cell) const;
  std::vector<Row> rows_;
};

// The production adapters (above).
const Registry& production();
std::vector<std::string> names();  // production().names()
std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell);  // production()

}  // namespace loadtrim::adapters
