// The adapter registry: one table of rows, each reading its own keys of the cell file and making its own
// controller; the cell loader reads only the cell's own keys and reports every problem of the file at once.
// No I/O beyond reading the shipped cell files; nothing connects.
#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>
#include <functional>
#include <stdexcept>

#include "config/cell_loader.hpp"
#include "config/input_error.hpp"
#include "framed/framed_controller.hpp"
#include "inprocess/sim_rows.hpp"
#include "link.hpp"
#include "modbus/modbus_controller.hpp"
#include "registry.hpp"

using namespace loadtrim;

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;

std::string refusal(const std::function<void()>& f) {
  try {
    f();
  } catch (const config::InputError& e) {
    return e.what();
  }
  return "";
}

// The shipped TCP cell with one line replaced.
std::string tcp_cell(const std::string& from, const std::string& to) {
  std::ifstream in(kSrc + "/config/cells/sim-tcp.toml");
  std::string s((std::istreambuf_iterator<char>(in)), {});
  const auto at = s.find(from);
  EXPECT_NE(at, std::string::npos) << from;
  if (at != std::string::npos) s.replace(at, from.size(), to);
  return s;
}
}  // namespace

TEST(AdapterRegistry, NamesComeFromTheRows) {
  // The production table, in the order messages list the choices; the in-process simulator is not in it.
  EXPECT_EQ(adapters::names(), (std::vector<std::string>{"line-tcp", "line-serial", "modbus-tcp",
                                                         "modbus-rtu", "framed-tcp", "framed-serial"}));
  EXPECT_EQ(adapters::production().find("inprocess-sim"), nullptr);
  // The tool's table: the same rows and the in-process simulated controller after them.
  EXPECT_EQ(adapters::tool_registry().names(),
            (std::vector<std::string>{"line-tcp", "line-serial", "modbus-tcp", "modbus-rtu", "framed-tcp",
                                      "framed-serial", "inprocess-sim"}));
}

TEST(AdapterRegistry, RefusesARepeatedOrIncompleteRow) {
  EXPECT_THROW(adapters::production().with({inprocess::sim_row(), inprocess::sim_row()}), std::logic_error);
  adapters::Row incomplete = inprocess::sim_row();
  incomplete.name = "incomplete";
  incomplete.make = nullptr;
  EXPECT_THROW(adapters::Registry({incomplete}), std::logic_error);
}

TEST(AdapterRegistry, TcpCellSettingsBelongToTheLineRow) {
  controller::CellConfig c =
      config::load_cell(kSrc + "/config/cells/sim-tcp.toml", adapters::production().sections());
  EXPECT_EQ(c.adapter, "line-tcp");
  const auto& a = std::any_cast<const adapters::TcpAddress&>(c.adapter_settings);
  EXPECT_EQ(a.host, "127.0.0.1");
  EXPECT_EQ(a.port, 7301u);
  EXPECT_EQ(adapters::production().link_key(c), "tcp-loopback-7301");
  // --port changes the port; --device means nothing for TCP and is ignored, as it always was.
  adapters::production().override_link(c, {9000, "/dev/null"});
  EXPECT_EQ(adapters::production().link_key(c), "tcp-loopback-9000");
  EXPECT_NE(adapters::production().make_controller(c), nullptr);  // constructs; connects to nothing
}

TEST(AdapterRegistry, SerialCellSettingsBelongToTheLineRow) {
  controller::CellConfig c =
      config::load_cell(kSrc + "/config/cells/sim-serial.toml", adapters::production().sections());
  const auto& s = std::any_cast<const adapters::SerialLine&>(c.adapter_settings);
  EXPECT_EQ(s.device, "/dev/ttyUSB0");
  EXPECT_EQ(s.baud, 115200u);
  EXPECT_EQ(s.parity, adapters::SerialLine::Parity::none);
  adapters::production().override_link(c, {9000, "/nonexistent/tty-for-test"});
  EXPECT_EQ(std::any_cast<const adapters::SerialLine&>(c.adapter_settings).device,
            "/nonexistent/tty-for-test");
  EXPECT_EQ(adapters::production().link_key(c).rfind("serial-", 0), 0u);
}

