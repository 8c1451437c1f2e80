// loadtrim: reproduce track road-load targets on a chassis dynamometer. Thin CLI over the libraries.
#include <algorithm>
#include <cstdlib>
#include <exception>
#include <filesystem>
#include <iostream>
#include <system_error>
#include <vector>

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

namespace {
std::size_t edit_distance(const std::string& a, const std::string& b) {
  std::vector<std::size_t> row(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) row[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    std::size_t diag = row[0];
    row[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j) {
      const std::size_t up = row[j];
      row[j] = std::min({row[j] + 1, row[j - 1] + 1, diag + (a[i - 1] == b[j - 1] ? 0 : 1)});
      diag = up;
    }
  }
  return row[b.size()];
}

// The nearest of the names to what was typed, when it is near enough to be a slip ("" otherwise).
std::string nearest(const std::string& typed, const std::vector<std::string>& names) {
  std::string best;
  std::size_t best_d = 0;
  for (const auto& n : names) {
    const std::size_t d = edit_distance(typed, n);
    if (best.empty() || d < best_d) {
      best = n;
      best_d = d;
    }
  }
  return best_d <= std::max<std::size_t>(2, typed.size() / 3) ? best : std::string();
}

// CLI11 reports a missing required option before an unknown one ("--cell is required" for `run --cel x`) and
// an unknown subcommand as "a subcommand is required": the word the operator mistyped is the one to name.
// True when it was named (the message is printed).
bool explain_unknown(CLI::App& app) {
  const auto all = [](CLI::App*) { return true; };
  std::vector<CLI::App*> parsed;
  for (CLI::App* sub : app.get_subcommands(all))
    if (sub->parsed()) parsed.push_back(sub);
  if (parsed.empty()) {
    for (const std::string& word : app.remaining()) {
      if (word.empty() || word[0] == '-') continue;
      std::vector<std::string> names;
      for (CLI::App* sub : app.get_subcommands(all)) names.push_back(sub->get_name());
      const std::string near = nearest(word, names);
      std::string list;
      for (const auto& n : names) list += (list.empty() ? "" : ", ") + n;
      std::cerr << "loadtrim: unknown command \"" << word << "\""
                << (near.empty() ? "" : "; did you mean \"" + near + "\"?") << "\n  commands: " << list
                << "\n  (loadtrim --help describes them)\n";
      return true;
    }
    return false;
  }
  CLI::App* sub = parsed.back();
  for (const std::string& word : sub->remaining()) {
    if (word.size() < 2 || word[0] != '-') continue;
    const std::string name = word.substr(0, word.find('='));
    std::vector<std::string> names;
    for (const CLI::Option* o : sub->get_options()) {
      for (const auto& l : o->get_lnames()) names.push_back("--" + l);
      for (const auto& sn : o->get_snames()) names.push_back("-" + sn);
    }
    const std::string near = nearest(name, names);
    std::cerr << "loadtrim " << sub->get_name() << ": unknown option " << name
              << (near.empty() ? "" : "; did you mean " + near + "?") << "\n  (loadtrim " << sub->get_name()
              << " --help lists its options)\nrefused: nothing was started.\n";
    return true;
  }
  return false;
}
}  // namespace
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
  register_store_commands(app, run);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    if (e.get_exit_code() != 0 && explain_unknown(app)) return kBadInput;
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
