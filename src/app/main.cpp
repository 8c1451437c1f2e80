// loadtrim: reproduce track road-load targets on a chassis dynamometer. Thin CLI over the libraries.
#include <cstdlib>
#include <exception>
#include <iostream>

#include "app/exit_codes.hpp"
#include "app/subcommands.hpp"
#include "config/input_error.hpp"

namespace loadtrim::app {
std::string data_dir() {
  if (const char* home = std::getenv("LOADTRIM_HOME")) return home;
  return LOADTRIM_SOURCE_DIR;
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
