#include "sim/modbus_server.hpp"

#include <arpa/inet.h>
#include <modbus/modbus.h>
#include <netinet/in.h>
#include <sys/select.h>
#include <sys/socket.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <csignal>
#include <set>

namespace loadtrim::sim {

using modbus::Q;
using modbus::Table;

namespace {
std::atomic<bool> g_stop{false};
extern "C" void on_signal(int) {
  g_stop = true;
}

int extent(const modbus::RegisterMap& m, Table t) {
  int n = 1;
  for (const auto& r : m.regs)
    if (r.present && r.table == t) n = std::max(n, r.address + r.words());
  return n;
}
}  // namespace

int run_modbus_server(const physics::Truth& truth, const SimSettings& settings, const ServerSettings& server,
                      const modbus::RegisterMap& map, const ModbusOptions& options,
                      const std::function<void(const std::string&)>& announce) {
  const std::string& rtu_device = options.rtu_device;
  std::signal(SIGTERM, on_signal);
  std::signal(SIGINT, on_signal);
  SimController sim(truth, settings);
  modbus_mapping_t* mb =
      modbus_mapping_new(extent(map, Table::coil), 0, extent(map, Table::holding), extent(map, Table::input));
  if (!mb) return 1;
  auto put = [&](Q q, double v) {
    const auto& r = map[q];
    if (!r.present) return;
    std::uint16_t w[4] = {0, 0, 0, 0};
    if (!modbus::encode(r, v, w)) return;  // does not fit the register: it keeps its last value
    if (r.table == Table::coil)
      mb->tab_bits[r.address] = w[0] ? 1 : 0;
    else {
      std::uint16_t* tab = r.table == Table::input ? mb->tab_input_registers : mb->tab_registers;
      for (int i = 0; i < r.words(); ++i) tab[r.address + i] = w[i];
    }
  };
  auto get = [&](Q q) {
    const auto& r = map[q];
    std::uint16_t w[4] = {0, 0, 0, 0};
    if (r.table == Table::coil)
      w[0] = mb->tab_bits[r.address];
    else {
      const std::uint16_t* tab = r.table == Table::input ? mb->tab_input_registers : mb->tab_registers;
      for (int i = 0; i < r.words(); ++i) w[i] = tab[r.address + i];
    }
    return modbus::decode(r, w);
  };
  const auto info = sim.info();
  put(Q::roller_diameter, info.roller_diameter_m);
  put(Q::base_inertia, info.base_inertia_kg);
  put(Q::max_speed, info.max_speed_kmh);
  put(Q::max_force, info.max_force_n);
  put(Q::time_scale, info.time_scale);
  put(Q::inertia, sim.model().inertia_set_kg());
  // What the controller runs, in the applied-value registers (a map may name none: setpoint-only read-back).
  auto publish_applied = [&] {
    put(Q::applied_inertia, sim.model().inertia_set_kg());
    put(Q::applied_f0, sim.model().coefficients().f0_n);
    put(Q::applied_f1, sim.model().coefficients().f1_n_per_kmh);
    put(Q::applied_f2, sim.model().coefficients().f2_n_per_kmh2);
  };
  publish_applied();
  // What the driver display shows, read back after every prompt (docs/modbus.md, "Driver prompts").
  auto publish_prompt = [&] {
    put(Q::driver_prompt, modbus::prompt_code(sim.model().driver_prompt()));
    put(Q::prompt_speed, sim.model().prompted_kmh());
  };
  publish_prompt();
  // The time register: a counter that wraps at its period (0 = float32, no wrap).
  const double period_s = modbus::counter_period_s(map[Q::time]);
  auto counter = [&](double t) {
    const double c = t + options.clock_offset_s;
    return period_s > 0.0 ? std::fmod(c, period_s) : c;
  };
  bool coefficients_set_once = false;
  auto publish = [&] {
    const controller::Sample s = sim.reading();
    put(Q::speed, s.speed_kmh);
    put(Q::force, s.force_n);
    put(Q::time, counter(s.time_s));
    // A mode the map has no code for reads as idle (it cannot have been commanded over this map).
    put(Q::mode, std::max(modbus::kCommandIdle, modbus::command_code(map, s.mode)));
    // The vehicle-in-neutral flag as the map's neutral bit (none without one: the tool reads the trace).
    put(Q::status, modbus::status_register_bits(map, s.flags) | options.extra_status_bits);
  };

  modbus_t* ctx = nullptr;
  int listen_fd = -1, client = -1;
  if (rtu_device.empty()) {
    ctx = modbus_new_tcp(server.bind.c_str(), server.port);
    listen_fd = modbus_tcp_listen(ctx, 1);
    if (listen_fd < 0) return 1;
    sockaddr_in a{};
    socklen_t len = sizeof a;
    ::getsockname(listen_fd, reinterpret_cast<sockaddr*>(&a), &len);
    announce("loadtrim-sim listening modbus-tcp " + server.bind + ":" + std::to_string(ntohs(a.sin_port)) +
             " pid=" + std::to_string(::getpid()));
  } else {
    ctx = modbus_new_rtu(rtu_device.c_str(), 115200, 'N', 8, 1);
    modbus_set_slave(ctx, map.unit_id);
    if (!ctx || modbus_connect(ctx) != 0) return 1;
    client = modbus_get_socket(ctx);
    announce("loadtrim-sim listening modbus-rtu " + rtu_device + " pid=" + std::to_string(::getpid()));
  }
  std::uint8_t query[MODBUS_TCP_MAX_ADU_LENGTH];
  std::set<int> written;  // holding addresses written since the last strobe
  const auto start = std::chrono::steady_clock::now();
  auto last = start;
  HeartbeatWatch beats(get(Q::heartbeat));
  auto wall = [&] { return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count(); };
  sim.touch(0.0);
  while (!g_stop) {
    fd_set rd;
    FD_ZERO(&rd);
    int maxfd = -1;
    if (listen_fd >= 0 && client < 0) FD_SET(listen_fd, &rd), maxfd = listen_fd;
    if (client >= 0) FD_SET(client, &rd), maxfd = std::max(maxfd, client);
    timeval tv{0, 2000};
    const int n = ::select(maxfd + 1, &rd, nullptr, nullptr, &tv);
    const auto now = std::chrono::steady_clock::now();
    const double dt = std::min(0.05, std::chrono::duration<double>(now - last).count());
    last = now;
    std::vector<controller::Sample> unused;
    std::vector<FaultEvent> events;  // seen by the tool in the status register (the map has no events)
    sim.advance_typed(dt * server.time_scale, unused, events);
    sim.check_watchdog_typed(wall(), events);
    if (server.exit_after_s > 0 && wall() > server.exit_after_s) break;
    if (n <= 0) continue;
    if (listen_fd >= 0 && client < 0 && FD_ISSET(listen_fd, &rd)) {
      client = modbus_tcp_accept(ctx, &listen_fd);
      continue;
    }
    if (client < 0 || !FD_ISSET(client, &rd)) continue;
    const int rc = modbus_receive(ctx, query);
    if (rc == -1) {  // the client went away (TCP): accept the next one; the watchdog looks after the rollers
      if (listen_fd >= 0) {
        ::close(client);
        client = -1;
      }
      continue;
    }
    if (rc == 0) continue;  // not for us (RTU address)
    publish();
    modbus_reply(ctx, query, rc, mb);
    const int hl = modbus_get_header_length(ctx);
    const int fn = query[hl];
    const int addr = (query[hl + 1] << 8) | query[hl + 2];
    if (fn == 0x06) written.insert(addr);
    if (fn == 0x10) {
      const int count = (query[hl + 3] << 8) | query[hl + 4];
      for (int i = 0; i < count; ++i) written.insert(addr + i);
    }
    if (beats.changed(get(Q::heartbeat))) sim.touch(wall());
    if (get(Q::strobe) != 0.0) {
      auto was = [&](Q q) {
        return map[q].present && map[q].table != Table::coil && written.count(map[q].address) > 0;
      };
      std::optional<SimError> e;
      if (was(Q::inertia)) e = sim.set_inertia(get(Q::inertia));
      const bool coefficients = was(Q::f0) || was(Q::f1) || was(Q::f2);
      const bool lie = coefficients && options.coefficients_not_applied && coefficients_set_once;
      if (!e && coefficients && !lie) e = sim.set_coefficients({get(Q::f0), get(Q::f1), get(Q::f2)});
      if (!e && coefficients) coefficients_set_once = true;
      if (!e && (was(Q::command) || was(Q::hold_speed) || was(Q::force_setpoint))) {
        const int c = static_cast<int>(get(Q::command));
        const bool force = map.modes.constant_force >= 0 && c == map.modes.constant_force;
        if (c == modbus::kCommandClearFault)
          e = sim.clear();
        else if (force && map[Q::force_setpoint].present)
          e = sim.command(cmd::ApplyForce{get(Q::force_setpoint)});
        else if (map.modes.free_coast >= 0 && c == map.modes.free_coast)
          e = sim.command(cmd::FreeCoast{});
        else if (c == modbus::kCommandHold)
          e = sim.command(cmd::HoldSpeed{get(Q::hold_speed)});
        else if (c == modbus::kCommandRoadLoad)
          e = sim.command(cmd::ReleaseRoadLoad{});
        else if (c == modbus::kCommandStop)
          e = sim.command(cmd::ControlledStop{});
        else if (c == modbus::kCommandIdle)
          e = sim.command(cmd::Idle{});
        else
          e = SimError{Cause::bad_argument, "command code " + std::to_string(c) + " is not in the map"};
      }
      if (!e && (was(Q::driver_prompt) || was(Q::prompt_speed))) {
        const auto p = modbus::prompt_of(get(Q::driver_prompt));
        if (!p)
          e = SimError{Cause::bad_argument, "driver prompt code " + std::to_string(get(Q::driver_prompt)) +
                                                " is not 0 off, 1 accelerate or 2 neutral"};
        else if (!options
                      .prompt_not_shown)  // the lie: acknowledged, not shown (the display keeps its prompt)
          e = sim.prompt_driver(*p, get(Q::prompt_speed));
      }
      put(Q::error, e ? static_cast<double>(modbus_error_code(e->cause)) : 0.0);
      put(Q::inertia, sim.model().inertia_set_kg());
      if (!lie) {  // the lie leaves the setpoint registers as written: they read back what the tool wrote
        put(Q::f0, sim.model().coefficients().f0_n);
        put(Q::f1, sim.model().coefficients().f1_n_per_kmh);
        put(Q::f2, sim.model().coefficients().f2_n_per_kmh2);
      }
      publish_applied();
      publish_prompt();
      written.clear();
      put(Q::strobe, 0.0);
    }
  }
  if (client >= 0 && listen_fd >= 0) ::close(client);
  if (listen_fd >= 0) ::close(listen_fd);
  modbus_close(ctx);
  modbus_free(ctx);
  modbus_mapping_free(mb);
  return 0;
}

}  // namespace loadtrim::sim
