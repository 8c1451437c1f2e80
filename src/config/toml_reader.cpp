#include "config/toml_reader.hpp"

#include <algorithm>
#include <cmath>
#include <fstream>
#include <sstream>

#include "config/input_error.hpp"

namespace loadtrim::config {

using core::num;
using core::Problem;

TomlReader::TomlReader(std::string file, toml::table root) : file_(std::move(file)), root_(std::move(root)) {}

TomlReader TomlReader::from_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError(path, {{Problem::Severity::error, "", "cannot open the file"}});
  std::ostringstream ss;
  ss << in.rdbuf();
  return from_text(ss.str(), path);
}

TomlReader TomlReader::from_text(std::string_view text, const std::string& name) {
  if (text.find_first_not_of(" \t\r\n") == std::string_view::npos)
    throw InputError(name, {{Problem::Severity::error, "", "the file is empty"}});
  if (text.find('\0') != std::string_view::npos)
    throw InputError(name, {{Problem::Severity::error, "", "the file holds binary data, not TOML text"}});
  try {
    return TomlReader(name, toml::parse(text, name));
  } catch (const toml::parse_error& e) {
    const auto& b = e.source().begin;
    throw InputError(name, {{Problem::Severity::error,
                             "line " + std::to_string(b.line) + ", column " + std::to_string(b.column),
                             "not valid TOML: " + std::string(e.description())}});
  }
}

toml::node_view<const toml::node> TomlReader::lookup(std::string_view key) {
  used_.insert(std::string(key));
  return std::as_const(root_).at_path(key);
}

bool TomlReader::has(std::string_view key) const {
  return static_cast<bool>(root_.at_path(key));
}

std::string TomlReader::where(std::string_view key, const toml::node* n) const {
  std::string k(key);
  if (n && n->source().begin.line > 0) k += " (line " + std::to_string(n->source().begin.line) + ")";
  return k;
}

void TomlReader::error(std::string_view key, std::string message) {
  problems_.push_back({Problem::Severity::error, std::string(key), std::move(message)});
}
void TomlReader::warning(std::string_view key, std::string message) {
  problems_.push_back({Problem::Severity::warning, std::string(key), std::move(message)});
}
void TomlReader::add(const core::Problems& ps) {
  // A key already refused by its getter is not reported again by the validator that ran on its placeholder.
  auto refused = [&](const std::string& key) {
    for (const auto& e : problems_) {
      if (e.severity != Problem::Severity::error) continue;
      const std::string bare = e.key.substr(0, e.key.find(" (line"));
      if (bare.rfind(key, 0) == 0 || key.rfind(bare, 0) == 0) return true;
    }
    return false;
  };
  for (const auto& p : ps) {
    if (refused(p.key)) continue;
    const toml::node* n = root_.at_path(p.key).node();
    problems_.push_back({p.severity, where(p.key, n), p.message});
  }
}

namespace {
std::string range_text(double lo, double hi, std::string_view unit) {
  return "allowed " + num(lo) + " to " + num(hi) + (unit.empty() ? "" : " " + std::string(unit));
}
}  // namespace

std::optional<double> TomlReader::maybe_number(std::string_view key, double lo, double hi,
                                               std::string_view unit) {
  const auto v = lookup(key);
  if (!v) return std::nullopt;
  const toml::node* n = v.node();
  double x;
  if (const auto* f = n->as_floating_point())
    x = f->get();
  else if (const auto* i = n->as_integer())
    x = static_cast<double>(i->get());
  else {
    error(where(key, n), "must be a number, " + range_text(lo, hi, unit));
    return std::nullopt;
  }
  if (!std::isfinite(x)) {
    error(where(key, n), "is " + num(x) + ", must be a finite number, " + range_text(lo, hi, unit));
    return std::nullopt;
  }
  if (x < lo || x > hi) {
    error(where(key, n), "is " + num(x) + ", " + range_text(lo, hi, unit));
    return std::nullopt;
  }
  return x;
}

double TomlReader::number(std::string_view key, double lo, double hi, std::string_view unit) {
  if (!has(key)) {
    used_.insert(std::string(key));
    error(key, "is missing, " + range_text(lo, hi, unit));
    return std::nan("");
  }
  // NaN after a refusal: later checks on the value stay quiet instead of reporting a made-up placeholder.
  return maybe_number(key, lo, hi, unit).value_or(std::nan(""));
}

double TomlReader::number_or(std::string_view key, double fallback, double lo, double hi,
                             std::string_view unit) {
  if (!has(key)) {
    used_.insert(std::string(key));
    return fallback;
  }
  return maybe_number(key, lo, hi, unit).value_or(fallback);
}

int TomlReader::integer_or(std::string_view key, int fallback, int lo, int hi) {
  const auto v = lookup(key);
  if (!v) return fallback;
  const auto* i = v.node()->as_integer();
  if (!i) {
    error(where(key, v.node()),
          "must be a whole number, allowed " + std::to_string(lo) + " to " + std::to_string(hi));
    return fallback;
  }
  if (i->get() < lo || i->get() > hi) {
    error(where(key, v.node()),
          "is " + std::to_string(i->get()) + ", allowed " + std::to_string(lo) + " to " + std::to_string(hi));
    return fallback;
  }
  return static_cast<int>(i->get());
}

