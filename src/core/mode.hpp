// The dyno controller's operating modes: one enum for the physics model (physics/roller_model.hpp), the
// controller interface (controller/controller.hpp) and the simulator, which name it physics::Mode and
// controller::Mode. Pure.
#pragma once

#include <cstdint>

namespace loadtrim::core {

// idle: motor off; at speed the rollers coast freely on their own inertia and losses (no simulation, no
// compensation). speed_hold: the motor drives the rollers to a set speed. road_load: the controller simulates
// the set inertia and road load. controlled_stop: the motor brings the rollers to a stop, then idles.
// constant_force: the motor applies a set force at the roller surface, parasitic compensation on, no inertia
// or road-load simulation (the base inertia check). free_coast: a command only, motor off at any speed with
// no vehicle on the rollers (the parasitic loss determination); physically the same as idle, and a controller
// reports idle while the rollers coast.
// The framed dialect carries a mode as its number (dyno-adapters/framed/framed_dialect.hpp): append only.
enum class Mode : std::uint8_t { idle, speed_hold, road_load, controlled_stop, constant_force, free_coast };

constexpr const char* to_string(Mode m) {
  switch (m) {
    case Mode::idle:
      return "idle";
    case Mode::speed_hold:
      return "speed-hold";
    case Mode::road_load:
      return "road-load";
    case Mode::controlled_stop:
      return "controlled-stop";
    case Mode::constant_force:
      return "constant-force";
    case Mode::free_coast:
      return "free-coast";
  }
  return "unknown";
}

// Who accelerates the vehicle for a coast-down (the cell's dyno.run_up): the dyno motoring it in neutral, or
// the vehicle under its own power, a driver or driver robot prompted through the controller. GTR 15 Annex 4
// §8.1.3.4 (text): with the dyno accelerating the vehicle only the fixed-run method may be used.
enum class RunUp : std::uint8_t { dyno, vehicle };

constexpr const char* to_string(RunUp r) {
  return r == RunUp::dyno ? "dyno" : "vehicle";
}

// What the tool asks of the driver (or driver robot) on the controller's driver display during a run-up
// under the vehicle's own power: accelerate to a speed, shift to neutral, or nothing (the display cleared).
enum class DriverPrompt : std::uint8_t { accelerate, neutral, off };

constexpr const char* to_string(DriverPrompt p) {
  switch (p) {
    case DriverPrompt::accelerate:
      return "accelerate";
    case DriverPrompt::neutral:
      return "neutral";
    case DriverPrompt::off:
      return "off";
  }
  return "unknown";
}

}  // namespace loadtrim::core