TEST(AdapterRegistry, ModbusCellCarriesItsRegisterMap) {
  const controller::CellConfig c =
      config::load_cell(kSrc + "/config/cells/sim-modbus.toml", adapters::production().sections());
  const auto& s = std::any_cast<const modbus::Settings&>(c.adapter_settings);
  EXPECT_EQ(std::get<adapters::TcpAddress>(s.link).port, 1502u);
  EXPECT_TRUE(s.map[modbus::Q::speed].present);
  EXPECT_EQ(s.map[modbus::Q::f2].order, modbus::WordOrder::little);  // as the shipped file says
  EXPECT_EQ(adapters::production().link_key(c), "tcp-loopback-1502");
}

TEST(AdapterRegistry, FramedCellCarriesItsCommandTable) {
  const std::string path = kSrc + "/config/cells/sim-framed.toml";
  const controller::CellConfig c = config::load_cell(path, adapters::production().sections());
  const auto& s = std::any_cast<const framed::Settings&>(c.adapter_settings);
  EXPECT_EQ(std::get<adapters::TcpAddress>(s.link).port, 7401u);
  EXPECT_EQ(s.table[framed::Op::hold].code, "MD");
  EXPECT_EQ(adapters::production().link_key(c), "tcp-loopback-7401");
  // The table's problems come with the file's, by key.
  std::ifstream in(path);
  std::string text((std::istreambuf_iterator<char>(in)), {});
  text.replace(text.find("code = \"RC\""), 11, "code = \"rc\"");
  const std::string msg =
      refusal([&] { config::parse_cell(text, "bad-table.toml", adapters::production().sections()); });
  EXPECT_NE(msg.find("bad-table.toml"), std::string::npos) << msg;
  EXPECT_NE(msg.find("framed.ops.read_coefficients.code"), std::string::npos) << msg;
}

TEST(AdapterRegistry, InProcessCellNeedsTheSimulatorRow) {
  const std::string file = kSrc + "/config/cells/sim-inprocess.toml";
  // A program that links only the production adapters refuses the cell, naming what it offers.
  const std::string msg = refusal([&] { config::load_cell(file, adapters::production().sections()); });
  EXPECT_NE(msg.find("controller.adapter"), std::string::npos) << msg;
  EXPECT_NE(msg.find("allowed \"line-tcp\", \"line-serial\", \"modbus-tcp\", \"modbus-rtu\""),
            std::string::npos)
      << msg;
  // The tool offers it; the truth path is resolved against the cell file's folder.
  const controller::CellConfig c = config::load_cell(file, adapters::tool_registry().sections());
  const auto& s = std::any_cast<const inprocess::Settings&>(c.adapter_settings);
  EXPECT_EQ(s.truth_path,
            (std::filesystem::path(kSrc) / "samples/truths/demo-hatchback.toml").lexically_normal().string());
  EXPECT_EQ(adapters::tool_registry().link_key(c), "");  // nothing physical to lock
}

TEST(AdapterRegistry, AdapterKeyProblemsNameFileKeyAndRange) {
  const auto sections = adapters::production().sections();
  std::string msg =
      refusal([&] { config::parse_cell(tcp_cell("port = 7301\n", ""), "no-port.toml", sections); });
  EXPECT_NE(msg.find("no-port.toml"), std::string::npos) << msg;
  EXPECT_NE(msg.find("controller.port: is missing, allowed 1 to 65535"), std::string::npos) << msg;
  msg = refusal(
      [&] { config::parse_cell(tcp_cell("port = 7301", "port = 70000"), "big-port.toml", sections); });
  EXPECT_NE(msg.find("is 70000, allowed 1 to 65535"), std::string::npos) << msg;
}

TEST(AdapterRegistry, EveryProblemOfTheFileAtOnce) {
  // One adapter key and one of the cell's own keys wrong: both in the one refusal.
  std::string text = tcp_cell("port = 7301", "port = 0");
  text.replace(text.find("max_speed_kmh = 160.0"), 21, "max_speed_kmh = 900.0");
  const std::string msg =
      refusal([&] { config::parse_cell(text, "two-problems.toml", adapters::production().sections()); });
  EXPECT_NE(msg.find("controller.port"), std::string::npos) << msg;
  EXPECT_NE(msg.find("limits.max_speed_kmh"), std::string::npos) << msg;
}

TEST(AdapterRegistry, UnknownAdapterIsRefusedByTheLoaderAndTheFactory) {
  const std::string msg = refusal([&] {
    config::parse_cell(tcp_cell("adapter = \"line-tcp\"", "adapter = \"carrier-pigeon\""), "odd.toml",
                       adapters::production().sections());
  });
  EXPECT_NE(msg.find("controller.adapter"), std::string::npos) << msg;
  EXPECT_NE(msg.find("is \"carrier-pigeon\""), std::string::npos) << msg;
  controller::CellConfig c;
  c.adapter = "carrier-pigeon";
  EXPECT_THROW(adapters::production().make_controller(c), std::invalid_argument);
}

