// Each subcommand registers itself on the CLI11 app and returns the exit code through `result`.
#pragma once

#include <CLI/CLI.hpp>
#include <functional>
#include <string>

// Every floating option is checked with config::number_in (or config::finite_number), never CLI::Range alone,
// which lets NaN through.
#include "config/cli_number.hpp"

namespace loadtrim::app {

// Where the project's config/ and samples/ are: LOADTRIM_HOME, else the installed share/loadtrim beside the
// executable, else the source tree it was built from (main.cpp says the order and why).
std::string data_dir();

using Runner = std::function<int()>;
void register_demo(CLI::App& app, Runner& run);
void register_link_check(CLI::App& app, Runner& run);
void register_session_commands(CLI::App& app, Runner& run);
void register_bench(CLI::App& app, Runner& run);
void register_check_commands(CLI::App& app, Runner& run);
void register_target_command(CLI::App& app, Runner& run);
void register_keys_command(CLI::App& app, Runner& run);
void register_approve_command(CLI::App& app, Runner& run);
void register_store_commands(CLI::App& app, Runner& run);

}  // namespace loadtrim::app
