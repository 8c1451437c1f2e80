// One row of the adapter registry (registry.hpp): everything the tool needs to know about one adapter, kept
// in the adapter's own folder. The row's functions are the only code that knows the adapter's name, its cell
// file keys and the type of its settings; everything above (config/, controller/, session/, app/) only holds
// CellConfig::adapter_settings and hands it back to the same row.
#pragma once

#include <any>
#include <memory>
#include <string>
#include <string_view>
#include <variant>

#include "controller/cell.hpp"
#include "controller/controller.hpp"
#include "link.hpp"

namespace loadtrim::config {
class TomlReader;
}

namespace loadtrim::adapters {

// What a command line may change about the link without editing the cell file (--port, --device). Zero or
// empty: keep the file's.
struct LinkOverrides {
  unsigned port = 0;
  std::string device;
};

struct Row {
  std::string_view name;  // the cell file's controller.adapter
  // Reads the adapter's own keys of the cell file. Every problem goes to the reader (file, key, allowed
  // range), never thrown, so the loader reports the whole file at once. Returns the adapter's settings.
  std::any (*read)(config::TomlReader& r);
  // A controller for a cell whose adapter_settings this row's `read` produced (std::bad_any_cast otherwise).
  std::unique_ptr<controller::Controller> (*make)(const controller::CellConfig& cell);
  // The physical link, as one string, for the cell lock (app/cell_locks.hpp); "" = nothing to lock (a
  // controller inside the tool's own process).
  std::string (*link_key)(const std::any& settings);
  // Applies the overrides that mean something for this adapter (a port for TCP, a device for a serial line)
  // and ignores the others, as the command line always has.
  void (*override_link)(std::any& settings, const LinkOverrides& o);
};

// The row functions of an adapter whose Settings hold `link`, a std::variant<TcpAddress, SerialLine>
// (link.hpp): the lock key of whichever link it is, and --port / --device applied to the one that takes it.
template <class Settings>
std::string variant_link_key(const std::any& s) {
  return std::visit([](const auto& link) { return link_key(link); }, std::any_cast<const Settings&>(s).link);
}
template <class Settings>
void override_variant_link(std::any& s, const LinkOverrides& o) {
  auto& link = std::any_cast<Settings&>(s).link;
  if (auto* tcp = std::get_if<TcpAddress>(&link); tcp && o.port > 0) tcp->port = o.port;
  if (auto* serial = std::get_if<SerialLine>(&link); serial && !o.device.empty()) serial->device = o.device;
}

// The interface's limits from the cell's own facts, the same for every adapter that reaches a real dyno.
inline controller::Limits cell_limits(const controller::CellConfig& cell) {
  return {cell.max_speed_kmh, cell.max_force_n, cell.max_time_scale, true};
}

}  // namespace loadtrim::adapters