std::string TomlReader::string(std::string_view key) {
  const auto v = lookup(key);
  if (!v) {
    error(key, "is missing (a text value)");
    return {};
  }
  const auto* s = v.node()->as_string();
  if (!s) {
    error(where(key, v.node()), "must be a text value in quotes");
    return {};
  }
  return s->get();
}

std::string TomlReader::string_or(std::string_view key, std::string fallback) {
  if (!has(key)) {
    used_.insert(std::string(key));
    return fallback;
  }
  return string(key);
}

bool TomlReader::boolean_or(std::string_view key, bool fallback) {
  const auto v = lookup(key);
  if (!v) return fallback;
  const auto* b = v.node()->as_boolean();
  if (!b) {
    error(where(key, v.node()), "must be true or false");
    return fallback;
  }
  return b->get();
}

std::vector<double> TomlReader::numbers(std::string_view key, double lo, double hi, std::string_view unit) {
  const auto v = lookup(key);
  std::vector<double> out;
  if (!v) {
    error(key, "is missing (a list of numbers, each " + range_text(lo, hi, unit) + ")");
    return out;
  }
  const auto* arr = v.node()->as_array();
  if (!arr) {
    error(where(key, v.node()), "must be a list of numbers, each " + range_text(lo, hi, unit));
    return out;
  }
  for (std::size_t i = 0; i < arr->size(); ++i) {
    const toml::node& e = *arr->get(i);
    double x;
    if (const auto* f = e.as_floating_point())
      x = f->get();
    else if (const auto* n = e.as_integer())
      x = static_cast<double>(n->get());
    else {
      error(where(std::string(key) + "[" + std::to_string(i) + "]", &e),
            "must be a number, " + range_text(lo, hi, unit));
      continue;
    }
    if (!std::isfinite(x) || x < lo || x > hi) {
      error(where(std::string(key) + "[" + std::to_string(i) + "]", &e),
            "is " + num(x) + ", " + range_text(lo, hi, unit));
      continue;
    }
    out.push_back(x);
  }
  return out;
}

std::vector<std::string> TomlReader::strings_or_none(std::string_view key) {
  std::vector<std::string> out;
  if (!has(key)) {
    used_.insert(std::string(key));
    return out;
  }
  const auto v = lookup(key);
  const auto* arr = v.node()->as_array();
  if (!arr) {
    error(where(key, v.node()), "must be a list of strings");
    return out;
  }
  for (std::size_t i = 0; i < arr->size(); ++i) {
    const toml::node& e = *arr->get(i);
    const auto* s = e.as_string();
    if (!s || s->get().empty()) {
      error(where(std::string(key) + "[" + std::to_string(i) + "]", &e), "must be a non-empty string");
      continue;
    }
    out.push_back(s->get());
  }
  return out;
}

std::vector<std::string> TomlReader::choices(std::string_view key, const std::vector<std::string>& allowed) {
  std::string list;
  for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + ("\"" + a + "\"");
  const auto v = lookup(key);
  std::vector<std::string> out;
  if (!v) {
    error(key, "is missing (a list, each one of " + list + ")");
    return out;
  }
  const auto* arr = v.node()->as_array();
  if (!arr) {
    error(where(key, v.node()), "must be a list, each one of " + list);
    return out;
  }
  for (std::size_t i = 0; i < arr->size(); ++i) {
    const toml::node& e = *arr->get(i);
    const auto* s = e.as_string();
    if (!s || std::find(allowed.begin(), allowed.end(), s->get()) == allowed.end()) {
      error(where(std::string(key) + "[" + std::to_string(i) + "]", &e), "must be one of " + list);
      continue;
    }
    out.push_back(s->get());
  }
  return out;
}

std::string TomlReader::choice(std::string_view key, const std::vector<std::string>& allowed,
                               std::optional<std::string> fallback) {
  std::string list;
  for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + ("\"" + a + "\"");
  if (!has(key)) {
    used_.insert(std::string(key));
    if (fallback) return *fallback;
    error(key, "is missing, allowed " + list);
    return allowed.front();
  }
  const std::string s = string(key);
  for (const auto& a : allowed)
    if (s == a) return s;
  error(where(key, root_.at_path(key).node()), "is \"" + s + "\", allowed " + list);
  return fallback.value_or(allowed.front());
}

void TomlReader::sweep(const toml::table& t, const std::string& prefix) {
  for (const auto& [k, node] : t) {
    const std::string path = prefix.empty() ? std::string(k.str()) : prefix + "." + std::string(k.str());
    if (used_.count(path)) continue;
    // A table is fine when some key below it was read.
    auto below = used_.lower_bound(path + ".");
    const bool has_used_child = below != used_.end() && below->rfind(path + ".", 0) == 0;
    if (const auto* sub = node.as_table(); sub && has_used_child) {
      sweep(*sub, path);
      continue;
    }
    if (node.is_array() && has_used_child) continue;
    warning(where(path, &node), "unknown key, ignored (a typo?)");
  }
}

core::Problems TomlReader::finish() {
  sweep(root_, "");
  if (core::has_errors(problems_)) throw InputError(file_, problems_);
  return problems_;
}

}  // namespace loadtrim::config
