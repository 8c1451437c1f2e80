// A checked view of one TOML file: typed getters with ranges that record every problem (key, line, allowed
// range) instead of stopping at the first, and a sweep that warns about keys nobody read (likely typos).
#pragma once

#include <toml++/toml.h>

#include <optional>
#include <set>
#include <string>
#include <string_view>
#include <vector>

#include "core/problem.hpp"

namespace loadtrim::config {

class TomlReader {
 public:
  // Reads and parses the file; a missing, empty, binary or malformed file throws InputError at once.
  static TomlReader from_file(const std::string& path);
  // Parses text already in memory (fuzzing, tests); `name` stands in for the file name in messages.
  static TomlReader from_text(std::string_view text, const std::string& name);

  bool has(std::string_view key) const;
  double number(std::string_view key, double lo, double hi, std::string_view unit);
  double number_or(std::string_view key, double fallback, double lo, double hi, std::string_view unit);
  std::optional<double> maybe_number(std::string_view key, double lo, double hi, std::string_view unit);
  int integer_or(std::string_view key, int fallback, int lo, int hi);
  std::string string(std::string_view key);
  std::string string_or(std::string_view key, std::string fallback);
  bool boolean_or(std::string_view key, bool fallback);
  std::vector<double> numbers(std::string_view key, double lo, double hi, std::string_view unit);
  // An optional list of non-empty strings (empty when the key is absent).
  std::vector<std::string> strings_or_none(std::string_view key);
  // A list whose every entry must be one of `allowed`.
  std::vector<std::string> choices(std::string_view key, const std::vector<std::string>& allowed);
  // An enumeration: the value must be one of `allowed`.
  std::string choice(std::string_view key, const std::vector<std::string>& allowed,
                     std::optional<std::string> fallback = {});

  void error(std::string_view key, std::string message);
  void warning(std::string_view key, std::string message);
  void add(const core::Problems& ps);  // problems found by a core validator (keys as in this file)
  // Warn about keys never read; then throw InputError if any error was recorded, else return the warnings.
  core::Problems finish();
  const std::string& file() const { return file_; }

 private:
  TomlReader(std::string file, toml::table root);
  toml::node_view<const toml::node> lookup(std::string_view key);
  std::string where(std::string_view key, const toml::node* n) const;
  void sweep(const toml::table& t, const std::string& prefix);
  std::string file_;
  toml::table root_;
  std::set<std::string, std::less<>> used_;
  core::Problems problems_;
};

}  // namespace loadtrim::config