TEST(AdapterRegistry, LoaderWithoutAdaptersRefusesRatherThanGuesses) {
  const std::string msg =
      refusal([&] { config::load_cell(kSrc + "/config/cells/sim-tcp.toml", config::AdapterSections{}); });
  EXPECT_NE(msg.find("controller.adapter: cannot be checked"), std::string::npos) << msg;
}

// Standstill (docs/safety.md §3): limits.standstill_kmh, default 5 × dyno.speed_noise_kmh (5 σ of the stated
// noise at rest: a Gaussian reading beyond 5 σ is about 1 in 3.5 million, textbook normal tail; the factor is
// lab policy, common practice, no source), never zero, never below 3 × the stated noise.
TEST(AdapterRegistry, StandstillThresholdComesFromTheCellOrTheStatedSpeedNoise) {
  const auto sections = adapters::production().sections();
  // Neither key: the stated noise defaults to 0.1 km/h, the threshold to 5 × that.
  auto c = config::parse_cell(tcp_cell("port = 7301", "port = 7301"), "plain.toml", sections);
  EXPECT_DOUBLE_EQ(c.speed_noise_kmh, 0.1);
  EXPECT_DOUBLE_EQ(c.standstill_kmh, 0.5);
  // A stated noise of 0.02 km/h: 0.1 km/h.
  c = config::parse_cell(tcp_cell("[dyno]\n", "[dyno]\nspeed_noise_kmh = 0.02\n"), "noise.toml", sections);
  EXPECT_DOUBLE_EQ(c.standstill_kmh, 5.0 * 0.02);
  // Given explicitly: taken as is.
  c = config::parse_cell(tcp_cell("[limits]\n", "[limits]\nstandstill_kmh = 0.8\n"), "given.toml", sections);
  EXPECT_DOUBLE_EQ(c.standstill_kmh, 0.8);
  // Exactly zero is refused, with the range.
  std::string msg = refusal([&] {
    config::parse_cell(tcp_cell("[limits]\n", "[limits]\nstandstill_kmh = 0.0\n"), "zero.toml", sections);
  });
  EXPECT_NE(msg.find("limits.standstill_kmh"), std::string::npos) << msg;
  EXPECT_NE(msg.find("0.05"), std::string::npos) << msg;
  // Below 3 × the stated noise: the noise at rest would read as motion.
  std::string noisy = tcp_cell("[limits]\n", "[limits]\nstandstill_kmh = 0.2\n");
  noisy.replace(noisy.find("[dyno]\n"), 7, "[dyno]\nspeed_noise_kmh = 0.1\n");
  msg = refusal([&] { config::parse_cell(noisy, "noisy.toml", sections); });
  EXPECT_NE(msg.find("below 3 × dyno.speed_noise_kmh"), std::string::npos) << msg;
}

// Who accelerates the vehicle (docs/session.md): the shipped cells state it, and an adapter whose
// configuration rules out a driver display says so before anything connects (a "vehicle" cell on it is
// refused then). The shipped Modbus map names the driver-display registers (docs/modbus.md, "Driver
// prompts"), though its cell keeps the dyno motoring; the framed dialect has no display.
TEST(AdapterRegistry, DriverDisplayAvailableOnlyWhereTheDialectCarriesIt) {
  struct Row {
    const char* file;
    core::RunUp run_up;
    bool driver;
  };
  for (const Row& r :
       {Row{"sim-tcp", core::RunUp::vehicle, true}, Row{"sim-serial", core::RunUp::vehicle, true},
        Row{"sim-modbus", core::RunUp::dyno, true}, Row{"sim-framed", core::RunUp::dyno, false}}) {
    const controller::CellConfig c =
        config::load_cell(kSrc + "/config/cells/" + r.file + ".toml", adapters::production().sections());
    EXPECT_EQ(c.run_up, r.run_up) << r.file;
    const auto ctl = adapters::production().make_controller(c);  // constructs; connects to nothing
    ASSERT_NE(ctl, nullptr);
    EXPECT_EQ(ctl->driver_unavailable().empty(), r.driver) << r.file << ": " << ctl->driver_unavailable();
  }
}
