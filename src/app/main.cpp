// loadtrim: reproduce track road-load targets on a chassis dynamometer. Thin CLI over the libraries.
#include <cstdlib>
#include <exception>
#include <filesystem>
#include <iostream>
#include <system_error>

#include "app/exit_codes.hpp"
#include "app/subcommands.hpp"
#include "config/input_error.hpp"

namespace loadtrim::app {
namespace {
// A folder holds loadtrim's data when it has the standard profiles.
bool has_data(const std::filesystem::path& dir) {
  std::error_code ec;
  return std::filesystem::is_directory(dir / "config" / "profiles", ec);
}
}  // namespace

// In order: LOADTRIM_HOME; the installed data beside this executable (<prefix>/bin/../share/loadtrim, so an
// installed or unpacked package uses its own files even where a source tree exists); the source tree this
// binary was built from (the build tree's layout has no share/ folder); the install data folder compiled in.
// The result is computed once: the subcommands ask for it while registering their defaults.
std::string data_dir() {
  static const std::string dir = [] {
    if (const char* home = std::getenv("LOADTRIM_HOME")) return std::string(home);
    std::error_code ec;
    const std::filesystem::path exe = std::filesystem::read_symlink("/proc/self/exe", ec);
    if (!ec) {
      const std::filesystem::path beside = (exe.parent_path() / LOADTRIM_DATA_FROM_BIN).lexically_normal();
      if (has_data(beside)) return beside.string();
    }
    if (has_data(LOADTRIM_SOURCE_DIR)) return std::string(LOADTRIM_SOURCE_DIR);
    if (has_data(LOADTRIM_INSTALL_DATA_DIR)) return std::string(LOADTRIM_INSTALL_DATA_DIR);
    return std::string(LOADTRIM_SOURCE_DIR);  // nothing found: errors name the source path, as before
  }();
  return dir;
}
}  // namespace loadtrim::app

int main(int argc, char** argv) {
  using namespace loadtrim::app;
  CLI::App app{"loadtrim " LOADTRIM_VERSION " (build " LOADTRIM_BUILD_ID
               "): find chassis-dyno set coefficients that reproduce road-load targets"};
  app.set_version_flag("--version", "loadtrim " LOADTRIM_VERSION " build " LOADTRIM_BUILD_ID);
  app.require_subcommand(1);
  Runner run;
  register_demo(app, run);
  register_link_check(app, run);
  register_session_commands(app, run);
  register_bench(app, run);
  register_check_commands(app, run);
  register_target_command(app, run);
  register_keys_command(app, run);
  register_approve_command(app, run);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int rc = app.exit(e);
    return rc == 0 ? 0 : kBadInput;
  }
  try {
    return run ? run() : kBadInput;
  } catch (const loadtrim::config::InputError& e) {
    std::cerr << e.what() << "refused: nothing was started.\n";
    return kBadInput;
  } catch (const std::exception& e) {
    std::cerr << "loadtrim: internal error: " << e.what() << "\n";
    return kInternalError;
  }
}
