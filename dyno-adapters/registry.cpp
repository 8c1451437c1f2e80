#include "registry.hpp"

#include <stdexcept>

#include "framed/framed_rows.hpp"
#include "line/line_rows.hpp"
#include "modbus/modbus_rows.hpp"

namespace loadtrim::adapters {

Registry::Registry(std::vector<Row> rows) : rows_(std::move(rows)) {
  for (std::size_t i = 0; i < rows_.size(); ++i) {
    const Row& r = rows_[i];
    if (r.name.empty() || !r.read || !r.make || !r.link_key || !r.override_link)
      throw std::logic_error("adapter registry: row \"" + std::string(r.name) + "\" is incomplete");
    for (std::size_t j = 0; j < i; ++j)
      if (rows_[j].name == r.name)
        throw std::logic_error("adapter registry: \"" + std::string(r.name) + "\" has two rows");
  }
}

Registry Registry::with(const std::vector<Row>& more) const {
  std::vector<Row> all = rows_;
  all.insert(all.end(), more.begin(), more.end());
  return Registry(std::move(all));
}

std::vector<std::string> Registry::names() const {
  std::vector<std::string> out;
  for (const Row& r : rows_) out.emplace_back(r.name);
  return out;
}

const Row* Registry::find(std::string_view name) const {
  for (const Row& r : rows_)
    if (r.name == name) return &r;
  return nullptr;
}

const Row& Registry::row(const controller::CellConfig& cell) const {
  if (const Row* r = find(cell.adapter)) return *r;
  throw std::invalid_argument("unknown controller adapter \"" + cell.adapter + "\"");
}

config::AdapterSections Registry::sections() const {
  // The rows are copied into the reader so that it outlives a temporary registry. The loader asks only for a
  // name from `names` (an unknown one comes back as the first), but a name no row has yields empty settings,
  // which fail loudly at make_controller rather than being guessed.
  return {names(), [rows = rows_](const std::string& adapter, config::TomlReader& r) -> std::any {
            for (const Row& row : rows)
              if (row.name == adapter) return row.read(r);
            return {};
          }};
}

std::unique_ptr<controller::Controller> Registry::make_controller(const controller::CellConfig& cell) const {
  return row(cell).make(cell);
}

std::string Registry::link_key(const controller::CellConfig& cell) const {
  return row(cell).link_key(cell.adapter_settings);
}

void Registry::override_link(controller::CellConfig& cell, const LinkOverrides& o) const {
  row(cell).override_link(cell.adapter_settings, o);
}

const Registry& production() {
  // The table. The order is the order messages list the choices of controller.adapter in.
  static const Registry table({
      line::tcp_row(),
      line::serial_row(),
      modbus::tcp_row(),
      modbus::rtu_row(),
      framed::tcp_row(),
      framed::serial_row(),
  });
  return table;
}

std::vector<std::string> names() {
  return production().names();
}

std::unique_ptr<controller::Controller> make_controller(const controller::CellConfig& cell) {
  return production().make_controller(cell);
}

}  // namespace loadtrim::adapters
